"""The saturated pseudo-adiabat: its equation, lookup tables, theta_e, theta_es, theta_w.

Definition
----------
A saturated parcel follows the pseudo-adiabat

    dT/d(ln p) = (1 + r/eps)(Rd T + Lv r) / (cpd + r cpv + Lv dr/dT),

r the saturation mixing ratio over liquid water, Lv linear in T (Kirchhoff) and
dr/dT = r (1 + r/eps) d(ln e_s)/dT with the derivative of gridstab's own saturation
curve (``gridstab.moisture``). This is the first law per unit mass of dry air with the
condensate leaving the parcel as it forms (the pseudo-adiabatic lapse rate of the AMS
Glossary of Meteorology, 2nd ed., 2000, written in pressure).

* theta_e (pseudo-equivalent potential temperature): lift the parcel dry-adiabatically
  at constant mixing ratio to its LCL, then along the pseudo-adiabat until no vapour
  is left, then bring it dry-adiabatically to 1000 hPa. Every pseudo-adiabat is
  labelled by its theta_e: the limit of T (p0/p)^(Rd/cpd) as p -> 0.
* theta_es: theta_e of saturated air at (T, p).
* theta_w: the 1000 hPa temperature of the pseudo-adiabat through the parcel.

How it is computed
------------------
The equation has no closed-form solution, so gridstab integrates it once, the first
time it is needed (about a second): a family of pseudo-adiabats, equally spaced in
ln(theta_e), is integrated from the top (where the air is dry to within 1e-9) down to
1500 hPa by the classical fourth-order Runge-Kutta method with steps of 0.005 in ln p.
That gives two tables:

* "parcel": temperature and virtual temperature (no condensate) as functions of
  (ln theta_e, ln p), interleaved, used by the parcel ascent;
* "label": ln theta_es as a function of (T, ln p), the inverse at each pressure,
  used for theta_es and (at the LCL) theta_e.

Look-ups use bicubic (4 x 4 point Lagrange) interpolation. The error of the tables
against an independent ODE integration is measured by the tests. Where the
saturation vapour pressure exceeds half the air pressure (warm air at very low
pressure) saturated quantities are undefined and NaN is returned.

Where saturated quantities are reported
---------------------------------------
Only where e_s <= SATURATION_LIMIT * p (0.12: saturated air at 48 degC and 1000 hPa,
20 degC and 200 hPa). Beyond it theta_es is ill-conditioned: a change of 1e-4 in e_s,
the size of the differences between the best formulations of the saturation curve,
moves it by more than 0.1 K (by 8 K at 40 degC and 200 hPa), and no real atmosphere
is there. Look-ups outside a table's range return NaN, never an extrapolated value.
"""

from __future__ import annotations

import math
from typing import NamedTuple

import numba
import numpy as np

from gridstab._elementwise import result_dtype
from gridstab.constants import DRY_AIR_HEAT_CAPACITY, EPSILON, KAPPA, REFERENCE_PRESSURE
from gridstab.moisture import saturation_mixing_ratio_scalar, saturation_vapour_pressure_scalar
from gridstab.thermo import (
    latent_heat_vaporisation_scalar,
    lcl_on_dry_adiabat,
    moist_kappa_scalar,
    potential_temperature_scalar,
    pseudoadiabat_slope_scalar,
)

