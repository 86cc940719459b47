"""Column kernels for parcels: choice of parcel, ascent, LCL/LFC/EL, CAPE/CIN, lifted index.

Compiled, pure functions on one compacted column (bottom-up, see ``gridstab.columns``).
Units: K, Pa, kg/kg, m, J/kg.

Conventions (the project's physics notes):

* Ascent: dry-adiabatic at constant mixing ratio with the moist-air Poisson exponent
  up to the exact LCL, then pseudo-adiabatic (default, ``gridstab.adiabats``) or
  reversible (condensate carried; entropy of Emanuel 1994, eq. 4.5.9 form,
  s = (cpd + r_t cl) ln T - Rd ln(p - e_s) + Lv r_s / T, conserved).
* Buoyancy B = Tv_parcel - Tv_env (density temperature with condensate for the
  reversible ascent; Doswell and Rasmussen 1994), or T_parcel - T_env without the
  virtual-temperature correction.
* CAPE and CIN integrate Rd B d(ln p). Between nodes (data levels, the parcel origin
  and the LCL) B is represented by the parabola through its values at both ends and
  the middle of the segment (the environment linear in ln p, the parcel exactly on its
  adiabat), which gives Simpson's rule where B keeps its sign and the exact crossing
  points of that parabola where it changes sign.
* LFC: bottom of the lowest positively buoyant layer at or above the LCL (the LCL when
  the parcel is buoyant there). EL: top of the highest positively buoyant layer (the
  top of the data when the parcel is still buoyant there; flagged). CAPE: positive
  area above the LFC. CIN: negative area from the origin to the LFC (<= 0). No LFC:
  CAPE = 0, CIN, LFC and EL missing.
* Lifted index (Galway 1956): environment minus parcel temperature at 500 hPa (plain
  temperatures), missing when 500 hPa is below the parcel's origin or above the data.
"""

from __future__ import annotations

import math

import numba

from gridstab.adiabats import (
    LN_P_TOP,
    LN_REFERENCE_PRESSURE,
    LN_THETA_E_COUNT,
    LN_THETA_E_FIRST,
    LN_THETA_E_STEP,
    ln_theta_e_at_saturation,
    pressure_stencil,
)
from gridstab.constants import (
    DRY_AIR_GAS_CONSTANT,
    DRY_AIR_HEAT_CAPACITY,
    EPSILON,
    KAPPA,
    LIQUID_HEAT_CAPACITY,
    REFERENCE_PRESSURE,
    VAPOUR_HEAT_CAPACITY,
)
from gridstab.moisture import ln_saturation_vapour_pressure_scalar
from gridstab.profile import bracket, height_at, linear
from gridstab.thermo import (
    latent_heat_vaporisation_scalar,
    lcl_scalar,
    moist_kappa_scalar,
    virtual_temperature_scalar,
)

PARCEL_FIELDS = (
    "cape",
    "cin",
    "lcl_pressure",
    "lcl_height",
    "lcl_temperature",
    "lfc_pressure",
    "lfc_height",
    "el_pressure",
    "el_height",
    "lifted_index",
    "parcel_pressure",
    "el_at_data_top",
)
"""What :func:`lift_parcel` writes into its output row, in order."""
PARCEL_NAMES = ("surface_based", "mixed_layer", "most_unstable")


# ---------------------------------------------------------------------------------------
# Parcel choice


