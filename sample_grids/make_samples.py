"""Write gridstab's demo model output: an invented scenario, never a real event.

Run as ``python sample_grids/make_samples.py [OUTPUT_DIR]`` (default: the folder of
this script). It writes two small CF-1.8 NetCDF files of the same invented afternoon:

``demo_forecast_plev.nc``
    Regular latitude/longitude grid (60 x 80), 4 time steps 3 h apart, 21 pressure
    levels ordered surface-first, below-ground levels masked with ``_FillValue``;
    temperature, specific humidity, geopotential height, surface pressure and surface
    altitude.
``demo_forecast_hybrid.nc``
    The same scenario at 2 time steps on a Lambert conformal conic grid (40 km) with
    30 hybrid sigma-pressure levels ordered top-down: temperature, relative humidity
    in per cent, surface pressure and surface geopotential; no heights.

How the scenario is built
-------------------------
Every column is built from smooth, analytic parameter fields of latitude, longitude
and time (a mixed boundary layer with a surface layer, a capping layer and a free
atmosphere of piecewise constant lapse rate up to an isothermal, then slightly
warming, stratosphere), so both files sample the same scenario wherever their
points lie. The columns are computed on a fine grid (700 points, equally spaced in
ln p from the surface to 90 hPa); the saturated frontal band follows a pseudo-adiabat
integrated with fourth-order Runge-Kutta steps in ln p. Heights are integrated from
the surface upward with the hypsometric equation and virtual temperature
(trapezoidal rule in ln p on the fine grid). The output levels are then sampled from
the fine columns by linear interpolation in ln p: pressure levels below the surface
are masked; hybrid full levels always lie between the surface and 100 hPa.

Humidity never exceeds saturation over liquid water (gridstab.moisture): unsaturated
air is held at or below 95 % of the saturation mixing ratio, the frontal cloud band is
exactly saturated, and the float32 values are rounded towards zero where rounding
would have crossed saturation.

The mild small-scale variation is a sum of random plane waves (wavelengths 60-250 km)
whose directions, wavelengths and phases come from a generator with a fixed seed, so
the output is the same on every run.
"""

from __future__ import annotations

import argparse
import math
import sys
from pathlib import Path

import numpy as np
import xarray as xr

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
)
from gridstab.moisture import relative_humidity_from_mixing_ratio, saturation_mixing_ratio

SEED = 20300621
"""Seed of the random generator behind the small-scale variation."""

PLEV_FILE = "demo_forecast_plev.nc"
HYBRID_FILE = "demo_forecast_hybrid.nc"

PRESSURE_LEVELS_HPA = (
    1000, 975, 950, 925, 900, 850, 800, 750, 700, 650, 600,
    550, 500, 450, 400, 350, 300, 250, 200, 150, 100,
)  # fmt: skip
LATITUDES = 32.0 + 0.25 * np.arange(60)  # degrees_north, 32 .. 46.75
LONGITUDES = -55.0 + 0.25 * np.arange(80)  # degrees_east, -55 .. -35.25
TIME_UNITS = "hours since 2030-06-21 00:00:00"
HOURS = (12, 15, 18, 21)  # UTC; local solar time is about UTC - 3 h at 45 W
HYBRID_STEPS = (1, 2)  # the two afternoon steps written to the hybrid file

# Lambert conformal conic grid of the hybrid file (spherical Earth)
EARTH_RADIUS = 6371229.0  # m
LCC_STANDARD_PARALLELS = (33.0, 45.0)
LCC_ORIGIN = (39.0, -45.0)  # latitude_of_projection_origin, longitude_of_central_meridian
LCC_SHAPE = (32, 36)  # (y, x)
LCC_SPACING = 40000.0  # m

# hybrid sigma-pressure half levels: eta from 0.1 (100 hPa) to 1 (the surface)
N_HYBRID = 30
HYBRID_TOP = 10000.0  # Pa

FINE_POINTS = 700
FINE_TOP = 9000.0  # Pa
SUPERADIABATIC_DEPTH = 3000.0  # Pa, depth of the surface layer
SAT_FRACTION_CAP = 0.95  # unsaturated air stays below this fraction of saturation
STRATOSPHERE_MIXING_RATIO = 3.0e-6  # kg/kg
FILL = np.float32(9.969209968386869e36)  # the netCDF default fill value for floats

STORY = (
    "INVENTED DATA - not a real event, not a forecast. An invented continent in the "
    "North Atlantic on an invented summer day (21 June 2030, 09-18 local solar time). "
    "A cold front runs from south-south-west to north-north-east across the middle of "
    "the domain and moves east; a saturated cloud band lies just behind it. West of "
    "the front is cool, dry post-frontal air, and beyond the west coast a cool "
    "maritime air mass lies under a subsidence inversion. East of the front a moist "
    "tongue (surface dew points near 20 C) carries large CAPE under a weak cap; "
    "farther east a dry elevated mixed layer advected from a high plateau caps the "
    "same moist air with an inversion (large CIN). In the south a hot desert plateau "
    "(surface pressure 807-815 hPa) has a superadiabatic surface layer and a mixed "
    "layer reaching about 470 hPa, and a semi-desert lowland east of it has a deep, "
    "windy, well-mixed layer. All values are invented; the geography matches no real "
    "coastline."
)


