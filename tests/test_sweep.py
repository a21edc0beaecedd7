"""Certified sweeps of program moves: bounds against dense references, designed moves, program errors."""

from __future__ import annotations

import dataclasses

import fcl
import numpy as np
import pytest

from envelope.cell import Cell, Move, Program, Target, Tool
from envelope.check import CheckResult
from envelope.clearance import ClearanceEngine
from envelope.errors import ProgramError
from envelope.geometry import Body, Capsule, HalfSpace, Sphere, Zone
from envelope.kinematics import Arm
from envelope.sweep import (
    BOUND_REL,
    BOUND_TOL,
    STATUS_ORDER,
    TOL,
    displacement_bounds,
    pair_coefficients,
    run_sweep,
    sweep_move,
)

# ------------------------------------------------------------------------------------------ cells
# An invented arm with a spherical wrist (standard DH), not any real product.
A = [0.10, 0.50, 0.10, 0.0, 0.0, 0.0]
ALPHA = [-np.pi / 2, 0.0, -np.pi / 2, np.pi / 2, -np.pi / 2, 0.0]
D = [0.40, 0.0, 0.0, 0.50, 0.0, 0.08]
OFFSET = [0.0, -np.pi / 2, 0.0, 0.0, 0.0, 0.0]
LIMITS = np.radians([[-170, 170], [-100, 150], [-150, 160], [-200, 200], [-130, 130], [-360, 360]])
RADII = [0.10, 0.07, 0.05, 0.045, 0.04, 0.04, 0.035]
TOOL_LENGTH = 0.20  # flange to TCP along z6
ALLOWED = frozenset({frozenset({"link4", "link6"}), frozenset({"link2", "link4"}), frozenset({"link3", "link5"}),
                     frozenset({"link4", "tool"})})


def invented_arm(limits=LIMITS):
    return Arm.from_dh(A, ALPHA, D, OFFSET, limits, name="invented-sweep-6")


def link_bodies():
    """Link i: one capsule from the origin of DH frame i-1 to that of frame i, in frame i."""
    out = [Body("link0", 0, (Capsule([0, 0, 0], [0, 0, 0.15], RADII[0]),))]
    for i in range(6):
        ca, sa = np.cos(ALPHA[i]), np.sin(ALPHA[i])
        rx = np.array([[1, 0, 0], [0, ca, -sa], [0, sa, ca]])
        out.append(Body(f"link{i + 1}", i + 1, (Capsule(rx.T @ np.array([-A[i], 0.0, -D[i]]), [0, 0, 0],
                                                        RADII[i + 1]),)))
    return tuple(out)


def tcp_pose():
    T = np.eye(4)
    T[2, 3] = TOOL_LENGTH
    return T


def make_cell(zones=(), *, arm=None, allowance=0.0, targets=(), programs=(), self_clearance=0.005, mount=None):
    tool = Tool(tcp_pose(), (Body("tool", 6, (Capsule([0, 0, 0.03], [0, 0, TOOL_LENGTH], 0.03),), role="tool"),))
    world_from_base = np.eye(4) if mount is None else mount
    return Cell(name="sweep test cell", arm=arm or invented_arm(), world_from_base=world_from_base, links=link_bodies(),
                tool=tool, zones=tuple(zones), targets=tuple(targets), programs=tuple(programs),
                self_pairs_allowed=ALLOWED, self_clearance=self_clearance, stopping_allowance=allowance)


FLOOR = Zone("floor", "floor", (HalfSpace([0, 0, 1], 0.0),), 0.02, allowed=frozenset({"link0", "link1"}))
"""The solid z <= 0 (``HalfSpace``: points with normal . x <= offset); the base links stand on it."""


def world_tcp(cell, q):
    return cell.world_from_base @ cell.arm.fk(q) @ cell.tool.flange_from_tcp


def random_config(rng, margin=0.3):
    lo, hi = LIMITS[:, 0] + margin, LIMITS[:, 1] - margin
    q = rng.uniform(lo, hi)
    q[1] = rng.uniform(-0.6, 0.9)
    q[2] = rng.uniform(-0.6, 0.9)
    q[4] = rng.choice([-1, 1]) * rng.uniform(0.3, 1.6)
    return q


# ------------------------------------------------------------------------------------------ references
def _segment_point(p0, p1, x):
    """Distance from points x (..., 3) to segments p0-p1 (..., 3): clamped projection (closed form)."""
    d = p1 - p0
    dd = np.maximum((d * d).sum(-1), 1e-300)
    t = np.clip(((x - p0) * d).sum(-1) / dd, 0.0, 1.0)
    return np.linalg.norm(x - (p0 + t[..., None] * d), axis=-1)


