"""Benchmark of the column physics: columns per second (single thread) and memory.

Runs the full set (three parcels, thick layers, per-level theta/theta_e/theta_es and
per-layer classes) on invented, physically plausible soundings on 37 pressure levels
from 1000 to 1 hPa, in float32 and float64, and reports the peak resident memory per
million columns (measured in a child process that holds one million columns at once).

    python benchmarks/columns.py [--columns 200000] [--block 20000]
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import subprocess
import sys
import time

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
    """Columns per second, the columns handed over in blocks as the engine does."""
    from gridstab.columns import diagnose_columns

    results = {}
    p, t, r = soundings(count)
    for dtype in (np.float32, np.float64):
        args = [a.astype(dtype) for a in (p, t, r)]
        diagnose_columns(*[a[:100] for a in args])  # compile and build tables
        start = time.perf_counter()
        for first in range(0, count, block):
            diagnose_columns(*[a[first : first + block] for a in args])
        elapsed = time.perf_counter() - start
        results[np.dtype(dtype).name] = count / elapsed
    return results


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
    parser.add_argument("--memory-child", type=int, default=0, help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.memory_child:
        memory_child(args.memory_child)
        return
    rates = throughput(args.columns, args.block)
    print(f"columns: {args.columns} in blocks of {args.block}, levels: {LEVELS.size} "
          "(1000 to 1 hPa), single thread, full set (3 parcels, thick layers, per-level "
          "and per-layer fields)")
    print(f"  float32: {rates['float32']:,.0f} columns/s")
    print(f"  float64: {rates['float64']:,.0f} columns/s")
    print(f"  goal 300,000 columns/s: ratio float32 {rates['float32'] / 3e5:.2f}")
    child = subprocess.run(
        [sys.executable, __file__, "--memory-child", "1000000"], capture_output=True, text=True,
        check=True,
    )
    memory = json.loads(child.stdout.strip().splitlines()[-1])
    print(f"  peak memory for 1,000,000 float32 columns held at once: "
          f"{memory['growth_mib']:,.0f} MiB above the inputs' own {memory['inputs_mib']:,.0f} MiB "
          f"(process peak {memory['peak_rss_mib']:,.0f} MiB)")


if __name__ == "__main__":
    main()
