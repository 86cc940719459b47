"""Physical test soundings built in the tests (invented profiles, not real events)."""

from __future__ import annotations

import functools

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


@functools.lru_cache(maxsize=2)
def standard_soundings(levels=tuple(STANDARD_LEVELS)):
    """The standard test soundings of the accuracy goals: name -> (p, T, r), bottom-up.

    * ``wk14``, ``wk16``: the Weisman and Klemp (1982, Mon. Wea. Rev. 110, 504-520)
      analytic sounding with 14 and 16 g/kg in the boundary layer;
    * ``capped``: ``wk14`` with a capping inversion of 4 K centred at 850 hPa (invented);
    * ``elevated``: ``wk14`` over a cold, stable layer 120 hPa deep (10 K colder at the
      ground, drier): the most unstable air lies above it (invented);
    * ``dry_mixed``: a deep dry-adiabatic mixed layer (theta 314 K, 7 g/kg) up to
      620 hPa under a conditionally unstable free troposphere (invented).
    """
    import reference  # tests/reference.py, imported lazily: it is slow to set up

    levels = np.asarray(levels, float)
    out = {}
    for name, r_bl in (("wk14", 0.014), ("wk16", 0.016)):
        p, t, r, _ = reference.weisman_klemp_sounding(levels, surface_mixing_ratio=r_bl)
        out[name] = (p, t, r)
    p, t, r = out["wk14"]
    bump = np.clip(1.0 - np.abs(np.log(p / 85000.0)) / np.log(90000.0 / 85000.0), 0.0, 1.0)
    out["capped"] = (p, t + 4.0 * bump, r)
    depth = np.clip((p - 88000.0) / 12000.0, 0.0, 1.0)
    t_cold = t - 10.0 * depth
    r_cold = np.minimum(r, 0.6 * np.array([reference.rsat(a, b) for a, b in zip(t_cold, p)]))
    out["elevated"] = (p, t_cold, np.where(depth > 0, r_cold, r))
    z = -7400.0 * np.log(p / 1e5)
    theta = np.where(p >= 62000.0, 314.0, 314.0 + 3.5e-3 * (z - (-7400.0 * np.log(0.62))))
    t_dry = theta * (p / 1e5) ** reference.KAPPA
    rh = np.clip(0.55 * np.exp(-(z - 3500.0) / 6000.0), 0.03, 0.9)
    r_free = rh * np.array([reference.rsat(a, b) for a, b in zip(t_dry, p)])
    r_dry = np.where(p >= 62000.0, 0.007, np.minimum(r_free, 0.007))
    r_dry = np.where(p < 15000.0, np.minimum(r_dry, 5e-6), r_dry)
    out["dry_mixed"] = (p, t_dry, r_dry)
    return out
