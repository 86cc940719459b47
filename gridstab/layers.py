"""Column kernels for layers: lapse rates, theta/theta_e/theta_es gradients and classes.

All functions are compiled, pure and work on one compacted column: arrays ordered
bottom-up (pressure decreasing), with no missing levels (see ``gridstab.columns``).
Units: K, Pa, m, K/m.

Classes
-------
For a layer between two levels, with T the layer-mean temperature,

* departure from the dry adiabat, Gamma_d' - Gamma = T d(ln theta)/dz, where Gamma_d'
  = g T/(cpd Tv) is the lapse rate of a layer of constant theta (slightly below g/cpd
  in moist air, because density depends on virtual temperature);
* departure from the moist adiabat, Gamma_m' - Gamma = T d(ln theta_es)/dz / A, with
  A = d(ln theta_es)/d(ln T) at constant p, approximated by 1 + X (T d(ln e_s)/dT - 1),
  X = theta_es/theta - 1 ~ Lv r_s/(cpd T) (from theta_es ~ theta exp(Lv r_s/(cpd T))),
  d(ln e_s)/dT that of gridstab's saturation curve, and d(ln theta_es) by
  d(theta_es)/theta_es with the layer-mean theta_es. The sign of the departure is that
  of d(theta_es)/dz; A only scales the moist-neutral band.
* where theta_es is not defined at an end of the layer (warm air at very low pressure,
  above a few hPa, see ``gridstab.adiabats.SATURATION_LIMIT``), the departure from the
  moist adiabat is Gamma_m - Gamma with the saturated lapse rate Gamma_m at the layer's
  mean temperature and pressure, where saturation is possible (e_s < p); where it is
  not, the layer is classed against the dry adiabat alone: an inversion or any lapse
  rate below the dry adiabat's is absolutely stable. A layer with a lapse rate is
  never left unclassified.

With neutral bands b_d and b_m (K/m):

====  =======================  ==========================================
code  class                    condition
====  =======================  ==========================================
4     absolutely unstable      Gamma - Gamma_d' > b_d
3     dry neutral              |Gamma - Gamma_d'| <= b_d
2     conditionally unstable   Gamma_m' + b_m < Gamma < Gamma_d' - b_d
1     moist neutral            |Gamma - Gamma_m'| <= b_m
0     absolutely stable        Gamma < Gamma_m' - b_m
-1    missing                  temperature or height missing
====  =======================  ==========================================

The differences are taken between the layer's end values, so for a thick layer the
class says whether its top is warmer or colder than a dry or saturated parcel lifted
from its bottom. Potential (convective) instability is d(theta_e)/dz < 0.
"""

from __future__ import annotations

import math

import numba

from gridstab.constants import KAPPA, REFERENCE_PRESSURE
from gridstab.moisture import ln_saturation_vapour_pressure_scalar
from gridstab.thermo import saturated_lapse_rate_scalar

ABSOLUTELY_STABLE = 0
MOIST_NEUTRAL = 1
CONDITIONALLY_UNSTABLE = 2
DRY_NEUTRAL = 3
ABSOLUTELY_UNSTABLE = 4
MISSING_CLASS = -1
CLASS_MEANINGS = (
    "absolutely_stable",
    "moist_neutral",
    "conditionally_unstable",
    "dry_neutral",
    "absolutely_unstable",
)

LAYER_FIELDS = (
    "lapse_rate",
    "dtheta_dz",
    "dthetae_dz",
    "dthetaes_dz",
    "stability_class",
    "potential_instability",
)
"""What :func:`layer_diagnostics` returns, in order."""


@numba.njit(cache=True, nogil=True)
def classify(dry_departure, moist_departure, dry_band, moist_band):
    """Stability class code from the departures (K/m) from the dry and moist adiabats."""
    if not math.isfinite(dry_departure):
        return MISSING_CLASS
    if dry_departure < -dry_band:
        return ABSOLUTELY_UNSTABLE
    if dry_departure <= dry_band:
        return DRY_NEUTRAL
    if not math.isfinite(moist_departure):
        return ABSOLUTELY_STABLE  # saturation impossible: stable against the dry adiabat
    if moist_departure < -moist_band:
        return CONDITIONALLY_UNSTABLE
    if moist_departure <= moist_band:
        return MOIST_NEUTRAL
    return ABSOLUTELY_STABLE


@numba.njit(cache=True, nogil=True)
def layer_diagnostics(
    t_bottom, theta_bottom, ln_theta_bottom, theta_e_bottom, theta_es_bottom, z_bottom,
    t_top, theta_top, ln_theta_top, theta_e_top, theta_es_top, z_top,
    dry_band, moist_band,
):
    """Gradients and class of the layer between two levels.

    Parameters
    ----------
    t_* : float
        Temperature at the layer's bottom and top, K.
    theta_*, ln_theta_* : float
        theta (K) and ln(theta / K) there.
    theta_e_*, theta_es_* : float
        theta_e and theta_es there, K (NaN where undefined).
    z_* : float
        Heights, m.
    dry_band, moist_band : float
        Half-widths of the dry- and moist-neutral bands, K/m.

    Returns
    -------
    tuple of 6 floats
        Lapse rate -dT/dz (K/m), d(theta)/dz, d(theta_e)/dz, d(theta_es)/dz (K/m),
        class code (see the module docstring) and potential-instability flag
        (1 where d(theta_e)/dz < 0, 0 otherwise, -1 missing), as floats.
    """
    dz = z_top - z_bottom
    if not dz > 0.0:
        return math.nan, math.nan, math.nan, math.nan, -1.0, -1.0
    lapse_rate = -(t_top - t_bottom) / dz
    dtheta = (theta_top - theta_bottom) / dz
    dthetae = (theta_e_top - theta_e_bottom) / dz
    dthetaes = (theta_es_top - theta_es_bottom) / dz
    t_mean = 0.5 * (t_bottom + t_top)
    dry_departure = t_mean * (ln_theta_top - ln_theta_bottom) / dz
    # ln(theta_es/theta) ~ Lv r_s/(cpd T), and theta_es ~ theta_es_bottom + dthetaes dz
    if math.isfinite(dthetaes):
        theta_es_mean = 0.5 * (theta_es_bottom + theta_es_top)
        theta_mean = 0.5 * (theta_bottom + theta_top)
        excess = theta_es_mean / theta_mean - 1.0
        slope = ln_saturation_vapour_pressure_scalar(t_mean)[1]
        sensitivity = 1.0 + excess * (t_mean * slope - 1.0)
        moist_departure = t_mean * dthetaes / theta_es_mean / sensitivity
    else:
        # theta_es undefined: the saturated lapse rate itself at the layer's middle
        p_mean = REFERENCE_PRESSURE * (t_mean / (0.5 * (theta_bottom + theta_top))) ** (
            1.0 / KAPPA
        )
        moist_departure = saturated_lapse_rate_scalar(t_mean, p_mean) - lapse_rate
    code = classify(dry_departure, moist_departure, dry_band, moist_band)
    if math.isfinite(dthetae):
        instability = 1.0 if dthetae < 0.0 else 0.0
    else:
        instability = -1.0
    return lapse_rate, dtheta, dthetae, dthetaes, float(code), instability
