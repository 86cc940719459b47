"""Tests of gridstab.reading: real model output and small synthetic files.

The real files are read in place from ../shared/data/real (see its README.md, which is
the outside source quoted for their contents). Conversions are checked against
arithmetic written here, on numbers read independently with netCDF4, and saturation
vapour pressure from IAPWS-95 (the ``iapws`` package).
"""

from __future__ import annotations

import dask.array as dsa
import iapws
import netCDF4
import numpy as np
import pytest
import xarray as xr
from dask.callbacks import Callback

from gridstab.errors import InputError
from gridstab.reading import (
    HUMIDITY_FLOOR,
    InputSettings,
    describe_input,
    normalise_input,
    open_model_output,
)

# Rd and Rv from ../shared/PHYSICS.md ("typical values"); written here again on purpose
# so the tests do not read them back from gridstab.constants.
RD, RV, CPD = 287.04, 461.5, 1005.7
EPS = RD / RV
G = 9.80665  # standard gravity, m s-2 (CGPM 1901)

# Several real files give missing_value and _FillValue that differ, which xarray reports
# while decoding both to missing; that is the behaviour gridstab wants.
pytestmark = pytest.mark.filterwarnings("ignore:variable .* has multiple fill values")


def es_iapws(temperature_k: float) -> float:
    """Saturation vapour pressure over liquid water, Pa, from IAPWS-95."""
    return iapws.IAPWS95(T=float(temperature_k), x=0).P * 1e6


def mixing_ratio_by_hand(vapour_pressure: float, pressure: float) -> float:
    return EPS * vapour_pressure / (pressure - vapour_pressure)


def floor_like(values: np.ndarray):
    """HUMIDITY_FLOOR in the floating type of ``values``."""
    return np.asarray(HUMIDITY_FLOOR, dtype=values.dtype)


def assert_sane(ds: xr.Dataset) -> xr.Dataset:
    """The checks every normalised input must pass; returns the computed dataset."""
    level = ds.attrs["gridstab_level_dim"]
    for name in ("air_temperature", "humidity_mixing_ratio"):
        var = ds[name]
        assert isinstance(var.data, dsa.Array), f"{name} is not lazy"
        assert len(var.data.chunks[var.dims.index(level)]) == 1, f"{name}: level dim not one chunk"
    assert ds["air_temperature"].attrs["units"] == "K"
    assert ds["air_pressure"].attrs["units"] == "Pa"
    loaded = ds.compute()
    t = loaded["air_temperature"].values
    r = loaded["humidity_mixing_ratio"].values
    p = loaded["air_pressure"]
    assert np.isfinite(t).any() and np.isfinite(r).any()
    assert 150.0 <= np.nanmin(t) and np.nanmax(t) <= 350.0
    assert 0.0 <= np.nanmin(r) and np.nanmax(r) <= 0.05
    assert float(p.min()) > 0.0
    steps = p.diff(level).values
    increasing = loaded.attrs["gridstab_level_order"] == "top first"
    assert np.all(steps > 0) if increasing else np.all(steps < 0)
    if "geopotential_height" in loaded:
        # pressure decreases upward: between adjacent valid levels height and pressure
        # change in opposite directions
        z = loaded["geopotential_height"]
        dz = z.diff(level).transpose(*z.dims).values
        dp = p.diff(level).broadcast_like(z.diff(level)).transpose(*z.dims).values
        valid = np.isfinite(dz)
        assert valid.any() and np.all(dz[valid] * dp[valid] < 0)
    return loaded


# ============================================================================ real files


def test_ncep_humidity_on_fewer_levels(real_data_dir):
    path = real_data_dir / "ncep_reanalysis_june_climo_plev.nc"
    ds = open_model_output(path)
    loaded = assert_sane(ds)
    assert ds.attrs["gridstab_level_dim"] == "lev"
    assert loaded.sizes["lev"] == 17
    # README: q on the 8 levels 1000-300 hPa, in g/kg; T on 17 levels in "millibars"
    np.testing.assert_allclose(
        loaded["air_pressure"].values,
        100.0
        * np.array(
            [1000, 925, 850, 700, 600, 500, 400, 300, 250, 200, 150, 100, 70, 50, 30, 20, 10]
        ),
    )
    with netCDF4.Dataset(path) as nc:
        shum = nc["SHUM"][0].filled(np.nan).astype(np.float64)  # (lev2, lat, lon), g/kg
        ps_hpa = nc["PS"][0].filled(np.nan).astype(np.float64)
    r = loaded["humidity_mixing_ratio"].values[0]
    lev_hpa = loaded["air_pressure"].values / 100.0
    for k in range(8):  # lev2 level k is lev level k (both start 1000, 925, ...)
        q = shum[k] / 1000.0
        above = lev_hpa[k] <= ps_hpa
        ok = above & (q > 0)
        np.testing.assert_allclose(r[k][ok], q[ok] / (1.0 - q[ok]), rtol=1e-5)
        assert np.all(np.isnan(r[k][~above]))  # below the surface: masked
    # above 300 hPa there is no humidity: treated as dry, and said so
    assert np.all(r[8:] == floor_like(r))
    assert ds.attrs["gridstab_dry_filled_count"] == 9 * 64 * 128
    assert "treated as dry" in ds.attrs["gridstab_recognition"]
    # the time has no units (README): kept as raw numbers, not an error
    assert loaded["time"].values.tolist() == [120]
    assert "raw numbers" in ds.attrs["gridstab_recognition"]
    assert ds.attrs["gridstab_below_surface_count"] > 0


