"""The check on small cells built in Python: statuses, verdicts, turn variants, processes."""

import numpy as np
import pytest

from envelope.cell import Cell, Target, Tool
from envelope.check import (
    BELOW_MARGIN,
    CLEAR,
    INTRUSION,
    OUTSIDE_LIMITS,
    UNREACHABLE,
    run_check,
    solve_pose,
)
from envelope.errors import InputError
from envelope.geometry import Body, Box, Sphere, Zone
from envelope.kinematics import Arm
from envelope.poses import pose_from_euler

LIMITS_DEG = [[-170, 170], [-100, 140], [-150, 150], [-190, 190], [-120, 120], [-360, 360]]


def _arm(limits_deg=LIMITS_DEG):
    # An invented ortho-parallel arm (metres, radians), standard DH.
    return Arm.from_dh(
        [0.075, 0.42, 0.04, 0, 0, 0],
        [-np.pi / 2, 0, -np.pi / 2, np.pi / 2, -np.pi / 2, 0],
        [0.40, 0, 0, 0.44, 0, 0.08],
        [0, -np.pi / 2, 0, 0, 0, 0],
        limits=np.radians(limits_deg),
    )


def _cell(targets, zones, limits_deg=LIMITS_DEG, tool_radius=0.02):
    # Links as small spheres at their frame origins; the tool a sphere at the TCP, 0.1 m past the flange.
    links = tuple(Body(f"link{i}", i, (Sphere([0, 0, 0], 0.01),)) for i in range(7))
    flange_from_tcp = np.eye(4)
    flange_from_tcp[2, 3] = 0.1
    tool = Tool(flange_from_tcp, (Body("tool", 6, (Sphere([0, 0, 0.1], tool_radius),), role="tool"),))
    return Cell("test", _arm(limits_deg), np.eye(4), links, tool, tuple(zones), targets=tuple(targets))


def _down(xyz, name):
    return Target(name, pose_from_euler(xyz, [np.pi, 0, 0]))


def _box_distance(point, centre, extents):
    # Sphere-box distance by clamping the centre to the box (common geometry, no source needed:
    # the closest point of an axis-aligned box to p is p clamped to the box on each axis).
    lo, hi = centre - extents / 2, centre + extents / 2
    return float(np.linalg.norm(point - np.clip(point, lo, hi)))


def test_tool_clearance_matches_clamped_box_distance_in_every_branch():
    centre, extents = np.array([0.55, 0.25, 0.45]), np.array([0.2, 0.2, 0.2])
    zone = Zone("block", "keep-out", (Box(extents, pose_from_euler(centre, [0, 0, 0])),), 0.05)
    tcp = np.array([0.55, 0.0, 0.5])
    result = run_check(_cell([_down(tcp, "near-block")], [zone]))
    expected = _box_distance(tcp, centre, extents) - 0.02
    rows = [r for r in result.rows if r.status != UNREACHABLE]
    assert len(rows) >= 2
    for row in rows:
        pair = next(p for p in row.pairs if p.body == "tool" and p.other == "block")
        assert pair.distance <= expected + 1e-9
        assert pair.distance == pytest.approx(expected, abs=1e-5)


def test_statuses_and_verdict():
    centre, extents = np.array([0.55, 0.25, 0.45]), np.array([0.2, 0.2, 0.2])
    zone = Zone("block", "keep-out", (Box(extents, pose_from_euler(centre, [0, 0, 0])),), 0.05)
    targets = [
        _down([0.55, -0.25, 0.5], "far"),  # 0.5 m from the block: clear
        _down([0.55, 0.12, 0.5], "close"),  # tool 0.13 - 0.1 - 0.02 = 0.01 m from it: below margin
        _down([0.55, 0.25, 0.5], "inside"),  # tool centre 0.05 m above the block face... inside
        _down([3.0, 0.0, 0.5], "too-far"),  # beyond reach
    ]
    result = run_check(_cell(targets, [zone]))
    by_target = {}
    for row in result.rows:
        by_target.setdefault(row.target, set()).add(row.status)
    assert CLEAR in by_target["far"]
    assert BELOW_MARGIN in by_target["close"]
    assert INTRUSION in by_target["inside"]
    assert by_target["too-far"] == {UNREACHABLE}
    assert result.verdict == INTRUSION
    assert result.exit_code == 1
    unreachable = next(r for r in result.rows if r.target == "too-far")
    assert "beyond reach" in unreachable.note or "reach" in unreachable.note
    # Worst rows first: an intrusion leads.
    assert result.rows[result.worst_first()[0]].status == INTRUSION