def _segment_segment(p0, p1, q0, q1):
    """Segment-segment distance from the minimum of |P(s) - Q(t)|^2 over the unit square: either the
    unconstrained minimum (the lines' common perpendicular) when it lies inside, or a minimum on an
    edge of the square, i.e. an endpoint of one segment against the other segment. Independent of
    the engine's clamped closed form."""
    edges = np.minimum.reduce([_segment_point(q0, q1, p0), _segment_point(q0, q1, p1),
                               _segment_point(p0, p1, q0), _segment_point(p0, p1, q1)])
    u, v, w = p1 - p0, q1 - q0, p0 - q0
    a, b, c = (u * u).sum(-1), (u * v).sum(-1), (v * v).sum(-1)
    d, e = (u * w).sum(-1), (v * w).sum(-1)
    det = a * c - b * b
    ok = det > 1e-12 * np.maximum(a * c, 1e-300)
    sd = np.where(ok, det, 1.0)
    s = (b * e - c * d) / sd
    t = (a * e - b * d) / sd
    inside = ok & (s > 0) & (s < 1) & (t > 0) & (t < 1)
    gap = np.linalg.norm(w + s[..., None] * u - t[..., None] * v, axis=-1)
    return np.where(inside, np.minimum(gap, edges), edges)


def reference_distances(cell, engine, qs):
    """True distance (n, P) of every engine pair for configurations qs (n, 6); capsule bodies, sphere /
    capsule / half-space zones, computed here without the engine."""
    F = cell.world_from_base @ cell.arm.frames(qs)  # (n, 7, 4, 4)
    seg = {}
    for b in cell.bodies:
        (cap,) = b.shapes
        W = F[:, b.frame]
        seg[b.name] = (W[:, :3, :3] @ cap.p0 + W[:, :3, 3], W[:, :3, :3] @ cap.p1 + W[:, :3, 3], cap.radius)
    zones = {z.name: z for z in cell.zones}
    out = np.empty((len(qs), len(engine.pairs)))
    for k, p in enumerate(engine.pairs):
        a0, a1, ra = seg[p.body]
        if p.kind == "self":
            b0, b1, rb = seg[p.other]
            out[:, k] = _segment_segment(a0, a1, b0, b1) - ra - rb
            continue
        (shape,) = zones[p.zone].shapes
        if isinstance(shape, HalfSpace):
            # solid {n . x <= offset}: the capsule's lowest point along n, minus the offset
            out[:, k] = np.minimum(a0 @ shape.normal, a1 @ shape.normal) - ra - shape.offset
        elif isinstance(shape, Sphere):
            out[:, k] = _segment_point(a0, a1, np.broadcast_to(shape.center, a0.shape)) - ra - shape.radius
        else:
            z0 = np.broadcast_to(shape.p0, a0.shape)
            z1 = np.broadcast_to(shape.p1, a0.shape)
            out[:, k] = _segment_segment(a0, a1, z0, z1) - ra - shape.radius
    return out


def test_segment_references_against_python_fcl():
    # python-fcl (an independent library) on random capsule/sphere pairs: our references agree.
    rng = np.random.default_rng(11)
    for _ in range(40):
        p0, p1, q0, q1 = rng.uniform(-1, 1, (4, 3))
        ra, rb = rng.uniform(0.01, 0.1, 2)

        def capsule(a, b, r):
            d = b - a
            L = np.linalg.norm(d)
            z = d / L
            x = np.cross(z, [1.0, 0, 0] if abs(z[0]) < 0.9 else [0, 1.0, 0])
            x /= np.linalg.norm(x)
            R = np.column_stack([x, np.cross(z, x), z])
            return fcl.CollisionObject(fcl.Capsule(r, L), fcl.Transform(R, 0.5 * (a + b)))

        res = fcl.DistanceResult()
        d_fcl = fcl.distance(capsule(p0, p1, ra), capsule(q0, q1, rb), fcl.DistanceRequest(), res)
        if d_fcl > 0:
            assert _segment_segment(p0, p1, q0, q1) - ra - rb == pytest.approx(d_fcl, abs=1e-6)
        s = fcl.CollisionObject(fcl.Sphere(rb), fcl.Transform(q0))
        d_fcl = fcl.distance(capsule(p0, p1, ra), s, fcl.DistanceRequest(), fcl.DistanceResult())
        if d_fcl > 0:
            assert _segment_point(p0, p1, q0) - ra - rb == pytest.approx(d_fcl, abs=1e-6)


