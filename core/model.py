"""The model: links, joints, couplings, measures, the spanning tree and the loops, units.

Home convention (product of exponentials, space form): every link sits in its
modelled placement at home; every joint's point and axis are given in world
coordinates at home, where each coordinate equals its ``home`` value.  A link's
pose is its rigid displacement from home, ``D`` (4x4): a point ``p`` of the link
at home is at ``D @ p``.  Posing a tree multiplies joint exponentials from ground:
``D_child = D_parent @ E_joint(q)`` (Lynch & Park, *Modern Robotics*, sec. 4.1).

The joint graph may contain loops.  A spanning tree is grown breadth-first from
ground; every joint left out of the tree closes one loop.  Nothing here solves:
:class:`jointwise.mechanism.Mechanism` adds solving on top of :class:`Model`.

Units: the public API speaks the file's units (``length_unit``, ``angle_unit``);
internally angles are radians and lengths stay in the file's length unit.
"""
from __future__ import annotations

import math
from collections import deque
from dataclasses import dataclass

import numpy as np

from . import spatial
from .coupling_table import CouplingTable
from .errors import LimitError, Reason, SpecError
from .units import ANGLE_UNITS, ASSEMBLY_TOLERANCE, COAXIAL_TOLERANCE, FORMAT

__all__ = ["Link", "Coupling", "Measure", "Loop", "Model"]


@dataclass
class Link:
    name: str
    object: str


@dataclass
class Coupling:
    """``follower = ratio * leader + offset`` in file units, or a motion law.

    ``law``: ``None`` for the linear coupling, else a law of :mod:`jointwise.couplings`
    (internal units; ``ratio`` and ``offset`` are then None); ``spec``: the law's keys as
    the file gave them (for writing the file back).
    """
    name: str
    leader: str
    follower: str
    ratio: float | None
    offset: float | None = 0.0
    law: object = None
    spec: dict | None = None

    @property
    def kind(self):
        """The law's name: linear, program, geneva or table."""
        return "linear" if self.law is None else self.law.name


@dataclass
class Measure:
    """A quantity evaluated at every pose: point, distance, angle or rate."""
    name: str
    type: str
    a: tuple | None = None
    b: tuple | None = None
    of: str | None = None
    per: str | None = None


@dataclass
class Loop:
    """One independent loop: closed by joint ``name``; ``steps`` walk it from ``root``.

    Each step is ``(joint, sign)``: sign +1 goes parent -> child, -1 child -> parent.
    The loop is closed when the product of the steps' transforms is the identity.
    """
    name: str
    root: str
    steps: list


