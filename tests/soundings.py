"""Physical test soundings built in the tests (invented profiles, not real events)."""

from __future__ import annotations

import numpy as np

from gridstab import moisture

STANDARD_LEVELS = np.array(
    [1000, 975, 950, 925, 900, 875, 850, 825, 800, 775, 750, 700, 650, 600, 550, 500, 450,
     400, 350, 300, 250, 225, 200, 175, 150, 125, 100, 70, 50, 30, 20, 10, 7, 5, 3, 2, 1],
    dtype=float,
) * 100.0
"""37 pressure levels from 1000 to 1 hPa, Pa."""


def layered_sounding(rng, levels=STANDARD_LEVELS, *, inversion=True):
    """A random but physical sounding: (pressure, temperature, mixing ratio), bottom-up.

    Surface temperature 285-312 K, a boundary layer, an optional capping inversion,
    a tropospheric lapse rate between moist and dry, a tropopause near 200 hPa, an
    isothermal-to-warming stratosphere, relative humidity decreasing with height and
    never above 100 %.
    """
    p = np.asarray(levels, float)
    z = -7400.0 * np.log(p / 1e5)  # rough heights for shaping the profile only
    t_sfc = rng.uniform(285.0, 312.0)
    lapse = rng.uniform(5.5e-3, 8.8e-3)
    t = t_sfc - lapse * z
    bl_top = rng.uniform(500.0, 2500.0)
    t = np.where(z < bl_top, t_sfc - rng.uniform(7e-3, 9.8e-3) * z, t)
    if inversion:
        strength = rng.uniform(0.0, 4.0)
        t = np.where(z >= bl_top, t + strength * np.clip((z - bl_top) / 300.0, 0, 1), t)
    t_tropopause = rng.uniform(205.0, 222.0)
    z_trop = (t_sfc - t_tropopause) / lapse
    t = np.where(z > z_trop, t_tropopause + 1.5e-3 * np.maximum(z - z_trop - 5000.0, 0), t)
    t = np.maximum(t, 190.0)
    rh_sfc = rng.uniform(0.35, 0.95)
    rh = np.clip(rh_sfc * np.exp(-z / rng.uniform(3000.0, 9000.0)), 0.02, 1.0)
    rh = np.where(z < bl_top, rh_sfc, rh)
    r = moisture.mixing_ratio_from_relative_humidity(rh, t, p)
    r = np.where(p < 15000.0, np.minimum(r, 5e-6), r)
    return p, t, r
