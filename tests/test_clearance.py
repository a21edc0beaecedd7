"""Clearance engine: distances against independent references, solids, statuses, pruning, processes."""

from __future__ import annotations

from concurrent.futures import ProcessPoolExecutor

import numpy as np
import pytest
import trimesh
from scipy.optimize import minimize, minimize_scalar
from scipy.spatial.transform import Rotation

from envelope.cell import Cell, Tool
from envelope.clearance import (
    STATUS_ALLOWED,
    STATUS_BELOW_MARGIN,
    STATUS_CLEAR,
    STATUS_INTRUSION,
    ClearanceEngine,
    ClearanceResult,
    evaluate_in_worker,
    init_worker,
)
from envelope.errors import InputError
from envelope.geometry import Body, Box, Capsule, Convex, Cylinder, HalfSpace, Sphere, TriMesh, Zone
from envelope.kinematics import Arm

NEVER_EXCEED = 1e-5  # m: a reported distance may exceed the true one by at most this (requirement)

# ------------------------------------------------------------------------------------------ cells
# An invented ortho-parallel arm (standard DH), not any real product.
A = [0.15, 0.60, 0.12, 0.0, 0.0, 0.0]
ALPHA = [-np.pi / 2, 0.0, -np.pi / 2, np.pi / 2, -np.pi / 2, 0.0]
D = [0.45, 0.0, 0.0, 0.62, 0.0, 0.10]
OFFSET = [0.0, -np.pi / 2, 0.0, 0.0, 0.0, 0.0]
RADII = [0.15, 0.12, 0.10, 0.09, 0.08, 0.07, 0.05]
WRIST_ALLOWED = frozenset({frozenset({"link4", "link6"}), frozenset({"link2", "link4"})})


def invented_arm():
    return Arm.from_dh(A, ALPHA, D, OFFSET, name="invented-6")


def link_capsules():
    """Capsule i from the origin of DH frame i-1 to that of frame i, in frame i (frame 0: a base post)."""
    out = [Capsule([0, 0, 0], [0, 0, 0.2], RADII[0])]
    for i in range(6):
        ca, sa = np.cos(ALPHA[i]), np.sin(ALPHA[i])
        rx = np.array([[1, 0, 0], [0, ca, -sa], [0, sa, ca]])
        out.append(Capsule(rx.T @ np.array([-A[i], 0.0, -D[i]]), [0, 0, 0], RADII[i + 1]))
    return out


def arm_cell(zones=(), *, tool_bodies=(), padding=0.0, self_allowed=WRIST_ALLOWED, self_clearance=0.01, links=None):
    links = links or tuple(Body(f"link{i}", i, (c,), padding=padding) for i, c in enumerate(link_capsules()))
    return Cell(
        name="test cell",
        arm=invented_arm(),
        world_from_base=np.eye(4),
        links=links,
        tool=Tool(np.eye(4), tuple(tool_bodies)),
        zones=tuple(zones),
        self_pairs_allowed=self_allowed,
        self_clearance=self_clearance,
    )


def probe_cell(body_shape, zone_shapes, *, padding=0.0, clearance=0.0, allowed=()):
    """One body fixed in frame 0 (= world, base at the origin) against one zone with many shapes."""
    body = Body("probe", 0, (body_shape,), padding=padding)
    zone = Zone("zone", "keep-out", tuple(zone_shapes), clearance, allowed=frozenset(allowed))
    return Cell(name="probe", arm=invented_arm(), world_from_base=np.eye(4), links=(body,), tool=Tool(np.eye(4)),
                zones=(zone,))


def probe(body_shape, zone_shapes, **kw):
    return ClearanceEngine(probe_cell(body_shape, zone_shapes, **kw), prune=False).evaluate(np.zeros(6))


def random_pose(rng, spread=1.0):
    T = np.eye(4)
    T[:3, :3] = Rotation.random(random_state=rng).as_matrix()
    T[:3, 3] = rng.uniform(-spread, spread, 3)
    return T