# ---------------------------------------------------------------------------------------
# Table layout. Rows: ln p from ln(10 Pa) to ln(150000 Pa). "parcel" columns: ln theta_e;
# "label" columns: temperature.
LN_P_TOP = math.log(10.0)
LN_P_STEP = 0.02
LN_P_COUNT = int(round((math.log(150000.0) - LN_P_TOP) / LN_P_STEP)) + 1
LN_THETA_E_FIRST = math.log(130.0)
LN_THETA_E_STEP = 0.004
LN_THETA_E_COUNT = int(round((math.log(30000.0) - LN_THETA_E_FIRST) / LN_THETA_E_STEP)) + 1
TEMPERATURE_FIRST = 150.0
TEMPERATURE_STEP = 0.5
TEMPERATURE_COUNT = int(round((350.0 - TEMPERATURE_FIRST) / TEMPERATURE_STEP)) + 1
SUBSTEPS = 4
# theta_e table: ln theta_e as a function of (ln r, ln theta_m), theta_m = T (p0/p)^kappa_m
LN_R_FIRST = math.log(1e-7)
LN_R_STEP = 0.05
LN_R_COUNT = int(round((math.log(0.6) - LN_R_FIRST) / LN_R_STEP)) + 1
LN_THETA_M_FIRST = math.log(150.0)
LN_THETA_M_STEP = 0.01
LN_THETA_M_COUNT = int(round((math.log(4000.0) - LN_THETA_M_FIRST) / LN_THETA_M_STEP)) + 1
LN_P_LAST = LN_P_TOP + (LN_P_COUNT - 1) * LN_P_STEP
LN_THETA_E_LAST = LN_THETA_E_FIRST + (LN_THETA_E_COUNT - 1) * LN_THETA_E_STEP
LN_R_LAST = LN_R_FIRST + (LN_R_COUNT - 1) * LN_R_STEP
LN_THETA_M_LAST = LN_THETA_M_FIRST + (LN_THETA_M_COUNT - 1) * LN_THETA_M_STEP
LN_REFERENCE_PRESSURE = math.log(REFERENCE_PRESSURE)
SATURATION_LIMIT = 0.12
"""Saturated quantities are not reported where e_s exceeds this fraction of the pressure
(see the module docstring)."""
DRY_START_TEMPERATURE = 110.0
"""Each pseudo-adiabat is started where its dry-adiabat temperature is this cold, K."""


class AdiabatTables(NamedTuple):
    """Lookup tables of the pseudo-adiabat (see the module docstring)."""

    parcel: np.ndarray  # (LN_P_COUNT, LN_THETA_E_COUNT, 2): temperature, virtual temperature, K
    label: np.ndarray  # (LN_P_COUNT, TEMPERATURE_COUNT), ln(theta_es / K)
    theta_e: np.ndarray  # (LN_R_COUNT, LN_THETA_M_COUNT), ln(theta_e / K)


@numba.njit(cache=True, nogil=True)
def _slope(temperature, ln_p):
    pressure = math.exp(ln_p)
    if saturation_vapour_pressure_scalar(temperature) > SATURATION_LIMIT * pressure:
        return math.nan
    return pseudoadiabat_slope_scalar(temperature, pressure)


@numba.njit(cache=True, nogil=True)
def _rk4(temperature, ln_p, step):
    k1 = _slope(temperature, ln_p)
    k2 = _slope(temperature + 0.5 * step * k1, ln_p + 0.5 * step)
    k3 = _slope(temperature + 0.5 * step * k2, ln_p + 0.5 * step)
    k4 = _slope(temperature + step * k3, ln_p + step)
    return temperature + step * (k1 + 2.0 * k2 + 2.0 * k3 + k4) / 6.0


@numba.njit(cache=True, nogil=True)
def dry_start(ln_theta_e):
    """Start of a pseudo-adiabat high up, where it is dry to 1e-9: (ln p, T).

    The residual vapour is accounted for to first order:
    theta_e = theta exp(Lv r / (cpd T)).
    """
    theta_e = math.exp(ln_theta_e)
    ln_p = math.log(REFERENCE_PRESSURE) + math.log(DRY_START_TEMPERATURE / theta_e) / KAPPA
    if ln_p > LN_P_TOP:
        ln_p = LN_P_TOP
    pressure = math.exp(ln_p)
    temperature = theta_e * (pressure / REFERENCE_PRESSURE) ** KAPPA
    for _ in range(3):
        r = saturation_mixing_ratio_scalar(temperature, pressure)
        excess = latent_heat_vaporisation_scalar(temperature) * r / (
            DRY_AIR_HEAT_CAPACITY * temperature
        )
        temperature = theta_e * (pressure / REFERENCE_PRESSURE) ** KAPPA * math.exp(-excess)
    return ln_p, temperature


