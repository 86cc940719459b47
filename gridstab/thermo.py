"""Dry thermodynamics of moist air: theta, virtual temperature, lapse rates, LCL, heights.

Scalar compiled versions (suffix ``_scalar``) serve the column kernels; the names
without the suffix are array functions of any shape (float32 or float64 in, the same
floating type out). SI units: K, Pa, kg/kg, m, K/m.

Conventions (see the project's physics notes):

* theta = T (p0/p)^(Rd/cpd) with p0 = 1000 hPa.
* An unsaturated parcel rises at constant mixing ratio r with the Poisson exponent of
  moist air, kappa_m = (Rd + r Rv)/(cpd + r cpv), per unit mass of dry air.
* The saturated lapse rate is the pseudo-adiabatic one of the AMS Glossary of
  Meteorology (2nd ed., 2000, "pseudoadiabatic lapse rate"; quoted from memory):
  Gamma_m = g (1 + r)(1 + Lv r/(Rd T)) / (cpd + r cpv + Lv dr/dT),
  with r the saturation mixing ratio, Lv varying linearly with T (Kirchhoff) and
  dr/dT = r (1 + r/eps) d(ln e_s)/dT from the derivative of gridstab's own saturation
  curve (the Glossary's Clausius-Clapeyron form Lv^2 r (eps + r)/(Rd T^2) would put the
  slope of another curve, 0.06-0.6 % off, into every adiabat).
"""

from __future__ import annotations

import math

import numba
import numpy as np

from gridstab._elementwise import elementwise, result_dtype
from gridstab.constants import (
    DRY_ADIABATIC_LAPSE_RATE,
    DRY_AIR_GAS_CONSTANT,
    DRY_AIR_HEAT_CAPACITY,
    EPSILON,
    FREEZING_POINT,
    KAPPA,
    LATENT_HEAT_VAPORISATION_0C,
    LIQUID_HEAT_CAPACITY,
    REFERENCE_PRESSURE,
    STANDARD_GRAVITY,
    VAPOUR_HEAT_CAPACITY,
    WATER_VAPOUR_GAS_CONSTANT,
)
from gridstab.moisture import (
    ln_saturation_vapour_pressure_scalar,
    vapour_pressure_from_mixing_ratio_scalar,
)


@numba.njit(cache=True, nogil=True)
def latent_heat_vaporisation_scalar(temperature):
    return LATENT_HEAT_VAPORISATION_0C + (VAPOUR_HEAT_CAPACITY - LIQUID_HEAT_CAPACITY) * (
        temperature - FREEZING_POINT
    )


@numba.njit(cache=True, nogil=True)
def potential_temperature_scalar(temperature, pressure):
    return temperature * (REFERENCE_PRESSURE / pressure) ** KAPPA


@numba.njit(cache=True, nogil=True)
def temperature_from_potential_temperature_scalar(theta, pressure):
    return theta * (pressure / REFERENCE_PRESSURE) ** KAPPA


@numba.njit(cache=True, nogil=True)
def virtual_temperature_scalar(temperature, mixing_ratio):
    return temperature * (1.0 + mixing_ratio / EPSILON) / (1.0 + mixing_ratio)


@numba.njit(cache=True, nogil=True)
def virtual_potential_temperature_scalar(temperature, pressure, mixing_ratio):
    return potential_temperature_scalar(
        virtual_temperature_scalar(temperature, mixing_ratio), pressure
    )


@numba.njit(cache=True, nogil=True)
def moist_kappa_scalar(mixing_ratio):
    return (DRY_AIR_GAS_CONSTANT + mixing_ratio * WATER_VAPOUR_GAS_CONSTANT) / (
        DRY_AIR_HEAT_CAPACITY + mixing_ratio * VAPOUR_HEAT_CAPACITY
    )


@numba.njit(cache=True, nogil=True)
def _saturated_state(temperature, pressure):
    """Saturation mixing ratio r_s (kg/kg), Lv (J/kg) and the pseudo-adiabat's heat
    capacity term cpd + r_s cpv + Lv dr_s/dT (J kg-1 K-1) at (T in K, p in Pa).

    dr_s/dT at constant p is r_s (1 + r_s/eps) d(ln e_s)/dT, with d(ln e_s)/dT the
    derivative of the saturation curve that gridstab uses everywhere (not a
    Clausius-Clapeyron stand-in). NaN where e_s >= p.
    """
    ln_es, dln_es = ln_saturation_vapour_pressure_scalar(temperature)
    es = math.exp(ln_es)
    if es >= pressure:
        return math.nan, math.nan, math.nan
    r = EPSILON * es / (pressure - es)
    lv = latent_heat_vaporisation_scalar(temperature)
    capacity = (
        DRY_AIR_HEAT_CAPACITY + r * VAPOUR_HEAT_CAPACITY + lv * r * (1.0 + r / EPSILON) * dln_es
    )
    return r, lv, capacity


