"""The ``gridstab`` command line: the only module that prints or exits.

Commands
--------
``gridstab compute INPUT... --output OUT.nc``
    Diagnose every column of the input and write a CF NetCDF file (and maps).
``gridstab inspect INPUT...``
    Say what the input holds and what a ``compute`` would cost, computing nothing heavy.
``gridstab plot RESULT.nc --maps DIR``
    Draw maps from a file that ``compute`` wrote.
``gridstab config [--defaults]``
    Print the fully commented default configuration, or the effective settings.

Each command parses, calls plain functions of the other modules and reports. Heavy
imports (xarray, dask, numba, cartopy) happen inside the commands, so ``gridstab --help``
is fast. Errors that gridstab expects (:class:`~gridstab.errors.GridstabError`) become one
message on stderr and the error's exit code; a traceback is shown only with ``-v``.
Paths are handed to Python functions as they are, never through a shell.
"""

from __future__ import annotations

import argparse
import contextlib
import glob
import logging
import math
import os
import shlex
import sys
import textwrap
import traceback
import warnings
from collections.abc import Iterator, Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from gridstab._version import __version__
from gridstab.caution import CAUTION
from gridstab.errors import EXIT_CODES, ConfigError, GridstabError, InputError, OutputError

__all__ = [
    "ASCENT_CHOICES",
    "OPTION_TARGETS",
    "SCHEDULER_CHOICES",
    "build_parser",
    "cost_report",
    "dask_scheduler",
    "resolve_inputs",
    "run",
]

log = logging.getLogger("gridstab")

SCHEDULER_CHOICES = ("threads", "synchronous", "processes", "distributed")
"""Choices of ``--scheduler``; must equal the Literal of ``EngineSettings.scheduler``."""

ASCENT_CHOICES = ("pseudo", "reversible")
"""Choices of ``--parcel-ascent``; must equal the Literal of ``ColumnOptions.ascent``."""

OPTION_TARGETS: dict[str, tuple[str, tuple[str, ...]]] = {
    "overwrite": ("--overwrite", ("output.overwrite",)),
    "per_level": ("--per-level", ("engine.per_level_fields", "output.level_fields")),
    "parcel_ascent": ("--parcel-ascent", ("physics.ascent",)),
    "virtual_correction": (
        "--no-virtual-correction",
        ("physics.virtual_temperature_correction",),
    ),
    "scheduler": ("--scheduler", ("engine.scheduler",)),
    "memory_budget": ("--memory-budget", ("engine.memory_budget_mib",)),
}
"""argparse destination -> (option, the configuration keys it overrides).

``--per-level`` sets both the engine's switch (compute the per-level and per-layer
fields) and the writer's (store them).
"""

_CAUTION_TEXT = textwrap.fill(CAUTION, 79)

_EXAMPLES = """\
examples:
  gridstab inspect lakeland_run07_2031-06-*.nc
      what the files hold, how many columns, and the memory and time a compute needs
  gridstab compute lakeland_run07_2031-06-14.nc --output stability.nc --maps maps/
      diagnose every column, write stability.nc and draw maps into maps/
  gridstab compute "member*/levels.nc" --output ens.nc --config configs/climate_analysis.toml
      a quoted pattern is expanded by gridstab itself (no shell involved)
  gridstab compute run.nc --output out.nc --parcel-ascent reversible --memory-budget 256
      command-line options beat the configuration file, which beats the defaults
  gridstab plot stability.nc --maps maps/
      redraw the maps of a written result
  gridstab config --defaults > gridstab.toml
      start a configuration file with every key, its default and its meaning
"""

_EXIT_TEXT = "exit codes:\n" + "\n".join(
    f"  {code:<4} {meaning}" for meaning, code in EXIT_CODES.items()
)


@dataclass
class _RunState:
    """What a command has written so far, for an honest message when interrupted."""

    argv: list[str]
    written: list[Path] = field(default_factory=list)
    doing: str = ""
    verbose: int = 0
    quiet: bool = False


# --------------------------------------------------------------------------------------
# the parser


