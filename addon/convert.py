"""Pure conversions between the core and the host: no ``bpy``, no ``mathutils``.

Everything here is plain numpy and text, testable without Blender (``tests/test_addon_convert.py``).

Conventions
-----------
* Core matrices are numpy 4x4 float64, column vectors, translation in ``M[:3, 3]``.
* Stored matrices (``links[i].home``, ``joints[i].anchor_home``) are 16 floats, row-major.
* Host units: radians and scene length units (BU). A mechanism file in unit ``u``
  converts with ``BU = value * metres(u) / unit_settings.scale_length``.
* Display units: the scene's unit system and length unit, e.g. millimetres; a length in
  BU shows as ``BU * scale_length * per_metre(unit)``.
"""
from __future__ import annotations

import math

import numpy as np

METRES = {"mm": 0.001, "cm": 0.01, "m": 1.0, "in": 0.0254}
DEGREE = math.pi / 180.0
# the host's display length units (unit_settings.length_unit): label, units per metre
DISPLAY = {"MICROMETERS": ("um", 1e6), "MILLIMETERS": ("mm", 1e3), "CENTIMETERS": ("cm", 1e2),
           "METERS": ("m", 1.0), "KILOMETERS": ("km", 1e-3), "INCHES": ("in", 1 / 0.0254),
           "FEET": ("ft", 1 / 0.3048), "THOU": ("thou", 1 / 0.0000254),
           "MILES": ("mi", 1 / 1609.344)}


class SceneError(ValueError):
    """The scene's mechanism cannot be used as it is; the message says what and where."""


# -- matrices ------------------------------------------------------------------------

def matrix_stored_to_core(flat):
    return np.array(flat, dtype=float).reshape(4, 4)


def matrix_core_to_stored(a):
    return [float(x) for x in np.asarray(a, dtype=float).reshape(16)]


def inverse(m):
    """Inverse of an affine 4x4; the transpose formula when the rotation part is rigid.
    Raises SceneError when the matrix is singular (an object scaled to zero)."""
    m = np.asarray(m, dtype=float)
    r = m[:3, :3]
    out = np.eye(4)
    if np.abs(r.T @ r - np.eye(3)).max() < 1e-5:
        out[:3, :3] = r.T
    else:
        try:
            out[:3, :3] = np.linalg.inv(r)
        except np.linalg.LinAlgError:
            raise SceneError("a placement is singular (scaled to zero)") from None
        if not np.all(np.isfinite(out)):
            raise SceneError("a placement is singular (scaled to zero)")
    out[:3, 3] = -out[:3, :3] @ m[:3, 3]
    return out


_HOME_INVERSE = {}


def home_inverse(flat):
    """inv(H) of a stored home matrix (cached: homes change only on set-home)."""
    key = tuple(flat)
    hit = _HOME_INVERSE.get(key)
    if hit is None:
        if len(_HOME_INVERSE) > 4096:
            _HOME_INVERSE.clear()
        hit = _HOME_INVERSE[key] = inverse(matrix_stored_to_core(key))
    return hit


def is_singular(m, tol=1e-9):
    """True when the 3x3 part of ``m`` cannot be inverted (a zero scale somewhere)."""
    r = np.asarray(m, dtype=float)[:3, :3]
    s = np.linalg.svd(r, compute_uv=False)
    return not (np.all(np.isfinite(s)) and s[-1] > tol * max(1.0, s[0]))


def shears(m, tol=1e-6):
    """True when the 3x3 part of ``m`` is not a rotation times a per-axis scale in that
    order (R @ diag(s)): what a parent with non-uniform scale under a rotation makes of
    its children, and what location, rotation and scale keys cannot express."""
    r = np.asarray(m, dtype=float)[:3, :3]
    g = r.T @ r  # diagonal exactly when the columns are orthogonal
    off = g - np.diag(np.diag(g))
    return float(np.abs(off).max()) > tol * max(1.0, float(np.abs(np.diag(g)).max()))


def orientation(z, x=None):
    """Rotation (3x3, columns X Y Z) with Z along ``z`` and X along ``x`` (or any)."""
    z = np.asarray(z, dtype=float)
    z = z / np.linalg.norm(z)
    if x is None:
        t = np.array([1.0, 0, 0]) if abs(z[0]) < 0.9 else np.array([0, 1.0, 0])
        x = t - z * (t @ z)
    x = np.asarray(x, dtype=float)
    x = x - z * (x @ z)
    x = x / np.linalg.norm(x)
    y = np.cross(z, x)
    return np.column_stack([x, y, z])