@numba.njit(cache=True, nogil=True)
def pseudoadiabat_slope_scalar(temperature, pressure):
    """dT/d(ln p) along the saturated pseudo-adiabat, K (per unit ln p); NaN if e_s >= p.

    First law per unit mass of dry air with the condensate removed as it forms:
    (cpd + r cpv) dT + Lv dr = Rd T (1 + r/eps) d(ln p), r = r_s(T, p).
    """
    r, lv, capacity = _saturated_state(temperature, pressure)
    return (1.0 + r / EPSILON) * (DRY_AIR_GAS_CONSTANT * temperature + lv * r) / capacity


@numba.njit(cache=True, nogil=True)
def saturated_lapse_rate_scalar(temperature, pressure):
    """Pseudo-adiabatic lapse rate -dT/dz, K/m (AMS Glossary form, exact d e_s/dT)."""
    r, lv, capacity = _saturated_state(temperature, pressure)
    numerator = STANDARD_GRAVITY * (1.0 + r) * (1.0 + lv * r / (DRY_AIR_GAS_CONSTANT * temperature))
    return numerator / capacity


@numba.njit(cache=True, nogil=True)
def lcl_scalar(temperature, pressure, mixing_ratio):
    """Lifting condensation level of a parcel: (pressure in Pa, temperature in K).

    The parcel rises dry-adiabatically at constant mixing ratio, T = T0 (p/p0)^kappa_m,
    until its vapour pressure p r/(eps + r) equals the saturation vapour pressure over
    liquid water. The defining equation is solved by Newton's method with an analytic
    derivative, from Bolton's (1980, eq. 21) first guess, to 1e-7 K. A parcel already
    saturated (or supersaturated) has its LCL at its origin.
    """
    if not (temperature > 0.0 and pressure > 0.0 and mixing_ratio > 0.0):
        return math.nan, math.nan
    vapour_pressure = vapour_pressure_from_mixing_ratio_scalar(mixing_ratio, pressure)
    if math.log(vapour_pressure) >= ln_saturation_vapour_pressure_scalar(temperature)[0]:
        return pressure, temperature
    return lcl_on_dry_adiabat(temperature, pressure, mixing_ratio)


@numba.njit(cache=True, nogil=True)
def lcl_on_dry_adiabat(temperature, pressure, mixing_ratio):
    """Where the dry adiabat through (T, p, r) meets saturation: (Pa, K).

    Like :func:`lcl_scalar` but without the check for saturated air, so the root may
    lie below the given state (at higher pressure) for supersaturated air.
    """
    vapour_pressure = vapour_pressure_from_mixing_ratio_scalar(mixing_ratio, pressure)
    ln_e = math.log(vapour_pressure)
    kappa = moist_kappa_scalar(mixing_ratio)
    inverse_kappa = 1.0 / kappa
    constant = ln_e - inverse_kappa * math.log(temperature)
    # Bolton (1980) eq. 21, vapour pressure in hPa
    guess = 2840.0 / (3.5 * math.log(temperature) - math.log(vapour_pressure * 0.01) - 4.805) + 55.0
    t = guess
    if not t > 50.0:
        t = 50.0
    for _ in range(30):
        value, slope = ln_saturation_vapour_pressure_scalar(t)
        f = value - inverse_kappa * math.log(t) - constant
        df = slope - inverse_kappa / t
        step = f / df
        t -= step
        if abs(step) < 1e-7:
            break
    p_lcl = pressure * (t / temperature) ** inverse_kappa
    return p_lcl, t


