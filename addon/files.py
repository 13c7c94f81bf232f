"""Mechanism files <-> the scene: import (bind links, make anchors) and export."""
from __future__ import annotations

import json
import math

import numpy as np

from . import animation, measures, properties
from .properties import ANCHOR_TAG
from . import scene as sc
from .convert import (METRES, SceneError, angle_file_to_host, file_number, keep_file_geometry,
                      matrix_core_to_stored, orientation, tidy)


def validate_file_objects(scene, mech):
    """Scene objects for every link of a loaded mechanism: {link: object or None}."""
    out = {}
    missing = []
    for name, link in mech.links.items():
        obj = scene.objects.get(link.object)
        if obj is None:
            if name == mech.ground:
                out[name] = None  # the world is the ground
                continue
            missing.append(f"{name!r} -> object {link.object!r}")
        out[name] = obj
    if missing:
        raise SceneError(f"{mech.source}: no scene object for link {', '.join(missing)}")
    return out


def import_mechanism(scene, mech, objects, anchor_collection):
    """Store a loaded mechanism (file units) in ``scene.jointwise`` (host units); the
    objects' current placements become home. Returns the anchors made."""
    import bpy
    jw = scene.jointwise
    k = sc.length_file_to_host(scene, mech.length_unit)  # angles: the core holds radians already
    data = mech.to_dict()
    for jname, j in mech.joints.items():  # everything checked before anything changes
        if j.type == "helical" and not math.isfinite(float(j.lead)):
            raise SceneError(f"{mech.source}: joints.{jname}: a lead angle of 90 degrees is a "
                             f"pure slide; model it as a prismatic joint")
    old_names = [it.name for it in jw.joints]
    remove_anchors(scene)
    jw.links.clear()
    jw.joints.clear()
    jw.couplings.clear()
    jw.name_text = mech.name or ""
    jw.ground = mech.ground
    jw.file_length_unit = mech.length_unit
    jw.file_angle_unit = mech.angle_unit
    jw.measures_json = json.dumps(data.get("measures", {}))
    jw.geometry_json = json.dumps(_file_numbers(mech, data))
    for name in mech.links:
        link = jw.links.add()
        link.name = name
        obj = objects[name]
        link.object = obj
        link.object_name = obj.name if obj is not None else ""
        link.home = matrix_core_to_stored(sc.matrix_host_to_core(obj.matrix_world) if obj else np.eye(4))
    size = max(float(getattr(mech, "size", 1.0)) * k, 1e-6)
    anchors = []
    with properties.quiet():  # items written as a whole: no per-field hooks
        for jname, j in mech.joints.items():
            src = data["joints"][jname]
            anchor = None
            if j.type != "fixed":
                anchor = bpy.data.objects.new(f"joint {jname}", None)
                anchor.empty_display_type = 'ARROWS'
                anchor.empty_display_size = 0.15 * size
                anchor[ANCHOR_TAG] = jname
                anchor_collection.objects.link(anchor)
                frame = np.eye(4)
                frame[:3, :3] = orientation(j.axis, j.axis2)
                frame[:3, 3] = np.asarray(j.point, dtype=float) * k
                anchor.matrix_world = sc.matrix_core_to_host(frame)
                parent_obj = objects.get(j.parent)
                if parent_obj is not None:
                    anchor.parent = parent_obj
                    anchor.matrix_parent_inverse = parent_obj.matrix_world.inverted()
                    anchor.matrix_world = sc.matrix_core_to_host(frame)
                anchors.append(anchor)
            kinds = list(j.kinds) or ["angle"]
            for i, c in enumerate(j.coordinates or [jname]):  # a fixed joint keeps one item
                item = jw.joints.add()
                item.name = c
                item.joint = jname
                item.slot = i + 1
                item.type = j.type
                item.parent = j.parent
                item.child = j.child
                item.kind = kinds[i]
                f = k if kinds[i] == "length" else 1.0  # core holds radians already
                item.home = float(j.home[i]) * f if i < len(j.home) else 0.0
                lim = j.limits[i] if i < len(j.limits) else None  # noqa: E501
                item.use_limits = lim is not None
                if lim is not None:
                    item.limit_min, item.limit_max = float(lim[0]) * f, float(lim[1]) * f
                item.drive = bool(j.drive)
                item.anchor = anchor
                item.use_axis2 = "axis2" in src
                if j.type == "helical":
                    item.lead = abs(float(j.lead)) * k
                    item.hand = "left" if float(j.lead) < 0 or src.get("hand") == "left" else "right"
                    item.thread = str(src.get("thread", ""))
                if anchor is not None:
                    item.anchor_home = matrix_core_to_stored(frame)
    with properties.quiet():
        for item in jw.joints:
            item.value = item.last = item.home
    for cname, c in mech.couplings.items():
        cp = jw.couplings.add()
        cp.name = cname
        cp.leader, cp.follower = c.leader, c.follower
        fl = sc.value_factor_file_to_host(scene, mech.coordinate_kind(c.follower), mech.length_unit, mech.angle_unit)
        ll = sc.value_factor_file_to_host(scene, mech.coordinate_kind(c.leader), mech.length_unit, mech.angle_unit)
        if c.law is not None:  # a motion law: its keys in host units
            from jointwise.couplings import scale_spec
            cp.law_json = json.dumps(scale_spec(c.spec, ll, fl))
            continue
        cp.ratio = float(c.ratio) * fl / ll
        cp.offset = float(c.offset) * fl
    # animation of joint values addresses items by index: keep it on the same names
    new_index = {it.name: i for i, it in enumerate(jw.joints)}
    animation.remap_coordinate_paths(scene, {i: new_index.get(n) for i, n in enumerate(old_names)})
    measures.import_from(scene, mech)
    sc.clear_cache()
    return anchors