def build_parser() -> argparse.ArgumentParser:
    """Build the argument parser of the ``gridstab`` command.

    Returns
    -------
    argparse.ArgumentParser
        The parser; each sub-command stores its handler in ``handler``.
    """
    fmt = argparse.RawDescriptionHelpFormatter
    verbosity = argparse.ArgumentParser(add_help=False)
    group = verbosity.add_argument_group("messages")
    quiet_or_verbose = group.add_mutually_exclusive_group()
    quiet_or_verbose.add_argument(
        "-q",
        "--quiet",
        action="store_true",
        default=argparse.SUPPRESS,
        help="print only warnings and errors; no progress bar",
    )
    quiet_or_verbose.add_argument(
        "-v",
        "--verbose",
        action="count",
        default=argparse.SUPPRESS,
        help="more detail on stderr, a progress bar even when stderr is not a terminal, "
        "and tracebacks on errors; -vv also shows dask's own messages",
    )
    config_parent = argparse.ArgumentParser(add_help=False)
    config_parent.add_argument(
        "--config",
        metavar="FILE",
        help="TOML configuration file (see `gridstab config --defaults`)",
    )

    parser = argparse.ArgumentParser(
        prog="gridstab",
        description=textwrap.fill(
            "Moist static stability and parcel diagnostics (theta, theta_e, theta_es, "
            "lapse rates, layer classes, CAPE, CIN, LCL, LFC, EL, lifted index) for every "
            "column of CF NetCDF model output.",
            79,
        )
        + "\n\n"
        + _CAUTION_TEXT,
        epilog=_EXAMPLES + "\n" + _EXIT_TEXT,
        formatter_class=fmt,
        parents=[verbosity],
    )
    parser.add_argument("--version", action="version", version=f"gridstab {__version__}")
    commands = parser.add_subparsers(title="commands", dest="command", metavar="COMMAND")
    commands.required = True

    compute = commands.add_parser(
        "compute",
        help="diagnose every column and write a CF NetCDF file (and maps)",
        description="Diagnose every column of the input and write a CF NetCDF file.\n\n"
        + _CAUTION_TEXT,
        epilog=_EXAMPLES,
        formatter_class=fmt,
        parents=[verbosity, config_parent],
    )
    compute.add_argument(
        "inputs",
        nargs="+",
        metavar="INPUT",
        help="NetCDF file(s) of model output on levels; a quoted pattern such as "
        '"run*.nc" is expanded by gridstab',
    )
    compute.add_argument(
        "-o", "--output", required=True, metavar="OUT.nc", help="the NetCDF file to write"
    )
    compute.add_argument("--maps", metavar="DIR", help="also draw maps into this folder")
    compute.add_argument(
        "--overwrite",
        action="store_true",
        default=None,
        help="replace OUT.nc and its maps if they exist (config: output.overwrite)",
    )
    compute.add_argument(
        "--per-level",
        dest="per_level",
        action="store_true",
        default=None,
        help="also write per-level and per-layer fields (config: engine.per_level_fields)",
    )
    compute.add_argument(
        "--parcel-ascent",
        dest="parcel_ascent",
        choices=ASCENT_CHOICES,
        help="saturated ascent of the parcels (config: physics.ascent)",
    )
    compute.add_argument(
        "--no-virtual-correction",
        dest="virtual_correction",
        action="store_const",
        const=False,
        default=None,
        help="compute parcel buoyancy from temperature instead of virtual temperature "
        "(config: physics.virtual_temperature_correction)",
    )
    _add_engine_options(compute)
    compute.set_defaults(handler=_compute)

    inspect = commands.add_parser(
        "inspect",
        help="describe the input and estimate the cost of a compute",
        description=textwrap.fill(
            "Describe the input: what was recognised, the columns to process, and the "
            "memory and time a compute needs. Computes nothing heavy.",
            79,
        )
        + "\n\n"
        + _CAUTION_TEXT,
        epilog=_EXAMPLES,
        formatter_class=fmt,
        parents=[verbosity, config_parent],
    )
    inspect.add_argument("inputs", nargs="+", metavar="INPUT", help="NetCDF file(s)")
    _add_engine_options(inspect)
    inspect.set_defaults(handler=_inspect)

    plot = commands.add_parser(
        "plot",
        help="draw maps from a result file",
        description="Draw maps from a NetCDF file written by `gridstab compute`.\n\n"
        + _CAUTION_TEXT,
        epilog=_EXAMPLES,
        formatter_class=fmt,
        parents=[verbosity, config_parent],
    )
    plot.add_argument("result", metavar="RESULT.nc", help="a file written by gridstab compute")
    plot.add_argument("--maps", required=True, metavar="DIR", help="folder for the maps")
    plot.add_argument(
        "--overwrite",
        action="store_true",
        default=None,
        help="replace maps of the same names (config: output.overwrite)",
    )
    plot.set_defaults(handler=_plot)

    config = commands.add_parser(
        "config",
        help="print the default or the effective configuration",
        description=textwrap.fill(
            "Print a TOML configuration: with --defaults every key with its default and "
            "meaning; otherwise the effective settings (defaults, then --config FILE), "
            "after checking them.",
            79,
        )
        + "\n\n"
        + _CAUTION_TEXT,
        epilog=_EXAMPLES,
        formatter_class=fmt,
        parents=[verbosity, config_parent],
    )
    config.add_argument(
        "--defaults", action="store_true", help="print the commented default configuration"
    )
    config.set_defaults(handler=_config)
    return parser


