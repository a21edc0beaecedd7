"""The compiled worst margins of a map (envelope.margins) against python-fcl and against the engine."""

from __future__ import annotations

import fcl
import numpy as np
import pytest
from scipy.spatial import ConvexHull

from envelope.cell import load_cell
from envelope.clearance import STATUS_BELOW_MARGIN, STATUS_CLEAR, STATUS_INTRUSION, ClearanceEngine
from envelope.demo import demo_cell_path
from envelope.margins import CompiledMargins
from envelope.poses import pose_from_euler


@pytest.fixture(scope="module")
def demo():
    cell = load_cell(demo_cell_path())
    engine = ClearanceEngine(cell, prune=True)
    return cell, engine, CompiledMargins.build(engine)


def _configs(cell, n, seed):
    """IK solutions (within limits) of seeded TCP poses over the demo's working region and beyond
    (tool down, random yaw): clear, below-margin and intruding configurations all occur."""
    rng = np.random.default_rng(seed)
    xyz = np.column_stack([rng.uniform(-0.6, 1.4, n), rng.uniform(-1.0, 1.0, n), rng.uniform(0.0, 1.4, n)])
    T = np.stack([pose_from_euler(p, [np.pi, 0.0, y], "fixed-xyz") for p, y in zip(xyz, rng.uniform(-np.pi, np.pi, n))])
    ik = cell.arm.ik(cell.base_from_flange(T))
    ok = ik.valid & ik.within_limits.all(-1)
    return ik.q[ok]


def _fcl_worst(engine, q):
    """Worst margin and status by python-fcl (an independent library from PyPI), pair by pair, built
    here from the posed vertex sets: polytopes as fcl.Convex (faces from scipy's Qhull), zone meshes
    as fcl.BVHModel, half-spaces by hand (the lowest posed vertex). Signed distance for overlapping
    polytopes; a touched zone mesh has no depth: margin -inf, as the engine documents."""
    slots = engine._slots
    W = engine._world_from_frames(q[None])[0][engine._S_frame[:engine._n_body_slots]]

    def posed(s):
        v = slots[s].verts if slots[s].verts is not None else np.asarray(slots[s].shape.vertices)
        if slots[s].body < 0:
            return v
        return v @ W[s, :3, :3].T + W[s, :3, 3]

    def fcl_obj(s):
        sl = slots[s]
        if sl.tris is not None:
            m = fcl.BVHModel()
            m.beginModel(len(sl.tris) * 3, len(sl.tris))
            m.addSubModel(sl.tris.reshape(-1, 3), np.arange(len(sl.tris) * 3).reshape(-1, 3))
            m.endModel()
            return fcl.CollisionObject(m)
        v = posed(s)
        hull = ConvexHull(v)
        return fcl.CollisionObject(fcl.Convex(v, len(hull.simplices),
                                              np.column_stack([np.full(len(hull.simplices), 3), hull.simplices]).ravel()))

    worst, status = np.inf, STATUS_CLEAR
    for m in range(len(engine._sp_a)):
        p = engine.pairs[int(engine._sp_pair[m])]
        if p.allowed:
            continue
        sa, sb = int(engine._sp_a[m]), int(engine._sp_b[m])
        pad, req = engine._pair_pad[int(engine._sp_pair[m])], p.required
        sl = slots[sb]
        if sl.verts is None and sl.tris is None:  # half-space
            d = (posed(sa) @ sl.shape.normal).min() - sl.shape.offset - pad
            mg = d - req
        else:
            oa, ob = fcl_obj(sa), fcl_obj(sb)
            if sl.tris is not None:
                hit = fcl.collide(oa, ob, fcl.CollisionRequest(), fcl.CollisionResult())
                d = 0.0 if hit else fcl.distance(oa, ob, fcl.DistanceRequest(), fcl.DistanceResult()) - pad
                mg = -np.inf if d <= 0 else d - req
                if d > 0 and sl.shape.watertight:  # body inside the closed mesh: the engine's inside test
                    from envelope import geometry as g
                    if abs(g.winding_number(sl.shape, posed(sa).mean(axis=0))) > 0.5:
                        d, mg = 0.0, -np.inf
            else:
                req_sd = fcl.DistanceRequest(enable_signed_distance=True)
                d = fcl.distance(oa, ob, req_sd, fcl.DistanceResult()) - pad
                mg = d - req
        if d <= 0:
            status = STATUS_INTRUSION
        elif mg < 0:
            status = max(status, STATUS_BELOW_MARGIN)
        worst = min(worst, mg)
    return worst, status


def test_worst_margins_match_python_fcl(demo):
    cell, engine, cm = demo
    assert cm is not None  # the demo cell is made of polytopes, half-spaces and zone meshes
    q = _configs(cell, 150, seed=4)[:60]
    worst, overall, approx = cm.worst_margins(q)
    assert not approx.any()
    seen = set()
    for i in range(len(q)):
        ref, st = _fcl_worst(engine, q[i])
        seen.add(int(st))
        assert overall[i] == st, i
        if np.isfinite(ref):
            # python-fcl's GJK/EPA tolerance is about 1e-6 m
            assert worst[i] == pytest.approx(ref, abs=5e-6), i
        else:
            assert worst[i] == -np.inf
    assert {STATUS_CLEAR, STATUS_INTRUSION} <= seen


def test_worst_margins_equal_the_engine(demo):
    # The engine (certified lower bounds, python-fcl and GJK/EPA directions) is the check's own
    # reference: same statuses, margins within 1e-5 m, never more optimistic than 1e-9 m below it.
    cell, engine, cm = demo
    q = _configs(cell, 3000, seed=9)
    worst, overall, approx = cm.worst_margins(q)
    ew, eo = engine.worst_margins(q)
    assert not approx.any()
    assert np.array_equal(overall, eo)
    assert np.array_equal(np.isfinite(worst), np.isfinite(ew))
    f = np.isfinite(worst)
    assert np.abs(worst[f] - ew[f]).max() < 1e-5
    assert (worst[f] - ew[f]).min() > -1e-9
    assert len(set(eo.tolist())) == 3  # clear, below margin and intrusion all occur


def test_unsupported_shapes_fall_back_to_the_engine(tmp_path):
    # A cell with a capsule link has no compiled form (build returns None): maps use the engine.
    from test_mapping import CELL_TOML

    path = tmp_path / "cell.toml"
    path.write_text(CELL_TOML)
    cell = load_cell(path)
    assert CompiledMargins.build(ClearanceEngine(cell, prune=True)) is None