# ---------------------------------------------------------------------------
# small helpers


def _ramp(distance: np.ndarray, width: float) -> np.ndarray:
    """0 for distance < -width/2, 1 for distance > width/2, smooth (C1) in between."""
    s = np.clip(0.5 + np.asarray(distance) / width, 0.0, 1.0)
    return s * s * (3.0 - 2.0 * s)


def _lapse_exponent(lapse_rate_k_per_km) -> np.ndarray:
    """d ln T / d ln p of a layer of constant lapse rate (K/km) in dry air."""
    return DRY_AIR_GAS_CONSTANT * np.asarray(lapse_rate_k_per_km) * 1e-3 / STANDARD_GRAVITY


def _latent_heat(temperature):
    """Latent heat of vaporisation (J/kg), linear in temperature (Kirchhoff)."""
    return LATENT_HEAT_VAPORISATION_0C - (LIQUID_HEAT_CAPACITY - VAPOUR_HEAT_CAPACITY) * (
        temperature - FREEZING_POINT
    )


def _pseudo_adiabat_slope(temperature, pressure):
    """dT/dln p (K) of saturated air on a pseudo-adiabat."""
    r = saturation_mixing_ratio(temperature, pressure)
    lv = _latent_heat(temperature)
    rd = DRY_AIR_GAS_CONSTANT
    numerator = (1.0 + r / EPSILON) * (rd * temperature + lv * r)
    denominator = (
        DRY_AIR_HEAT_CAPACITY
        + r * VAPOUR_HEAT_CAPACITY
        + lv * lv * r * (EPSILON + r) / (rd * temperature * temperature)
    )
    return numerator / denominator


def _rk4_step(temperature, ln_p, d_ln_p):
    """One fourth-order Runge-Kutta step of the pseudo-adiabat in ln p."""
    k1 = _pseudo_adiabat_slope(temperature, np.exp(ln_p))
    k2 = _pseudo_adiabat_slope(temperature + 0.5 * d_ln_p * k1, np.exp(ln_p + 0.5 * d_ln_p))
    k3 = _pseudo_adiabat_slope(temperature + 0.5 * d_ln_p * k2, np.exp(ln_p + 0.5 * d_ln_p))
    k4 = _pseudo_adiabat_slope(temperature + d_ln_p * k3, np.exp(ln_p + d_ln_p))
    return temperature + d_ln_p * (k1 + 2.0 * k2 + 2.0 * k3 + k4) / 6.0


class _Waves:
    """Smooth random fields: sums of plane waves with seeded directions and phases."""

    def __init__(self, seed: int, n_fields: int, n_waves: int = 16):
        rng = np.random.default_rng(seed)
        wavelength = rng.uniform(60.0, 250.0, size=(n_fields, n_waves))  # km
        direction = rng.uniform(0.0, 2.0 * np.pi, size=(n_fields, n_waves))
        self.kx = 2.0 * np.pi / wavelength * np.cos(direction)
        self.ky = 2.0 * np.pi / wavelength * np.sin(direction)
        self.phase = rng.uniform(0.0, 2.0 * np.pi, size=(n_fields, n_waves))
        self.n_waves = n_waves

    def field(self, index: int, x_km, y_km, hours_from_start: float) -> np.ndarray:
        # the pattern drifts to the east-north-east at about 10 m/s
        x = x_km - 32.0 * hours_from_start
        y = y_km - 13.0 * hours_from_start
        total = np.zeros(np.shape(x_km))
        for k in range(self.n_waves):
            total += np.cos(self.kx[index, k] * x + self.ky[index, k] * y + self.phase[index, k])
        return total * math.sqrt(2.0 / self.n_waves)  # unit variance


# ---------------------------------------------------------------------------
# the scenario: parameter fields of latitude, longitude and time step


def _front_position(v, step):
    """Normalised west-east position of the surface cold front."""
    return 0.28 + 0.32 * v + 0.025 * step


