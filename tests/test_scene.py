"""Drawing meshes of every shape kind against analytic volumes and extents; posing; GLB scenes."""

from __future__ import annotations

import io
import math

import numpy as np
import pytest
import trimesh

from envelope.geometry import Body, Box, Capsule, Convex, Cylinder, HalfSpace, Sphere, TriMesh
from envelope.kinematics import Arm
from envelope.poses import pose_from_euler
from envelope.scene import (
    GLTF_FROM_CELL,
    SECTIONS,
    SLAB_THICKNESS,
    STATUS_RGBA,
    ZONE_OFFENDED_RGBA,
    ZONE_RGBA,
    body_mesh,
    cell_extent,
    export_glb,
    glb_bytes,
    posed_link_meshes,
    row_scene,
    shape_mesh,
    zone_node_name,
    zone_panel_names,
)

from test_report_support import invented_cell, invented_result

RNG = np.random.default_rng(20261201)


def _pose():
    return pose_from_euler(RNG.uniform(-1, 1, 3), RNG.uniform(-np.pi, np.pi, 3))


def test_sphere_volume_and_extent():
    # sphere volume V = 4/3 pi r^3 (handbook formula); an inscribed icosphere is slightly smaller
    r, c = 0.3, np.array([0.1, -0.2, 0.5])
    m = shape_mesh(Sphere(c, r))
    exact = 4.0 / 3.0 * math.pi * r**3
    assert m.is_watertight
    assert exact * 0.98 < m.volume <= exact
    np.testing.assert_allclose(m.bounds, [c - r, c + r], atol=r * 0.02)


def test_box_volume_is_exact_in_any_pose():
    # box volume V = a b c; the mesh is exact
    ext = np.array([0.4, 0.25, 0.1])
    pose = _pose()
    m = shape_mesh(Box(ext, pose))
    assert m.volume == pytest.approx(np.prod(ext), rel=1e-12)
    np.testing.assert_allclose(m.center_mass, pose[:3, 3], atol=1e-12)
    padded = shape_mesh(Box(ext, pose), padding=0.01)
    assert padded.volume == pytest.approx(np.prod(ext + 0.02), rel=1e-12)


def test_cylinder_volume_is_the_inscribed_prism():
    # a prism on the regular n-gon inscribed in a circle of radius r: area (n/2) r^2 sin(2 pi / n), times length
    r, length = 0.2, 0.7
    pose = _pose()
    m = shape_mesh(Cylinder(r, length, pose))
    prism = 0.5 * SECTIONS * r**2 * math.sin(2 * math.pi / SECTIONS) * length
    assert m.volume == pytest.approx(prism, rel=1e-9)
    assert prism < math.pi * r**2 * length  # the true cylinder, pi r^2 L, is a little larger
    axis = pose[:3, 2]
    along = m.vertices @ axis
    assert along.max() - along.min() == pytest.approx(length, rel=1e-12)


def test_capsule_volume_and_support_along_axis():
    # capsule volume V = pi r^2 L + 4/3 pi r^3 (cylinder plus two hemispheres)
    p0, p1, r = np.array([0.1, 0.2, 0.3]), np.array([0.5, -0.1, 0.9]), 0.08
    m = shape_mesh(Capsule(p0, p1, r))
    L = np.linalg.norm(p1 - p0)
    exact = math.pi * r**2 * L + 4.0 / 3.0 * math.pi * r**3
    assert m.is_watertight
    assert exact * 0.98 < m.volume <= exact
    u = (p1 - p0) / L
    # the support of a capsule along its axis: u.p1 + r at one end, u.p0 - r at the other
    assert (m.vertices @ u).max() == pytest.approx(u @ p1 + r, abs=1e-9)
    assert (m.vertices @ u).min() == pytest.approx(u @ p0 - r, abs=1e-9)
    # every vertex lies on the capsule's surface: distance to the segment equals r
    t = np.clip((m.vertices - p0) @ u / L, 0, 1)
    dist = np.linalg.norm(m.vertices - (p0 + t[:, None] * (p1 - p0)), axis=1)
    np.testing.assert_allclose(dist, r, atol=1e-9)


def test_degenerate_capsule_is_a_sphere():
    m = shape_mesh(Capsule([0, 0, 1], [0, 0, 1], 0.1))
    assert m.volume == pytest.approx(4.0 / 3.0 * math.pi * 0.1**3, rel=0.02)


def test_convex_hull_volume():
    # the hull of a unit cube's corners plus interior points is the cube: volume 1
    corners = np.array([[x, y, z] for x in (0, 1) for y in (0, 1) for z in (0, 1)], dtype=float)
    inner = RNG.uniform(0.1, 0.9, (20, 3))
    m = shape_mesh(Convex(np.vstack([corners, inner])))
    assert m.volume == pytest.approx(1.0, rel=1e-12)
    np.testing.assert_allclose(m.bounds, [[0, 0, 0], [1, 1, 1]])


