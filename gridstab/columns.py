"""``diagnose_columns``: every stability diagnostic for arrays of model columns.

This is the single entry point of the column physics. It takes plain arrays shaped
(columns, levels), with levels in either order and missing (NaN) or below-ground
levels anywhere, and returns a dict of plain arrays. One compiled loop visits each
column once: it compacts the valid levels bottom-up, computes heights, per-level
theta/theta_e/theta_es, the per-layer classes, the thick layers and the three
parcels, sharing the work between them. Columns never influence each other.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Literal

import numba
import numpy as np

from gridstab.adiabats import (
    LN_P_COUNT,
    LN_P_STEP,
    LN_P_TOP,
    LN_REFERENCE_PRESSURE,
    adiabat_tables,
    capped_ln_theta_e,
    ln_theta_e_at_saturation,
    ln_theta_e_from_all_logs,
    ln_theta_e_from_logs,
    ln_theta_es_scalar,
    ln_theta_es_with_stencil,
    parcel_state_scalar,
)
from gridstab.constants import (
    DRY_AIR_GAS_CONSTANT,
    EPSILON,
    FREEZING_POINT,
    KAPPA,
    STANDARD_GRAVITY,
)
from gridstab.layers import LAYER_FIELDS, layer_diagnostics
from gridstab.moisture import (
    dew_point_from_mixing_ratio_scalar,
    ln_saturation_vapour_pressure_scalar,
)
from gridstab.parcels import (
    PARCEL_FIELDS,
    PARCEL_NAMES,
    lift_parcel,
    mixed_layer_parcel,
    most_unstable_level,
    pressure_stencil_or_none,
)
from gridstab.profile import bracket, linear
from gridstab.thermo import lcl_scalar, moist_kappa_scalar, virtual_temperature_scalar

LN_P_BOTTOM = LN_P_TOP + (LN_P_COUNT - 1) * LN_P_STEP
"""ln of the highest pressure (Pa) of the adiabat tables."""

MIXING_RATIO_FLOOR = 1e-10
"""Mixing ratios below this (kg/kg), negative ones included, are raised to it."""


INDEX_FIELDS = ("k_index", "total_totals", "showalter_index")
"""Classic indices from the 850, 700 and 500 hPa levels (George 1960; Miller 1972;
Showalter 1953): K = (T850 - T500) + Td850 - (T700 - Td700) with Td850 in degC; total totals =
T850 + Td850 - 2 T500; Showalter = T500 minus the temperature of a parcel lifted from
850 hPa (pseudo-adiabatic, plain temperatures). Missing where 850 hPa is below ground
or 500 hPa above the data."""

PARCEL_SUFFIXES = {"surface_based": "sb", "mixed_layer": "ml", "most_unstable": "mu"}
THICK_LAYERS = ("low3km", "850_500")


@dataclass(frozen=True)
class ColumnOptions:
    """Settings of the column physics (the ``[physics]`` section of a config file)."""

    ascent: Literal["pseudo", "reversible"] = field(
        default="pseudo",
        metadata={"doc": "saturated ascent: 'pseudo' (condensate falls out) or 'reversible'"},
    )
    virtual_temperature_correction: bool = field(
        default=True,
        metadata={"doc": "compare virtual (density) temperatures for buoyancy"},
    )
    mixed_layer_depth_hpa: float = field(
        default=100.0, metadata={"doc": "depth of the mixed-layer parcel's layer above ground, hPa"}
    )
    most_unstable_depth_hpa: float = field(
        default=300.0,
        metadata={"doc": "depth above ground searched for the most-unstable parcel, hPa"},
    )
    largest_surface_gap_hpa: float = field(
        default=50.0,
        metadata={
            "doc": "largest gap between the surface and the lowest valid level, hPa, that the"
            " mixed-layer and most-unstable layers bridge (filled with the lowest level's"
            " theta and mixing ratio); beyond it they start at the lowest valid level"
        },
    )
    dry_neutral_band_k_per_km: float = field(
        default=0.3, metadata={"doc": "half-width of the dry-neutral band of lapse rates, K/km"}
    )
    moist_neutral_band_k_per_km: float = field(
        default=0.3, metadata={"doc": "half-width of the moist-neutral band of lapse rates, K/km"}
    )
    low_layer_depth_m: float = field(
        default=3000.0, metadata={"doc": "depth of the low thick layer above ground, m"}
    )
    upper_layer_bottom_hpa: float = field(
        default=850.0, metadata={"doc": "bottom of the upper thick layer, hPa"}
    )
    upper_layer_top_hpa: float = field(
        default=500.0, metadata={"doc": "top of the upper thick layer, hPa"}
    )
    lifted_index_pressure_hpa: float = field(
        default=500.0, metadata={"doc": "pressure of the lifted index, hPa"}
    )

    def __post_init__(self):
        if self.ascent not in ("pseudo", "reversible"):
            raise ValueError(f"ascent must be 'pseudo' or 'reversible', got {self.ascent!r}")
        positive = (
            "mixed_layer_depth_hpa",
            "most_unstable_depth_hpa",
            "low_layer_depth_m",
            "upper_layer_bottom_hpa",
            "upper_layer_top_hpa",
            "lifted_index_pressure_hpa",
        )
        for name in positive:
            value = getattr(self, name)
            if not (isinstance(value, (int, float)) and math.isfinite(value) and value > 0):
                raise ValueError(f"{name} must be a positive number, got {value!r}")
        gap = self.largest_surface_gap_hpa
        if not (isinstance(gap, (int, float)) and 0 <= gap <= 200):
            raise ValueError(f"largest_surface_gap_hpa must be between 0 and 200 hPa, got {gap!r}")
        for name in ("dry_neutral_band_k_per_km", "moist_neutral_band_k_per_km"):
            value = getattr(self, name)
            if not (isinstance(value, (int, float)) and 0 <= value < 5):
                raise ValueError(f"{name} must be between 0 and 5 K/km, got {value!r}")
        if not self.upper_layer_top_hpa < self.upper_layer_bottom_hpa:
            raise ValueError(
                "upper_layer_top_hpa must be a lower pressure than upper_layer_bottom_hpa, got "
                f"{self.upper_layer_top_hpa} and {self.upper_layer_bottom_hpa}"
            )
        if self.mixed_layer_depth_hpa > 500 or self.most_unstable_depth_hpa > 700:
            raise ValueError("mixed_layer_depth_hpa must be <= 500 and most_unstable_depth_hpa <= 700")


def output_names(nlev: int | None = None) -> dict[str, str]:
    """Every output of :func:`diagnose_columns` and its kind: 'column', 'level' or 'layer'."""
    names: dict[str, str] = {}
    for parcel in PARCEL_NAMES:
        for name in PARCEL_FIELDS:
            names[f"{name}_{PARCEL_SUFFIXES[parcel]}"] = "column"
    for layer in THICK_LAYERS:
        for name in LAYER_FIELDS:
            names[f"{name}_{layer}"] = "column"
    for name in INDEX_FIELDS:
        names[name] = "column"
    for name in ("theta", "theta_e", "theta_es"):
        names[name] = "level"
    for name in LAYER_FIELDS:
        names[f"layer_{name}"] = "layer"
    return names


OUTPUTS = output_names()
INTEGER_OUTPUTS = {
    name
    for name in OUTPUTS
    if any(key in name for key in ("stability_class", "potential_instability", "el_at_data_top"))
}


@numba.njit(cache=True, nogil=True)
def _compact(
    c, pressure, shared_pressure, ln_p_row, exner_row, temperature, mixing_ratio,
    height, has_height, surface_pressure, has_surface, surface_t, surface_r, has_surface_air,
    P, LNP, T, R, TH, TV, Z, IDX,
):
    """Copy column c's valid levels bottom-up into the work arrays; return their count.

    Fills pressure (Pa), ln p, temperature (K), mixing ratio (floored, kg/kg), theta and
    virtual temperature (K), height (m, NaN without heights) and the input level index
    (-1 for the near-surface level). With ``shared_pressure`` every column has the
    levels of row 0 of ``pressure``, whose ln p and (p0/p)^kappa are given per level;
    no transcendental function is evaluated then.
    """
    nlev = pressure.shape[1]
    row = 0 if shared_pressure else c
    first = -1
    last = -1
    for k in range(nlev):
        if pressure[row, k] > 0.0:
            if first < 0:
                first = k
            last = k
    if first < 0:
        return 0
    top_down = pressure[row, first] < pressure[row, last]
    ps = surface_pressure[c] if has_surface else math.inf
    if not ps > 0.0:
        ps = math.inf
    count = 0
    if has_surface and has_surface_air:
        if math.isfinite(ps) and surface_t[c] > 0.0 and math.isfinite(surface_r[c]):
            r = max(surface_r[c], MIXING_RATIO_FLOOR)
            P[0] = ps
            LNP[0] = math.log(ps)
            T[0] = surface_t[c]
            R[0] = r
            TH[0] = surface_t[c] * math.exp(KAPPA * (LN_REFERENCE_PRESSURE - LNP[0]))
            TV[0] = virtual_temperature_scalar(T[0], r)
            Z[0] = math.nan
            IDX[0] = -1
            count = 1
    for step in range(nlev):
        k = nlev - 1 - step if top_down else step
        p = pressure[row, k]
        t = temperature[c, k]
        r = mixing_ratio[c, k]
        if not (p > 0.0 and t > 0.0 and math.isfinite(r)):
            continue
        if has_height and not math.isfinite(height[c, k]):
            continue
        if p > ps:
            continue  # below ground
        if count > 0 and p >= P[count - 1]:
            if IDX[count - 1] == -1 and p > P[count - 1] - 1.0:
                count -= 1  # a level at the surface replaces the surface values
            else:
                continue  # not above the previous level
        if r < MIXING_RATIO_FLOOR:
            r = MIXING_RATIO_FLOOR
        P[count] = p
        if shared_pressure:
            LNP[count] = ln_p_row[k]
            TH[count] = t * exner_row[k]
        else:
            LNP[count] = math.log(p)
            TH[count] = t * math.exp(KAPPA * (LN_REFERENCE_PRESSURE - LNP[count]))
        T[count] = t
        R[count] = r
        TV[count] = t * (1.0 + r / EPSILON) / (1.0 + r)
        Z[count] = height[c, k] if has_height else math.nan
        IDX[count] = k
        count += 1
    return count


@numba.njit(cache=True, nogil=True, inline="always")
def _store_stencil(ln_p, stencils, weights, plane, i):
    """Store the parcel table's pressure stencil at ln p as entry i of ``plane``."""
    j, v0, v1, v2, v3 = pressure_stencil_or_none(ln_p)
    stencils[i] = j
    weights[plane, i, 0] = v0
    weights[plane, i, 1] = v1
    weights[plane, i, 2] = v2
    weights[plane, i, 3] = v3


