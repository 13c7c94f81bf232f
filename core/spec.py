"""Reading and validating mechanism files (TOML, or the same structure as JSON).

Every problem raises :class:`SpecError` whose message names the file, the key path
and what is wrong, e.g. ``vise.toml: joints.screw.axis: axis has zero length``.
Loaders only parse data (``tomllib``, ``json``); nothing in a file is executed.

Inputs are bounded (:data:`LIMITS`, listed in the README): a file is read with a cap, so
a device file or a pipe cannot exhaust memory; nesting, list lengths and the magnitude of
numbers are checked before anything is built from them.  Beyond a limit the loader raises
:class:`SpecError` naming the limit.
"""
from __future__ import annotations

import difflib
import json
import math
import os
import re
import tomllib

import numpy as np

from .errors import JointwiseError, SpecError
from . import couplings as laws
from .joints import JOINT_TYPES, Joint, lead_from_angle, thread_lead
from .model import Coupling, Link, Measure
from .units import ANGLE_UNITS, FORMAT, LENGTH_UNITS, LIMITS

__all__ = ["read_file", "read_text", "read_dict", "LENGTH_UNITS", "ANGLE_UNITS", "FORMAT", "LIMITS"]

TOP_KEYS = ("format", "mechanism", "links", "joints", "couplings", "measures")
MECHANISM_KEYS = ("name", "length_unit", "angle_unit", "ground")
LINK_KEYS = ("object",)
JOINT_KEYS = ("type", "parent", "child", "point", "axis", "axis2", "home", "limits", "drive",
              "lead", "pitch", "starts", "lead_angle", "diameter", "thread", "hand")
COUPLING_KEYS = ("leader", "follower", "law", "ratio", "offset", "segments", "period", "slots", "points")
#: Keys each coupling law takes besides leader, follower and law.
LAW_KEYS = {
    "linear": ("ratio", "offset"),
    "program": ("segments", "period"),
    "geneva": ("slots", "offset"),
    "table": ("points", "period"),
}
MEASURE_TYPES = {
    "point": ("type", "link", "at"),
    "distance": ("type", "a", "b"),
    "angle": ("type", "a", "b"),
    "rate": ("type", "of", "per"),
}


class _Reader:
    """Typed access to a nested dict, naming the key path in every error."""

    def __init__(self, source):
        self.source = source

    def fail(self, key, message):
        raise SpecError(message, source=self.source, key=key)

    def table(self, data, key):
        if not isinstance(data, dict):
            self.fail(key, f"expected a table, got {type(data).__name__}")
        return data

    def keys(self, data, key, allowed):
        for k in data:
            if k not in allowed:
                close = difflib.get_close_matches(str(k), allowed, n=1)
                hint = f"; did you mean {close[0]!r}?" if close else f"; known keys: {', '.join(allowed)}"
                self.fail(f"{key}.{k}" if key else str(k), f"unknown key{hint}")

    def number(self, value, key):
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            self.fail(key, f"expected a number, got {value!r}")
        if isinstance(value, float) and not math.isfinite(value):
            self.fail(key, f"number must be finite, got {value!r}")
        if abs(value) > LIMITS["magnitude"]:
            self.fail(key, f"{_short(value)} is beyond the limit of {LIMITS['magnitude']:g} in magnitude")
        return float(value)

    def vector(self, value, key):
        if not isinstance(value, (list, tuple)) or len(value) != 3:
            self.fail(key, f"expected [x, y, z], got {value!r}")
        return [self.number(v, f"{key}[{i}]") for i, v in enumerate(value)]

    def direction(self, value, key, what="axis"):
        v = self.vector(value, key)
        if math.sqrt(sum(c * c for c in v)) < 1e-12:
            self.fail(key, f"{what} has zero length")
        return v

    def text(self, value, key):
        if not isinstance(value, str) or not value:
            self.fail(key, f"expected a non-empty string, got {value!r}")
        return value

    def choice(self, value, key, options):
        if value not in options:
            close = difflib.get_close_matches(str(value), list(options), n=1)
            hint = f"; did you mean {close[0]!r}?" if close else ""
            self.fail(key, f"{value!r} is not one of {', '.join(options)}{hint}")
        return value


