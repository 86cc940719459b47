"""Tests of the gridstab command line: help, version, exit codes, messages, options.

Most run the real command in a subprocess (``sys.executable -m gridstab``); a few run
``gridstab.cli.run`` in this process to replace one step (an interrupt, a bug) or to
look at the parsed settings.
"""

from __future__ import annotations

import dataclasses
import subprocess
import sys
import typing
from pathlib import Path

import pytest

from gridstab import cli
from gridstab._version import __version__
from gridstab.caution import CAUTION
from gridstab.config import default_sections, load_config
from gridstab.engine import EngineSettings

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover
    import tomli as tomllib


def run_gridstab(*args: str, cwd: Path) -> subprocess.CompletedProcess:
    """Run the command line in a fresh interpreter; never through a shell."""
    return subprocess.run(
        [sys.executable, "-m", "gridstab", *args],
        cwd=cwd,
        capture_output=True,
        text=True,
        timeout=300,
        check=False,
    )


SECTIONS = default_sections()


def flat(text: str) -> str:
    return " ".join(text.split())


# --------------------------------------------------------------------------------------
# help and version (real subprocess)


def test_help_carries_the_caution_and_examples(tmp_path):
    done = run_gridstab("--help", cwd=tmp_path)
    assert done.returncode == 0
    assert flat(CAUTION) in flat(done.stdout)
    assert "examples:" in done.stdout
    assert "gridstab compute " in done.stdout
    assert "gridstab config --defaults" in done.stdout
    assert "exit codes:" in done.stdout
    for command in ("compute", "inspect", "plot", "config"):
        assert command in done.stdout


@pytest.mark.parametrize("command", ["compute", "inspect", "plot", "config"])
def test_every_command_help_carries_the_caution(tmp_path, command):
    done = run_gridstab(command, "--help", cwd=tmp_path)
    assert done.returncode == 0
    assert flat(CAUTION) in flat(done.stdout)


def test_version(tmp_path):
    done = run_gridstab("--version", cwd=tmp_path)
    assert done.returncode == 0
    assert done.stdout.strip() == f"gridstab {__version__}"


def test_help_does_not_import_the_heavy_libraries(tmp_path):
    code = (
        "import sys, contextlib, io\n"
        "from gridstab.__main__ import main\n"
        "with contextlib.redirect_stdout(io.StringIO()):\n"
        "    rc = main(['compute', '--help'])\n"
        "heavy = [m for m in ('xarray', 'dask', 'numba', 'matplotlib', 'cartopy') "
        "if m in sys.modules]\n"
        "print(rc, heavy)\n"
    )
    done = subprocess.run(
        [sys.executable, "-c", code],
        cwd=tmp_path,
        capture_output=True,
        text=True,
        timeout=60,
        check=False,
    )
    assert done.stdout.strip() == "0 []", done.stderr


# --------------------------------------------------------------------------------------
# exit codes and messages (real subprocess)


def test_missing_input_file(tmp_path):
    done = run_gridstab("compute", "no_such_run.nc", "--output", "out.nc", cwd=tmp_path)
    assert done.returncode == 3  # gridstab.errors.InputError
    assert "gridstab: error: input file 'no_such_run.nc' not found" in done.stderr
    assert "Traceback" not in done.stderr
    assert not (tmp_path / "out.nc").exists()


def test_input_pattern_that_matches_nothing(tmp_path):
    done = run_gridstab("inspect", "run_*.nc", cwd=tmp_path)
    assert done.returncode == 3
    assert "no input file matches the pattern 'run_*.nc'" in done.stderr


def test_missing_result_file_for_plot(tmp_path):
    done = run_gridstab("plot", "result.nc", "--maps", "maps", cwd=tmp_path)
    assert done.returncode == 3
    assert "'result.nc' not found" in done.stderr
    assert not (tmp_path / "maps").exists()


def test_config_file_that_is_not_toml(tmp_path):
    (tmp_path / "bad.toml").write_text("[engine]\nscheduler = threads\n")
    done = run_gridstab("config", "--config", "bad.toml", cwd=tmp_path)
    assert done.returncode == 2  # gridstab.errors.ConfigError
    assert "bad.toml: not valid TOML" in done.stderr
    assert "line 2" in done.stderr
    assert "Traceback" not in done.stderr


