"""A small invented cell and a CheckResult computed from it, for the report and scene tests.

The arm, its bodies, the zones and the targets are invented. The "branches" are chosen joint
configurations (not IK solutions); each row's pair distances are computed here with simple geometry
(a capsule against a half-space exactly, against a box by sampling the capsule's axis densely), so the
numbers in the report are real distances of the drawn configurations.
"""

from __future__ import annotations

import hashlib

import numpy as np

from envelope.cell import Cell, Target, Tool
from envelope.check import BELOW_MARGIN, CLEAR, INTRUSION, OUTSIDE_LIMITS, UNREACHABLE, BranchRow, CheckResult, PairRow
from envelope.geometry import Body, Box, Capsule, HalfSpace, Zone
from envelope.kinematics import Arm
from envelope.poses import invert
from envelope.scene import zone_panel_names

DEG = np.pi / 180.0
N_AXIS_SAMPLES = 401


def invented_arm() -> Arm:
    limits = np.array([[-170, 170], [-120, 140], [-150, 160], [-200, 200], [-125, 125], [-350, 350]]) * DEG
    return Arm.from_dh(
        a=[0.15, 0.60, 0.12, 0.0, 0.0, 0.0],
        alpha=[-np.pi / 2, 0.0, -np.pi / 2, np.pi / 2, -np.pi / 2, 0.0],
        d=[0.45, 0.0, 0.0, 0.62, 0.0, 0.10],
        offset=[0.0, -np.pi / 2, 0.0, 0.0, 0.0, 0.0],
        limits=limits,
        name="invented six-axis arm",
    )


def _link_bodies(arm: Arm) -> tuple:
    """A capsule from frame i-1's origin to frame i's origin, held in frame i (it is constant there)."""
    bodies = [Body("base", 0, (Capsule([0, 0, 0], [0, 0, 0.30], 0.12),))]
    F = arm.frames(np.zeros(6))
    for i in range(1, 7):
        p0 = (invert(F[i]) @ F[i - 1])[:3, 3]
        if np.linalg.norm(p0) < 1e-9:
            p0 = np.array([0.0, 0.0, -0.05])
        bodies.append(Body(f"link{i}", i, (Capsule(p0, [0, 0, 0], 0.07 if i < 4 else 0.05),)))
    return tuple(bodies)


def invented_cell() -> Cell:
    arm = invented_arm()
    tool = Tool(
        flange_from_tcp=np.array([[1, 0, 0, 0], [0, 1, 0, 0], [0, 0, 1, 0.15], [0, 0, 0, 1.0]]),
        bodies=(Body("gripper", 6, (Capsule([0, 0, 0], [0, 0, 0.13], 0.04),), role="tool"),),
    )
    east = np.eye(4)
    east[:3, 3] = [1.25, -0.6, 0.7]
    east2 = np.eye(4)
    east2[:3, 3] = [1.25, 0.6, 0.7]
    table = np.eye(4)
    table[:3, 3] = [0.55, -0.75, 0.30]
    zones = (
        Zone("east fence", "fence", (Box([0.02, 1.2, 1.4], east), Box([0.02, 1.2, 1.4], east2)), 0.10, panels=("south", "north")),
        Zone("table", "fixture", (Box([0.5, 0.4, 0.6], table),), 0.05),
        Zone("floor", "floor", (HalfSpace([0, 0, 1.0], 0.0),), 0.02),
    )
    world_from_base = np.eye(4)
    q_sets = target_configurations()
    targets = []
    for name, qs in q_sets.items():
        if qs is None:
            pose = np.eye(4)
            pose[:3, 3] = [3.0, 0.0, 1.0]
        else:
            pose = world_from_base @ arm.fk(qs[0][1]) @ tool.flange_from_tcp
        targets.append(Target(name, pose, frame="world", source="cell.toml"))
    return Cell(
        name="invented test cell",
        arm=arm,
        world_from_base=world_from_base,
        links=_link_bodies(arm),
        tool=tool,
        zones=zones,
        targets=tuple(targets),
        source="cell.toml",
        warnings=("zone mesh 'demo.stl' is not watertight: treated as a surface",),
        inputs=(("cell.toml", hashlib.sha256(b"invented cell file").hexdigest()),),
    )


def target_configurations() -> dict:
    """Target name -> list of (branch name, q radians); None for an unreachable target."""
    q = lambda *deg: np.array(deg, dtype=np.float64) * DEG  # noqa: E731
    return {
        "home": [("up-front", q(0, 0, 0, 0, 0, 0)), ("up-front-flip", q(0, 0, 0, 180, -30, 180))],
        "pick-table": [("up-front", q(-55, 35, 20, 0, 35, 0)), ("down-front", q(-55, 60, -40, 0, 70, 0))],
        "place-east": [("up-front", q(0, 50, -20, 0, 60, 0)), ("over-limit", q(175, 10, 10, 0, 20, 0))],
        "far-away": None,
    }