def test_ncep_humidity_above_top_left_missing(real_data_dir):
    ds = open_model_output(
        real_data_dir / "ncep_reanalysis_june_climo_plev.nc",
        settings=InputSettings(humidity_above_top="missing"),
    )
    r = ds["humidity_mixing_ratio"].isel(lev=slice(8, None)).values
    assert np.all(np.isnan(r))
    assert ds.attrs["gridstab_dry_filled_count"] == 0


def test_ncep_relative_humidity_can_be_chosen(real_data_dir):
    path = real_data_dir / "ncep_reanalysis_june_climo_plev.nc"
    ds = open_model_output(path, settings=InputSettings(humidity="RELHUM"))
    assert ds.attrs["gridstab_humidity_kind"] == "relative_humidity"
    loaded = assert_sane(ds)
    with netCDF4.Dataset(path) as nc:
        rh = nc["RELHUM"][0].filled(np.nan).astype(np.float64) / 100.0  # percent
        t = nc["T"][0].filled(np.nan).astype(np.float64)
        ps_hpa = nc["PS"][0].filled(np.nan).astype(np.float64)
    r = loaded["humidity_mixing_ratio"].values[0]
    # a few warm points at 1000 and 850 hPa, above ground
    for k, p in ((0, 100000.0), (2, 85000.0)):
        j, i = np.argwhere((t[k] > 290.0) & (ps_hpa > p / 100 + 5) & (rh[k] > 0.3))[0]
        expected = mixing_ratio_by_hand(rh[k, j, i] * es_iapws(t[k, j, i]), p)
        assert r[k, j, i] == pytest.approx(expected, rel=2e-3)


def test_echam_relative_humidity_without_units(real_data_dir):
    path = real_data_dir / "echam5_a1b_2001_plev.nc"
    ds = open_model_output(path)
    loaded = assert_sane(ds)
    text = ds.attrs["gridstab_recognition"]
    # decision: values of -0.142 to 1.26 can only be a fraction; said so, with the override
    assert "read as a fraction" in text and '[input] humidity_units = "%"' in text
    # README: 987 values below 0 in rhumidity; they are floored and counted
    assert ds.attrs["gridstab_negative_humidity_count"] == 987
    with netCDF4.Dataset(path) as nc:
        rh = nc["rhumidity"][0].astype(np.float64)
        t = nc["t"][0].astype(np.float64)
        lev = nc["lev"][:].astype(np.float64)
    assert int((rh < 0).sum()) == 987
    r = loaded["humidity_mixing_ratio"].values[0]
    assert np.all(r[rh < 0] == floor_like(r))
    # slight supersaturation is kept: RH 1.1-1.3 stays above saturation
    k, j, i = np.argwhere((rh > 1.1) & (t > 275.0))[0]
    expected = mixing_ratio_by_hand(rh[k, j, i] * es_iapws(t[k, j, i]), lev[k])
    assert r[k, j, i] == pytest.approx(expected, rel=2e-3)
    assert r[k, j, i] > mixing_ratio_by_hand(es_iapws(t[k, j, i]), lev[k])
    # with the override the values are read as percent instead
    as_percent = open_model_output(path, settings=InputSettings(humidity_units="%"))
    assert "units '%' from [input] humidity_units" in as_percent.attrs["gridstab_recognition"]
    r_pct = as_percent["humidity_mixing_ratio"].values[0]
    assert r_pct[k, j, i] == pytest.approx(
        mixing_ratio_by_hand(rh[k, j, i] / 100 * es_iapws(t[k, j, i]), lev[k]), rel=2e-3
    )


def test_cam_hybrid_a_p0_form_and_dimension_order(real_data_dir):
    path = real_data_dir / "cam_t5_hybrid_initial.nc"
    ds = open_model_output(path)
    loaded = assert_sane(ds)
    # README: T is (time, lat, lev, lon); the order is kept
    assert ds["air_temperature"].dims == ("time", "lat", "lev", "lon")
    assert ds["air_pressure"].dims == ("time", "lat", "lev", "lon")
    assert ds["surface_air_pressure"].dims == ("time", "lat", "lon")
    with netCDF4.Dataset(path) as nc:
        hyam, hybm, p0 = nc["hyam"][:], nc["hybm"][:], float(nc["P0"][:])
        ps = nc["PS"][:]  # (time, lat, lon)
        phis = nc["PHIS"][:]
        t = nc["T"][:]
        q = nc["Q"][:]
    expected = hyam[None, None, :, None] * p0 + hybm[None, None, :, None] * ps[:, :, None, :]
    np.testing.assert_allclose(loaded["air_pressure"].values, expected, rtol=1e-12)
    np.testing.assert_allclose(loaded["air_temperature"].values, t)
    np.testing.assert_allclose(loaded["humidity_mixing_ratio"].values, q / (1 - q), rtol=1e-12)
    np.testing.assert_allclose(loaded["surface_altitude"].values, phis / G)
    # README: full-level pressure from about 354 Pa to about 103 200 Pa
    assert float(loaded["air_pressure"].min()) == pytest.approx(354, abs=1)
    assert float(loaded["air_pressure"].max()) == pytest.approx(103200, abs=100)
    # noleap calendar in model year 1, decoded to cftime
    assert loaded["time"].values[0].calendar == "noleap"
    assert "calendar noleap" in describe_input(ds)


