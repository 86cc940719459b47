"""Properties of diagnose_columns on random physical columns (hypothesis)."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from soundings import layered_sounding

from gridstab import moisture
from gridstab.columns import OUTPUTS, diagnose_columns

SETTINGS = settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])


def batch(seed, count=6):
    rng = np.random.default_rng(seed)
    columns = [layered_sounding(rng, inversion=bool(rng.integers(2))) for _ in range(count)]
    p = np.stack([c[0] for c in columns])
    t = np.stack([c[1] for c in columns])
    r = np.stack([c[2] for c in columns])
    return p, t, r


def same(a, b, **kwargs):
    if a.dtype.kind == "i":
        np.testing.assert_array_equal(a, b)
    else:
        np.testing.assert_allclose(a, b, equal_nan=True, **kwargs)


@SETTINGS
@given(st.integers(0, 2**31 - 1))
def test_physical_invariants(seed):
    p, t, r = batch(seed)
    out = diagnose_columns(p, t, r)
    for parcel in ("sb", "ml", "mu"):
        cape = out[f"cape_{parcel}"]
        cin = out[f"cin_{parcel}"]
        assert np.all(cape >= 0)
        assert np.all(np.isnan(cin) | (cin <= 0))
        origin = out[f"parcel_pressure_{parcel}"]
        lcl = out[f"lcl_pressure_{parcel}"]
        assert np.all(lcl <= origin + 1e-6)
        lfc = out[f"lfc_pressure_{parcel}"]
        el = out[f"el_pressure_{parcel}"]
        has = np.isfinite(lfc)
        assert np.all(lfc[has] <= lcl[has] + 1e-6)
        assert np.all(el[has] <= lfc[has] + 1e-6)
        assert np.all(np.isnan(cin[~has]))
    assert np.all(out["theta_e"] >= out["theta"] - 1e-9)
    assert np.all(np.isnan(out["theta_es"]) | (out["theta_es"] >= out["theta_e"] - 1e-6))


@SETTINGS
@given(st.integers(0, 2**31 - 1))
def test_level_order_does_not_matter(seed):
    p, t, r = batch(seed)
    forward = diagnose_columns(p, t, r)
    backward = diagnose_columns(p[:, ::-1], t[:, ::-1], r[:, ::-1])
    for name, kind in OUTPUTS.items():
        a, b = forward[name], backward[name]
        if kind == "level":
            b = b[:, ::-1]
        elif kind == "layer":
            b = b[:, ::-1]
        same(a, b, rtol=1e-12, atol=1e-12)


@SETTINGS
@given(st.integers(0, 2**31 - 1))
def test_float32_close_to_float64(seed):
    p, t, r = batch(seed)
    double = diagnose_columns(p, t, r)
    single = diagnose_columns(p.astype(np.float32), t.astype(np.float32), r.astype(np.float32))
    assert single["cape_sb"].dtype == np.float32
    # float32 inputs carry about 1e-5 K of rounding; CAPE agrees to 0.1 % or 1 J/kg
    cape64, cape32 = double["cape_mu"], single["cape_mu"].astype(float)
    assert np.all(np.abs(cape64 - cape32) <= np.maximum(1e-3 * cape64, 1.0))
    np.testing.assert_allclose(single["theta_e"], double["theta_e"], rtol=1e-5, equal_nan=True)


@SETTINGS
@given(st.integers(0, 2**31 - 1), st.data())
def test_missing_levels_never_leak_into_other_columns(seed, data):
    p, t, r = batch(seed, count=5)
    alone = [diagnose_columns(p[i : i + 1], t[i : i + 1], r[i : i + 1]) for i in range(5)]
    victim = data.draw(st.integers(0, 4))
    t_bad = t.copy()
    holes = data.draw(st.lists(st.integers(0, t.shape[1] - 1), min_size=1, max_size=10))
    t_bad[victim, holes] = np.nan
    together = diagnose_columns(p, t_bad, r)
    for i in range(5):
        if i == victim:
            continue
        for name in OUTPUTS:
            same(together[name][i], alone[i][name][0], rtol=0, atol=0)


def test_all_missing_column_gives_missing_results():
    p, t, r = batch(0, count=3)
    t[1] = np.nan
    out = diagnose_columns(p, t, r)
    for name, kind in OUTPUTS.items():
        value = out[name][1]
        if value.dtype.kind == "i":
            assert np.all(value == -1)
        else:
            assert np.all(np.isnan(value)), name
    assert np.isfinite(out["cape_sb"][0]) and np.isfinite(out["cape_sb"][2])


def test_levels_below_surface_are_skipped():
    p, t, r = batch(1, count=1)
    surface = np.array([96000.0])
    out = diagnose_columns(p, t, r, surface_pressure=surface)
    below = p[0] > surface[0]
    assert np.all(np.isnan(out["theta"][0][below]))
    # the same column with the below-ground levels removed gives the same parcels
    cut = diagnose_columns(p[:, ~below], t[:, ~below], r[:, ~below], surface_pressure=surface)
    for name in ("cape_sb", "cin_sb", "cape_mu", "lcl_pressure_ml", "cape_ml"):
        same(out[name], cut[name], rtol=1e-12)


def test_negative_humidity_is_floored():
    p, t, r = batch(2, count=1)
    r = r.copy()
    r[0, 20:] = -1e-6
    out = diagnose_columns(p, t, r)
    assert np.all(np.isfinite(out["theta_e"][0]))


def test_given_heights_are_used():
    p, t, r = batch(4, count=1)
    from gridstab.thermo import hypsometric_heights

    z = hypsometric_heights(p, t, r, bottom_height=500.0)
    with_z = diagnose_columns(p, t, r, height=z)
    without = diagnose_columns(p, t, r)
    # heights above ground are the same whichever way they were obtained
    np.testing.assert_allclose(with_z["lcl_height_sb"], without["lcl_height_sb"], rtol=1e-9)
    assert with_z["lcl_height_sb"][0] > 0


def test_shapes():
    p, t, r = batch(5, count=4)
    out = diagnose_columns(p, t, r)
    nlev = p.shape[1]
    for name, kind in OUTPUTS.items():
        expected = {"column": (4,), "level": (4, nlev), "layer": (4, nlev - 1)}[kind]
        assert out[name].shape == expected, name
    with pytest.raises(ValueError, match="pressure has shape"):
        diagnose_columns(p[:, :-1], t, r)


def test_parcels_start_at_the_lowest_level_when_data_are_missing_far_above_ground():
    # masked garbage between the surface and 700 hPa: the parcels' layers start at the
    # lowest valid level, and the most-unstable parcel is still found
    p, t, r = batch(6, count=1)
    t = t.copy()
    t[0, p[0] > 70000.0] = np.nan
    out = diagnose_columns(p, t, r, surface_pressure=np.array([100500.0]))
    assert out["parcel_pressure_mu"][0] <= 70000.0
    assert out["parcel_pressure_ml"][0] == 70000.0
    assert np.isfinite(out["cape_ml"][0])


def test_supersaturated_levels_have_the_theta_e_of_saturated_air():
    # Supersaturated model air is saturated air plus condensate (project physics notes):
    # the level's theta_e is its theta_es, so the most-unstable choice and the
    # potential-instability flag agree with the lifted parcel, which drops the excess.
    p, t, r = batch(7, count=1)
    saturated = moisture.saturation_mixing_ratio(t[0, :4], p[0, :4])
    wet = r.copy()
    wet[0, :4] = 1.11 * saturated  # 11 % supersaturated, as seen in real model output
    at_saturation = r.copy()
    at_saturation[0, :4] = saturated
    out = diagnose_columns(p, t, wet)
    np.testing.assert_allclose(out["theta_e"][0, :4], out["theta_es"][0, :4], rtol=1e-12)
    ref = diagnose_columns(p, t, at_saturation)
    np.testing.assert_allclose(out["theta_e"][0, :4], ref["theta_e"][0, :4], atol=0.01)
    assert out["parcel_pressure_mu"][0] == ref["parcel_pressure_mu"][0]
    assert out["cape_mu"][0] == pytest.approx(ref["cape_mu"][0], rel=0.01)


def test_shared_pressure_levels_give_identical_results():
    # pressure levels given once (1-D, as the engine passes pressure-level data) or
    # repeated for every column: the same numbers, bit for bit
    p, t, r = batch(8, count=5)
    shared = diagnose_columns(p[0], t, r)
    repeated = diagnose_columns(np.ascontiguousarray(p), t, r)
    for name in OUTPUTS:
        np.testing.assert_array_equal(shared[name], repeated[name], err_msg=name)