@numba.njit(cache=True, nogil=True)
def _level_theta_e(i, ln_t, ln_r, LNP, T, R, P, theta_e_table, label, THES, LTHE, THE):
    """theta_e of compacted level i (K, in place), from ln T and ln r.

    Supersaturation is found by comparing the vapour pressure with e_s, and only then
    is theta_es looked up (see ``capped_ln_theta_e``).
    """
    ln_theta_e = ln_theta_e_from_all_logs(ln_t, LNP[i], R[i], ln_r, theta_e_table)
    ln_e = LNP[i] + ln_r - math.log(EPSILON + R[i])
    if not ln_e < ln_saturation_vapour_pressure_scalar(T[i])[0]:
        ln_theta_e = capped_ln_theta_e(
            ln_theta_e, ln_theta_es_scalar(T[i], P[i], label), T[i], P[i], R[i]
        )
    LTHE[i] = ln_theta_e
    THE[i] = math.exp(ln_theta_e)


@numba.njit(cache=True, nogil=True)
def _all_levels(n, LNT, LNR, LNP, T, R, P, TH, LEVEL_STENCIL, WEIGHTS, theta_e_table, label,
                LTH, THES, LTHE, THE):
    """theta, theta_e and theta_es of every compacted level (per-level output), in place.

    The theta_es look-up reuses the level's pressure stencil of the parcel table.
    """
    for i in range(n):
        LTH[i] = LNT[i] + KAPPA * (LN_REFERENCE_PRESSURE - LNP[i])
        j = LEVEL_STENCIL[i]
        if j >= 0 and LNP[i] <= LN_P_BOTTOM:
            ln_theta_es = ln_theta_es_with_stencil(
                T[i], j, WEIGHTS[0, i, 0], WEIGHTS[0, i, 1], WEIGHTS[0, i, 2], WEIGHTS[0, i, 3],
                label,
            )
        else:
            ln_theta_es = ln_theta_es_scalar(T[i], P[i], label)
        THES[i] = math.exp(ln_theta_es)
        LTHE[i] = capped_ln_theta_e(
            ln_theta_e_from_all_logs(LNT[i], LNP[i], R[i], LNR[i], theta_e_table),
            ln_theta_es, T[i], P[i], R[i],
        )
        THE[i] = math.exp(LTHE[i])


