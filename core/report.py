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
from types import SimpleNamespace

import numpy as np

from .errors import JointwiseError, SpecError
from .outputs import Outputs

__all__ = ["sweep_table", "sweep_json", "sweep_command", "range_command", "plot_sweep",
           "PLOT_INSTALL", "Outputs", "sweep_chunks", "SWEEP_CHUNK"]

#: Steps solved, written and dropped at a time by ``jointwise sweep`` (memory stays bounded).
SWEEP_CHUNK = 10_000
#: Most points per line the plot draws; longer sweeps are thinned (flagged steps all kept).
PLOT_POINTS = 20_000

PLOT_INSTALL = "--plot needs matplotlib, which comes with the plot extra: pip install 'jointwise[plot]'"

EXIT_OK, EXIT_USAGE, EXIT_ASSEMBLY = 0, 2, 3


def _num(v):
    v = float(v)
    if not math.isfinite(v):  # never written: the engine keeps tables finite
        raise JointwiseError("internal: a non-finite value reached the table")
    return repr(v)


def header(mech, drive, rates=False):
    from .measures import columns
    return (["step", drive] + list(mech.coordinates) + columns(mech)
            + (rate_columns(mech) if rates else []) + ["converged", "singular"])


def rate_columns(mech):
    """Columns of a sweep at a speed: ``time``, ``C.vel, C.acc`` per coordinate, then per
    measure ``M.vx, M.vy, M.vz, M.ax, M.ay, M.az`` (points) or ``M.vel, M.acc`` (distances,
    angles and rate measures: the measure's own unit per s and per s^2)."""
    out = ["time"]
    for c in mech.coordinates:
        out += [f"{c}.vel", f"{c}.acc"]
    for name, m in mech.measures.items():
        if m.type == "point":
            out += [f"{name}.{k}" for k in ("vx", "vy", "vz", "ax", "ay", "az")]
        else:
            out += [f"{name}.vel", f"{name}.acc"]
    return out


def _rate_values(mech, sw):
    """The rate columns' arrays, in :func:`rate_columns` order."""
    cols = [sw.time]
    for c in mech.coordinates:
        cols += [sw.velocities[c], sw.accelerations[c]]
    for name, m in mech.measures.items():
        if m.type == "point":
            cols += [sw.measure_velocities[name][:, k] for k in range(3)]
            cols += [sw.measure_accelerations[name][:, k] for k in range(3)]
        else:
            cols += [sw.measure_velocities[name], sw.measure_accelerations[name]]
    return cols


def _cell(v):
    """A rate cell: empty where the step did not converge (or the rate is undefined)."""
    return repr(float(v)) if math.isfinite(v) else ""


#: Speed units accepted by --speed (and per second by --acceleration): size in radians or
#: millimetres per second.
SPEED_UNITS = {"rpm": ("angle", 2 * math.pi / 60), "deg/s": ("angle", math.pi / 180), "rad/s": ("angle", 1.0),
               "mm/s": ("length", 1.0), "cm/s": ("length", 10.0), "m/s": ("length", 1000.0),
               "in/s": ("length", 25.4)}


