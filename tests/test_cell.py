"""The cell-file loader: every shape kind, mounts, frames, meshes, generated capsules, targets, programs.

Independent checks: scipy's Rotation (Euler angles and quaternions), pytransform3d (frame chains),
trimesh (mesh volumes and point containment), scipy's ConvexHull (hull volumes), hashlib (SHA-256),
and closed-form volumes and areas (shoelace formula, box and prism volumes: handbook formulas).
"""

from __future__ import annotations

import hashlib
import math
from pathlib import Path

import numpy as np
import pytest
import trimesh
from scipy.spatial import ConvexHull
from scipy.spatial.transform import Rotation

from envelope.cell import Move, Program, load_cell
from envelope.cellshapes import polygon_area, triangulate_polygon
from envelope.geometry import Box, Capsule, Convex, Cylinder, HalfSpace, Sphere, TriMesh

DATA = Path(__file__).parent / "data"
MINIMAL = (DATA / "minimal-cell.toml").read_text()


def write_cell(tmp_path: Path, top: str = "", tail: str = "", base: str = MINIMAL) -> Path:
    """A cell file: ``top`` lines go before the first table (top-level keys), ``tail`` at the end."""
    path = tmp_path / "cell.toml"
    path.write_text(top + "\n" + base + "\n" + tail)
    return path


def zone(cell, name):
    return next(z for z in cell.zones if z.name == name)


def body(cell, name):
    return next(b for b in cell.bodies if b.name == name)


def box_mesh(box: Box) -> trimesh.Trimesh:
    return trimesh.creation.box(extents=box.extents, transform=box.pose)


def in_box(box: Box, point) -> bool:
    local = np.linalg.solve(box.pose, np.r_[point, 1.0])[:3]
    return bool((np.abs(local) < box.extents / 2).all())


def winding_number(vertices, faces, point) -> float:
    """Winding number of a closed triangle mesh about ``point``: 1 inside, 0 outside.

    The sum of the solid angles of its triangles seen from the point over 4 pi, each solid angle by
    the formula of Van Oosterom and Strackee (IEEE Trans. Biomed. Eng. 30(2), 1983): independent of
    trimesh's ray test.
    """
    t = np.asarray(vertices, dtype=np.float64)[np.asarray(faces)] - np.asarray(point, dtype=np.float64)
    a, b, c = t[:, 0], t[:, 1], t[:, 2]
    la, lb, lc = (np.linalg.norm(x, axis=1) for x in (a, b, c))
    num = np.einsum("ij,ij->i", a, np.cross(b, c))
    den = la * lb * lc + np.einsum("ij,ij->i", a, b) * lc + np.einsum("ij,ij->i", a, c) * lb \
        + np.einsum("ij,ij->i", b, c) * la
    return float(np.sum(2 * np.arctan2(num, den)) / (4 * np.pi))


