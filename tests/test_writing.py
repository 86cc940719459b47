"""The CF NetCDF writer: round trip, CF compliance, refusals, atomic writes."""

from __future__ import annotations

import hashlib
import os
import re
import signal
import threading
import time
import xml.etree.ElementTree as ET

import dask
import dask.array as da
import netCDF4
import numpy as np
import pytest
import xarray as xr

from gridstab._version import __version__
from gridstab.caution import CAUTION
from gridstab.errors import OutputError
from gridstab.writing import OutputSettings, TerminatedBySignal, write_result

try:  # tests/ as a package or as a plain folder on sys.path
    from tests.cfcheck import STANDARD_NAME_TABLE, run_cf_checker
except ImportError:  # pragma: no cover - depends on how pytest imports the tests
    from cfcheck import STANDARD_NAME_TABLE, run_cf_checker

FLAG_MEANINGS = (
    "absolutely_stable moist_neutral conditionally_unstable dry_neutral absolutely_unstable"
)
NT, NZ, NY, NX = 2, 4, 4, 5


def _parcel_attrs(standard_name: str | None, units: str, long_name: str) -> dict:
    attrs = {"units": units, "long_name": long_name, "parcel": "mixed_layer"}
    if standard_name:
        attrs["standard_name"] = standard_name
    return attrs


def synthetic_result(*, chunked: bool = True) -> xr.Dataset:
    """A small result with the documented variable names and engine-like attributes.

    The values are an invented scenario (no real event); they only need to be
    plausible in range and to carry NaN where a diagnostic is undefined.
    """
    rng = np.random.default_rng(7)
    lat = np.linspace(44.0, 47.0, NY)
    lon = np.linspace(5.0, 11.0, NX)
    lat_bnds = np.stack([lat - 0.5, lat + 0.5], axis=-1)
    lon_bnds = np.stack([lon - 0.75, lon + 0.75], axis=-1)
    level = np.array([92500.0, 85000.0, 70000.0, 50000.0])
    time = np.array(["2031-07-14T12:00", "2031-07-14T18:00"], dtype="datetime64[ns]")

    def field(low: float, high: float, dims: tuple[str, ...] = ("time", "lat", "lon")):
        shape = tuple(
            {"time": NT, "level": NZ, "layer": NZ - 1, "lat": NY, "lon": NX}[d] for d in dims
        )
        values = rng.uniform(low, high, shape)
        values.flat[3] = np.nan  # one undefined column
        if chunked:
            return da.from_array(values, chunks=(1,) + shape[1:])
        return values

    cls = rng.integers(0, 5, (NT, NY, NX)).astype("int8")
    cls[0, 0, 0] = -1
    if chunked:
        cls = da.from_array(cls, chunks=(1, NY, NX))
    plane = ("time", "lat", "lon")
    ds = xr.Dataset(
        coords={
            "time": ("time", time, {"standard_name": "time", "axis": "T"}),
            "level": (
                "level",
                level,
                {"standard_name": "air_pressure", "units": "Pa", "axis": "Z", "positive": "down"},
            ),
            "lat": (
                "lat",
                lat,
                {
                    "standard_name": "latitude",
                    "units": "degrees_north",
                    "axis": "Y",
                    "bounds": "lat_bnds",
                },
            ),
            "lon": (
                "lon",
                lon,
                {
                    "standard_name": "longitude",
                    "units": "degrees_east",
                    "axis": "X",
                    "bounds": "lon_bnds",
                },
            ),
        },
        attrs={"gridstab_level_dim": "level", "gridstab_recognition": "air_temperature <- ta (K)"},
    )
    ds["lat_bnds"] = (("lat", "bnds"), lat_bnds)
    ds["lon_bnds"] = (("lon", "bnds"), lon_bnds)
    ds["cape_ml"] = (
        plane,
        field(0, 3000),
        _parcel_attrs(
            "atmosphere_convective_available_potential_energy",
            "J kg-1",
            "convective available potential energy of the mixed-layer parcel",
        ),
    )
    ds["cin_ml"] = (
        plane,
        field(-300, 0),
        _parcel_attrs(
            "atmosphere_convective_inhibition",
            "J kg-1",
            "convective inhibition of the mixed-layer parcel",
        ),
    )
    ds["lcl_height_ml"] = (
        plane,
        field(200, 2500),
        _parcel_attrs(
            "atmosphere_lifting_condensation_level",
            "m",
            "lifting condensation level of the mixed-layer parcel above ground",
        ),
    )
    ds["lfc_height_ml"] = (
        plane,
        field(500, 4000),
        _parcel_attrs(
            "atmosphere_level_of_free_convection",
            "m",
            "level of free convection of the mixed-layer parcel above ground",
        ),
    )
    ds["lifted_index_ml"] = (
        plane,
        field(-8, 6),
        _parcel_attrs(
            "temperature_difference_between_ambient_air_and_air_lifted_adiabatically",
            "K",
            "lifted index of the mixed-layer parcel at 500 hPa",
        ),
    )
    ds["parcel_pressure_ml"] = (
        plane,
        field(90000, 100000),
        _parcel_attrs(
            "original_air_pressure_of_lifted_parcel",
            "Pa",
            "starting pressure of the mixed-layer parcel",
        ),
    )
    ds["lapse_rate_low3km"] = (
        plane,
        field(0.003, 0.0098),
        {
            "standard_name": "air_temperature_lapse_rate",
            "units": "K m-1",
            "long_name": "mean lapse rate of the lowest 3 km above ground",
        },
    )
    ds["stability_class_low3km"] = (
        plane,
        cls,
        {
            "long_name": "static stability class of the lowest 3 km above ground",
            "flag_values": np.arange(5, dtype="int8"),
            "flag_meanings": FLAG_MEANINGS,
            "_FillValue": -1,
        },
    )
    ds["theta_e"] = (
        ("time", "level", "lat", "lon"),
        field(300, 350, ("time", "level", "lat", "lon")),
        {"standard_name": "air_equivalent_potential_temperature", "units": "K"},
    )
    ds["layer_lapse_rate"] = (
        ("time", "layer", "lat", "lon"),
        field(0.0, 0.01, ("time", "layer", "lat", "lon")),
        {"standard_name": "air_temperature_lapse_rate", "units": "K m-1"},
    )
    return ds