def parse_rate(text, mech, drive, option, per_second=False):
    """A --speed (or, ``per_second``, --acceleration) value in the drive's file units per
    second (per second squared).  ``text``: a number with an optional unit: rpm, deg/s,
    rad/s, mm/s, cm/s, m/s, in/s (for an acceleration the same with a further /s, e.g.
    deg/s2, deg/s^2, rpm/s, mm/s2)."""
    import re
    from .spec import ANGLE_UNITS, LENGTH_UNITS
    m = re.fullmatch(r"\s*([-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?)\s*([A-Za-z/^0-9]*)\s*", str(text))
    if m is None:
        raise SpecError(f"{option} {text!r}: expected a number with an optional unit "
                        f"({', '.join(SPEED_UNITS)}{' with a further /s' if per_second else ''})")
    value, unit = float(m.group(1)), m.group(2)
    if not math.isfinite(value):
        raise SpecError(f"{option} {text!r}: the number must be finite")
    if not unit:
        return value
    base = unit
    if per_second:
        for tail in ("/s2", "/s^2", "/s/s"):
            if unit.endswith(tail) and unit != "rpm" + tail:
                base = unit[:-len(tail)] + "/s"
                break
        else:
            base = "rpm" if unit == "rpm/s" else None
    if base not in SPEED_UNITS:
        accepted = [u if not per_second else (u + "/s" if u == "rpm" else u + "2") for u in SPEED_UNITS]
        raise SpecError(f"{option} {text!r}: unknown unit {unit!r}; one of {', '.join(accepted)}")
    kind, size = SPEED_UNITS[base]
    dk = mech.coordinate_kind(drive)
    if kind != dk:
        raise SpecError(f"{option} {text!r}: {drive!r} is {'an angle' if dk == 'angle' else 'a length'}, "
                        f"the unit {unit!r} is for {'turning' if kind == 'angle' else 'sliding'}")
    if kind == "angle":
        return value * size / ANGLE_UNITS[mech.angle_unit]
    return value * size / LENGTH_UNITS[mech.length_unit]


def _csv_rows(mech, sw, first=0):
    """CSV lines (no header) of a sweep's rows, numbered from ``first``."""
    meas = []
    for name, m in mech.measures.items():
        v = sw.measures[name]
        if m.type == "point":
            meas.extend(v[:, k] for k in range(3))
        else:
            meas.append(v)
    coords = [sw.joints[c] for c in mech.coordinates]
    out = []
    rates = _rate_values(mech, sw) if getattr(sw, "time", None) is not None else None
    for i in range(len(sw.values)):
        row = [str(first + i), _num(sw.values[i])] + [_num(c[i]) for c in coords] + [_num(m[i]) for m in meas]
        if rates is not None:  # at a speed: empty where the step did not converge
            row += [_num(rates[0][i])] + [_cell(r[i]) for r in rates[1:]]
        row += ["1" if sw.converged[i] else "0", "1" if sw.singular[i] else "0"]
        out.append(",".join(row) + "\n")
    return "".join(out)


def sweep_table(mech, sw, drive):
    """CSV text of a sweep."""
    return ",".join(header(mech, drive, rates=sw.time is not None)) + "\n" + _csv_rows(mech, sw)


def _json_rows(sw):
    return ", ".join(json.dumps(sw.pose(i)) for i in range(len(sw.values)))


def sweep_json(mech, sw, drive):
    data = {"drive": drive, "poses": [sw.pose(i) for i in range(len(sw.values))]}
    if sw.time is not None:  # at a speed: null where a step did not converge
        def lst(v):
            v = np.asarray(v, float)
            if v.ndim > 1:
                return [[_json_num(x) for x in row] for row in v]
            return [_json_num(x) for x in v]
        data["time"] = lst(sw.time)
        for key in ("velocities", "accelerations", "measure_velocities", "measure_accelerations"):
            data[key] = {k: lst(v) for k, v in getattr(sw, key).items()}
    return json.dumps(data) + "\n"


def _json_num(v):
    return float(v) if math.isfinite(v) else None


#: Sweep attributes of a run at a drive speed (besides ``time``).
RATE_KEYS = ("velocities", "accelerations", "measure_velocities", "measure_accelerations")


def _gather_rates(acc, sw):
    """Collect a chunk's time and rates (lists of JSON numbers, None where not converged)."""
    acc["time"].setdefault("", []).extend(_json_list(sw.time))
    for key in RATE_KEYS:
        for k, v in getattr(sw, key).items():
            acc[key].setdefault(k, []).extend(_json_list(v))


def _json_list(v):
    v = np.asarray(v, float)
    if v.ndim > 1:
        return [[_json_num(x) for x in row] for row in v]
    return [_json_num(x) for x in v]


def _rates_json(acc):
    """``{"time": [...], "velocities": {...}, ...}`` as JSON text."""
    data = {"time": acc["time"].get("", [])}
    for key in RATE_KEYS:
        data[key] = acc[key]
    return json.dumps(data)


