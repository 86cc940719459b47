"""Saturation vapour pressure and conversions between humidity variables.

Every function exists twice: a compiled scalar version (suffix ``_scalar``) used
inside the column kernels, and an array version of the same name without the suffix
that broadcasts over arrays of any shape (float32 or float64). Units are SI
throughout: temperature in K, pressure in Pa, mixing ratio and specific humidity in
kg/kg, relative humidity as a fraction.

Relative humidity is defined over liquid water as the ratio of the vapour pressure
to the saturation vapour pressure, e/e_s (common practice in model output; WMO-No. 8
defines it through mixing ratios, which differs by under 1 % at the surface).
"""

from __future__ import annotations

import math

import numba

from gridstab._elementwise import elementwise
from gridstab.constants import EPSILON, TRIPLE_POINT

_CRITICAL_TEMPERATURE = 647.096  # K, IAPWS
_CRITICAL_PRESSURE = 22.064e6  # Pa, IAPWS
# Wagner and Pruss (1993, J. Phys. Chem. Ref. Data 22, 783-787), the saturation
# pressure equation adopted by IAPWS (1992 revised supplementary release).
_WP_A1, _WP_A2, _WP_A3 = -7.85951783, 1.84408259, -11.7866497
_WP_A4, _WP_A5, _WP_A6 = 22.6807411, -15.9618719, 1.80122502


@numba.njit(cache=True, nogil=True)
def _ln_es_wagner_pruss(temperature):
    tau = 1.0 - temperature / _CRITICAL_TEMPERATURE
    root = math.sqrt(tau)
    tau3 = tau * tau * tau
    series = (
        _WP_A1 * tau
        + _WP_A2 * tau * root
        + _WP_A3 * tau3
        + _WP_A4 * tau3 * root
        + _WP_A5 * tau3 * tau
        + _WP_A6 * tau3 * tau3 * tau * root
    )
    dseries = (
        _WP_A1
        + 1.5 * _WP_A2 * root
        + 3.0 * _WP_A3 * tau * tau
        + 3.5 * _WP_A4 * tau * tau * root
        + 4.0 * _WP_A5 * tau3
        + 7.5 * _WP_A6 * tau3 * tau3 * root
    )
    ratio = _CRITICAL_TEMPERATURE / temperature
    value = math.log(_CRITICAL_PRESSURE) + ratio * series
    derivative = -ratio * series / temperature - dseries / temperature
    return value, derivative


@numba.njit(cache=True, nogil=True)
def _ln_es_murphy_koop_liquid(temperature):
    # Murphy and Koop (2005, Q. J. R. Meteorol. Soc. 131, 1539-1565), eq. 10,
    # vapour pressure over (supercooled) liquid water, valid 123-332 K.
    t = temperature
    log_t = math.log(t)
    arg = 0.0415 * (t - 218.8)
    th = math.tanh(arg)
    inner = 53.878 - 1331.22 / t - 9.44523 * log_t + 0.014025 * t
    value = 54.842763 - 6763.22 / t - 4.210 * log_t + 0.000367 * t + th * inner
    dinner = 1331.22 / (t * t) - 9.44523 / t + 0.014025
    derivative = (
        6763.22 / (t * t) - 4.210 / t + 0.000367 + 0.0415 * (1.0 - th * th) * inner + th * dinner
    )
    return value, derivative


# Murphy-Koop is scaled by a constant factor so that it meets Wagner-Pruss at the
# triple point: the curve is continuous and both branches keep their own slope.
_MK_OFFSET = _ln_es_wagner_pruss(TRIPLE_POINT)[0] - _ln_es_murphy_koop_liquid(TRIPLE_POINT)[0]


@numba.njit(cache=True, nogil=True)
def ln_saturation_vapour_pressure_scalar(temperature):
    """ln(e_s / Pa) over liquid water and its derivative d ln(e_s)/dT in K-1.

    Wagner and Pruss (1993) at and above the triple point (273.16 K), Murphy and
    Koop (2005) eq. 10 for supercooled water below it, joined continuously.
    """
    if temperature >= TRIPLE_POINT:
        return _ln_es_wagner_pruss(temperature)
    value, derivative = _ln_es_murphy_koop_liquid(temperature)
    return value + _MK_OFFSET, derivative


@numba.njit(cache=True, nogil=True)
def saturation_vapour_pressure_scalar(temperature):
    return math.exp(ln_saturation_vapour_pressure_scalar(temperature)[0])


@numba.njit(cache=True, nogil=True)
def saturation_vapour_pressure_ice_scalar(temperature):
    # Murphy and Koop (2005) eq. 7, over hexagonal ice, valid above 110 K.
    t = temperature
    return math.exp(9.550426 - 5723.265 / t + 3.53068 * math.log(t) - 0.00728332 * t)


@numba.njit(cache=True, nogil=True)
def mixing_ratio_from_vapour_pressure_scalar(vapour_pressure, pressure):
    return EPSILON * vapour_pressure / (pressure - vapour_pressure)


@numba.njit(cache=True, nogil=True)
def vapour_pressure_from_mixing_ratio_scalar(mixing_ratio, pressure):
    return pressure * mixing_ratio / (EPSILON + mixing_ratio)


@numba.njit(cache=True, nogil=True)
def saturation_mixing_ratio_scalar(temperature, pressure):
    """Saturation mixing ratio over liquid water, kg/kg; NaN where e_s >= p."""
    es = saturation_vapour_pressure_scalar(temperature)
    if es >= pressure:
        return math.nan
    return EPSILON * es / (pressure - es)


@numba.njit(cache=True, nogil=True)
def mixing_ratio_from_specific_humidity_scalar(specific_humidity):
    return specific_humidity / (1.0 - specific_humidity)