def test_emac_ambiguous_then_chosen(real_data_dir):
    path = real_data_dir / "emac_plev19_monthly.nc"
    with pytest.raises(InputError) as info:
        open_model_output(path)
    message = str(info.value)
    # _ave and _cav are two different means of the same field: no guessing
    assert '[input] temperature = "tm1_p19_ave"' in message
    assert '[input] humidity = "qm1_p19_ave"' in message
    assert "tm1_p19_cav" in message and "qm1_p19_cav" in message
    assert "tm1_ave" not in message.replace("tm1_p19_ave", "")  # model-level T has no humidity

    ds = open_model_output(
        path, settings=InputSettings(temperature="tm1_p19_ave", humidity="qm1_p19_ave")
    )
    loaded = assert_sane(ds)
    assert ds.attrs["gridstab_level_order"] == "top first"
    # README: 91 of 608 values of each _ave field are unmasked garbage in T, q and
    # geopotential alike
    assert ds.attrs["gridstab_masked_value_count"] == 3 * 91
    with netCDF4.Dataset(path) as nc:
        nc.set_auto_mask(False)
        raw_t = nc["tm1_p19_ave"][:].astype(np.float64)
        raw_z = nc["geopot_p19_ave"][:].astype(np.float64)
    garbage = np.abs(raw_t) > 1e20
    assert garbage.sum() == 91
    assert np.all(np.isnan(loaded["air_temperature"].values[garbage]))
    assert np.all(np.isnan(loaded["humidity_mixing_ratio"].values[garbage]))
    good = ~garbage
    np.testing.assert_allclose(
        loaded["geopotential_height"].values[good], raw_z[good] / G, rtol=1e-6
    )


def test_emac_model_levels_need_the_formula_term_fix(real_data_dir):
    path = real_data_dir / "emac_plev19_monthly.nc"
    with pytest.raises(InputError) as info:
        open_model_output(
            path, settings=InputSettings(temperature="tm1_ave", humidity="qm1_p19_ave")
        )
    assert '[input] formula_terms = {ps = "aps_ave"}' in str(info.value)
    # with the term fixed the coordinate is accepted; what remains is that the file has
    # no humidity on the model levels (README), which no setting can supply
    with pytest.raises(InputError) as info:
        open_model_output(
            path, settings=InputSettings(temperature="tm1_ave", formula_terms={"ps": "aps_ave"})
        )
    message = str(info.value)
    assert "formula_terms" not in message
    assert "found no humidity" in message and "pax_19" in message


def test_ifs_packed_hybrid_ap_form(real_data_dir):
    path = real_data_dir / "ifs_hybrid_l49_packed.nc"
    ds = open_model_output(path)
    loaded = assert_sane(ds)
    with netCDF4.Dataset(path) as nc:
        nc.set_auto_maskandscale(False)
        t_packed = nc["air_temperature_ml"][:]
        q_packed = nc["specific_humidity_ml"][:]
        ap, b = nc["ap"][:], nc["b"][:]
        ps = nc["surface_air_pressure"][:][:, 0]  # drop the singleton 'surface' dimension
        phis = nc["surface_geopotential"][:][0]
    assert t_packed.dtype == np.int16
    np.testing.assert_allclose(
        loaded["air_temperature"].values, t_packed * 0.01 + 273.15, rtol=1e-12
    )
    q = q_packed * 1e-5
    r = loaded["humidity_mixing_ratio"].values
    moist = q > 0
    np.testing.assert_allclose(r[moist], q[moist] / (1 - q[moist]), rtol=1e-9)
    # README: 930 of the 2450 q values are exactly 0; raised to the floor and counted
    assert int((q_packed == 0).sum()) == 930
    assert ds.attrs["gridstab_floored_humidity_count"] == 930
    assert np.all(r[~moist] == floor_like(r))
    # ap is in Pa, so p = ap + b ps; p0 is redundant and ignored (README)
    expected = ap[None, :, None, None] + b[None, :, None, None] * ps[:, None, :, :]
    np.testing.assert_allclose(loaded["air_pressure"].values, expected, rtol=1e-6)
    assert "p0 ignored" in ds.attrs["gridstab_recognition"]
    assert ds["surface_air_pressure"].dims == ("time", "latitude", "longitude")
    # surface geopotential has no time dimension: the same field at both times
    np.testing.assert_allclose(loaded["surface_altitude"].values[1], phis / G, rtol=1e-6)
    np.testing.assert_allclose(loaded["surface_altitude"].values[0], phis / G, rtol=1e-6)


def test_arome_two_columns_with_2d_coordinates(real_data_dir):
    path = real_data_dir / "arome_hybrid_l65_two_columns.nc"
    ds = open_model_output(path)
    loaded = assert_sane(ds)
    assert ds["air_temperature"].dims == ("time", "hybrid", "y", "x")
    assert ds["latitude"].dims == ("y", "x") and ds["longitude"].dims == ("y", "x")
    assert "curvilinear" in describe_input(ds)
    with netCDF4.Dataset(path) as nc:
        ap, b = nc["ap"][:], nc["b"][:]
        ps = nc["surface_air_pressure"][:][:, 0]
        lat = nc["latitude"][:]
    expected = ap[None, :, None, None] + b[None, :, None, None] * ps[:, None, :, :]
    np.testing.assert_allclose(loaded["air_pressure"].values, expected, rtol=1e-6)
    np.testing.assert_allclose(loaded["latitude"].values, lat)
    # README: levels from about 10 hPa to about 984 hPa, top to bottom
    assert float(loaded["air_pressure"].isel(hybrid=0).max()) == pytest.approx(1000, rel=0.05)
    assert float(loaded["air_pressure"].isel(hybrid=-1).max()) == pytest.approx(98400, rel=0.01)


