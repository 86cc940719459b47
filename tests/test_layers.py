"""Layer gradients and stability classes on idealised soundings with known answers."""

from __future__ import annotations

import numpy as np
import pytest
import reference

from gridstab import moisture, thermo
from gridstab.columns import ColumnOptions, diagnose_columns
from gridstab.layers import (
    ABSOLUTELY_STABLE,
    ABSOLUTELY_UNSTABLE,
    CONDITIONALLY_UNSTABLE,
    DRY_NEUTRAL,
    MOIST_NEUTRAL,
)

LEVELS = np.arange(100000.0, 19999.0, -2500.0)


def classes(p, t, r, **kwargs):
    out = diagnose_columns(p[None], t[None], r[None], **kwargs)
    return out["layer_stability_class"][0], out


def test_saturated_pseudo_adiabat_is_moist_neutral_everywhere():
    # A saturated sounding along one pseudo-adiabat (Bryan and Fritsch 2002) has
    # d(theta_es)/dz = 0: moist neutral in every layer (definition).
    p, t, r = reference.moist_adiabatic_sounding(LEVELS, 295.0)
    layer_class, out = classes(p, t, r)
    assert np.all(layer_class == MOIST_NEUTRAL)
    assert np.nanmax(np.abs(out["layer_dthetaes_dz"][0])) < 1e-5  # K/m
    assert out["stability_class_low3km"][0] == MOIST_NEUTRAL
    assert out["stability_class_850_500"][0] == MOIST_NEUTRAL


def test_dry_adiabatic_layer_is_on_the_absolutely_unstable_boundary():
    # constant theta: d(theta)/dz = 0, the boundary of absolute instability; with the
    # neutral band it is dry neutral, and any warming of the bottom makes it unstable
    theta = 300.0
    t = theta * (LEVELS / 1e5) ** (287.04 / 1005.7)
    r = np.full(LEVELS.shape, 1e-4)
    layer_class, out = classes(LEVELS, t, r)
    assert np.all(layer_class == DRY_NEUTRAL)
    assert np.nanmax(np.abs(out["layer_dtheta_dz"][0])) < 1e-9
    warmer = t.copy()
    warmer[0] += 1.0
    layer_class, _ = classes(LEVELS, warmer, r)
    assert layer_class[0] == ABSOLUTELY_UNSTABLE


def test_constant_theta_in_moist_air_has_lapse_rate_below_g_over_cp():
    # Because density depends on virtual temperature, a layer of constant theta in
    # moist air has a lapse rate slightly below g/cpd (project physics notes), and it is
    # still dry neutral.
    t = 300.0 * (LEVELS / 1e5) ** (287.04 / 1005.7)
    r = 0.8 * moisture.saturation_mixing_ratio(t, LEVELS)
    r = np.minimum(r, 0.015)
    layer_class, out = classes(LEVELS, t, r)
    lapse = out["layer_lapse_rate"][0]
    dry = thermo.dry_adiabatic_lapse_rate()
    assert np.all(lapse < dry)
    assert lapse[0] == pytest.approx(dry * t[0] / thermo.virtual_temperature(t[0], r[0]), rel=2e-3)
    assert np.all(layer_class == DRY_NEUTRAL)


def test_isothermal_layer_is_absolutely_stable():
    t = np.full(LEVELS.shape, 260.0)
    r = np.full(LEVELS.shape, 1e-3)
    layer_class, out = classes(LEVELS, t, r)
    assert np.all(layer_class == ABSOLUTELY_STABLE)
    np.testing.assert_allclose(out["layer_lapse_rate"][0], 0.0, atol=1e-12)


def test_lapse_rate_between_moist_and_dry_is_conditionally_unstable():
    # a 7 K/km layer in warm air lies between the moist (~4-5 K/km) and dry (9.8 K/km)
    # adiabats (common practice)
    z = np.arange(0.0, 3001.0, 250.0)
    t = 300.0 - 0.007 * z
    r = np.full(z.shape, 0.01)
    tv = t * (1 + r / 0.622) / (1 + r)
    p = 1e5 * np.exp(-np.concatenate([[0], np.cumsum(9.80665 / 287.04 / (0.5 * (tv[1:] + tv[:-1])) * np.diff(z))]))
    layer_class, out = classes(p, t, r, height=z[None])
    assert np.all(layer_class == CONDITIONALLY_UNSTABLE)
    np.testing.assert_allclose(out["layer_lapse_rate"][0], 0.007, rtol=1e-9)
    assert out["stability_class_low3km"][0] == CONDITIONALLY_UNSTABLE
    np.testing.assert_allclose(out["lapse_rate_low3km"][0], 0.007, rtol=1e-6)