def random_capsule(rng, spread=1.0):
    p0 = rng.uniform(-spread, spread, 3)
    d = rng.normal(size=3)
    return Capsule(p0, p0 + rng.uniform(0.0, 0.8) * d / np.linalg.norm(d), rng.uniform(0.01, 0.2))


def check_bound(result, truth, tol, mask=slice(None)):
    """Lower bound never above the truth (by more than NEVER_EXCEED) and within ``tol`` below it."""
    d, truth = result.distance[mask], truth[mask]
    assert np.all(d <= truth + NEVER_EXCEED), np.max(d - truth)
    assert np.all(d >= truth - tol), np.max(truth - d)
    assert np.all(result.distance_upper[mask] >= d)


# ------------------------------------------------------------------------------------------ analytic
def test_sphere_sphere_analytic_with_depth():
    rng = np.random.default_rng(1)
    for _ in range(20):
        body = Sphere(rng.uniform(-0.5, 0.5, 3), rng.uniform(0.05, 0.4))
        zs = [Sphere(rng.uniform(-1, 1, 3), rng.uniform(0.05, 0.4)) for _ in range(100)]
        res = probe(body, zs)
        # handbook: distance between spheres = |c1 - c2| - r1 - r2 (negative: penetration depth)
        truth = np.array([np.linalg.norm(z.center - body.center) - z.radius - body.radius for z in zs])
        check_bound(res, truth, 1e-9)
        assert res.depth_known.all()
        assert (res.status[truth < 0] == STATUS_INTRUSION).all()


def test_sphere_box_closest_point_by_clamping():
    rng = np.random.default_rng(2)
    n_overlap = 0
    for _ in range(20):
        body = Sphere(rng.uniform(-0.3, 0.3, 3), rng.uniform(0.05, 0.3))
        zs = [Box(rng.uniform(0.1, 0.8, 3), random_pose(rng, 0.8)) for _ in range(100)]
        res = probe(body, zs)
        truth = []
        for z in zs:
            # closest point of a box by clamping the local coordinates (handbook; Ericson 2005, 5.1.3)
            local = (body.center - z.pose[:3, 3]) @ z.pose[:3, :3]
            h = 0.5 * z.extents
            outside = np.linalg.norm(local - np.clip(local, -h, h))
            # centre inside: the sphere must move out through the nearest face
            truth.append(outside - body.radius if outside > 0 else -np.min(h - np.abs(local)) - body.radius)
        truth = np.array(truth)
        n_overlap += int((truth < 0).sum())
        check_bound(res, truth, 5e-5)  # conservative by a few micrometres (python-fcl witness direction)
    assert n_overlap > 100


def test_capsule_half_space_analytic():
    rng = np.random.default_rng(3)
    for _ in range(20):
        body = random_capsule(rng, 0.5)
        zs = []
        for _ in range(100):
            n = rng.normal(size=3)
            zs.append(HalfSpace(n / np.linalg.norm(n), rng.uniform(-1, 1)))
        res = probe(body, zs)
        # plane distance of the lower end point minus the radius (handbook point-plane distance; a capsule
        # is its segment grown by r, so this is also the penetration depth when negative)
        truth = np.array([min(z.normal @ body.p0, z.normal @ body.p1) - z.offset - body.radius for z in zs])
        check_bound(res, truth, 1e-12)
        assert res.depth_known.all() and not res.pruned.any()


_GRID = np.linspace(0.0, 1.0, 101)


