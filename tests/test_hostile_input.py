"""The hostile-input catalogue: every mistake ends in a clear message, a non-zero exit code,
no output left behind, and the input untouched."""

from __future__ import annotations

import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
from hostile import digest, good_dataset, write

from gridstab.cli import run


def compute(capsys, *args):
    code = run(["compute", *map(str, args)])
    captured = capsys.readouterr()
    return code, captured.err


def expect_refusal(capsys, tmp_path, source, expected_code, *words, extra=()):
    before = digest(source) if Path(source).is_file() else None
    out = tmp_path / "out" / "result.nc"
    out.parent.mkdir(exist_ok=True)
    code, err = compute(capsys, source, "--output", out, "-q", *extra)
    assert code == expected_code, err
    assert "internal error" not in err
    for word in words:
        assert word.lower() in err.lower(), (word, err)
    assert not out.exists()
    assert list(out.parent.iterdir()) == []  # nothing half-written either
    if before is not None:
        assert digest(source) == before
    return err


# ---- variables and values -------------------------------------------------------------

def test_missing_temperature(tmp_path, capsys):
    src = write(good_dataset().drop_vars("ta"), tmp_path / "in.nc")
    expect_refusal(capsys, tmp_path, src, 3, "temperature", "[input]")


def test_missing_humidity(tmp_path, capsys):
    src = write(good_dataset().drop_vars("hus"), tmp_path / "in.nc")
    expect_refusal(capsys, tmp_path, src, 3, "humidity", "[input]")


def test_missing_vertical_coordinate(tmp_path, capsys):
    ds = good_dataset()
    ds = ds.drop_vars("plev").rename({"plev": "k"})
    src = write(ds, tmp_path / "in.nc")
    expect_refusal(capsys, tmp_path, src, 3, "vertical", "pressure")


def test_two_candidates_for_temperature(tmp_path, capsys):
    ds = good_dataset()
    ds["ta2"] = ds["ta"] + 1.0
    ds["ta2"].attrs = dict(ds["ta"].attrs)
    src = write(ds, tmp_path / "in.nc")
    expect_refusal(capsys, tmp_path, src, 3, "ta2", 'temperature = "')


def test_humidity_without_units(tmp_path, capsys):
    ds = good_dataset()
    del ds["hus"].attrs["units"]
    src = write(ds, tmp_path / "in.nc")
    expect_refusal(capsys, tmp_path, src, 3, "hus", "humidity_units")


def test_unknown_units(tmp_path, capsys):
    ds = good_dataset()
    ds["ta"].attrs["units"] = "furlongs"
    src = write(ds, tmp_path / "in.nc")
    expect_refusal(capsys, tmp_path, src, 3, "furlongs", "temperature_units")


def test_hpa_values_labelled_pa(tmp_path, capsys):
    ds = good_dataset()
    ds["plev"].attrs["units"] = "Pa"
    src = write(ds, tmp_path / "in.nc")
    expect_refusal(capsys, tmp_path, src, 3, "plev", "pressure_units")


@pytest.mark.parametrize("levels", [
    [1000, 925, 850, 700, 600, 500, 400, 300, 250, 200, 150, 100][::-1][:6] + [1000, 925, 850, 700, 600, 500],
    [1000, 925, 925, 700, 600, 500, 400, 300, 250, 200, 150, 100],
], ids=["non-monotonic", "duplicated"])
def test_bad_level_order(tmp_path, capsys, levels):
    ds = good_dataset().assign_coords(plev=("plev", np.array(levels, float), good_dataset()["plev"].attrs))
    src = write(ds, tmp_path / "in.nc")
    expect_refusal(capsys, tmp_path, src, 3, "plev", "monoton")


def test_single_level(tmp_path, capsys):
    src = write(good_dataset().isel(plev=[0]), tmp_path / "in.nc")
    expect_refusal(capsys, tmp_path, src, 3, "level")


def test_humidity_far_beyond_saturation(tmp_path, capsys):
    ds = good_dataset()
    ds["hus"][:, 0] = 0.5
    src = write(ds, tmp_path / "in.nc")
    expect_refusal(capsys, tmp_path, src, 3, "hus", "saturation")


