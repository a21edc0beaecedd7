"""Tests of envelope.space: maximum, restricted and operating spaces are conservative and not too loose.

Independent references: an analytic swept region (a planar two-link arm sweeps an annulus), dense
seeded random sampling of configurations with points on the posed solids, scipy's cKDTree / brute
force for distances, and trimesh for the exported mesh.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import trimesh

from envelope import space as S
from envelope.cell import Cell, Tool
from envelope.cellshapes import generated_link_shapes
from envelope.errors import InputError
from envelope.geometry import Body, Capsule, Sphere
from envelope.kinematics import Arm

TINY = 1e-3  # radius (m) of the tiny marker spheres that stand for "no geometry"
L1, L2, R_CAPSULE = 0.5, 0.3, 0.05


def planar_cell(world_from_base=None):
    """A 6-joint standard-DH arm whose joints 1, 4, 5, 6 are locked by tiny ranges: joints 2 and 3
    move links of lengths L1, L2 in the base's x-z plane; only link 3 (elbow to tip) has a capsule."""
    arm = Arm.from_dh(
        a=[0, L1, L2, 0, 0, 0], alpha=[math.pi / 2, 0, 0, 0, 0, 0], d=[0] * 6, offset=[0] * 6,
        limits=[[-1e-6, 1e-6], [-math.pi, math.pi], [-math.pi, math.pi], [-1e-6, 1e-6], [-1e-6, 1e-6],
                [-1e-6, 1e-6]],
    )
    links = [
        Body("link 0", 0, (Sphere([0, 0, 0], TINY),)),
        Body("link 1", 1, (Sphere([L1, 0, 0], TINY),)),  # at radius L1 from axis 2: inside the annulus
        Body("link 2", 2, (Sphere([0, 0, 0], TINY),)),  # the elbow
        Body("link 3", 3, (Capsule([-L2, 0, 0], [0, 0, 0], R_CAPSULE),)),  # elbow to tip
    ] + [Body(f"link {i}", i, (Sphere([0, 0, 0], TINY),)) for i in (4, 5, 6)]
    return Cell(name="planar", arm=arm, world_from_base=np.eye(4) if world_from_base is None else world_from_base,
                links=tuple(links), tool=Tool(np.eye(4), ()), zones=())


def annulus_distance(points, z0=0.0):
    """Distance from points to the planar annulus |L1 - L2| <= s <= L1 + L2 in the plane y = 0 about
    the y axis through (0, 0, z0). Analytic: with s = hypot(x, z - z0), h = |y|: h inside the radii,
    else hypot(distance to the nearer radius, h) (elementary geometry)."""
    a, b = abs(L1 - L2), L1 + L2
    s = np.hypot(points[:, 0], points[:, 2] - z0)
    h = np.abs(points[:, 1])
    radial = np.where(s < a, a - s, np.where(s > b, s - b, 0.0))
    return np.hypot(radial, h)


def demo_cell(limits=None, world_from_base=None):
    """An invented six-axis arm of about 0.9 m reach (spherical wrist), DH capsules r = 50 mm, a
    150 mm tool capsule."""
    a = [0.05, 0.40, 0.03, 0, 0, 0]
    alpha = [-math.pi / 2, 0, -math.pi / 2, math.pi / 2, -math.pi / 2, 0]
    d = [0.35, 0, 0, 0.40, 0, 0.08]
    if limits is None:
        limits = np.radians([[-170, 170], [-100, 140], [-150, 70], [-180, 180], [-120, 120], [-360, 360]])
    arm = Arm.from_dh(a, alpha, d, [0, -math.pi / 2, 0, 0, 0, 0], limits)
    links = tuple(Body(f"link {i}", i, tuple(generated_link_shapes(arm.a, arm.alpha, arm.d, "standard", i, 0.05)))
                  for i in range(7))
    tool = Tool(np.eye(4), (Body("tool", 6, (Capsule([0, 0, 0], [0, 0, 0.15], 0.03),), padding=0.01, role="tool"),))
    return Cell(name="demo", arm=arm, world_from_base=np.eye(4) if world_from_base is None else world_from_base,
                links=links, tool=tool, zones=())


