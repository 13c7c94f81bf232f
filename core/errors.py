"""The exception family of jointwise, and the structured reason a solve failed.

One base class, one subclass per kind of failure.  Assembly failures carry a
:class:`Reason`: what went wrong (``kind``), where (``joint``, ``loop``), the value
asked and the bounds found, all in file units, with the unit text.  The message is
built from those fields (:meth:`Reason.message`), so a front that shows other units
(the Blender extension) formats its own text from the same fields.
"""
from __future__ import annotations

from dataclasses import dataclass

__all__ = ["JointwiseError", "SpecError", "AssemblyError", "LimitError", "Reason", "KINDS"]

#: Kinds of failure a :class:`Reason` names.
KINDS = ("unreachable", "limit", "singular", "coupling", "home", "span")


class JointwiseError(ValueError):
    """Base class of every error jointwise raises on purpose."""


class SpecError(JointwiseError):
    """A mechanism file or description is malformed.

    The message starts with the file name and the key path, e.g.
    ``vise.toml: joints.screw.axis: axis has zero length``.
    """

    def __init__(self, message, *, source=None, key=None):
        self.source = source
        self.key = key
        parts = [p for p in (source, key) if p]
        super().__init__(": ".join(parts + [message]))


@dataclass(frozen=True)
class Reason:
    """Why a pose or a step failed, in file units.

    kind : one of :data:`KINDS`
        ``"unreachable"`` (the loops cannot close with the held values), ``"limit"``
        (a coordinate outside its joint's limits), ``"singular"`` (a dead point: the
        Jacobian loses rank; a range end), ``"coupling"`` (held values contradict a
        coupling, a motion law's follower is held, or a coupling does not hold at home),
        ``"home"`` (home does not close), ``"span"`` (held value too far to follow).
    joint : the coordinate (or joint) concerned, if any.
    loop : the loop concerned (the name of the joint that closes it), if any.
    value : the value asked (held) or found (solved), file units; for ``"home"`` and a
        coupling at home, the gap found.
    bounds : (lo, hi) in file units: the joint's limits for ``"limit"``; for
        ``"unreachable"`` the interval the continuation reached, as far as known
        (``lo == hi`` when only the last closed value is known); for ``"singular"`` (a
        range end) the reachable interval; for ``"span"`` the held values that can be
        followed from the start; for contradicting held values the value the coupling
        allows (``lo == hi``); for ``"home"`` and a coupling at home ``(0, tolerance)``.
    unit : unit text of ``value`` and ``bounds``.
    error : closest closure error reached (length unit or radian), if any.
    held : for ``"limit"``: True when the value was asked, False when the closed
        placement (or the path to it) put a solved coordinate there.
    on_path : for ``"limit"``: the continuation met the limit on its way to the asked
        values (``value`` is the limit met).
    other : a second coordinate: the other held value a coupling contradicts, or the
        leader to hold instead of a motion law's follower.
    coupling : the coupling concerned (a coupling that does not hold at home).
    angle : for ``"home"``: (angular gap, angular tolerance) in degrees beside the
        positional gap ``value``.
    """
    kind: str
    joint: str | None = None
    loop: str | None = None
    value: float | None = None
    bounds: tuple | None = None
    unit: str | None = None
    error: float | None = None
    held: bool = True
    on_path: bool = False
    other: str | None = None
    coupling: str | None = None
    angle: tuple | None = None

    def message(self):
        """The core's message text (file units), built from the fields: the one place
        every failure of a solve is worded."""
        u = f" {self.unit}" if self.unit else ""
        if self.kind == "limit" and self.bounds is not None:
            lo, hi = self.bounds
            if self.held:
                return f"{self.joint} = {self.value:g}{u} lies outside its limits [{lo:g}, {hi:g}]{u}"
            if self.on_path:
                return (f"infeasible: on the way there {self.joint} reaches its limit {self.value:g}{u} "
                        f"(limits [{lo:g}, {hi:g}]{u})")
            return (f"infeasible: the closed placement puts {self.joint} at {self.value:.6g}{u}, "
                    f"outside its limits [{lo:g}, {hi:g}]{u}")
        if self.kind == "unreachable":
            text = (f"cannot assemble: loop closed by joint {self.loop!r} stays open by {self.error:.3g} "
                    f"(closest closure error reached)")
            if self.joint is not None and self.bounds is not None:
                text += (f"; the held value of {self.joint!r} is likely out of reach (the loop stays "
                         f"closed only up to about {self.bounds[1]:.6g}{u})")
            return text
        if self.kind == "coupling" and self.coupling is not None and self.value is not None:
            where = f"; it feeds the loop closed by joint {self.loop!r}" if self.loop else ""
            return (f"coupling {self.coupling!r} does not hold at home: {self.joint} is off by "
                    f"{self.value:.6g}{u} (assembly tolerance {self.bounds[1]:.3g}{u}){where}")
        if self.kind == "coupling" and self.other is not None and self.bounds is None:
            return (f"{self.joint!r} follows a motion law and cannot be held; hold its leader "
                    f"{self.other!r} instead")
        if self.kind == "coupling" and self.other is not None:
            return f"held values of {self.joint!r} and {self.other!r} contradict their coupling"
        if self.kind == "home" and self.loop is not None:
            if self.value is None:
                return (f"loop closed by joint {self.loop!r} could not be settled at home "
                        f"(closest error {self.error:.3g})")
            ang, ang_tol = self.angle
            return (f"loop closed by joint {self.loop!r} does not close at home: gap {self.value:.3g}{u}, "
                    f"{ang:.3g} deg (assembly tolerance {self.bounds[1]:.3g}{u}, {ang_tol:.3g} deg)")
        if self.kind == "span" and self.bounds is not None:
            lo, hi = self.bounds
            return (f"{self.joint}: the held value {self.value:g}{u} is too far from the start placement "
                    f"to follow continuously (from there: [{lo:.6g}, {hi:.6g}]{u}); pose it from a nearer start")
        if self.kind == "singular" and self.bounds is not None:
            lo, hi = self.bounds
            return (f"{self.joint} reaches a dead point at {self.value:.6g}{u} "
                    f"(reachable from {lo:.6g} to {hi:.6g}{u})")
        parts = [self.kind]
        if self.joint:
            parts.append(f"joint {self.joint}")
        if self.loop:
            parts.append(f"loop {self.loop}")
        if self.value is not None:
            parts.append(f"value {self.value:g}{u}")
        return ", ".join(parts)

    def as_dict(self):
        return {k: getattr(self, k) for k in ("kind", "joint", "loop", "value", "bounds", "unit", "error")}