# ---------------------------------------------------------------------- shapes
def test_every_zone_shape_kind(tmp_path):
    trimesh.creation.box(extents=[0.2, 0.2, 0.2]).export(tmp_path / "block.stl")
    cell = load_cell(write_cell(tmp_path, tail="""
[[zones]]
name = "ball"
kind = "keep-out"
shape = "sphere"
center = [1000, 0, 500]
radius = 100

[[zones]]
name = "bar"
kind = "guard"
shape = "capsule"
p0 = [0, 1000, 0]
p1 = [0, 1000, 500]
radius = 30

[[zones]]
name = "crate"
kind = "fixture"
shape = "box"
size = [400, 200, 100]
xyz = [800, -500, 50]
euler = [0, 0, 30]

[[zones]]
name = "table"
kind = "fixture"
shape = "box"
min = [500, 500, 0]
max = [900, 800, 700]

[[zones]]
name = "post"
kind = "machine"
shape = "cylinder"
radius = 80
length = 1500
xyz = [-900, 0, 750]

[[zones]]
name = "wedge"
kind = "fixture"
shape = "convex"
points = [[0, 0, 0], [100, 0, 0], [0, 100, 0], [0, 0, 100]]
xyz = [-500, -500, 0]

[[zones]]
name = "back wall"
kind = "wall"
shape = "half-space"
point = [-1500, 0, 0]
normal = [-2, 0, 0]

[[zones]]
name = "column"
kind = "machine"
shape = "prism"
points = [[0, 0], [200, 0], [200, 200], [0, 200]]
z_min = 0
z_max = 1000

[[zones]]
name = "block"
kind = "machine"
shape = "mesh"
file = "block.stl"
mesh_units = "m"
xyz = [1500, 0, 100]

[[zones]]
name = "side fence"
kind = "fence"
shape = "fence"
points = [[-1000, -1000], [1000, -1000]]
height = 1800
thickness = 50
"""))
    kinds = {z.name: type(z.shapes[0]) for z in cell.zones}
    assert kinds == {
        "floor": HalfSpace, "ball": Sphere, "bar": Capsule, "crate": Box, "table": Box, "post": Cylinder,
        "wedge": Convex, "back wall": HalfSpace, "column": Convex, "block": TriMesh, "side fence": Box,
    }
    ball = zone(cell, "ball").shapes[0]
    np.testing.assert_allclose(ball.center, [1.0, 0.0, 0.5])
    assert ball.radius == pytest.approx(0.1)
    crate = zone(cell, "crate").shapes[0]
    np.testing.assert_allclose(crate.extents, [0.4, 0.2, 0.1])
    # scipy: lowercase "xyz" is extrinsic (fixed axes), our "fixed-xyz"
    np.testing.assert_allclose(crate.pose[:3, :3], Rotation.from_euler("xyz", [0, 0, 30], degrees=True).as_matrix(),
                               atol=1e-12)
    table = zone(cell, "table").shapes[0]
    np.testing.assert_allclose(box_mesh(table).bounds, [[0.5, 0.5, 0.0], [0.9, 0.8, 0.7]], atol=1e-12)
    post = zone(cell, "post").shapes[0]
    assert (post.radius, post.length) == pytest.approx((0.08, 1.5))
    wall = zone(cell, "back wall").shapes[0]
    # the solid is x <= -1.5 behind the wall plane: normal (-1, 0, 0), offset n . p = 1.5
    np.testing.assert_allclose(wall.normal, [-1.0, 0.0, 0.0])
    assert wall.offset == pytest.approx(1.5)
    # a 0.2 m cube: volume 0.008 m^3 (closed form), read from a metre mesh in a millimetre cell
    block = zone(cell, "block").shapes[0]
    mesh = trimesh.Trimesh(block.vertices, block.faces)
    assert block.watertight and mesh.volume == pytest.approx(0.008)
    np.testing.assert_allclose(mesh.bounds, [[1.4, -0.1, 0.0], [1.6, 0.1, 0.2]], atol=1e-7)  # STL is float32
    assert [w for w in cell.warnings if "generated capsules" not in w] == []


def test_every_body_shape_kind_and_tool(tmp_path):
    trimesh.creation.icosphere(subdivisions=2, radius=40).export(tmp_path / "knob.ply")
    base = MINIMAL.replace('shape = "capsule"\np0 = [0, 0, 0]\np1 = [0, 0, 100]\nradius = 20\n', "")
    cell = load_cell(write_cell(tmp_path, base=base, tail="""
[[tool.parts]]
name = "adapter"
shape = "cylinder"
radius = 40
length = 30
xyz = [0, 0, 15]

[[tool.parts]]
name = "tip"
shape = "sphere"
center = [0, 0, 100]
radius = 10

[[tool.parts]]
name = "arm"
shape = "capsule"
p0 = [0, 0, 30]
p1 = [0, 0, 90]
radius = 12

[[tool.parts]]
name = "knob"
shape = "mesh"
file = "knob.ply"
xyz = [0, 50, 50]

[[tool.parts]]
name = "block"
shape = "box"
size = [20, 20, 20]

[[tool.parts]]
name = "fin"
shape = "convex"
points = [[0, 0, 0], [10, 0, 0], [0, 10, 0], [0, 0, 10]]

[tool.payload]
name = "part"
shape = "box"
size = [50, 50, 50]
xyz = [0, 0, 125]
"""))
    tool = body(cell, "probe")
    assert tool.frame == 6 and tool.role == "tool"
    assert [type(s) for s in tool.shapes] == [Cylinder, Sphere, Capsule, Convex, Box, Convex]
    knob = tool.shapes[3]
    # a tool mesh is its convex hull: scipy's hull of the loaded vertices has the same volume as trimesh's
    ico = trimesh.creation.icosphere(subdivisions=2, radius=0.04)
    assert ConvexHull(knob.vertices).volume == pytest.approx(ico.convex_hull.volume, rel=1e-6)  # PLY: float32
    np.testing.assert_allclose(knob.vertices.mean(axis=0), [0, 0.05, 0.05], atol=2e-3)
    payload = body(cell, "part")
    assert payload.role == "payload" and payload.frame == 6
    np.testing.assert_allclose(cell.tool.flange_from_tcp[:3, 3], [0, 0, 0.1])
    assert cell.settings["body_mesh_model"] == "convex hull"