@pytest.mark.parametrize("value", [120.0, 400.0])
def test_temperature_outside_150_350_k(tmp_path, capsys, value):
    ds = good_dataset()
    ds["ta"][0, 3, 1, 1] = value
    src = write(ds, tmp_path / "in.nc")
    expect_refusal(capsys, tmp_path, src, 3, "ta", "150")


def test_dimensions_that_do_not_match(tmp_path, capsys):
    ds = good_dataset()
    hus = ds["hus"].isel(lat=[0, 1]).rename({"lat": "lat2"}).drop_vars("lat2", errors="ignore")
    ds = ds.drop_vars("hus")
    ds["hus"] = hus
    src = write(ds, tmp_path / "in.nc")
    expect_refusal(capsys, tmp_path, src, 3, "hus", "dimension")


def test_empty_time_axis(tmp_path, capsys):
    src = write(good_dataset().isel(time=slice(0, 0)), tmp_path / "in.nc")
    expect_refusal(capsys, tmp_path, src, 3, "time", "empty")


def test_all_missing_columns_and_time_steps_succeed_with_missing_results(tmp_path, capsys):
    import xarray as xr

    ds = good_dataset()
    ds["ta"][1] = np.nan  # a whole time step
    ds["ta"][0, :, 0, 0] = np.nan  # one column
    src = write(ds, tmp_path / "in.nc")
    before = digest(src)
    out = tmp_path / "result.nc"
    code, err = compute(capsys, src, "--output", out, "-q")
    assert code == 0, err
    with xr.open_dataset(out) as result:
        assert np.isnan(result["cape_mu"][1]).all()
        assert np.isnan(result["cape_mu"][0, 0, 0])
        assert np.isfinite(result["cape_mu"][0, 1:, :]).all()
    assert digest(src) == before


# ---- files ------------------------------------------------------------------------------

def test_input_not_found(tmp_path, capsys):
    expect_refusal(capsys, tmp_path, tmp_path / "nowhere.nc", 3, "nowhere.nc", "not")


def test_input_not_netcdf(tmp_path, capsys):
    src = tmp_path / "notes.nc"
    src.write_text("these are not the data you are looking for\n")
    expect_refusal(capsys, tmp_path, src, 3, "notes.nc", "netcdf")