def _add_engine_options(sub: argparse.ArgumentParser) -> None:
    sub.add_argument(
        "--scheduler",
        choices=SCHEDULER_CHOICES,
        help="how dask runs the work (config: engine.scheduler)",
    )
    sub.add_argument(
        "--memory-budget",
        dest="memory_budget",
        type=_positive_number,
        metavar="MIB",
        help="memory for one chunk of columns, in MiB (config: engine.memory_budget_mib)",
    )


def _positive_number(text: str) -> int | float:
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a number of MiB, got {text!r}") from None
    if not math.isfinite(value) or value <= 0:
        raise argparse.ArgumentTypeError(f"expected a positive number of MiB, got {text!r}")
    return int(value) if value.is_integer() else value


# --------------------------------------------------------------------------------------
# running


def run(argv: Sequence[str] | None = None) -> int:
    """Run the ``gridstab`` command line.

    Parameters
    ----------
    argv : sequence of str, optional
        The arguments without the program name; default ``sys.argv[1:]``.

    Returns
    -------
    int
        The exit code: 0 on success, otherwise one of ``gridstab.errors.EXIT_CODES``
        (2 for usage and configuration errors, 130 when interrupted).
    """
    argv = list(sys.argv[1:] if argv is None else argv)
    parser = build_parser()
    try:
        args = parser.parse_args(argv)
    except SystemExit as exc:  # --help, --version, usage errors
        return exc.code if isinstance(exc.code, int) else (0 if exc.code is None else 2)

    state = _RunState(
        argv=argv, verbose=getattr(args, "verbose", 0) or 0, quiet=getattr(args, "quiet", False)
    )
    with _logging(state):
        try:
            return args.handler(args, state)
        except GridstabError as exc:
            _report(state, str(exc))
            return exc.exit_code
        except KeyboardInterrupt as exc:
            # writing.TerminatedBySignal (a KeyboardInterrupt) carries ``signum``.
            signum = getattr(exc, "signum", None)
            how = "stopped by a signal" if signum else "interrupted"
            if state.doing:
                how += f" while {state.doing}"
            if state.written:
                done = ", ".join(str(p) for p in state.written)
                after = "; the maps may be incomplete" if "maps" in state.doing else ""
                _report(state, f"{how}; {done} had been written{after}.")
            else:
                _report(state, f"{how}; nothing was written.")
            return 128 + signum if signum else EXIT_CODES["interrupted"]
        except BrokenPipeError:  # e.g. `gridstab config --defaults | head`
            with contextlib.suppress(OSError):
                sys.stdout = open(os.devnull, "w")  # noqa: SIM115 - silence the flush at exit
            return EXIT_CODES["success"]
        except MemoryError:
            _report(
                state,
                "out of memory. Lower the memory per chunk with --memory-budget "
                "(config: engine.memory_budget_mib) or use fewer workers.",
            )
            return EXIT_CODES["internal error"]
        except Exception as exc:  # noqa: BLE001 - the last line of defence: one message
            _report(
                state,
                f"internal error: {type(exc).__name__}: {exc}. This is a bug in gridstab; "
                "rerun with -v to see the traceback and report it.",
            )
            return EXIT_CODES["internal error"]