def sweep_chunks(mech, drive, start, end, steps, held=None, chunk=None, timing=None):
    """Yield ``(first_index, Sweep)`` for the ``steps`` samples of ``np.linspace(start, end,
    steps)``, ``chunk`` at a time, each chunk continuing from the last solved state of the
    one before (:meth:`Mechanism.sweep` with ``start``).  Only one chunk is held at a time.
    The values equal ``np.linspace``'s bit for bit (same formula, end point exact)."""
    chunk = chunk or SWEEP_CHUNK
    div = steps - 1
    delta = end - start
    step = delta / div
    state = None
    for k0 in range(0, steps, chunk):
        k1 = min(k0 + chunk, steps)
        idx = np.arange(k0, k1, dtype=float)
        vals = idx * step + start if step != 0 else idx / div * delta + start
        if k1 == steps:
            vals[-1] = end
        if timing:  # the drive's time and rate where this chunk starts; rates from there on
            from .rates import drive_timing
            t, rate = drive_timing(np.array([start, vals[0]]), timing["speed"], timing.get("acceleration", 0.0))
            sw = mech.sweep(drive, vals, held, start=state, speed=float(rate[1]),
                            acceleration=timing.get("acceleration", 0.0))
            sw.time = sw.time + t[1]
        else:
            sw = mech.sweep(drive, vals, held, start=state)
        state = sw.q[-1]  # the last solved state (a failed last row repeats the last good one)
        yield k0, sw