def test_config_file_that_does_not_exist(tmp_path):
    (tmp_path / "in.nc").write_bytes(b"")
    done = run_gridstab("compute", "in.nc", "-o", "out.nc", "--config", "nope.toml", cwd=tmp_path)
    assert done.returncode == 2
    assert "configuration file 'nope.toml' not found" in done.stderr


@pytest.mark.parametrize(
    "args",
    [
        [],  # no command
        ["compute", "in.nc"],  # no --output
        ["compute", "in.nc", "-o", "o.nc", "--parcel-ascent", "sideways"],
        ["compute", "in.nc", "-o", "o.nc", "--memory-budget", "-5"],
        ["compute", "in.nc", "-o", "o.nc", "-q", "-v"],
    ],
)
def test_usage_errors_exit_2(tmp_path, args):
    done = run_gridstab(*args, cwd=tmp_path)
    assert done.returncode == 2
    assert "usage: gridstab" in done.stderr


def test_unknown_config_key_exit_code_and_message(tmp_path):
    (tmp_path / "in.nc").write_bytes(b"")
    (tmp_path / "run.toml").write_text('[engine]\nscheduler = "threads"\nworker = 2\n')
    done = run_gridstab("compute", "in.nc", "-o", "out.nc", "--config", "run.toml", cwd=tmp_path)
    assert done.returncode == 2
    assert "run.toml, line 3: unknown key 'worker' in [engine]" in done.stderr
    assert "Did you mean 'workers'?" in done.stderr
    assert "Traceback" not in done.stderr
    assert not (tmp_path / "out.nc").exists()


def test_impossible_config_value_with_verbose_traceback(tmp_path):
    (tmp_path / "run.toml").write_text("[output]\ncompression_level = 12\n")
    quiet = run_gridstab("config", "--config", "run.toml", cwd=tmp_path)
    assert quiet.returncode == 2
    assert "run.toml, line 2: output.compression_level = 12 is refused" in quiet.stderr
    assert "Traceback" not in quiet.stderr
    loud = run_gridstab("config", "--config", "run.toml", "-v", cwd=tmp_path)
    assert loud.returncode == 2
    assert "Traceback" in loud.stderr


def test_impossible_value_stops_compute_before_any_work(tmp_path):
    (tmp_path / "in.nc").write_bytes(b"")
    (tmp_path / "run.toml").write_text("[physics]\nmixed_layer_depth_hpa = -50.0\n")
    done = run_gridstab("compute", "in.nc", "-o", "out.nc", "--config", "run.toml", cwd=tmp_path)
    assert done.returncode == 2
    assert "run.toml, line 2: physics.mixed_layer_depth_hpa = -50.0 is refused" in done.stderr


# --------------------------------------------------------------------------------------
# configuration through the command line (in-process, stand-in sections)


def test_config_defaults_parses_back_to_the_defaults(capsys, tmp_path):
    assert cli.run(["config", "--defaults"]) == 0
    text = capsys.readouterr().out
    tomllib.loads(text)
    path = tmp_path / "defaults.toml"
    path.write_text(text)
    settings = load_config(path)
    for name, cls in default_sections().items():
        assert settings[name] == cls()
    assert flat(CAUTION) in flat(text.replace("#", ""))


def test_config_prints_effective_settings(capsys, tmp_path):
    path = tmp_path / "run.toml"
    path.write_text('[engine]\nscheduler = "synchronous"\n[output]\ncompression_level = 9\n')
    assert cli.run(["config", "--config", str(path)]) == 0
    echoed = tmp_path / "echo.toml"
    echoed.write_text(capsys.readouterr().out)
    assert load_config(echoed) == load_config(path)
    assert load_config(echoed).engine.scheduler == "synchronous"


def test_config_defaults_and_config_together_is_an_error(capsys, tmp_path):
    path = tmp_path / "run.toml"
    path.write_text("")
    assert cli.run(["config", "--defaults", "--config", str(path)]) == 2
    assert "not both" in capsys.readouterr().err


