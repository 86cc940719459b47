"""theta_e, theta_es and theta_w against an independent integration of the pseudo-adiabat."""

from __future__ import annotations

import numpy as np
import pytest
import reference

from gridstab import adiabats, moisture, thermo

# Goal (project physics notes): within 0.05 K of a numerical integration of the
# definition for -40..+40 degC and 1050..200 hPa; above 0.15 K anywhere is a defect.
TEMPERATURES = np.arange(233.15, 313.16, 10.0)
PRESSURES = np.array([105000.0, 100000.0, 85000.0, 70000.0, 50000.0, 30000.0, 20000.0])


def test_theta_es_against_scipy_pseudo_adiabat():
    # Reference: scipy DOP853 integration (rtol 1e-11) of the pseudo-adiabat from (T, p)
    # until the parcel is dry (tests/reference.py).
    worst = 0.0
    for t in TEMPERATURES:
        for p in PRESSURES:
            ours = float(adiabats.saturation_equivalent_potential_temperature(t, p))
            ref = reference.theta_es(t, p)
            worst = max(worst, abs(ours - ref))
            assert abs(ours - ref) < 0.05, (t, p, ours, ref)
    print(f"theta_es: max |error| {worst:.2e} K over -40..40 C, 1050..200 hPa")


@pytest.mark.parametrize("relative_humidity", [0.1, 0.5, 0.9])
def test_theta_e_against_scipy_pseudo_adiabat(relative_humidity):
    # Reference: Brent LCL plus scipy pseudo-adiabat (tests/reference.py).
    worst = 0.0
    for t in TEMPERATURES:
        for p in PRESSURES[:-1]:
            r = float(moisture.mixing_ratio_from_relative_humidity(relative_humidity, t, p))
            ours = float(adiabats.equivalent_potential_temperature(t, p, r))
            ref = reference.theta_e(t, p, r)
            worst = max(worst, abs(ours - ref))
            assert abs(ours - ref) < 0.05, (t, p, r, ours, ref)
    print(f"theta_e (RH {relative_humidity}): max |error| {worst:.2e} K")


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