def test_hirlam_potential_temperature_and_rh_fraction(real_data_dir):
    path = real_data_dir / "hirlam12_plev15_theta_rh.nc"
    ds = open_model_output(path)
    loaded = assert_sane(ds)
    assert ds.attrs["gridstab_humidity_kind"] == "relative_humidity"
    assert ds.attrs["gridstab_level_order"] == "top first"
    with netCDF4.Dataset(path) as nc:
        nc.set_auto_maskandscale(False)
        theta = nc["air_potential_temperature"][:].astype(np.float64)
        rh = nc["relative_humidity"][:].astype(np.float64) * 0.01  # scale_factor on a float
        levels_hpa = nc["pressure"][:].astype(np.float64)
    p = levels_hpa * 100.0
    t_expected = theta * (p[None, :, None, None] / 1e5) ** (RD / CPD)
    np.testing.assert_allclose(loaded["air_temperature"].values, t_expected, rtol=1e-6)
    # README: T derived from theta and p spans 219.5-300.5 K
    assert float(loaded["air_temperature"].min()) == pytest.approx(219.5, abs=0.2)
    assert float(loaded["air_temperature"].max()) == pytest.approx(300.5, abs=0.2)
    # RH is a fraction (units "1") after the scale factor; warm point checked by hand
    n, k, j, i = np.argwhere((t_expected > 285.0) & (rh > 0.5))[0]
    expected = mixing_ratio_by_hand(rh[n, k, j, i] * es_iapws(t_expected[n, k, j, i]), p[k])
    assert loaded["humidity_mixing_ratio"].values[n, k, j, i] == pytest.approx(expected, rel=2e-3)
    # README: 40 RH values above 1; slight supersaturation is kept, not clipped
    assert int((rh > 1).sum()) == 40
    # the file's 10 hPa heights lie below its 30 hPa heights in every column (an
    # extrapolated model top): such heights are set missing and counted
    with netCDF4.Dataset(path) as nc:
        z = nc["geopotential_height"][:].astype(np.float64)
    bogus = z[:, 0] <= z[:, 1]
    assert bogus.sum() == 2 * 16 * 21
    assert ds.attrs["gridstab_height_masked_count"] == bogus.sum()
    assert np.all(np.isnan(loaded["geopotential_height"].values[:, 0][bogus]))
    np.testing.assert_allclose(loaded["geopotential_height"].values[:, 1:], z[:, 1:], rtol=1e-6)
    # projection carried for the writer
    assert "projection_stere" in ds.coords
    assert ds["air_temperature"].attrs["grid_mapping"] == "projection_stere"
    assert ds.coords["projection_stere"].attrs["grid_mapping_name"] == "stereographic"
    report = describe_input(ds)
    assert "stereographic" in report and "15 levels" in report and "top first" in report


def test_describe_input_report(real_data_dir):
    ds = open_model_output(real_data_dir / "ncep_reanalysis_june_climo_plev.nc")
    report = describe_input(ds)
    # README: 17 p-levels surface first, 64 x 128 Gaussian grid, q on 8 levels in g/kg
    assert "pressure levels, 17 levels on 'lev', surface first" in report
    assert "columns to process: 8192" in report
    assert "'SHUM'" in report and "specific humidity" in report
    assert "regular latitude/longitude" in report
    assert "MiB" in report


# ======================================================================= synthetic files


def _plev_dataset(
    *,
    levels=(100000.0, 85000.0, 50000.0),
    p_units="Pa",
    t=None,
    t_units="K",
    humidity=None,
    humidity_attrs=None,
    dims=("time", "plev", "lat", "lon"),
):
    shape = {"time": 1, "plev": len(levels), "lat": 2, "lon": 3}
    sizes = tuple(shape[d] for d in dims)
    if t is None:
        # a warm, moist-tolerant profile: 0.5-1 % humidity stays below saturation
        base = np.array([300.0, 295.0, 290.0])[: len(levels)]
        t = np.broadcast_to(base.reshape([-1 if d == "plev" else 1 for d in dims]), sizes).copy()
    if humidity is None:
        humidity = np.full(sizes, 0.005)
    attrs = {"standard_name": "specific_humidity", "units": "kg/kg"}
    if humidity_attrs is not None:
        attrs = humidity_attrs
    return xr.Dataset(
        {
            "ta": (dims, t, {"standard_name": "air_temperature", "units": t_units}),
            "hus": (dims, humidity, attrs),
        },
        coords={
            "time": (
                "time",
                [0.0],
                {"units": "hours since 2030-06-01 00:00", "standard_name": "time"},
            ),
            "plev": (
                "plev",
                np.asarray(levels),
                {"units": p_units, "standard_name": "air_pressure"},
            ),
            "lat": ("lat", [10.0, 20.0], {"units": "degrees_north", "standard_name": "latitude"}),
            "lon": (
                "lon",
                [0.0, 10.0, 20.0],
                {"units": "degrees_east", "standard_name": "longitude"},
            ),
        },
    )


def _write(ds: xr.Dataset, path, encoding=None):
    ds.to_netcdf(path, engine="netcdf4", encoding=encoding)
    return path


def test_synthetic_plain_file(tmp_path):
    path = _write(_plev_dataset(), tmp_path / "plain.nc")
    ds = open_model_output(path)
    loaded = assert_sane(ds)
    np.testing.assert_allclose(loaded["humidity_mixing_ratio"].values, 0.005 / 0.995)
    assert ds.attrs["gridstab_source_files"] == "plain.nc"
    assert ds.attrs["gridstab_masked_value_count"] == 0


def test_ambiguous_candidates(tmp_path):
    src = _plev_dataset()
    src["ta_other"] = src["ta"] + 1.0
    src["ta_other"].attrs = dict(src["ta"].attrs)
    path = _write(src, tmp_path / "two.nc")
    with pytest.raises(InputError) as info:
        open_model_output(path)
    message = str(info.value)
    assert "'ta'" in message and "'ta_other'" in message
    assert '[input] temperature = "ta"' in message
    ds = open_model_output(path, settings=InputSettings(temperature="ta_other"))
    np.testing.assert_allclose(ds["air_temperature"].values, src["ta_other"].values)


