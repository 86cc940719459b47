"""Tests of gridstab.cf: units, recognition tables, parametric vertical coordinates."""

from __future__ import annotations

from pathlib import Path

import dask.array as dsa
import netCDF4
import numpy as np
import pytest
import xarray as xr

from gridstab import cf
from gridstab.errors import InputError

# ----------------------------------------------------------------------------- units

# Conversion factors are definitions of the units (SI brochure, 9th edition, and
# UDUNITS-2 for the spellings): 1 hPa = 1 mbar = 100 Pa, 0 degC = 273.15 K,
# 1 g = 1e-3 kg, 1 % = 0.01, 1 J = 1 kg m2 s-2.
UNIT_CASES = [
    ("K", 1.0, 0.0, cf.TEMPERATURE),
    ("degC", 1.0, 273.15, cf.TEMPERATURE),
    ("Celsius", 1.0, 273.15, cf.TEMPERATURE),
    ("degrees_C", 1.0, 273.15, cf.TEMPERATURE),
    ("Pa", 1.0, 0.0, cf.PRESSURE),
    ("hPa", 100.0, 0.0, cf.PRESSURE),
    ("mbar", 100.0, 0.0, cf.PRESSURE),
    ("millibars", 100.0, 0.0, cf.PRESSURE),
    ("kg/kg", 1.0, 0.0, cf.DIMENSIONLESS),
    ("kg kg-1", 1.0, 0.0, cf.DIMENSIONLESS),
    ("kg kg**-1", 1.0, 0.0, cf.DIMENSIONLESS),
    ("g/kg", 1e-3, 0.0, cf.DIMENSIONLESS),
    ("g kg-1", 1e-3, 0.0, cf.DIMENSIONLESS),
    ("%", 0.01, 0.0, cf.DIMENSIONLESS),
    ("percent", 0.01, 0.0, cf.DIMENSIONLESS),
    ("1", 1.0, 0.0, cf.DIMENSIONLESS),
    ("fraction", 1.0, 0.0, cf.DIMENSIONLESS),
    ("m", 1.0, 0.0, cf.LENGTH),
    ("meters", 1.0, 0.0, cf.LENGTH),
    ("gpm", 1.0, 0.0, cf.LENGTH),
    ("m2/s2", 1.0, 0.0, cf.SPECIFIC_ENERGY),
    ("m2 s-2", 1.0, 0.0, cf.SPECIFIC_ENERGY),
    ("m^2/s^2", 1.0, 0.0, cf.SPECIFIC_ENERGY),
    ("m**2 s**-2", 1.0, 0.0, cf.SPECIFIC_ENERGY),
    ("J kg-1", 1.0, 0.0, cf.SPECIFIC_ENERGY),
]


@pytest.mark.parametrize(("text", "scale", "offset", "dimension"), UNIT_CASES)
def test_parse_units(text, scale, offset, dimension):
    unit = cf.parse_units(text)
    assert unit.scale == pytest.approx(scale, rel=1e-12)
    assert unit.offset == offset
    assert unit.dimension == dimension


def test_unit_to_si_by_hand():
    assert cf.parse_units("degC").to_si(np.array([-40.0, 25.0])) == pytest.approx([233.15, 298.15])
    assert cf.parse_units("g kg-1").to_si(12.5) == pytest.approx(0.0125)
    assert cf.parse_units("millibars").to_si(850.0) == pytest.approx(85000.0)


@pytest.mark.parametrize("text", [None, "", "   "])
def test_no_units_is_none(text):
    assert cf.parse_units(text) is None


@pytest.mark.parametrize("text", ["level", "degrees north", "W m^-2", "furlongs", "kg//kg"])
def test_unknown_units_raise(text):
    with pytest.raises(cf.UnitsError, match="unknown units"):
        cf.parse_units(text)


def test_units_fit():
    assert cf.units_fit("hPa", (cf.PRESSURE,)) == "fits"
    assert cf.units_fit("K", (cf.PRESSURE,)) == "wrong"
    assert cf.units_fit(None, (cf.PRESSURE,)) == "missing"
    assert cf.units_fit("level", (cf.PRESSURE,)) == "unknown"


# ----------------------------------------------------------------------------- recognition


def _dataset():
    lev = xr.DataArray([1000.0, 500.0], dims="plev", attrs={"units": "hPa"})
    shape = (2, 3)
    return xr.Dataset(
        {
            "ta": (
                ("plev", "x"),
                np.full(shape, 280.0),
                {"standard_name": "air_temperature", "units": "K"},
            ),
            "temp2": (
                ("plev", "x"),
                np.full(shape, 280.0),
                {"long_name": "Air_Temperature (model)", "units": "K"},
            ),
            "T": (("plev", "x"), np.full(shape, 280.0), {"units": "K"}),
            "t_odd": (
                ("plev", "x"),
                np.zeros(shape),
                {"standard_name": "air_temperature", "units": "m"},
            ),
            "u": (("plev", "x"), np.zeros(shape), {"long_name": "eastward wind", "units": "m s-1"}),
        },
        coords={"plev": lev},
    )


