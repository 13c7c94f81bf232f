"""Velocity and acceleration benchmark (run by hand: ``.venv/bin/python tests/benchmarks/bench_rates.py``).

A 10 001-step crank-rocker sweep with ``speed=`` (velocities, accelerations and measure
rates of every coordinate and measure) against the same sweep without; paired rounds,
median of the per-round ratios and of the times.  Target (issue 12): at most 1.5x.
A second line (no target) does the same with a rate measure, whose rate and acceleration
need the third derivatives of the coordinates (one more stacked solve).
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
RATE = """
[measures.rocker_ratio]
type = "rate"
of = "rocker"
per = "crank"
"""


def run(m, label):
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
    print(f"{N}-step four-bar sweep{label}: without speed {np.median(plain) * 1e3:.0f} ms, with velocities and "
          f"accelerations {np.median(rated) * 1e3:.0f} ms (medians of {ROUNDS} paired rounds)")
    return np.median(ratios)


def main():
    r = run(load(fourbar_toml(30.0, 90.0, 70.0, 100.0, 60.0)), "")
    print(f"ratio (median of paired rounds): {r:.2f}x  (target <= 1.5x)")
    r = run(load(fourbar_toml(30.0, 90.0, 70.0, 100.0, 60.0, measures=RATE)), " with a rate measure")
    print(f"ratio with a rate measure (third derivatives; no target): {r:.2f}x")


if __name__ == "__main__":
    main()