def _short(value):
    text = repr(value)
    return text if len(text) <= 24 else f"{text[:10]}...({len(text)} digits)"


class _Object(dict):
    """A JSON object that remembers keys given more than once."""
    duplicates = ()


def _no_duplicates(pairs):
    out = _Object()
    dups = []
    for k, v in pairs:
        if k in out:
            dups.append(k)
        out[k] = v
    out.duplicates = dups
    return out


def _find_duplicate(data, path=""):
    if isinstance(data, dict):
        for k in getattr(data, "duplicates", ()):
            return f"{path}.{k}" if path else str(k)
        for k, v in data.items():
            hit = _find_duplicate(v, f"{path}.{k}" if path else str(k))
            if hit:
                return hit
    elif isinstance(data, list):
        for i, v in enumerate(data):
            hit = _find_duplicate(v, f"{path}[{i}]")
            if hit:
                return hit
    return None


def read_file(path):
    """Read a mechanism file (``.toml`` or ``.json``): the checked parts of a model
    (keyword arguments of :class:`jointwise.model.Model`)."""
    name = os.path.basename(str(path))
    cap = LIMITS["file_bytes"]
    try:
        with open(path, "rb") as fh:
            raw = fh.read(cap + 1)
    except OSError as exc:
        raise SpecError(f"cannot read file: {exc.strerror or exc}", source=name) from None
    if len(raw) > cap:
        raise SpecError(f"larger than the limit of {cap // (1024 * 1024)} MB for a mechanism file",
                        source=name)
    return read_text(raw, source=name, fmt="json" if name.lower().endswith(".json") else "toml")


def read_text(text, *, source="<text>", fmt="toml"):
    """Parse mechanism text (TOML or JSON): the checked parts of a model (see :func:`read_dict`)."""
    cap = LIMITS["file_bytes"]
    if len(text) > cap:  # characters or bytes: either way beyond the cap of a file
        raise SpecError(f"larger than the limit of {cap // (1024 * 1024)} MB for a mechanism file",
                        source=source)
    if isinstance(text, bytes):
        try:
            text = text.decode("utf-8")
        except UnicodeDecodeError as exc:
            raise SpecError(f"not UTF-8 text ({exc.reason} at byte {exc.start})", source=source) from None
    depth = _nesting(text, fmt)
    if depth > LIMITS["nesting"]:
        raise SpecError(f"nested {depth} levels deep, beyond the limit of {LIMITS['nesting']}", source=source)
    try:
        if fmt == "json":
            data = json.loads(text, parse_constant=lambda c: float(c), object_pairs_hook=_no_duplicates)
        else:
            data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise SpecError(f"not valid TOML: {exc}", source=source) from None
    except json.JSONDecodeError as exc:
        raise SpecError(f"not valid JSON: {exc.msg} (line {exc.lineno}, column {exc.colno})", source=source) from None
    except RecursionError:  # cannot happen below the nesting limit; kept as a last guard
        raise SpecError(f"nested beyond the limit of {LIMITS['nesting']} levels", source=source) from None
    except (ValueError, OverflowError) as exc:  # e.g. an integer with thousands of digits
        raise SpecError(f"not a valid {fmt.upper()} file: {exc}", source=source) from None
    _check_sizes(data, source)
    if fmt == "json":
        dup = _find_duplicate(data)
        if dup:
            raise SpecError("duplicate key: given more than once (each link, joint and key may appear once)",
                            source=source, key=dup)
    return read_dict(data, source=source)


# strings and comments, skipped when brackets are counted
_SKIP = {
    "toml": re.compile(r'"""(?:[^"\\]|\\.|"(?!""))*"""|\'\'\'[\s\S]*?\'\'\'|"(?:[^"\\\n]|\\.)*"|\'[^\'\n]*\'|#[^\n]*'),
    "json": re.compile(r'"(?:[^"\\]|\\.)*"'),
}