def test_clear_cell_exits_zero_and_outside_limit_branches_do_not_count():
    far_zone = Zone("far", "keep-out", (Box([0.1, 0.1, 0.1], pose_from_euler([-1.5, 0, 0.5], [0, 0, 0])),), 0.05)
    result = run_check(_cell([_down([0.55, 0.0, 0.5], "t")], [far_zone]))
    statuses = {r.status for r in result.rows}
    assert OUTSIDE_LIMITS in statuses  # the back branches need q1 = 180 deg > 170
    assert CLEAR in statuses
    assert result.verdict == CLEAR and result.exit_code == 0


def test_target_with_every_branch_outside_limits_is_a_finding():
    far_zone = Zone("far", "keep-out", (Box([0.1, 0.1, 0.1], pose_from_euler([-1.5, 0, 0.5], [0, 0, 0])),), 0.05)
    limits = [list(l) for l in LIMITS_DEG]
    limits[0] = [10, 170]  # the target straight ahead needs q1 = 0 (front) or 180 (back)
    result = run_check(_cell([_down([0.55, 0.0, 0.5], "t")], [far_zone], limits_deg=limits))
    assert {r.status for r in result.rows} == {OUTSIDE_LIMITS}
    assert result.verdict == OUTSIDE_LIMITS and result.exit_code == 1
    assert "joint 1 below its range by 10.000 deg" in result.rows[0].note


def test_turn_variants_share_their_twin_computation():
    zone = Zone("far", "keep-out", (Box([0.1, 0.1, 0.1], pose_from_euler([-1.5, 0, 0.5], [0, 0, 0])),), 0.05)
    result = run_check(_cell([_down([0.55, 0.1, 0.5], "t")], [zone]))
    variants = [r for r in result.rows if r.twin_of >= 0]
    assert variants, "a +-360 deg sixth axis must give turn variants"
    for v in variants:
        twin = result.rows[v.twin_of]
        assert twin.twin_of == -1 and twin.branch == v.branch
        assert v.clearance == twin.clearance
        turns = np.degrees(v.q - twin.q) / 360.0  # joints 4 (+-190 deg) and 6 (+-360 deg) can turn
        assert np.allclose(turns, np.round(turns), atol=1e-12) and np.any(np.round(turns) != 0)
        assert np.all(np.round(turns)[[0, 1, 2, 4]] == 0)


def test_two_processes_equal_one():
    centre, extents = np.array([0.55, 0.25, 0.45]), np.array([0.2, 0.2, 0.2])
    zone = Zone("block", "keep-out", (Box(extents, pose_from_euler(centre, [0, 0, 0])),), 0.05)
    rng = np.random.default_rng(7)
    targets = [_down([rng.uniform(0.3, 0.7), rng.uniform(-0.4, 0.4), rng.uniform(0.2, 0.7)], f"t{i}") for i in range(12)]
    cell = _cell(targets, [zone])
    one, two = run_check(cell, jobs=1), run_check(cell, jobs=2)
    assert len(one.rows) == len(two.rows)
    for a, b in zip(one.rows, two.rows):
        assert (a.target, a.branch, a.status) == (b.target, b.branch, b.status)
        assert np.array_equal(a.q, b.q, equal_nan=True)
        assert a.clearance == b.clearance or (np.isnan(a.clearance) and np.isnan(b.clearance))
        assert [p.distance for p in a.pairs] == [p.distance for p in b.pairs]


def test_no_targets_is_bad_input():
    with pytest.raises(InputError, match="no targets"):
        run_check(_cell([], []))


def test_solve_pose_in_file_units():
    cell = _cell([], [])
    table = solve_pose(cell, [550.0, 0.0, 500.0], [180.0, 0.0, 0.0])
    assert table["complete"] and table["method"] == "closed-form"
    assert len(table["branches"]) >= 8
    labels = {b["branch"] for b in table["branches"]}
    assert {"front-up-pos", "front-up-neg"} <= labels
    with pytest.raises(InputError, match="unknown frame"):
        solve_pose(cell, [550.0, 0.0, 500.0], [180.0, 0.0, 0.0], frame="nowhere")