def test_link_mesh_in_metres_inside_millimetre_cell_is_its_convex_hull(tmp_path):
    # an L-shaped (non-convex) link mesh: its hull is strictly bigger, and contains every vertex
    move = trimesh.transformations.translation_matrix
    a = trimesh.creation.box(extents=[0.3, 0.1, 0.1], transform=move([0.15, 0, 0]))
    b = trimesh.creation.box(extents=[0.1, 0.1, 0.3], transform=move([0, 0, 0.15]))
    trimesh.util.concatenate([a, b]).export(tmp_path / "ell.stl")
    (tmp_path / "ell-mm.obj").write_text(trimesh.util.concatenate([a, b]).apply_scale(1000).export(file_type="obj"))
    cell = load_cell(write_cell(tmp_path, tail="""
[[arm.links]]
link = 2
name = "upper arm"
shape = "mesh"
file = "ell.stl"
mesh_units = "m"

[[arm.links]]
link = 3
shape = "mesh"
file = "ell-mm.obj"
"""))
    upper = body(cell, "upper arm")
    assert upper.frame == 2 and isinstance(upper.shapes[0], Convex)
    hull = ConvexHull(upper.vertices if hasattr(upper, "vertices") else upper.shapes[0].vertices)
    lo, hi = upper.shapes[0].vertices.min(axis=0), upper.shapes[0].vertices.max(axis=0)
    np.testing.assert_allclose(lo, [-0.05, -0.05, -0.05], atol=1e-9)
    np.testing.assert_allclose(hi, [0.30, 0.05, 0.30], atol=1e-9)
    # hull of the L in the x-z plane: the 0.35 x 0.35 square less the triangle cut off at the inner
    # corner (legs 0.25) and the one at the empty outer corner (legs 0.05), times the depth 0.1
    # (closed form)
    assert hull.volume == pytest.approx((0.35**2 - 0.25**2 / 2 - 0.05**2 / 2) * 0.1, rel=1e-6)
    # the same mesh given in millimetres (the cell's default) loads to the same vertices
    np.testing.assert_allclose(np.sort(body(cell, "link 3").shapes[0].vertices, axis=0),
                               np.sort(upper.shapes[0].vertices, axis=0), atol=1e-9)
    assert "link 3" not in cell.settings["generated_links"] and "upper arm" not in cell.settings["generated_links"]


def test_gltf_binary_zone_mesh(tmp_path):
    # glTF stores metres (its specification); trimesh writes and reads it
    cyl = trimesh.creation.cylinder(radius=0.1, height=0.5, sections=64)
    cyl.export(tmp_path / "drum.glb")
    cell = load_cell(write_cell(tmp_path, tail="""
[[zones]]
name = "drum"
kind = "machine"
shape = "mesh"
file = "drum.glb"
mesh_units = "m"
euler = [90, 0, 0]
"""))
    drum = zone(cell, "drum").shapes[0]
    mesh = trimesh.Trimesh(drum.vertices, drum.faces)
    assert drum.watertight and mesh.volume == pytest.approx(cyl.volume)
    # turned 90 deg about x, the cylinder's axis lies along y: extents 0.2, 0.5, 0.2
    np.testing.assert_allclose(mesh.extents, [0.2, 0.5, 0.2], atol=1e-6)


def test_non_watertight_zone_mesh_warns_with_file_and_zone(tmp_path):
    box = trimesh.creation.box(extents=[100, 100, 100])
    open_box = trimesh.Trimesh(box.vertices, box.faces[:-2])  # one side missing
    open_box.export(tmp_path / "open.stl")
    cell = load_cell(write_cell(tmp_path, tail="""
[[zones]]
name = "hood"
kind = "guard"
shape = "mesh"
file = "open.stl"
"""))
    mesh = zone(cell, "hood").shapes[0]
    assert isinstance(mesh, TriMesh) and not mesh.watertight
    (warning,) = [w for w in cell.warnings if "generated capsules" not in w]
    assert "hood" in warning and "open.stl" in warning and "not watertight" in warning


