"""Results of a pose and of a sweep (file units): what the solve found and why.

:class:`Pose` is what :meth:`Mechanism.pose` returns, :class:`Sweep` what the sweeps of
:mod:`jointwise.sweep` return.  Both are plain data; nothing here solves.

Both say why, from :class:`jointwise.errors.Reason`: ``Pose.status`` and ``Sweep.status``
(per row) are one of :data:`STATUSES`; a pose or a row that failed carries its
``Reason`` (``Pose.reason``, ``Sweep.failures``), whose fields (kind, joint, loop, value,
bounds, unit) let every front write its own message in its own units.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .errors import Reason

__all__ = ["Pose", "Sweep", "STATUSES", "status_of", "Note"]

#: What a pose or a sweep row came to: closed at a regular placement, closed at a
#: singular one (dead point, toggle), not closed (out of reach), or stopped by a limit.
STATUSES = ("converged", "singular", "unreachable", "limit")


def status_of(converged, singular, reason):
    """The status (one of :data:`STATUSES`) of a result with these flags and Reason."""
    if not converged:
        return "limit" if reason is not None and reason.kind == "limit" else "unreachable"
    return "singular" if singular else "converged"


class Note(str):
    """A sweep row's reason text (``Sweep.reasons``) that carries its :class:`Reason`
    (``.reason``): compares, prints and serialises as the plain text."""

    def __new__(cls, text, reason):
        obj = super().__new__(cls, text)
        obj.reason = reason
        return obj

    def __reduce__(self):
        return Note, (str(self), self.reason)


@dataclass
class Pose:
    """Result of :meth:`Mechanism.pose`.

    ``joints``: coordinate -> value (file units); ``links``: link -> 4x4 displacement
    from home (world, file length unit); ``residual``: largest loop-closure error
    (length unit or radian); ``singular``: near a dead point or toggle position.
    With targets (:mod:`jointwise.targets`): ``target_error`` (target -> distance left,
    file length unit) and ``reached`` (every error within 1e-6 of the mechanism's size);
    without, ``{}`` and True.  ``status``: one of :data:`STATUSES`; ``reason``: the
    :class:`Reason` of a pose whose loops are not closed (else None).
    """
    joints: dict
    links: dict
    converged: bool
    residual: float
    singular: bool = False
    q: np.ndarray | None = field(default=None, repr=False)  # internal state, for warm starts
    notes: list = field(default_factory=list)
    target_error: dict = field(default_factory=dict)
    reached: bool = True
    reason: Reason | None = None

    def __post_init__(self):
        if self.reason is None and not self.converged:
            self.reason = Reason("unreachable", error=float(self.residual))

    @property
    def status(self):
        return status_of(self.converged, self.singular, self.reason)

    def to_json(self):
        out = {
            "converged": bool(self.converged),
            "residual": float(self.residual),
            "singular": bool(self.singular),
            "joints": {k: float(v) for k, v in self.joints.items()},
            "links": {k: np.asarray(v).tolist() for k, v in self.links.items()},
        }
        if self.target_error:
            out["target_error"] = {k: float(v) for k, v in self.target_error.items()}
            out["reached"] = bool(self.reached)
        return out


@dataclass
class Sweep:
    """Result of a sweep: per-step arrays in file units.

    ``values``: drive values (N); ``joints``: coordinate -> (N,); ``links``: link -> (N, 4, 4)
    displacement from home; ``measures``: name -> (N,) or (N, 3) for points;
    ``converged``, ``singular``: (N,) bool; ``residual``: (N,) largest closure error;
    ``reasons``: step -> why it failed (text); ``failures``: step -> the
    :class:`Reason` of every row that did not converge; ``status``: (N,) one of
    :data:`STATUSES` per row; ``advantage``: name -> (N,) ideal mechanical
    advantage per rate measure (the inverse speed ratio, frictionless).  ``q``: the
    solver's states (internal units).  With a drive speed, ``time``, ``velocities``,
    ``accelerations``, ``measure_velocities`` and ``measure_accelerations`` (below);
    unlike every other array here they hold NaN on rows that did not converge.
    """
    drive: str | None
    values: np.ndarray
    joints: dict
    links: dict
    measures: dict
    converged: np.ndarray
    singular: np.ndarray
    residual: np.ndarray
    q: np.ndarray = field(repr=False)
    reasons: dict = field(default_factory=dict)
    advantage: dict = field(default_factory=dict)
    #: With a drive speed (``sweep(..., speed=...)``, see :mod:`jointwise.rates`): time (s)
    #: of each step; coordinate -> rate and acceleration (file units per s, per s^2);
    #: measure -> the same (points (N, 3) in length units, angles in degrees, rate
    #: measures in their own unit per s).  These arrays hold NaN (in Python only: files
    #: get an empty cell or null) on rows that did not converge and where a value is
    #: undefined: a rate measure whose ``per`` stands still (a dead point), a distance of
    #: 0, an angle of 0 or 180 degrees.  None / empty without a speed.
    time: np.ndarray | None = None
    velocities: dict = field(default_factory=dict)
    accelerations: dict = field(default_factory=dict)
    measure_velocities: dict = field(default_factory=dict)
    measure_accelerations: dict = field(default_factory=dict)

    def __len__(self):
        return len(self.values)

    @property
    def failures(self):
        """Step -> :class:`Reason` of every row that did not converge (file units)."""
        out = {}
        for i in np.flatnonzero(~np.asarray(self.converged, bool)):
            why = self.reasons.get(int(i))
            out[int(i)] = getattr(why, "reason", None) or Reason("unreachable", error=float(self.residual[i]))
        return out

    @property
    def status(self):
        """(N,) status of every row, one of :data:`STATUSES`."""
        out = np.where(self.singular, "singular", "converged").astype("<U11")
        for i, r in self.failures.items():
            out[i] = status_of(False, False, r)
        return out

    def pose(self, i):
        """The JSON dict of step ``i`` (as ``pose`` JSON, plus ``measures``)."""
        out = {
            "converged": bool(self.converged[i]),
            "residual": float(self.residual[i]),
            "singular": bool(self.singular[i]),
            "joints": {k: float(v[i]) for k, v in self.joints.items()},
            "links": {k: v[i].tolist() for k, v in self.links.items()},
            "measures": {k: (v[i].tolist() if v.ndim > 1 else float(v[i])) for k, v in self.measures.items()},
        }
        return out