def _segment_distance_reference(p0, p1, q0, q1):
    """Independent reference: brute force over an (s, t) grid, refined by scipy's bounded minimiser."""
    P = p0 + _GRID[:, None] * (p1 - p0)
    Q = q0 + _GRID[:, None] * (q1 - q0)
    d2 = ((P[:, None] - Q[None]) ** 2).sum(-1)
    k, m = np.unravel_index(np.argmin(d2), d2.shape)

    def f(x):
        d = p0 + x[0] * (p1 - p0) - q0 - x[1] * (q1 - q0)
        return d @ d

    r = minimize(f, [_GRID[k], _GRID[m]], bounds=[(0, 1), (0, 1)], method="L-BFGS-B",
                 options={"ftol": 1e-16, "gtol": 1e-14})
    return np.sqrt(max(min(r.fun, d2[k, m]), 0.0))


def test_capsule_capsule_segment_distance():
    rng = np.random.default_rng(4)
    n_overlap = 0
    for _ in range(6):
        body = random_capsule(rng, 0.4)
        zs = [random_capsule(rng, 0.8) for _ in range(100)]
        res = probe(body, zs)
        # capsule distance = segment distance - r1 - r2, also when overlapping (Lumelsky 1985 for the
        # segments; here against a scipy minimisation as the independent reference)
        truth = np.array([_segment_distance_reference(body.p0, body.p1, z.p0, z.p1) - body.radius - z.radius
                          for z in zs])
        n_overlap += int((truth < 0).sum())
        check_bound(res, truth, 2e-6)
    assert n_overlap > 30


def _segment_box_reference(p0, p1, box):
    """Independent reference: min over t of the clamped point-to-box distance (dense grid + scipy bounded)."""
    h = 0.5 * box.extents

    def f(t):
        local = (p0 + t * (p1 - p0) - box.pose[:3, 3]) @ box.pose[:3, :3]
        return np.linalg.norm(local - np.clip(local, -h, h))

    ts = np.linspace(0.0, 1.0, 401)
    vals = [f(t) for t in ts]
    k = int(np.argmin(vals))
    r = minimize_scalar(f, bounds=(ts[max(k - 1, 0)], ts[min(k + 1, 400)]), method="bounded",
                        options={"xatol": 1e-12})
    return min(r.fun, vals[k])


def test_capsule_box_never_exceeds_truth():
    rng = np.random.default_rng(5)
    truths, dists = [], []
    for _ in range(10):
        body = random_capsule(rng, 0.4)
        zs = [Box(rng.uniform(0.1, 0.8, 3), random_pose(rng, 1.2)) for _ in range(100)]
        res = probe(body, zs)
        seg = np.array([_segment_box_reference(body.p0, body.p1, z) for z in zs])
        truth = seg - body.radius
        apart = seg > 0
        check_bound(res, truth, 1e-4, apart)
        # overlapping: never more clearance than there is; the core segment inside the box is an intrusion
        assert (res.distance[~apart] <= 0).all() and (res.status[~apart] == STATUS_INTRUSION).all()
        truths.append(truth[apart])
        dists.append(res.distance[apart])
    err = np.concatenate(truths) - np.concatenate(dists)
    assert np.median(err) < 1e-6  # tight in the typical case, not only safe


def test_primitive_convex_and_mesh_box_agree():
    rng = np.random.default_rng(6)
    for _ in range(5):
        ext = rng.uniform(0.2, 0.8, 3)
        pose = random_pose(rng, 0.3)
        tm = trimesh.creation.box(ext, transform=pose)
        shapes = [Box(ext, pose), Convex(tm.vertices), TriMesh(tm.vertices, tm.faces, watertight=True)]
        for _ in range(40):
            body = random_capsule(rng, 1.5)
            res = probe(body, shapes)
            d = res.distance
            if d[0] > 0:
                assert np.allclose(d, d[0], atol=2e-5), d
            else:
                assert (res.status == STATUS_INTRUSION).all()