def scenario_fields(lat: np.ndarray, lon: np.ndarray, step: int) -> dict[str, np.ndarray]:
    """Column parameters of the invented scenario at points (lat, lon) and a time step.

    Parameters
    ----------
    lat, lon : ndarray
        Latitude and longitude of the points, degrees (any matching shape).
    step : int
        Time step index 0..3 (09, 12, 15, 18 local solar time).

    Returns
    -------
    dict of ndarray
        ``surface_altitude`` (m), ``surface_pressure`` (Pa), and the column parameters
        read by :func:`build_columns`; ``band`` is the weight (0..1) of the saturated
        frontal column.
    """
    lat = np.asarray(lat, dtype=np.float64)
    lon = np.asarray(lon, dtype=np.float64)
    u = (lon - LONGITUDES[0]) / (LONGITUDES[-1] - LONGITUDES[0])  # 0 west .. 1 east
    v = (lat - LATITUDES[0]) / (LATITUDES[-1] - LATITUDES[0])  # 0 south .. 1 north
    x_km = (lon + 45.0) * 111.2 * np.cos(np.deg2rad(lat))
    y_km = (lat - 39.4) * 111.2
    hours = 3.0 * step
    waves = _Waves(SEED, n_fields=8)

    def noise(index):
        return waves.field(index, x_km, y_km, hours)

    terrain_noise = waves.field(0, x_km, y_km, 0.0)  # the terrain does not move

    diurnal = (-1.5, 0.0, 1.0, 0.5)[step]  # K, land mixed-layer warming
    excess_factor = (0.6, 1.0, 1.0, 0.7)[step]  # strength of the superadiabatic layer

    # geography ------------------------------------------------------------------
    coast = 0.13 + 0.03 * np.sin(2.0 * np.pi * 1.2 * v + 0.5)
    land = _ramp(u - coast, 0.03)
    s = ((u - 0.62) / 0.14) ** 2 + ((v - 0.21) / 0.16) ** 2
    plateau = np.exp(-(s**3))  # a mesa: flat top, slopes about 80 km wide
    surface_altitude = (
        land * (20.0 + 280.0 * np.clip(u - coast, 0.0, None) + 25.0 * terrain_noise)
        + 1650.0 * plateau
    )
    surface_altitude = np.maximum(surface_altitude, 0.0)

    front = _front_position(v, step)
    d_front = u - front  # > 0 in the warm sector
    mslp = (
        100600.0
        + 900.0 * (1.0 - _ramp(u - 0.35, 0.5))  # ridge over the sea
        - 300.0 * np.exp(-((d_front / 0.08) ** 2))  # trough along the front
        - 400.0 * np.exp(-(((u - 0.65) / 0.2) ** 2 + ((v - 0.2) / 0.2) ** 2))  # heat low
        + 40.0 * noise(1)
    )
    reduction_temperature = 295.0 - 0.0065 * surface_altitude / 2.0
    surface_pressure = mslp * np.exp(
        -STANDARD_GRAVITY * surface_altitude / (DRY_AIR_GAS_CONSTANT * reduction_temperature)
    )

    # regions, painted in order: moist tongue (base), semi-desert lowland, capped
    # region under the elevated mixed layer, plateau, post-frontal air, sea
    shape = lat.shape
    full = np.ones(shape)
    p = {
        # boundary layer
        "theta_ml": (304.0 + diurnal) * full,  # K
        "p_ml": (93000.0, 91000.0, 89500.0, 89500.0)[step] * full,  # Pa, top of mixed layer
        "cap_depth": 3000.0 * full,  # Pa
        "r_ml": (0.0140, 0.0145, 0.0150, 0.0150)[step] * full,  # kg/kg
        "excess": 1.0 * excess_factor * full,  # K, theta excess at the ground
        # free atmosphere
        "t_break": 259.0 * full,  # K, temperature at p_break
        "p_break": 50000.0 * full,  # Pa
        "lapse_low": 7.8 * full,  # K/km, below p_break
        "lapse_up": 7.0 * full,  # K/km, p_break to the tropopause
        "p_trop": 20000.0 * full,  # Pa
        "rh_low": 0.55 * full,  # fraction of saturation, cap top to p_break
        "rh_up": 0.45 * full,  # at the tropopause
    }

    def paint(weight, **values):
        for key, value in values.items():
            p[key] = p[key] * (1.0 - weight) + value * weight

    # semi-desert lowland in the south-east: deep, windy, well-mixed, dry
    w_dry = _ramp(u - 0.79, 0.06) * _ramp(0.33 - v, 0.06)
    paint(
        w_dry,
        theta_ml=308.5 + diurnal,
        p_ml=(66000.0, 63000.0, 62000.0, 62000.0)[step],
        cap_depth=2500.0,
        r_ml=0.0030,
        excess=0.0,
        t_break=258.5,
        lapse_low=8.5,
        rh_low=0.30,
        rh_up=0.30,
    )
    # capped region: the dry elevated mixed layer (dry-adiabatic up to 500 hPa)
    # over moist air; the cap strengthens eastward
    w_cap = _ramp(u - (0.68 - 0.06 * (v - 0.5)), 0.06) * _ramp(v - 0.46, 0.06)
    east = np.clip((u - 0.70) / 0.28, 0.0, 1.0)
    theta_eml = 310.5 + 4.0 * east + 0.3 * noise(2)
    paint(
        w_cap,
        theta_ml=303.5 + diurnal,
        p_ml=91000.0,
        cap_depth=4000.0,
        r_ml=(0.0130, 0.0135, 0.0140, 0.0140)[step],
        excess=1.0 * excess_factor,
        t_break=theta_eml * 0.5**KAPPA,
        lapse_low=DRY_ADIABATIC_LAPSE_RATE * 1e3,
        lapse_up=7.0,
        p_trop=20500.0,
        rh_low=0.22,
        rh_up=0.40,
    )
    # hot plateau and its upper slopes: superadiabatic surface layer, very deep
    # dry mixed layer
    w_plateau = _ramp((surface_altitude - 850.0) / 900.0, 1.0)
    paint(
        w_plateau,
        theta_ml=316.5 + diurnal,
        p_ml=(52000.0, 48000.0, 46500.0, 46500.0)[step],
        cap_depth=2000.0,
        r_ml=0.0012,
        excess=4.0 * excess_factor,
        t_break=258.5,
        lapse_low=8.5,
        rh_low=0.30,
        rh_up=0.30,
    )
    # post-frontal air west of the front
    w_cold = _ramp(-d_front, 0.04)
    paint(
        w_cold,
        theta_ml=287.0 + 0.5 * diurnal,
        p_ml=86000.0,
        cap_depth=3000.0,
        r_ml=0.0045,
        excess=0.5 * excess_factor,
        t_break=254.0,
        lapse_low=5.0,
        lapse_up=6.5,
        p_trop=25000.0,
        rh_low=0.40,
        rh_up=0.35,
    )
    # cool maritime air under a subsidence inversion, west of the coast
    w_sea = _ramp(coast + 0.02 - u, 0.06)
    paint(
        w_sea,
        theta_ml=283.5,
        p_ml=96500.0,
        cap_depth=3000.0,
        r_ml=0.0055,
        excess=0.0,
        t_break=281.0,
        p_break=75000.0,
        lapse_low=2.0,
        lapse_up=6.5,
        p_trop=25000.0,
        rh_low=0.25,
        rh_up=0.35,
    )

    # mild small-scale variation (not inside the saturated band, which has its own)
    p["theta_ml"] = p["theta_ml"] + 0.3 * noise(3)
    p["r_ml"] = p["r_ml"] * (1.0 + 0.03 * noise(4))
    p["p_ml"] = p["p_ml"] + 400.0 * noise(5)
    p["t_break"] = p["t_break"] + 0.3 * noise(6)

    # the saturated frontal cloud band, just behind the surface front
    d_band = np.abs(d_front + 0.02)
    p["band"] = 1.0 - _ramp(d_band - 0.055, 0.05)  # core |d| < 0.03, gone at 0.08
    p["band_theta_w"] = 292.6 - 2.0 * v + 0.2 * noise(7)  # K, wet-bulb potential temperature

    p["p_ml"] = np.minimum(p["p_ml"], surface_pressure - 1.5 * SUPERADIABATIC_DEPTH)
    p["surface_altitude"] = surface_altitude
    p["surface_pressure"] = surface_pressure
    return p