def test_trimesh_tetrahedron_volume():
    # tetrahedron volume V = |det(b - a, c - a, d - a)| / 6
    v = np.array([[0, 0, 0], [0.3, 0, 0], [0, 0.4, 0], [0, 0, 0.5]], dtype=float)
    f = np.array([[0, 2, 1], [0, 1, 3], [0, 3, 2], [1, 2, 3]])
    m = shape_mesh(TriMesh(v, f, watertight=True))
    assert abs(m.volume) == pytest.approx(abs(np.linalg.det(v[1:] - v[0])) / 6.0, rel=1e-12)
    np.testing.assert_array_equal(m.faces, f)  # not processed or reordered


def test_halfspace_slab_lies_inside_its_plane_and_spans_the_extent():
    n = np.array([0.0, 0.6, 0.8])
    hs = HalfSpace(n, 0.25)
    extent = np.array([[-1.0, -2.0, 0.0], [3.0, 1.0, 2.0]])
    m = shape_mesh(hs, extent=extent)
    h = m.vertices @ n
    assert h.max() == pytest.approx(0.25, abs=1e-12)  # its top face is the boundary plane
    assert h.min() == pytest.approx(0.25 - SLAB_THICKNESS, abs=1e-12)  # and it is inside the solid
    centre = extent.mean(axis=0)
    on_plane = centre - (centre @ n - 0.25) * n
    np.testing.assert_allclose(m.vertices.mean(axis=0), on_plane - 0.5 * SLAB_THICKNESS * n, atol=1e-12)
    side = np.linalg.norm(extent[1] - extent[0])
    assert m.volume == pytest.approx(side * side * SLAB_THICKNESS, rel=1e-12)


def test_padding_inflates_round_shapes():
    b = Body("b", 0, (Sphere([0, 0, 0], 0.1), Capsule([0, 0, 0], [0, 0, 0.5], 0.05)), padding=0.02)
    m = body_mesh(b)
    assert m.bounds[1][2] == pytest.approx(0.5 + 0.07, abs=1e-9)


def test_posed_links_follow_the_dh_frames():
    # standard DH: frame 1 origin is (a1 cos q1, a1 sin q1, d1) (Denavit-Hartenberg 1955)
    arm = Arm.from_dh(a=[0.5, 0, 0, 0, 0, 0], alpha=[0] * 6, d=[0.3, 0, 0, 0, 0, 0], offset=[0] * 6)
    cell = invented_cell()
    import dataclasses

    cell = dataclasses.replace(cell, arm=arm, links=(Body("l1", 1, (Sphere([0, 0, 0], 0.01),)),), tool=dataclasses.replace(cell.tool, bodies=()))
    q = np.array([np.pi / 2, 0, 0, 0, 0, 0])
    m = posed_link_meshes(cell, q)["l1"]
    np.testing.assert_allclose(m.vertices.mean(axis=0), [0.0, 0.5, 0.3], atol=1e-9)


def test_cell_extent_holds_every_finite_zone_and_the_posed_arm():
    cell = invented_cell()
    q = np.radians([10, 20, -30, 0, 40, 0])
    ext = cell_extent(cell, qs=[q])
    for zone in cell.zones:
        for s in zone.shapes:
            if not isinstance(s, HalfSpace):
                b = shape_mesh(s).bounds
                assert np.all(b[0] >= ext[0]) and np.all(b[1] <= ext[1])
    for m in posed_link_meshes(cell, q).values():
        assert np.all(m.bounds[0] >= ext[0]) and np.all(m.bounds[1] <= ext[1])


def test_row_scene_names_colours_and_glb_round_trip(tmp_path):
    result = invented_result()
    i = result.worst_first()[0]
    row = result.rows[i]
    assert row.status == "intrusion"
    scene = row_scene(result.cell, row)
    path = tmp_path / "s.glb"
    export_glb(scene, path)
    back = trimesh.load(path)
    names = set(back.graph.nodes_geometry)
    expected = {f"body:{b.name}" for b in result.cell.bodies}
    for z in result.cell.zones:
        expected |= {zone_node_name(z.name, p) for p in zone_panel_names(z)}
    assert names == expected
    # the offending body and zone are red; an untouched zone is translucent grey
    colour = lambda name: tuple(back.geometry[back.graph[name][1]].visual.material.baseColorFactor)  # noqa: E731
    assert colour(f"body:{row.closest_body}") == STATUS_RGBA["intrusion"]
    assert colour(f"zone:{row.closest_other}") == ZONE_OFFENDED_RGBA  # a one-shape zone: no panel name
    assert colour("zone:east fence:north") == ZONE_RGBA
    # the loaded geometry sits where it was posed
    posed = posed_link_meshes(result.cell, row.q)[row.closest_body]
    got = back.geometry[back.graph[f"body:{row.closest_body}"][1]]
    gltf_from_cell = back.graph[f"body:{row.closest_body}"][0]
    np.testing.assert_allclose(gltf_from_cell, GLTF_FROM_CELL, atol=1e-12)  # Z up in the cell -> Y up in glTF
    world = got.vertices  # vertices stay in the cell frame
    np.testing.assert_allclose(world.min(axis=0), posed.bounds[0], atol=1e-6)
    assert glb_bytes(row_scene(result.cell, row)) == glb_bytes(row_scene(result.cell, row))
    assert io.BytesIO(path.read_bytes()).read(4) == b"glTF"