# ------------------------------------------------------------------------------------------ displacement bound
def _random_arm(rng, convention):
    a = rng.uniform(-0.4, 0.4, 6)
    d = rng.uniform(-0.4, 0.4, 6)
    alpha = rng.choice([-np.pi / 2, 0.0, np.pi / 2], 6) + rng.normal(0, 0.2, 6)
    return Arm.from_dh(a, alpha, d, rng.uniform(-1, 1, 6), convention=convention)


def test_displacement_bound_against_brute_force_point_motion():
    # Brute force (a second implementation): the motion of every vertex of random bodies along random
    # joint steps, by dense sampling of the straight joint segment, never exceeds the bound
    # sum_j r_ij |dq_j| (Schwarzer, Saha & Latombe 2005, eq. for articulated links); and r_ij is at
    # least the largest sampled distance of the body from joint j's axis.
    rng = np.random.default_rng(5)
    worst_ratio = 0.0
    for trial in range(12):
        arm = _random_arm(rng, ("standard", "modified")[trial % 2])
        bodies = []
        for f in range(7):
            pts = rng.uniform(-0.3, 0.3, (12, 3))
            bodies.append(Body(f"b{f}", f, (Capsule(pts[0], pts[1], 0.05), Sphere(pts[2], 0.02))))
        r = displacement_bounds(arm, bodies)
        q = rng.uniform(-np.pi, np.pi, (60, 6))
        dq = rng.normal(0, 0.4, (60, 6))
        s = np.linspace(0, 1, 41)
        path = q[:, None] + s[None, :, None] * dq[:, None]  # (60, 41, 6)
        F = arm.frames(path)  # (60, 41, 7, 4, 4)
        # joint j (0-based) turns about z of DH frame j (standard) or j + 1 (modified)
        F0 = arm.frames(q)[:, np.arange(6) + (arm.convention == "modified")]  # (60, 6, 4, 4)
        P, Z = F0[..., :3, 3], F0[..., :3, 2]
        for i, b in enumerate(bodies):
            cap, sph = b.shapes
            # points on the bodies' surfaces: capsule (segment point + radius x unit) and sphere
            u = rng.normal(size=(48, 3))
            u /= np.linalg.norm(u, axis=1, keepdims=True)
            t = rng.uniform(0, 1, (32, 1))
            local = np.vstack([cap.p0 + t * (cap.p1 - cap.p0) + cap.radius * u[:32], sph.center + sph.radius * u[32:]])
            grow = 0.0
            W = F[:, :, b.frame]
            pts = np.einsum("nsij,kj->nski", W[..., :3, :3], local) + W[..., None, :3, 3]
            moved = np.linalg.norm(np.diff(pts, axis=1), axis=-1).sum(axis=1).max(axis=1)  # path length
            bound = np.abs(dq) @ r[i]
            assert np.all(moved <= bound + 1e-12), (trial, i)
            if bound.max() > 0:
                worst_ratio = max(worst_ratio, float((moved / np.where(bound > 0, bound, 1)).max()))
            for j in range(6):
                if j >= b.frame:
                    assert r[i, j] == 0.0
                    continue
                w0 = pts[:, 0]
                rel = w0 - P[:, j, None]
                along = np.einsum("nki,ni->nk", rel, Z[:, j])
                dist = np.linalg.norm(rel - along[..., None] * Z[:, j, None], axis=-1) + grow
                assert dist.max() <= r[i, j] + 1e-12, (trial, i, j)
    assert worst_ratio > 0.2  # the bound is not vacuous: some motions come close to it


def test_self_pair_coefficients_use_only_the_joints_between():
    # Two bodies of one chain move relative to each other only by the joints between them
    # (Schwarzer, Saha & Latombe 2005, self-collision of articulated robots).
    cell = make_cell((FLOOR,))
    engine = ClearanceEngine(cell)
    C = pair_coefficients(engine)
    r = displacement_bounds(cell.arm, engine.bodies)
    frames = {b.name: b.frame for b in engine.bodies}
    for k, p in enumerate(engine.pairs):
        if p.kind == "self":
            fa, fb = sorted((frames[p.body], frames[p.other]))
            hi = p.other if frames[p.other] == fb else p.body
            hi_i = [b.name for b in engine.bodies].index(hi)
            assert np.all(C[k, :fa] == 0) and np.all(C[k, fb:] == 0)
            assert np.array_equal(C[k, fa:fb], r[hi_i, fa:fb])
        else:
            assert np.array_equal(C[k], r[[b.name for b in engine.bodies].index(p.body)])


