"""A small TOML writer for the flat mechanism-file structure (tables of tables of values).

Top-level scalars first, then ``[table]`` and ``[table.name]`` sections; values are
strings, booleans, ints, finite floats, lists of those (nested lists allowed) and
inline tables (dicts below the section level). Written atomically by ``write``.
"""
from __future__ import annotations

import math
import re

_BARE = re.compile(r"^[A-Za-z0-9_-]+$")


def key(k):
    return k if _BARE.match(k) else string(k)


def string(s):
    out = ['"']
    for ch in s:
        if ch in '"\\':
            out.append("\\" + ch)
        elif ch == "\n":
            out.append("\\n")
        elif ch == "\t":
            out.append("\\t")
        elif ord(ch) < 0x20 or ord(ch) == 0x7F:
            out.append(f"\\u{ord(ch):04X}")
        else:
            out.append(ch)
    out.append('"')
    return "".join(out)


def value(v):
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        if not math.isfinite(v):
            raise ValueError(f"cannot write a non-finite number ({v}) to a mechanism file")
        r = repr(v)
        return r if any(c in r for c in ".en") else r + ".0"
    if isinstance(v, str):
        return string(v)
    if isinstance(v, (list, tuple)):
        return "[" + ", ".join(value(x) for x in v) + "]"
    if isinstance(v, dict):
        return "{" + ", ".join(f"{key(k)} = {value(x)}" for k, x in v.items()) + "}"
    raise TypeError(f"cannot write {type(v).__name__} to a mechanism file")


def dumps(data):
    lines = []
    tables = []
    for k, v in data.items():
        if isinstance(v, dict):
            tables.append((k, v))
        else:
            lines.append(f"{key(k)} = {value(v)}")
    for name, table in tables:
        flat = {k: v for k, v in table.items() if not isinstance(v, dict)}
        subs = {k: v for k, v in table.items() if isinstance(v, dict)}
        if flat or not subs:
            lines.append("")
            lines.append(f"[{key(name)}]")
            lines.extend(f"{key(k)} = {value(v)}" for k, v in flat.items())
        for sub, body in subs.items():
            lines.append("")
            lines.append(f"[{key(name)}.{key(sub)}]")
            lines.extend(f"{key(k)} = {value(v)}" for k, v in body.items())
    return "\n".join(lines) + "\n"


def write(path, data):
    """Write ``data`` as TOML to ``path`` whole or not at all (``jointwise.outputs``: a
    temporary file moved into place; a link or device written in place, never replaced)."""
    from jointwise.outputs import write_text  # late: the core's wheel is on the path once enabled
    write_text(path, dumps(data), option="export")