@numba.njit(cache=True, nogil=True)
def mixed_layer_parcel(ln_p, pressure, theta, mixing_ratio, count, bottom_pressure, depth):
    """Mass-weighted mean theta and mixing ratio of the lowest ``depth`` Pa.

    Trapezoidal integration in pressure from ``bottom_pressure`` (the surface, or the
    lowest level) upward; between the surface and the lowest level the lowest level's
    values are used. Returns (origin pressure Pa, temperature K, mixing ratio kg/kg),
    NaN when the column is shallower than ``depth``.
    """
    top_pressure = bottom_pressure - depth
    if not (depth > 0.0) or pressure[count - 1] > top_pressure:
        return math.nan, math.nan, math.nan
    sum_theta = 0.0
    sum_r = 0.0
    p_prev = bottom_pressure
    th_prev = theta[0]
    r_prev = mixing_ratio[0]
    ln_top = math.log(top_pressure)
    for k in range(count):
        if pressure[k] >= p_prev:
            continue
        if pressure[k] <= top_pressure:
            th_top = linear(ln_p, theta, k - 1, ln_top) if k > 0 else theta[0]
            r_top = linear(ln_p, mixing_ratio, k - 1, ln_top) if k > 0 else mixing_ratio[0]
            dp = p_prev - top_pressure
            sum_theta += 0.5 * (th_prev + th_top) * dp
            sum_r += 0.5 * (r_prev + r_top) * dp
            break
        dp = p_prev - pressure[k]
        sum_theta += 0.5 * (th_prev + theta[k]) * dp
        sum_r += 0.5 * (r_prev + mixing_ratio[k]) * dp
        p_prev = pressure[k]
        th_prev = theta[k]
        r_prev = mixing_ratio[k]
    mean_theta = sum_theta / depth
    mean_r = sum_r / depth
    temperature = mean_theta * (bottom_pressure / REFERENCE_PRESSURE) ** KAPPA
    return bottom_pressure, temperature, mean_r


MOST_UNSTABLE_TIE_KELVIN = 0.01
"""theta_e values within this many kelvin count as equal in the most-unstable search,
which then takes the lowest of them (table noise must not lift the parcel)."""


@numba.njit(cache=True, nogil=True)
def most_unstable_level(pressure, theta_e, count, bottom_pressure, depth):
    """Index of the level of highest theta_e (K) within ``depth`` Pa above the bottom.

    A level higher up wins only if its theta_e exceeds the best below it by more than
    ``MOST_UNSTABLE_TIE_KELVIN``, so ties go to the lowest level. -1 if no level has a
    theta_e.
    """
    best = -1
    best_value = -math.inf
    for k in range(count):
        if pressure[k] < bottom_pressure - depth:
            break
        if theta_e[k] > best_value + MOST_UNSTABLE_TIE_KELVIN:
            best_value = theta_e[k]
            best = k
    return best


# ---------------------------------------------------------------------------------------
# Ascent


@numba.njit(cache=True, nogil=True)
def reversible_entropy(temperature, pressure, total_water):
    """Entropy-like invariant of saturated reversible ascent, J kg-1 K-1, and dS/dT."""
    ln_es, dln_es = ln_saturation_vapour_pressure_scalar(temperature)
    es = math.exp(ln_es)
    if es >= pressure:
        return math.nan, math.nan
    r = EPSILON * es / (pressure - es)
    lv = latent_heat_vaporisation_scalar(temperature)
    capacity = DRY_AIR_HEAT_CAPACITY + total_water * LIQUID_HEAT_CAPACITY
    value = capacity * math.log(temperature) - DRY_AIR_GAS_CONSTANT * math.log(pressure - es) + (
        lv * r / temperature
    )
    des = es * dln_es
    dr = EPSILON * des * pressure / ((pressure - es) * (pressure - es))
    derivative = (
        capacity / temperature
        + DRY_AIR_GAS_CONSTANT * des / (pressure - es)
        + ((VAPOUR_HEAT_CAPACITY - LIQUID_HEAT_CAPACITY) * r + lv * dr) / temperature
        - lv * r / (temperature * temperature)
    )
    return value, derivative


@numba.njit(cache=True, nogil=True)
def reversible_temperature(entropy, pressure, total_water, guess):
    """Temperature (K) of saturated air with the given invariant, by Newton's method."""
    t = guess
    for _ in range(20):
        value, derivative = reversible_entropy(t, pressure, total_water)
        if not math.isfinite(value):
            return math.nan
        step = (value - entropy) / derivative
        t -= step
        if abs(step) < 1e-6:
            break
    return t


