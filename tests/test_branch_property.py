"""Branch continuity: sweeps and follow never change assembly branch without flagging it.

References: the closed forms in tests/branch_campaign.py (four-bar by circle intersection,
the geometric form of Freudenstein's equation, Norton, *Design of Machinery*, sec. 4.5;
slider-crank x = r cos t +/- sqrt(l^2 - (r sin t - e)^2), Norton sec. 4.6; RSSR by the law
of cosines about the rocker axis).  The property: between two neighbouring rows that both
closed and are not flagged singular, the output stays on the closed-form branch it was on.
"""
import numpy as np
import pytest

import jointwise
import branch_campaign as B

# the issue's example: a drag-link four-bar close to its change point (s + l = 1025.1,
# p + q = 1027.6 mm), swept one turn from home in 1-degree steps
EXAMPLE = """
format = 1
[mechanism]
name = "near change point"
length_unit = "mm"
angle_unit = "deg"
ground = "frame"
[links.frame]
[links.crank]
[links.coupler]
[links.rocker]
[joints.crank_pin]
type = "revolute"
parent = "frame"
child = "crank"
point = [0, 0, 0]
axis = [0, 0, 1]
home = 334.48
drive = true
[joints.coupler_pin]
type = "revolute"
parent = "crank"
child = "coupler"
point = [649.18, -309.92, 0]
axis = [0, 0, 1]
[joints.rocker_pin]
type = "revolute"
parent = "coupler"
child = "rocker"
point = [-34.73, 2.14, 0]
axis = [0, 0, 1]
[joints.rocker_pivot]
type = "revolute"
parent = "frame"
child = "rocker"
point = [273.44, 0, 0]
axis = [0, 0, 1]
"""


def _example_closed_form(crank_deg):
    """Rocker coordinate (deg from home) on the home branch, by circle intersection.

    Crank pin A on the circle |A| = |A0| about the origin; rocker pin B on the circle about
    O4 = (273.44, 0) of radius |B0 - O4|, with |B - A| = |B0 - A0|; the branch is the sign
    of cross(B - A, O4 - B) at home."""
    A0, B0, O4 = np.array([649.18, -309.92]), np.array([-34.73, 2.14]), np.array([273.44, 0.0])
    a, b, c = np.linalg.norm(A0), np.linalg.norm(B0 - A0), np.linalg.norm(B0 - O4)
    t = np.arctan2(A0[1], A0[0]) + np.radians(crank_deg - 334.48)  # the crank turns from home
    A = a * np.stack([np.cos(t), np.sin(t)], axis=-1)
    e = O4 - A
    dist = np.linalg.norm(e, axis=-1)
    along = (b * b - c * c + dist * dist) / (2 * dist)
    h = np.sqrt(b * b - along * along)
    mid = A + along[:, None] * e / dist[:, None]
    perp = np.stack([e[:, 1], -e[:, 0]], axis=-1) / dist[:, None]

    def cross(A, B):
        return (B - A)[..., 0] * (O4 - B)[..., 1] - (B - A)[..., 1] * (O4 - B)[..., 0]
    home_sign = np.sign(cross(A0, B0))
    cands = [mid + h[:, None] * perp, mid - h[:, None] * perp]
    B = np.where((np.sign(cross(A, cands[0])) == home_sign)[:, None], cands[0], cands[1])
    ang = np.degrees(np.arctan2(B[:, 1], B[:, 0] - O4[0]))
    home = np.degrees(np.arctan2(B0[1], B0[0] - O4[0]))
    return (ang - home + 180) % 360 - 180


def test_issue_example_stays_on_its_branch():
    m = jointwise.loads(EXAMPLE, source="example.toml")
    v = np.linspace(334.48, 694.48, 361)
    ref = _example_closed_form(v)
    # the row the issue names: pose --set crank_pin=361.48 gives 12.29 deg
    assert ref[27] == pytest.approx(12.29, abs=0.005)
    assert m.pose({"crank_pin": 361.48}).joints["rocker_pivot"] == pytest.approx(ref[27], abs=1e-6)
    for sw in (m.sweep("crank_pin", v), m.follow({"crank_pin": v})):
        assert sw.converged.all()
        d = (sw.joints["rocker_pivot"] - ref + 180) % 360 - 180
        assert np.abs(d).max() < 1e-6
        assert sw.joints["rocker_pivot"][27] == pytest.approx(12.293, abs=1e-3)  # not -6.72