def test_command_line_options_beat_the_config_file(tmp_path):
    path = tmp_path / "run.toml"
    path.write_text(
        '[physics]\nascent = "pseudo"\nmost_unstable_depth_hpa = 250.0\n'
        '[engine]\nscheduler = "threads"\nmemory_budget_mib = 512\nworkers = 2\n'
    )
    args = cli.build_parser().parse_args(
        [
            "compute",
            "in.nc",
            "-o",
            "out.nc",
            "--config",
            str(path),
            "--parcel-ascent",
            "reversible",
            "--no-virtual-correction",
            "--per-level",
            "--scheduler",
            "synchronous",
            "--memory-budget",
            "64",
            "--overwrite",
        ]
    )
    settings = cli._load_settings(args)
    assert settings.physics.ascent == "reversible"  # option beats file
    assert settings.physics.virtual_temperature_correction is False  # option beats default
    assert settings.physics.most_unstable_depth_hpa == 250.0  # file beats default
    assert settings.engine.scheduler == "synchronous"
    assert settings.engine.memory_budget_mib == 64
    assert settings.engine.workers == 2
    assert settings.engine.per_level_fields is True
    assert settings.output.level_fields is True  # --per-level also stores the fields
    assert settings.output.overwrite is True


def test_options_not_given_leave_the_file_alone(tmp_path):
    path = tmp_path / "run.toml"
    path.write_text(
        "[physics]\nvirtual_temperature_correction = false\n[output]\noverwrite = true\n"
    )
    args = cli.build_parser().parse_args(["compute", "in.nc", "-o", "o.nc", "--config", str(path)])
    settings = cli._load_settings(args)
    assert settings.physics.virtual_temperature_correction is False
    assert settings.output.overwrite is True


def test_option_targets_exist_and_choices_match_the_settings():
    for option, keys in cli.OPTION_TARGETS.values():
        for key in keys:
            section, _, name = key.partition(".")
            fields = {f.name for f in dataclasses.fields(SECTIONS[section])}
            assert name in fields, (option, key)
    hints = {
        "ascent": typing.get_type_hints(SECTIONS["physics"])["ascent"],
        "scheduler": typing.get_type_hints(SECTIONS["engine"])["scheduler"],
    }
    assert set(typing.get_args(hints["ascent"])) == set(cli.ASCENT_CHOICES)
    assert set(typing.get_args(hints["scheduler"])) == set(cli.SCHEDULER_CHOICES)


# --------------------------------------------------------------------------------------
# output checks, interrupts and internal errors (in-process)