def _segment_points(body: Body, world_from_frame) -> tuple:
    cap = body.shapes[0]
    t = np.linspace(0.0, 1.0, N_AXIS_SAMPLES)[:, None]
    pts = cap.p0 + t * (cap.p1 - cap.p0)
    pts = (world_from_frame[body.frame][:3, :3] @ pts.T).T + world_from_frame[body.frame][:3, 3]
    return pts, cap.radius + body.padding


def _capsule_box(pts, radius, box: Box) -> tuple:
    """Signed distance (negative inside, depth estimate) of a sampled capsule to a box, and witness points."""
    box_from_world = invert(box.pose)
    local = (box_from_world[:3, :3] @ pts.T).T + box_from_world[:3, 3]
    half = box.extents / 2.0
    closest = np.clip(local, -half, half)
    outside = np.linalg.norm(local - closest, axis=1)
    inside_depth = np.min(half - np.abs(local), axis=1)
    signed = np.where(outside > 0, outside, -inside_depth)
    k = int(np.argmin(signed))
    on_box = (box.pose[:3, :3] @ closest[k]) + box.pose[:3, 3]
    direction = on_box - pts[k]
    norm = np.linalg.norm(direction)
    on_body = pts[k] + (direction / norm * radius if norm > 0 else 0.0)
    return float(signed[k] - radius), on_body, on_box


def _capsule_halfspace(pts, radius, hs: HalfSpace) -> tuple:
    h = pts @ hs.normal - hs.offset
    k = int(np.argmin(h))
    on_body = pts[k] - radius * hs.normal
    return float(h[k] - radius), on_body, pts[k] - h[k] * hs.normal


def pair_rows(cell: Cell, q) -> tuple:
    world_from_frame = cell.world_from_base @ cell.arm.frames(q)
    out = []
    for body in cell.bodies:
        pts, radius = _segment_points(body, world_from_frame)
        for zone in cell.zones:
            for panel, shape in zip(zone_panel_names(zone), zone.shapes):
                if isinstance(shape, Box):
                    d, wb, wo = _capsule_box(pts, radius, shape)
                else:
                    d, wb, wo = _capsule_halfspace(pts, radius, shape)
                if body.name in ("base", "link1") and zone.kind == "floor":
                    continue  # the base and link 1 stand on the floor: not listed
                status = INTRUSION if d < 0 else (BELOW_MARGIN if d < zone.clearance else CLEAR)
                out.append(
                    PairRow(body.name, zone.name, "zone", zone.kind, panel, zone.clearance, d, d, d < 0, False, wb, wo, status)
                )
    return tuple(out)


_SEV = {INTRUSION: 0, BELOW_MARGIN: 1, CLEAR: 2}


def invented_result(cell: Cell | None = None) -> CheckResult:
    cell = cell or invented_cell()
    rows = []
    nan3 = np.full(3, np.nan)
    for name, branches in target_configurations().items():
        if branches is None:
            rows.append(
                BranchRow(
                    name, "world", "", 0, -1, UNREACHABLE, "", np.full(6, np.nan), np.zeros(6), (), np.nan, np.nan,
                    np.nan, "", "", nan3, nan3, (), "beyond the arm's reach (invented)",
                )
            )
            continue
        for branch, q in branches:
            pairs = pair_rows(cell, q)
            worst = min(pairs, key=lambda p: (_SEV[p.status], p.distance - p.required))
            clearance_status = worst.status
            lo, hi = cell.arm.limits[:, 0], cell.arm.limits[:, 1]
            excess = np.maximum(lo - q, 0.0) + np.maximum(q - hi, 0.0)
            status = OUTSIDE_LIMITS if excess.any() else clearance_status
            rows.append(
                BranchRow(
                    name, "world", branch, 0, -1, status, clearance_status, q, excess,
                    ("wrist",) if abs(q[4]) < 1e-9 else (), worst.distance, worst.required,
                    worst.distance - worst.required, worst.body,
                    worst.other + (f"/{worst.panel}" if worst.panel else ""), worst.witness_body,
                    worst.witness_other, pairs, "",
                )
            )
    return CheckResult(cell=cell, rows=tuple(rows), warnings=("2 pairs pruned by bounding spheres (invented)",))


def test_invented_result_has_every_status():
    result = invented_result()
    statuses = {r.status for r in result.rows}
    assert {UNREACHABLE, OUTSIDE_LIMITS}.issubset(statuses), statuses
    assert statuses & {INTRUSION, BELOW_MARGIN}, statuses


def test_capsule_halfspace_distance_is_exact():
    # analytic: a vertical capsule with its lower end at z = 0.5, radius 0.1, is 0.4 above the floor z = 0
    pts = np.linspace([0, 0, 0.5], [0, 0, 1.0], 11)
    d, wb, wo = _capsule_halfspace(pts, 0.1, HalfSpace([0, 0, 1.0], 0.0))
    assert abs(d - 0.4) < 1e-12
    np.testing.assert_allclose(wb, [0, 0, 0.4])
    np.testing.assert_allclose(wo, [0, 0, 0.0])
