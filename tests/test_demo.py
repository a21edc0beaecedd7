"""The bundled demo cell: each designed status appears where designed, and two rows are checked
against clearances computed independently of envelope's engine and forward kinematics."""

import itertools

import numpy as np
import pytest
from scipy.optimize import minimize

from envelope.cell import load_cell
from envelope.check import BELOW_MARGIN, CLEAR, INTRUSION, OUTSIDE_LIMITS, UNREACHABLE, run_check
from envelope.demo import demo_cell_path
from envelope.poses import invert


@pytest.fixture(scope="module")
def demo():
    cell = load_cell(demo_cell_path())
    return cell, run_check(cell)


def _statuses(result, target):
    return {r.status for r in result.rows if r.target == target}


def test_every_designed_status_appears(demo):
    _, result = demo
    assert _statuses(result, "infeed-pick") <= {CLEAR, OUTSIDE_LIMITS} and CLEAR in _statuses(result, "infeed-pick")
    assert BELOW_MARGIN in _statuses(result, "near-fence")
    assert INTRUSION in _statuses(result, "into-cabinet")
    assert _statuses(result, "limit-blocked") == {OUTSIDE_LIMITS}
    assert _statuses(result, "out-of-reach") == {UNREACHABLE}
    flagged = [r for r in result.rows if r.target == "wrist-flip" and "wrist" in r.singular]
    assert flagged, "the near-singular target must carry the wrist singularity flag"
    assert result.verdict == INTRUSION and result.exit_code == 1


def _world_from_flange(cell, target):
    # From the target alone, not from forward kinematics: the TCP is placed at the target, and the
    # tool is rigid on the flange, so world_from_flange = world_from_tcp @ inv(flange_from_tcp).
    return cell.target(target).world_from_tcp @ invert(cell.tool.flange_from_tcp)


def _box_corners(box, world_from_box_parent=np.eye(4)):
    signs = np.array(list(itertools.product([-0.5, 0.5], repeat=3)))
    local = signs * box.extents
    T = world_from_box_parent @ box.pose
    return local @ T[:3, :3].T + T[:3, 3], T


def _hull_to_box_distance(vertices, box):
    """Distance between the convex hull of ``vertices`` and a box, as a convex QP solved by scipy.

    Independent method: minimise |sum(l_i v_i) - (c + R u)|^2 over l on the simplex and u in the
    box's half extents (scipy.optimize.minimize, SLSQP); convex, so the local optimum is global.
    """
    R, c, h = box.pose[:3, :3], box.pose[:3, 3], box.extents / 2
    n = len(vertices)

    def f(z):
        x = z[:n] @ vertices
        y = c + R @ z[n:]
        return float(np.sum((x - y) ** 2))

    z0 = np.concatenate([np.full(n, 1.0 / n), np.zeros(3)])
    bounds = [(0, 1)] * n + [(-hi, hi) for hi in h]
    cons = [{"type": "eq", "fun": lambda z: np.sum(z[:n]) - 1.0}]
    res = minimize(f, z0, method="SLSQP", bounds=bounds, constraints=cons, options={"ftol": 1e-16, "maxiter": 500})
    return float(np.sqrt(max(res.fun, 0.0)))


def test_near_fence_gripper_distance_by_quadratic_programming(demo):
    cell, result = demo
    row = next(r for r in result.rows if r.target == "near-fence" and r.status == BELOW_MARGIN)
    pair = next(p for p in row.pairs if p.body == "gripper" and p.panel == "north fence/panel 2")
    gripper = next(b for b in cell.tool.bodies if b.name == "gripper")
    W = _world_from_flange(cell, "near-fence")
    (hull,) = gripper.shapes
    vertices = hull.vertices @ W[:3, :3].T + W[:3, 3]
    fence = next(z for z in cell.zones if z.name == "north fence")
    panel = fence.shapes[fence.panels.index("north fence/panel 2")]
    expected = _hull_to_box_distance(vertices, panel) - gripper.padding
    assert pair.distance <= expected + 1e-6  # never more clearance than there is
    assert pair.distance == pytest.approx(expected, abs=1e-4)  # and tight to 0.1 mm
    assert row.clearance == pytest.approx(pair.distance)


def _box_box_penetration(a_corners, Ta, a_ext, b_corners, Tb, b_ext):
    """Penetration depth of two overlapping boxes by the separating-axis test.

    Hand geometry: for convex polyhedra the minimum translation distance is attained along a face
    normal of either or a cross product of an edge of each (Gottschalk, Lin & Manocha 1996, "OBBTree";
    Ericson, "Real-Time Collision Detection", 2005, section 4.4), so the smallest overlap of the two
    projections over the 15 box axes is the depth.
    """
    axes = [Ta[:3, i] for i in range(3)] + [Tb[:3, i] for i in range(3)]
    axes += [np.cross(Ta[:3, i], Tb[:3, j]) for i in range(3) for j in range(3)]
    depth = np.inf
    for ax in axes:
        norm = np.linalg.norm(ax)
        if norm < 1e-9:
            continue
        ax = ax / norm
        pa, pb = a_corners @ ax, b_corners @ ax
        overlap = min(pa.max() - pb.min(), pb.max() - pa.min())
        depth = min(depth, overlap)
    return depth


def test_into_cabinet_part_penetration_by_separating_axes(demo):
    cell, result = demo
    row = next(r for r in result.rows if r.target == "into-cabinet" and r.status == INTRUSION)
    pair = next(p for p in row.pairs if p.body == "part" and p.other == "cabinet")
    part = next(b for b in cell.tool.bodies if b.name == "part")
    (part_box,) = part.shapes
    cabinet = next(z for z in cell.zones if z.name == "cabinet")
    (cabinet_box,) = cabinet.shapes
    a, Ta = _box_corners(part_box, _world_from_flange(cell, "into-cabinet"))
    b, Tb = _box_corners(cabinet_box)
    depth = _box_box_penetration(a, Ta, part_box.extents, b, Tb, cabinet_box.extents) + part.padding
    assert pair.depth_known
    assert pair.distance <= -depth + 1e-6
    assert pair.distance == pytest.approx(-depth, abs=1e-4)