def test_existing_output_needs_overwrite(capsys, tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    Path("in.nc").write_bytes(b"")
    Path("out.nc").write_bytes(b"old")
    assert cli.run(["compute", "in.nc", "-o", "out.nc"]) == 4  # gridstab.errors.OutputError
    err = capsys.readouterr().err
    assert "--output 'out.nc' exists. Add --overwrite" in err
    assert "overwrite = true" in err
    assert Path("out.nc").read_bytes() == b"old"


def test_output_that_is_an_input_is_refused(capsys, tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    Path("in.nc").write_bytes(b"data")
    assert cli.run(["compute", "in.nc", "-o", "./in.nc", "--overwrite"]) == 4
    assert "is also an input" in capsys.readouterr().err
    assert Path("in.nc").read_bytes() == b"data"


def test_output_folder_must_exist(capsys, tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    Path("in.nc").write_bytes(b"")
    assert cli.run(["compute", "in.nc", "-o", "nowhere/out.nc"]) == 4
    assert "the folder 'nowhere' of --output does not exist" in capsys.readouterr().err


def test_maps_must_not_be_a_file(capsys, tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    Path("in.nc").write_bytes(b"")
    Path("maps").write_text("")
    assert cli.run(["compute", "in.nc", "-o", "out.nc", "--maps", "maps"]) == 4
    assert "--maps 'maps' is a file" in capsys.readouterr().err


def test_keyboard_interrupt_exits_130_and_says_nothing_was_written(capsys, monkeypatch):
    def interrupted(raw):
        raise KeyboardInterrupt

    monkeypatch.setattr(cli, "resolve_inputs", interrupted)
    assert cli.run(["compute", "in.nc", "-o", "out.nc"]) == 130
    err = capsys.readouterr().err
    assert "interrupted; nothing was written." in err
    assert "Traceback" not in err


def test_termination_signal_exits_128_plus_signum(capsys, monkeypatch):
    from gridstab.writing import TerminatedBySignal

    def stopped(raw):
        raise TerminatedBySignal(15)

    monkeypatch.setattr(cli, "resolve_inputs", stopped)
    assert cli.run(["inspect", "in.nc"]) == 128 + 15  # shell convention, common practice
    assert "stopped by a signal; nothing was written." in capsys.readouterr().err


def test_internal_error_is_one_message_and_a_traceback_only_with_verbose(capsys, monkeypatch):
    def broken(raw):
        raise ZeroDivisionError("a bug")

    monkeypatch.setattr(cli, "resolve_inputs", broken)
    assert cli.run(["inspect", "in.nc"]) == 1
    err = capsys.readouterr().err
    assert err.count("\n") == 1
    assert "internal error: ZeroDivisionError: a bug" in err
    assert cli.run(["inspect", "in.nc", "-v"]) == 1
    assert "Traceback" in capsys.readouterr().err


# --------------------------------------------------------------------------------------
# helpers


def test_resolve_inputs_expands_patterns_in_order_without_duplicates(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    for name in ("b_02.nc", "b_01.nc", "a.nc"):
        Path(name).write_bytes(b"")
    Path("b_dir.nc").mkdir()
    found = cli.resolve_inputs(["a.nc", "b_*.nc", "a.nc"])
    assert found == [Path("a.nc"), Path("b_01.nc"), Path("b_02.nc")]


def test_resolve_inputs_refuses_a_folder(tmp_path):
    with pytest.raises(cli.InputError, match="is a folder"):
        cli.resolve_inputs([str(tmp_path)])


@pytest.mark.parametrize(
    ("scheduler", "workers", "chunks", "threads", "seconds"),
    [
        ("synchronous", 4, 3, 1, "12 s"),  # one thread whatever workers says
        ("threads", 2, 3, 2, "6 s"),
        ("threads", 4, 3, 3, "4 s"),  # no more chunks at once than there are chunks
    ],
)
def test_cost_report_divides_the_work_among_the_threads(
    scheduler, workers, chunks, threads, seconds
):
    import dask.array as da
    import xarray as xr

    result = xr.Dataset({"cape_ml": (("y", "x"), da.zeros((3 * chunks, 4), chunks=(3, 4)))})
    estimate = {"columns": 36.0, "levels": 5.0, "task_memory_mib": 10.0}
    estimate["seconds_single_thread"] = 12.0
    settings = EngineSettings(scheduler=scheduler, workers=workers, memory_budget_mib=100.0)
    text = cli.cost_report(result, estimate=estimate, engine_settings=settings)
    assert f"columns to process: 36 (5 levels each), in {chunks} chunk(s)" in text
    assert f"estimated time:     {seconds} with {threads} thread(s)" in text
    assert f"about {10.0 * threads:.1f} MiB ({threads} chunk(s) at once, 10.0 MiB each" in text


@pytest.mark.parametrize(
    ("scheduler", "workers", "expected_workers"),
    [("synchronous", 0, None), ("threads", 2, 2), ("threads", 0, None), ("processes", 2, 2)],
)
def test_dask_scheduler_sets_the_local_scheduler(scheduler, workers, expected_workers):
    import dask

    settings = EngineSettings(scheduler=scheduler, workers=workers)
    before = dask.config.get("scheduler", None)
    with cli.dask_scheduler(settings) as name:
        assert name == scheduler
        assert dask.config.get("scheduler") == scheduler
        assert dask.config.get("num_workers", None) == expected_workers
    assert dask.config.get("scheduler", None) == before


def test_progress_bar_only_when_wanted(monkeypatch):
    from dask.callbacks import Callback
    from dask.diagnostics import ProgressBar

    def active_bars():  # Callback.active holds tuples of the callbacks' bound methods
        owners = [getattr(f, "__self__", None) for hooks in Callback.active for f in hooks]
        return [o for o in owners if isinstance(o, ProgressBar)]

    monkeypatch.setattr(sys.stderr, "isatty", lambda: False, raising=False)
    cases = [  # (quiet, verbose, scheduler) -> bar shown
        ((False, 0, "threads"), False),  # stderr is not a terminal
        ((False, 1, "threads"), True),  # -v asks for it anyway
        ((True, 0, "threads"), False),  # -q
        ((False, 1, "distributed"), False),  # dask's local bar cannot see a cluster
    ]
    for (quiet, verbose, scheduler), shown in cases:
        state = cli._RunState(argv=[], quiet=quiet, verbose=verbose)
        with cli._progress(state, scheduler):
            assert bool(active_bars()) is shown, (quiet, verbose, scheduler)


# --------------------------------------------------------------------------------------
# the compute steps in order, with the reading and engine steps replaced by fakes (the
# real writer writes); end-to-end runs through the real engine belong with the engine.


@pytest.fixture
def fake_pipeline(monkeypatch):
    """Fake reading and engine modules; records the calls they get."""
    import types

    import dask.array as da
    import xarray as xr

    calls: dict[str, object] = {}

    def open_model_output(paths, *, settings):
        calls["paths"] = list(paths)
        calls["input_settings"] = settings
        t = xr.DataArray(da.full((3, 1, 2), 290.0, chunks=(3, 1, 2)), dims=("level", "y", "x"))
        return xr.Dataset({"air_temperature": t}, attrs={"gridstab_level_dim": "level"})

    def diagnose(ds, *, options, settings):
        calls["options"] = options
        calls["engine_settings"] = settings
        if calls.get("interrupt"):
            raise KeyboardInterrupt
        level = ds.attrs["gridstab_level_dim"]
        cape = (ds["air_temperature"].isel({level: 0}) * 0.0).assign_attrs(units="J kg-1")
        return xr.Dataset({"cape_ml": cape})

    reading = types.ModuleType("gridstab.reading")
    reading.open_model_output = open_model_output
    reading.describe_input = lambda ds: "fake input"
    reading.InputSettings = SECTIONS["input"]
    engine = types.ModuleType("gridstab.engine")
    engine.EngineSettings = EngineSettings
    engine.diagnose = diagnose
    engine.ESTIMATED_COLUMNS_PER_SECOND = 1000.0
    monkeypatch.setitem(sys.modules, "gridstab.reading", reading)
    monkeypatch.setitem(sys.modules, "gridstab.engine", engine)
    return calls


def test_compute_passes_the_settings_and_writes_the_file(fake_pipeline, tmp_path, monkeypatch):
    import xarray as xr

    monkeypatch.chdir(tmp_path)
    Path("in.nc").write_bytes(b"")
    argv = ["compute", "in.nc", "-o", "out.nc", "--parcel-ascent", "reversible", "-q"]
    assert cli.run([*argv, "--scheduler", "synchronous"]) == 0
    assert fake_pipeline["paths"] == [Path("in.nc")]
    assert fake_pipeline["options"].ascent == "reversible"
    assert fake_pipeline["engine_settings"].scheduler == "synchronous"
    with xr.open_dataset("out.nc") as written:
        assert "cape_ml" in written
        assert written.attrs["history"].endswith(
            "gridstab compute in.nc -o out.nc --parcel-ascent reversible -q --scheduler synchronous"
        )


def test_interrupt_during_compute_writes_nothing(fake_pipeline, tmp_path, monkeypatch, capsys):
    monkeypatch.chdir(tmp_path)
    Path("in.nc").write_bytes(b"")
    fake_pipeline["interrupt"] = True
    assert cli.run(["compute", "in.nc", "-o", "out.nc"]) == 130
    assert "interrupted; nothing was written." in capsys.readouterr().err
    assert sorted(p.name for p in tmp_path.iterdir()) == ["in.nc"]


def small_cf_file(path: Path) -> Path:
    """Three by four columns of five pressure levels, with CF attributes (invented)."""
    import numpy as np
    import xarray as xr

    pressure = np.array([100000.0, 85000.0, 70000.0, 50000.0, 30000.0])
    temperature = np.broadcast_to(
        np.array([290.0, 280.0, 270.0, 255.0, 235.0])[:, None, None], (5, 3, 4)
    )
    humidity = np.broadcast_to(np.array([8e-3, 6e-3, 3e-3, 1e-3, 1e-4])[:, None, None], (5, 3, 4))
    dims = ("plev", "lat", "lon")
    xr.Dataset(
        {
            "ta": (dims, temperature, {"standard_name": "air_temperature", "units": "K"}),
            "hus": (dims, humidity, {"standard_name": "specific_humidity", "units": "1"}),
        },
        coords={
            "plev": ("plev", pressure, {"standard_name": "air_pressure", "units": "Pa"}),
            "lat": ("lat", [40.0, 41.0, 42.0], {"units": "degrees_north"}),
            "lon": ("lon", [10.0, 11.0, 12.0, 13.0], {"units": "degrees_east"}),
        },
    ).to_netcdf(path)
    return path


# --------------------------------------------------------------------------------------
# end to end through the real command line


def test_inspect_reports_the_input_and_the_cost(tmp_path):
    small_cf_file(tmp_path / "small.nc")
    done = run_gridstab("inspect", "small.nc", "--scheduler", "synchronous", cwd=tmp_path)
    assert done.returncode == 0, done.stderr
    assert "'ta'" in done.stdout and "'hus'" in done.stdout  # what was recognised
    assert "columns to process: 12 (5 levels each)" in done.stdout  # 3 x 4 columns
    assert "with 1 thread(s)" in done.stdout  # synchronous
    assert sorted(p.name for p in tmp_path.iterdir()) == ["small.nc"]  # nothing written


@pytest.mark.slow
def test_compute_writes_the_result_and_maps_then_plot_redraws(tmp_path):
    import xarray as xr

    small_cf_file(tmp_path / "small.nc")
    args = [
        "compute",
        "small.nc",
        "--output",
        "out.nc",
        "--maps",
        "maps",
        "--scheduler",
        "synchronous",
        "--parcel-ascent",
        "reversible",
    ]
    done = run_gridstab(*args, cwd=tmp_path)
    assert done.returncode == 0, done.stderr
    assert "wrote " in done.stderr and "out.nc" in done.stderr
    with xr.open_dataset(tmp_path / "out.nc") as result:
        assert {"cape_ml", "cin_ml", "lcl_pressure_sb", "lifted_index_mu"} <= set(result)
        assert "gridstab compute small.nc --output out.nc" in result.attrs["history"]
        assert CAUTION in result.attrs["comment"]
    maps = sorted(p.name for p in (tmp_path / "maps").glob("*.png"))
    assert maps and all(name.startswith("out_") for name in maps)

    again = run_gridstab(*args, cwd=tmp_path)
    assert again.returncode == 4  # the output exists: gridstab.errors.OutputError
    assert "Add --overwrite" in again.stderr

    redraw = run_gridstab("plot", "out.nc", "--maps", "maps", cwd=tmp_path)
    assert redraw.returncode == 4  # the maps exist
    redraw = run_gridstab("plot", "out.nc", "--maps", "maps", "--overwrite", cwd=tmp_path)
    assert redraw.returncode == 0, redraw.stderr
    assert sorted(p.name for p in (tmp_path / "maps").glob("*.png")) == maps


def test_compute_refuses_a_memory_budget_the_engine_refuses(tmp_path):
    small_cf_file(tmp_path / "small.nc")
    done = run_gridstab("compute", "small.nc", "-o", "out.nc", "--memory-budget", "4", cwd=tmp_path)
    assert done.returncode == 2
    assert "command-line option --memory-budget: engine.memory_budget_mib = 4" in done.stderr
    assert not (tmp_path / "out.nc").exists()