# ---------------------------------------------------------------------------
# columns


def _free_atmosphere(pressure, t_break, p_break, n_low, n_up, p_trop):
    """Temperature (K) of the free atmosphere: two layers of constant lapse rate that
    meet at ``p_break`` (temperature ``t_break``), an isothermal layer above the
    tropopause and a slight warming above 150 hPa."""
    t_trop = t_break * (p_trop / p_break) ** n_up
    t = np.where(
        pressure >= p_break,
        t_break * (pressure / p_break) ** n_low,
        t_break * (pressure / p_break) ** n_up,
    )
    t = np.where(pressure < p_trop, t_trop, t)  # isothermal above the tropopause
    return np.where(pressure < 15000.0, t_trop * (pressure / 15000.0) ** -0.04, t)


def _free_humidity(pressure, temperature, rh_low, rh_up, p_break, p_trop):
    """Mixing ratio (kg/kg) of the free atmosphere from fractions of saturation."""
    frac = np.clip(np.log(p_break / pressure) / np.log(p_break / p_trop), 0.0, 1.0)
    rh = np.where(pressure >= p_break, rh_low, rh_low + (rh_up - rh_low) * frac)
    r = rh * saturation_mixing_ratio(temperature, pressure)
    r_trop = rh_up * saturation_mixing_ratio(
        _free_atmosphere_at_trop(temperature, pressure, p_trop), p_trop
    )
    r_strat = np.maximum(STRATOSPHERE_MIXING_RATIO, r_trop * (pressure / p_trop) ** 4)
    return np.where(pressure < p_trop, np.minimum(r, r_strat), r)


def _free_atmosphere_at_trop(temperature, pressure, p_trop):
    """Temperature at the tropopause, read from a column (K) on the fine grid."""
    index = np.argmin(np.abs(np.log(pressure / p_trop)), axis=-1)
    return np.take_along_axis(temperature, index[..., None], axis=-1)