def test_missing_humidity_units(tmp_path):
    path = _write(
        _plev_dataset(humidity_attrs={"standard_name": "specific_humidity"}),
        tmp_path / "nounits.nc",
    )
    with pytest.raises(
        InputError, match=r'no units attribute.*\[input\] humidity_units = "\.\.\."'
    ):
        open_model_output(path)
    ds = open_model_output(path, settings=InputSettings(humidity_units="g/kg"))
    # 0.005 g/kg -> 5e-6 kg/kg -> r = q / (1 - q)
    np.testing.assert_allclose(ds["humidity_mixing_ratio"].values, 5e-6 / (1 - 5e-6), rtol=1e-6)


def test_unknown_temperature_units(tmp_path):
    path = _write(_plev_dataset(t_units="kelvins please"), tmp_path / "odd.nc")
    with pytest.raises(InputError, match=r'cannot read.*\[input\] temperature_units = "\.\.\."'):
        open_model_output(path)
    ds = open_model_output(path, settings=InputSettings(temperature_units="K"))
    assert float(ds["air_temperature"].max()) == 300.0


def test_hpa_values_labelled_pa(tmp_path):
    path = _write(_plev_dataset(levels=(1000.0, 850.0, 500.0), p_units="Pa"), tmp_path / "hpa.nc")
    with pytest.raises(InputError) as info:
        open_model_output(path)
    assert '[input] pressure_units = "hPa"' in str(info.value)
    ds = open_model_output(path, settings=InputSettings(pressure_units="hPa"))
    np.testing.assert_allclose(ds["air_pressure"].values, [100000.0, 85000.0, 50000.0])


def test_non_positive_pressure(tmp_path):
    path = _write(_plev_dataset(levels=(100000.0, 50000.0, 0.0)), tmp_path / "zero.nc")
    with pytest.raises(InputError, match="non-positive"):
        open_model_output(path)


def _hybrid_dataset(*, formula_terms="a: hyam b: hybm p0: P0 ps: PS", ps_name="PS"):
    hyam = np.array([0.05, 0.02, 0.0])
    hybm = np.array([0.0, 0.5, 0.98])
    ps = np.array([[[101000.0, 95000.0]]])  # (time, lat, lon)
    nlev = hyam.size
    t = np.broadcast_to(
        np.array([220.0, 260.0, 290.0])[None, :, None, None], (1, nlev, 1, 2)
    ).copy()
    q = np.broadcast_to(np.array([2e-5, 2e-3, 8e-3])[None, :, None, None], (1, nlev, 1, 2)).copy()
    return xr.Dataset(
        {
            "T": (("time", "lev", "lat", "lon"), t, {"units": "K", "long_name": "Temperature"}),
            "Q": (
                ("time", "lev", "lat", "lon"),
                q,
                {"units": "kg/kg", "long_name": "Specific humidity"},
            ),
            ps_name: (("time", "lat", "lon"), ps, {"units": "Pa", "long_name": "Surface pressure"}),
            "hyam": (("lev",), hyam),
            "hybm": (("lev",), hybm),
            "P0": ((), 100000.0, {"units": "Pa"}),
        },
        coords={
            "lev": (
                "lev",
                1000 * (hyam + hybm),
                {
                    "standard_name": "atmosphere_hybrid_sigma_pressure_coordinate",
                    "formula_terms": formula_terms,
                    "positive": "down",
                },
            ),
            "time": ("time", [0.0], {"units": "days since 2030-01-01", "calendar": "360_day"}),
            "lat": ("lat", [45.0], {"units": "degrees_north"}),
            "lon": ("lon", [0.0, 5.0], {"units": "degrees_east"}),
        },
    )


def test_missing_formula_term(tmp_path):
    path = _write(_hybrid_dataset(ps_name="PSFC"), tmp_path / "hybrid.nc")
    with pytest.raises(InputError) as info:
        open_model_output(path)
    message = str(info.value)
    assert "'PS'" in message and '[input] formula_terms = {ps = "PSFC"}' in message
    ds = open_model_output(path, settings=InputSettings(formula_terms={"ps": "PSFC"}))
    p = ds["air_pressure"].values
    hyam, hybm = [0.05, 0.02, 0.0], [0.0, 0.5, 0.98]
    for k in range(3):
        for i, ps in enumerate([101000.0, 95000.0]):
            assert p[0, k, 0, i] == pytest.approx(hyam[k] * 100000.0 + hybm[k] * ps)
    assert ds.attrs["gridstab_vertical_coordinate"] == "atmosphere_hybrid_sigma_pressure_coordinate"
    assert str(ds["surface_air_pressure"].attrs["gridstab_source_variable"]) == "PSFC"


def test_formula_without_enough_terms(tmp_path):
    path = _write(_hybrid_dataset(formula_terms="b: hybm ps: PS"), tmp_path / "short.nc")
    with pytest.raises(InputError, match=r"\[input\] formula_terms"):
        open_model_output(path)
    ds = open_model_output(path, settings=InputSettings(formula_terms={"a": "hyam", "p0": "P0"}))
    assert float(ds["air_pressure"].isel(lev=0).max()) == pytest.approx(5000.0)