def _report(state: _RunState, message: str) -> None:
    if state.verbose:
        traceback.print_exc(file=sys.stderr)
    print(f"gridstab: error: {message}", file=sys.stderr)


@contextlib.contextmanager
def _logging(state: _RunState) -> Iterator[None]:
    """Send gridstab's log records and Python warnings to stderr for one run.

    A warning is one line, ``gridstab: warning: <message>``; with ``-v`` it also names
    its category and the line of code that raised it.
    """
    handler = logging.StreamHandler(sys.stderr)
    if state.verbose:
        handler.setFormatter(logging.Formatter("gridstab [%(levelname)s] %(name)s: %(message)s"))
    else:
        handler.setFormatter(logging.Formatter("gridstab: %(message)s"))
    level = logging.WARNING if state.quiet else (logging.DEBUG if state.verbose else logging.INFO)
    loggers = [log]
    if state.verbose >= 2:
        loggers += [logging.getLogger("distributed"), logging.getLogger("dask")]
    saved = [(lg, lg.level, lg.propagate) for lg in loggers]
    for lg in loggers:
        lg.addHandler(handler)
        lg.setLevel(level if lg is log else logging.DEBUG)
        lg.propagate = False

    seen: set[str] = set()

    def show(message, category, filename, lineno, file=None, line=None):
        if str(message) in seen:  # the same advice once per run
            return
        seen.add(str(message))
        if state.verbose:
            log.warning("%s: %s (%s:%s)", category.__name__, message, filename, lineno)
        else:
            log.warning("warning: %s", message)

    previous = warnings.showwarning
    warnings.showwarning = show
    try:
        yield
    finally:
        warnings.showwarning = previous
        for lg, lvl, prop in saved:
            lg.removeHandler(handler)
            lg.setLevel(lvl)
            lg.propagate = prop


# --------------------------------------------------------------------------------------
# shared steps


def _overrides(args: argparse.Namespace) -> tuple[dict[str, Any], dict[str, str]]:
    """Configuration overrides from the options given on the command line."""
    overrides: dict[str, Any] = {}
    origins: dict[str, str] = {}
    for dest, (option, keys) in OPTION_TARGETS.items():
        value = getattr(args, dest, None)
        if value is None:
            continue
        for key in keys:
            overrides[key] = value
            origins[key] = f"command-line option {option}"
    return overrides, origins


def _load_settings(args: argparse.Namespace) -> Any:
    from gridstab.config import load_config

    overrides, origins = _overrides(args)
    settings = load_config(getattr(args, "config", None), overrides=overrides, origins=origins)
    if settings.source is not None:
        log.debug("configuration read from %s", settings.source)
    return settings


def resolve_inputs(raw: Sequence[str]) -> list[Path]:
    """Check the input paths; expand patterns that the shell did not expand.

    Parameters
    ----------
    raw : sequence of str
        Paths or ``glob`` patterns as typed.

    Returns
    -------
    list of pathlib.Path
        Existing files, in the order given, each once; a pattern's matches sorted.

    Raises
    ------
    InputError
        A path does not exist, is a folder, or a pattern matches nothing.
    """
    found: list[Path] = []
    for text in raw:
        path = Path(text)
        if path.is_dir():
            raise InputError(
                f"input {text!r} is a folder; expected NetCDF files. Give the files, "
                f'for example "{path / "*.nc"}" (quoted, gridstab expands it).'
            )
        if path.exists():
            matches = [path]
        elif glob.has_magic(text):
            matches = sorted(Path(m) for m in glob.glob(text) if not Path(m).is_dir())
            if not matches:
                raise InputError(
                    f"no input file matches the pattern {text!r} (looked from {Path.cwd()}); "
                    "check the pattern or the folder."
                )
        else:
            raise InputError(
                f"input file {text!r} not found (looked from {Path.cwd()}). Expected an "
                "existing NetCDF file; check the path."
            )
        for m in matches:
            if m not in found:
                found.append(m)
    return found