# ------------------------------------------------------------------------------------------ certified bound
def _mount(rng):
    """A random mount pose (world_from_base): the arm turned about z and moved, on a plinth."""
    from scipy.spatial.transform import Rotation

    T = np.eye(4)
    T[:3, :3] = Rotation.from_euler("z", rng.uniform(-np.pi, np.pi)).as_matrix()
    T[:3, 3] = [rng.uniform(-1, 1), rng.uniform(-1, 1), 0.0]
    return T


def _near_zone_cell(rng, q_mid, mount=None):
    """Zones placed around the tool and forearm at q_mid, so that moves through q_mid pass near them."""
    cell = make_cell(mount=mount)
    F = cell.world_from_base @ cell.arm.frames(q_mid)
    tip = (F[6] @ tcp_pose())[:3, 3]
    elbow = F[3, :3, 3]
    u = rng.normal(size=3)
    u /= np.linalg.norm(u)
    v = rng.normal(size=3)
    v /= np.linalg.norm(v)
    zones = [
        FLOOR,
        Zone("ball", "keep-out", (Sphere(tip + u * rng.uniform(0.09, 0.2), 0.05),), 0.05),
        Zone("pole", "fixture", (Capsule(elbow + v * 0.2 - [0, 0, 0.3], elbow + v * 0.2 + [0, 0, 0.3], 0.04),), 0.02),
    ]
    return make_cell(zones, allowance=rng.choice([0.0, 0.01]), mount=mount)


def _dense(cell, engine, qs, required):
    """Smallest true margin and smallest true distance over the configurations ``qs``."""
    ref = np.where(engine.allowed, np.inf, reference_distances(cell, engine, qs))
    return (ref - required).min(), ref.min()


GRID = 2.5e-4  # m: the dense grid's own error (half a 0.5 mm step of point motion)


def _check_status(row, margin, distance, slack=0.0):
    """Findings where the truth has them, none where it clearly has not (tolerances TOL, GRID and, for
    a linear move, twice its path deviation: the swept polyline may be that much closer)."""
    if distance < -GRID:
        assert row.status == "intrusion"
    if distance > TOL + GRID + slack:
        assert row.status != "intrusion"
    if margin < -GRID:
        assert row.status in ("below margin", "intrusion")
    if margin > TOL + GRID + slack:
        assert np.isnan(row.first_violation) and row.status not in ("below margin", "intrusion")


def _required(cell, engine, allowance):
    zone = np.array([p.kind == "zone" for p in engine.pairs])
    return engine.required + np.where(zone, allowance, 0.0)


def _gap_tol(dense):
    """Largest expected gap between the certified and the true minimum margin (refinement tolerance)."""
    return max(BOUND_TOL, BOUND_REL * (abs(dense) + 2 * BOUND_TOL)) / (1 - BOUND_REL)


def test_certified_bound_never_exceeds_dense_minimum_joint_moves():
    # Dense reference: independent true distances (closed-form point-segment, golden-section
    # segment-segment, checked against python-fcl above) every <= 0.5 mm of point motion.
    rng = np.random.default_rng(2026)
    n_near = 0
    statuses = set()
    for i in range(30):
        q_mid = random_config(rng)
        dq = rng.normal(0, 0.35, 6)
        q0, q1 = q_mid - dq, q_mid + dq
        cell = _near_zone_cell(rng, q_mid, _mount(rng) if i % 3 == 2 else None)
        engine = ClearanceEngine(cell)
        row = sweep_move(cell, q0, q1, engine=engine)
        n = int(np.ceil(row.max_displacement / 5e-4)) + 1
        qs = q0 + np.linspace(0, 1, n)[:, None] * (q1 - q0)
        dense, distance = _dense(cell, engine, qs, _required(cell, engine, cell.stopping_allowance))
        certified = row.min_clearance - row.required
        assert certified <= dense + 1e-9, (certified, dense)
        # and it is tight: within the refinement tolerance (the engine is exact for these shapes) and
        # the dense grid's own error
        assert certified >= dense - _gap_tol(dense) - GRID, (certified, dense)
        assert row.gap >= 0
        # without the refinement the bound comes from the advancement steps alone (the displacement
        # bound decides it): still never above the truth
        coarse = sweep_move(cell, q0, q1, engine=engine, bound_tol=10.0, bound_rel=0.0)
        assert coarse.min_clearance - coarse.required <= dense + 1e-9
        assert coarse.queries <= row.queries
        _check_status(row, dense, distance)
        n_near += abs(dense) < 0.1
        statuses.add(row.status)
    assert n_near >= 15  # the moves do pass near the zones
    assert {"clear", "below margin", "intrusion"} <= statuses


