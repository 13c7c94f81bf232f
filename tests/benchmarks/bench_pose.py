"""Benchmark (issue 2 item 8): pose time of open chains and branching trees, 10 ... 1000 joints.

Run by hand:  .venv/bin/python tests/benchmarks/bench_pose.py [--repeat 7]

Prints microseconds per pose and per joint (median over repeats; this machine is
noisy) and the ratio of the per-joint cost at each size to the 10-joint baseline
measured in the same run.  Linear growth means the ratio stays near 1 (it may fall
below 1 as fixed overheads are shared by more joints).  Not a CI test.
"""
from __future__ import annotations

import argparse
import statistics
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

import jointwise  # noqa: E402
import mechanisms as M  # noqa: E402

SIZES = (10, 30, 100, 300, 1000)


def time_poses(mech, n_poses, repeat, rng):
    names = list(mech.coordinates)
    sets = [{k: float(v) for k, v in zip(names, rng.uniform(-90, 90, len(names)))} for _ in range(n_poses)]
    mech.pose(sets[0])  # warm-up
    runs = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        for s in sets:
            mech.pose(s)
        runs.append((time.perf_counter() - t0) / n_poses)
    return statistics.median(runs), min(runs), max(runs)


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeat", type=int, default=7)
    args = ap.parse_args(argv)
    rng = np.random.default_rng(1)
    print(f"jointwise {jointwise.__version__}: pose of open chains and trees, median of {args.repeat} repeats")
    for label, builder in (("serial chain", M.serial_chain), ("branching tree", M.branching_tree)):
        print(f"\n{label}")
        print(f"{'joints':>7} {'us/pose':>12} {'(min..max)':>22} {'us/joint':>10} {'per-joint vs 10':>16}")
        base = None
        for n in SIZES:
            mech = jointwise.from_dict(builder(n))
            n_poses = max(5, 2000 // n)
            med, lo, hi = time_poses(mech, n_poses, args.repeat, rng)
            per = med / n
            base = per if base is None else base
            print(f"{n:7d} {med * 1e6:12.1f} {f'({lo * 1e6:.1f}..{hi * 1e6:.1f})':>22} "
                  f"{per * 1e6:10.2f} {per / base:15.2f}x")
    return 0


if __name__ == "__main__":
    sys.exit(main())