def _nesting(text, fmt):
    """Deepest nesting of brackets in ``text`` (strings and comments skipped).  The parsers
    recurse once per level, so the depth is measured before parsing (vectorised: a 16 MB
    file takes a fraction of a second)."""
    if isinstance(text, bytes):
        text = text.decode("utf-8", errors="replace")
    if text.count("[") + text.count("{") <= LIMITS["nesting"]:
        return 0
    if any(c in text for c in "\"'#"):
        text = _SKIP.get(fmt, _SKIP["toml"]).sub(" ", text)
    code = np.frombuffer(text.encode("utf-8", "replace"), np.uint8)
    step = (code == ord("[")).astype(np.int8)
    step += code == ord("{")
    step -= code == ord("]")
    step -= code == ord("}")
    return int(np.cumsum(step, dtype=np.int32).max(initial=0))


def _check_sizes(data, source):
    """Refuse nesting beyond ``LIMITS['nesting']`` (dotted TOML keys nest too) and lists or
    tables beyond ``LIMITS['items']``, naming the key path; iterative, never recursive."""
    stack = [(data, "", 0)]
    while stack:
        node, path, depth = stack.pop()
        if len(node) > LIMITS["items"]:
            raise SpecError(f"{len(node)} entries, beyond the limit of {LIMITS['items']}",
                            source=source, key=path or None)
        pairs = node.items() if isinstance(node, dict) else enumerate(node)
        for k, v in pairs:
            if isinstance(v, (dict, list)):
                key = (f"{path}.{k}" if path else str(k)) if isinstance(node, dict) else f"{path}[{k}]"
                if depth + 1 > LIMITS["nesting"]:
                    raise SpecError(f"nested deeper than the limit of {LIMITS['nesting']} levels",
                                    source=source, key=key)
                stack.append((v, key, depth + 1))


def read_dict(data, source="<data>"):
    """The checked parts of a model from the mechanism-file structure held in a dict:
    keyword arguments of :class:`jointwise.model.Model` (links, joints, couplings and
    measures built; the front :func:`jointwise.load` makes a Mechanism of them)."""

    r = _Reader(source)
    r.table(data, "")
    r.keys(data, "", TOP_KEYS)
    fmt = data.get("format", FORMAT)
    if fmt != FORMAT:
        r.fail("format", f"this jointwise reads format {FORMAT}, got {fmt!r}")
    mech = r.table(data.get("mechanism", {}), "mechanism")
    r.keys(mech, "mechanism", MECHANISM_KEYS)
    lu = r.choice(mech.get("length_unit", "mm"), "mechanism.length_unit", list(LENGTH_UNITS))
    au = r.choice(mech.get("angle_unit", "deg"), "mechanism.angle_unit", list(ANGLE_UNITS))
    if "ground" not in mech:
        r.fail("mechanism.ground", "required key missing (the name of the fixed link)")
    ground = r.text(mech["ground"], "mechanism.ground")
    name = mech.get("name", "")
    if not isinstance(name, str):
        r.fail("mechanism.name", f"expected text, got {name!r}")
    deg = ANGLE_UNITS[au]
    mm = LENGTH_UNITS[lu]

    links = {}
    for lname, ld in r.table(data.get("links", {}), "links").items():
        key = f"links.{lname}"
        ld = r.table(ld, key)
        r.keys(ld, key, LINK_KEYS)
        obj = r.text(ld["object"], f"{key}.object") if "object" in ld else lname
        other = next((l.name for l in links.values() if l.object == obj), None)
        if other is not None:
            r.fail(f"{key}.object", f"object {obj!r} is already the object of link {other!r}; "
                                    "each link needs its own object")
        links[lname] = Link(lname, obj)
    if not links:
        r.fail("links", "no links defined")
    if ground not in links:
        r.fail("mechanism.ground", f"ground {ground!r} is not a link; links are: {', '.join(links)}")

    joints = {}
    for jname, jd in r.table(data.get("joints", {}), "joints").items():
        key = f"joints.{jname}"
        jd = r.table(jd, key)
        joints[jname] = _joint(r, key, jname, jd, links, deg, mm)

    coords = {}
    for j in joints.values():
        for c, kind in zip(j.coordinates, j.kinds):
            if c in coords:
                r.fail(f"joints.{j.name}", f"coordinate name {c!r} clashes with another joint's")
            coords[c] = kind

    couplings = {}
    for cname, cd in r.table(data.get("couplings", {}), "couplings").items():
        key = f"couplings.{cname}"
        cd = r.table(cd, key)
        r.keys(cd, key, COUPLING_KEYS)
        couplings[cname] = _coupling(r, key, cname, cd, coords, Coupling, deg)
        c = couplings[cname]
        owner = next(j for j in joints.values() if c.follower in j.coordinates)
        if c.law is not None and owner.drive:
            r.fail(f"{key}.follower", f"{c.follower!r} follows a motion law, so its joint cannot have "
                                      f"drive = true (drive the leader {c.leader!r})")

    measures = {}
    for mname, md in r.table(data.get("measures", {}), "measures").items():
        key = f"measures.{mname}"
        md = r.table(md, key)
        if "type" not in md:
            r.fail(f"{key}.type", f"required key missing; one of {', '.join(MEASURE_TYPES)}")
        mtype = r.choice(md["type"], f"{key}.type", list(MEASURE_TYPES))
        r.keys(md, key, MEASURE_TYPES[mtype])
        measures[mname] = _measure(r, key, mname, mtype, md, links, coords, Measure)

    return dict(name=name, length_unit=lu, angle_unit=au, ground=ground, links=links,
                joints=joints, couplings=couplings, measures=measures, source=source)