def _follow_line(cell, q_start, world_from_tcp_end, n):
    """Dense IK samples along the straight TCP line (slerp orientation), keeping the nearest solution."""
    from scipy.spatial.transform import Rotation, Slerp

    T0 = world_tcp(cell, q_start)
    s = np.linspace(0, 1, n)
    rot = Slerp([0, 1], Rotation.from_matrix(np.stack([T0[:3, :3], world_from_tcp_end[:3, :3]])))(s).as_matrix()
    T = np.tile(np.eye(4), (n, 1, 1))
    T[:, :3, :3] = rot
    T[:, :3, 3] = (1 - s)[:, None] * T0[:3, 3] + s[:, None] * world_from_tcp_end[:3, 3]
    sol = cell.arm.ik(cell.base_from_flange(T))
    out = [q_start]
    for i in range(1, n):
        ok = sol.valid[i]
        cand = sol.q[i] + 2 * np.pi * np.round((out[-1] - sol.q[i]) / (2 * np.pi))
        err = np.where(ok, np.abs(cand - out[-1]).max(axis=1), np.inf)
        out.append(cand[int(np.argmin(err))])
    return np.array(out)


def test_certified_bound_never_exceeds_dense_minimum_linear_moves():
    # Dense reference on the true line (IK every 0.2 mm of TCP travel and independent distances).
    rng = np.random.default_rng(77)
    done = 0
    for i in range(20):
        q_mid = random_config(rng)
        dq = rng.normal(0, 0.15, 6)
        q0 = q_mid - dq
        cell = _near_zone_cell(rng, q_mid, _mount(rng) if i % 2 else None)
        end = world_tcp(cell, q_mid + dq)
        engine = ClearanceEngine(cell)
        row = sweep_move(cell, q0, end, motion="linear", engine=engine)
        if row.status == "unreachable" or row.peak_speed_ratio > 3:
            continue  # the line leaves the branch or passes near a singularity: not a test of the bound
        travel = np.linalg.norm(end[:3, 3] - world_tcp(cell, q0)[:3, 3])
        qs = _follow_line(cell, q0, end, max(400, int(travel / 2e-4)))
        assert np.abs(np.diff(qs, axis=0)).max() < 0.01  # the reference path is continuous
        dense, distance = _dense(cell, engine, qs, _required(cell, engine, cell.stopping_allowance))
        certified = row.min_clearance - row.required
        assert certified <= dense + 1e-9, (certified, dense)
        assert certified >= dense - _gap_tol(dense) - 2 * row.path_deviation - GRID
        coarse = sweep_move(cell, q0, end, motion="linear", engine=engine, bound_tol=10.0, bound_rel=0.0)
        assert coarse.min_clearance - coarse.required <= dense + 1e-9
        assert 0 <= row.path_deviation <= 5e-4
        if row.status != "outside limits":
            _check_status(row, dense, distance, slack=2 * row.path_deviation)
        done += 1
    assert done >= 10


# ------------------------------------------------------------------------------------------ designed moves
def test_joint_move_through_a_keep_out_zone_between_clear_targets_is_caught():
    # Joint 1 turns the stretched arm by +-0.5 rad; a keep-out ball sits on the TCP's circle at
    # joint 1 = 0. The TCP stays on a circle of radius R about axis 1, so the distance from the TCP
    # (the tool's capsule end) to the ball centre is the chord 2 R sin(|phi| / 2) (plane geometry):
    # the required clearance is first broken where that chord equals r_tool + r_ball + required.
    q0 = np.array([-0.5, 0.3, 0.2, 0.0, 0.5, 0.0])
    q1 = q0.copy()
    q1[0] = 0.5
    cell = make_cell()
    mid = q0.copy()
    mid[0] = 0.0
    tip = world_tcp(cell, mid)[:3, 3]
    ball = Zone("ball", "keep-out", (Sphere(tip, 0.05),), 0.05)
    cell = make_cell((FLOOR, ball))
    engine = ClearanceEngine(cell)
    assert engine.evaluate(q0).overall == 0 and engine.evaluate(q1).overall == 0  # both ends clear
    row = sweep_move(cell, q0, q1, engine=engine)
    assert row.status == "intrusion"
    assert row.closest_other.startswith("ball")
    assert row.min_clearance <= 0
    assert row.where == pytest.approx(0.5, abs=0.02)
    R = np.hypot(tip[0], tip[1])
    need = 0.03 + 0.05 + 0.05  # tool radius + ball radius + required
    phi = 2 * np.arcsin(need / (2 * R))
    s_true = (0.5 - phi) / 1.0
    # the located point: certified clear before it and at most TOL of point motion short of the truth
    assert row.first_violation <= s_true + 1e-9
    assert (s_true - row.first_violation) * R < 5 * TOL