def _band_temperature(ln_p, theta_w, n_up, p_trop):
    """Temperature (K) of the saturated band columns on their fine grids ``ln_p``.

    A pseudo-adiabat with wet-bulb potential temperature ``theta_w`` (K) from the
    surface to 300 hPa (RK4 in ln p, one step per fine interval), then the
    free-atmosphere lapse rate (exponent ``n_up``) to the tropopause ``p_trop`` (Pa)
    and the stratosphere above.
    """
    pres = np.exp(ln_p)
    t = theta_w.copy()  # at 1000 hPa; integrate to the surface first
    steps = 20
    d = (ln_p[:, 0] - math.log(REFERENCE_PRESSURE)) / steps
    for k in range(steps):
        t = _rk4_step(t, math.log(REFERENCE_PRESSURE) + k * d, d)
    p_top_sat = 30000.0
    j_top = np.argmin(np.abs(ln_p - math.log(p_top_sat)), axis=1)[:, None]
    out = np.empty_like(ln_p)
    out[:, 0] = t
    for j in range(int(j_top.max())):
        out[:, j + 1] = _rk4_step(out[:, j], ln_p[:, j], ln_p[:, j + 1] - ln_p[:, j])
    t_at = np.take_along_axis(out, j_top, axis=1)
    p_at = np.take_along_axis(pres, j_top, axis=1)
    t_above = t_at * (pres / p_at) ** n_up
    t_trop = t_at * (p_trop / p_at) ** n_up
    t_above = np.where(pres < p_trop, t_trop, t_above)
    t_above = np.where(pres < 15000.0, t_trop * (pres / 15000.0) ** -0.04, t_above)
    return np.where(pres >= p_at, out, t_above)


def build_columns(p: dict[str, np.ndarray]) -> dict[str, np.ndarray]:
    """Fine-resolution columns (points, FINE_POINTS) of the scenario parameters ``p``.

    Parameters
    ----------
    p : dict of ndarray
        Output of :func:`scenario_fields`, flattened to shape (points,).

    Returns
    -------
    dict of ndarray
        ``ln_p`` (ln Pa), ``temperature`` (K), ``mixing_ratio`` (kg/kg), ``height``
        (m, geopotential height) on the fine grid, each (points, FINE_POINTS),
        surface first.
    """
    ps = p["surface_pressure"][:, None]
    column = np.linspace(0.0, 1.0, FINE_POINTS)[None, :]
    ln_p = np.log(ps) + (math.log(FINE_TOP) - np.log(ps)) * column
    pres = np.exp(ln_p)

    def c(name):
        return p[name][:, None]

    n_low, n_up = _lapse_exponent(c("lapse_low")), _lapse_exponent(c("lapse_up"))
    fa = (c("t_break"), c("p_break"), n_low, n_up, c("p_trop"))
    t_fa = _free_atmosphere(pres, *fa)

    # boundary layer: superadiabatic surface layer, mixed layer, capping layer
    p_ml, cap_top = c("p_ml"), c("p_ml") - c("cap_depth")
    theta = c("theta_ml") + c("excess") * np.clip(1.0 - (ps - pres) / SUPERADIABATIC_DEPTH, 0, 1)
    t_ml = theta * (pres / REFERENCE_PRESSURE) ** KAPPA
    t_ml_top = c("theta_ml") * (p_ml / REFERENCE_PRESSURE) ** KAPPA
    t_cap_top = _free_atmosphere(cap_top, *fa)
    frac = np.clip(np.log(p_ml / pres) / np.log(p_ml / cap_top), 0.0, 1.0)
    t_env = np.where(
        pres >= p_ml,
        t_ml,
        np.where(pres >= cap_top, t_ml_top + (t_cap_top - t_ml_top) * frac, t_fa),
    )

    r_fa = _free_humidity(pres, t_fa, c("rh_low"), c("rh_up"), c("p_break"), c("p_trop"))
    r_cap_top = c("rh_low") * saturation_mixing_ratio(t_cap_top, cap_top)
    ln_r_cap = np.log(c("r_ml")) + (np.log(r_cap_top) - np.log(c("r_ml"))) * frac
    r_env = np.where(pres >= p_ml, c("r_ml"), np.where(pres >= cap_top, np.exp(ln_r_cap), r_fa))
    sat_env = r_env / saturation_mixing_ratio(t_env, pres)
    sat_env = np.minimum(sat_env, SAT_FRACTION_CAP)

    # the saturated column of the frontal band: a pseudo-adiabat from the surface
    # to 300 hPa, then the free-atmosphere lapse rate above
    t_band = t_env.copy()
    inside = np.flatnonzero(p["band"] > 0.0)
    if inside.size:
        t_band[inside] = _band_temperature(
            ln_p[inside], p["band_theta_w"][inside], n_up[inside], c("p_trop")[inside]
        )
    frac_sat = np.clip(np.log(40000.0 / pres) / np.log(40000.0 / 25000.0), 0.0, 1.0)
    sat_band = np.where(pres >= 40000.0, 1.0, 1.0 - 0.5 * frac_sat)

    w = c("band")
    temperature = w * t_band + (1.0 - w) * t_env
    sat = w * sat_band + (1.0 - w) * sat_env
    mixing_ratio = sat * saturation_mixing_ratio(temperature, pres)
    strat = pres < c("p_trop")
    mixing_ratio = np.where(strat, np.minimum(mixing_ratio, r_env), mixing_ratio)

    tv = temperature * (1.0 + mixing_ratio / EPSILON) / (1.0 + mixing_ratio)
    integrand = DRY_AIR_GAS_CONSTANT * tv / STANDARD_GRAVITY
    dz = -0.5 * (integrand[:, 1:] + integrand[:, :-1]) * np.diff(ln_p, axis=1)
    height = (
        np.concatenate([np.zeros_like(dz[:, :1]), np.cumsum(dz, axis=1)], axis=1)
        + p["surface_altitude"][:, None]
    )
    return {
        "ln_p": ln_p,
        "temperature": temperature,
        "mixing_ratio": mixing_ratio,
        "height": height,
    }


