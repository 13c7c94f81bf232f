"""Random four-bars, slider-cranks and RSSRs, swept and checked against closed forms.

Used by ``tests/test_branch_property.py`` (a bounded number of cases in CI) and run by
hand for the full campaign::

    .venv/bin/python tests/branch_campaign.py 750 [seed]

which prints the number of cases, the unflagged branch switches found and the rows that
match no closed-form branch at all.

Closed forms (each row's drive value in, both assembly branches out):

* four-bar: circle intersection of the coupler circle about the crank pin and the rocker
  circle about the rocker pivot (the geometric form of Freudenstein's equation,
  K1 cos t4 - K2 cos t2 + K3 = cos(t2 - t4); Norton, *Design of Machinery*, sec. 4.5),
  :func:`mechanisms.four_bar_positions`;
* slider-crank: x = r cos t +/- sqrt(l^2 - (r sin t - e)^2) (Norton, sec. 4.6);
* RSSR: with the crank's ball A(t), the rocker's ball B(p) = C + w cos p + (u x w) sin p
  about the rocker axis u through C, |B - A| = l gives P cos p + Q sin p = S with
  P = 2 (C - A).w, Q = 2 (C - A).(u x w), S = l^2 - |C - A|^2 - |w|^2, so
  p = atan2(Q, P) +/- acos(S / sqrt(P^2 + Q^2)) (elementary; the same law of cosines as
  tests/sweep_fixtures.rssr_rocker).

A row's branch is the closed-form solution its output matches (to ``MATCH`` degrees or
``MATCH`` relative length).  A *switch* is a pair of neighbouring rows, both converged
and neither flagged singular, whose branches differ: the solver moved from one assembly
branch to the other without saying so.  Near-toggle cases are built so that the two
branches come within a small fraction of a degree of each other along the sweep.
"""
from __future__ import annotations

import math
import sys

import numpy as np

sys.path.insert(0, __import__("os").path.dirname(__file__))
import mechanisms as M  # noqa: E402

#: A row matches a closed-form branch within this (degrees; relative length for slides).
MATCH = 1e-6
STEPS = 361


def _mech(data):
    import jointwise
    return jointwise.loads(M.dumps_toml(data), source="campaign.toml")


# -- four-bar --------------------------------------------------------------------------------
def four_bar_case(rng, near_toggle=False):
    """(file data, drive, values, closed(row values) -> (2, N) outputs, output coordinate)."""
    while True:
        size = 10.0 ** rng.uniform(0, 3)
        a, b, c, d = rng.uniform(0.2, 1.0, 4) * size
        if near_toggle:
            # bring s + l close to p + q (a change point), from either side
            ls = sorted([a, b, c, d])
            gap = (ls[0] + ls[3]) - (ls[1] + ls[2])
            eps = 10.0 ** rng.uniform(-4, -1.5) * size * rng.choice([-1.0, 1.0])
            # move the longest link so that s + l - p - q = eps
            k = int(np.argmax([a, b, c, d]))
            vals = [a, b, c, d]
            vals[k] -= gap - eps
            a, b, c, d = vals
            if min(vals) <= 0 or vals[k] < max(v for i, v in enumerate(vals) if i != k) * 0.999:
                continue
        home = float(rng.uniform(0, 360))
        branch = str(rng.choice(["open", "crossed"]))
        if M.four_bar_positions(a, b, c, d, home, branch) is None:
            continue
        data = M.four_bar(a, b, c, d, home, branch)
        sign = float(rng.choice([-1.0, 1.0]))
        values = home + sign * np.linspace(0.0, 360.0, STEPS)

        def closed(v, a=a, b=b, c=c, d=d):
            out = np.full((2, len(v)), np.nan)
            for k, t in enumerate(v):
                for bi, br in enumerate(("open", "crossed")):
                    p = M.four_bar_positions(a, b, c, d, float(t), br)
                    if p is not None:
                        out[bi, k] = p[2]
            return out
        return dict(kind="four-bar", data=data, drive="crank", values=values, closed=closed,
                    output="rocker", angle=True, dims=(a, b, c, d, home, branch))


# -- slider-crank -------------------------------------------------------------------------------
def slider_crank_data(r, l, e, home, sign):
    t = math.radians(home)
    ax, ay = r * math.cos(t), r * math.sin(t)
    x = ax + sign * math.sqrt(l * l - (ay - e) ** 2)
    m = M.base("campaign slider-crank", links=["crank_arm", "rod", "slider"])
    j = m["joints"]
    j["crank"] = M.revolute("frame", "crank_arm", (0, 0), home=home, drive=True)
    j["big_end"] = M.revolute("crank_arm", "rod", (ax, ay))
    j["wrist"] = M.revolute("rod", "slider", (x, e))
    j["slide"] = {"type": "prismatic", "parent": "frame", "child": "slider",
                  "point": [x, e, 0.0], "axis": [1.0, 0.0, 0.0], "home": float(x)}
    return m


