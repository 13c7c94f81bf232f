"""Benchmark (issue 3 item 8): closed loops.

Run by hand:  .venv/bin/python tests/benchmarks/bench_loops.py [--repeat 7] [--only a] [--cpu]

(a) one warm-started pose step of a four-bar (crank moved by 1 deg from the previous
    pose) versus ``scipy.optimize.least_squares`` with the analytic Jacobian, same start
    and tolerance (closure 1e-9 of the length unit): on jointwise's own six-row loop
    equations and Jacobian (the function the pose step itself evaluates,
    ``Solver._eval``; target of issue 9: jointwise >= 10x faster, median), and, for
    reference, on the loop in its smallest form (two planar vector equations in the two
    unknown angles), which favours scipy.
(b) K independent four-bars, K = 1 ... 64, all cranks stepped together: time per pose
    must grow linearly in K (per-four-bar cost ratio vs K = 1 stays near 1).
(c) scissor stacks of 2 ... 16 stages (one loop per stage, all coupled): time per step.

Medians over repeats (this machine is noisy); ratios are against baselines measured
in the same run.  Not a CI test.
"""
from __future__ import annotations

import argparse
import math
import statistics
import sys
import time
from pathlib import Path

import numpy as np
from scipy.optimize import least_squares

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

import jointwise  # noqa: E402
import mechanisms as M  # noqa: E402
from jointwise import kinematics  # noqa: E402
from jointwise.linalg import lstsq_small  # noqa: E402

A, B, C, D = 1.0, 3.0, 2.5, 3.0  # invented crank-rocker
TOL = 1e-9


#: wall clock, or with ``--cpu`` this process's CPU time (on a machine shared with other
#: work a run that was descheduled does not count the time it waited)
CLOCK = [time.perf_counter]


def median_time(fn, n, repeat):
    fn()  # warm-up
    clock = CLOCK[0]
    runs = []
    for _ in range(repeat):
        t0 = clock()
        for _ in range(n):
            fn()
        runs.append((clock() - t0) / n)
    return statistics.median(runs)


def bench_a(repeat):
    m = jointwise.from_dict(M.four_bar(A, B, C, D, 60.0))
    steps = [60.0 + k for k in range(1, 41)]
    starts = [m.pose({"crank": t - 1.0}) for t in steps]

    # jointwise: one warm-started step per call
    k = [0]

    def ours():
        i = k[0] % len(steps)
        k[0] += 1
        p = m.pose({"crank": steps[i]}, start=starts[i])
        assert p.converged

    # scipy: same loop, unknowns (t3, t4), analytic Jacobian, started from the previous pose
    (ax, ay), (bx, by), _ = M.four_bar_positions(A, B, C, D, 60.0)
    t3_home = math.atan2(by - ay, bx - ax)
    x0s = []
    for p in starts:
        t3 = t3_home + math.radians(p.joints["crank"] - 60.0 + p.joints["pin_a"])
        x0s.append(np.array([t3, math.radians(p.joints["rocker"])]))
    j = [0]

    def theirs():
        i = j[0] % len(steps)
        j[0] += 1
        th = math.radians(steps[i])
        ca, sa = A * math.cos(th), A * math.sin(th)

        def f(u):
            return np.array([ca + B * math.cos(u[0]) - C * math.cos(u[1]) - D,
                             sa + B * math.sin(u[0]) - C * math.sin(u[1])])

        def jac(u):
            return np.array([[-B * math.sin(u[0]), C * math.sin(u[1])],
                             [B * math.cos(u[0]), -C * math.cos(u[1])]])

        sol = least_squares(f, x0s[i], jac=jac, method="lm", xtol=TOL, ftol=TOL, gtol=TOL)
        assert np.abs(sol.fun).max() <= TOL

    n = 40
    t_ours = median_time(ours, n, repeat)
    t_scipy = median_time(theirs, n, repeat)
    # and the "trf" default method of least_squares
    def theirs_trf():
        i = j[0] % len(steps)
        j[0] += 1
        th = math.radians(steps[i])
        ca, sa = A * math.cos(th), A * math.sin(th)
        f = lambda u: np.array([ca + B * math.cos(u[0]) - C * math.cos(u[1]) - D,  # noqa: E731
                                sa + B * math.sin(u[0]) - C * math.sin(u[1])])
        jac = lambda u: np.array([[-B * math.sin(u[0]), C * math.sin(u[1])],  # noqa: E731
                                  [B * math.cos(u[0]), -C * math.cos(u[1])]])
        least_squares(f, x0s[i], jac=jac, xtol=TOL, ftol=TOL, gtol=TOL)
    t_trf = median_time(theirs_trf, n, repeat)

    # least_squares on jointwise's own loop equations (6 rows at the cut, analytic Jacobian)
    s = m.solver
    blk = s.blocks[0]
    ci = m.coordinates.index("crank")
    cols, rot = s._layout(blk, {ci})
    free = [c[1] for c in cols]
    h = [0]

    def theirs_same():
        i = h[0] % len(steps)
        h[0] += 1
        q = starts[i].q.copy()
        q[ci] = math.radians(steps[i])

        def put(u):
            qq = q.copy()
            qq[free] = u
            return qq
        least_squares(lambda u: s._eval(blk, put(u), cols, rot, jac=False)[0], q[free],
                      jac=lambda u: s._eval(blk, put(u), cols, rot)[2], method="lm",
                      xtol=TOL, ftol=TOL, gtol=TOL)
    t_same = median_time(theirs_same, n, repeat)

    # the solver-level step: state in, closed state out (what least_squares returns), no
    # link placements, no Pose
    g = [0]

    def ours_solver():
        i = g[0] % len(steps)
        g[0] += 1
        q, info = s.pose({ci: math.radians(steps[i])}, starts[i].q)
        assert info["converged"]

    t_solver = median_time(ours_solver, n, repeat)

    # the floor: the evaluations and small least-squares solves a warm-started step makes
    # and cannot do without (the loop equations and Jacobian at the predictor and at the
    # closed state, where the branch test reads the Jacobian; the tangent, curvature and
    # Newton solves on the six-row Jacobian), run back to back on the same states
    plan = s._plan(blk, cols + [("m", ci)], rot)
    nu = len(cols)
    rcs = s._row_scale(1)[:, None] * s._col_scale(cols)[None, :]
    f = [0]

    def floor():
        i = f[0] % len(steps)
        f[0] += 1
        q = starts[i].q
        for _ in range(2):
            r, _, J = kinematics.eval_one(s, plan, q)
            Js = J[:, :nu] * rcs
            lstsq_small(Js, r, 1e-10)
        lstsq_small(Js, r, 1e-10)

    t_floor = median_time(floor, n, repeat)
    print("(a) four-bar, one warm-started 1-deg step (median); ratio = least_squares on the same "
          "six-row equations / the line")
    rows = [
        ("least_squares lm on jointwise's own 6-row loop equations and Jacobian", t_same),
        ("jointwise pose step (Mechanism.pose: closed state, joint values, every link's placement, "
         "a Pose)", t_ours),
        ("jointwise solver step (Solver.pose: state in, closed state out, as least_squares gives)",
         t_solver),
        ("floor: the step's 2 loop evaluations with Jacobian + 3 small least-squares solves", t_floor),
        ("least_squares lm, analytic J, the loop's 2-unknown form", t_scipy),
        ("least_squares trf, analytic J, the loop's 2-unknown form", t_trf),
    ]
    for label, t in rows:
        print(f"    {label:<98s} {t * 1e6:8.1f} us  {t_same / t:6.2f}x")
    print(f"    pose step / floor {t_ours / t_floor:5.2f}; solver step / floor {t_solver / t_floor:5.2f}")
    print(f"    target >= 10x (the full pose step against least_squares on the same six-row "
          f"equations): {'met' if t_same / t_ours >= 10 else 'NOT met'} ({t_same / t_ours:.2f}x)")