class AssemblyError(JointwiseError):
    """The mechanism cannot be assembled with the held values.

    Attributes
    ----------
    reason : Reason or None
        The structured reason; ``kind``, ``joint``, ``loop``, ``value``, ``bounds`` and
        ``unit`` read through to it.
    loop : str or None
        Name of the loop that would not close (the joint that closes it), if any.
    error : float or None
        Closest closure error reached (length unit or radian, the larger).
    joint : str or None
        The joint or coordinate most likely responsible (out of reach, or a limit).
    """

    def __init__(self, message=None, *, reason=None, loop=None, error=None, joint=None, kind=None):
        if reason is None:
            reason = Reason(kind or ("limit" if isinstance(self, LimitError) else "unreachable"),
                            joint=joint, loop=loop, error=error)
        self.reason = reason
        self.loop = loop if loop is not None else reason.loop
        self.error = error if error is not None else reason.error
        self.joint = joint if joint is not None else reason.joint
        super().__init__(message if message is not None else reason.message())

    kind = property(lambda self: self.reason.kind)
    value = property(lambda self: self.reason.value)
    bounds = property(lambda self: self.reason.bounds)
    unit = property(lambda self: self.reason.unit)


class LimitError(AssemblyError):
    """A held or solved coordinate lies outside its joint's limits."""
