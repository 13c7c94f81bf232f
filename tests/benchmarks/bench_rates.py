"""Velocity and acceleration benchmark (run by hand: ``.venv/bin/python tests/benchmarks/bench_rates.py``).

A 10 001-step crank-rocker sweep with ``speed=`` (velocities, accelerations and measure
rates of every coordinate and measure) against the same sweep without; paired rounds,
median of the per-round ratios and of the times.  Target (issue 12): at most 1.5x.
"""
import os
import sys
import time

import numpy as np

HERE = os.path.dirname(os.path.abspath(__file__))
sys.path.insert(0, os.path.dirname(HERE))
from sweep_fixtures import fourbar_toml, load  # noqa: E402

N = 10001
ROUNDS = 7


def main():
    m = load(fourbar_toml(30.0, 90.0, 70.0, 100.0, 60.0))
    drive = "crank"
    values = np.linspace(60.0, 420.0, N)
    m.sweep(drive, values[:101])  # warm caches
    plain, rated, ratios = [], [], []
    for _ in range(ROUNDS):
        t = time.perf_counter()
        a = m.sweep(drive, values)
        t1 = time.perf_counter()
        b = m.sweep(drive, values, speed=720.0, acceleration=100.0)
        t2 = time.perf_counter()
        assert a.converged.all() and b.converged.all()
        plain.append(t1 - t)
        rated.append(t2 - t1)
        ratios.append((t2 - t1) / (t1 - t))
    print(f"{N}-step four-bar sweep: without speed {np.median(plain) * 1e3:.0f} ms, with velocities and "
          f"accelerations {np.median(rated) * 1e3:.0f} ms (medians of {ROUNDS} paired rounds)")
    print(f"ratio (median of paired rounds): {np.median(ratios):.2f}x  (target <= 1.5x)")


if __name__ == "__main__":
    main()