def _sha(path) -> str:
    return hashlib.sha256(open(path, "rb").read()).hexdigest()


def _partials(folder) -> list[str]:
    return [p.name for p in folder.iterdir() if p.name.endswith(".partial")]


# --------------------------------------------------------------------------------------
# round trip


@pytest.mark.parametrize("chunked", [False, True], ids=["eager", "dask"])
def test_round_trip_keeps_values_attributes_and_compression(tmp_path, chunked):
    result = synthetic_result(chunked=chunked)
    before = {name: dict(result[name].attrs) for name in result.variables}
    path = write_result(
        result,
        tmp_path / "out.nc",
        inputs=[tmp_path / "in.nc"],
        history_line="gridstab compute in.nc --output out.nc",
    )
    assert path == tmp_path / "out.nc"
    # the input dataset is not modified
    assert {name: dict(result[name].attrs) for name in result.variables} == before

    with xr.open_dataset(path) as back:
        for name in ("cape_ml", "cin_ml", "lcl_height_ml", "lifted_index_ml"):
            expected = np.asarray(result[name].values, dtype="float32")
            np.testing.assert_array_equal(back[name].values, expected)
            for key in ("standard_name", "units", "long_name", "parcel"):
                assert back[name].attrs[key] == result[name].attrs[key]
        classes = back["stability_class_low3km"]
        assert classes.attrs["flag_meanings"] == FLAG_MEANINGS
        np.testing.assert_array_equal(classes.attrs["flag_values"], np.arange(5))
        assert np.isnan(classes.values[0, 0, 0])  # the -1 of the engine is missing data
        assert back.attrs["Conventions"] == "CF-1.8"
        assert back.attrs["source"] == f"gridstab {__version__}"
        assert back.attrs["comment"].startswith(CAUTION)
        assert back.attrs["institution"] == ""
        assert re.match(
            rf"\d{{4}}-\d\d-\d\dT\d\d:\d\d:\d\dZ gridstab {re.escape(__version__)}: "
            r"gridstab compute in\.nc --output out\.nc$",
            back.attrs["history"],
        )
        assert back.attrs["gridstab_recognition"] == "air_temperature <- ta (K)"
        # per-level and per-layer fields are left out by default
        assert "theta_e" not in back and "layer_lapse_rate" not in back
        assert "level" not in back.coords
        np.testing.assert_array_equal(back["time"].values, result["time"].values)

    with netCDF4.Dataset(path) as nc:
        cape = nc["cape_ml"]
        assert cape.dtype == np.float32
        assert cape.filters()["zlib"] and cape.filters()["shuffle"]
        assert cape.filters()["complevel"] == 4
        assert cape.chunking()[1:] == [NY, NX]  # one map is one chunk
        assert np.float32(cape.getncattr("_FillValue")) == np.float32(9.96921e36)
        cls = nc["stability_class_low3km"]
        assert cls.dtype == np.int8 and cls.getncattr("_FillValue") == -1
        assert cls.getncattr("flag_values").dtype == np.int8
        for name in ("time", "lat", "lon", "lat_bnds", "lon_bnds"):
            assert "_FillValue" not in nc[name].ncattrs(), name
        assert nc["lat"].getncattr("bounds") == "lat_bnds"


