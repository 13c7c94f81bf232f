"""Animation on the host: reading the scene's joint-value F-curves and writing link keys.

Keys are written through the slotted-action API (action -> slot -> layer -> keyframe
strip -> channelbag -> F-curves) with ``keyframe_points.add`` + ``foreach_set``,
never one call per key; this works on Blender 4.4+ and 5.x alike.

Baked actions carry the custom property ``jointwise_bake``; an action the object had
before is remembered in ``jointwise_previous`` and put back by ``clear``.
"""
from __future__ import annotations

import re

import bpy
import numpy as np

_PATH = re.compile(r'^jointwise\.joints\[(?:(\d+)|"((?:[^"\\]|\\.)*)")\]\.(value|angle|length)$')
TAG = "jointwise_bake"
PREVIOUS = "jointwise_previous"
KEPT = "jointwise_kept"  # on an earlier action: we gave it a fake user while it is set aside
LINEAR = None  # enum value of 'LINEAR' for foreach_set, found once


# -- reading F-curves of the scene ----------------------------------------------------------

def action_fcurves(action, slot=None):
    """All F-curves of ``action`` for ``slot`` (all slots when None); 4.4+ and 5.x."""
    out = []
    layers = getattr(action, "layers", None)
    if layers is not None and len(layers):
        for layer in layers:
            for strip in layer.strips:
                slots = [slot] if slot is not None else list(action.slots)
                for s in slots:
                    bag = strip.channelbag(s) if s is not None else None
                    if bag is not None:
                        out.extend(bag.fcurves)
        return out
    legacy = getattr(action, "fcurves", None)  # 4.x legacy actions
    return list(legacy) if legacy is not None else []


def scene_fcurves(scene):
    ad = scene.animation_data
    if ad is None or ad.action is None:
        return []
    return action_fcurves(ad.action, getattr(ad, "action_slot", None))


def coordinate_fcurves(scene):
    """{coordinate name: (fcurve, view)} for F-curves on ``jointwise.joints[..]``;
    ``view`` is value, angle or length (all the same number in host units)."""
    jw = scene.jointwise
    out = {}
    for fc in scene_fcurves(scene):
        m = _PATH.match(fc.data_path)
        if not m or fc.mute:
            continue
        if m.group(1) is not None:
            i = int(m.group(1))
            if i >= len(jw.joints):
                continue
            name = jw.joints[i].name
        else:
            name = m.group(2).replace('\\"', '"')
            if name not in jw.joints:
                continue
        out.setdefault(name, (fc, m.group(3)))
    return out


def scene_curves(scene, create=True):
    """The F-curve collection of the scene's own action (joint-value keys, measures): the
    slotted action, its channelbag and slot are made when missing and ``create``, as the
    host's own keying would (None when missing and not ``create``)."""
    ad = scene.animation_data
    if ad is None:
        if not create:
            return None
        ad = scene.animation_data_create()
    action = ad.action
    if action is None:
        if not create:
            return None
        action = ad.action = bpy.data.actions.new(f"{scene.name} joint values")
    if not len(getattr(action, "layers", ())) and len(getattr(action, "fcurves", ())):
        return action.fcurves  # a 4.x legacy action keeps its F-curves on itself
    slot = getattr(ad, "action_slot", None)
    if slot is None:
        if not create:
            return None
        slot = action.slots.new(id_type='SCENE', name=scene.name)
        ad.action_slot = slot
    if not len(action.layers):
        if not create:
            return None
        action.layers.new("Layer").strips.new(type='KEYFRAME')
    bag = action.layers[0].strips[0].channelbag(slot, ensure=create)
    return bag.fcurves if bag is not None else None


def key_value(scene, data_path, frame, value):
    """One key on the scene's own action (the joint-value key button), written on the
    F-curve directly (see :func:`scene_curves`)."""
    curves = scene_curves(scene)
    fc = next((f for f in curves if f.data_path == data_path and f.array_index == 0), None)
    if fc is None:
        fc = curves.new(data_path, index=0)
    fc.keyframe_points.insert(frame, value)
    fc.update()
    return fc


def remap_coordinate_paths(scene, mapping):
    """Keep the scene's joint-value animation on the right items when items are removed:
    ``mapping`` old index -> new index, or None to drop that item's F-curves (data paths
    address items by index, so they must be rewritten)."""
    ad = scene.animation_data
    if ad is None or ad.action is None:
        return
    for bag in _bags(ad.action):
        for fc in list(bag.fcurves):
            m = _PATH.match(fc.data_path)
            if not m or m.group(1) is None:
                continue
            new = mapping.get(int(m.group(1)), int(m.group(1)))
            if new is None:
                bag.fcurves.remove(fc)
            else:
                fc.data_path = f"jointwise.joints[{new}].{m.group(3)}"