def test_packed_round_trip(tmp_path):
    src = _plev_dataset()
    rng = np.random.default_rng(7)
    src["ta"].values = src["ta"].values + rng.uniform(-3, 3, src["ta"].shape)
    src["ta"].values[0, 2, 1, 2] = np.nan
    encoding = {
        "ta": {
            "dtype": "int16",
            "scale_factor": 0.01,
            "add_offset": 273.15,
            "_FillValue": np.int16(-32767),
        },
        "hus": {"dtype": "int16", "scale_factor": 1e-6, "_FillValue": np.int16(-32767)},
    }
    path = _write(src, tmp_path / "packed.nc", encoding=encoding)
    with netCDF4.Dataset(path) as nc:
        assert nc["ta"].dtype == np.int16  # really packed on disk
    ds = open_model_output(path)
    t = ds["air_temperature"].values
    assert np.isnan(t[0, 2, 1, 2])
    good = ~np.isnan(src["ta"].values)
    np.testing.assert_allclose(t[good], src["ta"].values[good], atol=0.005 + 1e-9)
    q = 0.005
    np.testing.assert_allclose(ds["humidity_mixing_ratio"].values[good], q / (1 - q), rtol=1e-3)


def test_gram_per_kilogram_by_hand(tmp_path):
    attrs = {"long_name": "specific humidity", "units": "g kg-1"}
    path = _write(
        _plev_dataset(humidity=np.full((1, 3, 2, 3), 10.0), humidity_attrs=attrs),
        tmp_path / "gkg.nc",
    )
    ds = open_model_output(path)
    # 10 g/kg = 0.010 kg/kg; r = q / (1 - q) = 0.010 / 0.990
    np.testing.assert_allclose(ds["humidity_mixing_ratio"].values, 0.010 / 0.990, rtol=1e-6)
    assert "scaled by 0.001" in ds.attrs["gridstab_recognition"]


def test_gram_per_kilogram_labelled_kilogram(tmp_path):
    path = _write(_plev_dataset(humidity=np.full((1, 3, 2, 3), 10.0)), tmp_path / "mislabelled.nc")
    with pytest.raises(InputError, match=r'\[input\] humidity_units = "g/kg"'):
        open_model_output(path)


def test_dew_point_in_celsius_by_hand(tmp_path):
    td_c = np.full((1, 3, 2, 3), 15.0)
    attrs = {"standard_name": "dew_point_temperature", "units": "degC"}
    path = _write(_plev_dataset(humidity=td_c, humidity_attrs=attrs), tmp_path / "td.nc")
    ds = open_model_output(path)
    assert ds.attrs["gridstab_humidity_kind"] == "dew_point"
    r = ds["humidity_mixing_ratio"].values
    e = es_iapws(288.15)
    assert r[0, 0, 0, 0] == pytest.approx(mixing_ratio_by_hand(e, 100000.0), rel=1e-3)
    assert r[0, 1, 0, 0] == pytest.approx(mixing_ratio_by_hand(e, 85000.0), rel=1e-3)


def test_dew_point_far_above_temperature_is_impossible(tmp_path):
    attrs = {"standard_name": "dew_point_temperature", "units": "K"}
    path = _write(
        _plev_dataset(humidity=np.full((1, 3, 2, 3), 300.0), humidity_attrs=attrs),
        tmp_path / "wet.nc",
    )
    with pytest.raises(InputError, match="saturation"):
        open_model_output(path)


def test_relative_humidity_percent_by_hand(tmp_path):
    attrs = {"standard_name": "relative_humidity", "units": "%"}
    path = _write(
        _plev_dataset(humidity=np.full((1, 3, 2, 3), 80.0), humidity_attrs=attrs),
        tmp_path / "rh.nc",
    )
    ds = open_model_output(path)
    r = ds["humidity_mixing_ratio"].values
    assert r[0, 0, 0, 0] == pytest.approx(
        mixing_ratio_by_hand(0.8 * es_iapws(300.0), 100000.0), rel=1e-3
    )
    assert r[0, 2, 0, 0] == pytest.approx(
        mixing_ratio_by_hand(0.8 * es_iapws(290.0), 50000.0), rel=1e-3
    )


def test_relative_humidity_above_150_percent(tmp_path):
    attrs = {"standard_name": "relative_humidity", "units": "1"}
    path = _write(
        _plev_dataset(humidity=np.full((1, 3, 2, 3), 80.0), humidity_attrs=attrs),
        tmp_path / "rh.nc",
    )
    with pytest.raises(InputError) as info:
        open_model_output(path)
    assert '[input] humidity_units = "%"' in str(info.value)


def test_celsius_labelled_kelvin(tmp_path):
    t = np.broadcast_to(np.array([27.0, 22.0, 17.0])[None, :, None, None], (1, 3, 2, 3)).copy()
    path = _write(_plev_dataset(t=t), tmp_path / "celsius.nc")
    with pytest.raises(InputError, match=r'\[input\] temperature_units = "degC"'):
        open_model_output(path)
    ds = open_model_output(path, settings=InputSettings(temperature_units="degC"))
    np.testing.assert_allclose(ds["air_temperature"].values[0, :, 0, 0], [300.15, 295.15, 290.15])


def test_negative_humidity_and_sentinels(tmp_path):
    q = np.full((1, 3, 2, 3), 0.004)
    q[0, 0, 0, 0] = -1e-5
    q[0, 1, 1, 1] = -2e-6
    t = np.broadcast_to(np.array([300.0, 295.0, 290.0])[None, :, None, None], (1, 3, 2, 3)).copy()
    t[0, 0, 1, 2] = -1e33  # not the fill value: unmasked garbage
    path = _write(_plev_dataset(t=t, humidity=q), tmp_path / "dirty.nc")
    ds = open_model_output(path)
    assert ds.attrs["gridstab_negative_humidity_count"] == 2
    assert ds.attrs["gridstab_masked_value_count"] == 1
    r = ds["humidity_mixing_ratio"].values
    assert r[0, 0, 0, 0] == floor_like(r) and r[0, 1, 1, 1] == floor_like(r)
    assert np.isnan(ds["air_temperature"].values[0, 0, 1, 2])