def test_linear_move_through_wrist_singularity_is_flagged():
    # Joint 5 from +0.3 to -0.3 rad with joints 1, 4, 6 at 0 keeps the arm planar: the straight line
    # between the two TCP poses passes through theta5 = 0, where axes 4 and 6 line up (wrist
    # singularity, common practice, no source). The continuous solution changes the wrist branch.
    cell = make_cell((FLOOR,))
    q0 = np.array([0.0, 0.2, 0.3, 0.0, 0.3, 0.0])
    q1 = q0.copy()
    q1[4] = -0.3
    row = sweep_move(cell, q0, world_tcp(cell, q1), motion="linear")
    assert row.singular_crossed == "wrist"
    assert row.status == "unreachable"
    assert row.branch.endswith("pos") and row.end_branch.endswith("neg")
    assert "wrist" in row.note


def test_linear_move_through_shoulder_singularity_is_flagged():
    # Tool pointing down, TCP on a line at y = 0 from x = 0.35 to x = -0.25: the wrist centre is right
    # above the TCP, so it crosses joint 1's axis where x = 0, at path fraction 0.35 / 0.6 (plane
    # geometry). There the arm must flip from front to back (shoulder singularity, common practice,
    # no source). The line also passes over the shoulder joint (x = a1 = 0.1), where only the elbow
    # label's convention changes: that is noted, not flagged.
    cell = make_cell((FLOOR,))

    def pose(x):
        T = np.eye(4)
        T[:3, :3] = np.diag([1.0, -1.0, -1.0])
        T[:3, 3] = [x, 0.0, 0.7]
        return T

    sol = cell.arm.ik(cell.base_from_flange(pose(0.35)))
    k = [i for i in range(len(sol)) if sol.labels[i] == "front-up-pos" and sol.twin[i] == i][0]
    row = sweep_move(cell, sol.q[k], pose(-0.25), motion="linear")
    assert row.singular_crossed == "shoulder"
    assert row.status == "unreachable"
    assert row.end_branch.startswith("back")
    assert f"shoulder singularity is crossed at path fraction {0.35 / 0.6:.4f}" in row.note
    assert "without a singularity" in row.note
    # a line that stays in front of the axis is followed to its end
    short = sweep_move(cell, sol.q[k], pose(0.2), motion="linear")
    assert short.singular_crossed == "" and np.isfinite(short.q_end).all()


def test_linear_move_near_wrist_singularity_has_a_high_speed_ratio():
    # The same move with joint 4 slightly off the plane keeps theta5 > 0 but passes close to 0:
    # joints 4 and 6 must swing fast (the joint speed grows like 1 / sin(theta5)).
    cell = make_cell((FLOOR,))
    q0 = np.array([0.0, 0.2, 0.3, 0.03, 0.3, 0.0])
    q1 = np.array([0.0, 0.2, 0.3, 0.03, -0.3, 0.0])
    T1 = world_tcp(cell, q1)
    row = sweep_move(cell, q0, T1, motion="linear")
    far = sweep_move(cell, q0, world_tcp(cell, q0 + [0.1, 0.1, -0.1, 0.0, 0.1, 0.0]), motion="linear")
    assert row.peak_speed_ratio > 5 * far.peak_speed_ratio
    assert far.peak_speed_ratio < 2