def surface_points(cell, q, rng, per_shape=40):
    """Points on the surfaces of every moving body's (padded) capsules and spheres at configurations q."""
    W = cell.world_from_base @ cell.arm.frames(q)  # (n, 7, 4, 4)
    out = []
    for body in [b for b in cell.links if b.frame >= 1] + list(cell.tool.bodies):
        for s in body.shapes:
            if isinstance(s, Capsule):
                t = rng.random((len(q), per_shape, 1))
                c = s.p0 + t * (s.p1 - s.p0)
                r = s.radius + body.padding
            else:
                c = np.broadcast_to(s.center, (len(q), per_shape, 3))
                r = s.radius + body.padding
            u = rng.normal(size=(len(q), per_shape, 3))
            u /= np.linalg.norm(u, axis=2, keepdims=True)
            local = c + r * u
            F = W[:, body.frame]
            out.append(np.einsum("nij,nkj->nki", F[:, :3, :3], local) + F[:, None, :3, 3])
    return np.concatenate(out, axis=1).reshape(-1, 3)


# ---------------------------------------------------------------------------------------------------
@pytest.fixture(scope="module")
def planar_space():
    return S.maximum_space(planar_cell(), pitch=0.02)


def test_planar_arm_contains_the_analytic_annulus(planar_space):
    # Analytic region: points within R_CAPSULE of the annulus |L1-L2| .. L1+L2 (elementary geometry).
    rng = np.random.default_rng(1)
    pts = rng.uniform([-0.9, -0.1, -0.9], [0.9, 0.1, 0.9], size=(200000, 3))
    dist = annulus_distance(pts)
    inside = pts[dist <= R_CAPSULE]
    assert len(inside) > 10000
    assert planar_space.contains(inside).all()


def test_planar_arm_exceeds_the_annulus_by_at_most_the_documented_bound(planar_space):
    rng = np.random.default_rng(2)
    pts = rng.uniform([-1.1, -0.3, -1.1], [1.1, 0.3, 1.1], size=(200000, 3))
    dist = annulus_distance(pts)
    bound = planar_space.over_approximation
    assert 0 < bound < 0.12  # documented in Space.method; about 3.5 voxels at 20 mm
    far = pts[dist > R_CAPSULE + bound]
    assert not planar_space.contains(far).any()
    # and it is not trivially loose: the hole of the annulus (radius 0.2 - r) is empty at its centre
    assert not planar_space.contains(np.array([[0.0, 0.0, 0.0]]))[0]
    # every marked cube's centre is within R + bound of the annulus
    centres = planar_space.voxel_centers(planar_space.marked_indices())
    assert annulus_distance(centres).max() <= R_CAPSULE + bound


def test_planar_arm_bounds_match_the_analytic_radii(planar_space):
    # outer radius L1 + L2 + r = 0.85 m in x and z; half-thickness r = 0.05 m in y (analytic)
    lo, hi = planar_space.bounds
    bound = planar_space.over_approximation
    for axis in (0, 2):
        assert 0.85 <= hi[axis] <= 0.85 + bound
        assert -0.85 - bound <= lo[axis] <= -0.85
    assert 0.05 <= hi[1] <= 0.05 + bound


@pytest.fixture(scope="module")
def demo():
    return demo_cell()


@pytest.fixture(scope="module")
def demo_max(demo):
    return S.maximum_space(demo, pitch=0.04)


def test_demo_arm_no_sampled_point_outside_the_maximum_space(demo, demo_max):
    # Independent check: dense seeded random configurations within the joint limits, points on the
    # posed solids' surfaces (forward kinematics of the arm model); none may fall outside.
    rng = np.random.default_rng(3)
    lim = demo.arm.limits
    q = rng.uniform(lim[:, 0], lim[:, 1], size=(4000, 6))
    pts = surface_points(demo, q, rng, per_shape=6)
    assert demo_max.contains(pts).all()
    # the joint-limit corners too
    corners = np.array(np.meshgrid(*[lim[j] for j in range(6)], indexing="ij")).reshape(6, -1).T
    assert demo_max.contains(surface_points(demo, corners, rng, per_shape=20)).all()


