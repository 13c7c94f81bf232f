"""The public front: :class:`Mechanism` (a :class:`jointwise.model.Model` that solves),
and :func:`load`, :func:`loads`, :func:`from_dict` that read a file into one.

Posing (:meth:`Mechanism.pose`) is solved by :mod:`jointwise.solver` (or
:mod:`jointwise.targets` with targets), sweeps by :mod:`jointwise.sweep`; results are
:class:`jointwise.results.Pose` and :class:`jointwise.results.Sweep`.  Conventions
(home placement, units) are stated in :mod:`jointwise.model`.
"""
from __future__ import annotations

import math

import numpy as np

from . import spec
from .errors import SpecError
from .model import Coupling, Link, Loop, Measure, Model
from .results import Pose
from .solver import Solver
from .sweep import follow, sweep, sweep_schedule
from .targets import pose_to_targets
from .units import ASSEMBLY_TOLERANCE

__all__ = ["Link", "Coupling", "Measure", "Loop", "Mechanism", "Pose", "ASSEMBLY_TOLERANCE",
           "load", "loads", "from_dict"]


def load(path):
    """Read a mechanism file (``.toml`` or ``.json``) and return a :class:`Mechanism`."""
    return Mechanism(**spec.read_file(path))


def loads(text, *, source="<text>", fmt="toml"):
    """Parse mechanism text (TOML or JSON) and return a :class:`Mechanism`."""
    return Mechanism(**spec.read_text(text, source=source, fmt=fmt))


def from_dict(data, source="<data>"):
    """Build a :class:`Mechanism` from the mechanism-file structure held in a dict."""
    return Mechanism(**spec.read_dict(data, source=source))