def test_mesh_zone_against_trimesh_closest_point():
    rng = np.random.default_rng(7)
    ring = trimesh.creation.annulus(0.2, 0.5, 0.3)  # watertight, not convex
    assert ring.is_watertight and not ring.is_convex
    zone = TriMesh(ring.vertices, ring.faces, watertight=True)
    centres = rng.uniform(-0.9, 0.9, (60, 3))
    radius = 0.03
    # independent library: trimesh.proximity.closest_point (surface distance)
    _, surf, _ = trimesh.proximity.closest_point(ring, centres)
    inside = ring.contains(centres)
    for c, s, ins in zip(centres, surf, inside):
        res = probe(Sphere(c, radius), [zone])
        if ins or s <= radius:
            assert res.status[0] == STATUS_INTRUSION and not res.depth_known[0]
        else:
            assert res.distance[0] <= s - radius + NEVER_EXCEED
            assert res.distance[0] >= s - radius - 1e-4


# ------------------------------------------------------------------------------------------ solids
@pytest.mark.parametrize("kind", ["box", "cylinder", "sphere", "mesh", "convex", "capsule"])
def test_link_wholly_inside_a_zone_is_an_intrusion(kind):
    """A capsule deep inside a closed keep-out region touches no surface: still an intrusion."""
    body = Capsule([0.0, 0.0, -0.05], [0.0, 0.0, 0.05], 0.03)
    tm = trimesh.creation.icosphere(subdivisions=2, radius=0.6)
    zone = {
        "box": Box([1.0, 1.0, 1.0]),
        "cylinder": Cylinder(0.5, 1.0),
        "sphere": Sphere([0.0, 0.0, 0.0], 0.6),
        "mesh": TriMesh(tm.vertices, tm.faces, watertight=True),
        "convex": Convex(tm.vertices),
        "capsule": Capsule([0, 0, -0.3], [0, 0, 0.3], 0.5),
    }[kind]
    res = probe(body, [zone])
    assert res.status[0] == STATUS_INTRUSION
    assert res.distance[0] <= 0
    assert res.overall == STATUS_INTRUSION


def test_zone_wholly_inside_a_body_is_an_intrusion():
    tm = trimesh.creation.icosphere(subdivisions=1, radius=0.05)
    res = probe(Sphere([0, 0, 0], 0.5), [TriMesh(tm.vertices, tm.faces, watertight=True), Box([0.1, 0.1, 0.1])])
    assert (res.status == STATUS_INTRUSION).all()


def test_non_watertight_mesh_is_a_surface():
    tm = trimesh.creation.icosphere(subdivisions=2, radius=0.6)
    open_faces = tm.faces[tm.vertices[tm.faces].mean(axis=1)[:, 2] < 0.3]  # remove the cap: an open bowl
    res = probe(Sphere([0, 0, 0], 0.05), [TriMesh(tm.vertices, open_faces, watertight=False)])
    assert res.status[0] != STATUS_INTRUSION
    assert res.distance[0] <= 0.6 - 0.05 + NEVER_EXCEED


def test_touching_and_below_margin():
    floor = HalfSpace([0, 0, 1.0], 0.0)
    res = probe(Sphere([0, 0, 0.1], 0.1), [floor], clearance=0.05)
    assert res.distance[0] == 0.0 and res.status[0] == STATUS_INTRUSION  # contact counts as intrusion
    res = probe(Sphere([0, 0, 0.13], 0.1), [floor, Box([1, 1, 1], _translation([0, 0, -0.5 + 1e-4 + 0.03]))],
                clearance=0.05)
    assert res.status[0] == STATUS_BELOW_MARGIN and abs(res.distance[0] - 0.03) < 1e-12
    assert res.status[1] == STATUS_INTRUSION and res.distance[1] == pytest.approx(-1e-4, abs=1e-9)
    assert res.worst == 1 and res.overall == STATUS_INTRUSION
    res = probe(Sphere([0, 0, 0.2], 0.1), [floor], clearance=0.05)
    assert res.status[0] == STATUS_CLEAR


def _translation(xyz):
    T = np.eye(4)
    T[:3, 3] = xyz
    return T