def _check_output(output: Path, inputs: Sequence[Path], *, overwrite: bool) -> None:
    if output.is_dir():
        raise OutputError(
            f"--output {str(output)!r} is a folder; expected a file name such as "
            f"{str(output / 'stability.nc')!r}."
        )
    target = output.resolve()
    for path in inputs:
        if path.resolve() == target:
            raise OutputError(
                f"--output {str(output)!r} is also an input; gridstab never writes over its "
                "input. Choose another --output."
            )
    parent = output.parent
    if not parent.is_dir():
        raise OutputError(
            f"the folder {str(parent)!r} of --output does not exist; create it first "
            "or choose another --output."
        )
    if output.exists() and not overwrite:
        raise OutputError(
            f"--output {str(output)!r} exists. Add --overwrite (or set overwrite = true in "
            "[output]) to replace it, or choose another --output."
        )


def _check_maps_dir(maps: str | None, *, stem: str, overwrite: bool) -> Path | None:
    """Refuse, before any work, a maps folder that is a file or holds this run's maps."""
    if maps is None:
        return None
    path = Path(maps)
    if path.exists() and not path.is_dir():
        raise OutputError(
            f"--maps {maps!r} is a file; expected a folder for the map images. "
            "Choose a folder name."
        )
    if path.is_dir() and not overwrite:
        old = sorted(path.glob(f"{glob.escape(stem)}_*.png"))
        if old:
            raise OutputError(
                f"the maps folder {maps!r} already holds maps of {stem!r} such as "
                f"{old[0].name!r}. Add --overwrite (or set overwrite = true in [output]) "
                "to replace them, or choose another --maps folder."
            )
    return path


@contextlib.contextmanager
def _as_error(kind: type[GridstabError], what: str) -> Iterator[None]:
    """Report operating-system errors of one step as ``kind`` (InputError, OutputError)."""
    try:
        yield
    except OSError as exc:
        name = f" {exc.filename!r}" if getattr(exc, "filename", None) else ""
        raise kind(f"{what}:{name} {exc.strerror or exc}.") from exc


def _threads(engine_settings: Any) -> int:
    """Number of chunks worked on at once under the engine settings (for estimates)."""
    if engine_settings.scheduler == "synchronous":
        return 1
    # workers: 0 means one per core (EngineSettings.workers)
    return max(1, engine_settings.workers or os.cpu_count() or 1)


@contextlib.contextmanager
def dask_scheduler(engine_settings: Any) -> Iterator[str]:
    """Run the dask work inside this block under the scheduler the settings ask for.

    Parameters
    ----------
    engine_settings : gridstab.engine.EngineSettings
        Reads ``scheduler`` ({"threads", "synchronous", "processes", "distributed"}),
        ``workers`` (0: one per core) and ``scheduler_address`` (empty: start a local
        cluster for ``distributed``).

    Yields
    ------
    str
        The scheduler in use, for the progress display.

    Raises
    ------
    ConfigError
        ``distributed`` without the ``distributed`` package, or an address that does not
        answer.
    """
    import dask

    scheduler = engine_settings.scheduler
    workers = engine_settings.workers or None
    if scheduler in ("synchronous", "threads", "processes"):
        extra = {"num_workers": workers} if workers and scheduler != "synchronous" else {}
        with dask.config.set(scheduler=scheduler, **extra):
            yield scheduler
        return
    try:
        from distributed import Client, LocalCluster
    except ImportError:
        raise ConfigError(
            'engine.scheduler = "distributed" needs the dask.distributed package, which '
            "is not installed. Install gridstab[distributed], or set scheduler = "
            '"threads" in [engine] (command line: --scheduler threads).'
        ) from None
    address = engine_settings.scheduler_address
    if address:
        try:
            client = Client(address, timeout="20s")
        except (OSError, TimeoutError) as exc:
            raise ConfigError(
                f"no dask scheduler answers at engine.scheduler_address = {address!r} "
                f"({exc}). Check the address of the running cluster, or set "
                'scheduler_address = "" to start a local one.'
            ) from None
        log.info("using the dask cluster at %s", address)
        with client:
            yield scheduler
        return
    cluster = LocalCluster(n_workers=workers, dashboard_address=None, processes=True)
    with cluster, Client(cluster) as client:
        log.info("started a local dask cluster: %s", client)
        yield scheduler