def slider_crank_case(rng, near_toggle=False):
    while True:
        size = 10.0 ** rng.uniform(0, 3)
        r = rng.uniform(0.2, 1.0) * size
        e = rng.uniform(-0.5, 0.5) * r
        if near_toggle:  # the rod comes within a hair of square to the slide
            l = (r + abs(e)) * (1 + 10.0 ** rng.uniform(-6, -2.5))
        else:
            l = r * rng.uniform(1.05, 4.0) + abs(e)
        home = float(rng.uniform(0, 360))
        if l * l - (r * math.sin(math.radians(home)) - e) ** 2 <= 0:
            continue
        sign = float(rng.choice([-1.0, 1.0]))
        data = slider_crank_data(r, l, e, home, sign)
        dsign = float(rng.choice([-1.0, 1.0]))
        values = home + dsign * np.linspace(0.0, 360.0, STEPS)

        def closed(v, r=r, l=l, e=e):
            t = np.radians(v)
            disc = l * l - (r * np.sin(t) - e) ** 2
            root = np.sqrt(np.where(disc >= 0, disc, np.nan))
            return np.stack([r * np.cos(t) + root, r * np.cos(t) - root])
        return dict(kind="slider-crank", data=data, drive="crank", values=values, closed=closed,
                    output="slide", angle=False, scale=size, dims=(r, l, e, home, sign))


# -- RSSR --------------------------------------------------------------------------------
def _unit(v):
    return v / np.linalg.norm(v)


def rssr_case(rng, near_toggle=False):
    """Crank about z through the origin (ball A at radius a), rocker about a random axis
    u through C (ball B at radius |w|), coupler of length l between the balls."""
    while True:
        size = 10.0 ** rng.uniform(0, 3)
        a = rng.uniform(0.2, 0.6) * size
        C = rng.uniform(-1, 1, 3) * size
        u = _unit(rng.normal(size=3))
        w0 = np.cross(u, rng.normal(size=3))
        w = _unit(w0) * rng.uniform(0.3, 0.9) * size
        v = np.cross(u, w)
        th = np.radians(np.linspace(0, 360, 3601))
        A = np.stack([a * np.cos(th), a * np.sin(th), 0 * th], axis=1)
        CA = C[None, :] - A
        P, Q = 2 * CA @ w, 2 * CA @ v
        R = np.hypot(P, Q)
        base_s = -(CA * CA).sum(axis=1) - w @ w
        if near_toggle:
            # choose l so that max over the turn of S / R is 1 - eps (or min is -1 + eps)
            eps = 10.0 ** rng.uniform(-5, -2)
            top = bool(rng.integers(2))
            lo_l, hi_l = 1e-9, 10 * size
            for _ in range(100):
                mid = 0.5 * (lo_l + hi_l)
                ratio = (mid * mid + base_s) / R
                val = ratio.max() - (1 - eps) if top else ratio.min() - (-1 + eps)
                if val > 0:
                    hi_l = mid
                else:
                    lo_l = mid
            l = 0.5 * (lo_l + hi_l)
        else:
            l = rng.uniform(0.3, 2.5) * size
        ratio = (l * l + base_s) / R
        ok = np.abs(ratio) <= 1
        if not ok.any():
            continue
        k0 = int(rng.choice(np.flatnonzero(ok)))
        home = float(np.degrees(th[k0]))
        sign = float(rng.choice([-1.0, 1.0]))
        phi = math.atan2(Q[k0], P[k0]) + sign * math.acos(float(np.clip(ratio[k0], -1, 1)))
        B0 = C + w * math.cos(phi) + v * math.sin(phi)
        A0 = A[k0]
        m = M.base("campaign RSSR", links=["crank_arm", "coupler", "rocker_arm"])
        j = m["joints"]
        j["crank"] = M.revolute("frame", "crank_arm", (0, 0), axis=(0, 0, 1), home=home, drive=True)
        j["ball_a"] = {"type": "spherical", "parent": "crank_arm", "child": "coupler",
                       "point": [float(x) for x in A0], "axis": [0.0, 0.0, 1.0]}
        j["ball_b"] = {"type": "spherical", "parent": "coupler", "child": "rocker_arm",
                       "point": [float(x) for x in B0], "axis": [0.0, 0.0, 1.0]}
        j["rocker"] = {"type": "revolute", "parent": "frame", "child": "rocker_arm",
                       "point": [float(x) for x in C], "axis": [float(x) for x in u],
                       "home": math.degrees(phi)}
        dsign = float(rng.choice([-1.0, 1.0]))
        values = home + dsign * np.linspace(0.0, 360.0, STEPS)

        def closed(vals, a=a, C=C, w=w, v=v, l=l):
            t = np.radians(vals)
            A = np.stack([a * np.cos(t), a * np.sin(t), 0 * t], axis=1)
            CA = C[None, :] - A
            P, Q = 2 * CA @ w, 2 * CA @ v
            S = l * l - (CA * CA).sum(axis=1) - w @ w
            rr = S / np.hypot(P, Q)
            c = np.arccos(np.where(np.abs(rr) <= 1, rr, np.nan))
            mid = np.arctan2(Q, P)
            return np.degrees(np.stack([mid + c, mid - c]))
        return dict(kind="RSSR", data=m, drive="crank", values=values, closed=closed,
                    output="rocker", angle=True, dims=(a, tuple(C), tuple(u), tuple(w), l, home, sign))