# -- units -----------------------------------------------------------------------------

def length_file_to_host(unit, scale_length):
    """Factor turning a length in file unit ``unit`` into scene units."""
    s = float(scale_length)
    s = s if s > 0 and math.isfinite(s) else 1.0
    return METRES[unit] / s


def angle_file_to_host(unit):
    return DEGREE if unit == "deg" else 1.0


def display_length(system, length_unit, scale_length):
    """(label, factor) turning scene lengths (BU) into the scene's display unit."""
    if system == "NONE":
        return "BU", 1.0
    label, per_metre = DISPLAY.get(length_unit, ("m", 1.0))
    s = float(scale_length)
    s = s if s > 0 and math.isfinite(s) else 1.0
    return label, s * per_metre


def number_text(x, digits):
    """``digits`` significant digits, but whole numbers too large for them in full
    (45000, not 4.5e+04: a screw's many turns read as a user typed them), and rounding
    noise below 5e-9 of the unit shown as 0 (a distance of 8.5e-12 mm is a zero)."""
    if abs(x) < 5e-9:
        x = 0.0
    if math.isfinite(x) and 10.0 ** digits <= abs(x) < 1e12:
        return f"{x:.0f}"
    return f"{x:.{digits}g}"


def point_text(xyz, length=("BU", 1.0), digits=4):
    """A position in the display unit ``length`` = (label, factor): each coordinate to
    ``digits`` significant digits of the largest, so float32 noise beside it (2.9e-07 mm
    next to 80 mm) shows as 0."""
    label, k = length
    v = [float(x) * k for x in xyz]
    big = max((abs(x) for x in v), default=0.0)
    v = [0.0 if abs(x) < 0.5 * 10.0 ** -digits * big else x for x in v]
    return f"({', '.join(number_text(x, digits) for x in v)}) {label}"


def format_value(v, kind, length=("BU", 1.0), digits=4):
    """A joint value for a message: angles in degrees, lengths in the display unit."""
    if kind == "angle":
        return f"{number_text(math.degrees(v), digits)}°"
    label, k = length
    return f"{number_text(v * k, digits + 1)} {label}"


# -- messages --------------------------------------------------------------------------

def reason_text(reason, value_text, limits=None, length_text=None):
    """The extension's own words for a core failure, built from its structured reason
    (``jointwise.errors.Reason``: kind, joint, loop, value, bounds, ...) instead of rewriting
    the core's text.

    ``value_text(name, v)`` formats a value of coordinate ``name`` in display units (the
    scene mechanism's radians or scene units); ``limits(name)`` gives the coordinate's
    (lo, hi) limits in the same units, or None, for a limit reason that names the coordinate
    but not its bounds; ``length_text(v)`` formats a length (a gap at home). None for a
    reason without the fields its kind needs (the caller shows the core's text as written)."""
    if reason is None:
        return None
    kind, j, v, b = reason.kind, reason.joint, reason.value, reason.bounds
    loop, other = reason.loop, getattr(reason, "other", None)
    if kind == "limit" and j is not None:
        if b is None and limits is not None:
            b = limits(j)
        if b is None:
            return None
        span = f"[{value_text(j, b[0])}, {value_text(j, b[1])}]"
        if v is None:
            return f"the closed placement puts {j} outside its limits {span}"
        if getattr(reason, "held", True):
            return f"{j} = {value_text(j, v)} lies outside its limits {span}"
        if getattr(reason, "on_path", False):
            return f"on the way there {j} reaches its limit {value_text(j, v)} (limits {span})"
        return f"the closed placement puts {j} at {value_text(j, v)}, outside its limits {span}"
    if kind == "unreachable" and loop:
        text = f"the loop closed by joint {loop!r} cannot close"
        if j is not None and b is not None:
            text += f"; {j} keeps it closed only up to about {value_text(j, b[1])}"
        elif j is not None:
            text += f" with {j} there"
        return text
    if kind == "coupling" and j is not None:
        coupling = getattr(reason, "coupling", None)
        if coupling is not None and v is not None and b is not None:
            where = f"; it feeds the loop closed by joint {loop!r}" if loop else ""
            return (f"coupling {coupling!r} does not hold at home: {j} is off by {value_text(j, v)} "
                    f"(assembly tolerance {value_text(j, b[1])}){where}")
        if other is not None and b is None:
            return f"{j} follows a motion law and cannot be held; hold its leader {other} instead"
        if other is not None and v is not None:
            return (f"the held values of {j} and {other} contradict their coupling: {j} = "
                    f"{value_text(j, v)} asked, the coupling gives {value_text(j, b[0])}")
        if other is not None:
            return f"the held values of {j} and {other} contradict their coupling"
        return None
    if kind == "home" and loop:
        if v is None:
            return f"the loop closed by joint {loop!r} could not be settled at home"
        angle = getattr(reason, "angle", None)
        if length_text is None or b is None or angle is None:
            return None
        return (f"the loop closed by joint {loop!r} does not close at home: gap {length_text(v)} and "
                f"{number_text(angle[0], 3)}° (assembly tolerance {length_text(b[1])}, "
                f"{number_text(angle[1], 3)}°)")
    if kind == "span" and j is not None and v is not None and b is not None:
        return (f"{j} = {value_text(j, v)} is too far from the placement shown to follow in one "
                f"move (from there: {value_text(j, b[0])} to {value_text(j, b[1])}); set it in steps")
    if kind == "singular" and j is not None and v is not None and b is not None:
        return (f"{j} reaches a dead point at {value_text(j, v)} (reachable from "
                f"{value_text(j, b[0])} to {value_text(j, b[1])})")
    return None