def value_path(item_index, kind):
    """Data path of the animatable value of joint item ``item_index``."""
    return f"jointwise.joints[{item_index}].{'length' if kind == 'length' else 'angle'}"


def retarget_value_paths(scene):
    """F-curves on ``joints[i].value`` (files saved before the value was split by kind)
    moved to ``joints[i].angle`` or ``.length``. True when any moved."""
    ad = scene.animation_data
    if ad is None or ad.action is None:
        return False
    jw = scene.jointwise
    moved = False
    for bag in _bags(ad.action):
        for fc in list(bag.fcurves):
            m = _PATH.match(fc.data_path)
            if not m or m.group(3) != "value":
                continue
            i = int(m.group(1)) if m.group(1) is not None else jw.joints.find(m.group(2).replace('\\"', '"'))
            if not 0 <= i < len(jw.joints):
                continue
            new = value_path(i, jw.joints[i].kind)
            if any(f.data_path == new for f in bag.fcurves):
                continue
            fc.data_path = new
            moved = True
    return moved


def _bags(action):
    """Every channelbag of ``action`` (or the legacy action itself on 4.x)."""
    bags = []
    if getattr(action, "layers", None) is not None and len(action.layers):
        for layer in action.layers:
            for strip in layer.strips:
                for s in action.slots:
                    bag = strip.channelbag(s)
                    if bag is not None:
                        bags.append(bag)
    elif getattr(action, "fcurves", None) is not None:
        bags.append(action)
    return bags


# -- writing keys ---------------------------------------------------------------------------

def linear_interpolation(fc):
    """The enum value of 'LINEAR' for ``keyframe_points.foreach_set`` (found once)."""
    global LINEAR
    if LINEAR is None:
        kps = fc.keyframe_points
        old = kps[0].interpolation
        kps[0].interpolation = 'LINEAR'
        buf = np.zeros(len(kps), dtype=np.int32)
        kps.foreach_get("interpolation", buf)
        LINEAR = int(buf[0])
        kps[0].interpolation = old
    return LINEAR


def new_action(obj):
    """A fresh tagged action + slot assigned to ``obj`` (remembering a foreign action)."""
    ad = obj.animation_data or obj.animation_data_create()
    old = ad.action
    previous = ""
    if old is not None:
        if old.get(TAG):
            previous = old.get(PREVIOUS, "")
            ad.action = None
            if old.users == 0:
                bpy.data.actions.remove(old)
        else:
            previous = old.name
            if not old.use_fake_user:  # keep it through save/reload while unassigned
                old.use_fake_user = True
                old[KEPT] = 1
            ad.action = None
    action = bpy.data.actions.new(f"{obj.name} motion")
    action[TAG] = 1
    action[PREVIOUS] = previous
    slot = action.slots.new(id_type='OBJECT', name=obj.name)
    ad.action = action
    if getattr(ad, "action_slot", None) != slot:
        ad.action_slot = slot
    layer = action.layers.new("Layer")
    strip = layer.strips.new(type='KEYFRAME')
    bag = strip.channelbag(slot, ensure=True)
    return action, bag


def write_channels(obj, frames, channels):
    """Write keys for every channel at once: ``keyframe_points.add`` + ``foreach_set``."""
    action, bag = new_action(obj)
    n = len(frames)
    co = np.empty(2 * n, dtype=np.float32)
    co[0::2] = frames
    groups = getattr(bag, "groups", None)
    group = groups.new("Object Transforms") if groups is not None else None
    for (path, index), values in channels.items():
        fc = bag.fcurves.new(path, index=index)
        if group is not None:
            fc.group = group
        fc.keyframe_points.add(n)
        co[1::2] = values
        fc.keyframe_points.foreach_set("co", co)
        lin = linear_interpolation(fc)
        fc.keyframe_points.foreach_set("interpolation", np.full(n, lin, dtype=np.int32))
        fc.update()
    return action


def is_baked(obj):
    """The object plays keys written by a bake."""
    ad = obj.animation_data
    return ad is not None and ad.action is not None and bool(ad.action.get(TAG))


def clear(obj):
    """Remove the baked action of ``obj`` (put back the one it had before). True if any."""
    ad = obj.animation_data
    if ad is None or ad.action is None or not ad.action.get(TAG):
        return False
    action = ad.action
    previous = action.get(PREVIOUS, "")
    ad.action = None
    if previous and previous in bpy.data.actions:
        prev = bpy.data.actions[previous]
        ad.action = prev
        if getattr(ad, "action_slot", None) is None and len(getattr(prev, "slots", ())):
            ad.action_slot = prev.slots[0]
        if prev.get(KEPT):
            prev.use_fake_user = False
            del prev[KEPT]
    if action.users == 0:
        bpy.data.actions.remove(action)
    return True