def _coupling(r, key, name, cd, coords, Coupling, deg):
    """One ``[couplings.NAME]`` table: a linear coupling or a motion law (jointwise.couplings)."""

    law = r.choice(cd.get("law", "linear"), f"{key}.law", list(LAW_KEYS))
    for k in cd:
        if k not in ("leader", "follower", "law") + LAW_KEYS[law]:
            r.fail(f"{key}.{k}", f"law {law!r} does not take {k}; it takes {', '.join(LAW_KEYS[law])}")
    for k in ("leader", "follower") + {"linear": ("ratio",), "program": ("segments",),
                                       "geneva": ("slots",), "table": ("points",)}[law]:
        if k not in cd:
            r.fail(f"{key}.{k}", "required key missing")
    leader = _coord_ref(r, cd["leader"], f"{key}.leader", coords)
    follower = _coord_ref(r, cd["follower"], f"{key}.follower", coords)
    if leader == follower:
        r.fail(f"{key}.follower", "follower must differ from leader")
    ul = deg if coords[leader] == "angle" else 1.0
    uf = deg if coords[follower] == "angle" else 1.0
    if law == "linear":
        ratio = r.number(cd["ratio"], f"{key}.ratio")
        if ratio == 0:
            r.fail(f"{key}.ratio", "ratio must not be 0 (that would hold the follower, use drive)")
        offset = r.number(cd.get("offset", 0.0), f"{key}.offset")
        return Coupling(name, leader, follower, ratio, offset)
    period = None
    if "period" in cd:
        period = r.number(cd["period"], f"{key}.period")
        if period <= 0:
            r.fail(f"{key}.period", f"period must be positive, got {period:g}")
    elif coords[leader] == "angle":
        period = 2 * math.pi / ul  # one turn, in the file's angle unit
    spec = {k: cd[k] for k in cd if k not in ("leader", "follower")}
    if law == "geneva":
        slots = cd["slots"]
        if isinstance(slots, bool) or not isinstance(slots, int) or slots < 3:
            r.fail(f"{key}.slots", f"expected a whole number of slots >= 3, got {slots!r}")
        for k, c in (("leader", leader), ("follower", follower)):
            if coords[c] != "angle":
                r.fail(f"{key}.{k}", f"a Geneva wheel and its crank turn: {c!r} must be an angle")
        offset = r.number(cd.get("offset", 0.0), f"{key}.offset")
        return Coupling(name, leader, follower, None, None, law=laws.Geneva(slots, offset * uf), spec=spec)
    if law == "table":
        pts = cd["points"]
        if not isinstance(pts, list) or len(pts) < 3:
            r.fail(f"{key}.points", "expected a list of at least three [leader, follower] pairs")
        xy = []
        for i, p in enumerate(pts):
            if not isinstance(p, list) or len(p) != 2:
                r.fail(f"{key}.points[{i}]", f"expected [leader, follower], got {p!r}")
            xy.append([r.number(v, f"{key}.points[{i}]") for v in p])
            if i and not xy[i][0] > xy[i - 1][0]:
                r.fail(f"{key}.points[{i}]", f"table leaders must increase: {xy[i][0]:g} follows {xy[i - 1][0]:g}")
        span = xy[-1][0] - xy[0][0]
        if "period" in cd and abs(span - period) > 1e-9 * max(1.0, period):
            r.fail(f"{key}.period", f"the points span {span:g}, not one period {period:g} "
                                    "(a periodic table's last point repeats the first one period on)")
        internal = [[x * ul, y * uf] for x, y in xy]
        return Coupling(name, leader, follower, None, None,
                        law=laws.Table(internal, None if period is None else period * ul), spec=spec)
    segs = cd["segments"]
    if not isinstance(segs, list) or not segs:
        r.fail(f"{key}.segments", "expected a list of [leader_from, leader_to, follower_from, follower_to, KIND]")
    rows = []
    for i, sg in enumerate(segs):
        k = f"{key}.segments[{i}]"
        if not isinstance(sg, list) or len(sg) != 5:
            r.fail(k, f"expected [leader_from, leader_to, follower_from, follower_to, KIND], got {sg!r}")
        x0, x1, y0, y1 = (r.number(v, k) for v in sg[:4])
        kind = r.choice(sg[4], k, list(laws.KINDS))
        if not x1 > x0:
            r.fail(k, f"leader_to {x1:g} must be above leader_from {x0:g}")
        if kind == "dwell" and y0 != y1:
            r.fail(k, f"a dwell keeps the follower still, but it goes from {y0:g} to {y1:g}")
        if rows:
            px1, py1 = rows[-1][1], rows[-1][3]
            tol = 1e-9 * max(1.0, abs(px1), abs(x0))
            if abs(x0 - px1) > tol:
                r.fail(k, f"segments do not tile the period: segment {i - 1} ends at leader {px1:g}, "
                          f"segment {i} starts at {x0:g}")
            if abs(y0 - py1) > 1e-9 * max(1.0, abs(py1), abs(y0)):
                r.fail(k, f"the follower jumps between segments {i - 1} and {i}: from {py1:g} to {y0:g}")
        rows.append((x0, x1, y0, y1, kind))
    span = rows[-1][1] - rows[0][0]
    if period is None:
        period = span
    elif abs(span - period) > 1e-9 * max(1.0, period):
        r.fail(f"{key}.segments", f"segments do not tile the period: they span {span:g}, the period is {period:g}")
    internal = [(x0 * ul, x1 * ul, y0 * uf, y1 * uf, kind) for x0, x1, y0, y1, kind in rows]
    return Coupling(name, leader, follower, None, None, law=laws.Program(internal, period * ul), spec=spec)