def test_levels_below_the_surface_are_masked(tmp_path):
    src = _plev_dataset()
    src["ps"] = (
        ("time", "lat", "lon"),
        np.array([[[101000.0, 90000.0, 60000.0], [99000.0, 84000.0, 101000.0]]]),
        {"standard_name": "surface_air_pressure", "units": "Pa"},
    )
    path = _write(src, tmp_path / "ps.nc")
    ds = open_model_output(path)
    t = ds["air_temperature"].values[0]
    ps = src["ps"].values[0]
    for k, p in enumerate([100000.0, 85000.0, 50000.0]):
        assert np.array_equal(np.isnan(t[k]), p > ps)
    assert ds.attrs["gridstab_below_surface_count"] == int(
        sum((p > ps).sum() for p in [100000.0, 85000.0, 50000.0])
    )
    assert np.array_equal(np.isnan(ds["humidity_mixing_ratio"].values[0]), np.isnan(t))


def test_dimension_order_grid_mapping_and_bounds_kept(tmp_path):
    src = _plev_dataset(dims=("lat", "plev", "time", "lon"))
    src["crs"] = ((), 0, {"grid_mapping_name": "latitude_longitude"})
    src["ta"].attrs["grid_mapping"] = "crs"
    src["lat_bnds"] = (("lat", "nv"), np.array([[5.0, 15.0], [15.0, 25.0]]))
    src["lat"].attrs["bounds"] = "lat_bnds"
    path = _write(src, tmp_path / "order.nc")
    ds = open_model_output(path)
    assert ds["air_temperature"].dims == ("lat", "plev", "time", "lon")
    assert ds["humidity_mixing_ratio"].dims == ("lat", "plev", "time", "lon")
    assert "crs" in ds.coords and ds["air_temperature"].attrs["grid_mapping"] == "crs"
    assert "lat_bnds" in ds.coords
    np.testing.assert_allclose(ds["lat"].values, [10.0, 20.0])


def test_levels_kept_in_file_order(tmp_path):
    levels = (50000.0, 85000.0, 100000.0)
    t = np.broadcast_to(np.array([290.0, 295.0, 300.0])[None, :, None, None], (1, 3, 2, 3)).copy()
    ds = open_model_output(_write(_plev_dataset(levels=levels, t=t), tmp_path / "up.nc"))
    np.testing.assert_allclose(ds["air_pressure"].values, levels)
    assert ds.attrs["gridstab_level_order"] == "top first"


def test_geopotential_divided_by_gravity(tmp_path):
    src = _plev_dataset()
    phi = np.broadcast_to(
        np.array([1000.0, 15000.0, 55000.0])[None, :, None, None], (1, 3, 2, 3)
    ).copy()
    src["z"] = (
        ("time", "plev", "lat", "lon"),
        phi,
        {"standard_name": "geopotential", "units": "m2 s-2"},
    )
    ds = open_model_output(_write(src, tmp_path / "phi.nc"))
    np.testing.assert_allclose(
        ds["geopotential_height"].values[0, :, 0, 0], np.array([1000.0, 15000.0, 55000.0]) / G
    )


def test_mixing_ratio_needs_its_kind_when_named(tmp_path):
    attrs = {"units": "kg/kg"}
    src = _plev_dataset(humidity=np.full((1, 3, 2, 3), 0.004), humidity_attrs=attrs).rename(
        {"hus": "wv"}
    )
    path = _write(src, tmp_path / "wv.nc")
    with pytest.raises(InputError, match=r"\[input\] humidity(?!_kind)"):
        open_model_output(path)  # nothing says it is humidity
    with pytest.raises(InputError, match=r"\[input\] humidity_kind"):
        open_model_output(path, settings=InputSettings(humidity="wv"))
    ds = open_model_output(
        path, settings=InputSettings(humidity="wv", humidity_kind="mixing_ratio")
    )
    np.testing.assert_allclose(ds["humidity_mixing_ratio"].values, 0.004)


def test_no_temperature(tmp_path):
    path = _write(_plev_dataset().drop_vars("ta"), tmp_path / "not.nc")
    with pytest.raises(InputError, match=r'no air temperature.*\[input\] temperature = "\.\.\."'):
        open_model_output(path)


def test_no_vertical_coordinate(tmp_path):
    src = _plev_dataset()
    src["plev"].attrs = {"axis": "Z"}  # a vertical axis with nothing that says pressure
    path = _write(src, tmp_path / "nolev.nc")
    with pytest.raises(InputError, match=r'no pressure.*\[input\] pressure = "\.\.\."'):
        open_model_output(path)


def test_override_names_a_missing_variable(tmp_path):
    path = _write(_plev_dataset(), tmp_path / "x.nc")
    with pytest.raises(InputError, match=r"\[input\] temperature = 'tas' names no variable.*'ta'"):
        open_model_output(path, settings=InputSettings(temperature="tas"))


def test_file_not_found(tmp_path):
    with pytest.raises(InputError, match="does not exist"):
        open_model_output(tmp_path / "absent.nc")


def test_not_netcdf(tmp_path):
    path = tmp_path / "notes.nc"
    path.write_text("temperature,humidity\n290,0.005\n")
    with pytest.raises(InputError, match="not a NetCDF file"):
        open_model_output(path)