@numba.njit(cache=True, nogil=True)
def specific_humidity_from_mixing_ratio_scalar(mixing_ratio):
    return mixing_ratio / (1.0 + mixing_ratio)


@numba.njit(cache=True, nogil=True)
def mixing_ratio_from_relative_humidity_scalar(relative_humidity, temperature, pressure):
    e = relative_humidity * saturation_vapour_pressure_scalar(temperature)
    if e >= pressure:
        return math.nan
    return EPSILON * e / (pressure - e)


@numba.njit(cache=True, nogil=True)
def relative_humidity_from_mixing_ratio_scalar(mixing_ratio, temperature, pressure):
    e = vapour_pressure_from_mixing_ratio_scalar(mixing_ratio, pressure)
    return e / saturation_vapour_pressure_scalar(temperature)


@numba.njit(cache=True, nogil=True)
def dew_point_from_vapour_pressure_scalar(vapour_pressure):
    """Temperature (K) at which e_s over liquid water equals ``vapour_pressure`` (Pa).

    Newton's method on ln e_s from a Magnus-type first guess; converges to 1e-9 K.
    """
    if not vapour_pressure > 0.0:
        return math.nan
    target = math.log(vapour_pressure)
    # first guess: Magnus form (Alduchov and Eskridge 1996 coefficients)
    x = math.log(vapour_pressure / 610.94)
    temperature = 273.15 + 243.04 * x / (17.625 - x)
    if temperature < 100.0:
        temperature = 100.0
    for _ in range(50):
        value, slope = ln_saturation_vapour_pressure_scalar(temperature)
        step = (value - target) / slope
        temperature -= step
        if abs(step) < 1e-9:
            break
    return temperature


@numba.njit(cache=True, nogil=True)
def dew_point_from_mixing_ratio_scalar(mixing_ratio, pressure):
    return dew_point_from_vapour_pressure_scalar(
        vapour_pressure_from_mixing_ratio_scalar(mixing_ratio, pressure)
    )


@numba.njit(cache=True, nogil=True)
def mixing_ratio_from_dew_point_scalar(dew_point, pressure):
    return mixing_ratio_from_vapour_pressure_scalar(
        saturation_vapour_pressure_scalar(dew_point), pressure
    )


saturation_vapour_pressure = elementwise(saturation_vapour_pressure_scalar)
saturation_vapour_pressure.__doc__ = """Saturation vapour pressure over liquid water.

Parameters
----------
temperature : array_like
    Air temperature, K.

Returns
-------
ndarray
    Saturation vapour pressure, Pa. Wagner and Pruss (1993, J. Phys. Chem. Ref. Data
    22, 783) at and above 273.16 K (the IAPWS saturation curve), Murphy and Koop
    (2005, Q. J. R. Meteorol. Soc. 131, 1539) eq. 10 over supercooled water below.
"""
saturation_vapour_pressure_ice = elementwise(saturation_vapour_pressure_ice_scalar)
saturation_vapour_pressure_ice.__doc__ = """Saturation vapour pressure over ice, Pa,
from temperature in K (Murphy and Koop 2005, eq. 7)."""
saturation_mixing_ratio = elementwise(saturation_mixing_ratio_scalar)
saturation_mixing_ratio.__doc__ = """Saturation mixing ratio over liquid water, kg/kg,
from temperature (K) and pressure (Pa); NaN where e_s >= p."""
mixing_ratio_from_specific_humidity = elementwise(mixing_ratio_from_specific_humidity_scalar)
mixing_ratio_from_specific_humidity.__doc__ = """r = q / (1 - q); both in kg/kg."""
specific_humidity_from_mixing_ratio = elementwise(specific_humidity_from_mixing_ratio_scalar)
specific_humidity_from_mixing_ratio.__doc__ = """q = r / (1 + r); both in kg/kg."""
vapour_pressure_from_mixing_ratio = elementwise(vapour_pressure_from_mixing_ratio_scalar)
vapour_pressure_from_mixing_ratio.__doc__ = """e = p r / (epsilon + r): mixing ratio
(kg/kg) and pressure (Pa) in, vapour pressure (Pa) out."""
mixing_ratio_from_vapour_pressure = elementwise(mixing_ratio_from_vapour_pressure_scalar)
mixing_ratio_from_vapour_pressure.__doc__ = """r = epsilon e / (p - e): vapour pressure
and pressure (Pa) in, mixing ratio (kg/kg) out."""
mixing_ratio_from_relative_humidity = elementwise(mixing_ratio_from_relative_humidity_scalar)
mixing_ratio_from_relative_humidity.__doc__ = """Mixing ratio (kg/kg) from relative
humidity (fraction, e/e_s over liquid), temperature (K) and pressure (Pa)."""
relative_humidity_from_mixing_ratio = elementwise(relative_humidity_from_mixing_ratio_scalar)
relative_humidity_from_mixing_ratio.__doc__ = """Relative humidity (fraction, e/e_s over
liquid) from mixing ratio (kg/kg), temperature (K) and pressure (Pa)."""
dew_point_from_mixing_ratio = elementwise(dew_point_from_mixing_ratio_scalar)
dew_point_from_mixing_ratio.__doc__ = """Dew point (K, over liquid water) from mixing
ratio (kg/kg) and pressure (Pa), by Newton inversion of the saturation curve."""
mixing_ratio_from_dew_point = elementwise(mixing_ratio_from_dew_point_scalar)
mixing_ratio_from_dew_point.__doc__ = """Mixing ratio (kg/kg) from dew point (K) and
pressure (Pa)."""