def test_potential_instability_flag():
    # theta_e decreasing with height (moist below, dry above) is potentially unstable
    p = np.array([100000.0, 90000.0, 80000.0])
    t = np.array([300.0, 292.0, 284.0])
    r = np.array([0.018, 0.004, 0.002])
    out = diagnose_columns(p[None], t[None], r[None])
    assert np.all(out["layer_potential_instability"][0] == 1)
    assert np.all(out["layer_dthetae_dz"][0] < 0)


def test_neutral_bands_are_configurable():
    # a lapse rate 0.5 K/km below the dry adiabat: dry neutral with a 1 K/km band,
    # conditionally unstable with the default 0.3 K/km band
    z = np.arange(0.0, 2001.0, 500.0)
    p = 1e5 * np.exp(-z / 8400.0)
    t = 300.0 - (thermo.dry_adiabatic_lapse_rate() - 0.0005) * z
    r = np.full(z.shape, 1e-4)
    wide, _ = classes(p, t, r, height=z[None], options=ColumnOptions(dry_neutral_band_k_per_km=1.0))
    narrow, _ = classes(p, t, r, height=z[None])
    assert np.all(wide == DRY_NEUTRAL)
    assert np.all(narrow == CONDITIONALLY_UNSTABLE)


def test_thick_layer_missing_where_850_is_below_ground():
    p = np.arange(80000.0, 19999.0, -5000.0)
    t = 285.0 - 0.0065 * (-7400 * np.log(p / 8e4))
    r = np.full(p.shape, 1e-3)
    out = diagnose_columns(p[None], t[None], r[None])
    assert out["stability_class_850_500"][0] == -1
    assert np.isnan(out["lapse_rate_850_500"][0])
    assert out["stability_class_low3km"][0] != -1


def test_layers_above_the_theta_es_range_are_classified():
    # Up to 1 hPa, a warm stratosphere (temperature rising with height: an inversion,
    # absolutely stable by definition) where e_s exceeds the reporting limit: every layer
    # with a lapse rate has a class, none is left missing.
    p = np.array([100000, 85000, 70000, 50000, 30000, 20000, 10000, 5000, 2000, 1000, 500,
                  300, 200, 100], float)
    z = -7000.0 * np.log(p / 1e5)
    t = np.where(z < 11000, 288.0 - 6.5e-3 * z, 216.0 + 1.5e-3 * np.maximum(z - 20000, 0))
    r = np.where(p > 30000, 0.004 * (p / 1e5) ** 3, 3e-6)
    cls, out = classes(p, t, r)
    assert np.all(cls >= 0), cls
    top = p[1:] <= 2000.0  # layers whose top is at or above 20 hPa: all inversions
    assert np.all(cls[top] == ABSOLUTELY_STABLE)
    assert np.isnan(out["theta_es"][0][-1])  # theta_es itself is not reported at 1 hPa


def test_warm_layer_beyond_the_theta_es_range_uses_the_saturated_lapse_rate():
    # 50 degC at 1000 hPa is beyond theta_es's reporting limit; a layer there whose lapse
    # rate lies between the saturated one (about 3 K/km, AMS Glossary form through the
    # reference's pseudo-adiabat) and the dry one is conditionally unstable, one below
    # it absolutely stable.
    p = np.array([100000.0, 99000.0])
    r = np.array([0.01, 0.01])
    rs = reference.rsat(323.15, 99500.0)
    dlnp_dz = -reference.G * (1 + rs) / (reference.RD * 323.15 * (1 + rs / reference.EPS))
    gamma_m = -reference.pseudo_slope(np.log(99500.0), [323.15])[0] * dlnp_dz
    dz = reference.RD * 323.0 / reference.G * np.log(100000.0 / 99000.0)
    for lapse, expected in ((gamma_m + 3e-3, CONDITIONALLY_UNSTABLE),
                            (gamma_m - 1.5e-3, ABSOLUTELY_STABLE)):
        t = np.array([323.6, 323.6 - lapse * dz])
        cls, out = classes(p, t, r)
        assert np.isnan(out["theta_es"][0][0])
        assert cls[0] == expected, (lapse, cls)