@numba.njit(cache=True, nogil=True)
def _integrate_family(parcel):
    step = LN_P_STEP / SUBSTEPS
    for k in range(LN_THETA_E_COUNT):
        ln_theta_e = LN_THETA_E_FIRST + k * LN_THETA_E_STEP
        ln_p, temperature = dry_start(ln_theta_e)
        # integrate from the start down to the first table row at or below it
        first_row = max(0, int(math.ceil((ln_p - LN_P_TOP) / LN_P_STEP - 1e-12)))
        target = LN_P_TOP + first_row * LN_P_STEP
        gap = target - ln_p
        if gap > 0.0:
            count = int(math.ceil(gap / step))
            sub = gap / count
            for _ in range(count):
                temperature = _rk4(temperature, ln_p, sub)
                ln_p += sub
        ln_p = target
        for j in range(LN_P_COUNT):
            if j < first_row:
                parcel[j, k, 0] = math.nan
                parcel[j, k, 1] = math.nan
                continue
            if j > first_row:
                for _ in range(SUBSTEPS):
                    temperature = _rk4(temperature, ln_p, step)
                    ln_p += step
                ln_p = LN_P_TOP + j * LN_P_STEP
            if not math.isfinite(temperature) or temperature > 360.0:
                temperature = math.nan
            parcel[j, k, 0] = temperature
            if math.isfinite(temperature):
                r = saturation_mixing_ratio_scalar(temperature, math.exp(ln_p))
                parcel[j, k, 1] = temperature * (1.0 + r / EPSILON) / (1.0 + r)
            else:
                parcel[j, k, 1] = math.nan


@numba.njit(cache=True, nogil=True)
def _lagrange4(x, x0, x1, x2, x3, y0, y1, y2, y3):
    return (
        y0 * (x - x1) * (x - x2) * (x - x3) / ((x0 - x1) * (x0 - x2) * (x0 - x3))
        + y1 * (x - x0) * (x - x2) * (x - x3) / ((x1 - x0) * (x1 - x2) * (x1 - x3))
        + y2 * (x - x0) * (x - x1) * (x - x3) / ((x2 - x0) * (x2 - x1) * (x2 - x3))
        + y3 * (x - x0) * (x - x1) * (x - x2) / ((x3 - x0) * (x3 - x1) * (x3 - x2))
    )


@numba.njit(cache=True, nogil=True)
def _invert_family(parcel, label):
    """At each pressure row, invert T(ln theta_e) to ln theta_e(T) on the label grid."""
    for j in range(LN_P_COUNT):
        row = parcel[j, :, 0]
        # valid curves form one contiguous run in k (cold curves may start below the
        # row, warm ones end above it)
        first = -1
        last = -1
        for k in range(LN_THETA_E_COUNT):
            if math.isfinite(row[k]):
                if first < 0:
                    first = k
                last = k
        for i in range(TEMPERATURE_COUNT):
            label[j, i] = math.nan
        if first < 0 or last - first < 3:
            continue
        k = first
        for i in range(TEMPERATURE_COUNT):
            t = TEMPERATURE_FIRST + i * TEMPERATURE_STEP
            if t < row[first] or t > row[last]:
                continue
            while k < last - 1 and row[k + 1] <= t:
                k += 1
            k0 = min(max(k - 1, first), last - 3)
            label[j, i] = _lagrange4(
                t,
                row[k0], row[k0 + 1], row[k0 + 2], row[k0 + 3],
                LN_THETA_E_FIRST + k0 * LN_THETA_E_STEP,
                LN_THETA_E_FIRST + (k0 + 1) * LN_THETA_E_STEP,
                LN_THETA_E_FIRST + (k0 + 2) * LN_THETA_E_STEP,
                LN_THETA_E_FIRST + (k0 + 3) * LN_THETA_E_STEP,
            )


@numba.njit(cache=True, nogil=True)
def _fill_theta_e_table(label, theta_e):
    """ln theta_e on the (ln r, ln theta_m) grid, from the exact LCL and the label table."""
    for a in range(LN_R_COUNT):
        r = math.exp(LN_R_FIRST + a * LN_R_STEP)
        for b in range(LN_THETA_M_COUNT):
            theta_m = math.exp(LN_THETA_M_FIRST + b * LN_THETA_M_STEP)
            # state on this dry adiabat at p0; its LCL may lie at higher pressure
            p_lcl, t_lcl = lcl_on_dry_adiabat(theta_m, REFERENCE_PRESSURE, r)
            if not math.isfinite(t_lcl):
                theta_e[a, b] = math.nan
            else:
                theta_e[a, b] = ln_theta_e_at_saturation(t_lcl, p_lcl, label)


TABLE_SHAPES = {
    "parcel": (LN_P_COUNT, LN_THETA_E_COUNT, 2),
    "label": (LN_P_COUNT, TEMPERATURE_COUNT),
    "theta_e": (LN_R_COUNT, LN_THETA_M_COUNT),
}
"""Shape of each table, by field name of :class:`AdiabatTables`."""