def test_zone_with_several_parts_names_its_panels(tmp_path):
    cell = load_cell(write_cell(tmp_path, tail="""
[[zones]]
name = "press"
kind = "machine"

[[zones.parts]]
name = "frame"
shape = "box"
min = [1000, -500, 0]
max = [1500, 500, 2000]

[[zones.parts]]
name = "ram"
shape = "cylinder"
radius = 100
length = 300
xyz = [1200, 0, 1200]
"""))
    press = zone(cell, "press")
    assert press.panels == ("press/frame", "press/ram")
    assert [type(s) for s in press.shapes] == [Box, Cylinder]


# ---------------------------------------------------------------------- fences and prisms
def test_fence_run_panels(tmp_path):
    cell = load_cell(write_cell(tmp_path, tail="""
[[zones]]
name = "north fence"
kind = "fence"
shape = "fence"
points = [[-1000, 1000], [1000, 1000], [1000, -1000]]
height = 2000
bottom_gap = 200
thickness = 40
opening_size = 25
opening_shape = "slot"
opening_length = 60
"""))
    fence = zone(cell, "north fence")
    assert fence.panels == ("north fence/panel 1", "north fence/panel 2")
    att = dict(fence.attributes)
    assert att.pop("opening_shape") == "slot"
    assert att == pytest.approx({"height": 2.0, "bottom_gap": 0.2, "thickness": 0.04, "opening_size": 0.025,
                                 "opening_length": 0.06})
    assert fence.clearance == pytest.approx(0.1)  # the built-in fence default, 100 mm
    p1, p2 = (box_mesh(b) for b in fence.shapes)
    # panel 1 runs along y = 1 m from x = -1 to 1, lengthened by t/2 each end; from z 0.2 to 2.0
    np.testing.assert_allclose(p1.bounds, [[-1.02, 0.98, 0.2], [1.02, 1.02, 2.0]], atol=1e-9)
    np.testing.assert_allclose(p2.bounds, [[0.98, -1.02, 0.2], [1.02, 1.02, 2.0]], atol=1e-9)
    # the outer corner is closed: a point just inside it lies in one of the panels
    b1, b2 = fence.shapes
    assert in_box(b1, [1.019, 1.019, 1.0]) or in_box(b2, [1.019, 1.019, 1.0])
    # and the bottom gap is open
    assert not in_box(b1, [0.0, 1.0, 0.1])


def test_closed_fence_has_a_panel_per_side(tmp_path):
    cell = load_cell(write_cell(tmp_path, tail="""
[[zones]]
name = "pen"
kind = "fence"
shape = "fence"
points = [[0, 0], [1000, 0], [1000, 500]]
closed = true
height = 1400
thickness = 30
clearance = 250
"""))
    pen = zone(cell, "pen")
    assert len(pen.shapes) == 3 and pen.clearance == pytest.approx(0.25)
    lengths = sorted(b.extents[0] for b in pen.shapes)
    # 0.5, 1.0 and the hypotenuse sqrt(1.25), each lengthened by the thickness
    np.testing.assert_allclose(lengths, np.array([0.5, 1.0, math.sqrt(1.25)]) + 0.03)
    assert "opening_size" not in pen.attributes


def test_convex_prism_is_convex_with_prism_volume(tmp_path):
    cell = load_cell(write_cell(tmp_path, tail="""
[[zones]]
name = "hexagon"
kind = "machine"
shape = "prism"
points = [[1000, 0], [500, 866.0254], [-500, 866.0254], [-1000, 0], [-500, -866.0254], [500, -866.0254]]
z_min = 100
z_max = 600
"""))
    hexagon = zone(cell, "hexagon").shapes[0]
    assert isinstance(hexagon, Convex)
    # regular hexagon of side s: area 3 sqrt(3) / 2 s^2 (handbook formula), times height 0.5 m
    assert ConvexHull(hexagon.vertices).volume == pytest.approx(1.5 * math.sqrt(3) * 0.5, rel=1e-6)


def test_non_convex_prism_is_a_watertight_mesh(tmp_path):
    cell = load_cell(write_cell(tmp_path, tail="""
[[zones]]
name = "ell"
kind = "fixture"
shape = "prism"
points = [[0, 0], [2000, 0], [2000, 1000], [1000, 1000], [1000, 2000], [0, 2000]]
z_min = 0
z_max = 500
"""))
    ell = zone(cell, "ell").shapes[0]
    assert isinstance(ell, TriMesh) and ell.watertight
    mesh = trimesh.Trimesh(ell.vertices, ell.faces)
    assert mesh.is_watertight and mesh.is_volume
    # L of 2 x 2 m less a 1 x 1 m corner: 3 m^2, times 0.5 m (closed form)
    assert mesh.volume == pytest.approx(1.5)
    # winding numbers: the notch is outside, the arms are inside
    points = ([1.5, 1.5, 0.25], [0.5, 1.5, 0.25], [1.5, 0.5, 0.25])
    inside = [winding_number(ell.vertices, ell.faces, p) for p in points]
    assert inside == pytest.approx([0.0, 1.0, 1.0], abs=1e-9)


