"""Tests of envelope.fences: per-panel ISO 13857 verdicts, ISO 13854 crushing points, ISO 13855 devices.

"REF" is shared/reference/safety-standards.md (values from secondary public sources, marks H/M/U).
The space is that of a planar two-link arm (see test_space.py) mounted 1.0 m above the floor: an
annulus 0.2 .. 0.8 m in the world x-z plane about (0, 0, 1.0), grown by the 50 mm capsule radius, so
its horizontal reach at height z is sqrt(0.85^2 - (z - 1)^2) (elementary geometry).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from envelope import fences as F
from envelope import space as S
from envelope.cell import Cell, Tool
from envelope.errors import InputError
from envelope.geometry import Body, Box, Capsule, Sphere, Zone
from envelope.kinematics import Arm

L1, L2, R_CAPSULE, MOUNT_Z = 0.5, 0.3, 0.05, 1.0
OUTER = L1 + L2 + R_CAPSULE  # 0.85 m


def planar_cell(zones=(), floor=0.0):
    arm = Arm.from_dh(
        a=[0, L1, L2, 0, 0, 0], alpha=[math.pi / 2, 0, 0, 0, 0, 0], d=[0] * 6, offset=[0] * 6,
        limits=[[-1e-6, 1e-6], [-math.pi, math.pi], [-math.pi, math.pi], [-1e-6, 1e-6], [-1e-6, 1e-6],
                [-1e-6, 1e-6]],
    )
    tiny = 1e-3
    links = [
        Body("link 0", 0, (Sphere([0, 0, 0], tiny),)),
        Body("link 1", 1, (Sphere([L1, 0, 0], tiny),)),
        Body("link 2", 2, (Sphere([0, 0, 0], tiny),)),
        Body("link 3", 3, (Capsule([-L2, 0, 0], [0, 0, 0], R_CAPSULE),)),
    ] + [Body(f"link {i}", i, (Sphere([0, 0, 0], tiny),)) for i in (4, 5, 6)]
    mount = np.eye(4)
    mount[2, 3] = MOUNT_Z + floor
    return Cell(name="planar", arm=arm, world_from_base=mount, links=tuple(links), tool=Tool(np.eye(4), ()),
                zones=tuple(zones))


def panel_zone(face_x, height=2.0, bottom_gap=0.1, thickness=0.04, kind="fence", name="east fence", floor=0.0,
               **extra):
    """A fence run of one panel in the y-z plane whose face towards the arm is at x = face_x (m),
    standing on a floor at z = floor."""
    pose = np.eye(4)
    pose[:3, 3] = [face_x + thickness / 2, 0.0, floor + (height + bottom_gap) / 2]
    box = Box([thickness, 3.0, height - bottom_gap], pose)
    att = {"height": height, "bottom_gap": bottom_gap, "thickness": thickness, **extra}
    return Zone(name, kind, (box,), 0.1, panels=(f"{name}/panel 1",), attributes=att)


@pytest.fixture(scope="module")
def space():
    return S.maximum_space(planar_cell(), pitch=0.02)


def _flip(space, risk, lo=0.8, hi=1.6, **zone_kw):
    """Smallest face position (to 1 mm) at which the panel passes; verdicts at the two sides."""
    def verdict(x):
        return F.evaluate_panel(space, panel_zone(x, **zone_kw), 0, risk=risk)

    assert verdict(lo).verdict == "fail" and verdict(hi).verdict == "pass"
    while hi - lo > 1e-3:
        mid = 0.5 * (lo + hi)
        if verdict(mid).verdict == "pass":
            hi = mid
        else:
            lo = mid
    return hi, verdict(lo), verdict(hi)


def test_reach_over_verdict_flips_where_the_high_risk_table_says(space):
    # REF, ISO 13857 reach over, high risk (U, from memory; column b = 2000 matched by a consultant's
    # bands): b = 2000 column: a = 1400 -> 0, a = 1600 -> 500, a = 1800 -> 600 mm. Heights between rows
    # take the bracketing row with the larger c. With the space's reach sqrt(0.85^2 - (z-1)^2), the
    # panel needs x >= max over z of (reach(z) + c(z)): for 1.4 < z <= 1.6 that is 0.75 + 0.50 = 1.25 m,
    # for 1.6 < z <= 1.8: 0.602 + 0.6, for z <= 1.4: 0.85 + 0. So the truth flips at 1.25 m.
    truth = math.sqrt(OUTER ** 2 - 0.4 ** 2) + 0.500
    assert truth == pytest.approx(1.25)
    flip, fail, ok = _flip(space, "high")
    # conservative: never passes before the truth; not more than the space's bound (+ a layer) later
    assert truth <= flip <= truth + space.over_approximation + space.pitch
    assert fail.verdict == "fail" and ok.verdict == "pass"
    # the governing table cell is the reference's: row a = 1600, column b = 2000, c = 500 mm
    for v in (fail, ok):
        assert v.c_mm == 500
        assert v.reach_over.row_a_mm == 1600 and v.reach_over.column_b_mm == 2000
        assert v.reach_over.confidence == "U"
        assert 1400 < v.a_mm <= 1600 + space.pitch * 1e3
    assert fail.margin_mm < 0 <= ok.margin_mm
    assert ok.b_mm == 2000 and ok.bottom_gap_mm == pytest.approx(100) and ok.guard.passes
    assert ok.reach_mm == 600  # the largest c of the b = 2000 column (REF high-risk table)
    assert "S2" in ok.standard_sources and "S4" in ok.standard_sources


def test_heights_are_measured_from_the_floor_under_the_panel():
    # the same cell on a platform 0.5 m up: the same verdicts (heights are above the panel's floor)
    raised = S.maximum_space(planar_cell(floor=0.5), pitch=0.02)
    flip, fail, ok = _flip(raised, "high", floor=0.5)
    truth = 1.25  # as in the test above
    assert truth <= flip <= truth + raised.over_approximation + raised.pitch
    assert ok.floor_z_mm == pytest.approx(500) and ok.c_mm == 500 and ok.reach_over.row_a_mm == 1600


def test_reach_over_low_risk_is_selectable(space):
    # REF low risk (H, [S2]), column b = 2000: a = 2000 -> 350, a = 1800 -> 0, rows below -> 0 mm.
    # Needed: max(0.85 + 0 at z = 1.0, reach(1.8) + 0.35 = 0.287 + 0.35) = 0.85 m.
    truth = OUTER
    flip, fail, ok = _flip(space, "low", lo=0.5, hi=1.4)
    assert truth <= flip <= truth + space.over_approximation + space.pitch
    assert ok.risk == "low" and ok.confidence == "H"


def test_additional_measures_and_guard_rules(space):
    far = 3.0
    # REF: high risk, a structure lower than 1400 mm needs additional measures; guard rule >= 1400 mm
    v = F.evaluate_panel(space, panel_zone(far, height=1.2), 0, risk="high")
    assert v.verdict == "additional measures"
    assert not v.guard.height_ok
    # REF: a structure lower than 1000 mm does not count
    v = F.evaluate_panel(space, panel_zone(far, height=0.9), 0)
    assert v.verdict == "additional measures" and v.c_mm is None
    assert any("does not count" in r for r in v.reasons)
    # REF guards: bottom edge at most 180 mm above the floor (H, [S4][S8])
    v = F.evaluate_panel(space, panel_zone(far, bottom_gap=0.25), 0)
    assert v.verdict == "fail" and not v.guard.bottom_gap_ok
    assert F.evaluate_panel(space, panel_zone(far, bottom_gap=0.18), 0).verdict == "pass"
    # the space crossing the panel fails it
    assert F.evaluate_panel(space, panel_zone(0.5), 0).verdict == "fail"


def test_openings_through_a_panel(space):
    # b = 2700 mm: no reach-over distance in any row (REF high-risk column 2700 is all 0). The panel's
    # face is 0.5 m from the space (3-D): REF openings (H, [S3][S2]): 20 < e <= 30: slot 850,
    # square 120, round 120 mm.
    face = OUTER + 0.5
    kw = dict(height=2.7)
    slot = F.evaluate_panel(space, panel_zone(face, opening_size=0.025, opening_shape="slot", **kw), 0)
    square = F.evaluate_panel(space, panel_zone(face, opening_size=0.025, opening_shape="square", **kw), 0)
    rnd = F.evaluate_panel(space, panel_zone(face, opening_size=0.025, opening_shape="round", **kw), 0)
    assert slot.opening.sr_mm == 850 and square.opening.sr_mm == 120 and rnd.opening.sr_mm == 120
    assert 500 - space.over_approximation * 1e3 <= slot.distance_3d_mm <= 500
    assert slot.verdict == "fail" and slot.opening_ok is False
    assert square.verdict == "pass" and square.opening_ok is True
    assert rnd.verdict == "pass"
    # REF: openings over 120 mm are treated as reaching over; a square over 240 mm lets the body through
    big = F.evaluate_panel(space, panel_zone(face, opening_size=0.15, opening_shape="square", **kw), 0)
    assert big.verdict == "additional measures" and big.opening.treated_as_reach_over
    huge = F.evaluate_panel(space, panel_zone(face, opening_size=0.25, opening_shape="square", **kw), 0)
    assert huge.verdict == "fail" and huge.opening.whole_body_access


def _fixture(face_x, kind="fixture", name="table"):
    pose = np.eye(4)
    pose[:3, 3] = [face_x + 0.25, 0.0, 1.0]
    return Zone(name, kind, (Box([0.5, 0.5, 0.5], pose),), 0.02, panels=(name,))


def test_crushing_point_300_flagged_600_not(space):
    # REF ISO 13854 (H, [S5]): body gap 500 mm. A fixture 300 mm from the space is a crushing point,
    # 600 mm is not; a keep-out zone is not a fixed object.
    cell = planar_cell([_fixture(OUTER + 0.3), _fixture(OUTER + 0.6, name="far table"),
                        _fixture(OUTER + 0.3, kind="keep-out", name="keep out")])
    points = F.crushing_points(cell, space)
    assert [p.zone for p in points] == ["table"]
    p = points[0]
    assert 300 - space.over_approximation * 1e3 <= p.gap_mm <= 300
    assert p.check.min_gap_mm == 500 and p.check.crushing_point
    # where: a voxel of the space's outer rim facing the fixture; the analytic rim is the circle of
    # radius 850 mm about (0, 0, 1000) in the x-z plane, and a marked voxel centre lies within the
    # over-approximation (plus half a voxel diagonal) outside it
    x, y, z = p.point_mm
    slack = space.over_approximation * 1e3 + 0.5 * math.sqrt(3) * space.pitch * 1e3
    assert x > 0 and abs(y) <= slack
    assert OUTER * 1e3 - slack <= math.hypot(x, z - MOUNT_Z * 1e3) <= OUTER * 1e3 + slack
    assert not p.touches
    # a fixture the space overlaps: kept, marked as touching (intrusion or a gap below the resolution)
    (touch,) = F.crushing_points(planar_cell([_fixture(0.6)]), space)
    assert touch.touches and touch.gap_mm == 0
    # another body part: the hand (100 mm, REF) does not fit a check of 300 mm
    assert F.crushing_points(cell, space, body_part="hand") == ()


def test_evaluate_panels_walks_fence_zones(space):
    cell = planar_cell([panel_zone(1.5), panel_zone(3.0, name="west", kind="guard"), _fixture(2.0)])
    verdicts = F.evaluate_panels(cell, space)
    assert [v.zone for v in verdicts] == ["east fence", "west"]
    assert all(v.verdict in F.VERDICTS for v in verdicts)
    bad = Zone("bare", "fence", (panel_zone(2.0).shapes[0],), 0.1, attributes={})
    with pytest.raises(InputError, match="height"):
        F.evaluate_panels(planar_cell([bad]), space)


def test_protective_device_check():
    # REF ISO 13855 worked example (H, [S6]): T = 0.32 s, d = 14 mm -> 2000*T = 640 > 500, so
    # S = 1600 * 0.32 = 512 mm.
    ok = F.protective_device_check(600, 0.32, 14)
    assert ok.required.S_mm == pytest.approx(512) and ok.passes and ok.margin_mm == pytest.approx(88)
    bad = F.protective_device_check(500, 0.32, 14)
    assert not bad.passes
    with pytest.raises(InputError, match="distance"):
        F.protective_device_check(-1, 0.32, 14)


def test_distance_to_shape_lower_against_trimesh():
    # independent: trimesh's signed distance of closest points on a mesh of the same box
    import trimesh

    rng = np.random.default_rng(11)
    pose = np.eye(4)
    pose[:3, :3] = trimesh.transformations.rotation_matrix(0.4, [1, 2, 3])[:3, :3]
    pose[:3, 3] = [0.2, -0.1, 0.3]
    box = Box([0.3, 0.5, 0.2], pose)
    mesh = trimesh.creation.box(extents=box.extents, transform=pose)
    pts = rng.uniform(-1, 1, size=(200, 3))
    ours = F.distance_to_shape_lower(box, pts)
    _, dist, _ = trimesh.proximity.closest_point(mesh, pts)
    sign = np.where(mesh.contains(pts), -1.0, 1.0)
    assert np.allclose(ours, sign * dist, atol=1e-9)
