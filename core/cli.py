"""Command line: ``jointwise check | pose | sweep | range | tidy | cam``.

Exit codes: 0 success; 2 bad command line or bad file, or an input beyond a documented
limit (:data:`jointwise.spec.LIMITS`); 3 cannot assemble, a value outside its joint's
limits, or a numeric failure while solving.  Messages go to stderr, never a traceback:
every subcommand runs inside :func:`_guarded`, which turns any failure into a message
naming the file and one of those exit codes.
"""
from __future__ import annotations

import argparse
import json
import math
import os
import re
import sys

import numpy as np

from .units import __version__
from .errors import AssemblyError, JointwiseError, SpecError
from .spec import LIMITS

EXIT_OK, EXIT_USAGE, EXIT_ASSEMBLY = 0, 2, 3

DESCRIPTION = """\
Joint-aware posing of mechanical assemblies.

Reads a mechanism file (TOML or JSON: links, joints with their screw axes at home,
couplings, measures), closes its loops and reports poses, sweeps and reachable
ranges in the file's own units.  It checks kinematics only: no loads, strength,
stability or guarding.
"""

EPILOG = """\
exit codes: 0 success, 2 bad command line or bad file (or beyond an input limit),
  3 cannot assemble, value outside its limits or numeric failure
examples:
  jointwise check vise.toml
  jointwise pose vise.toml --set handle=1260 --format json
  jointwise sweep crank.toml --drive crank --from 0 --to 360 --steps 361 --out crank.csv
  jointwise range crank.toml --drive rocker --format json
  jointwise tidy crank.toml --out crank-tidy.toml --angle-tolerance 1
"""


class _Parser(argparse.ArgumentParser):
    def __init__(self, *args, **kwargs):
        super().__init__(*args, **kwargs)
        # "-1e3" is a value, not an option (argparse only knows -12 and -1.5 as numbers)
        self._negative_number_matcher = re.compile(r"^-(\d+\.?\d*|\.\d+)([eE][+-]?\d+)?$")

    def error(self, message):
        self.print_usage(sys.stderr)
        print(f"jointwise: error: {message}", file=sys.stderr)
        raise SystemExit(EXIT_USAGE)


def _number(text, what):
    """A finite number, or an argparse error.  (Values far out are the solver's to refuse:
    "too far", exit 3; a sweep's span has its own limit.)"""
    try:
        v = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{what} must be a number, got {text!r}") from None
    if not math.isfinite(v):
        raise argparse.ArgumentTypeError(f"{what} must be finite, got {text!r}")
    return v


def _setting(text):
    if "=" not in text:
        raise argparse.ArgumentTypeError(f"expected NAME=VALUE, got {text!r}")
    name, value = text.split("=", 1)
    return name.strip(), _number(value, f"value of {name!r}")


def _target(text):
    """NAME=X,Y,Z: a point measure's target position (file units)."""
    if "=" not in text:
        raise argparse.ArgumentTypeError(f"expected NAME=X,Y,Z, got {text!r}")
    name, value = text.split("=", 1)
    parts = value.split(",")
    if len(parts) != 3:
        raise argparse.ArgumentTypeError(f"target {name.strip()!r} needs three numbers X,Y,Z, got {value!r}")
    out = []
    for part in parts:
        try:
            v = float(part)
        except ValueError:
            raise argparse.ArgumentTypeError(f"target {name.strip()!r}: {part.strip()!r} is not a number") from None
        if not math.isfinite(v):
            raise argparse.ArgumentTypeError(f"target {name.strip()!r}: {part.strip()!r} is not finite")
        out.append(v)
    return name.strip(), out


def _finite(text):
    return _number(text, "value")


def _steps(text):
    try:
        v = int(text)
    except ValueError:
        try:
            f = float(text)
        except ValueError:
            f = math.nan
        if not (math.isfinite(f) and f.is_integer()):
            raise argparse.ArgumentTypeError(f"expected a whole number, got {text!r}") from None
        v = int(f)
    if v < 2:
        raise argparse.ArgumentTypeError(f"need at least 2 steps (both ends), got {v}")
    if v > LIMITS["steps"]:
        raise argparse.ArgumentTypeError(f"{text} steps is beyond the limit of {LIMITS['steps']} steps "
                                         f"of one sweep")
    return v