def test_demo_arm_restricted_space_contains_limited_motion_plus_allowance(demo):
    limits = np.radians([[-30, 60], [-60, 90], [-120, 40], [-180, 180], [-120, 120], [-360, 360]])
    allowance = 0.1
    space = S.restricted_space(demo, limits, allowance, pitch=0.04)
    rng = np.random.default_rng(4)
    q = rng.uniform(limits[:, 0], limits[:, 1], size=(3000, 6))
    pts = surface_points(demo, q, rng, per_shape=6)
    assert space.contains(pts).all()
    # points pushed outward by the allowance (from the flange frame's origin, a crude outward direction
    # is enough: any point within the allowance of the swept solid must be inside)
    push = rng.normal(size=pts.shape)
    push *= allowance / np.linalg.norm(push, axis=1, keepdims=True)
    assert space.contains(pts + push).all()


def test_planar_arm_limited_joint_1_range_is_a_sector():
    # Joint 1 (vertical axis z0) limited to [0, 90] deg: the annulus (x-z plane) revolves through a
    # quarter turn; its x > 0 half covers azimuths 0..90 deg, its x < 0 half 180..270 deg.
    cell = planar_cell()
    limits = np.array(cell.arm.limits)
    limits[0] = [0.0, math.pi / 2]
    space = S.restricted_space(cell, limits, 0.0, pitch=0.02)
    rng = np.random.default_rng(9)
    q = np.zeros((20000, 6))
    q[:, :3] = rng.uniform(limits[:3, 0], limits[:3, 1], size=(20000, 3))
    assert space.contains(surface_points(cell, q, rng, per_shape=3)).all()
    # at azimuth 135 deg the nearest swept point of the ring rho = 0.6 m, z = 0 is on the 90 deg or
    # 180 deg meridian: distance rho * sin(45 deg) = 0.424 m, less the capsule radius (elementary)
    bound = space.over_approximation
    for ang in (135.0, -45.0):
        a = math.radians(ang)
        probe = np.array([0.6 * math.cos(a), 0.6 * math.sin(a), 0.0])
        true = 0.6 * math.sin(math.radians(45)) - R_CAPSULE
        assert true - bound <= space.distance_to(probe) <= true
    # inside the sector, at azimuth 45 deg on the ring: inside
    a = math.radians(45)
    assert space.contains(np.array([0.6 * math.cos(a), 0.6 * math.sin(a), 0.0]))


def test_restricted_space_lies_in_the_maximum_space(demo, demo_max):
    limits = np.radians([[-30, 60], [-60, 90], [-120, 40], [-180, 180], [-120, 120], [-360, 360]])
    space = S.restricted_space(demo, limits, 0.0, pitch=0.04)
    # both are conservative with their own joint-2/3 grids, so compare up to the documented bound
    centres = space.voxel_centers(space.marked_indices())
    assert demo_max.distance_to(centres).max() <= space.over_approximation
    assert space.occupancy.sum() < 0.8 * demo_max.occupancy.sum()


def test_restricted_space_with_full_limits_is_the_maximum_space(demo, demo_max):
    same = S.restricted_space(demo, demo.arm.limits, 0.0, pitch=0.04)
    assert np.array_equal(same.occupancy, demo_max.occupancy)
    assert np.allclose(same.origin, demo_max.origin)