def test_ear_clipping_matches_shoelace_area():
    rng = np.random.default_rng(7)
    # star-shaped (hence simple) random polygons, clockwise and counter-clockwise
    for _ in range(20):
        n = int(rng.integers(5, 14))
        angles = np.sort(rng.uniform(0, 2 * np.pi, n))
        radii = rng.uniform(0.3, 1.0, n)
        pts = np.column_stack([radii * np.cos(angles), radii * np.sin(angles)])
        if rng.random() < 0.5:
            pts = pts[::-1]
        tris = triangulate_polygon(pts)
        assert tris.shape == (n - 2, 3)
        a = pts[tris]
        tri_area = 0.5 * ((a[:, 1, 0] - a[:, 0, 0]) * (a[:, 2, 1] - a[:, 0, 1])
                          - (a[:, 2, 0] - a[:, 0, 0]) * (a[:, 1, 1] - a[:, 0, 1]))
        assert (tri_area > 0).all()
        assert tri_area.sum() == pytest.approx(abs(polygon_area(pts)), rel=1e-9)


def test_prism_matches_trimesh_extrude_polygon(tmp_path):
    shapely = pytest.importorskip("shapely.geometry")
    pts = [[0, 0], [3, 0], [3, 1], [1, 1], [1, 2], [3, 2], [3, 3], [0, 3]]
    cell = load_cell(write_cell(tmp_path, top='units = "m"', tail=f"""
[[zones]]
name = "cee"
kind = "fixture"
shape = "prism"
points = {pts}
z_min = 0
z_max = 2
"""))
    ours = zone(cell, "cee").shapes[0]
    theirs = trimesh.creation.extrude_polygon(shapely.Polygon(pts), 2.0)
    assert trimesh.Trimesh(ours.vertices, ours.faces).volume == pytest.approx(theirs.volume)


# ---------------------------------------------------------------------- mounting
MOUNTS = {
    # (mount keys, expected direction of the base z axis in the world)
    "floor": ('xyz = [0, 0, 0]\neuler = [0, 0, 0]', [0, 0, 1]),
    "wall": ('xyz = [-1000, 0, 1200]\neuler = [0, 90, 0]', [1, 0, 0]),
    "ceiling": ('xyz = [0, 0, 2500]\neuler = [180, 0, 0]', [0, 0, -1]),
    "ceiling-quaternion": ('xyz = [0, 0, 2500]\nquaternion = [0, 1, 0, 0]', [0, 0, -1]),
    "wall-matrix": ('matrix = [[0, 0, 1, -1000], [0, 1, 0, 0], [-1, 0, 0, 1200], [0, 0, 0, 1]]', [1, 0, 0]),
}


@pytest.mark.parametrize("mount", sorted(MOUNTS))
def test_mount_orientations(tmp_path, mount):
    keys, z_world = MOUNTS[mount]
    cell = load_cell(write_cell(tmp_path, base=MINIMAL.replace("[arm.mount]\nxyz = [0, 0, 0]", "[arm.mount]\n" + keys)))
    world_from_base = cell.world_from_base
    np.testing.assert_allclose(world_from_base[:3, 2], z_world, atol=1e-12)
    # the shoulder (frame 1 origin) lies d1 = 400 mm out along the base z axis, a1 = 75 mm along x
    q = np.zeros(6)
    shoulder = (world_from_base @ cell.arm.frames(q)[1])[:3, 3]
    expected = world_from_base[:3, 3] + 0.4 * np.asarray(z_world) + 0.075 * world_from_base[:3, 0]
    np.testing.assert_allclose(shoulder, expected, atol=1e-12)
    assert cell.frames["base"] is cell.world_from_base or np.allclose(cell.frames["base"], world_from_base)


def test_mount_quaternion_matches_scipy(tmp_path):
    q_wxyz = np.array([0.9238795325112867, 0.0, 0.3826834323650898, 0.0])  # 45 deg about y
    keys = f"xyz = [100, 200, 300]\nquaternion = {q_wxyz.tolist()}"
    cell = load_cell(write_cell(tmp_path, base=MINIMAL.replace("[arm.mount]\nxyz = [0, 0, 0]", "[arm.mount]\n" + keys)))
    # scipy's quaternions are scalar-last (x, y, z, w)
    expected = Rotation.from_quat(np.roll(q_wxyz, -1)).as_matrix()
    np.testing.assert_allclose(cell.world_from_base[:3, :3], expected, atol=1e-12)
    np.testing.assert_allclose(cell.world_from_base[:3, 3], [0.1, 0.2, 0.3])