def sample_columns(columns: dict[str, np.ndarray], pressure: np.ndarray, names) -> dict:
    """Interpolate fine columns linearly in ln p to ``pressure`` (points, levels), Pa.

    Targets below the surface (beyond the first fine point) come back as NaN.
    """
    ln_p = columns["ln_p"]
    first, last = ln_p[:, :1], ln_p[:, -1:]
    spacing = (last - first) / (FINE_POINTS - 1)
    position = (np.log(pressure) - first) / spacing
    below = position < -1e-9
    position = np.clip(position, 0.0, FINE_POINTS - 1 - 1e-9)
    j = np.floor(position).astype(np.int64)
    f = position - j
    out = {}
    for name in names:
        data = columns[name]
        lo = np.take_along_axis(data, j, axis=1)
        hi = np.take_along_axis(data, j + 1, axis=1)
        value = lo + (hi - lo) * f
        out[name] = np.where(below, np.nan, value)
    return out


def _specific_humidity_float32(mixing_ratio, temperature32, pressure):
    """Specific humidity in float32, never above saturation at the stored temperature."""
    r_sat = saturation_mixing_ratio(temperature32.astype(np.float64), pressure)
    r = np.minimum(mixing_ratio, r_sat)
    q = r / (1.0 + r)
    q32 = q.astype(np.float32)
    return np.where(q32.astype(np.float64) > q, np.nextafter(q32, np.float32(0)), q32)


# ---------------------------------------------------------------------------
# the Lambert conformal conic grid (spherical; Snyder 1987, USGS Prof. Paper 1395)


def _lcc_constants():
    phi1, phi2 = np.deg2rad(LCC_STANDARD_PARALLELS)
    phi0 = np.deg2rad(LCC_ORIGIN[0])
    n = math.log(math.cos(phi1) / math.cos(phi2)) / math.log(
        math.tan(math.pi / 4 + phi2 / 2) / math.tan(math.pi / 4 + phi1 / 2)
    )
    big_f = math.cos(phi1) * math.tan(math.pi / 4 + phi1 / 2) ** n / n
    rho0 = EARTH_RADIUS * big_f / math.tan(math.pi / 4 + phi0 / 2) ** n
    return n, big_f, rho0