def test_wrist_spheres_contain_the_wrist_for_any_joint_4_to_6(demo):
    # frames 4..6 bodies at random joint 4..6 values stay inside the spheres fixed in frame 3
    rng = np.random.default_rng(5)
    centres, radii = S.wrist_spheres(demo)
    q = rng.uniform(-math.pi, math.pi, size=(500, 6))
    F = demo.arm.frames(q)
    frame3_from_base = np.linalg.inv(F[:, 3])
    for body in [b for b in demo.links if b.frame >= 4] + list(demo.tool.bodies):
        for s in body.shapes:
            for p in (s.p0, s.p1) if isinstance(s, Capsule) else (s.center,):
                world = np.einsum("nij,j->ni", F[:, body.frame, :3, :3], p) + F[:, body.frame, :3, 3]
                local = np.einsum("nij,nj->ni", frame3_from_base[:, :3, :3], world) + frame3_from_base[:, :3, 3]
                r = s.radius + body.padding
                inside = (np.linalg.norm(local[:, None, :] - centres[None], axis=2) + r <= radii[None] + 1e-9).any(1)
                assert inside.all()


def test_operating_space_contains_its_configurations_and_not_far_points(demo):
    rng = np.random.default_rng(6)
    q = rng.uniform(-0.5, 0.5, size=(5, 6))
    space = S.operating_space(demo, q, grow=0.02, pitch=0.02)
    pts = surface_points(demo, q, rng, per_shape=50)
    assert space.contains(pts).all()
    # far from every posed surface point (brute force, scipy cKDTree) means outside
    from scipy.spatial import cKDTree

    dense = surface_points(demo, q, np.random.default_rng(7), per_shape=400)
    probes = rng.uniform(space.bounds[0] - 0.1, space.bounds[1] + 0.1, size=(20000, 3))
    d, _ = cKDTree(dense).query(probes)
    # a probe farther than (grow + bound + sampling slack 30 mm) from every surface sample is outside
    assert not space.contains(probes[d > 0.02 + space.over_approximation + 0.03]).any()


def test_distance_to_is_a_lower_bound_and_exact_for_the_cubes(planar_space):
    rng = np.random.default_rng(8)
    probes = rng.uniform([-1.5, -0.6, -1.5], [1.5, 0.6, 1.5], size=(300, 3))
    d = planar_space.distance_to(probes)
    # lower bound on the distance to the true region (analytic annulus distance minus the radius)
    true = np.maximum(annulus_distance(probes) - R_CAPSULE, 0.0)
    assert (d <= true + 1e-12).all()
    # brute force over every marked cube (independent of the k-nearest shortcut)
    lo = planar_space.voxel_centers(planar_space.marked_indices()) - 0.5 * planar_space.pitch
    for p, dp in zip(probes[:40], d[:40]):
        gap = np.maximum(np.maximum(lo - p, p - (lo + planar_space.pitch)), 0.0)
        assert dp == pytest.approx(np.sqrt((gap ** 2).sum(axis=1)).min(), abs=1e-9)


def test_mesh_is_watertight_and_matches_the_voxel_volume(planar_space):
    mesh = planar_space.mesh
    assert isinstance(mesh, trimesh.Trimesh)
    assert mesh.is_watertight
    # trimesh's volume of the closed surface equals the number of cubes times pitch^3
    assert mesh.volume == pytest.approx(planar_space.occupancy.sum() * planar_space.pitch ** 3, rel=1e-9)


def test_max_height_near_and_horizontal_distance(planar_space):
    # annulus in the x-z plane, top at z = 0.85 (+ bound); near x = 0, the highest point is the top
    bound = planar_space.over_approximation
    top = planar_space.max_height_near([[0.0, -1.0], [0.0, 1.0]], 0.05)
    assert 0.85 <= top <= 0.85 + bound
    assert planar_space.max_height_near([[3.0, 3.0]], 0.1) is None
    from envelope.geometry import Box

    pose = np.eye(4)
    pose[:3, 3] = [1.5, 0.0, 1.0]
    hd = planar_space.horizontal_distance_to_box(Box([0.04, 2.0, 2.0], pose))
    # face at x = 1.48; the region reaches x = 0.85 (analytic): distance in [1.48 - 0.85 - bound, 0.63]
    assert 1.48 - 0.85 - bound <= hd.distance <= 0.63 + 1e-12