def _coord_ref(r, value, key, coords):
    value = r.text(value, key)
    if value not in coords:
        close = difflib.get_close_matches(value, list(coords), n=1)
        hint = f"; did you mean {close[0]!r}?" if close else ""
        r.fail(key, f"no coordinate named {value!r}{hint}")
    return value


def _link_ref(r, value, key, links):
    value = r.text(value, key)
    if value not in links:
        close = difflib.get_close_matches(value, list(links), n=1)
        hint = f"; did you mean {close[0]!r}?" if close else f"; links are: {', '.join(links)}"
        r.fail(key, f"no link named {value!r}{hint}")
    return value


def _measure(r, key, name, mtype, md, links, coords, Measure):
    def end(sub, want):
        k = f"{key}.{sub}"
        d = r.table(md.get(sub), k) if sub in md else r.fail(k, "required key missing")
        r.keys(d, k, ("link", want))
        if "link" not in d or want not in d:
            r.fail(k, f"expected {{link = ..., {want} = [x, y, z]}}")
        link = _link_ref(r, d["link"], f"{k}.link", links)
        vec = r.direction(d[want], f"{k}.{want}") if want == "axis" else r.vector(d[want], f"{k}.{want}")
        return link, vec

    for k in MEASURE_TYPES[mtype]:
        if k not in md:
            r.fail(f"{key}.{k}", "required key missing")
    if mtype == "point":
        link = _link_ref(r, md["link"], f"{key}.link", links)
        return Measure(name, mtype, a=(link, r.vector(md["at"], f"{key}.at")))
    if mtype == "distance":
        return Measure(name, mtype, a=end("a", "at"), b=end("b", "at"))
    if mtype == "angle":
        return Measure(name, mtype, a=end("a", "axis"), b=end("b", "axis"))
    return Measure(name, mtype, of=_coord_ref(r, md["of"], f"{key}.of", coords),
                   per=_coord_ref(r, md["per"], f"{key}.per", coords))