FILE_UNITS = "numbers as in the file, in its own units"


def spec_text(exc, units=FILE_UNITS):
    """A file problem (``jointwise.SpecError``: file name, key path, the file's own numbers)
    as the core wrote it, saying in which units its numbers are when it quotes any
    (``units``: the file's own, or for the scene's mechanism its radians and scene units)."""
    msg = str(exc)
    prefix = ": ".join(p for p in (getattr(exc, "source", None), getattr(exc, "key", None)) if p)
    said = msg[len(prefix):] if prefix and msg.startswith(prefix) else msg
    return f"{msg} ({units})" if any(ch.isdigit() for ch in said) else msg


def describe_error(exc):
    msg = str(exc)
    loop = getattr(exc, "loop", None)
    joint = getattr(exc, "joint", None)
    extra = []
    if loop and loop not in msg:
        extra.append(f"loop {loop!r}")
    if joint and joint not in msg:
        extra.append(f"check {joint!r}")
    return msg + (f" ({', '.join(extra)})" if extra else "")


# -- mechanism data ---------------------------------------------------------------------

SNAP = 1e-5  # relative: well above float32 noise (~1e-7), far below any modelling intent


def snap_lines(joints):
    """Undo float32 noise in joint frames read from anchors (in place).

    Axis components below SNAP become 0; axes parallel to an earlier joint's axis within
    SNAP rad take that axis; points within SNAP x size of an earlier joint's line on a
    parallel axis move onto that line. Without this, coaxial or parallel joints (a screw
    and its collar, a slide along a screw) come out a few 1e-7 apart, and such a loop
    cannot close to the core's tolerance once it has turned a few times."""
    pts = np.array([j["point"] for j in joints.values() if "point" in j], dtype=float).reshape(-1, 3)
    size = 1.0
    if len(pts) > 1:
        size = max(1.0, float(np.ptp(pts, axis=0).max()))
    ref_axes = np.zeros((0, 3))
    ref_points = np.zeros((0, 3))
    for j in joints.values():
        if "axis" not in j:
            continue
        for key in ("axis", "axis2"):
            if key not in j:
                continue
            a = np.asarray(j[key], float)
            a = np.where(np.abs(a) < SNAP, 0.0, a)
            a = a / np.linalg.norm(a)
            if key == "axis":
                p = np.asarray(j["point"], float)
                p = np.where(np.abs(p) < SNAP * size, 0.0, p)
                hit = np.flatnonzero(np.linalg.norm(np.cross(ref_axes, a), axis=1) < SNAP)
                if len(hit):
                    r, rp = ref_axes[hit[0]], ref_points[hit[0]]
                    a = r if a @ r > 0 else -r
                    off = (p - rp) - r * ((p - rp) @ r)
                    if np.linalg.norm(off) < SNAP * size:
                        p = rp + r * ((p - rp) @ r)
                else:
                    ref_axes = np.vstack([ref_axes, a])
                    ref_points = np.vstack([ref_points, p])
                j["point"] = p.tolist()
            j[key] = a.tolist()