def test_padding_reduces_distance_exactly():
    rng = np.random.default_rng(8)
    body = random_capsule(rng, 0.3)
    zs = [Box(rng.uniform(0.1, 0.5, 3), random_pose(rng, 1.5)) for _ in range(30)] + [HalfSpace([0, 0, 1.0], -1.0)]
    bare = probe(body, zs)
    padded = probe(body, zs, padding=0.02)
    assert np.allclose(padded.distance, bare.distance - 0.02, rtol=0, atol=1e-12)


def test_allowed_zone_contact_is_reported_as_allowed():
    """The base stands on a table: allowed for link0 only; the same contact not allowed is an intrusion."""
    def table(allowed):
        # top at z = -0.145: the base post (radius 0.15 about the origin) dips 5 mm into it, link1 is 25 mm clear
        return Zone("table", "fixture", (Box([1, 1, 0.1], _translation([0, 0, -0.195])),), 0.02,
                    allowed=frozenset(allowed))

    q = np.zeros(6)
    e = ClearanceEngine(arm_cell([table({"link0"})]), prune=False)
    res = e.evaluate(q)
    k = next(p.index for p in e.pairs if p.body == "link0" and p.zone == "table")
    assert e.pairs[k].allowed and res.status[k] == STATUS_ALLOWED
    assert res.distance[k] < 0  # it really is in contact
    assert res.overall == STATUS_CLEAR and res.worst != k
    strict = ClearanceEngine(arm_cell([table(())])).evaluate(q)
    assert strict.status[k] == STATUS_INTRUSION and strict.worst == k and strict.overall == STATUS_INTRUSION


# ------------------------------------------------------------------------------------------ arm
def test_pairs_list():
    tool = Body("gripper", 6, (Box([0.1, 0.1, 0.15], _translation([0, 0, 0.08])),), role="tool")
    zones = [Zone("fence", "fence", (Box([0.1, 4, 2]), Box([4, 0.1, 2])), 0.1, panels=("west", "north"))]
    e = ClearanceEngine(arm_cell(zones, tool_bodies=[tool]))
    zone_pairs = [p for p in e.pairs if p.kind == "zone"]
    assert len(zone_pairs) == 8 * 2 and {p.panel for p in zone_pairs} == {"west", "north"}
    self_pairs = {frozenset((p.body, p.other)) for p in e.pairs if p.kind == "self"}
    # frames differ by >= 2: 15 link pairs + gripper against links 0..4, minus the two allowed
    assert len(self_pairs) == 15 + 5 - 2
    assert frozenset(("link4", "link6")) not in self_pairs and frozenset(("gripper", "link5")) not in self_pairs
    assert frozenset(("gripper", "link4")) in self_pairs
    assert all(p.required == 0.01 for p in e.pairs if p.kind == "self")
    assert [p.index for p in e.pairs] == list(range(len(e.pairs)))


def test_folded_arm_self_contact():
    e = ClearanceEngine(arm_cell())
    qs = np.array([[0, 0, 0, 0, 0, 0], [0, 0.3, 1.75, 0, 0, 0], [0, 0.3, 1.92, 0, -2, 0]], dtype=float)  # folded: forearm onto link 1
    res = e.evaluate(qs)
    F = e.body_poses(qs)
    caps = link_capsules()
    for k in range(len(qs)):
        for p in e.pairs:
            i, j = int(p.body[4:]), int(p.other[4:])
            ci, cj = caps[i], caps[j]
            P = [F[k, i, :3, :3] @ x + F[k, i, :3, 3] for x in (ci.p0, ci.p1)]
            Q = [F[k, j, :3, :3] @ x + F[k, j, :3, 3] for x in (cj.p0, cj.p1)]
            truth = _segment_distance_reference(*P, *Q) - ci.radius - cj.radius  # scipy reference
            assert truth - 2e-6 <= res.distance[k, p.index] <= truth + NEVER_EXCEED
    assert res.overall[0] == STATUS_CLEAR
    assert res.overall[1] == STATUS_INTRUSION and res.overall[2] == STATUS_INTRUSION
    assert e.pairs[res.worst[1]].kind == "self"