# ---------------------------------------------------------------------- frames and targets
def test_frames_chained_two_deep_match_pytransform3d(tmp_path):
    pt = pytest.importorskip("pytransform3d.transformations")
    pr = pytest.importorskip("pytransform3d.rotations")
    cell = load_cell(write_cell(tmp_path, tail="""
[frames.table]
xyz = [800, 200, 700]
euler = [0, 0, 90]

[frames.jig]
parent = "table"
xyz = [100, 50, 20]
euler = [10, 20, 30]
convention = "euler-zyz"

[[targets]]
name = "pick"
frame = "jig"
xyz = [10, 20, 30]
euler = [180, 0, 45]

[[zones]]
name = "fixture"
kind = "fixture"
frame = "jig"
shape = "sphere"
center = [0, 0, 0]
radius = 20
"""))
    d = np.radians
    world_from_table = pt.transform_from(pr.matrix_from_euler(d([0, 0, 90]), 0, 1, 2, True), [0.8, 0.2, 0.7])
    # euler-zyz here: about z, then the new y, then the new z (intrinsic)
    table_from_jig = pt.transform_from(pr.matrix_from_euler(d([10, 20, 30]), 2, 1, 2, False), [0.1, 0.05, 0.02])
    jig_from_tcp = pt.transform_from(pr.matrix_from_euler(d([180, 0, 45]), 0, 1, 2, True), [0.01, 0.02, 0.03])
    world_from_jig = pt.concat(table_from_jig, world_from_table)  # pytransform3d: concat(A2B, B2C) = B2C @ A2B
    np.testing.assert_allclose(cell.frames["jig"], world_from_jig, atol=1e-12)
    target = cell.target("pick")
    np.testing.assert_allclose(target.world_from_tcp, world_from_jig @ jig_from_tcp, atol=1e-12)
    assert target.frame == "jig"
    np.testing.assert_allclose(zone(cell, "fixture").shapes[0].center, world_from_jig[:3, 3], atol=1e-12)


def test_zone_box_in_a_rotated_frame(tmp_path):
    cell = load_cell(write_cell(tmp_path, tail="""
[frames.bay]
xyz = [1000, 0, 0]
euler = [0, 0, 90]

[[zones]]
name = "bin"
kind = "fixture"
frame = "bay"
shape = "box"
min = [0, 0, 0]
max = [400, 200, 300]
"""))
    bounds = box_mesh(zone(cell, "bin").shapes[0]).bounds
    # rotating by +90 deg about z takes x to y and y to -x
    np.testing.assert_allclose(bounds, [[0.8, 0.0, 0.0], [1.0, 0.4, 0.3]], atol=1e-12)


def test_targets_from_csv_euler_quaternion_matrix(tmp_path):
    R = Rotation.from_euler("ZYZ", [30, 40, 50], degrees=True)  # scipy: uppercase is intrinsic
    m = R.as_matrix()
    (tmp_path / "targets.csv").write_text(
        "name,frame,x,y,z,convention,euler_1,euler_2,euler_3,qw,qx,qy,qz,"
        "r11,r12,r13,r21,r22,r23,r31,r32,r33\n"
        "# a comment line\n"
        "e,world,500,0,600,euler-zyz,30,40,50" + "," * 13 + "\n"
        "q,base,500,0,600,,,,," + ",".join(repr(float(v)) for v in np.roll(R.as_quat(), 1)) + "," * 9 + "\n"
        "m,world,500,0,600,,,,,,,,," + ",".join(repr(float(v)) for v in m.ravel()) + "\n"
        "plain,world,1,2,3" + "," * 17 + "\n"
    )
    cell = load_cell(write_cell(tmp_path, top='targets_file = "targets.csv"'))
    names = [t.name for t in cell.targets]
    assert names == ["e", "q", "m", "plain"]
    for t in cell.targets[:3]:
        np.testing.assert_allclose(t.world_from_tcp[:3, :3], m, atol=1e-12)
        np.testing.assert_allclose(t.world_from_tcp[:3, 3], [0.5, 0.0, 0.6])
    np.testing.assert_allclose(cell.target("plain").world_from_tcp, np.diag([1.0, 1, 1, 1]) + np.pad(
        np.array([[0.001], [0.002], [0.003]]), ((0, 1), (3, 0))))
    assert cell.target("e").source == "targets.csv row 3"
    assert cell.target("q").frame == "base"