def test_find_role_returns_every_match_strongest_first():
    matches = cf.find_role(_dataset(), "temperature")
    assert [(m.name, m.attribute) for m in matches] == [
        ("t_odd", "standard_name"),
        ("ta", "standard_name"),
        ("temp2", "long_name"),
        ("T", "variable name"),
    ]
    status = {m.name: m.units_status for m in matches}
    assert status["t_odd"] == "wrong"
    assert status["ta"] == "fits"
    assert [m.rank for m in matches] == [0, 0, 1, 2]


def test_normalise_long_name():
    assert cf.normalise_long_name("dry air temperature (tm1)") == "dry air temperature"
    assert cf.normalise_long_name("  Specific_Humidity ") == "specific humidity"


def test_every_criteria_standard_name_is_in_the_cf_table():
    # the offline CF standard name table (../shared/data/cf, version 83)
    table = (
        Path(__file__).resolve().parents[1]
        / ".."
        / "shared"
        / "data"
        / "cf"
        / "cf-standard-name-table.xml"
    )
    text = table.read_text()
    names = {n for c in cf.CRITERIA.values() for n in c.standard_names}
    names |= set(cf.PARAMETRIC_COORDINATES)
    missing = [n for n in sorted(names) if f'entry id="{n}"' not in text]
    assert missing == []


def test_find_vertical_axes_kinds():
    ds = xr.Dataset(
        {
            "T": (("time", "lev", "y"), np.zeros((1, 3, 2))),
            "Tp": (("time", "plev", "y"), np.zeros((1, 2, 2))),
            "Tz": (("height", "y"), np.zeros((2, 2))),
            "hyam": (("lev",), np.zeros(3), {"units": "Pa"}),
        },
        coords={
            "lev": (
                "lev",
                [1.0, 2.0, 3.0],
                {
                    "standard_name": "hybrid_sigma_pressure",
                    "formula_terms": "ap: hyam b: hybm ps: aps",
                },
            ),
            "plev": ("plev", [85000.0, 50000.0], {"units": "Pa"}),
            "height": ("height", [10.0, 100.0], {"units": "m", "positive": "up"}),
            "time": ("time", [0.0], {"units": "hours since 2000-01-01"}),
        },
    )
    (axis,) = cf.find_vertical_axes(ds, ds["T"])
    assert (axis.dim, axis.kind, axis.variable) == ("lev", "parametric", "lev")
    # the non-CF name written by EMAC is mapped to the CF one
    assert axis.standard_name == "atmosphere_hybrid_sigma_pressure_coordinate"
    (axis,) = cf.find_vertical_axes(ds, ds["Tp"])
    assert (axis.dim, axis.kind) == ("plev", "pressure")
    (axis,) = cf.find_vertical_axes(ds, ds["Tz"])
    assert (axis.dim, axis.kind) == ("height", "other")


def test_hybrid_a_coefficient_in_pa_is_not_a_pressure_axis():
    ds = xr.Dataset(
        {"T": (("lev",), np.zeros(2)), "hyam": (("lev",), [100.0, 200.0], {"units": "Pa"})},
    )
    assert cf.find_vertical_axes(ds, ds["T"]) == [
        cf.VerticalAxis("lev", "other", None, None, "dimension name 'lev'")
    ]


# ----------------------------------------------------------------------------- formula terms


def test_parse_formula_terms():
    assert cf.parse_formula_terms("a: hyam b: hybm p0: P0 ps: PS") == {
        "a": "hyam",
        "b": "hybm",
        "p0": "P0",
        "ps": "PS",
    }
    assert cf.parse_formula_terms("ap:ap b:b ps:surface_air_pressure") == {
        "ap": "ap",
        "b": "b",
        "ps": "surface_air_pressure",
    }
    with pytest.raises(ValueError, match="formula_terms"):
        cf.parse_formula_terms("a hyam b: hybm")


def _hybrid_terms():
    lev = "lev"
    a = xr.DataArray([0.01, 0.2, 0.0], dims=lev, name="hyam")
    b = xr.DataArray([0.0, 0.5, 1.0], dims=lev, name="hybm", attrs={"units": "1"})
    ps = xr.DataArray(
        dsa.from_array(np.array([[1000.0, 900.0]]), chunks=1),
        dims=("time", "x"),
        name="PS",
        attrs={"units": "hPa"},
    )
    p0 = xr.DataArray(100000.0, name="P0", attrs={"units": "Pa"})
    ap = xr.DataArray([10.0, 200.0, 0.0], dims=lev, name="ap", attrs={"units": "hPa"})
    return a, b, ps, p0, ap


