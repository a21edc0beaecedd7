"""The compiled GJK distance of convex polytopes (envelope.gjk), against python-fcl and hand geometry."""

from __future__ import annotations

import fcl
import numpy as np
import pytest
import trimesh
from scipy.spatial import ConvexHull
from scipy.spatial.transform import Rotation

from envelope import gjk


def _hull(rng, n):
    pts = rng.normal(size=(n, 3)) * rng.uniform(0.05, 0.3, 3)
    h = trimesh.convex.convex_hull(pts)
    return np.asarray(h.vertices), np.asarray(h.faces)


def _fcl_convex(V, F):
    return fcl.CollisionObject(fcl.Convex(V, len(F), np.column_stack([np.full(len(F), 3), F]).ravel()))


def _random_pair(seed, na, nb, k, pose_seeds, spread=1.0):
    """Two random hulls ``(V, F)`` and ``k`` random poses of each (translations scaled by ``spread``)."""
    rng = np.random.default_rng(seed)
    Va, Fa = _hull(rng, na)
    Vb, Fb = _hull(rng, nb)
    Ra, ta = _poses(k, pose_seeds[0])
    Rb, tb = _poses(k, pose_seeds[1])
    return Va, Fa, Vb, Fb, Ra, ta * spread, Rb, tb * spread


CUBE = np.array([[x, y, z] for x in (-0.5, 0.5) for y in (-0.5, 0.5) for z in (-0.5, 0.5)])


def _poses(k, seed):
    rng = np.random.default_rng(seed)
    R = Rotation.random(k, random_state=seed).as_matrix()
    return R, rng.uniform(-0.45, 0.45, (k, 3))


def test_distance_matches_python_fcl_on_random_hulls():
    # Reference: python-fcl (an independent general-purpose collision library from PyPI), GJK/EPA on
    # the same convex hulls. Where it reports a separation, the distances agree to 1e-9 m; where it
    # reports a collision, gjk says touching/overlapping.
    Va, Fa, Vb, Fb, Ra, ta, Rb, tb = _random_pair(3, 150, 60, 1500, (1, 2))
    d, pa, pb, state = gjk.distance(Va, Ra, ta, Vb, Rb, tb)
    oa, ob = _fcl_convex(Va, Fa), _fcl_convex(Vb, Fb)
    n_sep = n_hit = 0
    for i in range(len(Ra)):
        oa.setTransform(fcl.Transform(Ra[i], ta[i]))
        ob.setTransform(fcl.Transform(Rb[i], tb[i]))
        hit = fcl.collide(oa, ob, fcl.CollisionRequest(), fcl.CollisionResult())
        if hit:
            n_hit += 1
            assert state[i] == gjk.TOUCHING, i
            continue
        df = fcl.distance(oa, ob, fcl.DistanceRequest(enable_nearest_points=True), fcl.DistanceResult())
        if df > 1e-6:
            n_sep += 1
            assert state[i] == gjk.SEPARATED, i
            assert abs(d[i] - df) < 1e-9, (i, d[i], df)
    assert n_sep > 150 and n_hit > 150  # both cases well represented (195 and over 1000 here)


def test_witness_points_lie_in_their_hulls_and_realise_the_distance():
    # The closest points are convex combinations of vertices: inside the posed hull (scipy's Qhull
    # facet inequalities, an independent library), and |p_a - p_b| is the distance; the support gap
    # along p_b - p_a equals it (the lower bound that certifies the value).
    Va, _, Vb, _, Ra, ta, Rb, tb = _random_pair(5, 80, 80, 400, (7, 8))
    d, pa, pb, state = gjk.distance(Va, Ra, ta, Vb, Rb, tb)
    sep = np.flatnonzero(state == gjk.SEPARATED)
    assert len(sep) > 50
    for i in sep:
        for V, R, t, p in ((Va, Ra[i], ta[i], pa[i]), (Vb, Rb[i], tb[i], pb[i])):
            eq = ConvexHull(V @ R.T + t).equations
            assert (eq[:, :3] @ p + eq[:, 3]).max() < 1e-9
        assert np.linalg.norm(pb[i] - pa[i]) == pytest.approx(d[i], abs=1e-15)
        u = (pb[i] - pa[i]) / d[i]
        gap = (-(Vb @ Rb[i].T + tb[i]) @ u).max() * -1 - ((Va @ Ra[i].T + ta[i]) @ u).max()
        assert gap == pytest.approx(d[i], abs=1e-11)


