"""Fast failure and the cost of the per-step branch proof (run by hand).

    .venv/bin/python tests/benchmarks/bench_branch.py [--repeats 3]

Prints medians of repeats, measured in one run:
1. an RSSR (tests/branch_campaign.py, seed 1, third case) swept 25 one-degree steps into
   a stretch it cannot reach (targets of issue 14: within 2 s), against the same 25
   steps inside its reachable range (the ratio says what failing costs);
2. ``range`` on the same RSSR (target: within 5 s);
3. ``range`` on the Linnet vise's lead screw with its own limits removed (searched to the
   jaw slide's limits, 12 turns away).
"""
import argparse
import os
import statistics
import sys
import time

import numpy as np

HERE = os.path.dirname(os.path.abspath(__file__))
sys.path.insert(0, os.path.dirname(HERE))
import branch_campaign as B  # noqa: E402

import jointwise  # noqa: E402
from jointwise.sweep import reach  # noqa: E402


def timed(fn, repeats):
    out = []
    for _ in range(repeats):
        t = time.perf_counter()
        fn()
        out.append(time.perf_counter() - t)
    return statistics.median(out)


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--repeats", type=int, default=3)
    args = ap.parse_args()
    rng = np.random.default_rng(1)
    for i in range(3):
        case = B.KINDS[["four-bar", "slider-crank", "RSSR"][i]](rng, near_toggle=bool(i % 2))
    full = B._mech(case["data"]).sweep("crank", case["values"])
    k = int(np.flatnonzero(~full.converged)[0])
    into = case["values"][max(k - 5, 0):max(k - 5, 0) + 25]
    inside = case["values"][max(k - 30, 0):max(k - 5, 2)]  # reachable steps before the stretch
    t_fail = timed(lambda: B._mech(case["data"]).sweep("crank", into), args.repeats)
    t_ok = timed(lambda: B._mech(case["data"]).sweep("crank", inside), args.repeats)
    print(f"RSSR, 25 steps into an unreachable stretch: {t_fail:.2f} s (target <= 2 s); "
          f"25 reachable steps {t_ok:.3f} s, ratio {t_fail / t_ok:.1f}x")
    t_range = timed(lambda: reach(B._mech(case["data"]), "crank"), args.repeats)
    print(f"RSSR range: {t_range:.2f} s (target <= 5 s)")
    text = open(os.path.join(os.path.dirname(os.path.dirname(HERE)), "blend_samples", "linnet_vise.toml"),
                encoding="utf-8").read().replace("limits = [-720, 4320]\n", "", 1)
    t_vise = timed(lambda: reach(jointwise.loads(text, source="vise.toml"), "screw_bearing"), args.repeats)
    print(f"lead screw range to the slide's limits (12 turns): {t_vise:.2f} s")


if __name__ == "__main__":
    main()
