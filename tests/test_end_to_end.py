"""The main job end to end on the demo forecasts: command line and Python API."""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
import xarray as xr
from cfcheck import run_cf_checker

from gridstab.columns import diagnose_columns
from gridstab.engine import EngineSettings, diagnose
from gridstab.reading import open_model_output
from gridstab.writing import OutputSettings, write_result

SAMPLES = Path(__file__).resolve().parents[1] / "sample_grids"
PLEV = SAMPLES / "demo_forecast_plev.nc"
HYBRID = SAMPLES / "demo_forecast_hybrid.nc"


def gridstab(*args, cwd):
    return subprocess.run([sys.executable, "-m", "gridstab", *map(str, args)], cwd=cwd,
                          capture_output=True, text=True, timeout=600, env=dict(os.environ))


@pytest.fixture(scope="module")
def plev_run(tmp_path_factory):
    work = tmp_path_factory.mktemp("plev")
    run = gridstab("compute", PLEV, "--output", work / "demo.nc", "--maps", work / "maps",
                   "-q", cwd=work)
    return work, run


@pytest.fixture(scope="module")
def hybrid_run(tmp_path_factory):
    work = tmp_path_factory.mktemp("hybrid")
    run = gridstab("compute", HYBRID, "--output", work / "demo.nc", "--maps", work / "maps",
                   "--per-level", "-q", cwd=work)
    return work, run


@pytest.mark.slow
@pytest.mark.parametrize("which", ["plev_run", "hybrid_run"])
def test_command_line_writes_cf_netcdf_and_maps(which, request):
    work, run = request.getfixturevalue(which)
    assert run.returncode == 0, run.stderr
    result = work / "demo.nc"
    assert result.exists()
    assert not list(work.glob(".*partial*"))
    errors, warnings, text = run_cf_checker(result)
    assert errors == 0, text
    maps = sorted((work / "maps").glob("*.png"))
    kinds = {p.name.split("_t0")[0] for p in maps}
    assert any("class_low3km" in k for k in kinds)
    assert any("cape_cin" in k for k in kinds)
    assert any("lcl" in k for k in kinds)
    for path in maps:
        assert path.stat().st_size > 20_000
        assert path.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


@pytest.mark.slow
def test_result_keeps_the_input_grid_and_metadata(plev_run):
    work, run = plev_run
    assert run.returncode == 0, run.stderr
    with xr.open_dataset(work / "demo.nc") as out, xr.open_dataset(PLEV) as source:
        assert out.attrs["Conventions"].startswith("CF-")
        assert "gridstab" in out.attrs["history"]
        assert out.attrs["gridstab_physics_ascent"] == "pseudo"
        assert out["cape_mu"].dims == ("time", "lat", "lon")
        np.testing.assert_array_equal(out["lat"].values, source["lat"].values)
        np.testing.assert_array_equal(out["lon"].values, source["lon"].values)
        np.testing.assert_array_equal(out["time"].values, source["time"].values)
        assert out["cape_sb"].attrs["parcel"] == "surface_based"
        assert out["stability_class_low3km"].encoding["dtype"] == np.int8  # int8 on disk
        # every class appears somewhere in the demo (its scenario is built for that)
        classes = np.unique(out["stability_class_low3km"].values)
        classes = classes[np.isfinite(classes)].astype(int)
        assert set(range(5)) <= set(classes.tolist())
        assert float(out["cape_ml"].max()) > 3000 and float(out["cin_ml"].min()) < -200


@pytest.mark.slow
def test_grid_results_equal_the_kernels_for_sampled_columns(plev_run):
    work, run = plev_run
    assert run.returncode == 0, run.stderr
    ds = open_model_output(PLEV)
    rng = np.random.default_rng(0)
    t = ds["air_temperature"]
    with xr.open_dataset(work / "demo.nc") as out:
        for _ in range(12):
            index = {"time": rng.integers(t.sizes["time"]), "lat": rng.integers(t.sizes["lat"]),
                     "lon": rng.integers(t.sizes["lon"])}
            column = ds.isel(index)
            ref = diagnose_columns(
                column["air_pressure"].values[None], column["air_temperature"].values[None],
                column["humidity_mixing_ratio"].values[None],
                height=column["geopotential_height"].values[None],
                surface_pressure=np.atleast_1d(column["surface_air_pressure"].values),
                surface_height=np.atleast_1d(column["surface_altitude"].values),
            )
            for name in ("cape_mu", "cin_sb", "lcl_height_ml", "lifted_index_sb"):
                np.testing.assert_allclose(out[name].isel(index).values, ref[name][0],
                                           rtol=1e-6, atol=1e-4, equal_nan=True)
            assert out["stability_class_850_500"].isel(index).values == ref["stability_class_850_500"][0]


@pytest.mark.slow
def test_api_gives_what_the_command_line_wrote(hybrid_run, tmp_path):
    work, run = hybrid_run
    assert run.returncode == 0, run.stderr
    ds = open_model_output(HYBRID)
    result = diagnose(ds, settings=EngineSettings(per_level_fields=True))
    path = write_result(result, tmp_path / "api.nc",
                        settings=OutputSettings(level_fields=True), inputs=[HYBRID])
    with xr.open_dataset(path) as api, xr.open_dataset(work / "demo.nc") as cli:
        for name in ("cape_ml", "el_pressure_mu", "stability_class_low3km", "theta_e",
                     "layer_stability_class"):
            np.testing.assert_array_equal(api[name].values, cli[name].values)
        assert cli["theta_e"].dims == ("time", "lev", "y", "x")
        assert "lambert" in cli.variables or any("grid_mapping" in v.attrs for v in cli.data_vars.values())


@pytest.mark.parametrize("path, expected", [
    (PLEV, ["temp", "spec_hum", "pressure"]),
    (HYBRID, ["tk", "rh_pct", "hybrid"]),
])
def test_inspect_reports_each_dialect(path, expected, tmp_path):
    run = gridstab("inspect", path, cwd=tmp_path)
    assert run.returncode == 0, run.stderr
    text = run.stdout.lower()
    for word in expected:
        assert word in text, (word, run.stdout)
    assert "columns" in text
    assert not list(tmp_path.iterdir())  # inspect writes nothing