def build_adiabat_tables() -> AdiabatTables:
    """Integrate the pseudo-adiabats and build the lookup tables (about a second)."""
    parcel = np.empty(TABLE_SHAPES["parcel"])
    _integrate_family(parcel)
    label = np.empty(TABLE_SHAPES["label"])
    _invert_family(parcel, label)
    theta_e = np.empty(TABLE_SHAPES["theta_e"])
    _fill_theta_e_table(label, theta_e)
    for table in (parcel, label, theta_e):
        table.setflags(write=False)
    return AdiabatTables(parcel, label, theta_e)


_PROCESS_TABLES: list[AdiabatTables] = []


def install_adiabat_tables(tables: AdiabatTables) -> None:
    """Use ``tables`` (for example read back from a cache) as this process's tables.

    Raises ValueError when a table has the wrong shape or type. Tables already in use
    in the process are kept.
    """
    for name, shape in TABLE_SHAPES.items():
        table = getattr(tables, name)
        if table.shape != shape or table.dtype != np.float64:
            raise ValueError(f"adiabat table {name!r} has shape {table.shape} and type "
                             f"{table.dtype}, expected {shape} float64")
    if not _PROCESS_TABLES:
        for table in tables:
            table.setflags(write=False)
        _PROCESS_TABLES.append(tables)


def adiabat_tables() -> AdiabatTables:
    """The pseudo-adiabat lookup tables of this process: installed, or built once."""
    if not _PROCESS_TABLES:
        _PROCESS_TABLES.append(build_adiabat_tables())
    return _PROCESS_TABLES[0]


# ---------------------------------------------------------------------------------------
# Look-ups (compiled; the tables are passed in explicitly so that they are never frozen
# into compiled code)


@numba.njit(cache=True, nogil=True, inline="always")
def cubic_weights(fraction):
    """Weights of the 4-point Lagrange interpolation at points -1, 0, 1, 2."""
    t = fraction
    w0 = -t * (t - 1.0) * (t - 2.0) / 6.0
    w1 = (t + 1.0) * (t - 1.0) * (t - 2.0) * 0.5
    w2 = -(t + 1.0) * t * (t - 2.0) * 0.5
    w3 = (t + 1.0) * t * (t - 1.0) / 6.0
    return w0, w1, w2, w3


@numba.njit(cache=True, nogil=True, inline="always")
def stencil(value, first, step, count):
    """Index of the second of four stencil points and the interpolation weights."""
    x = (value - first) / step
    i = int(math.floor(x))
    if i < 1:
        i = 1
    elif i > count - 3:
        i = count - 3
    w0, w1, w2, w3 = cubic_weights(x - i)
    return i, w0, w1, w2, w3


@numba.njit(cache=True, nogil=True, inline="always")
def bicubic(table, j, v0, v1, v2, v3, i, w0, w1, w2, w3):
    """Interpolate ``table`` (rows j, columns i) from precomputed stencils."""
    r0 = w0 * table[j - 1, i - 1] + w1 * table[j - 1, i] + w2 * table[j - 1, i + 1] + (
        w3 * table[j - 1, i + 2]
    )
    r1 = w0 * table[j, i - 1] + w1 * table[j, i] + w2 * table[j, i + 1] + w3 * table[j, i + 2]
    r2 = w0 * table[j + 1, i - 1] + w1 * table[j + 1, i] + w2 * table[j + 1, i + 1] + (
        w3 * table[j + 1, i + 2]
    )
    r3 = w0 * table[j + 2, i - 1] + w1 * table[j + 2, i] + w2 * table[j + 2, i + 1] + (
        w3 * table[j + 2, i + 2]
    )
    return v0 * r0 + v1 * r1 + v2 * r2 + v3 * r3


@numba.njit(cache=True, nogil=True, inline="always")
def bicubic_pair(table, j, v0, v1, v2, v3, i, w0, w1, w2, w3):
    """Interpolate both planes of an interleaved (rows, columns, 2) table."""
    a = 0.0
    b = 0.0
    for q in range(4):
        row = j - 1 + q
        v = v0 if q == 0 else (v1 if q == 1 else (v2 if q == 2 else v3))
        a += v * (
            w0 * table[row, i - 1, 0] + w1 * table[row, i, 0] + w2 * table[row, i + 1, 0]
            + w3 * table[row, i + 2, 0]
        )
        b += v * (
            w0 * table[row, i - 1, 1] + w1 * table[row, i, 1] + w2 * table[row, i + 1, 1]
            + w3 * table[row, i + 2, 1]
        )
    return a, b


