"""Geometry functions: support functions, inside tests, closest points, bounding spheres, transforms."""

from __future__ import annotations

import numpy as np
import pytest
import trimesh
from scipy.spatial.transform import Rotation

from envelope import geometry as g


def _pose(rng, spread=0.5):
    T = np.eye(4)
    T[:3, :3] = Rotation.random(random_state=rng).as_matrix()
    T[:3, 3] = rng.uniform(-spread, spread, 3)
    return T


def _shapes(rng):
    """Each primitive with an equivalent trimesh solid (independent library) for cross-checks."""
    T = _pose(rng)
    box = g.Box([0.4, 0.7, 0.2], T)
    cyl = g.Cylinder(0.3, 0.8, T)
    sph = g.Sphere([0.1, -0.2, 0.3], 0.35)
    p0, p1 = np.array([0.1, 0.0, -0.2]), np.array([0.4, 0.3, 0.3])
    cap = g.Capsule(p0, p1, 0.15)
    ico = trimesh.creation.icosphere(subdivisions=2, radius=0.5)
    cvx = g.Convex(ico.vertices @ np.diag([1.0, 0.6, 0.3]) + [0.2, 0.0, 0.0])
    return {
        "box": (box, trimesh.creation.box([0.4, 0.7, 0.2], transform=T)),
        "cylinder": (cyl, trimesh.creation.cylinder(0.3, 0.8, sections=256, transform=T)),
        "sphere": (sph, trimesh.creation.icosphere(subdivisions=5, radius=0.35).apply_translation(sph.center)),
        "capsule": (cap, _capsule_mesh(cap)),
        "convex": (cvx, trimesh.Trimesh(cvx.vertices, g.hull_faces(cvx)).convex_hull),
    }


def _capsule_mesh(c):
    d = c.p1 - c.p0
    L = np.linalg.norm(d)
    m = trimesh.creation.capsule(height=L, radius=c.radius, count=[128, 128])
    T = np.eye(4)
    T[:3, :3] = Rotation.align_vectors([d / L], [[0, 0, 1.0]])[0].as_matrix()
    T[:3, 3] = 0.5 * (c.p0 + c.p1)
    return m.apply_transform(T)


# tolerance of the faceted trimesh stand-ins (chord error of 256 sections / subdivided spheres)
FACET_TOL = {"box": 1e-9, "cylinder": 3e-5, "sphere": 2e-4, "capsule": 2e-4, "convex": 1e-9}


@pytest.mark.parametrize("kind", ["box", "cylinder", "sphere", "capsule", "convex"])
def test_support_matches_mesh_vertices(kind):
    rng = np.random.default_rng(20)
    shape, mesh = _shapes(rng)[kind]
    u = rng.normal(size=(500, 3))
    u /= np.linalg.norm(u, axis=1, keepdims=True)
    h = g.support(shape, u)
    # the support function of a mesh is the max over its vertices (trimesh vertices, independent)
    h_mesh = (u @ mesh.vertices.T).max(axis=1)
    assert np.all(h >= h_mesh - 1e-12)  # the solid contains the (inscribed) mesh
    assert np.all(h <= h_mesh + FACET_TOL[kind])
    pts = g.support_point(shape, u)
    assert np.allclose((u * pts).sum(axis=1), h, atol=1e-12)
    assert g.contains_points(shape, pts, tol=1e-9).all()
    assert g.support(shape, u[0]) == pytest.approx(h[0])


@pytest.mark.parametrize("kind", ["box", "cylinder", "sphere", "capsule", "convex"])
def test_contains_points_matches_trimesh(kind):
    rng = np.random.default_rng(21)
    shape, mesh = _shapes(rng)[kind]
    c, r = g.bounding_sphere(shape)
    pts = c + rng.uniform(-r, r, (300, 3))
    # trimesh's ray test on the watertight stand-in mesh (independent library); skip points on the facets' band
    near = np.abs(trimesh.proximity.signed_distance(mesh, pts)) < 2 * FACET_TOL[kind] + 1e-9
    ref = mesh.contains(pts)
    got = g.contains_points(shape, pts)
    assert np.array_equal(got[~near], ref[~near])
    assert 10 < ref.sum() < 290  # both inside and outside points are tested