def _joint(r, key, name, jd, links, deg, mm):
    r.keys(jd, key, JOINT_KEYS)
    for k in ("type", "parent", "child"):
        if k not in jd:
            r.fail(f"{key}.{k}", "required key missing")
    jtype = r.choice(jd["type"], f"{key}.type", list(JOINT_TYPES))
    parent = _link_ref(r, jd["parent"], f"{key}.parent", links)
    child = _link_ref(r, jd["child"], f"{key}.child", links)
    if parent == child:
        r.fail(f"{key}.child", f"joint joins link {parent!r} to itself (parent equals child)")
    helical_keys = [k for k in ("lead", "pitch", "starts", "lead_angle", "diameter", "thread", "hand") if k in jd]
    lead = 0.0
    if jtype != "helical":
        if helical_keys:
            r.fail(f"{key}.{helical_keys[0]}", f"only helical joints take {helical_keys[0]}, not {jtype}")
    else:
        lead = _lead(r, key, jd, deg, mm)
    kinds = ("length",) if abs(lead) == math.inf else JOINT_TYPES[jtype]
    n = len(kinds)
    point = r.vector(jd.get("point", [0, 0, 0]), f"{key}.point")
    if jtype != "fixed" and "axis" not in jd:
        r.fail(f"{key}.axis", "required key missing")
    axis = r.direction(jd.get("axis", [0, 0, 1]), f"{key}.axis")
    axis2 = None
    if "axis2" in jd:
        if jtype not in ("universal", "spherical", "planar"):
            r.fail(f"{key}.axis2", f"only universal, spherical and planar joints take axis2, not {jtype}")
        axis2 = r.direction(jd["axis2"], f"{key}.axis2", "axis2")
    elif jtype == "universal":
        r.fail(f"{key}.axis2", "required key missing (the cross arm fixed in the child)")

    def to_internal(v, kind):
        return v * deg if kind == "angle" else v

    # home: a number for one coordinate (or all), or a list with one value per coordinate
    h = jd.get("home", 0)
    if isinstance(h, list):
        if len(h) != n:
            r.fail(f"{key}.home", f"expected {n} values (one per coordinate), got {len(h)}")
        home = [to_internal(r.number(v, f"{key}.home[{i}]"), kinds[i]) for i, v in enumerate(h)]
    else:
        hv = r.number(h, f"{key}.home")
        home = [to_internal(hv, k) for k in kinds]

    limits = [None] * n
    if "limits" in jd:
        lim = jd["limits"]
        pairs = lim if (n > 1 and isinstance(lim, list) and lim and isinstance(lim[0], list)) else [lim] * max(n, 1)
        if n > 1 and len(pairs) != n:
            r.fail(f"{key}.limits", f"expected {n} pairs [lo, hi], one per coordinate, got {len(pairs)}")
        for i in range(n):
            p = pairs[i]
            k = f"{key}.limits" if n == 1 else f"{key}.limits[{i}]"
            if not isinstance(p, list) or len(p) != 2:
                r.fail(k, f"expected [lo, hi], got {p!r}")
            lo, hi = (r.number(v, k) for v in p)
            if lo > hi:
                r.fail(k, f"lower limit {lo:g} is above upper limit {hi:g}")
            limits[i] = (to_internal(lo, kinds[i]), to_internal(hi, kinds[i]))
            if not lo - 1e-12 <= home[i] / (deg if kinds[i] == "angle" else 1) <= hi + 1e-12:
                r.fail(k, f"home value {home[i] / (deg if kinds[i] == 'angle' else 1):g} lies outside the limits [{lo:g}, {hi:g}]")
    drive = jd.get("drive", False)
    if not isinstance(drive, bool):
        r.fail(f"{key}.drive", f"expected true or false, got {drive!r}")

    try:
        return Joint(name=name, type=jtype, parent=parent, child=child, point=point, axis=axis,
                     axis2=axis2, home=home, limits=limits, drive=drive, lead=lead, source=dict(jd))
    except JointwiseError as exc:
        r.fail(key, str(exc))