@numba.njit(cache=True, nogil=True)
def pressure_stencil(ln_p):
    return stencil(ln_p, LN_P_TOP, LN_P_STEP, LN_P_COUNT)


@numba.njit(cache=True, nogil=True)
def label_stencil(ln_theta_e):
    return stencil(ln_theta_e, LN_THETA_E_FIRST, LN_THETA_E_STEP, LN_THETA_E_COUNT)


@numba.njit(cache=True, nogil=True)
def ln_theta_e_at_saturation(temperature, pressure, label):
    """ln theta_e (K) of saturated air at (T in K, p in Pa), for a parcel at its LCL.

    The label table where it is defined; where the air is colder than the table
    (below 151 K, so that r_s < 1e-7 at any pressure in the table) the first-order
    form theta exp(Lv r_s/(cpd T)), exact to better than 1e-5 K there. A nearly dry
    parcel has its LCL there.
    """
    if temperature > 0.0 and temperature < TEMPERATURE_FIRST + 2.0 * TEMPERATURE_STEP:
        r = saturation_mixing_ratio_scalar(temperature, pressure)
        lv = latent_heat_vaporisation_scalar(temperature)
        return math.log(potential_temperature_scalar(temperature, pressure)) + (
            lv * r / (DRY_AIR_HEAT_CAPACITY * temperature)
        )
    return ln_theta_es_scalar(temperature, pressure, label)


@numba.njit(cache=True, nogil=True)
def ln_theta_es_scalar(temperature, pressure, label):
    """ln(theta_es / K) of saturated air at (T in K, p in Pa); NaN where undefined."""
    if not (temperature >= TEMPERATURE_FIRST and temperature <= 350.0 and pressure > 0.0):
        return math.nan
    ln_p = math.log(pressure)
    if ln_p < LN_P_TOP:
        # above the table: dry to first order or undefined
        r = saturation_mixing_ratio_scalar(temperature, pressure)
        if not r < 1e-4:
            return math.nan
        lv = latent_heat_vaporisation_scalar(temperature)
        return math.log(potential_temperature_scalar(temperature, pressure)) + lv * r / (
            DRY_AIR_HEAT_CAPACITY * temperature
        )
    if ln_p > LN_P_LAST:
        return math.nan
    j, v0, v1, v2, v3 = pressure_stencil(ln_p)
    i, w0, w1, w2, w3 = stencil(temperature, TEMPERATURE_FIRST, TEMPERATURE_STEP, TEMPERATURE_COUNT)
    return bicubic(label, j, v0, v1, v2, v3, i, w0, w1, w2, w3)


@numba.njit(cache=True, nogil=True)
def ln_theta_es_with_stencil(temperature, j, v0, v1, v2, v3, label):
    """ln theta_es at T (K) on the table rows of a precomputed pressure stencil.

    The caller guarantees that the pressure lies inside the table (``j >= 0``).
    """
    if not (temperature >= TEMPERATURE_FIRST and temperature <= 350.0):
        return math.nan
    i, w0, w1, w2, w3 = stencil(temperature, TEMPERATURE_FIRST, TEMPERATURE_STEP, TEMPERATURE_COUNT)
    return bicubic(label, j, v0, v1, v2, v3, i, w0, w1, w2, w3)


@numba.njit(cache=True, nogil=True)
def ln_theta_e_scalar(temperature, pressure, mixing_ratio, theta_e_table):
    """ln(theta_e / K) of air at (T in K, p in Pa, r in kg/kg); see ln_theta_e_from_logs."""
    if not (temperature > 0.0 and pressure > 0.0):
        return math.nan
    return ln_theta_e_from_logs(
        math.log(temperature), math.log(pressure), mixing_ratio, theta_e_table
    )