def test_level_fields_and_float64_on_request(tmp_path):
    settings = OutputSettings(level_fields=True, float_precision="float64", compression_level=0)
    path = write_result(synthetic_result(), tmp_path / "out.nc", settings=settings)
    with netCDF4.Dataset(path) as nc:
        assert nc["theta_e"].dimensions == ("time", "level", "lat", "lon")
        assert "layer_lapse_rate" in nc.variables
        assert nc["cape_ml"].dtype == np.float64
        assert not nc["cape_ml"].filters()["zlib"]


def test_chunks_hold_whole_maps_of_moderate_size(tmp_path):
    # 600 x 1000 float32 maps are 2.4 MB each: one map per chunk, not the whole file.
    data = da.zeros((3, 600, 1000), chunks=(1, 300, 1000), dtype="float32")
    ds = xr.Dataset({"cape_ml": (("time", "y", "x"), data, {"units": "J kg-1"})})
    path = write_result(ds, tmp_path / "big.nc")
    with netCDF4.Dataset(path) as nc:
        assert nc["cape_ml"].chunking() == [1, 600, 1000]


def test_grid_mapping_variable_is_kept_and_linked(tmp_path):
    # As xarray gives it after open_dataset(decode_coords="all"): the grid-mapping
    # variable is a coordinate and the link sits in the encoding.
    x = np.arange(4) * 3000.0
    y = np.arange(3) * 3000.0
    ds = xr.Dataset(
        {
            "cape_ml": (
                ("y", "x"),
                np.ones((3, 4)),
                {
                    "standard_name": "atmosphere_convective_available_potential_energy",
                    "units": "J kg-1",
                    "parcel": "mixed_layer",
                },
            )
        },
        coords={
            "x": ("x", x, {"standard_name": "projection_x_coordinate", "units": "m"}),
            "y": ("y", y, {"standard_name": "projection_y_coordinate", "units": "m"}),
            "lambert": (
                (),
                np.int32(0),
                {
                    "grid_mapping_name": "lambert_conformal_conic",
                    "standard_parallel": [30.0, 60.0],
                    "longitude_of_central_meridian": 10.0,
                    "latitude_of_projection_origin": 45.0,
                },
            ),
        },
    )
    ds["cape_ml"].encoding["grid_mapping"] = "lambert"
    path = write_result(ds, tmp_path / "lcc.nc")
    with netCDF4.Dataset(path) as nc:
        assert nc["cape_ml"].getncattr("grid_mapping") == "lambert"
        assert "lambert" not in getattr(nc["cape_ml"], "coordinates", "")
        assert nc["lambert"].getncattr("grid_mapping_name") == "lambert_conformal_conic"
        assert "coordinates" not in nc.ncattrs()
    errors, _, output = run_cf_checker(path)
    assert errors == 0, output