class Model:
    """A mechanism's structure as read from a file: no solving (see :class:`Mechanism`)."""

    def __init__(self, *, name, length_unit, angle_unit, ground, links, joints,
                 couplings=None, measures=None, source="<data>"):
        self.name = name
        self.length_unit = length_unit
        self.angle_unit = angle_unit
        self.ground = ground
        self.links = dict(links)
        self.joints = dict(joints)
        self.couplings = dict(couplings or {})
        self.measures = dict(measures or {})
        self.source = source
        self.angle_scale = ANGLE_UNITS[angle_unit]

        # the coordinate layout, read by every layer above (public, fixed for the model's life):
        #   coordinates  names in state order; kinds  "angle" or "length" per coordinate;
        #   slices  joint -> its coordinates' slice of a state; index  coordinate -> position;
        #   owner  coordinate -> joint; angle_scale  radians per file angle unit
        self.coordinates = []
        self.kinds = []
        self.slices = {}
        for j in self.joints.values():
            start = len(self.coordinates)
            self.coordinates.extend(j.coordinates)
            self.kinds.extend(j.kinds)
            self.slices[j.name] = slice(start, len(self.coordinates))
        self.index = {c: i for i, c in enumerate(self.coordinates)}
        self.owner = {}
        for j in self.joints.values():
            for c in j.coordinates:
                self.owner[c] = j.name
        self.home = np.concatenate([j.home for j in self.joints.values()]) if self.joints else np.zeros(0)
        self._powers = None  # the primitives' screw powers (_screw_powers; geometry)
        self._powers_one = None  # the same with the identity in front, and the tree walk (_link_poses_one)
        #: values worked out from the structure alone (mobility at home, ...): kept until
        #: the structure changes (:meth:`_structure_changed`)
        self._derived = {}
        self._build_tree()
        self.size = self._size()
        #: the coupling groups (master, ratio and offset, motion law): built once here, asked
        #: by the solver, sweeps, rates, measures and targets
        self.coupling_table = CouplingTable(self)

    # -- structure -------------------------------------------------------------
    def _build_tree(self):
        adj = {name: [] for name in self.links}
        for j in self.joints.values():
            adj[j.parent].append((j.name, +1, j.child))
            adj[j.child].append((j.name, -1, j.parent))
        self.tree_parent = {self.ground: None}  # link -> (joint, sign) from its tree parent
        self.depth = {self.ground: 0}
        self.order = [self.ground]
        used = set()
        queue = deque([self.ground])
        while queue:
            link = queue.popleft()
            for jname, sign, other in adj[link]:
                if other in self.tree_parent or jname in used:
                    continue
                used.add(jname)
                self.tree_parent[other] = (jname, sign)
                self.depth[other] = self.depth[link] + 1
                self.order.append(other)
                queue.append(other)
        loose = [n for n in self.links if n not in self.tree_parent]
        if loose:
            raise SpecError(f"links not connected to ground {self.ground!r}: {', '.join(loose)}",
                            source=self.source, key="joints")
        self.tree_joints = used
        self.loops = []
        for j in self.joints.values():
            if j.name in used:
                continue
            self.loops.append(self._loop_of(j))

    def _path_up(self, link):
        """Steps from ``link`` up to ground: list of (link, joint, sign)."""
        out = []
        while self.tree_parent[link] is not None:
            jname, sign = self.tree_parent[link]
            out.append((link, jname, sign))
            j = self.joints[jname]
            link = j.parent if sign > 0 else j.child
        return out

    def _loop_of(self, cut):
        up_p = self._path_up(cut.parent)
        up_c = self._path_up(cut.child)
        anc_p = [cut.parent] + [self._other(jn, s, ln) for ln, jn, s in up_p]
        anc_c = [cut.child] + [self._other(jn, s, ln) for ln, jn, s in up_c]
        common = set(anc_p) & set(anc_c)
        root = next(a for a in anc_p if a in common)
        down_p = []  # root -> parent, in walking order
        for ln, jn, s in up_p:
            if ln == root:
                break
            down_p.append((jn, s))
        down_p.reverse()
        up = []  # child -> root: reverse of the tree direction
        for ln, jn, s in up_c:
            if ln == root:
                break
            up.append((jn, -s))
        return Loop(cut.name, root, down_p + [(cut.name, +1)] + up)

    def _other(self, jname, sign, link):
        j = self.joints[jname]
        return j.parent if sign > 0 else j.child

    def _structure_changed(self):
        """Forget everything worked out from the joints' geometry."""
        self._powers = None
        self._powers_one = None
        self._derived.clear()

    def _set_geometry(self, geometry):
        for n, (a, p) in geometry.items():
            j = self.joints[n]
            if a is not None:
                j.axis = np.array(a, float)
            if p is not None:
                j.point = np.array(p, float)
            j.primitives = j._build()
        self._structure_changed()

    def _settle_geometry(self):
        """Make nearly parallel joint axes of the loops exactly parallel.

        Axes drawn in a modeller are rarely exact; a planar linkage whose pins are
        0.01 deg out of parallel is, strictly, a rigid spatial loop.  Turning axes
        (revolute, helical, cylindrical, planar normals) of loop joints that lie within
        ``ASSEMBLY_TOLERANCE`` radians of each other are set to their mean direction,
        and slides within that tolerance of perpendicular to such a direction are
        projected onto its plane.  Returns notes saying what was changed.
        """
        loop_joints = {jn for lp in self.loops for jn, _ in lp.steps}
        turning = [self.joints[jn] for jn in self.joints
                   if jn in loop_joints and self.joints[jn].type in ("revolute", "helical", "cylindrical", "planar")]
        notes, clusters, used = [], [], set()
        for j in turning:
            if j.name in used:
                continue
            group = [k for k in turning if k.name not in used
                     and np.linalg.norm(np.cross(j.axis, k.axis)) < ASSEMBLY_TOLERANCE]
            used.update(k.name for k in group)
            mean = sum(np.sign(np.dot(k.axis, j.axis)) * k.axis for k in group)
            mean = mean / np.linalg.norm(mean)
            clusters.append(mean)
            worst = max(float(np.linalg.norm(np.cross(k.axis, mean))) for k in group)
            if len(group) > 1 and worst > 1e-12:
                for k in group:
                    k.axis = np.sign(np.dot(k.axis, mean)) * mean
                notes.append(f"axes of joints {', '.join(k.name for k in group)} made parallel "
                             f"(they were up to {math.degrees(worst):.3g} deg apart)")
            # lines of one direction that nearly coincide (a screw in its bearing and nut)
            if len(group) > 1:
                size = max(self._size(), max(float(np.abs(k.point).max()) for k in group))
                lines = []
                for k in group:
                    foot = k.point - np.dot(k.point, mean) * mean
                    hit = next((ln for ln in lines if np.linalg.norm(ln[0] - foot) < COAXIAL_TOLERANCE * size), None)
                    if hit is None:
                        lines.append((foot, [k]))
                    else:
                        hit[1].append(k)
                for foot, ks in lines:
                    gap = max(float(np.linalg.norm((k.point - np.dot(k.point, mean) * mean) - foot)) for k in ks)
                    if len(ks) > 1 and gap > 1e-12 * size:
                        for k in ks:
                            k.point = foot + np.dot(k.point, mean) * mean
                        notes.append(f"axes of joints {', '.join(k.name for k in ks)} made coaxial "
                                     f"(they were up to {gap:.3g} {self.length_unit} apart)")
        for jn in loop_joints:
            j = self.joints[jn]
            if j.type != "prismatic":
                continue
            for n in clusters:
                d = float(np.dot(j.axis, n))
                off = float(np.linalg.norm(np.cross(j.axis, n)))
                if 1e-12 < off < ASSEMBLY_TOLERANCE:  # a slide along a screw or a turning axis
                    j.axis = np.sign(d) * n
                    notes.append(f"slide of joint {jn} made parallel to the turning axes "
                                 f"(it was {math.degrees(math.asin(min(1.0, off))):.3g} deg off)")
                    break
                if 1e-12 < abs(d) < ASSEMBLY_TOLERANCE:
                    a = j.axis - d * n
                    j.axis = a / np.linalg.norm(a)
                    notes.append(f"slide of joint {jn} made perpendicular to the turning axes "
                                 f"(it was {math.degrees(math.asin(abs(d))):.3g} deg off)")
        if notes:
            for j in self.joints.values():
                j.primitives = j._build()
            self._structure_changed()
        return notes

    def _size(self):
        pts = [j.point for j in self.joints.values()]
        if len(pts) < 2:
            return 1.0
        p = np.array(pts)
        d = float(np.linalg.norm(p[:, None, :] - p[None, :, :], axis=-1).max())
        # scale-free: the size itself, so a drawing scaled by 1e-7 keeps its proportions.
        # Joints (nearly) on one spot (a screw in its bearing and nut) take the scale of
        # their coordinates instead; one length unit only where all sit at the origin.
        reach = float(np.abs(p).max())
        if d >= 1e-3 * reach and d > 0:
            return d
        return reach if reach > 0 else 1.0

    def coordinate_kind(self, name):
        """``"angle"`` or ``"length"``."""
        return self.kinds[self.index_of(name)]

    def joint_of(self, coordinate):
        """Name of the joint owning ``coordinate``."""
        self.index_of(coordinate)
        return self.owner[coordinate]

    @property
    def driven(self):
        """Coordinates of joints with ``drive = true``."""
        return [c for j in self.joints.values() if j.drive for c in j.coordinates]

    def index_of(self, name):
        try:
            return self.index[name]
        except KeyError:
            import difflib
            close = difflib.get_close_matches(str(name), self.coordinates, n=1)
            hint = f"; did you mean {close[0]!r}?" if close else f"; coordinates are: {', '.join(self.coordinates)}"
            raise SpecError(f"no coordinate named {name!r}{hint}", source=self.source) from None

    # -- units -----------------------------------------------------------------
    def unit_scale(self, i):
        return self.angle_scale if self.kinds[i] == "angle" else 1.0

    def unit_name(self, i):
        """The file's unit text of coordinate ``i``."""
        return self.angle_unit if self.kinds[i] == "angle" else self.length_unit

    def to_internal(self, name, value):
        return float(value) * self.unit_scale(self.index_of(name))

    def to_file(self, name, value):
        return value / self.unit_scale(self.index_of(name))

    def _values_out(self, q):
        scale = self.__dict__.get("_unit_scale")  # built once (units never change)
        if scale is None or len(scale) != len(q):
            scale = self._unit_scale = np.array([self.unit_scale(i) for i in range(len(q))])
        return dict(zip(self.coordinates, (q / scale).tolist()))

    # -- posing ------------------------------------------------------------------
    def _screw_powers(self):
        """Powers of every primitive's screw (:func:`spatial.screw_powers`), (P, 3, 4, 4), one
        primitive per coordinate; kept until the geometry changes."""
        if self._powers is None:
            screws = [p.screw for j in self.joints.values() for p in j.primitives]
            self._powers = spatial.screw_powers(np.array(screws).reshape(-1, 6))
        return self._powers

    def joint_transforms(self, q):
        """Displacement of each joint's child relative to its parent, for internal ``q``.

        ``q`` of shape (n,) gives 4x4 matrices; a stack (B, n) gives (B, 4, 4) stacks, all
        primitive exponentials in one vectorised call."""
        q = np.asarray(q, dtype=float)
        powers = self._screw_powers()
        eye = np.eye(4) if q.ndim == 1 else np.broadcast_to(np.eye(4), q.shape[:-1] + (4, 4))
        ex = spatial.exp_unit(powers, q - self.home) if q.shape[-1] else None
        out = {}
        for name, sl in self.slices.items():
            if sl.stop == sl.start:
                out[name] = eye
                continue
            e = ex[..., sl.start, :, :]
            for k in range(sl.start + 1, sl.stop):
                e = e @ ex[..., k, :, :]
            out[name] = e
        return out

    def link_poses(self, q):
        """Displacements from home of every link for internal coordinates ``q`` (n,) or a
        stack of them (B, n)."""
        q = np.asarray(q, dtype=float)
        if q.ndim == 1:
            return self._link_poses_one(q)
        if q.shape[0] > 8 and q.shape[1]:
            return self._link_poses_stack(q)
        es = self.joint_transforms(q)
        out = {self.ground: np.broadcast_to(np.eye(4), q.shape[:-1] + (4, 4))}
        for link in self.order[1:]:
            jname, sign = self.tree_parent[link]
            j = self.joints[jname]
            if sign > 0:
                out[link] = out[j.parent] @ es[jname]
            else:
                out[link] = out[j.child] @ spatial.inverse(es[jname])
        return {name: np.array(out[name]) for name in self.links}

    def _link_poses_one(self, q):
        """:meth:`link_poses` of one state: every primitive's exponential as one product of
        the rows ``(1, t, 1 - cos t, t - sin t)`` with the powers ``(I, [S], [S]^2, [S]^3)``
        (:func:`spatial.exp_unit`, same terms in the same order), then one product per
        link down the tree (a link on ground takes its joint's displacement itself)."""
        walk = self._powers_one
        if walk is None:
            powers = self._screw_powers()
            P = powers.shape[0]
            p16 = np.concatenate([np.broadcast_to(np.eye(4).reshape(1, 1, 16), (P, 1, 16)),
                                  powers.reshape(P, 3, 16)], axis=1)
            steps = []  # per link below ground: (link, link it hangs from or None for ground,
            #            its joint's primitives, walked forwards)
            for link in self.order[1:]:
                jname, sign = self.tree_parent[link]
                j = self.joints[jname]
                sl = self.slices[jname]
                up = j.parent if sign > 0 else j.child
                steps.append((link, None if up == self.ground else up, range(sl.start, sl.stop), sign > 0))
            walk = self._powers_one = (p16, steps)
        p16, steps = walk
        out = {self.ground: np.eye(4)}
        if len(q):
            th = q - self.home
            coef = np.empty((len(th), 1, 4))
            coef[:, 0, 0] = 1.0
            coef[:, 0, 1] = th
            coef[:, 0, 2] = 1 - np.cos(th)
            coef[:, 0, 3] = th - np.sin(th)
            ex = (coef @ p16).reshape(-1, 4, 4)
        for link, up, prims, forward in steps:
            if not prims:
                e = np.eye(4)
            else:
                e = ex[prims[0]]
                for k in prims[1:]:
                    e = e @ ex[k]
            if not forward:
                e = spatial.inverse(e)
            out[link] = e.copy() if up is None and forward else (e if up is None else out[up] @ e)
        return {name: out[name] for name in self.links}

    def link_poses_into(self, q, into):
        """:meth:`link_poses` of a stack ``q`` (B, n) written into ``into`` ({link: (B, 4, 4)}
        arrays, e.g. slices of a longer result); returns ``into``."""
        q = np.asarray(q, dtype=float)
        if q.shape[0] > 8 and q.shape[1]:
            return self._link_poses_stack(q, into)
        for name, mat in self.link_poses(q).items():
            into[name][...] = mat
        return into

    def _link_poses_stack(self, q, into=None):
        """:meth:`link_poses` of a stack (B, n), computed component-first (each entry of
        the transforms a row over the stack: elementwise products instead of many tiny
        4x4 ones): one product of the coefficient rows with the stacked powers gives every
        primitive's exponential (:func:`spatial.exp_unit`), then the joints and the tree.
        ``into``: arrays to write the results in (:meth:`link_poses_into`)."""
        powers = self._screw_powers()
        B = q.shape[0]
        th = (q - self.home).T  # (n, B)
        coef = np.empty((th.shape[0], 3, B))
        coef[:, 0] = th
        coef[:, 1] = 1.0 - np.cos(th)
        coef[:, 2] = th - np.sin(th)
        p12 = np.ascontiguousarray(powers[:, :, :3, :].reshape(-1, 3, 12).transpose(0, 2, 1))
        E = np.moveaxis((p12 @ coef).reshape(-1, 3, 4, B), 0, 2)  # (3, 4, n, B)
        E[0, 0] += 1.0
        E[1, 1] += 1.0
        E[2, 2] += 1.0
        eye = np.zeros((3, 4, B))
        eye[0, 0] = eye[1, 1] = eye[2, 2] = 1.0
        out = {self.ground: eye}
        for link in self.order[1:]:
            jname, sign = self.tree_parent[link]
            j = self.joints[jname]
            sl = self.slices[jname]
            t = eye
            if sl.stop > sl.start:
                t = E[:, :, sl.start]
                for k in range(sl.start + 1, sl.stop):
                    t = spatial.compose_soa(t, E[:, :, k])
            out[link] = (spatial.compose_soa(out[j.parent], t) if sign > 0
                         else spatial.compose_soa(out[j.child], spatial.inverse_soa(t)))
        res = {}
        for name in self.links:
            mat = np.empty((B, 4, 4)) if into is None else into[name]
            mat[:, :3, :] = np.moveaxis(out[name], -1, 0)
            mat[:, 3, :3] = 0.0
            mat[:, 3, 3] = 1.0
            res[name] = mat
        return res

    def _held_from(self, values):
        held = {}
        for name, v in (values or {}).items():
            i = self.index_of(name)
            try:
                fv = float(v)
            except (TypeError, ValueError):
                raise SpecError(f"value of {name!r} must be a number, got {v!r}", source=self.source) from None
            if not math.isfinite(fv):
                raise SpecError(f"value of {name!r} must be finite, got {v!r}", source=self.source)
            held[i] = fv * self.unit_scale(i)
        return held

    def check_limits(self, held):
        for i, v in held.items():
            lim = self.joints[self.owner[self.coordinates[i]]].limits[self.local_index(i)]
            if lim is not None and not lim[0] - 1e-12 <= v <= lim[1] + 1e-12:
                c = self.coordinates[i]
                u = self.unit_scale(i)
                raise LimitError(reason=Reason("limit", joint=c, value=v / u, bounds=(lim[0] / u, lim[1] / u),
                                               unit=self.unit_name(i)))

    def local_index(self, i):
        return i - self.slices[self.owner[self.coordinates[i]]].start

    # -- export ----------------------------------------------------------------
    def to_dict(self):
        """The mechanism-file structure (file units) of this mechanism."""
        out = {"format": FORMAT, "mechanism": {"length_unit": self.length_unit,
                                               "angle_unit": self.angle_unit, "ground": self.ground}}
        if self.name:
            out["mechanism"]["name"] = self.name
        out["links"] = {n: ({"object": l.object} if l.object != n else {}) for n, l in self.links.items()}
        out["joints"] = {n: dict(j.source) for n, j in self.joints.items()}
        if self.couplings:
            out["couplings"] = {n: ({"leader": c.leader, "follower": c.follower, "ratio": c.ratio,
                                     "offset": c.offset} if c.law is None else
                                    {"leader": c.leader, "follower": c.follower, **c.spec})
                                for n, c in self.couplings.items()}
        if self.measures:
            ms = {}
            for n, m in self.measures.items():
                if m.type == "point":
                    ms[n] = {"type": "point", "link": m.a[0], "at": list(m.a[1])}
                elif m.type == "distance":
                    ms[n] = {"type": "distance", "a": {"link": m.a[0], "at": list(m.a[1])},
                             "b": {"link": m.b[0], "at": list(m.b[1])}}
                elif m.type == "angle":
                    ms[n] = {"type": "angle", "a": {"link": m.a[0], "axis": list(m.a[1])},
                             "b": {"link": m.b[0], "axis": list(m.b[1])}}
                else:
                    ms[n] = {"type": "rate", "of": m.of, "per": m.per}
            out["measures"] = ms
        return out

    def __repr__(self):
        return (f"{type(self).__name__}({self.name or self.source!r}: {len(self.links)} links, "
                f"{len(self.joints)} joints, {len(self.loops)} loops)")