@numba.njit(cache=True, nogil=True)
def ln_theta_e_from_logs(ln_t, ln_p, mixing_ratio, theta_e_table):
    """ln theta_e from ln(T/K), ln(p/Pa) and r (kg/kg), through the theta_e table.

    Along a dry adiabat theta_m = T (p0/p)^kappa_m and r are conserved, so theta_e is
    a function of (ln r, ln theta_m) alone; the table holds it (exact LCL plus the
    label table) and is read by bicubic interpolation. Air drier than 1e-7 kg/kg uses
    theta_e = theta exp(Lv r / (cpd T_L)) with Bolton's (1980, eq. 21) T_L, exact to
    better than 1e-6 K there.
    """
    if not mixing_ratio > 0.0:
        return ln_t + KAPPA * (LN_REFERENCE_PRESSURE - ln_p)
    return ln_theta_e_from_all_logs(ln_t, ln_p, mixing_ratio, math.log(mixing_ratio), theta_e_table)


@numba.njit(cache=True, nogil=True)
def ln_theta_e_from_all_logs(ln_t, ln_p, mixing_ratio, ln_r, theta_e_table):
    """As :func:`ln_theta_e_from_logs`, with ln(r) given too (r > 0)."""
    kappa = moist_kappa_scalar(mixing_ratio)
    ln_theta_m = ln_t + kappa * (LN_REFERENCE_PRESSURE - ln_p)
    if ln_r < LN_R_FIRST + LN_R_STEP:
        e_hpa = 0.01 * math.exp(ln_p) * mixing_ratio / (EPSILON + mixing_ratio)
        t_lcl = 2840.0 / (3.5 * ln_t - math.log(e_hpa) - 4.805) + 55.0
        return ln_t + KAPPA * (LN_REFERENCE_PRESSURE - ln_p) + (
            latent_heat_vaporisation_scalar(t_lcl) * mixing_ratio / (DRY_AIR_HEAT_CAPACITY * t_lcl)
        )
    if not (
        ln_r <= LN_R_LAST
        and ln_theta_m >= LN_THETA_M_FIRST
        and ln_theta_m <= LN_THETA_M_LAST
    ):
        return math.nan  # outside the table: never extrapolate
    j, v0, v1, v2, v3 = stencil(ln_r, LN_R_FIRST, LN_R_STEP, LN_R_COUNT)
    i, w0, w1, w2, w3 = stencil(ln_theta_m, LN_THETA_M_FIRST, LN_THETA_M_STEP, LN_THETA_M_COUNT)
    return bicubic(theta_e_table, j, v0, v1, v2, v3, i, w0, w1, w2, w3)


@numba.njit(cache=True, nogil=True, inline="always")
def capped_ln_theta_e(ln_theta_e, ln_theta_es, temperature, pressure, mixing_ratio):
    """theta_e of supersaturated air is theta_es: the excess vapour is condensate.

    theta_e grows with the mixing ratio at fixed (T, p) and equals theta_es at
    saturation, so min(theta_e, theta_es) is theta_e below saturation and theta_es
    above it (the lifted parcel also drops the excess: its LCL is its origin). Where
    the theta_e table has no value (the dry adiabat of strongly supersaturated air
    meets saturation beyond the tables), the vapour pressure is compared with e_s.
    Arguments: ln theta_e and ln theta_es (K), T (K), p (Pa), r (kg/kg).
    """
    if ln_theta_es < ln_theta_e:
        return ln_theta_es
    if math.isnan(ln_theta_e) and math.isfinite(ln_theta_es):
        vapour_pressure = pressure * mixing_ratio / (EPSILON + mixing_ratio)
        if vapour_pressure >= saturation_vapour_pressure_scalar(temperature):
            return ln_theta_es
    return ln_theta_e


@numba.njit(cache=True, nogil=True)
def parcel_state_scalar(ln_theta_e, pressure, parcel):
    """Temperature and virtual temperature (K) on the pseudo-adiabat ln theta_e at p (Pa)."""
    if not (
        pressure > 0.0 and ln_theta_e >= LN_THETA_E_FIRST and ln_theta_e <= LN_THETA_E_LAST
    ):
        return math.nan, math.nan
    ln_p = math.log(pressure)
    if ln_p < LN_P_TOP:
        t = math.exp(ln_theta_e) * (pressure / REFERENCE_PRESSURE) ** KAPPA
        return t, t
    if ln_p > LN_P_LAST:
        return math.nan, math.nan
    j, v0, v1, v2, v3 = pressure_stencil(ln_p)
    i, w0, w1, w2, w3 = label_stencil(ln_theta_e)
    return bicubic_pair(parcel, j, v0, v1, v2, v3, i, w0, w1, w2, w3)