class Mechanism(Model):
    """A mechanism read from a file (see :func:`jointwise.load`)."""

    def __init__(self, **parts):
        super().__init__(**parts)
        self.settle_notes = self._settle_axes()
        self.solver = Solver(self)

    def _settle_axes(self):
        """Settle drawing noise only where it locks the loops; report every change.

        In the home convention every loop closes at home by construction; what drawing
        noise breaks is closure *away* from home: a planar linkage whose pins are 0.01 deg
        out of parallel is, strictly, a rigid spatial loop.  So the settled geometry of
        :meth:`_settle_geometry` is kept only when it frees motion the drawing locks (the
        loop Jacobian at home loses rank, tested to rounding level); a truly spatial
        linkage whose axes happen to lie within the tolerance of parallel moves as drawn
        and is used exactly as given.  Kept settling is reported per joint: the angle each
        axis turned and the distance each point moved.
        """
        raw = {n: (getattr(j, "axis", None), getattr(j, "point", None)) for n, j in self.joints.items()}
        raw = {n: (None if a is None else np.array(a, float), None if p is None else np.array(p, float))
               for n, (a, p) in raw.items()}
        notes = self._settle_geometry()
        if not notes:
            return []
        settled = {n: (getattr(j, "axis", None), getattr(j, "point", None)) for n, j in self.joints.items()}
        free_settled = self._loop_rank_deficit()
        self._set_geometry(raw)
        if free_settled <= self._loop_rank_deficit():
            return []  # the drawing moves as given: keep it exactly
        self._set_geometry(settled)
        for n, j in self.joints.items():
            a0, p0 = raw[n]
            a1, p1 = settled[n]
            if a0 is not None and a1 is not None and np.linalg.norm(a1 - a0) > 0:
                ang = math.degrees(math.atan2(np.linalg.norm(np.cross(a0, a1)), float(np.dot(a0, a1))))
                notes.append(f"axis of joint {n} turned by {ang:.3g} deg")
            if p0 is not None and p1 is not None and np.linalg.norm(p1 - p0) > 0:
                notes.append(f"point of joint {n} moved by {float(np.linalg.norm(p1 - p0)):.3g} {self.length_unit}")
        return notes

    def _loop_rank_deficit(self):
        """Coordinates minus the rank of the loop Jacobian at home (to rounding level)."""
        J = Solver(self).full_jacobian(self.home.copy())
        if not J.size:
            return 0
        sv = np.linalg.svd(J, compute_uv=False)
        return int(J.shape[1] - (sv > 1e-12 * max(sv[0], 1e-300)).sum())

    def pose(self, values=None, *, start=None, targets=None):
        """Pose the mechanism with the given coordinates held (file units).

        Coordinates of joints with ``drive = true`` that are not given are held at their
        home value, except that giving a passive coordinate of a loop releases the file's
        drives in that loop group.  Loop coordinates that are not held are solved;
        others keep their values (home, or those of ``start``).

        Parameters
        ----------
        values : dict, optional
            Coordinate name -> value in file units.
        start : Pose or dict, optional
            Previous pose to start from (warm start; stays on its branch), or a dict of
            coordinate values (file units) of a closed placement; see :meth:`state`.
        targets : dict, optional
            Point measure name -> world position ``[x, y, z]`` (file length unit), or link
            name -> 4x4 displacement from home (as ``Pose.links``).  Every coordinate not
            in ``values`` may then move, the file's drives included; the pose moves
            continuously from ``start`` to the closed placement nearest the targets
            (:mod:`jointwise.targets`) and gains ``target_error`` and ``reached``.  An
            unreachable target gives the nearest reachable pose, ``reached = False``.

        Raises
        ------
        LimitError
            A held value lies outside its joint's limits.
        AssemblyError
            The loops cannot be closed (attributes ``loop``, ``error``, ``joint``).
        SpecError
            A target names no point measure or link, or its value has the wrong shape.
        """
        if targets is not None:
            return pose_to_targets(self, values, start, targets)
        held = self._held_from(values)
        self.check_limits(held)
        if isinstance(start, dict):
            start = self.state(start)
        q, info = self.solver.pose(held, None if start is None else start.q)
        pose = self._make_pose(q, info)
        for name, v in (values or {}).items():  # held values read back exactly as given
            pose.joints[name] = float(v)
        return pose

    def state(self, values):
        """A Pose of given coordinate values (file units; missing ones at home), unsolved.

        For warm starts from values kept elsewhere (e.g. a scene): ``pose(v, start=state(w))``.
        """
        q = self.solver.home_state() if self.loops or self.couplings else self.home.copy()
        for name, v in values.items():
            i = self.index_of(name)
            fv = float(v)
            if not math.isfinite(fv):
                raise SpecError(f"value of {name!r} must be finite, got {v!r}", source=self.source)
            q[i] = fv * self.unit_scale(i)
        err = self.solver.closure(q)[0]
        return Pose(joints=self._values_out(q), links=self.link_poses(q), converged=err <= 1e-9,
                    residual=float(err), q=q)

    def _make_pose(self, q, info):
        return Pose(joints=self._values_out(q), links=self.link_poses(q),
                    converged=info["converged"], residual=info["residual"],
                    singular=info["singular"], q=q, notes=info.get("notes", []))

    def home_closure(self):
        """Largest loop-closure error of the file as modelled (length unit or radian)."""
        return self.solver.closure(self.home)[0]

    # -- the holding rule ----------------------------------------------------------------------
    def held_coordinates(self, given=(), *, drives=None, animated=(), inputs=()):
        """Which coordinates a solve holds: the one rule the CLI, sweeps and the extension ask.

        ``given``: coordinates whose values the caller sets (always held; a given coordinate
        that is not a drive releases the drives and animated coordinates of its loop group).
        ``drives``: the drive flags (default the file's ``drive = true``; ``()`` releases all,
        as ``sweep --drive`` does).  ``animated``: coordinates with animated values, held like
        drives.  ``inputs``: given coordinates that are the input of their loop group (a
        ramp): every other drive and animated coordinate of that group is released.

        Returns the held coordinate names in mechanism order: the given ones, the drives and
        animated ones not released (one per coupling group: the coupling places the others),
        and one coordinate (the group's leader) of every coupling group outside all loops
        (nothing else places it)."""
        s, ct = self.solver, self.coupling_table
        idx = [self.index_of(c) for c in given]
        given_set = {self.coordinates[i] for i in idx}
        drive_set = set(self.driven if drives is None else (self.coordinates[self.index_of(c)] for c in drives))
        anim = {self.coordinates[self.index_of(c)] for c in animated}
        group = lambda i: s.block_of_master.get(int(ct.master[i]))  # noqa: E731
        released = {group(i) for i in idx if self.coordinates[i] not in drive_set}
        released |= {group(self.index_of(c)) for c in inputs}
        released.discard(None)
        held_m = {int(ct.master[i]) for i in idx}
        out = set(given_set)
        for i, c in enumerate(self.coordinates):
            g = int(ct.master[i])
            if c in given_set or g in held_m:
                continue
            block = s.block_of_master.get(g)
            if block is None:
                held_m.add(g)
                out.add(self.coordinates[g])  # the leader: a motion law's follower cannot be held
            elif (c in drive_set or c in anim) and block not in released:
                held_m.add(g)
                out.add(c)
        return [c for c in self.coordinates if c in out]

    def mobility(self, q=None):
        """Kutzbach count and numeric mobility: see :meth:`jointwise.solver.Solver.mobility`.

        At home (``q`` None) it is worked out once per structure and kept (a new joint
        geometry forgets it); at a given state ``q`` it is worked out there."""
        if q is not None:
            return self.solver.mobility(q)
        hit = self._derived.get("mobility")
        if hit is None:
            hit = self._derived["mobility"] = self.solver.mobility(self.home)
        return dict(hit)

    # -- sweeps (engine in jointwise.sweep) --------------------------------------------
    def sweep(self, drive, values, held=None, **options):
        """Drive one coordinate through ``values``: see :func:`jointwise.sweep.sweep`."""
        return sweep(self, drive, values, held, **options)

    def sweep_schedule(self, schedule, *args, **options):
        """Several inputs at once: see :func:`jointwise.sweep.sweep_schedule`."""
        return sweep_schedule(self, schedule, *args, **options)

    def follow(self, table, start=None, **options):
        """Continuation along rows of held values: see :func:`jointwise.sweep.follow`."""
        return follow(self, table, start, **options)

