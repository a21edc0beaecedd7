"""Batched clearance evaluation: the same results as the one-by-one reference path and as prune=False.

The engine batches the exact queries of a block per pair across configurations; ``engine._scalar =
True`` selects the one-configuration, one-pair-at-a-time reference path (``_exact_pair``, checked
against independent references in tests/test_clearance.py). Here both paths, and pruning on and off,
are compared on the demo cell (configurations near realistic targets and uniform in the joint limits)
and on the test cells of tests/test_clearance.py. The winding-number inside test of watertight zone
meshes is checked against trimesh's ray test (an independent library).
"""

from __future__ import annotations

import numpy as np
import pytest
import trimesh

from envelope import geometry as g
from envelope.cell import load_cell
from envelope.clearance import ClearanceEngine, ClearanceResult
from envelope.demo import demo_cell_path
from envelope.poses import pose_from_euler
from envelope.geometry import Body, Box, Capsule, Cylinder, HalfSpace, Sphere, TriMesh, Zone
from test_clearance import _translation, arm_cell, mesh_links_cell, mixed_cell

EXACT_TOL = 1e-9  # m: the batched and the reference exact bounds agree to rounding


@pytest.fixture(scope="module")
def demo_cell():
    return load_cell(demo_cell_path())


def realistic_q(cell, n_poses, seed, n_max=150):
    """IK solutions of seeded TCP poses in the demo's working region, tool pointing down, random yaw
    (the generator of tests/benchmarks/bench_check.py), plus a few uniform in-limit configurations."""
    rng = np.random.default_rng(seed)
    r = rng.uniform(0.35, 0.85, n_poses)
    phi = rng.uniform(-0.9 * np.pi, 0.9 * np.pi, n_poses)
    xyz = np.column_stack([r * np.cos(phi), r * np.sin(phi), rng.uniform(0.5, 1.3, n_poses)])
    yaw = rng.uniform(-np.pi, np.pi, n_poses)
    world_from_tcp = pose_from_euler(xyz, np.column_stack([np.full(n_poses, np.pi), np.zeros(n_poses), yaw]))
    sols = cell.arm.ik_each(cell.base_from_flange(world_from_tcp))
    qs = [np.asarray(s.q).reshape(-1, 6) for s in sols if len(s)]
    lim = cell.arm.limits
    q = np.concatenate(qs)
    q = q[rng.permutation(len(q))[:n_max]]  # (turn variants make many solutions per pose)
    return np.concatenate([q, rng.uniform(lim[:, 0], lim[:, 1], (n_max // 8, 6))])


def assert_same_findings(fast: ClearanceResult, ref: ClearanceResult, *, same_pruning: bool):
    assert np.array_equal(fast.status, ref.status)
    assert np.array_equal(fast.overall, ref.overall)
    assert np.array_equal(fast.worst, ref.worst)
    finite = np.isfinite(ref.worst_margin)
    assert np.array_equal(np.isfinite(fast.worst_margin), finite)
    assert np.allclose(fast.worst_margin[finite], ref.worst_margin[finite], rtol=0, atol=EXACT_TOL)
    assert np.array_equal(fast.depth_known, ref.depth_known)
    both = ~fast.pruned & ~ref.pruned
    assert np.allclose(fast.distance[both], ref.distance[both], rtol=0, atol=EXACT_TOL)
    assert np.allclose(fast.distance_upper[both], ref.distance_upper[both], rtol=0, atol=EXACT_TOL)
    if same_pruning:
        assert np.array_equal(fast.pruned, ref.pruned)
        assert np.allclose(fast.distance, ref.distance, rtol=0, atol=EXACT_TOL)


def reference(cell, prune):
    e = ClearanceEngine(cell, prune=prune)
    e._scalar = True
    return e


def test_demo_cell_batched_equals_reference_and_unpruned(demo_cell):
    q = realistic_q(demo_cell, 30, seed=21)
    assert len(q) > 150
    engine = ClearanceEngine(demo_cell)
    fast = engine.evaluate(q)
    ref = reference(demo_cell, True).evaluate(q)
    full = ClearanceEngine(demo_cell, prune=False).evaluate(q[:30])
    full_ref = reference(demo_cell, False).evaluate(q[:30])
    assert_same_findings(fast, ref, same_pruning=True)
    assert_same_findings(full, full_ref, same_pruning=True)
    assert_same_findings(fast.take(slice(0, 30)), full, same_pruning=False)
    assert (fast.distance[:30] <= full.distance + 1e-12).all()  # a pruned pair carries a lower bound
    assert not full.pruned.any() and fast.pruned.mean() > 0.5
    # the sample has every kind of outcome, exact zone-mesh pairs and self pairs among them
    assert set(fast.overall.tolist()) == {0, 1, 2}
    kinds = {demo_cell_engine_kind(engine, p) for p in np.flatnonzero((~fast.pruned).any(axis=0))}
    assert {"mesh", "self"} <= kinds


def demo_cell_engine_kind(engine, p):
    pair = engine.pairs[p]
    if pair.kind == "self":
        return "self"
    slot = engine._slots[engine._sp_b[engine._pair_sps[p][0]]]
    return "mesh" if slot.tris is not None else "convex"


def multi_shape_cell():
    """Bodies of several shapes (capsule + box, sphere + hull) against primitives, a half-space and meshes."""
    ring = trimesh.creation.annulus(0.1, 0.3, 0.2, transform=_translation([0.5, -0.5, 0.6]))
    block = trimesh.creation.box([0.3, 0.3, 0.3], transform=_translation([-0.6, 0.3, 0.5]))
    knob = trimesh.creation.icosphere(subdivisions=1, radius=0.05)
    zones = [
        Zone("ring", "keep-out", (TriMesh(ring.vertices, ring.faces, watertight=True),), 0.02),
        Zone("block", "machine", (TriMesh(block.vertices, block.faces, watertight=True),
                                  Box([0.2, 0.2, 0.2], _translation([0.6, 0.4, 0.4]))), 0.03, panels=("mesh", "box")),
        Zone("post", "fixture", (Cylinder(0.08, 1.2, _translation([-0.5, -0.5, 0.6])),), 0.02),
        Zone("floor", "floor", (HalfSpace([0, 0, 1.0], -0.05),), 0.0, allowed=frozenset({"link0"})),
    ]
    tool = [Body("gripper", 6, (Box([0.08, 0.12, 0.1], _translation([0, 0, 0.06])), Capsule([0, 0, 0.1], [0, 0, 0.2], 0.03)),
                 padding=0.004, role="tool"),
            Body("part", 6, (Sphere([0, 0.05, 0.25], 0.04), TriMesh(knob.vertices + [0, -0.05, 0.25], knob.faces,
                                                                    watertight=True)), role="payload")]
    return arm_cell(zones, tool_bodies=tool, padding=0.002)


@pytest.mark.parametrize("make_cell", [mixed_cell, mesh_links_cell, multi_shape_cell])
def test_test_cells_batched_equals_reference(make_cell):
    cell = make_cell()
    q = np.random.default_rng(22).uniform(-np.pi, np.pi, (90, 6))
    q[:, 1:3] *= 0.5
    assert_same_findings(ClearanceEngine(cell).evaluate(q), reference(cell, True).evaluate(q), same_pruning=True)
    assert_same_findings(ClearanceEngine(cell, prune=False).evaluate(q[:12]), reference(cell, False).evaluate(q[:12]),
                         same_pruning=True)


def test_demo_results_do_not_depend_on_the_batch(demo_cell):
    e = ClearanceEngine(demo_cell)
    q = realistic_q(demo_cell, 12, seed=23)
    whole = e.evaluate(q)
    parts = ClearanceResult.concatenate([e.evaluate(q[i:i + 7]) for i in range(0, len(q), 7)])
    for f in ClearanceResult._FIELDS:
        assert np.array_equal(getattr(whole, f), getattr(parts, f), equal_nan=True), f
    single = e.evaluate(q[5])
    for f in ClearanceResult._FIELDS:
        assert np.array_equal(getattr(single, f), getattr(whole, f)[5], equal_nan=True), f


@pytest.mark.parametrize("make", [
    lambda: trimesh.creation.annulus(0.1, 0.3, 0.2),
    lambda: trimesh.creation.icosphere(subdivisions=2, radius=0.4),
    lambda: trimesh.creation.box([0.5, 0.2, 0.3]),
])
def test_winding_number_agrees_with_trimesh_ray_test(make):
    m = make()
    mesh = g.TriMesh(m.vertices, m.faces, watertight=True)
    assert g.is_consistently_wound(mesh)
    rng = np.random.default_rng(24)
    pts = rng.uniform(-0.5, 0.5, (400, 3))
    # keep points clearly off the surface (the winding number is only used there)
    _, dist, _ = trimesh.proximity.closest_point(m, pts)
    pts = pts[dist > 1e-3]
    w = g.winding_number(mesh, pts)
    inside = m.contains(pts)  # trimesh's ray test
    assert 0 < inside.sum() < len(pts)
    assert np.allclose(np.abs(w[inside]), 1.0, atol=1e-6) and np.allclose(w[~inside], 0.0, atol=1e-6)


def test_winding_consistency_detects_a_flipped_face():
    m = trimesh.creation.box([1.0, 1.0, 1.0])
    faces = np.array(m.faces)
    assert g.is_consistently_wound(g.TriMesh(m.vertices, faces, watertight=True))
    faces[0] = faces[0][::-1]
    assert not g.is_consistently_wound(g.TriMesh(m.vertices, faces, watertight=True))
    assert not g.is_consistently_wound(g.TriMesh(m.vertices, faces[1:], watertight=False))  # open: an edge used once