def remove_anchors(scene):
    import bpy
    for item in scene.jointwise.joints:
        m = item.anchor
        if m is not None and m.get(ANCHOR_TAG) is not None:
            try:
                bpy.data.objects.remove(m, do_unlink=True)
            except (ReferenceError, RuntimeError):
                pass


def export_dict(scene, length_unit=None, angle_unit=None):
    """The mechanism-file structure of the scene's mechanism, in file units."""
    jw = scene.jointwise
    host = sc.mechanism_dict_from_scene(scene)
    lu = length_unit or jw.file_length_unit
    au = angle_unit or jw.file_angle_unit
    k = 1.0 / sc.length_file_to_host(scene, lu)
    a = 1.0 / angle_file_to_host(au)
    out = {"format": 1, "mechanism": {}}
    if jw.name_text:
        out["mechanism"]["name"] = jw.name_text
    out["mechanism"].update({"length_unit": lu, "angle_unit": au, "ground": jw.ground})
    out["links"] = {}
    for link in jw.links:
        obj = sc.link_object(scene, link)
        out["links"][link.name] = {"object": obj.name} if obj is not None else {}
    out["joints"] = {}
    groups = sc.items_by_joint(jw)
    try:
        geometry = json.loads(jw.geometry_json) if jw.geometry_json else {}
    except ValueError:
        geometry = {}
    for jname, jd in host["joints"].items():
        items = groups[jname]
        first = items[0]

        def f(it):
            return k if it.kind == "length" else a
        e = {"type": jd["type"], "parent": jd["parent"], "child": jd["child"]}
        if "point" in jd:
            e["point"] = [tidy(v * k) for v in jd["point"]]
            e["axis"] = [tidy(v) for v in jd["axis"]]
        if "axis2" in jd:
            e["axis2"] = [tidy(v) for v in jd["axis2"]]
        keep_file_geometry(e, geometry.get(jname, {}), lu == jw.file_length_unit)
        same = lu == jw.file_length_unit and au == jw.file_angle_unit
        original = geometry.get(jname, {}) if same else {}
        homes = [tidy(it.home * f(it)) for it in items]
        e["home"] = homes[0] if len(homes) == 1 else homes
        if "home" in original:  # a number for every coordinate, or one per coordinate
            old = original["home"]
            e["home"] = file_number(e["home"], old if isinstance(old, list) or len(homes) == 1
                                    else [old] * len(homes))
        if any(it.use_limits for it in items):
            lims = [[tidy(it.limit_min * f(it)), tidy(it.limit_max * f(it))] for it in items]
            e["limits"] = lims[0] if len(lims) == 1 else lims
            if "limits" in original:
                old = original["limits"]
                if len(lims) > 1 and isinstance(old, list) and old and not isinstance(old[0], list):
                    old = [old] * len(lims)
                e["limits"] = file_number(e["limits"], old)
        if first.drive:
            e["drive"] = True
        if first.type == "helical":
            lead = abs(first.lead) * k
            if first.thread and _thread_matches(first.thread, lead, lu):
                e["thread"] = first.thread
            else:
                e["lead"] = file_number(tidy(lead), original.get("lead"))
            e["hand"] = first.hand
        out["joints"][jname] = e
    same_units = lu == jw.file_length_unit and au == jw.file_angle_unit
    if jw.couplings:
        out["couplings"] = {}
        for c in jw.couplings:
            fi, li = jw.joints.get(c.follower), jw.joints.get(c.leader)
            ff = (k if fi.kind == "length" else a) if fi else 1.0
            lf = (k if li.kind == "length" else a) if li else 1.0
            if c.law_json:  # a motion law: back from host units to the file's
                from jointwise.couplings import scale_spec
                out["couplings"][c.name] = {"leader": c.leader, "follower": c.follower,
                                            **scale_spec(json.loads(c.law_json), lf, ff)}
                continue
            exact = geometry.get(COUPLINGS, {}).get(c.name, {}) if same_units else {}
            out["couplings"][c.name] = {"leader": c.leader, "follower": c.follower,
                                        "ratio": file_number(tidy(c.ratio * ff / lf), exact.get("ratio")),
                                        "offset": file_number(tidy(c.offset * ff), exact.get("offset"))}
    ms = measures.export_entries(scene, lu)
    if ms:
        out["measures"] = ms
    return out


#: Key of the couplings' exact numbers in ``geometry_json`` (not a possible joint name).
COUPLINGS = "\u0000couplings"


def _file_numbers(mech, data):
    """The imported file's own numbers, kept for export (``geometry_json``): per joint its
    point and axes, home, limits and lead (file units); the couplings' ratio and offset."""
    out = {}
    for n, j in data.get("joints", {}).items():
        e = {k: list(j[k]) for k in ("point", "axis", "axis2") if k in j}
        for k in ("home", "limits"):
            if k in j:
                e[k] = j[k]
        joint = mech.joints.get(n)
        if joint is not None and joint.type == "helical" and math.isfinite(float(joint.lead)):
            e["lead"] = abs(float(joint.lead))
        out[n] = e
    if data.get("couplings"):
        out[COUPLINGS] = {n: {"ratio": c["ratio"], "offset": c.get("offset", 0.0)}
                          for n, c in data["couplings"].items() if "ratio" in c}  # motion laws: law_json
    return out


def _thread_matches(thread, lead_file, unit):
    try:
        from jointwise.joints import thread_lead
        return abs(thread_lead(thread)["lead"] * METRES["mm"] / METRES[unit] - lead_file) <= 1e-6 * max(1.0, lead_file)
    except Exception:  # an unknown preset: write the lead instead
        return False