def lcc_to_latlon(x: np.ndarray, y: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Latitude and longitude (degrees) of projection coordinates x, y (m)."""
    n, big_f, rho0 = _lcc_constants()
    rho = np.hypot(x, rho0 - y)
    theta = np.arctan2(x, rho0 - y)
    lat = 2.0 * np.arctan((EARTH_RADIUS * big_f / rho) ** (1.0 / n)) - math.pi / 2
    lon = np.deg2rad(LCC_ORIGIN[1]) + theta / n
    return np.rad2deg(lat), np.rad2deg(lon)


def hybrid_coefficients() -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """ap (Pa) and b at half levels (N_HYBRID + 1) and full levels (N_HYBRID), top-down.

    p = ap + b ps. Half levels are equally spaced in eta**1.5 from 0.1 to 1, so they
    crowd towards the surface; b = ((eta - 0.2) / 0.8)**1.5 above eta = 0.2 and 0
    above, so the top levels are pure pressure levels.
    """
    eta_top = HYBRID_TOP / REFERENCE_PRESSURE
    g = np.linspace(0.0, 1.0, N_HYBRID + 1)
    eta = eta_top + (1.0 - eta_top) * (1.0 - (1.0 - g) ** 1.6)
    b_half = np.clip((eta - 0.2) / 0.8, 0.0, 1.0) ** 1.5
    ap_half = REFERENCE_PRESSURE * (eta - b_half)
    ap_half[-1], b_half[-1] = 0.0, 1.0
    ap_full = 0.5 * (ap_half[1:] + ap_half[:-1])
    b_full = 0.5 * (b_half[1:] + b_half[:-1])
    return ap_half, b_half, ap_full, b_full


# ---------------------------------------------------------------------------
# writing


def _global_attributes(title: str) -> dict[str, str]:
    return {
        "Conventions": "CF-1.8",
        "title": title,
        "source": "gridstab invented demo scenario",
        "comment": STORY,
        "history": f"written by sample_grids/make_samples.py (seed {SEED})",
    }


def _encoding(ds: xr.Dataset, masked: tuple[str, ...]) -> dict:
    """Compressed float32 fields (masked ones with ``_FillValue``); float64 coordinates."""
    enc = {}
    for name, var in ds.variables.items():
        if var.dtype.kind != "f":
            continue
        if var.dtype == np.float32:
            enc[name] = {"dtype": "float32", "zlib": True, "complevel": 6, "shuffle": True}
            enc[name]["_FillValue"] = FILL if name in masked else None
        else:
            enc[name] = {"dtype": "float64", "_FillValue": None}
    enc["time"] = {"dtype": "float64", "_FillValue": None}
    return enc


def _time_coordinate(hours) -> xr.DataArray:
    return xr.DataArray(
        np.asarray(hours, dtype=np.float64),
        dims="time",
        attrs={
            "standard_name": "time",
            "long_name": "time",
            "axis": "T",
            "units": TIME_UNITS,
            "calendar": "standard",
        },
    )


def make_pressure_level_dataset() -> xr.Dataset:
    """The pressure-level file as an in-memory Dataset."""
    lat2, lon2 = np.meshgrid(LATITUDES, LONGITUDES, indexing="ij")
    levels = np.asarray(PRESSURE_LEVELS_HPA, dtype=np.float64) * 100.0
    nt, ny, nx, nz = len(HOURS), lat2.shape[0], lat2.shape[1], levels.size
    shape3 = (nt, nz, ny, nx)
    temp = np.full(shape3, np.nan, np.float32)
    q = np.full(shape3, np.nan, np.float32)
    z = np.full(shape3, np.nan, np.float32)
    ps = np.empty((nt, ny, nx), np.float32)
    zs = None
    for step in range(nt):
        fields = scenario_fields(lat2, lon2, step)
        flat = {k: np.ravel(a) for k, a in fields.items()}
        cols = build_columns(flat)
        target = np.broadcast_to(levels, (flat["surface_pressure"].size, nz))
        s = sample_columns(cols, target, ("temperature", "mixing_ratio", "height"))
        t32 = s["temperature"].astype(np.float32)
        with np.errstate(invalid="ignore"):
            q32 = _specific_humidity_float32(s["mixing_ratio"], t32, target)
        q32 = np.where(np.isnan(t32), np.nan, q32).astype(np.float32)
        temp[step] = t32.T.reshape(nz, ny, nx)
        q[step] = q32.T.reshape(nz, ny, nx)
        z[step] = s["height"].astype(np.float32).T.reshape(nz, ny, nx)
        ps[step] = fields["surface_pressure"]
        zs = fields["surface_altitude"].astype(np.float32)

    dims3 = ("time", "plev", "lat", "lon")
    coords = {
        "time": _time_coordinate(HOURS),
        "plev": (
            "plev",
            levels,
            {
                "standard_name": "air_pressure",
                "long_name": "pressure",
                "units": "Pa",
                "positive": "down",
                "axis": "Z",
            },
        ),
        "lat": (
            "lat",
            LATITUDES,
            {
                "standard_name": "latitude",
                "long_name": "latitude",
                "units": "degrees_north",
                "axis": "Y",
            },
        ),
        "lon": (
            "lon",
            LONGITUDES,
            {
                "standard_name": "longitude",
                "long_name": "longitude",
                "units": "degrees_east",
                "axis": "X",
            },
        ),
    }
    data = {
        "temp": (
            dims3,
            temp,
            {"standard_name": "air_temperature", "long_name": "air temperature", "units": "K"},
        ),
        "spec_hum": (
            dims3,
            q,
            {
                "standard_name": "specific_humidity",
                "long_name": "specific humidity",
                "units": "kg kg-1",
            },
        ),
        "geo_height": (
            dims3,
            z,
            {
                "standard_name": "geopotential_height",
                "long_name": "geopotential height",
                "units": "m",
            },
        ),
        "sfc_pressure": (
            ("time", "lat", "lon"),
            ps,
            {
                "standard_name": "surface_air_pressure",
                "long_name": "surface pressure",
                "units": "Pa",
            },
        ),
        "sfc_height": (
            ("lat", "lon"),
            zs,
            {"standard_name": "surface_altitude", "long_name": "terrain height", "units": "m"},
        ),
    }
    ds = xr.Dataset(data, coords=coords)
    ds.attrs = _global_attributes("gridstab demo forecast on pressure levels (invented)")
    return ds


def make_hybrid_dataset() -> xr.Dataset:
    """The hybrid-level file as an in-memory Dataset."""
    ny, nx = LCC_SHAPE
    x = (np.arange(nx) - (nx - 1) / 2.0) * LCC_SPACING
    y = (np.arange(ny) - (ny - 1) / 2.0) * LCC_SPACING
    x2, y2 = np.meshgrid(x, y)
    lat2, lon2 = lcc_to_latlon(x2, y2)
    ap_half, b_half, ap_full, b_full = hybrid_coefficients()
    nt = len(HYBRID_STEPS)
    ta = np.empty((nt, N_HYBRID, ny, nx), np.float32)
    hur = np.empty((nt, N_HYBRID, ny, nx), np.float32)
    ps = np.empty((nt, ny, nx), np.float32)
    zs = None
    for i, step in enumerate(HYBRID_STEPS):
        fields = scenario_fields(lat2, lon2, step)
        flat = {k: np.ravel(a) for k, a in fields.items()}
        cols = build_columns(flat)
        fine_p = np.exp(cols["ln_p"])
        cols["rh"] = relative_humidity_from_mixing_ratio(
            cols["mixing_ratio"], cols["temperature"], fine_p
        )
        ps32 = fields["surface_pressure"].astype(np.float32)
        target = ap_full[None, :] + b_full[None, :] * np.ravel(ps32).astype(np.float64)[:, None]
        s = sample_columns(cols, target, ("temperature", "rh"))
        ta[i] = s["temperature"].astype(np.float32).T.reshape(N_HYBRID, ny, nx)
        rh = np.minimum(s["rh"], 1.0) * 100.0
        hur[i] = rh.astype(np.float32).T.reshape(N_HYBRID, ny, nx)
        ps[i] = ps32
        zs = fields["surface_altitude"]

    dims3 = ("time", "lev", "y", "x")
    grid = {"grid_mapping": "lambert"}
    eta_full = ap_full / REFERENCE_PRESSURE + b_full
    coords = {
        "time": _time_coordinate([HOURS[s] for s in HYBRID_STEPS]),
        "lev": (
            "lev",
            eta_full,
            {
                "standard_name": "atmosphere_hybrid_sigma_pressure_coordinate",
                "long_name": "hybrid sigma-pressure level",
                "units": "1",
                "positive": "down",
                "axis": "Z",
                "formula_terms": "ap: ap b: b ps: ps",
            },
        ),
        "y": (
            "y",
            y,
            {
                "standard_name": "projection_y_coordinate",
                "long_name": "y",
                "units": "m",
                "axis": "Y",
            },
        ),
        "x": (
            "x",
            x,
            {
                "standard_name": "projection_x_coordinate",
                "long_name": "x",
                "units": "m",
                "axis": "X",
            },
        ),
        "lat": (
            ("y", "x"),
            lat2,
            {"standard_name": "latitude", "long_name": "latitude", "units": "degrees_north"},
        ),
        "lon": (
            ("y", "x"),
            lon2,
            {"standard_name": "longitude", "long_name": "longitude", "units": "degrees_east"},
        ),
    }
    data = {
        "ap": (
            "lev",
            ap_full,
            {"long_name": "hybrid coefficient ap at full levels", "units": "Pa"},
        ),
        "b": ("lev", b_full, {"long_name": "hybrid coefficient b at full levels", "units": "1"}),
        "ap_bnds": (
            ("lev", "bnds"),
            np.stack([ap_half[:-1], ap_half[1:]], axis=1),
            {"long_name": "hybrid coefficient ap at half levels", "units": "Pa"},
        ),
        "b_bnds": (
            ("lev", "bnds"),
            np.stack([b_half[:-1], b_half[1:]], axis=1),
            {"long_name": "hybrid coefficient b at half levels", "units": "1"},
        ),
        "tk": (
            dims3,
            ta,
            {"standard_name": "air_temperature", "long_name": "temperature", "units": "K", **grid},
        ),
        "rh_pct": (
            dims3,
            hur,
            {
                "standard_name": "relative_humidity",
                "long_name": "relative humidity over liquid water",
                "units": "%",
                **grid,
            },
        ),
        "ps": (
            ("time", "y", "x"),
            ps,
            {
                "standard_name": "surface_air_pressure",
                "long_name": "surface pressure",
                "units": "Pa",
                **grid,
            },
        ),
        "phis": (
            ("y", "x"),
            (STANDARD_GRAVITY * zs).astype(np.float32),
            {
                "standard_name": "surface_geopotential",
                "long_name": "surface geopotential",
                "units": "m2 s-2",
                **grid,
            },
        ),
        "lambert": (
            (),
            np.int32(0),
            {
                "grid_mapping_name": "lambert_conformal_conic",
                "standard_parallel": np.asarray(LCC_STANDARD_PARALLELS),
                "longitude_of_central_meridian": LCC_ORIGIN[1],
                "latitude_of_projection_origin": LCC_ORIGIN[0],
                "false_easting": 0.0,
                "false_northing": 0.0,
                "earth_radius": EARTH_RADIUS,
            },
        ),
    }
    ds = xr.Dataset(data, coords=coords)
    ds.attrs = _global_attributes("gridstab demo forecast on hybrid model levels (invented)")
    return ds


def write_samples(output_dir: Path) -> list[Path]:
    """Build both demo files and write them into ``output_dir``; return their paths."""
    output_dir = Path(output_dir)
    output_dir.mkdir(parents=True, exist_ok=True)
    written = []
    for name, ds, masked in (
        (PLEV_FILE, make_pressure_level_dataset(), ("temp", "spec_hum", "geo_height")),
        (HYBRID_FILE, make_hybrid_dataset(), ()),
    ):
        path = output_dir / name
        tmp = path.with_suffix(".nc.tmp")
        ds.to_netcdf(tmp, engine="netcdf4", format="NETCDF4", encoding=_encoding(ds, masked))
        tmp.replace(path)
        written.append(path)
    return written


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(
        description="Write gridstab's invented demo model output (not a real event)."
    )
    parser.add_argument(
        "output_dir",
        nargs="?",
        default=str(Path(__file__).resolve().parent),
        help="folder to write into (default: the folder of this script)",
    )
    args = parser.parse_args(argv)
    for path in write_samples(Path(args.output_dir)):
        print(f"wrote {path} ({path.stat().st_size / 1e6:.2f} MB)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