@numba.njit(cache=True, nogil=True)
def pressure_stencil_or_none(ln_p):
    """The pressure stencil of the parcel table at ln p; index -1 above the table."""
    if ln_p < LN_P_TOP:
        return -1, 0.0, 0.0, 0.0, 0.0
    return pressure_stencil(ln_p)


@numba.njit(cache=True, nogil=True, inline="always")
def _fill_profile(j, parcel_table, column, fraction, profile, filled):
    """Make rows j-1..j+2 of the parcel's own profile available (filled downward lazily).

    The profile holds the parcel table blended linearly between the two columns that
    bracket the parcel's ln theta_e: temperature in ``profile[:, 0]``, virtual
    temperature in ``profile[:, 1]``. ``filled[0]`` is the lowest row filled so far,
    ``filled[1]`` the highest.
    """
    low = j - 1
    high = j + 2
    if filled[0] <= low and high <= filled[1]:
        return
    if filled[0] > filled[1]:  # nothing filled yet
        start, stop = low, high
    else:
        start = min(low, filled[0])
        stop = max(high, filled[1])
    for row in range(start, stop + 1):
        if filled[0] <= row <= filled[1]:
            continue
        a0 = parcel_table[row, column, 0]
        a1 = parcel_table[row, column, 1]
        profile[row, 0] = a0 + fraction * (parcel_table[row, column + 1, 0] - a0)
        profile[row, 1] = a1 + fraction * (parcel_table[row, column + 1, 1] - a1)
    filled[0] = start
    filled[1] = stop


@numba.njit(cache=True, nogil=True, inline="always")
def _parcel_value(
    ln_p, j, v0, v1, v2, v3, origin_ln_p, origin_t, origin_r, kappa, lcl_ln_p,
    parcel_ln_theta_e, column, fraction, profile, filled, reversible, entropy, virtual,
    parcel_table,
):
    """Parcel temperature and the temperature it is compared with (Tv, T_rho or T).

    ``j, v0..v3`` is the pressure stencil at ``ln_p``. Above the LCL the parcel's state
    comes from its own profile: the parcel table interpolated linearly in ln theta_e
    (at the table's spacing of 0.004 this costs under 1e-3 K) and cubically in ln p.
    """
    if ln_p >= lcl_ln_p:
        t = origin_t * math.exp(kappa * (ln_p - origin_ln_p))
        if virtual:
            return t, virtual_temperature_scalar(t, origin_r)
        return t, t
    if j < 0:
        t = math.exp(parcel_ln_theta_e + KAPPA * (ln_p - LN_REFERENCE_PRESSURE))
        tv = t
    else:
        _fill_profile(j, parcel_table, column, fraction, profile, filled)
        t = (v0 * profile[j - 1, 0] + v1 * profile[j, 0] + v2 * profile[j + 1, 0]
             + v3 * profile[j + 2, 0])
        tv = (v0 * profile[j - 1, 1] + v1 * profile[j, 1] + v2 * profile[j + 1, 1]
              + v3 * profile[j + 2, 1])
    if reversible:
        pressure = math.exp(ln_p)
        t = reversible_temperature(entropy, pressure, origin_r, t)
        es = math.exp(ln_saturation_vapour_pressure_scalar(t)[0])
        r = EPSILON * es / (pressure - es)
        if virtual:
            return t, t * (1.0 + r / EPSILON) / (1.0 + origin_r)
        return t, t
    if virtual:
        return t, tv
    return t, t