@contextlib.contextmanager
def _progress(state: _RunState, scheduler: str) -> Iterator[None]:
    """dask's progress bar on stderr for the local schedulers, when it is wanted."""
    wanted = not state.quiet and (state.verbose > 0 or sys.stderr.isatty())
    if not wanted or scheduler == "distributed":
        yield
        return
    from dask.diagnostics import ProgressBar

    with ProgressBar(minimum=1.0, dt=0.5, out=sys.stderr):
        yield


def _history_line(state: _RunState) -> str:
    return "gridstab " + " ".join(shlex.quote(a) for a in state.argv)


def _human_bytes(n: float) -> str:
    for unit in ("B", "KiB", "MiB", "GiB", "TiB"):
        if n < 1024 or unit == "TiB":
            return f"{n:.0f} {unit}" if unit == "B" else f"{n:.1f} {unit}"
        n /= 1024
    return f"{n:.1f} TiB"  # pragma: no cover


def _human_seconds(s: float) -> str:
    if s < 1:
        return "under a second"
    if s < 90:
        return f"{s:.0f} s"
    if s < 5400:
        return f"{s / 60:.0f} min"
    return f"{s / 3600:.1f} h"


# --------------------------------------------------------------------------------------
# the commands


def _compute(args: argparse.Namespace, state: _RunState) -> int:
    inputs = resolve_inputs(args.inputs)
    settings = _load_settings(args)
    output = Path(args.output)
    _check_output(output, inputs, overwrite=settings.output.overwrite)
    maps_dir = _check_maps_dir(args.maps, stem=output.stem, overwrite=settings.output.overwrite)

    from gridstab.engine import diagnose
    from gridstab.reading import open_model_output
    from gridstab.writing import write_result

    with _as_error(InputError, "cannot read the input"):
        ds = open_model_output(inputs, settings=settings.input)
    log.info(
        "read %d input file(s); diagnosing the columns (the very first run also compiles "
        "the column physics, which takes about a minute)",
        len(inputs),
    )
    result = diagnose(ds, options=settings.physics, settings=settings.engine)
    state.doing = f"computing and writing {str(output)!r}"
    with (
        _as_error(OutputError, f"cannot write {str(output)!r}"),
        dask_scheduler(settings.engine) as scheduler,
        _progress(state, scheduler),
    ):
        written = write_result(
            result,
            output,
            settings=settings.output,
            inputs=tuple(inputs),
            history_line=_history_line(state),
        )
    state.written.append(Path(written))
    state.doing = ""
    log.info("wrote %s", written)
    if maps_dir is not None:
        _draw(Path(written), maps_dir, settings, state)
    return EXIT_CODES["success"]