@numba.njit(cache=True, nogil=True)
def _state_at(target_ln_p, LNP, T, R, Z, count, label, theta_e_table):
    """(T, theta, ln theta, theta_e, theta_es, z) at ln p inside the column; NaN outside."""
    k = bracket(LNP, count, target_ln_p)
    if k < 0:
        return math.nan, math.nan, math.nan, math.nan, math.nan, math.nan
    if k == count - 1:
        k = count - 2
    t = linear(LNP, T, k, target_ln_p)
    r = linear(LNP, R, k, target_ln_p)
    z = linear(LNP, Z, k, target_ln_p)
    ln_t = math.log(t)
    ln_theta = ln_t + KAPPA * (LN_REFERENCE_PRESSURE - target_ln_p)
    ln_theta_es = ln_theta_es_scalar(t, math.exp(target_ln_p), label)
    ln_theta_e = capped_ln_theta_e(
        ln_theta_e_from_logs(ln_t, target_ln_p, r, theta_e_table), ln_theta_es, t,
        math.exp(target_ln_p), r,
    )
    return t, math.exp(ln_theta), ln_theta, math.exp(ln_theta_e), math.exp(ln_theta_es), z


@numba.njit(cache=True, nogil=True)
def _classic_indices(LNP, T, R, count, parcel_table, label, index_out, c):
    """K index, total totals and Showalter index of column c (see INDEX_FIELDS), in K."""
    ln850 = math.log(85000.0)
    ln700 = math.log(70000.0)
    ln500 = math.log(50000.0)
    k850 = bracket(LNP, count, ln850)
    k700 = bracket(LNP, count, ln700)
    k500 = bracket(LNP, count, ln500)
    if k850 < 0 or k700 < 0 or k500 < 0:
        return
    k850 = min(k850, count - 2)
    k700 = min(k700, count - 2)
    k500 = min(k500, count - 2)
    t850 = linear(LNP, T, k850, ln850)
    r850 = linear(LNP, R, k850, ln850)
    t700 = linear(LNP, T, k700, ln700)
    r700 = linear(LNP, R, k700, ln700)
    t500 = linear(LNP, T, k500, ln500)
    td850 = dew_point_from_mixing_ratio_scalar(r850, 85000.0)
    td700 = dew_point_from_mixing_ratio_scalar(r700, 70000.0)
    # the K index adds the 850 hPa dew point in degrees Celsius (common practice)
    index_out[c, 0] = (t850 - t500) + (td850 - FREEZING_POINT) - (t700 - td700)
    index_out[c, 1] = t850 + td850 - 2.0 * t500
    p_lcl, t_lcl = lcl_scalar(t850, 85000.0, r850)
    if not math.isfinite(p_lcl):
        return
    if p_lcl <= 50000.0:
        parcel = t850 * math.exp(moist_kappa_scalar(r850) * (ln500 - ln850))
    else:
        ln_theta_e = ln_theta_e_at_saturation(t_lcl, p_lcl, label)
        parcel = parcel_state_scalar(ln_theta_e, 50000.0, parcel_table)[0]
    index_out[c, 2] = t500 - parcel


