"""Benchmark of the column physics: columns per second (single thread) and memory.

Runs invented, physically plausible soundings on 37 pressure levels from 1000 to 1 hPa
through ``diagnose_columns`` as the engine hands them over (blocks of columns, the
pressure levels given once), in two configurations:

* default outputs: three parcels, two thick layers, classic indices, no per-level fields;
* full set: the same plus per-level theta/theta_e/theta_es and per-layer classes;

in float32 and float64, best of three passes, timed by the thread's CPU time (robust on
a shared machine) and by the wall clock. With ``--baseline REF`` the same measurement
runs, in the same invocation, on gridstab as it was at git revision REF (extracted to a
cache folder; its first run compiles it), and the ratios are printed. It also reports
the peak resident memory per million columns (a child process holding one million
columns at once).

    python benchmarks/columns.py [--columns 200000] [--block 20000] [--baseline REF]
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import subprocess
import sys
import time
from pathlib import Path

os.environ.setdefault("NUMBA_NUM_THREADS", "1")

import numpy as np  # noqa: E402

LEVELS = np.array(
    [1000, 975, 950, 925, 900, 875, 850, 825, 800, 775, 750, 700, 650, 600, 550, 500, 450,
     400, 350, 300, 250, 225, 200, 175, 150, 125, 100, 70, 50, 30, 20, 10, 7, 5, 3, 2, 1],
    dtype=float,
) * 100.0


def soundings(count: int, seed: int = 0):
    """Invented soundings: warm moist to cold dry, with and without capping inversions."""
    from gridstab.moisture import mixing_ratio_from_relative_humidity

    rng = np.random.default_rng(seed)
    z = -7400.0 * np.log(LEVELS / 1e5)
    t_sfc = rng.uniform(270.0, 310.0, (count, 1))
    lapse = rng.uniform(5.0e-3, 9.0e-3, (count, 1))
    t = t_sfc - lapse * z
    inversion = rng.uniform(0.0, 3.0, (count, 1)) * np.clip((z - 1500.0) / 300.0, 0, 1)
    t = t + inversion * (z < 4000.0)
    t_trop = rng.uniform(205.0, 222.0, (count, 1))
    t = np.maximum(t, t_trop + 1.5e-3 * np.maximum(z - 20000.0, 0))
    rh = np.clip(rng.uniform(0.3, 0.95, (count, 1)) * np.exp(-z / 6000.0), 0.02, 1.0)
    r = mixing_ratio_from_relative_humidity(rh, t, LEVELS)
    r = np.where(LEVELS < 15000.0, 4e-6, r)
    p = np.broadcast_to(LEVELS, t.shape)
    return p, t, r


def throughput(count: int, block: int) -> dict:
    """Columns per second by CPU time and wall time, best of three passes, per configuration."""
    from gridstab.columns import diagnose_columns

    results = {}
    p, t, r = soundings(count)
    levels = np.ascontiguousarray(p[0])
    for per_level, label in ((False, "default"), (True, "full")):
        for dtype in (np.float32, np.float64):
            args = [a.astype(dtype) for a in (t, r)]
            pressure = levels.astype(dtype)
            diagnose_columns(pressure, *[a[:100] for a in args], per_level=per_level)  # compile
            best_cpu = best_wall = float("inf")
            for _ in range(3):
                cpu, wall = time.thread_time(), time.perf_counter()
                for first in range(0, count, block):
                    diagnose_columns(pressure, *[a[first : first + block] for a in args],
                                     per_level=per_level)
                best_cpu = min(best_cpu, time.thread_time() - cpu)
                best_wall = min(best_wall, time.perf_counter() - wall)
            results[f"{label} {np.dtype(dtype).name}"] = (count / best_cpu, count / best_wall)
    return results


def baseline_throughput(ref: str, count: int, block: int) -> dict:
    """The same measurement on gridstab at git revision ``ref``, in a child process."""
    repo = Path(__file__).resolve().parents[1]
    commit = subprocess.run(["git", "-C", str(repo), "rev-parse", ref], capture_output=True,
                            text=True, check=True).stdout.strip()
    folder = Path.home() / ".cache" / "gridstab-benchmark" / commit[:12]
    if not (folder / "gridstab" / "__init__.py").exists():
        folder.mkdir(parents=True, exist_ok=True)
        archive = subprocess.run(["git", "-C", str(repo), "archive", commit, "gridstab"],
                                 capture_output=True, check=True).stdout
        subprocess.run(["tar", "-x", "-C", str(folder)], input=archive, check=True)
    env = dict(os.environ, PYTHONPATH=str(folder))
    child = subprocess.run(
        [sys.executable, __file__, "--throughput-child", "--columns", str(count),
         "--block", str(block)], capture_output=True, text=True, check=True, env=env,
    )
    return {k: tuple(v) for k, v in json.loads(child.stdout.strip().splitlines()[-1]).items()}


def memory_child(count: int) -> None:
    from gridstab.columns import diagnose_columns

    p, t, r = soundings(count)
    p, t, r = (a.astype(np.float32) for a in (p, t, r))
    diagnose_columns(p[:10], t[:10], r[:10])
    before = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    diagnose_columns(p, t, r)
    after = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    inputs = sum(a.nbytes for a in (p, t, r))
    print(json.dumps({"peak_rss_mib": after / 1024, "growth_mib": (after - before) / 1024,
                      "inputs_mib": inputs / 2**20}))


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--columns", type=int, default=200_000)
    parser.add_argument("--block", type=int, default=20_000,
                        help="columns per call, like one engine chunk (default 20000)")
    parser.add_argument("--baseline", default="",
                        help="git revision to measure side by side (e.g. a tag or commit)")
    parser.add_argument("--memory-child", type=int, default=0, help=argparse.SUPPRESS)
    parser.add_argument("--throughput-child", action="store_true", help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.memory_child:
        memory_child(args.memory_child)
        return
    if args.throughput_child:
        print(json.dumps(throughput(args.columns, args.block)))
        return
    import gridstab

    rates = throughput(args.columns, args.block)
    base = baseline_throughput(args.baseline, args.columns, args.block) if args.baseline else {}
    print(f"columns: {args.columns} in blocks of {args.block}, levels: {LEVELS.size} "
          f"(1000 to 1 hPa), single thread; gridstab from {Path(gridstab.__file__).parent}")
    print("columns/s per core by CPU time (by wall time in brackets)")
    for key, (cpu, wall) in rates.items():
        line = f"  {key:16s} {cpu:10,.0f} ({wall:,.0f})"
        if key in base:
            old_cpu, old_wall = base[key]
            line += (f"   baseline {args.baseline}: {old_cpu:10,.0f} ({old_wall:,.0f})"
                     f"   ratio {cpu / old_cpu:.2f} ({wall / old_wall:.2f})")
        print(line)
    print(f"  goal for the default outputs, 150,000 columns/s per core: "
          f"ratio float32 {rates['default float32'][0] / 1.5e5:.2f}")
    child = subprocess.run(
        [sys.executable, __file__, "--memory-child", "1000000"], capture_output=True, text=True,
        check=True,
    )
    memory = json.loads(child.stdout.strip().splitlines()[-1])
    print(f"  peak memory for 1,000,000 float32 columns held at once (full set): "
          f"{memory['growth_mib']:,.0f} MiB above the inputs' own {memory['inputs_mib']:,.0f} MiB "
          f"(process peak {memory['peak_rss_mib']:,.0f} MiB)")


if __name__ == "__main__":
    main()