def settled_frame(frame, home):
    """The stored home frame where the anchor, read back through a moved link, still says
    the same (float32 noise grows with every placement it passes through, and an
    overconstrained loop such as a double Hooke's shaft locks on a few micrometres)."""
    scale = max(1.0, float(np.abs(home[:3, 3]).max()))
    if (np.abs(frame[:3, :3] - home[:3, :3]).max() <= 1e-5
            and np.abs(frame[:3, 3] - home[:3, 3]).max() <= 1e-5 * scale):
        return home
    return frame


def file_geometry(jd, original, to_host):
    """The imported file's exact point and axes where the scene's (float32) ones match them."""
    for key in ("point", "axis", "axis2"):
        if key not in jd or key not in original:
            continue
        new, old = np.array(jd[key], float), np.array(original[key], float)
        if key == "point":
            old = old * to_host
            if np.abs(new - old).max() <= 1e-5 * max(1.0, float(np.abs(old).max())):
                jd[key] = old.tolist()
        else:
            n = np.linalg.norm(old)
            if n > 0 and np.abs(new / np.linalg.norm(new) - old / n).max() <= 1e-5:
                jd[key] = (old / n).tolist()


def keep_file_geometry(entry, original, same_unit):
    """Write the imported file's own numbers where the anchors still say the same thing
    (up to float32 storage), so an unchanged mechanism exports without loss."""
    for key in ("point", "axis", "axis2"):
        if key not in entry or key not in original:
            continue
        new, old = np.array(entry[key], float), np.array(original[key], float)
        if key == "point":
            if same_unit and np.abs(new - old).max() <= 1e-6 * max(1.0, np.abs(old).max()):
                entry[key] = original[key]
        else:
            n_old = np.linalg.norm(old)
            if n_old > 0 and np.abs(new / np.linalg.norm(new) - old / n_old).max() <= 1e-6:
                entry[key] = original[key]


def file_number(new, old):
    """``old`` (the file's own number, or nested lists of them) where ``new`` (read back from a
    float32 property) says the same to float32 precision; else ``new``."""
    if isinstance(new, list):
        if not isinstance(old, list) or len(old) != len(new):
            return new
        return [file_number(a, b) for a, b in zip(new, old)]
    if isinstance(old, bool) or not isinstance(old, (int, float)) or not math.isfinite(old):
        return new
    return float(old) if abs(new - old) <= 1e-6 * max(1.0, abs(old)) else new


def unit_column(m, col, joint, anchor, what):
    v = m[:3, col]
    n = float(np.linalg.norm(v))
    scale = max(1.0, float(np.linalg.norm(m[:3, 3])))
    if not n > 1e-9 * scale:
        raise SceneError(f"joint {joint!r}: give anchor {anchor!r} a non-zero scale; its {what} "
                         f"axis has zero length and a joint axis needs a direction")
    return (v / n).tolist()


def check_finite(obj, where):
    if isinstance(obj, dict):
        for k, v in obj.items():
            check_finite(v, f"{where}.{k}")
    elif isinstance(obj, (list, tuple)):
        for v in obj:
            check_finite(v, where)
    elif isinstance(obj, float) and not math.isfinite(obj):
        raise SceneError(f"{where}: value is not finite ({obj})")


def close(a, b, tol):
    """Nested dicts/lists equal, floats within ``tol`` relative."""
    if isinstance(a, dict):
        return isinstance(b, dict) and a.keys() == b.keys() and all(close(a[k], b[k], tol) for k in a)
    if isinstance(a, (list, tuple)):
        return isinstance(b, (list, tuple)) and len(a) == len(b) and all(close(x, y, tol) for x, y in zip(a, b))
    if isinstance(a, float) or isinstance(b, float):
        try:
            return abs(float(a) - float(b)) <= tol * max(1.0, abs(float(a)))
        except (TypeError, ValueError):
            return False
    return a == b


def tidy(v):
    """Round float32 noise away (7 significant digits: what a float32 property holds)."""
    v = float(v)
    if not math.isfinite(v):
        raise SceneError(f"refusing to export a non-finite number ({v})")
    r = float(f"{v:.7g}")
    return 0.0 if r == 0 else r