def _bulging_joint(cell, rng):
    """A linear move whose joint path goes beyond both ends in some joint by more than 3 degrees."""
    for _ in range(200):
        q0 = random_config(rng)
        q1 = q0 + rng.normal(0, 0.5, 6) * [1, 1, 1, 0, 0, 0]
        row = sweep_move(cell, q0, world_tcp(cell, q1), motion="linear", max_queries=2)
        if row.status == "unreachable" or row.peak_speed_ratio > 3:
            continue
        qs = _follow_line(cell, q0, world_tcp(cell, q1), 400)
        top = qs.max(axis=0) - np.maximum(qs[0], qs[-1])
        j = int(np.argmax(top))
        if top[j] > np.radians(3):
            return q0, qs[-1], j, float(np.maximum(qs[0, j], qs[-1, j]) + 0.5 * top[j])
    raise AssertionError("no bulging line found")


def test_linear_move_exceeding_a_joint_limit_mid_way_is_flagged():
    rng = np.random.default_rng(3)
    q0, q1, j, upper = _bulging_joint(make_cell(), rng)
    limits = LIMITS.copy()
    limits[j, 1] = upper  # both ends inside, the middle of the line outside
    cell = make_cell((FLOOR,), arm=invented_arm(limits))
    assert cell.arm.within_limits(q0).all() and cell.arm.within_limits(q1).all()
    row = sweep_move(cell, q0, world_tcp(cell, q1), motion="linear")
    assert row.status in ("outside limits", "below margin", "intrusion")
    assert 0 < row.limit_violation < 1
    assert f"joint {j + 1}" in row.note
    # a joint move between the same in-limit ends stays in the (convex) limit box
    joint = sweep_move(cell, q0, q1)
    assert np.isnan(joint.limit_violation) and joint.status != "outside limits"


# ------------------------------------------------------------------------------------------ programs
def _program_cell(programs, rng=None):
    q_a = np.array([0.4, 0.2, 0.3, 0.0, 0.8, 0.0])
    q_b = np.array([-0.4, 0.1, 0.4, 0.2, 0.7, 0.3])
    q_c = q_b + [0.0, 0.08, -0.05, 0.0, 0.05, 0.0]
    base = make_cell()
    targets = (Target("a", world_tcp(base, q_a)), Target("b", world_tcp(base, q_b)), Target("c", world_tcp(base, q_c)))
    return make_cell((FLOOR,), targets=targets, programs=programs, allowance=0.01)


def test_program_rows_per_start_branch_and_branch_kept():
    # The program rules (one run per valid start branch, a joint move keeps its label, the allowance is
    # added to zone pairs) are the project's own specification (docs/motions.md), no external source.
    prog = Program("cycle", (Move("a"), Move("b", "joint"), Move("c", "linear"), Move("a", "joint")))
    cell = _program_cell((prog,))
    rows = run_sweep(cell)
    sol = cell.arm.ik(cell.base_from_flange(cell.target("a").world_from_tcp))
    starts = {sol.labels[k] for k in range(len(sol)) if sol.twin[k] == k and sol.within_limits[k].all()}
    assert len(rows) == 3 * len(starts)
    assert {r.branch for r in rows if r.move == 2} == starts
    for r in rows:
        assert r.program == "cycle" and r.move in (2, 3, 4)
        assert (r.from_target, r.to_target) == {2: ("a", "b"), 3: ("b", "c"), 4: ("c", "a")}[r.move]
        if r.status != "unreachable" and r.motion == "joint":
            assert r.end_branch == r.branch  # the label is kept
            assert r.allowance == 0.01
            if r.closest_other.startswith("floor"):
                assert r.required == pytest.approx(0.02 + 0.01)
    result = CheckResult(cell=cell, rows=(), motions=rows)
    assert len(result.findings()) == sum(r.status != "clear" for r in rows)


def test_named_branch_and_per_move_allowance():
    prog = Program("p", (Move("a", branch="front-up-pos"), Move("b", "joint", branch="front-up-neg",
                                                                stopping_allowance=0.05)))
    cell = _program_cell((prog,))
    (row,) = run_sweep(cell, "p")
    assert row.branch == "front-up-pos" and row.end_branch == "front-up-neg"
    assert row.allowance == 0.05


def test_linear_move_cannot_change_branch():
    # A straight-line move keeps its configuration all the way (common practice, no source).
    prog = Program("p", (Move("b", branch="front-up-pos"), Move("c", "linear", branch="front-up-neg"),
                         Move("a", "joint")))
    rows = run_sweep(_program_cell((prog,)))
    assert [r.status for r in rows] == ["unreachable", "unreachable"]
    assert "cannot change branch" in rows[0].note and "not run" in rows[1].note