@pytest.mark.parametrize("kind", list(B.KINDS))
def test_random_linkages_have_no_unflagged_branch_switch(kind):
    """Seeded cases, half of them with near-toggle dimensions, swept or followed."""
    rng = np.random.default_rng({"four-bar": 11, "slider-crank": 12, "RSSR": 13}[kind])
    n = 8 if kind == "RSSR" else 12
    for i in range(n):
        case = B.KINDS[kind](rng, near_toggle=bool(i % 2))
        (switches, wrong), sw = B.run_case(case, "sweep" if i % 4 < 2 else "follow")
        assert switches == 0, (kind, i, case["dims"])
        assert wrong == 0, (kind, i, case["dims"])
        assert sw.converged.any()


def test_labels_see_a_switch():
    """The checker itself: a sweep result moved to the other branch is counted."""
    rng = np.random.default_rng(5)
    case = B.four_bar_case(rng)
    sw = B._mech(case["data"]).sweep(case["drive"], case["values"])
    ref = case["closed"](sw.joints["crank"])
    k = int(np.flatnonzero(sw.converged & np.isfinite(ref).all(axis=0))[10])
    lab, _ = B.branch_labels(case, sw.joints["rocker"], sw.joints["crank"])
    other = ref[1 - lab[k], k]
    sw.joints["rocker"] = sw.joints["rocker"].copy()
    sw.joints["rocker"][k + 1:] = ref[1 - lab[k], k + 1:]
    assert np.isfinite(other)
    assert B.check_sweep(case, sw)[0] >= 1


def _rocker_side(a, b, c, d, crank_deg, rocker_deg):
    """Which side of the line crank pin -> rocker pivot the rocker pin lies on (+1 / -1):
    the two assemblies of a four-bar at one crank angle are mirror images about that line
    (circle intersection, Norton sec. 4.5), so a Grashof crank-rocker turned by its crank,
    which has no singular position, keeps its side all turn long."""
    t2, t4 = np.radians(crank_deg), np.radians(rocker_deg)
    ax, ay = a * np.cos(t2), a * np.sin(t2)
    bx, by = d + c * np.cos(t4), c * np.sin(t4)
    return np.sign((d - ax) * (by - ay) - (0.0 - ay) * (bx - ax))


@pytest.mark.parametrize("a, b, c, rows, start", [
    (49.9, 100.0, 50.5, 25, 137.0),  # a coarse step (15 deg) from 167 lands near the mirror
    (49.9, 100.0, 50.5, 5, 60.0),
    (40.19, 75.92, 64.33, 5, 107.4),
    (42.82, 99.32, 43.71, 17, 30.6),
])
def test_coarse_sweep_of_a_grashof_crank_rocker_keeps_its_assembly(a, b, c, rows, start):
    # Grashof: shortest + longest <= the other two, crank shortest (common practice): the
    # crank turns fully with no dead point, so no row may change side and none is singular;
    # a step certified near the prediction but with the Jacobian's orientation turned is a
    # jump to the mirrored assembly and must be solved again from the row before
    from sweep_fixtures import fourbar_toml, load
    d = 100.0
    links = sorted([a, b, c, d])
    assert links[0] == a and links[0] + links[3] <= links[1] + links[2]
    m = load(fourbar_toml(a, b, c, d, theta2=start))
    vals = np.linspace(start, start + 360.0, rows)
    sw = m.sweep("crank", vals)
    assert sw.converged.all()
    side = _rocker_side(a, b, c, d, vals, sw.joints["rocker"])
    assert (side == side[0]).all(), np.flatnonzero(side != side[0])
    assert not sw.singular.any()


def test_a_pose_past_a_change_point_says_so():
    # parallelogram four-bar (a = c, b = d): at crank 180 deg the parallelogram and the
    # antiparallelogram assemblies meet (a change point, Grashof's equality case); a pose from
    # 150 to 210 deg passes it, and past it the orientation-keeping assembly is the other one,
    # so the pose must say that its path passed close to a singular position; a pose that
    # stays clear of it (150 -> 170, rocker = crank on the parallelogram) says nothing
    from sweep_fixtures import fourbar_toml, load
    m = load(fourbar_toml(40, 100, 40, 100, theta2=150.0))
    start = m.pose({"crank": 150.0})
    past = m.pose({"crank": 210.0}, start=start)
    assert past.converged
    assert any("passed close to a singular position" in n for n in past.notes)
    clear = m.pose({"crank": 170.0}, start=start)
    assert abs(clear.joints["rocker"] - 170.0) < 1e-6
    assert not any("singular position" in n for n in clear.notes)