@numba.njit(cache=True, nogil=True)
def _diagnose(
    pressure, shared_pressure, ln_p_row, exner_row, temperature, mixing_ratio,
    ln_t_all, ln_r_all, height, has_height, surface_pressure, has_surface, surface_height, has_surface_height,
    surface_t, surface_r, has_surface_air,
    reversible, virtual, ml_depth, mu_depth, largest_gap, dry_band, moist_band,
    low_depth, upper_bottom, upper_top, li_pressure, want_levels,
    parcel_table, label, theta_e_table,
    parcels_out, thick_out, index_out, level_out, layer_out, layer_flags,
):
    ncol, nlev = temperature.shape
    size = nlev + 1
    P = np.empty(size)
    LNP = np.empty(size)
    T = np.empty(size)
    R = np.empty(size)
    LNT = np.empty(size)
    LNR = np.empty(size)
    TV = np.empty(size)
    Z = np.empty(size)
    TH = np.empty(size)
    LTH = np.empty(size)
    LTHE = np.empty(size)
    THE = np.empty(size)
    THES = np.empty(size)
    MINTH = np.empty(size)
    IDX = np.empty(size, dtype=np.int64)
    LEVEL_STENCIL = np.empty(size, dtype=np.int64)
    MID_STENCIL = np.empty(size, dtype=np.int64)
    WEIGHTS = np.zeros((2, size, 4))
    # stencils of the shared levels (row 0) and of the middles between neighbours
    SHARED_STENCIL = np.full((2, nlev), -1, dtype=np.int64)
    SHARED_WEIGHTS = np.zeros((2, nlev, 4))
    if shared_pressure:
        for k in range(nlev):
            if pressure[0, k] > 0.0:
                _store_stencil(ln_p_row[k], SHARED_STENCIL[0], SHARED_WEIGHTS, 0, k)
                if k < nlev - 1 and pressure[0, k + 1] > 0.0:
                    _store_stencil(0.5 * (ln_p_row[k] + ln_p_row[k + 1]), SHARED_STENCIL[1],
                                   SHARED_WEIGHTS, 1, k)
    row = np.empty(parcels_out.shape[2])
    profile = np.empty((LN_P_COUNT, 2))
    filled = np.empty(2, dtype=np.int64)
    hyps = DRY_AIR_GAS_CONSTANT / STANDARD_GRAVITY
    for c in range(ncol):
        n = _compact(
            c, pressure, shared_pressure, ln_p_row, exner_row, temperature, mixing_ratio,
            height, has_height, surface_pressure, has_surface, surface_t, surface_r,
            has_surface_air, P, LNP, T, R, TH, TV, Z, IDX,
        )
        if n < 2:
            continue
        ps = surface_pressure[c] if has_surface else math.nan
        ground_known = has_surface and ps > 0.0
        # the parcels' layers start at the surface (the gap below the lowest valid level
        # filled with its theta and r), unless the gap is wider than the largest gap
        # filled: then they start at the lowest valid level
        bottom = ps if (ground_known and P[0] < ps <= P[0] + largest_gap) else P[0]
        # pressure stencils of the parcel table at the levels and the layers' middles
        # (the label table shares its rows); for shared levels from the block's own
        for i in range(n):
            k = IDX[i]
            if shared_pressure and k >= 0:
                LEVEL_STENCIL[i] = SHARED_STENCIL[0, k]
                for q in range(4):
                    WEIGHTS[0, i, q] = SHARED_WEIGHTS[0, k, q]
            else:
                _store_stencil(LNP[i], LEVEL_STENCIL, WEIGHTS, 0, i)
            if i < n - 1:
                k1 = IDX[i + 1]
                if shared_pressure and k >= 0 and k1 >= 0 and abs(k - k1) == 1:
                    middle = min(k, k1)
                    MID_STENCIL[i] = SHARED_STENCIL[1, middle]
                    for q in range(4):
                        WEIGHTS[1, i, q] = SHARED_WEIGHTS[1, middle, q]
                else:
                    _store_stencil(0.5 * (LNP[i] + LNP[i + 1]), MID_STENCIL, WEIGHTS, 1, i)
        # theta_e where it is used: every level with per-level output (with logs
        # computed beforehand, vectorised), else the most-unstable search window (which
        # includes the bottom of the low thick layer)
        if want_levels:
            for i in range(n):
                k = IDX[i]
                LNT[i] = ln_t_all[c, k] if k >= 0 else math.log(T[i])
                LNR[i] = ln_r_all[c, k] if k >= 0 else math.log(R[i])
            _all_levels(n, LNT, LNR, LNP, T, R, P, TH, LEVEL_STENCIL, WEIGHTS, theta_e_table,
                        label, LTH, THES, LTHE, THE)
        else:
            for i in range(n):
                if i > 0 and P[i] < bottom - mu_depth:
                    break
                _level_theta_e(i, math.log(T[i]), math.log(R[i]), LNP, T, R, P, theta_e_table,
                               label, THES, LTHE, THE)
            LTH[0] = math.log(TH[0])
            THES[0] = math.exp(ln_theta_es_scalar(T[0], P[0], label))
        MINTH[n - 1] = TH[n - 1]
        for i in range(n - 2, -1, -1):
            MINTH[i] = min(TH[i], MINTH[i + 1])
        # heights above ground
        if has_height:
            if IDX[0] == -1:
                Z[0] = surface_height[c] if has_surface_height else (
                    Z[1] - hyps * 0.5 * (TV[0] + TV[1]) * (LNP[0] - LNP[1])
                )
            if has_surface_height and math.isfinite(surface_height[c]):
                ground = surface_height[c]
            elif ground_known:
                ground = Z[0] - hyps * TV[0] * (math.log(ps) - LNP[0])
            else:
                ground = Z[0]
            for i in range(n):
                Z[i] -= ground
        else:
            Z[0] = hyps * TV[0] * (math.log(ps) - LNP[0]) if ground_known else 0.0
            for i in range(1, n):
                Z[i] = Z[i - 1] + hyps * 0.5 * (TV[i - 1] + TV[i]) * (LNP[i - 1] - LNP[i])
        if want_levels:
            for i in range(n):
                k = IDX[i]
                if k >= 0:
                    level_out[0, c, k] = TH[i]
                    level_out[1, c, k] = THE[i]
                    level_out[2, c, k] = THES[i]
            for i in range(n - 1):
                k0 = IDX[i]
                k1 = IDX[i + 1]
                if k0 < 0 or k1 < 0 or abs(k0 - k1) != 1:
                    continue
                values = layer_diagnostics(
                    T[i], TH[i], LTH[i], THE[i], THES[i], Z[i],
                    T[i + 1], TH[i + 1], LTH[i + 1], THE[i + 1], THES[i + 1], Z[i + 1],
                    dry_band, moist_band,
                )
                slot = min(k0, k1)
                for f in range(4):
                    layer_out[f, c, slot] = values[f]
                layer_flags[0, c, slot] = int(values[4])
                layer_flags[1, c, slot] = int(values[5])
        # thick layers: the lowest low_depth metres, and upper_bottom..upper_top
        if Z[n - 1] >= low_depth:
            j = 0
            while Z[j + 1] < low_depth:
                j += 1
            fraction = (low_depth - Z[j]) / (Z[j + 1] - Z[j])
            top_ln_p = LNP[j] + fraction * (LNP[j + 1] - LNP[j])
            t1, th1, lth1, the1, thes1, z1 = _state_at(
                top_ln_p, LNP, T, R, Z, n, label, theta_e_table
            )
            values = layer_diagnostics(
                T[0], TH[0], LTH[0], THE[0], THES[0], Z[0],
                t1, th1, lth1, the1, thes1, low_depth, dry_band, moist_band,
            )
            for f in range(6):
                thick_out[c, 0, f] = values[f]
        if P[0] >= upper_bottom and P[n - 1] <= upper_top:
            t0, th0, lth0, the0, thes0, z0 = _state_at(
                math.log(upper_bottom), LNP, T, R, Z, n, label, theta_e_table
            )
            t1, th1, lth1, the1, thes1, z1 = _state_at(
                math.log(upper_top), LNP, T, R, Z, n, label, theta_e_table
            )
            values = layer_diagnostics(
                t0, th0, lth0, the0, thes0, z0, t1, th1, lth1, the1, thes1, z1,
                dry_band, moist_band,
            )
            for f in range(6):
                thick_out[c, 1, f] = values[f]
        # classic indices
        if P[0] >= 85000.0 and P[n - 1] <= 50000.0:
            _classic_indices(LNP, T, R, n, parcel_table, label, index_out, c)
        # parcels
        for which in range(3):
            if which == 0:
                p0, t0, r0 = P[0], T[0], R[0]
            elif which == 1:
                p0, t0, r0 = mixed_layer_parcel(LNP, P, TH, R, n, bottom, ml_depth)
            else:
                level = most_unstable_level(P, THE, n, bottom, mu_depth)
                if level < 0:
                    continue
                p0, t0, r0 = P[level], T[level], R[level]
                if level == 0:
                    for f in range(row.size):
                        parcels_out[c, 2, f] = parcels_out[c, 0, f]
                    continue
            lift_parcel(
                p0, t0, r0, LNP, T, R, TV, Z, MINTH, n, LEVEL_STENCIL, MID_STENCIL, WEIGHTS,
                reversible, virtual, li_pressure, parcel_table, label, profile, filled, row,
            )
            for f in range(row.size):
                parcels_out[c, which, f] = row[f]