KINDS = {"four-bar": four_bar_case, "slider-crank": slider_crank_case, "RSSR": rssr_case}


# -- checking ------------------------------------------------------------------------------------
def branch_labels(case, joints_out, drive_vals):
    """Per row: 0 or 1 (the closed-form branch the output matches), -1 (matches neither),
    2 (both: the branches coincide within the match tolerance, a toggle)."""
    ref = case["closed"](drive_vals)
    out = np.asarray(joints_out, float)
    if case["angle"]:
        d = np.abs((out[None, :] - ref + 180.0) % 360.0 - 180.0)
        tol = MATCH
    else:
        d = np.abs(out[None, :] - ref)
        tol = MATCH * case["scale"]
    m0, m1 = d[0] <= tol, d[1] <= tol
    lab = np.where(m0 & m1, 2, np.where(m0, 0, np.where(m1, 1, -1)))
    return lab, np.nanmin(np.where(np.isnan(d), np.inf, d), axis=0)


def check_sweep(case, sw):
    """(unflagged switches, converged rows matching no branch) of one sweep result."""
    lab, _ = branch_labels(case, sw.joints[case["output"]], sw.joints[case["drive"]])
    conv, sing = sw.converged, sw.singular
    switches = 0
    for i in range(len(lab) - 1):
        if not (conv[i] and conv[i + 1]) or sing[i] or sing[i + 1]:
            continue
        if lab[i] in (0, 1) and lab[i + 1] in (0, 1) and lab[i] != lab[i + 1]:
            switches += 1
    wrong = int(((lab == -1) & conv).sum())
    return switches, wrong


def run_case(case, how="sweep"):
    m = _mech(case["data"])
    if how == "sweep":
        sw = m.sweep(case["drive"], case["values"])
    else:
        sw = m.follow({case["drive"]: case["values"]})
    return check_sweep(case, sw), sw


class _Slow(Exception):
    pass


def campaign(n, seed=0, verbose=False, limit=None):
    """Run n cases; ``limit`` (s) gives up on a case that takes longer (counted as slow)."""
    import signal
    import time
    rng = np.random.default_rng(seed)
    kinds = list(KINDS)
    totals = {k: [0, 0, 0, 0] for k in kinds}  # cases, sweeps with a switch, switches, wrong rows
    bad = []
    slow = []

    def alarm(*_):
        raise _Slow()
    for i in range(n):
        kind = kinds[i % 3]
        near = bool(i % 2)
        case = KINDS[kind](rng, near_toggle=near)
        t0 = time.time()
        if limit:
            signal.signal(signal.SIGALRM, alarm)
            signal.alarm(int(limit))
        try:
            (sw_n, wrong), sw = run_case(case, "sweep" if (i // 3) % 2 == 0 else "follow")
        except _Slow:
            slow.append((i, kind))
            if verbose:
                print(i, kind, near, "gave up after", limit, "s", flush=True)
            continue
        finally:
            if limit:
                signal.alarm(0)
        totals[kind].append(time.time() - t0)
        t = totals[kind]
        t[0] += 1
        t[1] += sw_n > 0
        t[2] += sw_n
        t[3] += wrong
        if sw_n or wrong:
            bad.append((i, kind, near, sw_n, wrong, case["dims"]))
            if verbose:
                print(i, kind, near, sw_n, wrong, case["dims"], flush=True)
    return totals, bad, slow


if __name__ == "__main__":
    import time
    n = int(sys.argv[1]) if len(sys.argv) > 1 else 60
    seed = int(sys.argv[2]) if len(sys.argv) > 2 else 0
    limit = float(sys.argv[3]) if len(sys.argv) > 3 else None
    t0 = time.time()
    totals, bad, slow = campaign(n, seed, verbose=True, limit=limit)
    for k, (c, s, ns, w, *times) in totals.items():
        med = float(np.median(times)) if times else 0.0
        print(f"{k}: {c} cases, {s} with an unflagged switch ({ns} switches), {w} converged rows "
              f"off every branch; median {med:.2f} s, longest {max(times, default=0):.1f} s")
    print(f"gave up (over {limit} s): {len(slow)} {slow}")
    print(f"total: {sum(v[0] for v in totals.values())} cases, "
          f"{sum(v[1] for v in totals.values())} with switches, "
          f"{sum(v[2] for v in totals.values())} switches, "
          f"{sum(v[3] for v in totals.values())} wrong rows, {time.time() - t0:.1f} s")