def test_angles_in_radians_and_lengths_in_metres(tmp_path):
    cell_mm = load_cell(write_cell(tmp_path, tail="""
[[targets]]
name = "t"
xyz = [500, 100, 700]
euler = [180, 0, 90]
"""))
    text = (MINIMAL.replace("a = 75", "a = 0.075").replace("a = 420", "a = 0.42").replace("a = 40", "a = 0.04")
            .replace("d = 400", "d = 0.4").replace("d = 440", "d = 0.44").replace("d = 80", "d = 0.08")
            .replace("capsule_radius = 50", "capsule_radius = 0.05").replace("p1 = [0, 0, 100]", "p1 = [0, 0, 0.1]")
            .replace("radius = 20", "radius = 0.02").replace("xyz = [0, 0, 100]", "xyz = [0, 0, 0.1]"))
    for deg in (-90, 90, 145, -120, 155, -190, 190, -125, 125, -360, 360, -170, 170, -80):
        text = text.replace(f"= {deg}\n", f"= {math.radians(deg)!r}\n")
    sub = tmp_path / "metres"
    sub.mkdir()
    cell_m = load_cell(write_cell(sub, top='units = "m"\nangle_units = "rad"', base=text, tail=f"""
[[targets]]
name = "t"
xyz = [0.5, 0.1, 0.7]
euler = [{math.pi!r}, 0, {math.pi / 2!r}]
"""))
    for attr in ("a", "d", "alpha", "offset", "limits"):
        np.testing.assert_allclose(getattr(cell_m.arm, attr), getattr(cell_mm.arm, attr), atol=1e-12)
    np.testing.assert_allclose(cell_m.target("t").world_from_tcp, cell_mm.target("t").world_from_tcp, atol=1e-12)
    np.testing.assert_allclose(cell_m.tool.flange_from_tcp, cell_mm.tool.flange_from_tcp)
    assert cell_mm.arm.limits[1, 0] == pytest.approx(math.radians(-80))


# ---------------------------------------------------------------------- generated capsules
@pytest.mark.parametrize("convention", ["standard", "modified"])
def test_generated_capsules_run_between_dh_frame_origins(tmp_path, convention):
    cell = load_cell(write_cell(tmp_path, base=MINIMAL.replace('"standard"', f'"{convention}"')))
    assert cell.settings["generated_links"] == tuple(f"link {i}" for i in range(7))
    arm = cell.arm
    rng = np.random.default_rng(11)
    for q in rng.uniform(-np.pi, np.pi, (5, 6)):
        F = arm.frames(q)
        for link in cell.links:
            i = link.frame
            ends = [(F[i] @ np.r_[p, 1.0])[:3] for s in link.shapes if isinstance(s, Capsule) for p in (s.p0, s.p1)]
            for s in link.shapes:
                assert s.radius == pytest.approx(0.05)
            if not ends:  # a link with no DH extent (a = d = 0): a sphere at its frame origin
                assert all(isinstance(s, Sphere) for s in link.shapes)
                np.testing.assert_allclose(link.shapes[0].center, 0.0)
                continue
            if convention == "standard" and i >= 1:
                # link i runs from the origin of frame i-1 along its z by d_i, then along x_i to origin i
                o_prev, z_prev = F[i - 1][:3, 3], F[i - 1][:3, 2]
                knee = o_prev + arm.d[i - 1] * z_prev
                pts = [o_prev, knee, F[i][:3, 3]]
                for p in ends:
                    assert min(np.linalg.norm(p - x) for x in pts) < 1e-9
                assert min(np.linalg.norm(p - F[i][:3, 3]) for p in ends) < 1e-9
            if convention == "modified":
                # link i runs from O_i - d_i z_i to O_i, then along x_i by a_i (row i+1) to the
                # foot of the next joint's d segment, O_(i+1) - d_(i+1) z_(i+1)
                pts = [F[i][:3, 3]]
                if i >= 1:
                    pts.append(F[i][:3, 3] - arm.d[i - 1] * F[i][:3, 2])
                if i <= 5:
                    pts.append(F[i + 1][:3, 3] - arm.d[i] * F[i + 1][:3, 2])
                for p in ends:
                    assert min(np.linalg.norm(p - x) for x in pts) < 1e-9