def _as_columns(name, array, shape):
    if array is None:
        return np.full(shape, np.nan), False
    values = np.asarray(array, dtype=np.float64)
    if values.shape != shape:
        raise ValueError(f"{name} has shape {values.shape}, expected {shape}")
    return np.ascontiguousarray(values), True


def diagnose_columns(
    pressure,
    temperature,
    mixing_ratio,
    *,
    height=None,
    surface_pressure=None,
    surface_height=None,
    surface_temperature=None,
    surface_mixing_ratio=None,
    options: ColumnOptions = ColumnOptions(),
    per_level: bool = True,
) -> dict[str, np.ndarray]:
    """Every stability diagnostic of every column.

    Parameters
    ----------
    pressure : array_like, shape (columns, levels) or (levels,)
        Air pressure, Pa. Levels may run either way (per column), may be NaN anywhere,
        and may lie below the surface (they are skipped). A 1-D array of levels is
        shared by every column (pressure-level data; its logarithms and Exner factors
        are then computed once).
    temperature : array_like, shape (columns, levels)
        Air temperature, K.
    mixing_ratio : array_like, shape (columns, levels)
        Water-vapour mixing ratio, kg/kg; values below 1e-10 (negative ones too) are
        raised to 1e-10.
    height : array_like, shape (columns, levels), optional
        Geopotential height, m. Without it, heights come from the hypsometric
        equation with virtual temperature, integrated from the surface (or the lowest
        valid level).
    surface_pressure : array_like, shape (columns,), optional
        Surface pressure, Pa: levels at higher pressure are below ground, heights are
        measured from it, and the mixed layer starts there.
    surface_height : array_like, shape (columns,), optional
        Surface geopotential height, m (only used with ``height``).
    surface_temperature, surface_mixing_ratio : array_like, shape (columns,), optional
        Near-surface air temperature (K) and mixing ratio (kg/kg); with
        ``surface_pressure`` they form the surface-based parcel and the bottom level.
    options : ColumnOptions
        Physics settings.
    per_level : bool
        Also return the per-level and per-layer outputs (default); without them only
        the per-column outputs are returned, and less is computed.

    Returns
    -------
    dict of str to ndarray
        The arrays named in ``OUTPUTS``: per column (columns,), per level
        (columns, levels) and per layer (columns, levels - 1), layer k lying between
        input levels k and k+1. Floats have the floating type of the inputs (float32
        in, float32 out; arithmetic is float64). Classes, flags and the EL-at-top
        marker are int8 with -1 for missing.
    """
    dtype = np.result_type(np.asarray(temperature).dtype, np.float32)
    if dtype not in (np.float32, np.float64):
        dtype = np.dtype(np.float64)
    t = np.ascontiguousarray(np.asarray(temperature, dtype=np.float64))
    if t.ndim != 2:
        raise ValueError(f"temperature must have shape (columns, levels), got {t.shape}")
    ncol, nlev = t.shape
    p = np.asarray(pressure)
    if p.ndim == 2 and p.shape[0] > 0 and p.strides[0] == 0:
        p = p[0]  # one row broadcast to every column (numpy.broadcast_to)
    p = np.asarray(p, dtype=np.float64)
    shared_pressure = p.ndim == 1
    if shared_pressure:
        if p.shape != (nlev,):
            raise ValueError(f"pressure has shape {p.shape}, expected ({nlev},) or {t.shape}")
        p = np.ascontiguousarray(p.reshape(1, nlev))
    else:
        p = np.ascontiguousarray(p)
        if p.shape != t.shape:
            raise ValueError(f"pressure has shape {p.shape}, expected {t.shape}")
    r, _ = _as_columns("mixing_ratio", mixing_ratio, t.shape)
    z, has_z = _as_columns("height", height, t.shape)
    ps, has_ps = _as_columns("surface_pressure", surface_pressure, (ncol,))
    zs, has_zs = _as_columns("surface_height", surface_height, (ncol,))
    ts, has_ts = _as_columns("surface_temperature", surface_temperature, (ncol,))
    rs, has_rs = _as_columns("surface_mixing_ratio", surface_mixing_ratio, (ncol,))
    tables = adiabat_tables()
    # ln p and (p0/p)^kappa of shared levels, once for all columns; with per-level
    # output ln T and ln r of every level, vectorised (the kernel needs them all then)
    with np.errstate(invalid="ignore", divide="ignore"):
        ln_p_row = np.log(np.where(p[0] > 0, p[0], np.nan))
        exner_row = np.exp(KAPPA * (LN_REFERENCE_PRESSURE - ln_p_row))
        if per_level:
            ln_t_all = np.log(np.where(t > 0, t, np.nan))
            ln_r_all = np.log(np.maximum(r, MIXING_RATIO_FLOOR))
        else:
            ln_t_all = ln_r_all = np.empty((0, 0))
    parcels_out = np.full((ncol, 3, len(PARCEL_FIELDS)), np.nan)
    thick_out = np.full((ncol, 2, len(LAYER_FIELDS)), np.nan)
    index_out = np.full((ncol, len(INDEX_FIELDS)), np.nan)
    want_levels = bool(per_level)
    level_shape = (3, ncol, nlev) if want_levels else (3, 0, 0)
    layer_shape = (4, ncol, max(nlev - 1, 0)) if want_levels else (4, 0, 0)
    level_out = np.full(level_shape, np.nan, dtype=dtype)
    layer_out = np.full(layer_shape, np.nan, dtype=dtype)
    layer_flags = np.full((2,) + layer_shape[1:], -1, dtype=np.int8)
    if ncol:
        _diagnose(
            p, shared_pressure, ln_p_row, exner_row, t, r, ln_t_all, ln_r_all, z, has_z,
            ps, has_ps, zs, has_zs,
            ts, rs, has_ts and has_rs,
            options.ascent == "reversible", bool(options.virtual_temperature_correction),
            options.mixed_layer_depth_hpa * 100.0, options.most_unstable_depth_hpa * 100.0,
            options.largest_surface_gap_hpa * 100.0,
            options.dry_neutral_band_k_per_km / 1000.0,
            options.moist_neutral_band_k_per_km / 1000.0,
            float(options.low_layer_depth_m), options.upper_layer_bottom_hpa * 100.0,
            options.upper_layer_top_hpa * 100.0, options.lifted_index_pressure_hpa * 100.0,
            want_levels, tables.parcel, tables.label, tables.theta_e,
            parcels_out, thick_out, index_out, level_out, layer_out, layer_flags,
        )
    result: dict[str, np.ndarray] = {}
    for w, parcel in enumerate(PARCEL_NAMES):
        for f, name in enumerate(PARCEL_FIELDS):
            result[f"{name}_{PARCEL_SUFFIXES[parcel]}"] = parcels_out[:, w, f]
    for w, layer in enumerate(THICK_LAYERS):
        for f, name in enumerate(LAYER_FIELDS):
            result[f"{name}_{layer}"] = thick_out[:, w, f]
    for f, name in enumerate(INDEX_FIELDS):
        result[name] = index_out[:, f]
    for name, values in result.items():
        if name in INTEGER_OUTPUTS:
            result[name] = np.where(np.isfinite(values), values, -1).astype(np.int8)
        else:
            result[name] = values.astype(dtype, copy=False)
    if want_levels:
        for f, name in enumerate(("theta", "theta_e", "theta_es")):
            result[name] = level_out[f]
        for f, name in enumerate(LAYER_FIELDS[:4]):
            result[f"layer_{name}"] = layer_out[f]
        result["layer_stability_class"] = layer_flags[0]
        result["layer_potential_instability"] = layer_flags[1]
    return result
