"""Benchmark of the whole pipeline against its I/O floor, and its memory growth.

Generates a global 1-degree, 37-level, zlib-compressed file of invented soundings with
several time steps, then measures in one run:

* the wall time of ``compute``: open and recognise -> diagnose every column -> write
  the CF result (the same code the command line runs);
* the I/O floor: reading the same inputs and writing outputs of the same names, shapes,
  types and chunks with no physics (each output a trivial function of the inputs),
  with the same chunks, writer and scheduler;
* the peak memory of ``compute`` for N and 2N time steps (in child processes).

    python benchmarks/pipeline.py [--times 4] [--workdir DIR]
"""

from __future__ import annotations

import argparse
import json
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import xarray as xr

sys.path.insert(0, str(Path(__file__).resolve().parent))
from columns import LEVELS, soundings  # noqa: E402


def make_input(path: Path, times: int) -> None:
    """Write the invented global input: temperature and specific humidity, Pa levels."""
    nlat, nlon = 181, 360
    p, t, r = soundings(nlat * nlon, seed=1)
    t = t.astype(np.float32)
    q = (r / (1 + r)).astype(np.float32)
    lat = np.linspace(-90, 90, nlat)
    lon = np.arange(0.0, 360.0, 1.0)
    temps = []
    hums = []
    for step in range(times):
        shift = np.roll(np.arange(nlat * nlon), 997 * step)
        temps.append(t[shift].reshape(nlat, nlon, -1).transpose(2, 0, 1))
        hums.append(q[shift].reshape(nlat, nlon, -1).transpose(2, 0, 1))
    ds = xr.Dataset(
        {
            "ta": (("time", "plev", "lat", "lon"), np.stack(temps),
                   {"standard_name": "air_temperature", "units": "K"}),
            "hus": (("time", "plev", "lat", "lon"), np.stack(hums),
                    {"standard_name": "specific_humidity", "units": "kg kg-1"}),
        },
        coords={
            "time": ("time", np.arange(times) * 6.0,
                     {"units": "hours since 2040-01-01", "standard_name": "time"}),
            "plev": ("plev", LEVELS, {"units": "Pa", "standard_name": "air_pressure",
                                      "positive": "down", "axis": "Z"}),
            "lat": ("lat", lat, {"units": "degrees_north", "standard_name": "latitude"}),
            "lon": ("lon", lon, {"units": "degrees_east", "standard_name": "longitude"}),
        },
        attrs={"Conventions": "CF-1.8", "comment": "invented benchmark data"},
    )
    encoding = {v: {"zlib": True, "complevel": 4, "chunksizes": (1, 37, 181, 360)}
                for v in ("ta", "hus")}
    ds.to_netcdf(path, encoding=encoding)


def run_compute(source: Path, target: Path) -> float:
    from gridstab.engine import EngineSettings, diagnose
    from gridstab.reading import open_model_output
    from gridstab.writing import OutputSettings, write_result

    start = time.perf_counter()
    ds = open_model_output(source)
    result = diagnose(ds, settings=EngineSettings())
    write_result(result, target, settings=OutputSettings(overwrite=True), inputs=[source])
    return time.perf_counter() - start


def run_floor(source: Path, target: Path) -> float:
    """Same reading, same output layout and writer, no physics."""
    from gridstab.engine import EngineSettings, choose_chunks, diagnose
    from gridstab.reading import open_model_output
    from gridstab.writing import OutputSettings, write_result

    start = time.perf_counter()
    ds = open_model_output(source)
    template = diagnose(ds, settings=EngineSettings())  # lazy: only names, shapes, attrs
    level_dim = ds.attrs["gridstab_level_dim"]
    chunks = choose_chunks(ds["air_temperature"], level_dim, EngineSettings().memory_budget_mib)
    t = ds["air_temperature"].chunk({k: v for k, v in chunks.items()})
    q = ds["humidity_mixing_ratio"].chunk({k: v for k, v in chunks.items()})
    # one reduction over the level axis reads every input value, as the physics does
    touched = (t.sum(level_dim) + q.sum(level_dim)).astype(np.float32)
    out = xr.Dataset(attrs=template.attrs)
    for name, var in template.data_vars.items():
        values = touched if var.dtype.kind == "f" else (touched > 0).astype(np.int8)
        out[name] = values.transpose(*var.dims).assign_attrs(var.attrs)
    write_result(out, target, settings=OutputSettings(overwrite=True), inputs=[source])
    return time.perf_counter() - start


def memory_child(source: str, target: str) -> None:
    run_compute(Path(source), Path(target))
    print(json.dumps({"peak_rss_mib": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024}))


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--times", type=int, default=4)
    parser.add_argument("--workdir", type=Path, default=None)
    parser.add_argument("--memory-child", nargs=2, default=None, help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.memory_child:
        memory_child(*args.memory_child)
        return
    work = args.workdir or Path(tempfile.mkdtemp(prefix="gridstab-bench-"))
    work.mkdir(parents=True, exist_ok=True)
    source = work / f"global_{args.times}.nc"
    double = work / f"global_{2 * args.times}.nc"
    if not source.exists():
        make_input(source, args.times)
    if not double.exists():
        make_input(double, 2 * args.times)
    # warm up: compile kernels and build tables outside the timing
    run_compute(source, work / "warm.nc")
    floor = run_floor(source, work / "floor.nc")
    compute = run_compute(source, work / "result.nc")
    floor2 = run_floor(source, work / "floor.nc")
    floor = min(floor, floor2)
    columns = 181 * 360 * args.times
    print(f"input: {source.stat().st_size / 2**20:.1f} MiB, {columns:,} columns of 37 levels, "
          f"{args.times} time steps")
    print(f"  compute wall time: {compute:.2f} s ({columns / compute:,.0f} columns/s)")
    print(f"  I/O floor:         {floor:.2f} s")
    print(f"  ratio compute / I/O floor: {compute / floor:.2f}  (goal <= 1.5)")
    peaks = []
    for path in (source, double):
        child = subprocess.run(
            [sys.executable, __file__, "--memory-child", str(path), str(work / "mem.nc")],
            capture_output=True, text=True, check=True,
        )
        peaks.append(json.loads(child.stdout.strip().splitlines()[-1])["peak_rss_mib"])
    print(f"  peak memory: {peaks[0]:,.0f} MiB for {args.times} time steps, "
          f"{peaks[1]:,.0f} MiB for {2 * args.times} (ratio {peaks[1] / peaks[0]:.2f})")


if __name__ == "__main__":
    main()
