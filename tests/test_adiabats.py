"""theta_e, theta_es and theta_w against an independent integration of the pseudo-adiabat."""

from __future__ import annotations

import numpy as np
import pytest
import reference

from gridstab import adiabats, moisture, thermo

# Goal (project physics notes): within 0.05 K of a numerical integration of the
# definition for -40..+40 degC and 1050..200 hPa; above 0.15 K anywhere is a defect.
# The reference (tests/reference.py) shares no formula with gridstab: IAPWS-95 saturation
# through `iapws`, the first law with numerical derivatives of r_s, scipy DOP853.
TEMPERATURES = np.arange(233.15, 313.16, 5.0)
PRESSURES = np.array([1050, 1000, 925, 850, 700, 500, 400, 300, 250, 200], float) * 100.0
REPORTED_AT_LEAST_UP_TO = 0.10
"""Saturated quantities must be reported wherever e_s <= 0.10 p. gridstab stops at
e_s = 0.12 p (adiabats.SATURATION_LIMIT, the table stencils reach a little inside it);
beyond, theta_es is ill-conditioned and no real atmosphere is there."""


def _check_against_reference(ours, ref, t, p, saturated_t, report):
    ratio = reference.es(saturated_t) / p
    if not np.isfinite(ours):
        # not reported: allowed only for non-atmospheric states
        assert ratio > REPORTED_AT_LEAST_UP_TO, (t, p, ratio)
        report["missing"] += 1
        return
    error = abs(ours - ref)
    report["worst"] = max(report["worst"], error)
    assert error < 0.05, (t, p, ours, ref)


def test_theta_es_against_independent_pseudo_adiabat():
    report = {"worst": 0.0, "missing": 0}
    for t in TEMPERATURES:
        for p in PRESSURES:
            ours = float(adiabats.saturation_equivalent_potential_temperature(t, p))
            _check_against_reference(ours, reference.theta_es(t, p), t, p, t, report)
    assert report["missing"] < 0.12 * TEMPERATURES.size * PRESSURES.size
    print(f"theta_es: max |error| {report['worst']:.3f} K; not reported {report['missing']}")


@pytest.mark.parametrize("relative_humidity", [0.1, 0.5, 0.9, 1.02, 1.05, 1.2])
def test_theta_e_against_independent_pseudo_adiabat(relative_humidity):
    # Reference: Brent LCL plus the independent pseudo-adiabat (tests/reference.py).
    # Supersaturated model air (RH > 1) is saturated air plus condensate (project physics
    # notes): its theta_e is the reference's theta_es at (T, p).
    report = {"worst": 0.0, "missing": 0}
    for t in TEMPERATURES:
        for p in PRESSURES:
            e = relative_humidity * reference.es(t)
            r = reference.EPS * e / (p - e)
            ours = float(adiabats.equivalent_potential_temperature(t, p, r))
            if relative_humidity > 1:
                ref = reference.theta_es(t, p)
            else:
                ref = reference.theta_e(t, p, r)
            _check_against_reference(ours, ref, t, p, t, report)
    print(f"theta_e (RH {relative_humidity}): max |error| {report['worst']:.4f} K")


def test_theta_e_grows_with_humidity_up_to_saturation_then_stays():
    # theta_e at fixed (T, p) rises with r until saturation and is flat beyond it
    # (definition: the excess vapour of supersaturated air is condensate).
    t, p = 290.0, 90000.0
    r_s = reference.rsat(t, p)
    r = r_s * np.array([0.5, 0.9, 0.99, 1.0, 1.01, 1.1, 1.3])
    values = adiabats.equivalent_potential_temperature(np.full(r.shape, t), np.full(r.shape, p), r)
    assert np.all(np.diff(values[:4]) > 0)
    np.testing.assert_allclose(values[3:], reference.theta_es(t, p), atol=0.02)


@pytest.mark.parametrize(
    "t, p",
    [
        (313.15, 50000.0),  # 40 degC at 500 hPa: e_s = 0.15 p
        (303.15, 20000.0),  # 30 degC at 200 hPa: +1252 K before the limit existed
        (360.0, 100000.0),  # above the tables' temperatures
        (140.0, 100000.0),  # below them
        (300.0, 160000.0),  # pressure below the tables
    ],
)
def test_saturated_quantities_outside_the_tables_are_missing_not_wrong(t, p):
    # A wrong finite number must never come out: either within 0.05 K of the
    # independent reference, or NaN.
    ours = float(adiabats.saturation_equivalent_potential_temperature(t, p))
    if np.isfinite(ours):
        assert abs(ours - reference.theta_es(t, p)) < 0.05
    else:
        assert np.isnan(ours)
    r = 0.9 * reference.EPS * reference.es(min(t, 330.0)) / max(p - reference.es(min(t, 330.0)), 1.0)
    theta_e = float(adiabats.equivalent_potential_temperature(t, p, r))
    if np.isfinite(theta_e):
        assert abs(theta_e - reference.theta_e(t, p, r)) < 0.05