def test_hybrid_sigma_pressure_a_p0_form_by_hand():
    a, b, ps, p0, _ = _hybrid_terms()
    coordinate = cf.HybridSigmaPressure.from_terms({"a": a, "b": b, "p0": p0, "ps": ps})
    p = coordinate.pressure()
    assert isinstance(p.data, dsa.Array)  # lazy in, lazy out
    p = p.transpose("time", "lev", "x").values
    for k, (ak, bk) in enumerate(zip([0.01, 0.2, 0.0], [0.0, 0.5, 1.0])):
        for i, ps_hpa in enumerate([1000.0, 900.0]):
            assert p[0, k, i] == pytest.approx(ak * 100000.0 + bk * ps_hpa * 100.0)


def test_hybrid_sigma_pressure_ap_form_wins_over_p0():
    _, b, ps, p0, ap = _hybrid_terms()
    coordinate = cf.HybridSigmaPressure.from_terms({"ap": ap, "b": b, "p0": p0, "ps": ps})
    assert any("p0 ignored" in note for note in coordinate.notes)
    p = coordinate.pressure().transpose("time", "lev", "x").values
    assert p[0, :, 1] == pytest.approx([10.0 * 100, 200.0 * 100 + 0.5 * 90000.0, 90000.0])


def test_hybrid_missing_term_names_the_config_key():
    _, b, ps, _, _ = _hybrid_terms()
    with pytest.raises(InputError, match=r"\[input\] formula_terms") as info:
        cf.HybridSigmaPressure.from_terms({"b": b, "ps": ps}, coordinate="lev")
    assert "ap" in str(info.value)


def test_atmosphere_sigma_by_hand():
    sigma = xr.DataArray([0.1, 1.0], dims="lev", name="sigma")
    ps = xr.DataArray([100000.0], dims="x", name="ps", attrs={"units": "Pa"})
    ptop = xr.DataArray(1000.0, name="ptop", attrs={"units": "Pa"})
    p = cf.AtmosphereSigma.from_terms({"sigma": sigma, "ps": ps, "ptop": ptop}).pressure()
    assert p.transpose("lev", "x").values[:, 0] == pytest.approx([1000 + 0.1 * 99000, 100000.0])


def test_registry_by_standard_name():
    assert (
        cf.parametric_coordinate_class("atmosphere_hybrid_sigma_pressure_coordinate")
        is cf.HybridSigmaPressure
    )
    assert cf.parametric_coordinate_class("hybrid_sigma_pressure") is cf.HybridSigmaPressure
    assert cf.parametric_coordinate_class("atmosphere_sigma_coordinate") is cf.AtmosphereSigma
    assert cf.parametric_coordinate_class("ocean_sigma_coordinate") is None


# the EMAC file gives float64 _FillValue on float32 data; xarray warns while decoding
@pytest.mark.filterwarnings("ignore:variable .* has multiple fill values")
def test_emac_broken_formula_terms_and_their_fix(real_data_dir):
    # The EMAC file's hybrid levels name the term ps 'aps', a variable the file does not
    # have; it has 'aps_ave' (../shared/data/real/README.md, section 4).
    path = real_data_dir / "emac_plev19_monthly.nc"
    with xr.open_dataset(path) as ds:
        with pytest.raises(InputError) as info:
            cf.formula_term_variables(ds, "lev", hints={"ps": ["aps_ave"]})
        message = str(info.value)
        assert "'aps'" in message and '[input] formula_terms = {ps = "aps_ave"}' in message
        terms = cf.formula_term_variables(ds, "lev", overrides={"ps": "aps_ave"})
        assert terms == {"ap": "hyam", "b": "hybm", "ps": "aps_ave"}
        coordinate = cf.HybridSigmaPressure.from_terms(
            {term: ds[name] for term, name in terms.items()}, coordinate="lev"
        )
        p = coordinate.pressure().transpose("time", "lev", "lat", "lon").values
    # independent reading of the same numbers with netCDF4: p = hyam + hybm * aps
    with netCDF4.Dataset(path) as nc:
        hyam, hybm, aps = (nc[v][:].astype(np.float64) for v in ("hyam", "hybm", "aps_ave"))
    expected = hyam[None, :, None, None] + hybm[None, :, None, None] * aps[:, None, :, :]
    np.testing.assert_allclose(p, expected, rtol=1e-6)
    assert np.all(np.diff(p, axis=1) > 0)  # top first
    assert np.all(p[:, -1] < aps)  # the lowest full level lies above the surface