def test_several_files_along_time(tmp_path):
    first = _plev_dataset()
    second = _plev_dataset().assign_coords(time=("time", [6.0], first["time"].attrs))
    second["ta"] = second["ta"] + 2.0
    second["ta"].attrs = dict(first["ta"].attrs)
    _write(first, tmp_path / "part1.nc")
    _write(second, tmp_path / "part2.nc")
    ds = open_model_output(str(tmp_path / "part*.nc"))
    assert ds.sizes["time"] == 2
    np.testing.assert_allclose(
        ds["air_temperature"].values[1] - ds["air_temperature"].values[0], 2.0
    )
    assert ds.attrs["gridstab_source_files"] == "part1.nc, part2.nc"
    assert len(ds["air_temperature"].data.chunks[1]) == 1


def test_undecodable_time_is_kept_raw(tmp_path):
    src = _plev_dataset()
    src["time"].attrs = {
        "units": "months since 2030-01-01",
        "calendar": "standard",
        "standard_name": "time",
    }
    ds = open_model_output(_write(src, tmp_path / "months.nc"))
    assert ds["time"].values.tolist() == [0.0]
    assert "raw numbers" in ds.attrs["gridstab_recognition"]


def test_normalise_in_memory_dataset_is_lazy():
    ds = normalise_input(_plev_dataset())
    assert isinstance(ds["air_temperature"].data, dsa.Array)
    assert isinstance(ds["humidity_mixing_ratio"].data, dsa.Array)


def test_settings_validation():
    with pytest.raises(ValueError, match="humidity_kind"):
        InputSettings(humidity_kind="wetness")
    with pytest.raises(ValueError, match="pressure_units"):
        InputSettings(pressure_units="K")
    with pytest.raises(ValueError, match="temperature_units"):
        InputSettings(temperature_units="furlongs")
    assert InputSettings(formula_terms="ps: PSFC").formula_terms == {"ps": "PSFC"}


def test_pressure_field_on_model_levels(tmp_path):
    src = _plev_dataset().rename({"plev": "lev"})
    src["lev"].attrs = {"axis": "Z", "long_name": "model level"}
    src = src.assign_coords(lev=("lev", [1.0, 2.0, 3.0], {"axis": "Z"}))
    pres_hpa = np.broadcast_to(
        np.array([990.0, 840.0, 495.0])[None, :, None, None], (1, 3, 2, 3)
    ).copy()
    src["pres"] = (
        ("time", "lev", "lat", "lon"),
        pres_hpa,
        {"standard_name": "air_pressure", "units": "hPa"},
    )
    ds = open_model_output(_write(src, tmp_path / "field.nc"))
    assert ds.attrs["gridstab_vertical_coordinate"] == "pressure field"
    np.testing.assert_allclose(ds["air_pressure"].values, pres_hpa * 100.0)
    assert ds["air_pressure"].dims == ("time", "lev", "lat", "lon")


def test_values_not_scanned_when_switched_off(tmp_path):
    path = _write(_plev_dataset(humidity=np.full((1, 3, 2, 3), 10.0)), tmp_path / "unchecked.nc")
    # 10 "kg/kg" would be refused by the scan; without it nothing is read and the
    # counters say "not counted"
    ds = open_model_output(path, settings=InputSettings(check_values=False))
    assert ds.attrs["gridstab_negative_humidity_count"] == -1
    assert ds.attrs["gridstab_masked_value_count"] == -1
    assert "not scanned" in ds.attrs["gridstab_recognition"]


class _ComputeCounter(Callback):
    def __init__(self):
        super().__init__()
        self.computes = 0

    def _start(self, dsk):
        self.computes += 1


def test_one_pass_over_the_data_and_nothing_later(real_data_dir):
    counter = _ComputeCounter()
    with counter:
        ds = open_model_output(real_data_dir / "ncep_reanalysis_june_climo_plev.nc")
    assert counter.computes == 1  # the checks and counters share one dask.compute
    with counter:
        report = describe_input(ds)
        ds["humidity_mixing_ratio"] * 2.0
    assert counter.computes == 1  # the report and further lazy use compute nothing
    assert "8192" in report


def test_eager_and_chunked_input_agree():
    src = _plev_dataset()
    z = np.broadcast_to(np.array([100.0, 1500.0, 5600.0])[None, :, None, None], (1, 3, 2, 3))
    src["zg"] = (
        ("time", "plev", "lat", "lon"),
        z.copy(),
        {"standard_name": "geopotential_height", "units": "m"},
    )
    eager = normalise_input(src).compute()
    chunked = normalise_input(src.chunk({"plev": 1, "lat": 1}))
    assert len(chunked["air_temperature"].data.chunks[1]) == 1  # the level dim is one chunk
    xr.testing.assert_identical(eager, chunked.compute())


def test_supersaturated_values_are_kept_and_counted(tmp_path):
    # Slight supersaturation in model output is kept (the physics treats it as
    # saturated air) and counted. Reference count: e = p r/(eps + r) against IAPWS-95
    # saturation through `iapws` (es_iapws above), by hand.
    src = _plev_dataset()
    q = src["hus"].values
    t = src["ta"].values
    levels = src["plev"].values
    # 5 % supersaturation at 1000 hPa in two columns
    for j in (0, 1):
        e_s = es_iapws(float(t[0, 0, 0, j]))
        r = 1.05 * mixing_ratio_by_hand(e_s, levels[0])
        q[0, 0, 0, j] = r / (1 + r)
    path = _write(src, tmp_path / "supersaturated.nc")
    ds = open_model_output(path)
    assert ds.attrs["gridstab_supersaturated_count"] == 2
    loaded = ds["humidity_mixing_ratio"].values
    assert loaded[0, 0, 0, 0] == pytest.approx(q[0, 0, 0, 0] / (1 - q[0, 0, 0, 0]))