def test_input_truncated(tmp_path, capsys):
    whole = write(good_dataset(), tmp_path / "whole.nc")
    src = tmp_path / "cut.nc"
    src.write_bytes(whole.read_bytes()[: whole.stat().st_size // 2])
    expect_refusal(capsys, tmp_path, src, 3, "cut.nc")


def test_input_is_a_folder_or_a_dangling_link(tmp_path, capsys):
    folder = tmp_path / "folder.nc"
    folder.mkdir()
    expect_refusal(capsys, tmp_path, folder, 3, "folder.nc")
    link = tmp_path / "gone.nc"
    link.symlink_to(tmp_path / "missing-target.nc")
    expect_refusal(capsys, tmp_path, link, 3, "gone.nc")


def test_output_folder_missing(tmp_path, capsys):
    src = write(good_dataset(), tmp_path / "in.nc")
    code, err = compute(capsys, src, "--output", tmp_path / "no" / "such" / "out.nc", "-q")
    assert code == 4 and "does not exist" in err
    assert not (tmp_path / "no").exists()


def test_output_folder_not_writable(tmp_path, capsys):
    src = write(good_dataset(), tmp_path / "in.nc")
    code, err = compute(capsys, src, "--output", "/proc/gridstab-out.nc", "-q")
    assert code == 4, err
    assert "/proc" in err


def test_output_equal_to_input(tmp_path, capsys):
    src = write(good_dataset(), tmp_path / "in.nc")
    before = digest(src)
    code, err = compute(capsys, src, "--output", src, "--overwrite", "-q")
    assert code == 4 and "input" in err
    assert digest(src) == before


def test_existing_output_needs_an_explicit_flag(tmp_path, capsys):
    src = write(good_dataset(), tmp_path / "in.nc")
    out = tmp_path / "out.nc"
    out.write_text("previous")
    code, err = compute(capsys, src, "--output", out, "-q")
    assert code == 4 and "--overwrite" in err
    assert out.read_text() == "previous"


def test_disk_full(tmp_path):
    # simulate a full disk with a file-size limit on the child process
    src = write(good_dataset(nt=4, ny=20, nx=30), tmp_path / "in.nc")
    before = digest(src)
    out = tmp_path / "out.nc"
    script = (
        "import resource, signal, sys\n"
        "signal.signal(signal.SIGXFSZ, signal.SIG_IGN)\n"
        "resource.setrlimit(resource.RLIMIT_FSIZE, (20000, 20000))\n"
        "from gridstab.__main__ import main\n"
        "sys.exit(main())\n"
    )
    child = subprocess.run([sys.executable, "-c", script, "compute", str(src), "--output", str(out), "-q"],
                           capture_output=True, text=True, timeout=300)
    assert child.returncode == 4, child.stderr
    assert "space" in child.stderr.lower() or "size" in child.stderr.lower()
    assert not out.exists()
    assert [p.name for p in tmp_path.iterdir()] == ["in.nc"]
    assert digest(src) == before


# ---- configuration ----------------------------------------------------------------------

@pytest.mark.parametrize("text, words", [
    ('[physics]\nmixed_layer_dept_hpa = 100\n', ["mixed_layer_dept_hpa", "line 2", "mixed_layer_depth_hpa"]),
    ('[physics]\nmixed_layer_depth_hpa = "deep"\n', ["mixed_layer_depth_hpa", "line 2"]),
    ('[physics]\n\nmixed_layer_depth_hpa = -50\n', ["mixed_layer_depth_hpa", "-50", "line 3"]),
    ('[engine]\nscheduler = "quantum"\n', ["scheduler", "threads"]),
    ('[physics]\nascent = "__import__(\'os\').system(\'touch pwned\')"\n', ["ascent"]),
], ids=["unknown key", "wrong type", "impossible value", "bad choice", "code as data"])
def test_bad_config(tmp_path, capsys, text, words):
    src = write(good_dataset(), tmp_path / "in.nc")
    config = tmp_path / "bad.toml"
    config.write_text(text)
    err = expect_refusal(capsys, tmp_path, src, 2, *words, extra=("--config", config))
    assert "bad.toml" in err
    assert not (tmp_path / "pwned").exists() and not Path("pwned").exists()


# ---- interruption -----------------------------------------------------------------------

@pytest.mark.slow
@pytest.mark.parametrize("signum", [signal.SIGINT, signal.SIGTERM], ids=["SIGINT", "SIGTERM"])
def test_interruption_mid_write_leaves_no_partial_output(tmp_path, signum):
    src = write(good_dataset(nt=40, ny=40, nx=60), tmp_path / "in.nc")
    before = digest(src)
    out = tmp_path / "out.nc"
    out.write_bytes(b"previous result")
    child = subprocess.Popen(
        [sys.executable, "-m", "gridstab", "compute", str(src), "--output", str(out),
         "--overwrite", "-q", "--memory-budget", "8", "--scheduler", "synchronous"],
        stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
    )
    deadline = time.time() + 120
    while time.time() < deadline and not any(p.name.endswith(".partial") for p in tmp_path.iterdir()):
        time.sleep(0.05)
    assert any(p.name.endswith(".partial") for p in tmp_path.iterdir()), "the write never started"
    time.sleep(0.3)
    child.send_signal(signum)
    _, err = child.communicate(timeout=120)
    assert child.returncode in (130, 128 + signum), err
    assert "nothing was written" in err or "stopped" in err or "interrupted" in err
    assert out.read_bytes() == b"previous result"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["in.nc", "out.nc"]
    assert digest(src) == before


# ---- safety -----------------------------------------------------------------------------

def test_no_path_goes_through_a_shell():
    package = Path(__file__).resolve().parents[1] / "gridstab"
    for path in package.glob("*.py"):
        text = path.read_text()
        for forbidden in ("shell=True", "os.system(", "os.popen(", "eval(", "exec("):
            assert forbidden not in text, (path.name, forbidden)
