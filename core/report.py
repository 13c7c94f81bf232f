"""Output of ``jointwise sweep`` and ``jointwise range``: CSV, JSON, text and the plot.

CSV columns: ``step``, the drive (its own column, named by the drive), then every
coordinate in file order (the drive again among them), every measure (points as NAME.x,
NAME.y, NAME.z; angles in degrees; rates in file units per file unit), ``converged`` and
``singular`` as 1 / 0.  Numbers are written with full precision (shortest round-trip
form).  A step that did not converge repeats the last good pose; its row is flagged.

The plot (``--plot``, extra ``plot``: ``pip install 'jointwise[plot]'``) draws the
coordinates and the measures against the drive, with stretches that did not converge
shaded grey ("unreachable") and singular steps shaded red.  Rate measures get a second
panel with the ideal (frictionless) mechanical advantage, labelled as such.
"""
from __future__ import annotations

import io
import json
import math
import os
import sys

import numpy as np

from .errors import JointwiseError, SpecError

__all__ = ["sweep_table", "sweep_json", "sweep_command", "range_command", "plot_sweep",
           "PLOT_INSTALL"]

PLOT_INSTALL = "--plot needs matplotlib, which comes with the plot extra: pip install 'jointwise[plot]'"

EXIT_OK, EXIT_USAGE, EXIT_ASSEMBLY = 0, 2, 3


def _num(v):
    v = float(v)
    if not math.isfinite(v):  # never written: the engine keeps tables finite
        raise JointwiseError("internal: a non-finite value reached the table")
    return repr(v)


def header(mech, drive):
    from .measures import columns
    return ["step", drive] + list(mech.coordinates) + columns(mech) + ["converged", "singular"]


def sweep_table(mech, sw, drive):
    """CSV text of a sweep."""
    out = io.StringIO()
    cols = header(mech, drive)
    out.write(",".join(cols) + "\n")
    meas = []
    for name, m in mech.measures.items():
        v = sw.measures[name]
        if m.type == "point":
            meas.extend(v[:, k] for k in range(3))
        else:
            meas.append(v)
    coords = [sw.joints[c] for c in mech.coordinates]
    for i in range(len(sw.values)):
        row = [str(i), _num(sw.values[i])] + [_num(c[i]) for c in coords] + [_num(m[i]) for m in meas]
        row += ["1" if sw.converged[i] else "0", "1" if sw.singular[i] else "0"]
        out.write(",".join(row) + "\n")
    return out.getvalue()


def sweep_json(mech, sw, drive):
    return json.dumps({"drive": drive, "poses": [sw.pose(i) for i in range(len(sw.values))]}) + "\n"


def _plot_available():
    try:
        import matplotlib  # noqa: F401
    except ImportError:
        return False
    return True


def _runs(mask):
    idx = np.flatnonzero(mask)
    if not len(idx):
        return []
    parts = np.split(idx, np.flatnonzero(np.diff(idx) > 1) + 1)
    return [(int(p[0]), int(p[-1])) for p in parts]