def build_parser():
    p = _Parser(prog="jointwise", description=DESCRIPTION, epilog=EPILOG,
                formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("--version", action="version", version=f"jointwise {__version__}")
    sub = p.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    sub.required = True

    c = sub.add_parser("check", help="validate a mechanism file and report its structure and mobility",
                       description="Validate FILE and report links, joints, coordinates, loops, drives, "
                                   "mobility (Kutzbach count and numeric) and the closure error at home.")
    c.add_argument("file", metavar="FILE")
    c.add_argument("--format", choices=("text", "json"), default="text")

    s = sub.add_parser("pose", help="pose the mechanism with given coordinate values",
                       description="Hold the given coordinates (file units), close every loop from home on "
                                   "the home branch, and print joint values and link displacements "
                                   "(4x4, row-major, from home, world coordinates).")
    s.add_argument("file", metavar="FILE")
    s.add_argument("--set", action="append", default=[], type=_setting, metavar="NAME=VALUE",
                   help="hold coordinate NAME at VALUE (file units); repeatable")
    s.add_argument("--target", action="append", default=[], type=_target, metavar="NAME=X,Y,Z",
                   help="bring point measure NAME as close to X,Y,Z (file units, world) as the loops "
                        "allow; every coordinate not given with --set may move; repeatable")
    s.add_argument("--format", choices=("text", "json"), default="text")

    w = sub.add_parser("sweep", help="drive one coordinate through a range and tabulate the motion",
                       description="Drive NAME from A to B in N samples (both ends included), staying on "
                                   "the home branch; tabulate every coordinate and measure.")
    w.add_argument("file", metavar="FILE")
    w.add_argument("--drive", required=True, metavar="NAME", help="the input coordinate")
    w.add_argument("--from", dest="start", required=True, type=_finite, metavar="A")
    w.add_argument("--to", dest="end", required=True, type=_finite, metavar="B")
    w.add_argument("--steps", required=True, type=_steps, metavar="N", help="samples, both ends included")
    w.add_argument("--set", action="append", default=[], type=_setting, metavar="NAME=VALUE")
    w.add_argument("--format", choices=("csv", "json"), default="csv")
    w.add_argument("--out", metavar="PATH", help="write the table here instead of stdout")
    w.add_argument("--plot", metavar="PNG", help="draw coordinates and measures against the drive (needs the 'plot' extra)")
    w.add_argument("--speed", metavar="S", help="the drive's rate at the first value, with a unit: rpm, deg/s, "
                   "rad/s, mm/s, cm/s, m/s, in/s (none: file units per second); adds time, velocities and "
                   "accelerations")
    w.add_argument("--acceleration", metavar="A", help="the drive's constant rate of change (e.g. deg/s2, rpm/s, "
                   "mm/s2; none: file units per second squared)")

    r = sub.add_parser("range", help="find the reachable range of a drive from home",
                       description="Find the interval(s) over which NAME can move from home before the "
                                   "mechanism locks (dead point) or a joint limit is hit.")
    r.add_argument("file", metavar="FILE")
    r.add_argument("--drive", required=True, metavar="NAME")
    r.add_argument("--set", action="append", default=[], type=_setting, metavar="NAME=VALUE")
    r.add_argument("--format", choices=("text", "json"), default="text")

    t = sub.add_parser("tidy", help="make nearly parallel loop axes exactly parallel and write a new file",
                       description="Find loop joints whose axes are nearly but not exactly parallel (or "
                                   "slides nearly perpendicular to them), which lock the loop; make them "
                                   "exact within the angle tolerance and write the file to PATH, the rest "
                                   "kept as written.  Exit 3 and nothing written when a tilt exceeds "
                                   "the tolerance.")
    t.add_argument("file", metavar="FILE")
    t.add_argument("--out", required=True, metavar="PATH", help="where to write the tidied file")
    t.add_argument("--angle-tolerance", dest="angle_tolerance", type=_finite, metavar="DEG",
                   default=2.0, help="largest tilt to correct, degrees (default 2)")

    k = sub.add_parser("cam", help="plate cam profile for a translating roller follower from a motion law",
                       description="Lay out the plate cam that gives coupling NAME's motion law (program or "
                                   "table, turning leader, sliding follower) to a translating roller "
                                   "follower: one row per leader degree with the lift, pitch curve, cam "
                                   "profile (cam-fixed x, y), pressure angle and the profile's radius of "
                                   "curvature (positive convex; empty where straight). Warns of pressure "
                                   "angles above 30 deg and of undercutting. Exit 3: not a cam motion law.")
    k.add_argument("file", metavar="FILE")
    k.add_argument("--coupling", required=True, metavar="NAME")
    k.add_argument("--base-radius", dest="base_radius", required=True, type=_finite, metavar="RB",
                   help="base-circle radius of the cam (length unit)")
    k.add_argument("--roller", required=True, type=_finite, metavar="RR", help="roller radius; 0 for a knife edge")
    k.add_argument("--offset", type=_finite, default=0.0, metavar="E",
                   help="follower line's offset from the cam centre (default 0)")
    k.add_argument("--format", choices=("csv", "json"), default="csv")
    k.add_argument("--out", metavar="PATH", help="write the table here instead of stdout")
    return p


def main(argv=None):
    parser = build_parser()
    args = parser.parse_args(argv)
    names = [n for n, _ in getattr(args, "set", [])]
    twice = sorted({n for n in names if names.count(n) > 1})
    if twice:
        parser.error(f"--set {twice[0]} given more than once")
    tnames = [n for n, _ in getattr(args, "target", [])]
    ttwice = sorted({n for n in tnames if tnames.count(n) > 1})
    if ttwice:
        parser.error(f"--target {ttwice[0]} given more than once")
    return _guarded(_run, args)


def _run(args):
    from .mechanism import load
    mech = load(args.file)
    return COMMANDS[args.command](mech, args)


def _guarded(fn, args):
    """Run ``fn(args)`` (a subcommand) and turn every failure into a message and an exit
    code: 2 for input (file, arguments, limits, memory), 3 for assembly and numeric
    failures.  New subcommands get the same handling by going through here."""
    where = os.path.basename(str(getattr(args, "file", "") or "")) or "jointwise"

    def say(message):
        print(f"jointwise: {message}", file=sys.stderr)

    try:
        return fn(args)
    except SpecError as exc:
        say(exc)
        return EXIT_USAGE
    except AssemblyError as exc:
        say(f"{where}: {exc}")
        return EXIT_ASSEMBLY
    except JointwiseError as exc:
        say(f"{where}: {exc}")
        return EXIT_USAGE
    except BrokenPipeError:  # the reader went away (e.g. piped into head): not an error of ours
        try:
            sys.stdout = open(os.devnull, "w")
        except OSError:
            pass
        return EXIT_OK
    except OSError as exc:
        name = f" {exc.filename!r}" if getattr(exc, "filename", None) else ""
        say(f"{where}: cannot read or write{name}: {exc.strerror or exc}")
        return EXIT_USAGE
    except MemoryError:
        say(f"{where}: ran out of memory; the input is too large for this machine (see the input "
            f"limits in the README)")
        return EXIT_USAGE
    except RecursionError:
        say(f"{where}: the input is nested too deeply (limit {LIMITS['nesting']} levels)")
        return EXIT_USAGE
    except KeyboardInterrupt:
        say("interrupted; nothing was written")
        return EXIT_USAGE
    except (ArithmeticError, ValueError, np.linalg.LinAlgError) as exc:
        say(f"{where}: numeric failure while solving ({type(exc).__name__}: {exc}); the mechanism's "
            f"numbers may be too large, too small or degenerate")
        return EXIT_ASSEMBLY
    except Exception as exc:  # noqa: BLE001 - the last guard: a message, never a traceback
        say(f"{where}: internal error ({type(exc).__name__}: {exc}); please report it with the file "
            f"and the command")
        return EXIT_ASSEMBLY


def _emit(text, path=None):
    """Write ``text`` to stdout, or to ``path`` whole or not at all (:class:`report.Outputs`)."""
    if path is None:
        sys.stdout.write(text)
        return
    from .report import Outputs
    with Outputs() as outs:
        tmp = outs.reserve(path, "--out")
        with open(tmp, "w", encoding="utf-8", newline="") as fh:
            fh.write(text)
        outs.commit()


def cmd_check(mech, args):
    info = check_report(mech)
    if args.format == "json":
        _emit(json.dumps(info, indent=2) + "\n")
    else:
        mob = info["mobility"]
        lines = [f"{os.path.basename(args.file)}: {mech.name or 'mechanism'}",
                 f"  links {info['links']}, joints {info['joints']}, coordinates {info['coordinates']}, "
                 f"loops {info['loops']}",
                 f"  driven: {', '.join(info['driven']) or 'none'}",
                 f"  mobility: Kutzbach {mob['kutzbach']} ({mob['form']}), numeric {mob['numeric']}, "
                 f"redundant constraints {mob['redundant']}",
                 f"  closure error at home: {info['home_closure']:.3g} ({mech.length_unit} / rad)"]
        lines += [f"  problem: {p}" for p in info["problems"]] or ["  no problems found"]
        lines += [f"  note: {n}" for n in info["notes"]]
        _emit("\n".join(lines) + "\n")
    return EXIT_OK


def check_report(mech):
    """The ``check`` report as a dict (the JSON keys of ``jointwise check``).

    ``problems`` holds only what stops the mechanism or misleads (home out of reach, a
    structure that cannot move, drives that do not match the freedoms); ``notes`` holds
    information: a settled home, an overconstraint explained by special geometry."""
    from .units import TOLERANCE
    problems, notes = [], [f"settled: {n}" for n in mech.settle_notes]
    closure = float(mech.home_closure())
    q = mech.home
    if closure > TOLERANCE:
        try:
            q = mech.solver.home_state()
            notes.append(f"home placement is off closure by {closure:.3g}; within the assembly tolerance, "
                         f"pose settles it onto the nearest closed placement")
        except AssemblyError as exc:
            problems.append(str(exc))
    mob = mech.mobility(q)
    if mob["redundant"] > 0:
        notes.append(f"overconstrained as counted: Kutzbach {mob['kutzbach']} ({mob['form']}), actual "
                     f"{mob['numeric']}; {mob['redundant']} constraint(s) are redundant because of "
                     f"special geometry (parallel, coaxial or meeting axes)")
    if mob["numeric"] <= 0 and mech.loops:
        problems.append(f"the mechanism cannot move (numeric mobility {mob['numeric']}): it is a structure")
    problems.extend(_tilt_causes(mech))
    loop_coords = {c for lp in mech.loops for jn, _ in lp.steps for c in mech.joints[jn].coordinates}
    held = [c for c in mech.driven if c in loop_coords]
    if mech.loops and 0 < mob["numeric"] != len(held) and held:
        problems.append(f"{len(held)} driven coordinate(s) in loops for {mob['numeric']} freedom(s)")
    return {
        "links": len(mech.links),
        "joints": len(mech.joints),
        "coordinates": len(mech.coordinates),
        "loops": len(mech.loops),
        "driven": mech.driven,
        "problems": problems,
        "notes": notes,
        "mobility": {k: mob[k] for k in ("kutzbach", "form", "numeric", "redundant")},
        "home_closure": closure,
    }


def _tilt_causes(mech):
    """Loop axes nearly but not exactly parallel (as settled on reading): each a cause of
    a locked loop, named with its tilt (``jointwise.tidy``)."""
    from .tidy import find_tilts
    return [f"{t.describe()}: a loop whose axes are not exactly parallel is rigid, so it locks; "
            f"`jointwise tidy FILE --out FIXED.toml` makes them exact"
            for t in find_tilts(mech, {n: j.axis for n, j in mech.joints.items()})]


def cmd_tidy(mech, args):
    from .tidy import tidy_file
    if args.angle_tolerance < 0:
        print("jointwise: --angle-tolerance: expected degrees >= 0, got "
              f"{args.angle_tolerance:g}", file=sys.stderr)
        return EXIT_USAGE
    tilts, _ = tidy_file(args.file, args.out, args.angle_tolerance, mech=mech)
    name = os.path.basename(args.file)
    if not tilts:
        print(f"{name}: every loop axis is already exact; wrote an unchanged copy to {args.out}")
        return EXIT_OK
    from .tidy import new_axis
    for t in tilts:
        what = "parallel to" if t.relation == "parallel" else "perpendicular to"
        print(f"{name}: joints.{t.joint}.axis turned {t.degrees:.3g} deg to lie {what} the axis of "
              f"{t.reference}: {[float(x) for x in t.axis]} -> {new_axis(mech, t)}")
    print(f"wrote {args.out}")
    return EXIT_OK


def cmd_pose(mech, args):
    values = dict(args.set)
    targets = dict(args.target)
    for name in targets:  # a point measure only (links take a 4x4 displacement)
        meas = mech.measures.get(name)
        if meas is None or meas.type != "point":
            import difflib
            points = [n for n, m in mech.measures.items() if m.type == "point"]
            what = (f"is a {meas.type} measure" if meas is not None else
                    "is a link; give a point measure of it" if name in mech.links else "names no measure")
            close = difflib.get_close_matches(name, points, n=1)
            hint = (f"; did you mean {close[0]!r}?" if close else
                    f"; point measures: {', '.join(points) or 'none in this file'}")
            raise SpecError(f"--target {name!r} {what}: --target takes a point measure{hint}", source=mech.source)
    pose = mech.pose(values, targets=targets) if targets else mech.pose(values)
    for note in pose.notes:
        print(f"jointwise: note: {note}", file=sys.stderr)
    if args.format == "json":
        _emit(json.dumps(pose.to_json(), indent=2) + "\n")
    else:
        lines = [f"converged: {'yes' if pose.converged else 'no'}   residual: {pose.residual:.3g}   "
                 f"singular: {'yes' if pose.singular else 'no'}", "joints:"]
        for c, v in pose.joints.items():
            unit = mech.unit_name(mech.index_of(c))
            lines.append(f"  {c:<16} {v:+15.6f} {unit}")
        lines.append("links (displacement from home, world axes):")
        for name, mat in pose.links.items():
            lines.append(f"  {name:<16} {_motion_text(mat, mech)}")
        if pose.target_error:
            lines.append(f"targets: {'all reached' if pose.reached else 'not all reached'}")
            for name, d in pose.target_error.items():
                lines.append(f"  {name:<16} {d:.6g} {mech.length_unit} from its target")
        _emit("\n".join(lines) + "\n")
    if not pose.converged:
        return EXIT_ASSEMBLY
    return EXIT_OK


def _motion_text(mat, mech):
    """A link's displacement as signed text: moved [x, y, z] <length unit>, turned +a <angle
    unit> about [u, v, w] (the axis pointed so that its largest component is positive, the
    sign of the turn by the right-hand rule about it)."""
    from .spatial import log3
    t = mat[:3, 3]
    w = np.asarray(log3(mat[:3, :3]), float)
    ang = float(np.linalg.norm(w))
    text = f"moved [{t[0]:+.6g}, {t[1]:+.6g}, {t[2]:+.6g}] {mech.length_unit}"
    if ang < 1e-12:
        return text + f", turned +0 {mech.angle_unit}"
    axis = w / ang
    if axis[int(np.argmax(np.abs(axis)))] < 0:
        axis, ang = -axis, -ang
    turn = math.degrees(ang) if mech.angle_unit == "deg" else ang
    axis = [0.0 if abs(a) < 1e-12 else float(a) for a in axis]
    return text + (f", turned {turn:+.6g} {mech.angle_unit} about "
                   f"[{axis[0]:.6g}, {axis[1]:.6g}, {axis[2]:.6g}]")


def cmd_sweep(mech, args):
    from .report import sweep_command
    return sweep_command(mech, args, _emit)


def cmd_range(mech, args):
    from .report import range_command
    return range_command(mech, args, _emit)


COMMANDS = {"check": cmd_check, "pose": cmd_pose, "sweep": cmd_sweep, "range": cmd_range,
            "tidy": cmd_tidy}


def cmd_cam(mech, args):
    from .report import cam_command
    return cam_command(mech, args, _emit)


COMMANDS["cam"] = cmd_cam

if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
