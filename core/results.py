"""Results of a pose and of a sweep (file units): what the solve found and why.

:class:`Pose` is what :meth:`Mechanism.pose` returns, :class:`Sweep` what the sweeps of
:mod:`jointwise.sweep` return.  Both are plain data; nothing here solves.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

__all__ = ["Pose", "Sweep"]


@dataclass
class Pose:
    """Result of :meth:`Mechanism.pose`.

    ``joints``: coordinate -> value (file units); ``links``: link -> 4x4 displacement
    from home (world, file length unit); ``residual``: largest loop-closure error
    (length unit or radian); ``singular``: near a dead point or toggle position.
    With targets (:mod:`jointwise.targets`): ``target_error`` (target -> distance left,
    file length unit) and ``reached`` (every error within 1e-6 of the mechanism's size);
    without, ``{}`` and True.
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
    ``reasons``: step -> why it failed; ``advantage``: name -> (N,) ideal mechanical
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