potential_temperature = elementwise(potential_temperature_scalar)
potential_temperature.__doc__ = """Potential temperature theta = T (p0/p)^(Rd/cpd).

Parameters
----------
temperature : array_like
    Air temperature, K.
pressure : array_like
    Air pressure, Pa.

Returns
-------
ndarray
    Potential temperature, K, referred to p0 = 1000 hPa (Poisson's equation).
"""
temperature_from_potential_temperature = elementwise(temperature_from_potential_temperature_scalar)
temperature_from_potential_temperature.__doc__ = """Air temperature (K) from potential
temperature (K) and pressure (Pa), inverting Poisson's equation."""
virtual_temperature = elementwise(virtual_temperature_scalar)
virtual_temperature.__doc__ = """Virtual temperature Tv = T (1 + r/eps)/(1 + r), K, from
temperature (K) and mixing ratio (kg/kg)."""
virtual_potential_temperature = elementwise(virtual_potential_temperature_scalar)
virtual_potential_temperature.__doc__ = """Virtual potential temperature, K: theta of the
virtual temperature, from temperature (K), pressure (Pa) and mixing ratio (kg/kg)."""
saturated_lapse_rate = elementwise(saturated_lapse_rate_scalar)
saturated_lapse_rate.__doc__ = """Saturated (pseudo-adiabatic) lapse rate -dT/dz, K/m,
from temperature (K) and pressure (Pa); AMS Glossary of Meteorology form."""
latent_heat_vaporisation = elementwise(latent_heat_vaporisation_scalar)
latent_heat_vaporisation.__doc__ = """Latent heat of vaporisation, J/kg, linear in
temperature (K) by Kirchhoff's law."""


def dry_adiabatic_lapse_rate() -> float:
    """Dry adiabatic lapse rate g/cpd, K/m (about 9.75 K/km)."""
    return DRY_ADIABATIC_LAPSE_RATE


@numba.njit(cache=True, nogil=True)
def _lcl_arrays(temperature, pressure, mixing_ratio, p_out, t_out):
    for i in range(temperature.size):
        p_out[i], t_out[i] = lcl_scalar(temperature[i], pressure[i], mixing_ratio[i])


def lifting_condensation_level(temperature, pressure, mixing_ratio):
    """Lifting condensation level of parcels.

    Parameters
    ----------
    temperature : array_like
        Parcel temperature at its origin, K.
    pressure : array_like
        Pressure at the origin, Pa.
    mixing_ratio : array_like
        Parcel water-vapour mixing ratio, kg/kg.

    Returns
    -------
    (pressure, temperature) : tuple of ndarray
        LCL pressure (Pa) and temperature (K). Exact root (Newton) of the defining
        equation: dry-adiabatic ascent at constant mixing ratio with the moist-air
        Poisson exponent until saturation over liquid water.
    """
    arrays = np.broadcast_arrays(
        *[np.asarray(a, dtype=np.float64) for a in (temperature, pressure, mixing_ratio)]
    )
    dtype = result_dtype(*[np.asarray(a) for a in (temperature, pressure, mixing_ratio)])
    flat = [np.ascontiguousarray(a).ravel() for a in arrays]
    p_out = np.empty(flat[0].size)
    t_out = np.empty(flat[0].size)
    _lcl_arrays(flat[0], flat[1], flat[2], p_out, t_out)
    shape = arrays[0].shape
    return p_out.reshape(shape).astype(dtype)[()], t_out.reshape(shape).astype(dtype)[()]


@numba.njit(cache=True, nogil=True)
def _heights_column(pressure, temperature, mixing_ratio, z0, out):
    n = pressure.size
    out[0] = z0
    for k in range(1, n):
        tv0 = virtual_temperature_scalar(temperature[k - 1], mixing_ratio[k - 1])
        tv1 = virtual_temperature_scalar(temperature[k], mixing_ratio[k])
        out[k] = out[k - 1] + DRY_AIR_GAS_CONSTANT / STANDARD_GRAVITY * 0.5 * (tv0 + tv1) * math.log(
            pressure[k - 1] / pressure[k]
        )


def hypsometric_heights(pressure, temperature, mixing_ratio, *, bottom_height=0.0):
    """Heights of pressure levels by integrating the hypsometric equation.

    Parameters
    ----------
    pressure, temperature, mixing_ratio : array_like, shape (..., levels)
        Pressure (Pa), temperature (K) and mixing ratio (kg/kg), the first level at the
        bottom of the column (pressure decreasing along the last axis).
    bottom_height : float or array_like, shape (...)
        Height of the first level, m.

    Returns
    -------
    ndarray, shape (..., levels)
        Geometric-like (geopotential) heights, m: dz = (Rd/g) Tv d(ln p), with the layer
        mean virtual temperature taken as the mean of its end values (exact when Tv is
        linear in ln p).
    """
    p, t, r = np.broadcast_arrays(
        *[np.asarray(a, dtype=np.float64) for a in (pressure, temperature, mixing_ratio)]
    )
    z0 = np.broadcast_to(np.asarray(bottom_height, dtype=np.float64), p.shape[:-1])
    out = np.empty(p.shape)
    for index in np.ndindex(p.shape[:-1]):
        _heights_column(p[index], t[index], r[index], z0[index], out[index])
    return out