def test_generated_capsules_that_always_meet_are_warned(tmp_path):
    # the fixture's link 3 is 40 mm long (a3) and link 5 has no length (spherical wrist): with 50 mm
    # capsules, links 2 and 4, and links 4 and 6, can never be 10 mm apart
    cell = load_cell(write_cell(tmp_path))
    warned = [w for w in cell.warnings if "generated capsules" in w]
    assert len(warned) == 2
    assert '"link 2" and "link 4"' in warned[0] and '"link 3" between them is 40 mm long' in warned[0]
    assert '"link 4" and "link 6"' in warned[1] and "(110 mm)" in warned[1]  # 50 + 50 + 10
    # the bound is sound: over random configurations the two capsules' axes come no farther apart
    # than the short link's length allows (end point of one to start point of the other)
    rng = np.random.default_rng(5)
    for q in rng.uniform(-np.pi, np.pi, (20, 6)):
        F = cell.arm.frames(q)
        end_2 = (F[2] @ np.r_[cell.links[2].shapes[-1].p1, 1])[:3]
        start_4 = (F[4] @ np.r_[cell.links[4].shapes[0].p0, 1])[:3]
        assert np.linalg.norm(end_2 - start_4) <= 0.04 + 1e-12
    allowed = load_cell(write_cell(tmp_path, top='allowed_self_pairs = [["link 2", "link 4"], ["link 6", "link 4"]]'))
    assert [w for w in allowed.warnings if "generated capsules" in w] == []


def test_padding_applies_to_every_link(tmp_path):
    padded = MINIMAL.replace("capsule_radius = 50", "capsule_radius = 50\npadding = 15")
    cell = load_cell(write_cell(tmp_path, base=padded, tail="""
[[arm.links]]
link = 4
padding = 5
"""))
    assert [b.padding for b in cell.links] == pytest.approx([0.015] * 4 + [0.005] + [0.015] * 2)
    assert body(cell, "probe").padding == 0.0


# ---------------------------------------------------------------------- settings, inputs, programs
def test_clearances_self_pairs_and_inputs(tmp_path):
    (tmp_path / "t.csv").write_text("name,x,y,z\nhome,500,0,800\n")
    path = write_cell(tmp_path, top="""self_clearance = 5
stopping_allowance = 40
allowed_self_pairs = [["link 6", "probe"]]
targets_file = "t.csv"
""", tail="""
[required_clearance]
fence = 150
floor = 0
""".replace("[required_clearance]", "[required_clearance]"))
    cell = load_cell(path)
    assert cell.self_clearance == pytest.approx(0.005) and cell.stopping_allowance == pytest.approx(0.04)
    assert cell.settings["required_clearance"]["fence"] == pytest.approx(0.15)
    assert cell.settings["required_clearance"]["guard"] == pytest.approx(0.1)  # built-in default
    assert zone(cell, "floor").clearance == 0.0
    assert cell.self_pairs_allowed == frozenset({frozenset({"link 6", "probe"})})
    inputs = dict(cell.inputs)
    assert inputs["cell.toml"] == hashlib.sha256(path.read_bytes()).hexdigest()
    assert inputs["t.csv"] == hashlib.sha256((tmp_path / "t.csv").read_bytes()).hexdigest()
    assert cell.source == str(path)


def test_programs_are_parsed_in_order(tmp_path):
    cell = load_cell(write_cell(tmp_path, tail="""
[[targets]]
name = "a"
xyz = [500, 0, 600]

[[targets]]
name = "b"
xyz = [500, 200, 600]

[[programs]]
name = "cycle"
moves = [
    { to = "a", motion = "joint" },
    { to = "b", motion = "linear", branch = "front/up/noflip", stopping_allowance = 30 },
    { to = "a", motion = "joint" },
]
"""))
    assert cell.programs == (
        Program("cycle", (Move("a", "joint"), Move("b", "linear", "front/up/noflip", pytest.approx(0.03)),
                          Move("a", "joint")), "cell.toml [[programs]] 1"),
    )


def test_no_tool_warns_and_uses_the_flange(tmp_path):
    start = MINIMAL.index("[tool]")
    end = MINIMAL.index("[[zones]]")
    cell = load_cell(write_cell(tmp_path, base=MINIMAL[:start] + MINIMAL[end:]))
    np.testing.assert_array_equal(cell.tool.flange_from_tcp, np.eye(4))
    assert cell.tool.bodies == () and any("no [tool]" in w for w in cell.warnings)