def test_unit_cubes_by_hand():
    # Hand geometry (common practice, no source): two unit cubes
    # - face to face, centres 1.5 m apart on x: distance 0.5 m;
    # - the second turned 45 deg about z, centres 1.5 m apart on x: its vertical edge faces the first
    #   cube's face, distance 1.5 - 0.5 - sqrt(2)/2;
    # - the second turned 45 deg about z and about x, centres offset on x and y: corner to face
    #   distance computed from its extreme vertex;
    # - overlapping by 0.1 m: touching/overlapping.
    I = np.eye(3)[None]
    Rz = Rotation.from_euler("z", 45, degrees=True).as_matrix()[None]
    d, pa, pb, s = gjk.distance(CUBE, I, np.zeros((1, 3)), CUBE, I, np.array([[1.5, 0.2, -0.3]]))
    assert s[0] == gjk.SEPARATED and d[0] == pytest.approx(0.5, abs=1e-12)
    d, pa, pb, s = gjk.distance(CUBE, I, np.zeros((1, 3)), CUBE, Rz, np.array([[1.5, 0.0, 0.0]]))
    assert s[0] == gjk.SEPARATED and d[0] == pytest.approx(1.0 - np.sqrt(0.5), abs=1e-12)
    Rzx = Rotation.from_euler("zx", [45, 45], degrees=True).as_matrix()
    t = np.array([2.0, 0.1, 0.0])
    expected = (CUBE @ Rzx.T + t)[:, 0].min() - 0.5
    d, pa, pb, s = gjk.distance(CUBE, I, np.zeros((1, 3)), CUBE, Rzx[None], t[None])
    assert s[0] == gjk.SEPARATED and d[0] == pytest.approx(expected, abs=1e-12)
    d, pa, pb, s = gjk.distance(CUBE, I, np.zeros((1, 3)), CUBE, I, np.array([[0.9, 0.0, 0.0]]))
    assert s[0] == gjk.TOUCHING


def test_batch_equals_one_at_a_time():
    Va, _, Vb, _, Ra, ta, Rb, tb = _random_pair(11, 40, 40, 64, (3, 4))
    full = gjk.distance(Va, Ra, ta, Vb, Rb, tb)
    for i in range(0, 64, 7):
        one = gjk.distance(Va, Ra[i:i + 1], ta[i:i + 1], Vb, Rb[i:i + 1], tb[i:i + 1])
        for a, b in zip(full, one):
            assert np.array_equal(a[i:i + 1], b)


def test_penetration_depth_matches_python_fcl_and_hand_geometry():
    # Reference: python-fcl's signed distance (its own GJK/EPA, an independent library) on
    # overlapping random hulls, to its tolerance (1e-6 m); and by hand (common practice, no source):
    # two unit cubes overlapping by 0.1 m along x have depth 0.1 m, the separating direction x.
    Va, Fa, Vb, Fb, Ra, ta, Rb, tb = _random_pair(21, 120, 50, 600, (31, 32), spread=0.4)
    depth, pa, pb, ok = gjk.penetration(Va, Ra, ta, Vb, Rb, tb)
    oa, ob = _fcl_convex(Va, Fa), _fcl_convex(Vb, Fb)
    n = 0
    for i in np.flatnonzero(ok):
        oa.setTransform(fcl.Transform(Ra[i], ta[i]))
        ob.setTransform(fcl.Transform(Rb[i], tb[i]))
        req = fcl.DistanceRequest(enable_nearest_points=True, enable_signed_distance=True)
        sd = fcl.distance(oa, ob, req, fcl.DistanceResult())
        assert -depth[i] <= sd + 1e-6  # a lower bound on the signed distance ...
        assert abs(-depth[i] - sd) < 2e-6  # ... equal to it to python-fcl's tolerance
        assert np.linalg.norm(pa[i] - pb[i]) == pytest.approx(depth[i], abs=1e-15)
        n += 1
    assert n > 300
    I = np.eye(3)[None]
    depth, pa, pb, ok = gjk.penetration(CUBE, I, np.zeros((1, 3)), CUBE, I, np.array([[0.9, 0.05, -0.02]]))
    assert ok[0] and depth[0] == pytest.approx(0.1, abs=1e-12)
    assert np.abs((pa[0] - pb[0]) / depth[0]) == pytest.approx([1.0, 0.0, 0.0], abs=1e-9)
    # apart: no penetration reported
    depth, pa, pb, ok = gjk.penetration(CUBE, I, np.zeros((1, 3)), CUBE, I, np.array([[1.2, 0.0, 0.0]]))
    assert not ok[0]