@pytest.mark.parametrize("rows, start", [(4, 60.0), (5, 90.0), (9, 90.0)])
def test_a_coarse_step_from_a_change_point_is_flagged_or_stays(rows, start):
    # parallelogram four-bar sampled exactly at its change point (crank 180 deg) with long
    # steps: past that row the sweep may go on as parallelogram (rocker = crank) or as
    # antiparallelogram, but the first row that leaves the parallelogram must be flagged
    from sweep_fixtures import fourbar_toml, load
    m = load(fourbar_toml(40, 100, 40, 100, theta2=start))
    vals = np.linspace(start, start + 360.0, rows)
    sw = m.sweep("crank", vals)
    para = np.abs((sw.joints["rocker"] - vals + 180.0) % 360.0 - 180.0) < 1e-6
    at_change = np.minimum(vals % 180.0, 180.0 - vals % 180.0) < 1e-9  # crank 0 or 180 deg
    left = np.flatnonzero(sw.converged & ~para & ~at_change)
    if left.size:
        assert sw.singular[left[0]], (left, np.flatnonzero(sw.singular))


def test_singular_flags_do_not_depend_on_earlier_sweeps():
    # the same sweep asked twice of one mechanism, with another sweep between, flags the
    # same rows, and the rows exactly at the parallelogram's change points (crank 180 and
    # 360 deg, where its two assemblies meet and the Jacobian loses rank) are among them
    from sweep_fixtures import fourbar_toml, load
    m = load(fourbar_toml(40, 100, 40, 100, theta2=90.0))
    vals = np.linspace(90.0, 450.0, 5)
    first = m.sweep("crank", vals).singular.copy()
    m.sweep("crank", np.linspace(170.0, 179.99, 4))  # ends close to, not at, the change point
    second = m.sweep("crank", vals).singular
    assert (first == second).all()
    assert first[1] and first[3]


def test_two_crank_rockers_on_one_crank_keep_their_assemblies():
    # two Grashof crank-rockers on one crank arm are one block (they share the crank joint);
    # with the crank held they are independent, and the block's Jacobian determinant is the
    # product of theirs, so a coarse step that lands both on their mirrored assemblies keeps
    # its sign: each part's orientation must be read on its own.  Reference: each loop's
    # two assemblies by circle intersection (tests/mechanisms.four_bar_positions).
    import mechanisms as M
    a, b, c, d, home = 49.9, 100.0, 50.5, 100.0, 60.0
    data = M.four_bar(a, b, c, d, home, "open")
    data["links"]["coupler2"] = {}
    data["links"]["rocker_arm2"] = {}
    (ax, ay), (bx, by), th4 = M.four_bar_positions(a, b, c, d, home, "open")
    data["joints"]["pin_a2"] = M.revolute("crank_arm", "coupler2", (ax, ay))
    data["joints"]["pin_b2"] = M.revolute("coupler2", "rocker_arm2", (bx, by))
    data["joints"]["rocker2"] = M.revolute("frame", "rocker_arm2", (d, 0), home=th4)
    m = B._mech(data)
    vals = home + np.linspace(0.0, 360.0, 5)
    sw = m.sweep("crank", vals)
    assert sw.converged.all() and not sw.singular.any()
    for name in ("rocker", "rocker2"):
        for t, r in zip(vals, sw.joints[name]):
            want = M.four_bar_positions(a, b, c, d, float(t), "open")[2]
            assert abs((r - want + 180.0) % 360.0 - 180.0) < 1e-6, (name, t, r, want)


def test_a_single_pose_of_two_crank_rockers_on_one_crank_keeps_their_assemblies():
    # the same for one pose: a 72-degree step of two different crank-rockers on one crank
    # arm (the second a scaled, slightly changed copy) flipped both loops, whose product kept
    # the block's orientation; each loop's own orientation is read now
    import mechanisms as M
    g1 = (21.390848604473696, 90.53072917737052, 30.992484215676487, 100.0)
    g2 = (33.40587846255194, 141.4781653564241, 48.42485853000294, 156.19697279479254)
    home = 192.3577516804799
    data = M.four_bar(*g1, home, "open")
    data["links"]["coupler2"] = {}
    data["links"]["rocker_arm2"] = {}
    (ax, ay), (bx, by), th4 = M.four_bar_positions(*g2, home, "open")
    data["joints"]["pin_a2"] = M.revolute("crank_arm", "coupler2", (ax, ay))
    data["joints"]["pin_b2"] = M.revolute("coupler2", "rocker_arm2", (bx, by))
    data["joints"]["rocker2"] = M.revolute("frame", "rocker_arm2", (g2[3], 0), home=th4)
    m = B._mech(data)
    before = m.pose({"crank": home + 288.0})
    after = m.pose({"crank": home + 360.0}, start=before)
    for p, t in ((before, home + 288.0), (after, home + 360.0)):
        assert p.converged
        for name, g in (("rocker", g1), ("rocker2", g2)):
            want = M.four_bar_positions(*g, t, "open")[2]
            assert abs((p.joints[name] - want + 180.0) % 360.0 - 180.0) < 1e-6, (name, t)