class _PlotData:
    """What the plot needs from a streamed sweep: every step's flags, values thinned to
    about ``PLOT_POINTS`` per line (flagged steps always kept)."""

    def __init__(self, steps):
        self.steps = steps
        self.every = max(1, -(-steps // PLOT_POINTS))
        self.parts = []

    def add(self, first, sw):
        i = np.arange(len(sw.values))
        keep = ((first + i) % self.every == 0) | ~sw.converged | sw.singular
        if first + len(i) == self.steps:
            keep[-1] = True
        self.parts.append(SimpleNamespace(
            values=sw.values[keep], converged=sw.converged[keep], singular=sw.singular[keep],
            joints={k: v[keep] for k, v in sw.joints.items()},
            measures={k: v[keep] for k, v in sw.measures.items()},
            advantage={k: np.asarray(v)[keep] for k, v in sw.advantage.items()},
            time=None if sw.time is None else sw.time[keep],
            **{key: {k: v[keep] for k, v in getattr(sw, key).items()} for key in RATE_KEYS}))

    def sweep(self):
        p = self.parts
        return SimpleNamespace(
            values=np.concatenate([x.values for x in p]),
            converged=np.concatenate([x.converged for x in p]),
            singular=np.concatenate([x.singular for x in p]),
            joints={k: np.concatenate([x.joints[k] for x in p]) for k in p[0].joints},
            measures={k: np.concatenate([x.measures[k] for x in p]) for k in p[0].measures},
            advantage={k: np.concatenate([x.advantage[k] for x in p]) for k in p[0].advantage},
            time=None if p[0].time is None else np.concatenate([x.time for x in p]),
            **{key: {k: np.concatenate([getattr(x, key)[k] for x in p]) for k in getattr(p[0], key)}
               for key in RATE_KEYS})


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


def _ratio_unit(unit):
    """A speed ratio's unit for a rate: ``deg/deg`` is a plain number (``1``), else ``(mm/deg)``."""
    a, _, b = unit.partition("/")
    return "1" if a == b else f"({unit})"


def _twin_legend(ax, twin):
    """The right axis' lines listed in the left axis' legend (as empty proxies), the left
    axis drawn above the right one (its legend is not crossed by the right axis' lines),
    and zero at the same height on both axes."""
    for line in twin.get_lines():
        ax.plot([], [], ls=line.get_linestyle(), lw=line.get_linewidth(), color=line.get_color(),
                label=line.get_label())
    ax.set_zorder(twin.get_zorder() + 1)
    ax.patch.set_visible(False)
    lims = [a.get_ylim() for a in (ax, twin)]
    lims = [(min(lo, 0.0), max(hi, 0.0)) for lo, hi in lims]
    if any(hi - lo <= 0 for lo, hi in lims):
        return
    share = max(-lo / (hi - lo) for lo, hi in lims)  # the part of the height below zero
    if share >= 1.0:
        return
    for a, (lo, hi) in zip((ax, twin), lims):
        if hi > 0:
            a.set_ylim(min(lo, -share * hi / (1.0 - share)), hi)


def _unit_axes(ax, x, groups, first, what):
    """Plot ``groups`` (unit -> [(label, values, style)]) against ``x`` with the unit
    ``first`` (the drive's, when present) on the left axis and the other units on a right
    axis, so that every axis names its units; each line's label carries its unit."""
    import matplotlib
    colours = matplotlib.rcParams["axes.prop_cycle"].by_key().get("color", ["C0"])
    units = sorted(groups, key=lambda u: (u != first, -len(groups[u]), u))
    if not units:
        return
    k = 0
    for label, v, style in groups[units[0]]:
        ax.plot(x, v, ls=style, color=colours[k % len(colours)], label=f"{label} [{units[0]}]")
        k += 1
    ax.set_ylabel(f"{what} [{units[0]}]")
    if len(units) > 1:
        twin = ax.twinx()
        for u in units[1:]:
            for label, v, style in groups[u]:
                twin.plot(x, v, ls="--" if style == "-" else style, color=colours[k % len(colours)],
                          label=f"{label} [{u}], right axis")
                k += 1
        twin.set_ylabel(f"{what} [{', '.join(units[1:])}]")
        _twin_legend(ax, twin)


def plot_sweep(mech, sw, drive, path):
    """Draw the sweep to PNG ``path`` (atomically: temp file, then rename)."""
    import matplotlib
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    from .measures import describe

    x = np.asarray(sw.values, float)
    du = mech.unit_name(mech.index_of(drive))
    rates = [n for n, m in mech.measures.items() if m.type == "rate"]
    others = [n for n in mech.measures if n not in rates]
    moving = sw.time is not None
    panels = 1 + (1 if others else 0) + (1 if rates else 0) + ((3 if rates else 2) if moving else 0)
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

    ax = axes[0]  # every panel: one unit on the left axis, the others on the right
    groups = {}
    for c in mech.coordinates:
        unit = mech.unit_name(mech.index_of(c))
        groups.setdefault(unit, []).append((c, sw.joints[c], "-"))
    _unit_axes(ax, x, groups, du, "coordinates")
    shade(ax)
    k = 1
    if others:
        ax = axes[k]
        k += 1
        groups = {}
        for n in others:
            v = sw.measures[n]
            if v.ndim > 1:
                groups.setdefault(mech.length_unit, []).extend((f"{n}.{a}", v[:, j], "-")
                                                               for j, a in enumerate("xyz"))
            else:
                groups.setdefault(describe(mech, n), []).append((n, v, "-"))
        _unit_axes(ax, x, groups, mech.length_unit, "measures")
        shade(ax)
    if rates:
        ax = axes[k]
        k += 1
        twin = ax.twinx()
        lo_hi = []
        for n in rates:
            ax.plot(x, sw.measures[n], label=f"{n} = d{mech.measures[n].of}/d{mech.measures[n].per} "
                                             f"[{describe(mech, n)}]")
            adv = np.array(sw.advantage[n], dtype=float)
            rate = np.asarray(sw.measures[n], dtype=float)
            pole = np.flatnonzero(np.sign(rate[1:]) != np.sign(rate[:-1])) + 1
            adv[pole] = np.nan  # the rate passes zero there: the advantage runs off to +-infinity
            inv = _ratio_unit("/".join(reversed(describe(mech, n).split("/")))).strip("()")
            twin.plot(x, adv, ls="--", lw=0.9, color="0.45",
                      label=f"{n}: ideal mechanical advantage [{inv}] (frictionless, 1/rate), right axis")
            finite = adv[np.isfinite(adv) & (np.abs(adv) < 1e12)]
            if finite.size:
                lo_hi.append(np.percentile(finite, [5, 95]))
        if lo_hi:  # the advantage runs off to infinity at dead points: show its usual range
            lo = min(v[0] for v in lo_hi)
            hi = max(v[1] for v in lo_hi)
            pad = 0.5 * max(hi - lo, 1e-9)
            twin.set_ylim(lo - pad, hi + pad)
        inverse = sorted({_ratio_unit("/".join(reversed(describe(mech, n).split("/")))).strip("()") for n in rates})
        twin.set_ylabel(f"ideal mechanical advantage [{', '.join(inverse)}]")
        h2, l2 = twin.get_legend_handles_labels()
        for hh, ll in zip(h2, l2):
            ax.plot([], [], ls="--", color="0.45", label=ll)
        shade(ax)
        ax.set_ylabel(f"rates [{', '.join(sorted({describe(mech, n) for n in rates}))}]")
    if moving:  # velocity and acceleration panels: one unit an axis, a second on the right
        for ax, key, mkey, per, what, tag in (
                (axes[k], "velocities", "measure_velocities", "/s", "velocity", "vel"),
                (axes[k + 1], "accelerations", "measure_accelerations", "/s²", "acceleration", "acc")):
            groups = {}  # lines named as the CSV columns
            for c in mech.coordinates:
                unit = mech.unit_name(mech.index_of(c))
                groups.setdefault(unit + per, []).append((f"{c}.{tag}", getattr(sw, key)[c], "-"))
            for n, v in getattr(sw, mkey).items():
                if n in rates:
                    continue
                unit = describe(mech, n) + per
                if v.ndim > 1:
                    groups.setdefault(unit, []).extend((f"{n}.{tag[0]}{a}", v[:, j], ":")
                                                       for j, a in enumerate("xyz"))
                else:
                    groups.setdefault(unit, []).append((f"{n}.{tag}", v, ":"))
            _unit_axes(ax, x, groups, du + per, what)
            shade(ax)
        if rates:  # how fast the speed ratios change: their own units, .vel left, .acc right
            ax = axes[k + 2]
            twin = ax.twinx()
            for n in rates:
                unit = _ratio_unit(describe(mech, n))
                ax.plot(x, sw.measure_velocities[n], label=f"{n}.vel [{unit}/s]")
                twin.plot(x, sw.measure_accelerations[n], ls="--", lw=0.9,
                          label=f"{n}.acc [{unit}/s²], right axis")
            units = sorted({_ratio_unit(describe(mech, n)) for n in rates})
            ax.set_ylabel(f"rate measures' change [{', '.join(u + '/s' for u in units)}]")
            twin.set_ylabel(f"its rate of change [{', '.join(u + '/s²' for u in units)}]")
            _twin_legend(ax, twin)
            shade(ax)
        axes[-1].set_xlabel(f"{drive} [{du}]  (time {sw.time[0]:g} to {sw.time[-1]:.4g} s)")
    for ax in axes:
        h, lab = ax.get_legend_handles_labels()
        seen = {}
        for hh, ll in zip(h, lab):
            seen.setdefault(ll, hh)
        if seen:
            # above the panel, outside the curves (a legend inside would hide some of them)
            ax.legend(seen.values(), seen.keys(), fontsize="small", loc="lower left",
                      bbox_to_anchor=(0.0, 1.0), frameon=False, borderaxespad=0.2,
                      ncol=2 if max(len(k) for k in seen) <= 40 else 1)
        ax.grid(True, alpha=0.3)
    if not moving:
        axes[-1].set_xlabel(f"{drive} [{du}]")
    fig.suptitle(f"{mech.name or mech.source}: sweep of {drive}")
    fig.tight_layout(rect=(0, 0, 1, 0.985))  # room for the title
    # ``path`` is the temporary name :class:`Outputs` reserved (or a device written in
    # place): saved directly, never renamed here, so ``--plot /dev/null`` stays a device
    try:
        fig.savefig(path, format="png", dpi=100)
    finally:
        plt.close(fig)


def _check_span(mech, drive, start, end):
    """Refuse a sweep span beyond the documented limits (turns for an angle drive,
    mechanism sizes for a length drive) before anything is solved."""
    from .spec import LIMITS
    span = abs(end - start)
    if mech.coordinate_kind(drive) == "angle":
        turns = span * mech.unit_scale(mech.index_of(drive)) / (2 * math.pi)
        if turns > LIMITS["turns"]:
            raise SpecError(f"--from {start:g} --to {end:g}: a span of {turns:.4g} turns of {drive!r} is "
                            f"beyond the limit of {LIMITS['turns']:g} turns of one sweep")
    else:
        size = float(getattr(mech, "size", 0.0) or 0.0) or 1.0
        if span > LIMITS["sizes"] * size:
            raise SpecError(f"--from {start:g} --to {end:g}: a span of {span:.4g} {mech.length_unit} of "
                            f"{drive!r} is beyond the limit of {LIMITS['sizes']:g} mechanism sizes "
                            f"({LIMITS['sizes'] * size:.4g} {mech.length_unit}) of one sweep")


def sweep_command(mech, args, emit=None):
    """``jointwise sweep``: returns the exit code.

    Streams: the rows are solved ``SWEEP_CHUNK`` at a time (each chunk continuing from the
    last state of the one before) and written as they come, so memory stays bounded
    whatever the number of steps.  ``--out`` and ``--plot`` are written under temporary
    names and moved into place only when both could be written; a sweep with unreachable
    rows is a complete answer: it is written, and the exit code is 3."""
    drive = args.drive
    mech.index_of(drive)
    held = {}
    for name, v in args.set:
        if name == drive:
            raise SpecError(f"--set {name}: {name!r} is the drive; give its range with --from/--to",
                            source=mech.source)
        mech.index_of(name)
        held[name] = v
    _check_span(mech, drive, args.start, args.end)
    if args.plot:
        if not args.plot.lower().endswith(".png"):
            raise SpecError(f"--plot {args.plot!r}: the plot is a PNG image; give a name ending in .png")
        if os.path.islink(args.plot) or (os.path.exists(args.plot) and not os.path.isfile(args.plot)
                                         and not os.path.isdir(args.plot)):
            raise SpecError(f"--plot {args.plot!r} is a link, a device or a pipe; give a file name")
        if not _plot_available():
            print(f"jointwise: {PLOT_INSTALL}", file=sys.stderr)
            return EXIT_USAGE
    mech.check_limits(mech._held_from(held))
    speed = getattr(args, "speed", None)
    accel = getattr(args, "acceleration", None)
    if accel is not None and speed is None:
        raise SpecError("--acceleration needs --speed (the drive's rate at the first value)")
    timing = None
    if speed is not None:
        from .rates import drive_timing
        timing = {"speed": parse_rate(speed, mech, drive, "--speed"),
                  "acceleration": parse_rate(accel, mech, drive, "--acceleration", True) if accel is not None else 0.0}
        try:  # before anything is solved
            drive_timing(np.array([args.start, args.end]), timing["speed"], timing["acceleration"])
        except JointwiseError as exc:
            raise SpecError(f"--speed: {exc}") from None
    rates_json = {key: {} for key in ("time",) + RATE_KEYS} if timing else None
    steps = args.steps
    with Outputs() as outs:
        out_tmp = outs.reserve(args.out, "--out") if args.out else None
        plot_tmp = outs.reserve(args.plot, "--plot") if args.plot else None
        fh = (open(out_tmp, "w", encoding="utf-8", newline="")
              if out_tmp else sys.stdout)
        plot = _PlotData(steps) if args.plot else None
        bad, first_bad = 0, None
        try:
            if args.format == "json":
                fh.write(json.dumps({"drive": drive, "poses": []})[:-2])
            else:
                fh.write(",".join(header(mech, drive, rates=bool(timing))) + "\n")
            for k0, sw in sweep_chunks(mech, drive, args.start, args.end, steps, held, timing=timing):
                if args.format == "json":
                    fh.write((", " if k0 else "") + _json_rows(sw))
                    if rates_json is not None:
                        _gather_rates(rates_json, sw)
                else:
                    fh.write(_csv_rows(mech, sw, k0))
                nb = np.flatnonzero(~sw.converged)
                if len(nb) and first_bad is None:
                    i = int(nb[0])
                    first_bad = (k0 + i, float(sw.values[i]), sw.reasons.get(i, "the loops do not close there"))
                bad += len(nb)
                if plot is not None:
                    plot.add(k0, sw)
                del sw
            if args.format == "json":
                fh.write("]" + ("" if rates_json is None else ", " + _rates_json(rates_json)[1:-1]) + "}\n")
            fh.flush()
        finally:
            if fh is not sys.stdout:
                fh.close()
        if plot is not None:
            plot_sweep(mech, plot.sweep(), drive, plot_tmp)
        outs.commit()
    if bad:
        i, v, why = first_bad
        print(f"jointwise: {bad} of {steps} steps did not converge (first: step {i}, "
              f"{drive} = {v:g}: {why}); those rows repeat the last good pose and are "
              f"flagged converged = 0", file=sys.stderr)
        return EXIT_ASSEMBLY
    return EXIT_OK


def range_text(mech, res):
    drive = res["drive"]
    unit = mech.unit_name(mech.index_of(drive))
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
        mech.index_of(name)
        held[name] = v
    res = reach(mech, args.drive, held)
    if args.format == "json":  # the documented keys (status and stops are the Python API's)
        emit(json.dumps({k: res[k] for k in ("drive", "intervals", "reasons")}) + "\n", None)
    else:
        emit(range_text(mech, res), None)
    return EXIT_OK


# ---------------------------------------------------------------------------------------
# jointwise cam
# ---------------------------------------------------------------------------------------
CAM_COLUMNS = ("leader", "lift", "pitch_x", "pitch_y", "profile_x", "profile_y", "pressure_angle",
               "curvature_radius")


def cam_command(mech, args, emit):
    """``jointwise cam``: one row per leader angle (see :mod:`jointwise.cam`); returns the
    exit code (3 when the coupling is not a motion law a plate cam makes)."""
    from .cam import CamError, cam_profile, cam_warnings
    try:
        res = cam_profile(mech, args.coupling, args.base_radius, args.roller, args.offset)
    except CamError as exc:
        print(f"jointwise: {os.path.basename(args.file)}: {exc}", file=sys.stderr)
        return EXIT_ASSEMBLY
    au = mech.angle_scale
    radius = res["profile_radius"]
    cols = [np.round(res["theta"] / au, 9), res["lift"], res["pitch"][:, 0], res["pitch"][:, 1],
            res["profile"][:, 0], res["profile"][:, 1], res["pressure_angle"] / au, radius]
    warnings = cam_warnings(res, au, mech.angle_unit)
    if args.format == "json":
        data = {"coupling": args.coupling, "base_radius": args.base_radius, "roller": args.roller,
                "offset": args.offset, "length_unit": mech.length_unit, "angle_unit": mech.angle_unit,
                "warnings": warnings}
        for name, col in zip(CAM_COLUMNS, cols):
            data[name] = [float(v) if math.isfinite(v) else None for v in col]
        text = json.dumps(data, indent=1) + "\n"
    else:
        out = io.StringIO()
        out.write(",".join(CAM_COLUMNS) + "\n")
        for i in range(len(cols[0])):
            out.write(",".join(_num(c[i]) if math.isfinite(c[i]) else "" for c in cols) + "\n")
        text = out.getvalue()
    emit(text, args.out)
    for w in warnings:
        print(f"jointwise: warning: {w}", file=sys.stderr)
    return EXIT_OK