@pytest.mark.parametrize(
    "moves, match",
    [
        ((Move("a"), Move("nowhere")), r'program "bad" move 2.*unknown target \'nowhere\''),
        ((Move("a"), Move("bb")), r"unknown target 'bb' \(did you mean 'b'\?\)"),
        ((Move("a"), Move("b", branch="front-upp-pos")),
         r"move 2.*unknown branch label 'front-upp-pos' \(did you mean"),
        ((Move("a", branch="up"),), r"move 1.*unknown branch label 'up'"),
        ((Move("a"), Move("b", motion="circular")), r"motion must be 'joint' or 'linear', got 'circular'"),
        ((), r"at least one move"),
    ],
)
def test_program_errors(moves, match):
    # Error messages name the program, the move, expected vs actual (house rules, docs/motions.md).
    cell = _program_cell((Program("bad", tuple(moves)),))
    with pytest.raises(ProgramError, match=match):
        run_sweep(cell)


def test_unknown_program_name():
    cell = _program_cell((Program("cycle", (Move("a"), Move("b"))),))
    with pytest.raises(ProgramError, match=r"unknown program 'cycel' \(did you mean 'cycle'\?\)"):
        run_sweep(cell, "cycel")


def test_fewer_queries_than_uniform_sampling_on_a_clear_move():
    # Conservative advancement needs far fewer queries than uniform sampling for the same guarantee
    # (Schwarzer, Saha & Latombe 2005 report the same kind of saving); uniform count from the same bound.
    cell = make_cell((FLOOR,))
    q0 = np.array([0.8, 0.1, 0.2, 0.5, 0.9, -1.0])
    q1 = np.array([-0.8, 0.3, 0.1, -0.5, 0.6, 1.0])
    row = sweep_move(cell, q0, q1)
    assert row.status == "clear"
    assert row.uniform_samples >= 10 * row.queries
    # the profile is sorted and its minimum is not below the certified bound
    assert np.all(np.diff(row.profile.s) > 0) and row.profile.s[0] == 0 and row.profile.s[-1] == 1
    margin = row.profile.clearance - row.profile.required
    assert margin.min() >= row.min_clearance - row.required - 1e-12
    assert np.allclose(row.q_at_min, q0 + row.where * (q1 - q0))


def test_move_rows_are_frozen():
    row = sweep_move(make_cell((FLOOR,)), np.zeros(6) + 0.3, np.zeros(6) + 0.4)
    with pytest.raises(dataclasses.FrozenInstanceError):
        row.status = "clear"


def test_moves_without_motion_and_pure_reorientation():
    cell = make_cell((FLOOR,))
    q = np.array([0.3, 0.2, 0.1, 0.4, 0.8, -0.2])
    still = sweep_move(cell, q, q)
    assert still.status == "clear" and still.queries <= 2 and still.max_displacement == 0.0
    # a linear move to the same pose is no motion either
    same = sweep_move(cell, q, world_tcp(cell, q), motion="linear")
    assert same.status == "clear" and np.allclose(same.q_end, q) and same.peak_speed_ratio == 1.0
    # turning the tool about its own z axis in place: only joint 6 moves, linearly in the path fraction
    # (slerp about one fixed axis turns at a constant rate; joint 6 turns about that same axis)
    T = world_tcp(cell, q)
    turn = np.eye(4)
    turn[:2, :2] = [[np.cos(0.8), -np.sin(0.8)], [np.sin(0.8), np.cos(0.8)]]
    row = sweep_move(cell, q, T @ turn, motion="linear")
    assert row.status == "clear"
    assert np.allclose(row.q_end, q + [0, 0, 0, 0, 0, 0.8], atol=1e-9)
    assert row.peak_speed_ratio == pytest.approx(1.0, abs=1e-6)
    assert row.path_deviation < 1e-9


def test_demo_program_sweeps():
    # The shipped demo cell (invented): every move x valid start branch gets a row.
    from pathlib import Path

    from envelope.cell import load_cell

    cell = load_cell(Path(__file__).resolve().parents[1] / "envelope" / "demo" / "cell.toml")
    rows = run_sweep(cell)
    assert rows
    for p in cell.programs:
        mine = [r for r in rows if r.program == p.name]
        assert mine and len(mine) % (len(p.moves) - 1) == 0
    for r in rows:
        assert r.status in STATUS_ORDER
        if r.queries:
            assert r.queries < r.uniform_samples
            assert np.isfinite(r.min_clearance) and r.gap >= 0