def test_write_space_and_outlines(planar_space, tmp_path):
    files = S.write_space(planar_space, tmp_path / "max")
    assert files.stl.exists() and files.glb.exists()
    loaded = trimesh.load(files.stl)
    # the files are in millimetres: the x extent is the space's, times 1000
    assert loaded.bounds[1, 0] == pytest.approx(planar_space.bounds[1, 0] * 1e3, rel=1e-9)
    assert not list(tmp_path.glob("*.tmp"))
    plan = S.space_outline(planar_space, "plan")
    elev = S.space_outline(planar_space, "elevation")
    assert plan and elev
    for loop in plan + elev:
        assert np.allclose(loop[0], loop[-1])
    # elevation (x, z) of an annulus: an outer loop and the hole's loop, reaching about +-850 mm
    assert len(elev) == 2
    allpts = np.vstack(elev)
    assert 850 <= allpts[:, 0].max() <= 850 + planar_space.over_approximation * 1e3
    with pytest.raises(InputError, match="expected view"):
        S.space_outline(planar_space, "side")


def test_bad_input_is_rejected(demo):
    with pytest.raises(InputError, match=r"shape \(6, 2\)"):
        S.restricted_space(demo, np.zeros((5, 2)))
    with pytest.raises(InputError, match="pitch"):
        S.maximum_space(demo, pitch=0.0)
    with pytest.raises(InputError, match=r"\(n >= 1, 6\)"):
        S.operating_space(demo, np.zeros((3, 5)))
    with pytest.raises(InputError, match="non-finite"):
        S.operating_space(demo, np.full((2, 6), np.nan))
    with pytest.raises(InputError, match="length >= 0"):
        S.restricted_space(demo, demo.arm.limits, -0.1)


def test_tilted_mount_limited_joint_1_with_allowance_no_sampled_point_outside():
    # a wall-mounted arm (base rotated 90 deg about x, then 30 deg about z): the same sampling check
    from envelope.poses import pose_from_euler

    world_from_base = pose_from_euler([0.3, -0.2, 1.5], np.radians([90, 0, 30]))
    cell = demo_cell(world_from_base=world_from_base)
    limits = np.radians([[-60, 20], [-100, 140], [-150, 70], [-180, 180], [-120, 120], [-360, 360]])
    space = S.restricted_space(cell, limits, 0.05, pitch=0.04)
    rng = np.random.default_rng(12)
    q = rng.uniform(limits[:, 0], limits[:, 1], size=(3000, 6))
    pts = surface_points(cell, q, rng, per_shape=4)
    push = rng.normal(size=pts.shape)
    push *= 0.05 / np.linalg.norm(push, axis=1, keepdims=True)
    assert space.contains(pts).all() and space.contains(pts + push).all()


def test_horizontal_distance_to_a_rotated_panel_is_a_tight_lower_bound(planar_space):
    # a panel turned 30 deg about z; independent distance: in the panel's frame the footprint is the
    # rectangle |u| <= hx, |v| <= hy, so a point's distance is hypot(max(|u| - hx, 0), max(|v| - hy, 0))
    from envelope.geometry import Box
    from envelope.poses import pose_from_euler

    pose = pose_from_euler([1.2, 0.4, 1.0], np.radians([0, 0, 30]))
    box = Box([0.04, 1.0, 2.0], pose)
    rng = np.random.default_rng(13)
    pts = rng.uniform([-0.9, -0.06, -0.9], [0.9, 0.06, 0.9], size=(300000, 3))
    pts = pts[annulus_distance(pts) <= R_CAPSULE]  # points of the true region
    local = (pts - pose[:3, 3]) @ pose[:3, :3]
    hx, hy = 0.02, 0.5
    true = np.hypot(np.maximum(np.abs(local[:, 0]) - hx, 0), np.maximum(np.abs(local[:, 1]) - hy, 0)).min()
    hd = planar_space.horizontal_distance_to_box(box)
    assert true - planar_space.over_approximation <= hd.distance <= true
    assert np.nanmin(hd.per_level) == pytest.approx(hd.distance)