def _draw(result_path: Path, maps_dir: Path, settings: Any, state: _RunState) -> None:
    import xarray as xr

    from gridstab.maps import draw_maps

    with _as_error(OutputError, f"cannot create the maps folder {str(maps_dir)!r}"):
        maps_dir.mkdir(parents=True, exist_ok=True)
    with _as_error(InputError, f"cannot read {str(result_path)!r}"):
        result = xr.open_dataset(result_path)
    state.doing = f"drawing maps into {str(maps_dir)!r}"
    with result, _as_error(OutputError, f"cannot write maps into {str(maps_dir)!r}"):
        paths = draw_maps(
            result,
            maps_dir,
            settings=settings.maps,
            stem=result_path.stem,
            overwrite=settings.output.overwrite,
        )
    state.written.extend(Path(p) for p in paths)
    state.doing = ""
    log.info("drew %d map(s) into %s", len(paths), maps_dir)


def _plot(args: argparse.Namespace, state: _RunState) -> int:
    (result_path,) = resolve_inputs([args.result])
    settings = _load_settings(args)
    maps_dir = _check_maps_dir(
        args.maps, stem=result_path.stem, overwrite=settings.output.overwrite
    )
    assert maps_dir is not None  # --maps is required
    _draw(result_path, maps_dir, settings, state)
    return EXIT_CODES["success"]


def _inspect(args: argparse.Namespace, state: _RunState) -> int:
    inputs = resolve_inputs(args.inputs)
    settings = _load_settings(args)

    from gridstab.engine import diagnose, estimate
    from gridstab.reading import describe_input, open_model_output

    with _as_error(InputError, "cannot read the input"):
        ds = open_model_output(inputs, settings=settings.input)
    result = diagnose(ds, options=settings.physics, settings=settings.engine)  # lazy
    print(describe_input(ds))
    print()
    print(
        cost_report(
            result,
            estimate=estimate(ds, settings=settings.engine),
            engine_settings=settings.engine,
        )
    )
    return EXIT_CODES["success"]


def cost_report(result: Any, *, estimate: Mapping[str, float], engine_settings: Any) -> str:
    """What computing ``result`` costs, from sizes alone (nothing is computed).

    Parameters
    ----------
    result : xarray.Dataset
        The lazy result of ``gridstab.engine.diagnose``.
    estimate : mapping
        ``gridstab.engine.estimate``: ``columns``, ``levels``, ``task_memory_mib`` (one
        task) and ``seconds_single_thread``.
    engine_settings : gridstab.engine.EngineSettings
        For the number of tasks at once and the memory budget.

    Returns
    -------
    str
        Lines: columns, chunks, result size, working memory, estimated time.
    """
    chunks = max((getattr(v.data, "npartitions", 1) for v in result.data_vars.values()), default=1)
    threads = _threads(engine_settings)
    at_once = min(chunks, threads)
    task_mib = estimate["task_memory_mib"]
    seconds = estimate["seconds_single_thread"] / at_once
    lines = [
        "cost of a compute with these settings",
        (
            f"  columns to process: {int(estimate['columns']):,} "
            f"({int(estimate['levels'])} levels each), in {chunks:,} chunk(s)"
        ),
        (
            f"  result:             {_human_bytes(result.nbytes)} in "
            f"{len(result.data_vars)} fields (before compression)"
        ),
        (
            f"  working memory:     about {_human_bytes(at_once * task_mib * 2**20)} "
            f"({at_once} chunk(s) at once, {_human_bytes(task_mib * 2**20)} each; budget "
            f"engine.memory_budget_mib = {engine_settings.memory_budget_mib:g})"
        ),
        (
            f"  estimated time:     {_human_seconds(seconds)} with {at_once} thread(s) "
            "(a rough guide from a benchmark of the column physics)"
        ),
    ]
    return "\n".join(lines)


def _config(args: argparse.Namespace, state: _RunState) -> int:
    from gridstab.config import defaults_toml, to_toml

    if args.defaults:
        if args.config:
            raise ConfigError(
                "give either --defaults or --config FILE to `gridstab config`, not both."
            )
        sys.stdout.write(defaults_toml())
        return EXIT_CODES["success"]
    settings = _load_settings(args)
    where = f"read from {settings.source}" if settings.source else "the defaults"
    sys.stdout.write(
        to_toml(settings, header=f"gridstab {__version__}: effective settings, {where}.")
    )
    return EXIT_CODES["success"]