@numba.njit(cache=True, nogil=True, inline="always")
def _environment(ln_p, temperature, mixing_ratio, k, target, virtual):
    """Environmental (T, comparison temperature) at ``target`` on segment k (k < 0: level 0)."""
    if k < 0:
        t = temperature[0]
        r = mixing_ratio[0]
    else:
        fraction = (target - ln_p[k]) / (ln_p[k + 1] - ln_p[k])
        t = temperature[k] + fraction * (temperature[k + 1] - temperature[k])
        r = mixing_ratio[k] + fraction * (mixing_ratio[k + 1] - mixing_ratio[k])
    if virtual:
        return t, virtual_temperature_scalar(t, r)
    return t, t


@numba.njit(cache=True, nogil=True)
def _antiderivative(a2, b1, c0, s):
    return s * (c0 + s * (0.5 * b1 + s * a2 / 3.0))


@numba.njit(cache=True, nogil=True)
def lift_parcel(
    origin_pressure, origin_temperature, origin_mixing_ratio,
    ln_p, temperature, mixing_ratio, virtual_temperature, height, lowest_theta_above, count,
    level_stencils, mid_stencils, stencil_weights,
    reversible, virtual, lifted_index_pressure, parcel_table, label, profile, filled, out,
):
    """Lift one parcel through one compacted column and write ``PARCEL_FIELDS`` into ``out``.

    Parameters
    ----------
    origin_pressure, origin_temperature, origin_mixing_ratio : float
        The parcel's starting state: Pa, K, kg/kg.
    ln_p, temperature, mixing_ratio, virtual_temperature, height : 1-D arrays
        The environment: ln(p / Pa), K, kg/kg, K and height above ground (m), bottom-up.
    lowest_theta_above : 1-D array
        min(theta[k:]) for each level k, K. Once the environment's theta at and above a
        level exceeds the parcel's theta_e, the parcel (whose virtual temperature never
        exceeds the dry adiabat of its theta_e) cannot be buoyant there again, and the
        pseudo-adiabatic ascent stops.
    count : int
        Number of valid levels.
    level_stencils, mid_stencils : 1-D int arrays
        Pressure-stencil row of the parcel table at each level and at the middle of each
        layer (-1 above the table); ``stencil_weights[0, k]`` and ``[1, k]`` hold their
        four weights. Shared by the parcels of a column.
    reversible, virtual : bool
        Reversible instead of pseudo-adiabatic ascent; virtual-temperature correction.
    lifted_index_pressure : float
        Pressure of the lifted index, Pa.
    parcel_table, label : arrays
        ``gridstab.adiabats.adiabat_tables()``.
    profile, filled : arrays
        Work space of shape (table rows, 2) and (2,) for the parcel's own profile.
    out : 1-D array of 12
        Receives CAPE (J/kg), CIN (J/kg, <= 0), LCL pressure (Pa), height (m) and
        temperature (K), LFC pressure and height, EL pressure and height, lifted index
        (K), origin pressure (Pa), EL-at-data-top flag (1 or 0).
    """
    for q in range(out.size):
        out[q] = math.nan
    if not (origin_pressure > 0.0 and origin_temperature > 0.0 and origin_mixing_ratio > 0.0):
        return
    out[10] = origin_pressure
    origin_ln_p = math.log(origin_pressure)
    lcl_p, lcl_t = lcl_scalar(origin_temperature, origin_pressure, origin_mixing_ratio)
    if not math.isfinite(lcl_p):
        return
    lcl_ln_p = math.log(lcl_p)
    out[2] = lcl_p
    out[4] = lcl_t
    if lcl_ln_p >= ln_p[count - 1]:
        out[3] = height_at(ln_p, height, virtual_temperature, count, lcl_ln_p)
    parcel_ln_theta_e = ln_theta_e_at_saturation(lcl_t, lcl_p, label)
    if not math.isfinite(parcel_ln_theta_e):
        return
    kappa = moist_kappa_scalar(origin_mixing_ratio)
    position = (parcel_ln_theta_e - LN_THETA_E_FIRST) / LN_THETA_E_STEP
    column = min(max(int(math.floor(position)), 0), LN_THETA_E_COUNT - 2)
    fraction = position - column
    filled[0] = 1
    filled[1] = 0
    theta_e_limit = math.exp(parcel_ln_theta_e)
    entropy = 0.0
    if reversible:
        entropy = reversible_entropy(lcl_t, lcl_p, origin_mixing_ratio)[0]

    # first level above the origin
    k = 0
    while k < count and ln_p[k] >= origin_ln_p:
        k += 1
    cape = 0.0
    cin = 0.0
    lfc_ln_p = math.nan
    el_ln_p = math.nan
    el_at_top = 0.0
    found = False
    a = origin_ln_p
    j, v0, v1, v2, v3 = pressure_stencil_or_none(a)
    pt, pc = _parcel_value(
        a, j, v0, v1, v2, v3, origin_ln_p, origin_temperature, origin_mixing_ratio, kappa,
        lcl_ln_p, parcel_ln_theta_e, column, fraction, profile, filled, reversible, entropy,
        virtual, parcel_table,
    )
    et, ec = _environment(ln_p, temperature, mixing_ratio, k - 1, a, virtual)
    buoyancy_a = pc - ec
    lcl_pending = lcl_ln_p < origin_ln_p
    a_is_level = False
    while k < count:
        segment = k - 1
        if (
            a_is_level
            and not reversible
            and not lcl_pending
            and lowest_theta_above[segment] > theta_e_limit
        ):
            break  # never buoyant again
        if lcl_pending and lcl_ln_p > ln_p[k]:
            b = lcl_ln_p
            at_lcl = True
        else:
            b = ln_p[k]
            at_lcl = False
        above_lcl = not lcl_pending
        m = 0.5 * (a + b)
        if a_is_level and not at_lcl:
            j = mid_stencils[segment]
            v0 = stencil_weights[1, segment, 0]
            v1 = stencil_weights[1, segment, 1]
            v2 = stencil_weights[1, segment, 2]
            v3 = stencil_weights[1, segment, 3]
        else:
            j, v0, v1, v2, v3 = pressure_stencil_or_none(m)
        pt, pc = _parcel_value(
            m, j, v0, v1, v2, v3, origin_ln_p, origin_temperature, origin_mixing_ratio, kappa,
            lcl_ln_p, parcel_ln_theta_e, column, fraction, profile, filled, reversible,
            entropy, virtual, parcel_table,
        )
        et, ec = _environment(ln_p, temperature, mixing_ratio, segment, m, virtual)
        buoyancy_m = pc - ec
        if at_lcl:
            j, v0, v1, v2, v3 = pressure_stencil_or_none(b)
            et, ec = _environment(ln_p, temperature, mixing_ratio, segment, b, virtual)
        else:
            j = level_stencils[k]
            v0 = stencil_weights[0, k, 0]
            v1 = stencil_weights[0, k, 1]
            v2 = stencil_weights[0, k, 2]
            v3 = stencil_weights[0, k, 3]
            ec = virtual_temperature[k] if virtual else temperature[k]
        pt, pc = _parcel_value(
            b, j, v0, v1, v2, v3, origin_ln_p, origin_temperature, origin_mixing_ratio, kappa,
            lcl_ln_p, parcel_ln_theta_e, column, fraction, profile, filled, reversible,
            entropy, virtual, parcel_table,
        )
        buoyancy_b = pc - ec
        if not (math.isfinite(buoyancy_m) and math.isfinite(buoyancy_b)):
            break
        width = a - b
        # parabola B(s) = c0 + b1 s + a2 s^2 on s in [0, 1]
        c0 = buoyancy_a
        b1 = -3.0 * buoyancy_a + 4.0 * buoyancy_m - buoyancy_b
        a2 = 2.0 * buoyancy_a - 4.0 * buoyancy_m + 2.0 * buoyancy_b
        roots0 = 1.0
        roots1 = 1.0
        # Fast path: B has one sign at both ends and the middle, and the parabola's
        # extremum (if inside the segment) has that sign too: no crossing, one piece.
        one_sign = (
            c0 != 0.0
            and buoyancy_m != 0.0
            and buoyancy_b != 0.0
            and (c0 > 0.0) == (buoyancy_m > 0.0)
            and (c0 > 0.0) == (buoyancy_b > 0.0)
        )
        if one_sign and a2 != 0.0:
            vertex = -0.5 * b1 / a2
            if 0.0 < vertex < 1.0 and (c0 + vertex * (b1 + vertex * a2) > 0.0) != (c0 > 0.0):
                one_sign = False
        if one_sign:
            pass  # roots stay at 1: a single piece from 0 to 1
        elif abs(a2) < 1e-12 * (abs(b1) + abs(c0) + 1e-30):
            if b1 != 0.0:
                roots0 = -c0 / b1
        else:
            disc = b1 * b1 - 4.0 * a2 * c0
            if disc >= 0.0:
                sq = math.sqrt(disc)
                q = -0.5 * (b1 + math.copysign(sq, b1))
                r1 = q / a2
                r2 = c0 / q if q != 0.0 else 1.0
                roots0 = min(r1, r2)
                roots1 = max(r1, r2)
        if not 0.0 < roots0 < 1.0:
            roots0 = 1.0
        if not 0.0 < roots1 < 1.0:
            roots1 = 1.0
        low = min(roots0, roots1)
        high = max(roots0, roots1)
        for piece in range(3):
            if piece == 0:
                start, end = 0.0, low
            elif piece == 1:
                start, end = low, high
            else:
                start, end = high, 1.0
            if end <= start:
                continue
            middle = 0.5 * (start + end)
            sign = c0 + middle * (b1 + middle * a2)
            area = DRY_AIR_GAS_CONSTANT * width * (
                _antiderivative(a2, b1, c0, end) - _antiderivative(a2, b1, c0, start)
            )
            start_ln_p = a - start * width
            end_ln_p = b if end >= 1.0 else a - end * width
            reaches_top = end >= 1.0 and k == count - 1 and not at_lcl
            if not found:
                if sign > 0.0 and above_lcl:
                    found = True
                    lfc_ln_p = start_ln_p
                    cape += area
                    el_ln_p = end_ln_p
                    el_at_top = 1.0 if reaches_top else 0.0
                elif sign <= 0.0:
                    cin += area
            elif sign > 0.0:
                cape += area
                el_ln_p = end_ln_p
                el_at_top = 1.0 if reaches_top else 0.0
        a = b
        buoyancy_a = buoyancy_b
        if at_lcl:
            lcl_pending = False
            a_is_level = False
        else:
            k += 1
            a_is_level = True

    if found:
        out[0] = cape
        out[1] = min(cin, 0.0)
        out[5] = math.exp(lfc_ln_p)
        out[6] = height_at(ln_p, height, virtual_temperature, count, lfc_ln_p)
        out[7] = math.exp(el_ln_p)
        out[8] = height_at(ln_p, height, virtual_temperature, count, el_ln_p)
        out[11] = el_at_top
    else:
        out[0] = 0.0
    # lifted index
    li_ln_p = math.log(lifted_index_pressure)
    if li_ln_p <= origin_ln_p:
        kk = bracket(ln_p, count, li_ln_p)
        if kk >= 0:
            j, v0, v1, v2, v3 = pressure_stencil_or_none(li_ln_p)
            pt, pc = _parcel_value(
                li_ln_p, j, v0, v1, v2, v3, origin_ln_p, origin_temperature,
                origin_mixing_ratio, kappa, lcl_ln_p, parcel_ln_theta_e, column, fraction,
                profile, filled, reversible, entropy, False, parcel_table,
            )
            out[9] = linear(ln_p, temperature, kk, li_ln_p) - pt