# ---------------------------------------------------------------------------------------
# Array functions


@numba.njit(cache=True, nogil=True)
def _theta_e_arrays(t, p, r, theta_e_table, label, out):
    for n in range(t.size):
        out[n] = math.exp(
            capped_ln_theta_e(
                ln_theta_e_scalar(t[n], p[n], r[n], theta_e_table),
                ln_theta_es_scalar(t[n], p[n], label),
                t[n], p[n], r[n],
            )
        )


@numba.njit(cache=True, nogil=True)
def _theta_es_arrays(t, p, label, out):
    for n in range(t.size):
        out[n] = math.exp(ln_theta_es_scalar(t[n], p[n], label))


@numba.njit(cache=True, nogil=True)
def _parcel_temperature_arrays(theta_e, p, parcel, out):
    for n in range(theta_e.size):
        out[n] = parcel_state_scalar(math.log(theta_e[n]), p[n], parcel)[0]


def _flat_inputs(*arrays):
    dtype = result_dtype(*[np.asarray(a) for a in arrays])
    broadcast = np.broadcast_arrays(*[np.asarray(a, dtype=np.float64) for a in arrays])
    flat = [np.ascontiguousarray(a).ravel() for a in broadcast]
    return flat, broadcast[0].shape, dtype


def equivalent_potential_temperature(temperature, pressure, mixing_ratio):
    """Pseudo-equivalent potential temperature theta_e.

    Parameters
    ----------
    temperature : array_like
        Air temperature, K.
    pressure : array_like
        Air pressure, Pa.
    mixing_ratio : array_like
        Water-vapour mixing ratio, kg/kg.

    Returns
    -------
    ndarray
        theta_e, K: the pseudo-adiabatic definition (see the module docstring),
        through the exact LCL and the tabulated pseudo-adiabat, read from the
        theta_e table (see ``ln_theta_e_from_logs``). Supersaturated air (e > e_s)
        is saturated air plus condensate: its theta_e is theta_es at (T, p).
    """
    tables = adiabat_tables()
    (t, p, r), shape, dtype = _flat_inputs(temperature, pressure, mixing_ratio)
    out = np.empty(t.size)
    _theta_e_arrays(t, p, r, tables.theta_e, tables.label, out)
    return out.reshape(shape).astype(dtype)[()]


def saturation_equivalent_potential_temperature(temperature, pressure):
    """Saturation pseudo-equivalent potential temperature theta_es.

    Parameters
    ----------
    temperature : array_like
        Air temperature, K.
    pressure : array_like
        Air pressure, Pa.

    Returns
    -------
    ndarray
        theta_e (K) of air saturated over liquid water at (T, p); NaN where the
        saturation vapour pressure exceeds half the pressure, or T is outside
        150-350 K.
    """
    tables = adiabat_tables()
    (t, p), shape, dtype = _flat_inputs(temperature, pressure)
    out = np.empty(t.size)
    _theta_es_arrays(t, p, tables.label, out)
    return out.reshape(shape).astype(dtype)[()]


def temperature_on_pseudoadiabat(theta_e, pressure):
    """Temperature (K) at pressure (Pa) on the pseudo-adiabat labelled theta_e (K)."""
    tables = adiabat_tables()
    (th, p), shape, dtype = _flat_inputs(theta_e, pressure)
    out = np.empty(th.size)
    _parcel_temperature_arrays(th, p, tables.parcel, out)
    return out.reshape(shape).astype(dtype)[()]


def wet_bulb_potential_temperature(temperature, pressure, mixing_ratio):
    """Wet-bulb potential temperature theta_w, K.

    The 1000 hPa temperature of the pseudo-adiabat through the parcel's LCL, from
    temperature (K), pressure (Pa) and mixing ratio (kg/kg).
    """
    theta_e = equivalent_potential_temperature(
        np.asarray(temperature, dtype=np.float64), pressure, mixing_ratio
    )
    result = temperature_on_pseudoadiabat(theta_e, np.full_like(theta_e, REFERENCE_PRESSURE))
    dtype = result_dtype(*[np.asarray(a) for a in (temperature, pressure, mixing_ratio)])
    return np.asarray(result).astype(dtype)[()]