def _lead(r, key, jd, deg, mm):
    ways = [w for w in ("lead", "pitch", "lead_angle", "thread") if w in jd]
    if len(ways) != 1:
        r.fail(key, "a helical joint needs exactly one of: lead, pitch (with starts), "
                    f"lead_angle (with diameter), thread; got {', '.join(ways) or 'none'}")
    way = ways[0]
    for k, needs in (("starts", "pitch"), ("diameter", "lead_angle")):
        if k in jd and way != needs and not (k == "diameter" and way == "thread"):
            r.fail(f"{key}.{k}", f"{k} goes with {needs}, not {way}")
    if way == "lead":
        lead = r.number(jd["lead"], f"{key}.lead")
    elif way == "pitch":
        pitch = r.number(jd["pitch"], f"{key}.pitch")
        starts = jd.get("starts", 1)
        if isinstance(starts, bool) or not isinstance(starts, int) or not 1 <= starts <= 1000:
            r.fail(f"{key}.starts", f"expected a whole number from 1 to 1000, got {_short(starts)}")
        lead = pitch * starts
    elif way == "lead_angle":
        if "diameter" not in jd:
            r.fail(f"{key}.diameter", "lead_angle needs diameter (tan(lead angle) = lead / (pi * diameter))")
        lam = r.number(jd["lead_angle"], f"{key}.lead_angle") * deg
        d = r.number(jd["diameter"], f"{key}.diameter")
        if d <= 0:
            r.fail(f"{key}.diameter", f"diameter must be positive, got {d:g}")
        if not 0 <= lam <= math.pi / 2 + 1e-12:
            r.fail(f"{key}.lead_angle", "lead angle must lie between 0 and 90 degrees")
        lead = math.inf if abs(lam - math.pi / 2) < 1e-12 else lead_from_angle(lam, d)
    else:
        try:
            t = thread_lead(r.text(jd["thread"], f"{key}.thread"))
        except JointwiseError as exc:
            r.fail(f"{key}.thread", str(exc))
        lead = t["lead"] / mm  # presets are in millimetres
    if math.isfinite(lead) and abs(lead) > LIMITS["magnitude"]:
        r.fail(f"{key}.{way}", f"lead {lead:g} is beyond the limit of {LIMITS['magnitude']:g} in magnitude")
    if not lead >= 0:
        r.fail(f"{key}.{way}", "lead must not be negative; use hand = \"left\" for a left-hand thread")
    hand = jd.get("hand", "right")
    r.choice(hand, f"{key}.hand", ["right", "left"])
    return lead if hand == "right" else -lead