def test_parcel_table_outside_its_range_is_missing():
    # theta_e far outside the table's 130..30000 K, and pressure below 1500 hPa
    for theta_e, p in ((100.0, 50000.0), (40000.0, 50000.0), (300.0, 200000.0)):
        assert np.isnan(adiabats.temperature_on_pseudoadiabat(theta_e, p))


def test_saturation_vapour_pressure_derivative_consistent_with_the_curve():
    # The derivative returned with ln e_s (used in every adiabat) against a numerical
    # derivative of the same function (Richardson-extrapolated central differences);
    # goal 1e-6 relative.
    for temperature in np.arange(180.0, 340.0, 0.73):
        def f(x):
            return moisture.ln_saturation_vapour_pressure_scalar(x)[0]

        h = 1e-3
        d1 = (f(temperature + h) - f(temperature - h)) / (2 * h)
        d2 = (f(temperature + h / 2) - f(temperature - h / 2)) / h
        numeric = (4 * d2 - d1) / 3
        analytic = moisture.ln_saturation_vapour_pressure_scalar(temperature)[1]
        assert abs(analytic - numeric) < 1e-6 * abs(numeric), temperature


def test_saturated_lapse_rate_against_independent_pseudo_adiabat():
    # Gamma_m = -(dT/d ln p)(d ln p/dz) with the reference slope and the hydrostatic
    # equation for moist air; gridstab's closed form must agree to 0.01 K/km.
    for t, p in ((300.0, 1e5), (285.0, 85000.0), (250.0, 50000.0), (310.0, 100000.0)):
        r = reference.rsat(t, p)
        dlnp_dz = -reference.G * (1 + r) / (reference.RD * t * (1 + r / reference.EPS))
        expected = -reference.pseudo_slope(np.log(p), [t])[0] * dlnp_dz
        assert float(thermo.saturated_lapse_rate(t, p)) == pytest.approx(expected, abs=1e-5)


def test_theta_e_of_dry_air_is_theta():
    # with no vapour there is nothing to condense (definition)
    t = np.array([250.0, 300.0])
    p = np.array([50000.0, 100000.0])
    np.testing.assert_allclose(
        adiabats.equivalent_potential_temperature(t, p, np.zeros(2)),
        thermo.potential_temperature(t, p),
    )


def test_theta_e_not_below_theta_and_bolton_close():
    # Bolton (1980, eq. 39) is within about 0.1-0.3 K of the exact pseudo-adiabat for
    # ordinary air (his paper; the size of the difference is from memory).
    t, p, r = 300.0, 100000.0, 0.015
    ours = float(adiabats.equivalent_potential_temperature(t, p, r))
    e_hpa = p * r / (0.622 + r) / 100
    t_l = 2840.0 / (3.5 * np.log(t) - np.log(e_hpa) - 4.805) + 55.0
    bolton = t * (1000 / (p / 100)) ** (0.2854 * (1 - 0.28 * r)) * np.exp(
        (3.376 / t_l - 0.00254) * 1000 * r * (1 + 0.81 * r)
    )
    assert ours > thermo.potential_temperature(t, p)
    assert abs(ours - bolton) < 0.5


def test_theta_w_is_1000_hpa_temperature_of_the_pseudo_adiabat():
    # theta_w of saturated air at 1000 hPa is its own temperature (definition)
    for t in (280.0, 295.0, 305.0):
        r = float(moisture.saturation_mixing_ratio(t, 1e5))
        assert float(adiabats.wet_bulb_potential_temperature(t, 1e5, r)) == pytest.approx(t, abs=0.01)


def test_temperature_on_pseudo_adiabat_against_scipy():
    # Reference: integrate from (295 K, 1000 hPa) with scipy and compare temperatures.
    levels = np.array([100000.0, 85000.0, 70000.0, 50000.0, 30000.0, 20000.0, 10000.0])
    _, t_ref, _ = reference.moist_adiabatic_sounding(levels, 295.0)
    theta_e = reference.theta_es(295.0, 1e5)
    ours = adiabats.temperature_on_pseudoadiabat(np.full(levels.shape, theta_e), levels)
    np.testing.assert_allclose(ours, t_ref, atol=0.01)


def test_theta_es_undefined_where_saturation_impossible():
    # at 1 hPa and 270 K the saturation vapour pressure exceeds the pressure
    assert np.isnan(adiabats.saturation_equivalent_potential_temperature(270.0, 100.0))
    # and beyond the reporting limit e_s = 0.12 p (40 degC at 400 hPa: 0.18 p)
    assert np.isnan(adiabats.saturation_equivalent_potential_temperature(313.15, 40000.0))