def test_watertight_mesh_inside_and_surface_mesh():
    ico = trimesh.creation.icosphere(subdivisions=2, radius=0.5)
    solid = g.TriMesh(ico.vertices, ico.faces, watertight=True)
    surface = g.TriMesh(ico.vertices, ico.faces, watertight=False)
    pts = np.array([[0, 0, 0], [0.2, 0.1, -0.1], [0.7, 0, 0]], dtype=float)
    assert g.contains_points(solid, pts).tolist() == [True, True, False]
    assert not g.contains_points(surface, pts).any()


@pytest.mark.parametrize("kind", ["box", "cylinder", "sphere", "capsule"])
def test_closest_point_matches_trimesh(kind):
    rng = np.random.default_rng(22)
    shape, mesh = _shapes(rng)[kind]
    c, r = g.bounding_sphere(shape)
    pts = c + rng.normal(size=(300, 3)) * r
    pts = pts[~g.contains_points(shape, pts)]
    cp = g.closest_point(shape, pts)
    d = np.linalg.norm(pts - cp, axis=1)
    _, d_ref, _ = trimesh.proximity.closest_point(mesh, pts)  # independent library
    assert np.allclose(d, d_ref, atol=2 * FACET_TOL[kind] + 1e-9)
    inside = c[None] + 0.0
    assert np.allclose(g.closest_point(shape, inside), inside) == bool(g.contains_points(shape, inside)[0])


def test_closest_on_triangles_matches_trimesh():
    rng = np.random.default_rng(23)
    tris = rng.uniform(-1, 1, (2000, 3, 3))
    pts = rng.uniform(-2, 2, (2000, 3))
    ref = trimesh.triangles.closest_point(tris, pts)  # independent library
    assert np.allclose(g.closest_on_triangles(tris, pts), ref, atol=1e-9)


@pytest.mark.parametrize("kind", ["box", "cylinder", "sphere", "capsule", "convex"])
def test_bounding_sphere_contains_shape(kind):
    rng = np.random.default_rng(24)
    shape, _ = _shapes(rng)[kind]
    c, r = g.bounding_sphere(shape)
    u = rng.normal(size=(1000, 3))
    u /= np.linalg.norm(u, axis=1, keepdims=True)
    # a ball contains a convex solid iff its support function is below the ball's everywhere
    assert np.all(g.support(shape, u) <= u @ c + r + 1e-12)


@pytest.mark.parametrize("kind", ["box", "cylinder", "sphere", "capsule", "convex"])
def test_transformed_support(kind):
    rng = np.random.default_rng(25)
    shape, _ = _shapes(rng)[kind]
    T = _pose(rng, 2.0)
    moved = g.transformed(shape, T)
    u = rng.normal(size=(200, 3))
    # h_{T S}(u) = u . t + h_S(R^T u)
    assert np.allclose(g.support(moved, u), u @ T[:3, 3] + g.support(shape, u @ T[:3, :3]), atol=1e-12)


def test_half_space():
    hs = g.HalfSpace([0, 0, 1.0], 0.5)
    assert g.support(hs, [0, 0, 2.0]) == pytest.approx(1.0)
    assert np.isinf(g.support(hs, [1.0, 0, 0]))
    assert g.contains_points(hs, [[0, 0, 0.5], [0, 0, 0.6]]).tolist() == [True, False]
    assert np.allclose(g.closest_point(hs, [1.0, 2.0, 3.0]), [1.0, 2.0, 0.5])
    moved = g.transformed(hs, _pose(np.random.default_rng(26), 1.0))
    assert np.linalg.norm(moved.normal) == pytest.approx(1.0)


def test_convex_hull_of_mesh_contains_it():
    m = trimesh.creation.annulus(0.2, 0.5, 0.3)
    hull = g.convex_hull(g.TriMesh(m.vertices, m.faces, watertight=True))
    assert g.contains_points(hull, m.vertices, tol=1e-9).all()
    # scipy's hull (used by the engine) against trimesh's convex hull (independent): same volume
    from scipy.spatial import ConvexHull

    assert ConvexHull(hull.vertices).volume == pytest.approx(m.convex_hull.volume, rel=1e-9)