def plot_sweep(mech, sw, drive, path):
    """Draw the sweep to PNG ``path`` (atomically: temp file, then rename)."""
    import matplotlib
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    from .measures import describe

    x = np.asarray(sw.values, float)
    du = mech.angle_unit if mech.coordinate_kind(drive) == "angle" else mech.length_unit
    rates = [n for n, m in mech.measures.items() if m.type == "rate"]
    others = [n for n in mech.measures if n not in rates]
    panels = 1 + (1 if others else 0) + (1 if rates else 0)
    fig, axes = plt.subplots(panels, 1, figsize=(8, 3.2 * panels), sharex=True, squeeze=False)
    axes = axes[:, 0]

    def shade(ax):
        dx = (x[1] - x[0]) / 2 if len(x) > 1 else 0.5
        for a, b in _runs(~sw.converged):
            ax.axvspan(min(x[a], x[b]) - abs(dx), max(x[a], x[b]) + abs(dx), color="0.8", lw=0,
                       label="not reachable / not converged")
        for a, b in _runs(sw.singular):
            ax.axvspan(min(x[a], x[b]) - abs(dx), max(x[a], x[b]) + abs(dx), color="tab:red", alpha=0.25,
                       lw=0, label="singular (dead point)")

    ax = axes[0]
    for c in mech.coordinates:
        unit = mech.angle_unit if mech.coordinate_kind(c) == "angle" else mech.length_unit
        ax.plot(x, sw.joints[c], label=f"{c} [{unit}]")
    shade(ax)
    ax.set_ylabel("coordinates")
    k = 1
    if others:
        ax = axes[k]
        k += 1
        for n in others:
            v = sw.measures[n]
            if v.ndim > 1:
                for j, a in enumerate("xyz"):
                    ax.plot(x, v[:, j], label=f"{n}.{a} [{mech.length_unit}]")
            else:
                ax.plot(x, v, label=f"{n} [{describe(mech, n)}]")
        shade(ax)
        ax.set_ylabel("measures")
    if rates:
        ax = axes[k]
        twin = ax.twinx()
        lo_hi = []
        for n in rates:
            ax.plot(x, sw.measures[n], label=f"{n} = d{mech.measures[n].of}/d{mech.measures[n].per} "
                                             f"[{describe(mech, n)}]")
            adv = np.array(sw.advantage[n], dtype=float)
            rate = np.asarray(sw.measures[n], dtype=float)
            pole = np.flatnonzero(np.sign(rate[1:]) != np.sign(rate[:-1])) + 1
            adv[pole] = np.nan  # the rate passes zero there: the advantage runs off to +-infinity
            twin.plot(x, adv, ls="--", lw=0.9, color="0.45",
                      label=f"{n}: ideal mechanical advantage (frictionless, 1/rate), right axis")
            finite = adv[np.isfinite(adv) & (np.abs(adv) < 1e12)]
            if finite.size:
                lo_hi.append(np.percentile(finite, [5, 95]))
        if lo_hi:  # the advantage runs off to infinity at dead points: show its usual range
            lo = min(v[0] for v in lo_hi)
            hi = max(v[1] for v in lo_hi)
            pad = 0.5 * max(hi - lo, 1e-9)
            twin.set_ylim(lo - pad, hi + pad)
        twin.set_ylabel("ideal mechanical advantage")
        h2, l2 = twin.get_legend_handles_labels()
        for hh, ll in zip(h2, l2):
            ax.plot([], [], ls="--", color="0.45", label=ll)
        shade(ax)
        ax.set_ylabel("rates")
    for ax in axes:
        h, lab = ax.get_legend_handles_labels()
        seen = {}
        for hh, ll in zip(h, lab):
            seen.setdefault(ll, hh)
        if seen:
            ax.legend(seen.values(), seen.keys(), fontsize="small", loc="best")
        ax.grid(True, alpha=0.3)
    axes[-1].set_xlabel(f"{drive} [{du}]")
    fig.suptitle(f"{mech.name or mech.source}: sweep of {drive}")
    fig.tight_layout()
    tmp = f"{path}.tmp-{os.getpid()}"
    try:
        fig.savefig(tmp, format="png", dpi=100)
        os.replace(tmp, path)
    finally:
        plt.close(fig)
        if os.path.exists(tmp):
            os.unlink(tmp)


def _check_out(path, what):
    d = os.path.dirname(os.path.abspath(path))
    if not os.path.isdir(d):
        raise SpecError(f"{what} {path!r}: folder {d!r} does not exist")
    if os.path.isdir(path):
        raise SpecError(f"{what} {path!r} is a folder")


def sweep_command(mech, args, emit):
    """``jointwise sweep``: returns the exit code."""
    from .sweep import sweep
    drive = args.drive
    mech._require(drive)
    held = {}
    for name, v in args.set:
        if name == drive:
            raise SpecError(f"--set {name}: {name!r} is the drive; give its range with --from/--to",
                            source=mech.source)
        mech._require(name)
        held[name] = v
    if args.out:
        _check_out(args.out, "--out")
    if args.plot:
        _check_out(args.plot, "--plot")
        if not args.plot.lower().endswith(".png"):
            raise SpecError(f"--plot {args.plot!r}: the plot is a PNG image; give a name ending in .png")
        if not _plot_available():
            print(f"jointwise: {PLOT_INSTALL}", file=sys.stderr)
            return EXIT_USAGE
    mech.check_limits(mech._held_from(held))
    values = np.linspace(args.start, args.end, args.steps)
    sw = sweep(mech, drive, values, held)
    text = sweep_json(mech, sw, drive) if args.format == "json" else sweep_table(mech, sw, drive)
    emit(text, args.out)
    if args.plot:
        plot_sweep(mech, sw, drive, args.plot)
    bad = np.flatnonzero(~sw.converged)
    if len(bad):
        i = int(bad[0])
        why = sw.reasons.get(i, "the loops do not close there")
        print(f"jointwise: {len(bad)} of {len(values)} steps did not converge (first: step {i}, "
              f"{drive} = {values[i]:g}: {why}); those rows repeat the last good pose and are "
              f"flagged converged = 0", file=sys.stderr)
        return EXIT_ASSEMBLY
    return EXIT_OK


def range_text(mech, res):
    drive = res["drive"]
    unit = mech.angle_unit if mech.coordinate_kind(drive) == "angle" else mech.length_unit
    lines = []
    for (lo, hi), (wl, wh) in zip(res["intervals"], res["reasons"]):
        lines.append(f"{drive}: from {lo:.6f} to {hi:.6f} {unit}   (low end: {wl}; high end: {wh})")
    return "\n".join(lines) + "\n"


def range_command(mech, args, emit):
    """``jointwise range``: returns the exit code."""
    from .sweep import reach
    held = {}
    for name, v in args.set:
        if name == args.drive:
            raise SpecError(f"--set {name}: {name!r} is the drive of the range", source=mech.source)
        mech._require(name)
        held[name] = v
    res = reach(mech, args.drive, held)
    if args.format == "json":
        emit(json.dumps(res) + "\n", None)
    else:
        emit(range_text(mech, res), None)
    return EXIT_OK