def bench_b(repeat):
    print("\n(b) K independent four-bars, all cranks stepped 1 deg, warm start (median)")
    print(f"{'K':>5} {'us/pose':>12} {'us/four-bar':>12} {'ratio vs K=1':>13}")
    base = None
    for k in (1, 2, 4, 8, 16, 32, 64):
        m = jointwise.from_dict(M.four_bar_chain(k))
        steps = [60.0 + s for s in range(1, 21)]
        starts = [m.pose({f"crank{i}": t - 1.0 for i in range(k)}) for t in steps]
        c = [0]

        def step():
            s = c[0] % len(steps)
            c[0] += 1
            m.pose({f"crank{i}": steps[s] for i in range(k)}, start=starts[s])

        t = median_time(step, max(3, 40 // k), repeat)
        per = t / k
        base = per if base is None else base
        print(f"{k:5d} {t * 1e6:12.1f} {per * 1e6:12.1f} {per / base:12.2f}x")


def bench_c(repeat):
    print("\n(c) scissor stacks, slide stepped 2 mm, warm start (median)")
    print(f"{'stages':>7} {'us/pose':>12} {'us/stage':>10} {'ratio/stage vs 2':>17}")
    base = None
    for n in (2, 4, 8, 16):
        m = jointwise.from_dict(M.scissor_stack(n))
        steps = [400.0 - 2.0 * s for s in range(1, 21)]
        starts = [m.pose({"slide": x + 2.0}) for x in steps]
        c = [0]

        def step():
            s = c[0] % len(steps)
            c[0] += 1
            assert m.pose({"slide": steps[s]}, start=starts[s]).converged

        t = median_time(step, 20, repeat)
        per = t / n
        base = per if base is None else base
        print(f"{n:7d} {t * 1e6:12.1f} {per * 1e6:10.1f} {per / base:16.2f}x")


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeat", type=int, default=7)
    ap.add_argument("--only", choices=("a", "b", "c"))
    ap.add_argument("--cpu", action="store_true", help="time this process's CPU time, not the wall clock")
    args = ap.parse_args(argv)
    if args.cpu:
        CLOCK[0] = time.process_time
    print(f"jointwise {jointwise.__version__}: closed-loop benchmarks, median of {args.repeat} repeats, "
          f"{'CPU time' if args.cpu else 'wall clock'}\n")
    for key, fn in (("a", bench_a), ("b", bench_b), ("c", bench_c)):
        if args.only in (None, key):
            fn(args.repeat)
    return 0


if __name__ == "__main__":
    sys.exit(main())