def test_writes_stream_each_chunk_once(tmp_path):
    # Laziness: the writer computes each dask chunk exactly once, while writing,
    # rather than computing the whole array beforehand (or twice).
    calls = []

    def block(x):
        calls.append(x.shape)
        return x * 2.0

    data = da.ones((6, NY, NX), chunks=(1, NY, NX)).map_blocks(
        block, dtype=float, meta=np.array((), dtype=float)
    )
    ds = xr.Dataset({"cape_ml": (("time", "lat", "lon"), data, {"units": "J kg-1"})})
    assert calls == []  # nothing computed while building
    write_result(ds, tmp_path / "lazy.nc")
    assert calls == [(1, NY, NX)] * 6
    with xr.open_dataset(tmp_path / "lazy.nc") as back:
        assert float(back["cape_ml"].sum()) == 2.0 * 6 * NY * NX


# --------------------------------------------------------------------------------------
# CF compliance


def test_standard_names_used_exist_in_the_cf_table():
    # Source: CF standard name table version 83, ../shared/data/cf.
    table = ET.parse(STANDARD_NAME_TABLE).getroot()
    known = {entry.get("id") for entry in table.iter("entry")}
    known |= {alias.get("id") for alias in table.iter("alias")}
    used = {
        var.attrs["standard_name"]
        for var in synthetic_result().variables.values()
        if "standard_name" in var.attrs
    }
    assert used - known == set()


def test_written_result_passes_the_cf_checker(tmp_path):
    # External check: the CF checker (cfchecker) with the offline CF tables.
    path = write_result(
        synthetic_result(), tmp_path / "result.nc", settings=OutputSettings(level_fields=True)
    )
    errors, warnings, output = run_cf_checker(path)
    assert errors == 0, output
    assert warnings == 0, output


def test_cf_checker_catches_a_bad_standard_name(tmp_path):
    # Control: the same checker reports an invalid standard name, so a pass means
    # something.
    ds = synthetic_result(chunked=False)
    ds["cape_ml"].attrs["standard_name"] = "atmosphere_convective_available_potential_energi"
    path = write_result(ds, tmp_path / "bad.nc")
    errors, _, output = run_cf_checker(path)
    assert errors >= 1
    assert "Invalid standard_name" in output


# --------------------------------------------------------------------------------------
# refusals


def test_refuses_to_replace_an_existing_file(tmp_path):
    target = tmp_path / "out.nc"
    target.write_bytes(b"previous")
    with pytest.raises(OutputError) as info:
        write_result(synthetic_result(), target)
    message = str(info.value)
    assert str(target) in message
    assert "--overwrite" in message and "[output] overwrite = true" in message
    assert target.read_bytes() == b"previous"
    assert _partials(tmp_path) == []


def test_overwrite_replaces_the_file(tmp_path):
    target = tmp_path / "out.nc"
    target.write_bytes(b"previous")
    write_result(synthetic_result(), target, settings=OutputSettings(overwrite=True))
    with xr.open_dataset(target) as back:
        assert "cape_ml" in back
    assert _partials(tmp_path) == []


@pytest.mark.parametrize("how", ["same path", "relative path", "hard link", "symlink"])
def test_refuses_to_write_over_an_input(tmp_path, monkeypatch, how):
    source = tmp_path / "model.nc"
    source.write_bytes(b"input data")
    target = source
    if how == "relative path":
        monkeypatch.chdir(tmp_path)
        target = "model.nc"
    elif how == "hard link":
        target = tmp_path / "linked.nc"
        os.link(source, target)
    elif how == "symlink":
        target = tmp_path / "alias.nc"
        target.symlink_to(source)
    with pytest.raises(OutputError, match="also an input file"):
        write_result(
            synthetic_result(), target, inputs=[source], settings=OutputSettings(overwrite=True)
        )
    assert source.read_bytes() == b"input data"


def test_missing_folder_is_named(tmp_path):
    folder = tmp_path / "no" / "such"
    with pytest.raises(OutputError) as info:
        write_result(synthetic_result(), folder / "out.nc")
    assert str(folder) in str(info.value) and "does not exist" in str(info.value)