def test_body_poses_follow_frames():
    cell = arm_cell(tool_bodies=[Body("tool", 6, (Sphere([0, 0, 0.1], 0.05),), role="tool")])
    e = ClearanceEngine(cell)
    q = np.random.default_rng(9).uniform(-2, 2, (4, 6))
    W = e.body_poses(q)
    assert W.shape == (4, 8, 4, 4)
    assert np.allclose(W[:, 7], cell.arm.frames(q)[:, 6])
    assert np.allclose(e.body_poses(q[0]), W[0])


def test_bad_joint_values():
    e = ClearanceEngine(arm_cell())
    with pytest.raises(InputError, match=r"shape \(6,\) or \(n, 6\), got \(5,\)"):
        e.evaluate(np.zeros(5))
    with pytest.raises(InputError, match="finite"):
        e.evaluate(np.full(6, np.nan))


# ------------------------------------------------------------------------------------------ pruning, batches
def mixed_cell():
    rng = np.random.default_rng(10)
    zones = []
    for k in range(12):
        ang = 2 * np.pi * k / 12
        zones.append(Zone(f"box{k}", "keep-out", (Box(rng.uniform(0.2, 0.6, 3),
                     _translation([1.3 * np.cos(ang), 1.3 * np.sin(ang), rng.uniform(0.2, 1.2)])),), 0.05))
    ring = trimesh.creation.annulus(0.1, 0.3, 0.2, transform=_translation([0.0, -1.0, 0.9]))
    zones += [
        Zone("floor", "floor", (HalfSpace([0, 0, 1.0], -0.16),), 0.0, allowed=frozenset({"link0"})),
        Zone("post", "machine", (Cylinder(0.1, 1.5, _translation([0.9, 0.4, 0.75])),), 0.03),
        Zone("lamp", "keep-out", (Sphere([-0.8, 0.8, 1.4], 0.15),), 0.05),
        Zone("ring", "keep-out", (TriMesh(ring.vertices, ring.faces, watertight=True),), 0.02),
    ]
    hull = trimesh.creation.icosphere(subdivisions=1, radius=0.06)
    tool = [Body("gripper", 6, (Box([0.08, 0.12, 0.1], _translation([0, 0, 0.06])),), padding=0.005, role="tool"),
            Body("part", 6, (TriMesh(hull.vertices + [0, 0, 0.15], hull.faces, watertight=True),), role="payload")]
    return arm_cell(zones, tool_bodies=tool, padding=0.002)


def _same(a: ClearanceResult, b: ClearanceResult):
    for f in ClearanceResult._FIELDS:
        assert np.array_equal(getattr(a, f), getattr(b, f), equal_nan=True), f


def mesh_links_cell():
    """Links as triangle meshes (convex hulls in the engine: no analytic pair), a few boxes."""
    links = []
    for i, c in enumerate(link_capsules()):
        m = trimesh.creation.capsule(height=max(np.linalg.norm(c.p1 - c.p0), 1e-3), radius=c.radius, count=[8, 8])
        d = c.p1 - c.p0
        T = np.eye(4)
        if np.linalg.norm(d) > 0:
            T[:3, :3] = Rotation.align_vectors([d / np.linalg.norm(d)], [[0, 0, 1.0]])[0].as_matrix()
        T[:3, 3] = 0.5 * (c.p0 + c.p1)
        m.apply_transform(T)
        links.append(Body(f"link{i}", i, (TriMesh(m.vertices, m.faces, watertight=True),)))
    zones = [Zone(f"box{k}", "keep-out", (Box([0.4, 0.4, 0.6], _translation([1.1 * np.cos(k), 1.1 * np.sin(k), 0.6])),),
                  0.05) for k in range(6)]
    return arm_cell(zones, links=tuple(links))


@pytest.mark.parametrize("make_cell", [mixed_cell, mesh_links_cell])
def test_pruning_changes_no_status_nor_worst(make_cell):
    cell = make_cell()
    q = np.random.default_rng(11).uniform(-np.pi, np.pi, (120 if make_cell is mixed_cell else 80, 6))
    q[:, 1:3] *= 0.5
    fast = ClearanceEngine(cell, prune=True).evaluate(q)
    full = ClearanceEngine(cell, prune=False).evaluate(q)
    assert np.array_equal(fast.status, full.status)
    assert np.array_equal(fast.worst, full.worst)
    assert np.array_equal(fast.worst_margin, full.worst_margin)
    assert np.array_equal(fast.overall, full.overall)
    assert (fast.distance <= full.distance).all()  # pruned pairs carry a valid lower bound
    assert np.array_equal(fast.distance[~fast.pruned], full.distance[~fast.pruned])
    assert fast.pruned.mean() > 0.5 and not full.pruned.any()
    assert len(set(fast.overall.tolist())) >= 2  # the sample has clear and non-clear configurations


def test_batch_equals_single():
    e = ClearanceEngine(mixed_cell())
    q = np.random.default_rng(12).uniform(-np.pi, np.pi, (5, 6))
    batch = e.evaluate(q)
    assert batch.distance.shape == (5, len(e.pairs)) and batch.witness_body.shape == (5, len(e.pairs), 3)
    for i in range(5):
        _same(e.evaluate(q[i]), batch._index(i))
    one = e.evaluate(q[:1])
    assert one.distance.shape == (1, len(e.pairs)) and one.worst.shape == (1,)


def test_two_processes_equal_one():
    cell = mixed_cell()
    e = ClearanceEngine(cell)
    q = np.random.default_rng(13).uniform(-np.pi, np.pi, (24, 6))
    serial = e.evaluate(q)
    with ProcessPoolExecutor(2, initializer=init_worker, initargs=(cell, True)) as ex:
        parts = list(ex.map(evaluate_in_worker, [q[:7], q[7:15], q[15:]]))
    _same(ClearanceResult.concatenate(parts), serial)
    _same(e.evaluate_parallel(q, processes=2), serial)


def test_capsule_box_where_python_fcl_overestimates():
    """A capsule almost parallel to a box face (found by a seeded search): python-fcl 0.7 reports more
    distance than there is; the engine's bound does not."""
    import fcl

    from envelope.clearance import _fcl_geometry, _transform

    cap = Capsule([0.08064567344775281, -0.11789630026603048, 0.8989457610310807],
                  [0.3711935375219089, 0.20651830404126076, 0.8702634324791215], 0.11960340128049769)
    box = Box([0.7139979203408039, 1.4328865747856707, 1.3198589335985447])
    truth = _segment_box_reference(cap.p0, cap.p1, box) - cap.radius  # scipy reference
    objs = [fcl.CollisionObject(geom, _transform(T)) for geom, T in (_fcl_geometry(cap), _fcl_geometry(box))]
    raw = fcl.distance(*objs, fcl.DistanceRequest(enable_nearest_points=True, enable_signed_distance=True),
                       fcl.DistanceResult())
    assert raw > truth + 1e-4  # the python-fcl value alone would overstate the clearance
    res = probe(cap, [box])
    assert truth - 1e-5 <= res.distance[0] <= truth + NEVER_EXCEED


def test_bad_cell_values():
    with pytest.raises(InputError, match='zone "zone".*>= 0 m, got -0.01'):
        ClearanceEngine(probe_cell(Sphere([0, 0, 0], 0.1), [Box([1, 1, 1])], clearance=-0.01))
    with pytest.raises(InputError, match="half-space"):
        body = Body("slab", 0, (HalfSpace([0, 0, 1.0], 0.0),))
        ClearanceEngine(Cell(name="c", arm=invented_arm(), world_from_base=np.eye(4), links=(body,),
                             tool=Tool(np.eye(4)), zones=()))