def test_file_where_a_folder_is_expected(tmp_path):
    blocker = tmp_path / "plain_file"
    blocker.write_text("not a folder")
    with pytest.raises(OutputError, match="not a folder"):
        write_result(synthetic_result(), blocker / "out.nc")


def test_unwritable_folder_is_named():
    # Tests may run as root, for whom permission bits do not stop writes; /proc takes
    # no new files even from root (Linux procfs).
    if not os.path.isdir("/proc/self"):
        pytest.skip("needs a Linux /proc")
    with pytest.raises(OutputError) as info:
        write_result(synthetic_result(), "/proc/gridstab_out.nc")
    assert "'/proc'" in str(info.value)
    assert not os.path.exists("/proc/gridstab_out.nc")


# --------------------------------------------------------------------------------------
# interrupted writes


class _Boom(RuntimeError):
    pass


def _failing_result(after: int, exc: BaseException | None = None, *, n_blocks: int = 6):
    done = []
    lock = threading.Lock()

    def block(x):
        with lock:
            done.append(1)
            count = len(done)
        if count > after:
            if exc is None:
                os.kill(os.getpid(), signal.SIGTERM)
                time.sleep(2.0)  # the main thread handles the signal meanwhile
            else:
                raise exc
        return x

    data = da.ones((n_blocks, NY, NX), chunks=(1, NY, NX)).map_blocks(
        block, dtype=float, meta=np.array((), dtype=float)
    )
    return xr.Dataset({"cape_ml": (("time", "lat", "lon"), data, {"units": "J kg-1"})})


@pytest.mark.parametrize(
    "exc", [_Boom("disk vanished"), KeyboardInterrupt()], ids=["exception", "ctrl-c"]
)
def test_failure_midway_keeps_the_previous_file(tmp_path, exc):
    target = tmp_path / "out.nc"
    write_result(synthetic_result(), target)
    previous = _sha(target)
    with dask.config.set(scheduler="synchronous"), pytest.raises(type(exc)):
        write_result(
            _failing_result(after=2, exc=exc), target, settings=OutputSettings(overwrite=True)
        )
    assert _sha(target) == previous
    assert _partials(tmp_path) == []


def test_failure_midway_without_previous_file_leaves_nothing(tmp_path):
    with dask.config.set(scheduler="synchronous"), pytest.raises(_Boom):
        write_result(_failing_result(after=3, exc=_Boom("stop")), tmp_path / "new.nc")
    assert list(tmp_path.iterdir()) == []


def test_sigterm_during_write_removes_the_partial_file(tmp_path):
    target = tmp_path / "out.nc"
    write_result(synthetic_result(), target)
    previous = _sha(target)

    def sentinel(signum, frame):  # pragma: no cover - must not be called
        raise AssertionError("the writer's handler should have been active")

    old = signal.signal(signal.SIGTERM, sentinel)
    try:
        with (
            dask.config.set(scheduler="threads", num_workers=2),
            pytest.raises(TerminatedBySignal) as info,
        ):
            write_result(
                _failing_result(after=1, n_blocks=4),
                target,
                settings=OutputSettings(overwrite=True),
            )
        assert info.value.signum == signal.SIGTERM
        assert isinstance(info.value, KeyboardInterrupt)
        assert signal.getsignal(signal.SIGTERM) is sentinel  # restored afterwards
    finally:
        signal.signal(signal.SIGTERM, old)
    time.sleep(2.5)  # let the worker threads of the stopped write finish
    assert _sha(target) == previous
    assert _partials(tmp_path) == []


# --------------------------------------------------------------------------------------
# settings


@pytest.mark.parametrize(
    ("kwargs", "field"),
    [
        ({"compression_level": 10}, "compression_level"),
        ({"compression_level": -1}, "compression_level"),
        ({"compression_level": True}, "compression_level"),
        ({"float_precision": "float16"}, "float_precision"),
    ],
)
def test_settings_refuse_impossible_values(kwargs, field):
    with pytest.raises((ValueError, TypeError), match=field):
        OutputSettings(**kwargs)
