"""Certified sweeps: the clearance of every program move, in every start branch, as a lower bound.

``run_sweep(cell)`` checks every program of the cell (or the named one) once per start branch that is
valid (exists and is within limits) at the program's first target and returns one ``MotionRow`` per
move x start branch. ``sweep_move(cell, q_start, end, motion=...)`` sweeps one move. See
docs/motions.md for the method, the tolerances and the status precedence.

Method (conservative advancement; Schwarzer, Saha & Latombe, "Adaptive dynamic collision checking for
single and multiple articulated robots in complex environments", IEEE T-RO 21(3), 2005):

- ``displacement_bounds(arm, bodies)`` gives ``r[i, j]`` (m/rad): an upper bound, valid in every
  configuration, on the distance of any point of body ``i`` from the axis of joint ``j`` (0 when the
  joint does not move the body). A joint change ``dq`` then moves no point of body ``i`` by more than
  ``sum_j r[i, j] |dq_j|`` along the straight joint-space segment (each point's speed is at most
  ``sum_j |dq_j| dist(point, axis j)``). For a self pair only the joints between the two bodies move
  one relative to the other.
- Along the path every pair ``p`` has a cumulative displacement bound ``L_p(s)`` (piecewise linear in
  the path fraction ``s``). From a configuration whose clearance lower bound is ``d_p``, the next
  configuration is the farthest ``s'`` with ``L_p(s') - L_p(s) <= d_p - level_p`` for every pair: no
  point can come closer than ``level_p`` in between. ``level_p`` is the required clearance (plus the
  stopping allowance and, for linear moves, the path deviation) up to the first point where some pair
  comes within ``tol`` of it, then 0 (contact is still excluded); a pair within ``tol`` of its level
  no longer limits the step (the smallest step is ``tol`` of point motion).
- Between two samples with bounds ``a``, ``b`` and displacement ``D`` the clearance is at least
  ``min(a, b, (a + b - D) / 2)``; the intervals with the lowest bound are bisected until the certified
  minimum is within ``max(bound_tol, bound_rel * |margin|)`` of the smallest sampled margin.
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass, field

import numpy as np

from . import geometry as g
from .cellshapes import suggest
from .clearance import engine_for, pair_other_name
from .errors import InputError, ProgramError
from .kinematics.branches import BRANCH_LABELS

CLEAR = "clear"
BELOW_MARGIN = "below margin"
INTRUSION = "intrusion"
OUTSIDE_LIMITS = "outside limits"
UNREACHABLE = "unreachable"
STATUS_ORDER = (INTRUSION, BELOW_MARGIN, OUTSIDE_LIMITS, UNREACHABLE, CLEAR)
"""Motion statuses, most severe first (the same order as the target check)."""

TOL = 1e-4
"""m of point motion: a pair whose certified margin is below this counts as having reached its level
(below margin / touching); also the smallest step."""
BOUND_TOL = 1e-3
"""m: the certified minimum is refined until it is within ``max(BOUND_TOL, BOUND_REL * |margin|)`` of
the smallest sampled margin (``MotionRow.gap``)."""
BOUND_REL = 0.1
"""Relative part of the refinement tolerance (of the smallest sampled margin's magnitude)."""
PATH_TOL = 5e-4
"""m of point motion: linear moves, largest deviation of the joint polyline from the IK path."""
FREE_STEP = 0.01
"""m of point motion: the step where no pair constrains it (every pair already touching)."""
MAX_QUERIES = 4000
"""Distance queries per move before the sweep falls back to steps of ``FREE_STEP``."""
UNIFORM_SPACING = 1e-3
"""m of point motion between samples of the uniform-sampling comparison (``MotionRow.uniform_samples``)."""
LINEAR_STEP = 0.01
"""m of TCP travel between the first IK samples of a linear move (refined after)."""
LINEAR_ANGLE_STEP = math.radians(2.0)
"""rad of TCP rotation between the first IK samples of a linear move."""
LOCATE_TOL = 1e-4
"""Path fraction to which leaving the reachable space is located on a linear move."""
SINGULAR_LOCATE = 1e-7
"""Path fraction to which a branch-label change along a linear move is located."""
SINGULAR_MEASURE = 1e-3
"""A label change is a singularity crossing where the measure of the changed part is below this
(wrist sine, shoulder distance in m, elbow sine; ``IKSolutions.singular_measure``)."""
MIN_SEGMENT = 1e-6
"""Path fraction: a linear-move segment this short whose midpoint is still off the chord is a jump."""



# ================================================================================ results
@dataclass(frozen=True, eq=False)
class Profile:
    """Clearance along a move, for a chart: at every sampled path fraction ``s (k,)``, the certified
    lower bound ``clearance (k,)`` (m) of the pair with the smallest margin there and that pair's
    ``required (k,)`` clearance (m, allowance and path deviation included)."""

    s: np.ndarray
    clearance: np.ndarray
    required: np.ndarray


def _empty_profile() -> Profile:
    return Profile(np.zeros(0), np.zeros(0), np.zeros(0))


@dataclass(frozen=True, eq=False)
class MotionRow:
    """One move of a program in one start branch. Metres and radians.

    Attributes
    ----------
    program : str
    move : int
        1-based position of the move in the program (move 1 only places the arm: it has no row).
    from_target, to_target : str
    motion : str
        ``"joint"`` or ``"linear"``.
    branch : str
        Branch label at the start of the move; ``end_branch`` the label it ends in.
    status : str
        One of ``STATUS_ORDER`` (precedence in docs/motions.md).
    min_clearance : float
        Certified lower bound (m) of the clearance over the whole move of the pair with the smallest
        margin (never more than the true minimum); NaN when nothing was swept.
    required : float
        That pair's required clearance (m), ``allowance`` and ``path_deviation`` included.
    gap : float
        m: the smallest *sampled* margin minus the certified one (``min_clearance - required``). The
        true minimum margin lies between them when the engine's bounds are exact.
    allowance : float
        Stopping allowance (m) added to every zone pair's required clearance during the move.
    where : float
        Path fraction (0..1) where the bound is attained; ``q_at_min (6,)`` the configuration there.
    closest_body, closest_other : str
        The pair (``other`` is ``zone/panel`` or a body name).
    first_violation : float
        First path fraction where the certified clearance of some pair comes within ``tol`` of its
        required value (the requirement is certified before it); NaN if never.
    limit_violation : float
        First path fraction where a joint leaves its range (linear moves); NaN if never.
    peak_speed_ratio : float
        Peak of ``max_j |dq_j/ds|`` over ``max_j |q_end_j - q_start_j|`` (1 for a joint move).
    singular_crossed : str
        ``"wrist"``, ``"shoulder"``, ``"elbow"`` (joined with ``+``) when a linear move crosses that
        singularity and cannot keep its branch; ``"unknown"`` when the joint path jumps without a
        located crossing; ``""`` otherwise.
    queries : int
        Clearance evaluations (one configuration, every pair) used by the sweep.
    ik_samples : int
        IK solutions computed along a linear move (0 for a joint move).
    path_deviation : float
        m of point motion: deviation bound of the joint polyline from the true linear-move path, added
        to ``required`` (0 for a joint move).
    max_displacement : float
        m: bound on the largest point motion of any pair over the move (``uniform_samples`` =
        ``ceil(max_displacement / 1 mm) + 1`` samples give the same bound by uniform sampling).
    q_start, q_end : (6,) float
        Joint values at the ends (NaN where there is none).
    profile : Profile
    note : str
    """

    program: str
    move: int
    from_target: str
    to_target: str
    motion: str
    branch: str
    end_branch: str
    status: str
    min_clearance: float
    required: float
    gap: float
    allowance: float
    where: float
    q_at_min: np.ndarray
    closest_body: str
    closest_other: str
    first_violation: float
    limit_violation: float
    peak_speed_ratio: float
    singular_crossed: str
    queries: int
    ik_samples: int
    path_deviation: float
    max_displacement: float
    uniform_samples: int
    q_start: np.ndarray
    q_end: np.ndarray
    profile: Profile = field(default_factory=_empty_profile)
    seconds: float = 0.0
    note: str = ""


# ================================================================================ displacement bounds
def _extreme_points(shape) -> tuple[np.ndarray, float]:
    """Points ``(k, 3)`` and a radius: the shape lies in the hull of the points grown by the radius."""
    if isinstance(shape, g.Sphere):
        return shape.center[None], shape.radius
    if isinstance(shape, g.Capsule):
        return np.stack([shape.p0, shape.p1]), shape.radius
    if isinstance(shape, (g.Box, g.Cylinder)):
        half = 0.5 * shape.extents if isinstance(shape, g.Box) else np.array(
            [shape.radius, shape.radius, 0.5 * shape.length])
        corners = np.array([[sx, sy, sz] for sx in (-1, 1) for sy in (-1, 1) for sz in (-1, 1)]) * half
        return corners @ shape.pose[:3, :3].T + shape.pose[:3, 3], 0.0
    if isinstance(shape, (g.Convex, g.TriMesh)):
        return np.asarray(shape.vertices), 0.0
    raise InputError(f"a moving body needs a bounded shape, got {type(shape).__name__}", item="bodies")


def _line_distance(points, point, direction) -> np.ndarray:
    r = points - point
    return np.linalg.norm(r - np.outer(r @ direction, direction), axis=1)


def displacement_bounds(arm, bodies) -> np.ndarray:
    """``(n_bodies, 6)`` bounds ``r[i, j]`` (m per rad): the largest distance of body ``i`` from joint
    ``j``'s axis over *every* configuration; 0 where joint ``j`` does not move the body.

    Body ``i`` in DH frame ``f`` moves with joints 1..f (both conventions). For the body's own joint
    ``f`` the axis is fixed in frame ``f`` (the body turns about it), so the distance is computed
    exactly from the shape's extreme points. For ``j < f`` the chain bound is used:
    ``dist(p, axis j) <= dist(o_j, axis j) + sum_{k=j+1..f} |o_k - o_(k-1)| + |p - o_f|``, where ``o_k``
    is the origin of DH frame ``k``; each term is independent of the joint values (``o_j`` turns about
    axis j; consecutive origins are a fixed distance apart in either DH convention). Bare shapes are
    used: a body's padding moves with it and is subtracted from every distance, so it changes no
    distance difference.
    """
    q0 = np.zeros(6)
    F = arm.frames(q0)  # (7, 4, 4) base_from_frame
    P, Z = arm.joint_axes(q0)  # (6, 3): points on / directions of joint axes 1..6
    origins = F[:, :3, 3]
    step = np.linalg.norm(np.diff(origins, axis=0), axis=1)  # |o_k - o_(k-1)|, k = 1..6
    foot = np.array([_line_distance(origins[j + 1][None], P[j], Z[j])[0] for j in range(6)])  # dist(o_(j+1), axis j+1)
    out = np.zeros((len(bodies), 6))
    for i, body in enumerate(bodies):
        f = int(body.frame)
        if f == 0 or not body.shapes:
            continue
        pts_r = [_extreme_points(s) for s in body.shapes]
        local = np.vstack([p for p, _ in pts_r])  # in frame f
        rad = np.concatenate([np.full(len(p), r) for p, r in pts_r])
        world = local @ F[f, :3, :3].T + F[f, :3, 3]  # base frame at q0
        rho = float((np.linalg.norm(local, axis=1) + rad).max())  # max |p - o_f|
        for j in range(f):  # 0-based joint j is joint j+1; it moves frames j+1..6
            chain = foot[j] + step[j + 1:f].sum() + rho
            if j == f - 1:
                exact = float((_line_distance(world, P[j], Z[j]) + rad).max())
                chain = min(chain, exact)
            out[i, j] = chain
    out.flags.writeable = False
    return out


def pair_coefficients(engine) -> np.ndarray:
    """``(P, 6)``: the relative point-motion bound of each engine pair per rad of each joint.

    A zone pair gets its body's row of ``displacement_bounds``; a self pair of bodies in frames
    ``fa < fb`` gets the higher body's bounds for joints ``fa+1..fb`` only (joints 1..fa move both
    bodies together).
    """
    cache = engine.__dict__.setdefault("_sweep_cache", {})
    if "coef" in cache:
        return cache["coef"]
    bodies = engine.bodies
    r = displacement_bounds(engine.cell.arm, bodies)
    index = {b.name: i for i, b in enumerate(bodies)}
    C = np.zeros((len(engine.pairs), 6))
    for k, p in enumerate(engine.pairs):
        i = index[p.body]
        if p.kind == "self":
            o = index[p.other]
            lo, hi = sorted((i, o), key=lambda b: int(bodies[b].frame))
            fa, fb = int(bodies[lo].frame), int(bodies[hi].frame)
            C[k, fa:fb] = r[hi, fa:fb]
        else:
            C[k] = r[i]
    C.flags.writeable = False
    cache["coef"] = C
    return C


# ================================================================================ paths
@dataclass(frozen=True, eq=False)
class _Path:
    """A joint-space polyline: knots ``s (m+1,)`` from 0 to 1 and ``q (m+1, 6)``."""

    s: np.ndarray
    q: np.ndarray

    def at(self, s) -> np.ndarray:
        s = np.atleast_1d(np.asarray(s, dtype=np.float64))
        k = np.clip(np.searchsorted(self.s, s, side="right") - 1, 0, len(self.s) - 2)
        t = ((s - self.s[k]) / (self.s[k + 1] - self.s[k]))[:, None]
        return self.q[k] + t * (self.q[k + 1] - self.q[k])


class _Cumulative:
    """Cumulative displacement bounds ``L_p(s)`` of every pair along a polyline, and their inverse."""

    def __init__(self, path: _Path, C: np.ndarray):
        self.s = path.s
        dq = np.abs(np.diff(path.q, axis=0))  # (m, 6)
        seg = dq @ C.T  # (m, P)
        self.knots = np.vstack([np.zeros((1, C.shape[0])), np.cumsum(seg, axis=0)])  # (m+1, P)
        self.total = self.knots[-1]
        mx = np.concatenate([[0.0], np.cumsum(seg.max(axis=1) if seg.size else np.zeros(len(dq)))])
        self.max_knots = mx  # cumulative of the largest pair rate (for point-motion steps)

    def value(self, s) -> np.ndarray:
        """``(P,)`` cumulative bounds at a path fraction ``s``."""
        k = int(np.clip(np.searchsorted(self.s, s, side="right") - 1, 0, len(self.s) - 2))
        t = (s - self.s[k]) / (self.s[k + 1] - self.s[k])
        return self.knots[k] + t * (self.knots[k + 1] - self.knots[k])

    def values(self, s) -> np.ndarray:
        """``(k, P)`` cumulative bounds at path fractions ``s (k,)``."""
        s = np.asarray(s, dtype=np.float64)
        k = np.clip(np.searchsorted(self.s, s, side="right") - 1, 0, len(self.s) - 2)
        t = ((s - self.s[k]) / (self.s[k + 1] - self.s[k]))[:, None]
        return self.knots[k] + t * (self.knots[k + 1] - self.knots[k])

    def inverse(self, targets) -> np.ndarray:
        """``(P,)`` the largest s with ``L_p(s) <= targets_p`` (1 where the target is beyond the end)."""
        K = self.knots
        out = np.ones(K.shape[1])
        below = (K <= targets[None, :]).sum(axis=0)  # knots at or below the target (>= 1 when targets >= 0)
        inside = below < len(K)
        k = np.clip(below - 1, 0, len(K) - 2)
        cols = np.arange(K.shape[1])
        lo, hi = K[k, cols], K[k + 1, cols]
        t = np.where(hi > lo, (targets - lo) / np.where(hi > lo, hi - lo, 1.0), 1.0)
        val = self.s[k] + np.clip(t, 0.0, 1.0) * (self.s[k + 1] - self.s[k])
        out[inside] = val[inside]
        return out

    def max_step(self, s, length) -> float:
        """The path fraction reached from ``s`` after ``length`` metres of the largest point motion."""
        target = np.interp(s, self.s, self.max_knots) + length
        if target >= self.max_knots[-1]:
            return 1.0
        return float(np.interp(target, self.max_knots, self.s))


# ================================================================================ the certified sweep
@dataclass(frozen=True, eq=False)
class _SweepResult:
    s: np.ndarray  # (k,) sorted samples
    d: np.ndarray  # (k, P) distance lower bounds
    q: np.ndarray  # (k, 6)
    lb: float  # certified margin minimum
    sampled: float  # smallest sampled margin
    pair: int
    where: float
    first_violation: float
    queries: int
    capped: bool
    contact: bool  # contact not excluded: a sampled bound < tol or an interval bound <= 0


def _certified_sweep(engine, path: _Path, required: np.ndarray, *, tol: float, bound_tol: float,
                     bound_rel: float, max_queries: int) -> _SweepResult:
    C = pair_coefficients(engine)
    cum = _Cumulative(path, C)
    active = ~engine.allowed
    samples = {}

    def query(s):
        q = path.at(s)[0]
        samples[s] = (engine.evaluate(q).distance.copy(), q)
        return samples[s][0]

    s, first_violation, capped = 0.0, np.nan, False
    while True:
        d = query(s)
        if s >= 1.0:
            break
        margin = d - required
        if np.isnan(first_violation) and (margin[active] < tol).any():
            first_violation = s
        # before the first violation every pair is certified to its required clearance; after it only
        # contact is excluded (the minimum itself is then found by the refinement below)
        level = np.where(margin >= tol, required if np.isnan(first_violation) else 0.0,
                         np.where(d >= tol, 0.0, np.nan))
        use = active & ~np.isnan(level)
        nxt = 1.0
        if len(samples) >= max_queries:
            capped = True
            use[:] = False
        if use.any():
            base = cum.value(s)
            reach = cum.inverse(np.where(use, base + d - np.where(use, level, 0.0), np.inf))
            nxt = float(reach[use].min())
        else:
            nxt = cum.max_step(s, FREE_STEP)
        nxt = max(nxt, cum.max_step(s, tol), s + 1e-12)
        s = min(nxt, 1.0)

    # refine the certified minimum (branch and bound over the intervals)
    while True:
        keys = np.array(sorted(samples))
        D = np.array([samples[k][0] for k in keys])
        L = cum.values(keys)
        Mg = np.where(active, D - required, np.inf)
        sampled_min = Mg.min() if Mg.size else np.inf
        if len(keys) < 2:
            break
        a, b = D[:-1], D[1:]
        dL = L[1:] - L[:-1]
        lb = np.minimum(np.minimum(a, b), 0.5 * (a + b - dL)) - required
        lb = np.where(active, lb, np.inf)
        worst_iv = lb.min(axis=1)
        if not np.isfinite(sampled_min) or len(samples) >= max_queries:
            capped = capped or len(samples) >= max_queries
            break
        gap_tol = max(bound_tol, bound_rel * abs(sampled_min))
        bad = np.flatnonzero(worst_iv < sampled_min - gap_tol)
        # an interval whose bound says "contact" while both ends are clearly apart (>= tol) is
        # resolved too (an end within tol of contact already counts as contact)
        dlb = np.where(active, np.minimum(np.minimum(a, b), 0.5 * (a + b - dL)), np.inf)
        ends = np.where(active, np.minimum(a, b), np.inf).min(axis=1)
        contact_iv = np.flatnonzero((dlb.min(axis=1) <= 0) & (ends >= tol) & (keys[1:] - keys[:-1] > 1e-9))
        bad = np.union1d(bad, contact_iv)
        bad = bad[keys[bad + 1] - keys[bad] > 1e-9]
        if not bad.size:
            break
        order = bad[np.argsort(worst_iv[bad])][:16]
        for k in order:
            query(0.5 * (keys[k] + keys[k + 1]))

    keys = np.array(sorted(samples))
    D = np.array([samples[k][0] for k in keys]).reshape(len(keys), -1)
    Q = np.array([samples[k][1] for k in keys]).reshape(len(keys), 6)
    best, pair, where = np.inf, -1, np.nan
    sampled = np.inf
    contact = False
    if active.any():
        Mg = np.where(active, D - required, np.inf)
        k, p = np.unravel_index(np.argmin(Mg), Mg.shape)
        best, pair, where = float(Mg[k, p]), int(p), float(keys[k])
        sampled = best
        contact = bool((np.where(active, D, np.inf) < tol).any())
        if len(keys) >= 2:
            L = cum.values(keys)
            a, b, dL = D[:-1], D[1:], L[1:] - L[:-1]
            cross = 0.5 * (a + b - dL)
            lbd = np.minimum(np.minimum(a, b), cross)
            contact = contact or bool((np.where(active, lbd, np.inf) <= 0).any())
            lb = np.where(active, lbd - required, np.inf)
            k, p = np.unravel_index(np.argmin(lb), lb.shape)
            if lb[k, p] < best:
                best, pair = float(lb[k, p]), int(p)
                x = 0.5 * (a[k, p] - b[k, p] + dL[k, p])  # displacement from the interval start
                if cross[k, p] <= min(a[k, p], b[k, p]) and dL[k, p] > 0:
                    s_lo, s_hi = keys[k], keys[k + 1]
                    where = float(np.clip(cum.inverse(np.full(len(required), L[k, p] + x))[p], s_lo, s_hi))
                else:
                    where = float(keys[k] if a[k, p] <= b[k, p] else keys[k + 1])
    return _SweepResult(keys, D, Q, best, sampled, pair, where, first_violation, len(samples), capped, contact)


def _required(engine, allowance: float, deviation: float) -> np.ndarray:
    zone = np.array([p.kind == "zone" for p in engine.pairs], dtype=bool)
    return engine.required + np.where(zone, allowance, 0.0) + deviation


# ================================================================================ linear paths
@dataclass(frozen=True, eq=False)
class _LinearPath:
    path: _Path | None  # the followed part (None if nothing could be followed)
    s_end: float  # path fraction the branch was followed to (1.0 = the whole move)
    code: int
    end_code: int
    deviation: float
    peak_speed_ratio: float
    singular: str
    reason: str  # "" or why the move cannot be followed
    limit_violation: float
    limit_note: str
    ik_samples: int


def _tcp_poses(cell, world_from_tcp_start, world_from_tcp_end, s):
    from scipy.spatial.transform import Rotation, Slerp  # scipy: orientation interpolation

    rot = Rotation.from_matrix(np.stack([world_from_tcp_start[:3, :3], world_from_tcp_end[:3, :3]]))
    slerp = Slerp([0.0, 1.0], rot)
    T = np.tile(np.eye(4), (len(s), 1, 1))
    T[:, :3, :3] = slerp(s).as_matrix()
    T[:, :3, 3] = (1 - s)[:, None] * world_from_tcp_start[:3, 3] + s[:, None] * world_from_tcp_end[:3, 3]
    return cell.base_from_flange(T)


def _unwrap(cand, ref):
    """``cand (..., 6)`` moved by whole turns to be nearest ``ref (6,)``."""
    return cand + 2 * np.pi * np.round((ref - cand) / (2 * np.pi))


def _code_of(arm, base_from_flange, q):
    """Branch code of configuration ``q`` at its own flange pose (the IK slot it is, modulo turns)."""
    sol = arm.ik(base_from_flange[None])
    qq = sol.q[0]
    ok = sol.valid[0]
    if not ok.any():
        return -1
    err = np.where(ok, np.abs(_unwrap(np.where(ok[:, None], qq, 0.0), q) - q).max(axis=1), np.inf)
    k = int(np.argmin(err))
    return int(sol.code[0, k]) if err[k] < 1e-5 else -1


def _singular_measure(arm, base_from_flange, q) -> np.ndarray:
    """``(3,)`` [wrist sine, shoulder distance (m), elbow sine] of the IK solution of one pose nearest
    ``q`` (``IKSolutions.singular_measure``); NaN if the pose has no solution."""
    sol = arm.ik(base_from_flange)
    if len(sol) == 0:
        return np.full(3, np.nan)
    k = int(np.argmin(np.abs(_unwrap(sol.q, q) - q).max(axis=1)))
    return np.asarray(sol.singular_measure[k], dtype=np.float64)


def linear_path(cell, q_start, world_from_tcp_end, coef_max: np.ndarray, *, path_tol: float = PATH_TOL) -> _LinearPath:
    """Follow the straight TCP line (orientation by slerp) continuously from ``q_start``.

    At every sample the IK solution nearest the previous configuration (moved by whole turns) is
    taken, whatever its label. Where the label changes along this continuous path, the change is
    located to ``SINGULAR_LOCATE`` of the path fraction and the singularity measures of the changed
    parts (``IKSolutions.singular_measure``) are read there: near zero (``SINGULAR_MEASURE``) the line
    crosses that singularity and the branch cannot be kept; otherwise only the label convention
    changes (the row notes it) and the path goes on.

    ``coef_max (6,)``: the largest point-motion bound per rad of each joint (over every pair), used to
    turn joint deviations into metres.
    """
    arm = cell.arm
    q_start = np.asarray(q_start, dtype=np.float64)
    base_from_flange0 = arm.fk(q_start)
    world_from_tcp0 = cell.world_from_base @ base_from_flange0 @ cell.tool.flange_from_tcp
    world_from_tcp1 = np.asarray(world_from_tcp_end, dtype=np.float64)
    code = _code_of(arm, base_from_flange0, q_start)
    travel = float(np.linalg.norm(world_from_tcp1[:3, 3] - world_from_tcp0[:3, 3]))
    rel = world_from_tcp0[:3, :3].T @ world_from_tcp1[:3, :3]
    angle = float(np.arccos(np.clip((np.trace(rel) - 1) / 2, -1.0, 1.0)))
    n = max(8, int(math.ceil(travel / LINEAR_STEP)), int(math.ceil(angle / LINEAR_ANGLE_STEP)))
    counter = [0]

    def poses(s):
        return _tcp_poses(cell, world_from_tcp0, world_from_tcp1, np.atleast_1d(np.asarray(s, dtype=np.float64)))

    def solve(s):
        s = np.atleast_1d(np.asarray(s, dtype=np.float64))
        counter[0] += len(s)
        return arm.ik(poses(s))

    def pick(sol, i, ref, codes=None):
        """Solution of pose ``i`` nearest ``ref`` (unwrapped) and its code, or (None, -1); only among
        ``codes`` if given."""
        ok = sol.valid[i]
        if codes is not None:
            ok = ok & np.isin(sol.code[i], list(codes))
        if not ok.any():
            return None, -1
        cand = _unwrap(np.where(ok[:, None], sol.q[i], 0.0), ref)
        k = int(np.argmin(np.where(ok, np.abs(cand - ref).max(axis=1), np.inf)))
        return cand[k], int(sol.code[i, k])

    if code < 0:
        return _LinearPath(None, 0.0, -1, -1, 0.0, np.nan, "", "the start configuration has no IK branch", np.nan,
                           "", 0)

    # 1. samples along the line, continuous
    grid = np.linspace(0.0, 1.0, n + 1)
    sol = solve(grid)
    S, Q, codes = [0.0], [q_start], [code]
    reason, singular = "", ""
    lost = None
    for i in range(1, len(grid)):
        qi, c = pick(sol, i, Q[-1])
        if qi is None:
            lost = float(grid[i])
            break
        S.append(float(grid[i]))
        Q.append(qi)
        codes.append(c)
    if lost is not None:  # locate where the line leaves the reachable space
        lo, hi = S[-1], lost
        while hi - lo > LOCATE_TOL:
            mid = 0.5 * (lo + hi)
            qm, c = pick(solve([mid]), 0, Q[-1])
            if qm is None:
                hi = mid
            else:
                lo = mid
                S.append(mid)
                Q.append(qm)
                codes.append(c)
        reason = f"the TCP line leaves the reachable space at path fraction {hi:.4f}"

    # 2. refine until the polyline follows the IK path (midpoint deviation) within path_tol; every
    #    pending segment's midpoint is solved in one batch per round
    deviation = 0.0
    jump_at = None
    pending = list(range(len(S) - 1))
    while pending and jump_at is None:
        mids = np.array([0.5 * (S[k] + S[k + 1]) for k in pending])
        sm = solve(mids)
        add, again = [], set()
        for n_, k in enumerate(pending):
            chord = 0.5 * (Q[k] + Q[k + 1])
            qm, c = pick(sm, n_, chord)
            if qm is None:  # a narrow gap in the reachable space between two samples
                jump_at = float(mids[n_])
                break
            dev = float(coef_max @ np.abs(qm - chord))
            if dev > path_tol:
                if S[k + 1] - S[k] < MIN_SEGMENT:
                    jump_at = float(mids[n_])
                    break
                again.add(n_)
            else:
                deviation = max(deviation, dev)
            add.append((float(mids[n_]), qm, c))
        if jump_at is not None:
            break
        pos = {k: n_ for n_, k in enumerate(pending)}
        nS, nQ, nC, nxt = [S[0]], [Q[0]], [codes[0]], []
        for k in range(len(S) - 1):
            if k in pos:
                m_s, m_q, m_c = add[pos[k]]
                nS.append(m_s)
                nQ.append(m_q)
                nC.append(m_c)
                if pos[k] in again:
                    nxt += [len(nS) - 2, len(nS) - 1]
            nS.append(S[k + 1])
            nQ.append(Q[k + 1])
            nC.append(codes[k + 1])
        S, Q, codes, pending = nS, nQ, nC, nxt
    if jump_at is not None:
        keep = [i for i, x in enumerate(S) if x < jump_at]
        S, Q, codes = [S[i] for i in keep], [Q[i] for i in keep], [codes[i] for i in keep]
        reason = (f"the joint path jumps at path fraction {jump_at:.4f} (no continuous IK path: the "
                  "line passes through a singular or unreachable pose)")
        singular = "unknown"

    # 3. label changes along the continuous path: a singularity crossed, or only the label convention
    notes = []
    k = 1
    cur = codes[0]
    while k < len(S):
        if codes[k] == cur:
            k += 1
            continue
        lo, hi, q_lo, q_hi, c_hi = S[k - 1], S[k], Q[k - 1], Q[k], codes[k]
        while hi - lo > SINGULAR_LOCATE:
            mid = 0.5 * (lo + hi)
            # between the two labels only: right at a wrist singularity the solver returns one
            # representative with an arbitrary split of theta4 / theta6, which must not pull in a far branch
            qm, c = pick(solve([mid]), 0, 0.5 * (q_lo + q_hi), codes=(cur, c_hi))
            if qm is None:
                break
            if c == cur:
                lo, q_lo = mid, qm
            else:
                hi, q_hi, c_hi = mid, qm, c
        flipped = int(cur) ^ int(c_hi)
        m_lo = _singular_measure(arm, poses(lo)[0], q_lo)
        m_hi = _singular_measure(arm, poses(hi)[0], q_hi)
        measure = np.fmin(m_lo, m_hi)  # [wrist sine, shoulder distance, elbow sine]
        crossed = [name for bit, name, m in ((4, "shoulder", measure[1]), (2, "elbow", measure[2]),
                                              (1, "wrist", measure[0])) if flipped & bit and m < SINGULAR_MEASURE]
        if crossed:
            singular = "+".join(crossed)
            reason = (f"the branch cannot be kept: a {singular} singularity is crossed at path fraction "
                      f"{hi:.4f} (the path continues as {BRANCH_LABELS[c_hi]})")
            keep = [i for i, x in enumerate(S) if x <= lo]
            S, Q, codes = [S[i] for i in keep], [Q[i] for i in keep], [codes[i] for i in keep]
            if S[-1] < lo:
                S.append(lo)
                Q.append(q_lo)
                codes.append(cur)
            cur = c_hi
            break
        notes.append(f"the branch label changes from {BRANCH_LABELS[cur]} to {BRANCH_LABELS[c_hi]} at path "
                     f"fraction {hi:.4f} without a singularity (label convention)")
        cur = c_hi
        k += 1
    end_code = cur
    if notes:
        reason = "; ".join([r for r in (reason,) if r] + notes)

    S, Q = np.array(S), np.array(Q).reshape(-1, 6)
    s_end = float(S[-1]) if (lost is not None or jump_at is not None or singular) else 1.0
    if len(S) < 2:
        return _LinearPath(None, s_end, code, end_code, deviation, np.nan, singular, reason, np.nan, "", counter[0])
    speed = (np.abs(np.diff(Q, axis=0)) / np.diff(S)[:, None]).max(axis=1)
    straight = float(np.abs(Q[-1] - Q[0]).max() / max(S[-1] - S[0], 1e-300))
    if speed.max() < 1e-9:
        peak = 1.0  # no joint moves (beyond rounding)
    elif straight > 1e-9:
        peak = float(speed.max() / straight)
    else:
        peak = float(speed.max() / max(speed[0], speed[-1], 1e-12))
    # joint limits along the polyline
    lo_l, hi_l = arm.limits[:, 0], arm.limits[:, 1]
    out = (Q < lo_l) | (Q > hi_l)
    limit_s, limit_note = np.nan, ""
    if out.any():
        k = int(np.flatnonzero(out.any(axis=1))[0])
        j = int(np.flatnonzero(out[k])[0])
        bound = hi_l[j] if Q[k, j] > hi_l[j] else lo_l[j]
        if k == 0:
            limit_s = float(S[0])
        else:
            t = (bound - Q[k - 1, j]) / (Q[k, j] - Q[k - 1, j])
            limit_s = float(S[k - 1] + np.clip(t, 0, 1) * (S[k] - S[k - 1]))
        worst = np.maximum(Q - hi_l, lo_l - Q).max(axis=0)
        jw = int(np.argmax(worst))
        limit_note = (f"joint {j + 1} leaves its range at path fraction {limit_s:.4f}; joint {jw + 1} is up to "
                      f"{np.degrees(worst[jw]):.3f} deg outside [{np.degrees(lo_l[jw]):.3f}, "
                      f"{np.degrees(hi_l[jw]):.3f}] deg")
    return _LinearPath(_Path(S, Q), s_end, code, end_code, deviation, peak, singular, reason, limit_s,
                       limit_note, counter[0])


# ================================================================================ one move
def _as_q(q, what):
    arr = np.asarray(q, dtype=np.float64)
    if arr.shape != (6,) or not np.isfinite(arr).all():
        raise InputError(f"{what} must be 6 finite joint values (rad), got shape {arr.shape}", item=what)
    return arr


def sweep_move(cell, q_start, end, *, motion: str = "joint", allowance: float | None = None, engine=None,
               tol: float = TOL, bound_tol: float = BOUND_TOL, bound_rel: float = BOUND_REL,
               path_tol: float = PATH_TOL, max_queries: int = MAX_QUERIES, program: str = "", move: int = 0,
               from_target: str = "",
               to_target: str = "", branch: str | None = None) -> MotionRow:
    """Sweep one move and certify its clearance.

    Parameters
    ----------
    cell : Cell
    q_start : (6,) float
        Start configuration (rad).
    end : (6,) or (4, 4) float
        Joint move: the end configuration ``q_end`` (rad). Linear move: the end TCP pose
        ``world_from_tcp`` (4, 4), or an end configuration whose TCP pose is used.
    motion : {"joint", "linear"}
    allowance : float, optional
        Stopping allowance (m) added to every zone pair's required clearance; the cell's by default.
    engine : ClearanceEngine, optional
        ``engine_for(cell)`` by default.
    tol, bound_tol, path_tol : float
        Metres: see ``TOL``, ``BOUND_TOL``, ``PATH_TOL``; ``bound_rel`` see ``BOUND_REL``.
    max_queries : int
        See ``MAX_QUERIES``.
    program, move, from_target, to_target, branch
        Copied into the row (``branch``: the start label, computed if not given).

    Returns
    -------
    MotionRow
    """
    t0 = time.perf_counter()
    if motion not in ("joint", "linear"):
        raise InputError(f"motion must be 'joint' or 'linear', got {motion!r}", item="motion")
    q_start = _as_q(q_start, "q_start")
    end = np.asarray(end, dtype=np.float64)
    allowance = float(cell.stopping_allowance if allowance is None else allowance)
    if not (np.isfinite(allowance) and allowance >= 0):
        raise InputError(f"stopping allowance must be >= 0 m, got {allowance}", item="allowance")
    engine = engine or engine_for(cell)
    arm = cell.arm
    C = pair_coefficients(engine)
    nan6 = np.full(6, np.nan)
    notes = []
    label_of = (lambda c: BRANCH_LABELS[c] if c >= 0 else "")
    start_label = branch if branch is not None else label_of(_code_of(arm, arm.fk(q_start), q_start))
    common = dict(program=program, move=move, from_target=from_target, to_target=to_target, motion=motion,
                  allowance=allowance, q_start=q_start)
    if motion == "joint":
        q_end = _as_q(end, "q_end")
        path = _Path(np.array([0.0, 1.0]), np.stack([q_start, q_end]))
        end_label = label_of(_code_of(arm, arm.fk(q_end), q_end))
        deviation, peak, singular, limit_s, s_end = 0.0, 1.0, "", np.nan, 1.0
        out_of_limits = not (arm.within_limits(q_start).all() and arm.within_limits(q_end).all())
        if out_of_limits:
            limit_s = 0.0 if not arm.within_limits(q_start).all() else 1.0
            notes.append("an end configuration is outside the joint limits")
        ik_samples = 0
    else:
        if end.shape == (6,):
            q_goal = _as_q(end, "q_end")
            world_from_tcp_end = cell.world_from_base @ arm.fk(q_goal) @ cell.tool.flange_from_tcp
        else:
            from .poses import validate_pose

            world_from_tcp_end = validate_pose(end, item="end pose")
            if world_from_tcp_end.shape != (4, 4):
                raise InputError(f"a linear move's end must be (6,) or (4, 4), got {end.shape}", item="end")
            q_goal = None
        lin = linear_path(cell, q_start, world_from_tcp_end, C.max(axis=0), path_tol=path_tol)
        path, deviation, peak, singular = lin.path, lin.deviation, lin.peak_speed_ratio, lin.singular
        limit_s, s_end, ik_samples = lin.limit_violation, lin.s_end, lin.ik_samples
        start_label = branch if branch is not None else label_of(lin.code)
        end_label = label_of(lin.end_code)
        q_end = path.q[-1].copy() if path is not None and s_end >= 1.0 else nan6
        if q_goal is not None and np.isfinite(q_end).all() and np.abs(_unwrap(q_goal, q_end) - q_end).max() > 1e-6:
            notes.append("the line ends in another configuration than the given end (same pose)")
        if lin.reason:
            notes.append(lin.reason)
        if lin.limit_note:
            notes.append(lin.limit_note)
        out_of_limits = bool(np.isfinite(limit_s))

    if path is None:
        return MotionRow(**common, branch=start_label, end_branch=end_label, status=UNREACHABLE,
                         min_clearance=np.nan, required=np.nan, gap=np.nan, where=np.nan, q_at_min=nan6,
                         closest_body="",
                         closest_other="", first_violation=np.nan, limit_violation=limit_s, peak_speed_ratio=peak,
                         singular_crossed=singular, queries=0, ik_samples=ik_samples, path_deviation=deviation,
                         max_displacement=0.0, uniform_samples=0, q_end=nan6, seconds=time.perf_counter() - t0,
                         note="; ".join(notes))
    # the followed part of a linear move is swept in its own fraction, mapped back to the move's
    scale = float(path.s[-1])
    unit = _Path(path.s / scale, path.q)
    required = _required(engine, allowance, deviation)
    res = _certified_sweep(engine, unit, required, tol=tol, bound_tol=bound_tol, bound_rel=bound_rel,
                           max_queries=max_queries)
    if res.capped:
        notes.append(f"query budget of {max_queries} reached: the rest was swept with {FREE_STEP * 1e3:g} mm steps")
    cum = _Cumulative(unit, C)
    active = ~engine.allowed
    max_disp = float(cum.total[active].max()) if active.any() else 0.0
    uniform = int(math.ceil(max_disp / UNIFORM_SPACING)) + 1
    if res.pair >= 0:
        p = engine.pairs[res.pair]
        min_clear = res.lb + float(required[res.pair])
        req = float(required[res.pair])
        body, other = p.body, pair_other_name(p)
        where = res.where * scale
        q_at_min = unit.at(res.where)[0]
        Mg = np.where(active, res.d - required, np.inf)
        worst = np.argmin(Mg, axis=1)
        rows = np.arange(len(res.s))
        profile = Profile(res.s * scale, res.d[rows, worst], required[worst])
    else:
        min_clear = req = where = np.nan
        body = other = ""
        q_at_min = nan6
        profile = Profile(res.s * scale, np.full(len(res.s), np.nan), np.full(len(res.s), np.nan))
        notes.append("no pair to check")
    first_violation = res.first_violation * scale if np.isfinite(res.first_violation) else np.nan
    if res.contact:
        status = INTRUSION
    elif np.isfinite(first_violation):
        status = BELOW_MARGIN
    elif out_of_limits:
        status = OUTSIDE_LIMITS
    elif s_end < 1.0:
        status = UNREACHABLE
    else:
        status = CLEAR
    if s_end < 1.0 and status != UNREACHABLE:
        notes.append(f"swept up to path fraction {s_end:.4f} only")
    return MotionRow(**common, branch=start_label, end_branch=end_label, status=status, min_clearance=float(min_clear),
                     required=req, gap=float(res.sampled - res.lb) if res.pair >= 0 else np.nan,
                     where=float(where), q_at_min=q_at_min, closest_body=body, closest_other=other,
                     first_violation=float(first_violation), limit_violation=float(limit_s),
                     peak_speed_ratio=float(peak), singular_crossed=singular, queries=int(res.queries),
                     ik_samples=int(ik_samples), path_deviation=float(deviation), max_displacement=max_disp,
                     uniform_samples=uniform, q_end=q_end, profile=profile, seconds=time.perf_counter() - t0,
                     note="; ".join(notes))


# ================================================================================ programs
def validate_program(cell, program) -> None:
    """Raise ``ProgramError`` naming the program and move for an unknown target, branch label or
    motion, a bad stopping allowance, or an empty program."""
    names = [t.name for t in cell.targets]
    file = cell.source or None
    pname = getattr(program, "name", "?")
    item = f'program "{pname}"'
    moves = tuple(getattr(program, "moves", ()))
    if not moves:
        raise ProgramError("a program needs at least one move", file=file, item=item)
    for m, mv in enumerate(moves, start=1):
        where = f"{item} move {m}"
        to = getattr(mv, "to", None)
        if to not in names:
            raise ProgramError(f"unknown target {to!r}{suggest(to, names)}; expected one of the cell's targets",
                               file=file, item=where)
        motion = getattr(mv, "motion", None)
        if motion not in ("joint", "linear"):
            raise ProgramError(f"motion must be 'joint' or 'linear', got {motion!r}", file=file, item=where)
        label = getattr(mv, "branch", None)
        if label is not None and label not in BRANCH_LABELS:
            raise ProgramError(f"unknown branch label {label!r}{suggest(label, BRANCH_LABELS)}; expected one of "
                               f"{', '.join(BRANCH_LABELS)}", file=file, item=where)
        a = getattr(mv, "stopping_allowance", None)
        if a is not None and not (isinstance(a, (int, float)) and np.isfinite(a) and a >= 0):
            raise ProgramError(f"stopping_allowance must be a number >= 0 (m), got {a!r}", file=file, item=where)


def _programs(cell, program):
    progs = tuple(cell.programs)
    if program is None:
        return progs
    if isinstance(program, str):
        for p in progs:
            if p.name == program:
                return (p,)
        known = [p.name for p in progs]
        raise ProgramError(f"unknown program {program!r}{suggest(program, known)}; programs: "
                           f"{', '.join(known) or 'none'}", file=cell.source or None, item="program")
    return (program,)


def _row_not_run(program, m, mv, frm, label, why, q_start=None):
    nan6 = np.full(6, np.nan)
    return MotionRow(program=program, move=m, from_target=frm, to_target=mv.to, motion=mv.motion, branch=label,
                     end_branch="", status=UNREACHABLE, min_clearance=np.nan, required=np.nan, gap=np.nan,
                     allowance=np.nan,
                     where=np.nan, q_at_min=nan6, closest_body="", closest_other="", first_violation=np.nan,
                     limit_violation=np.nan, peak_speed_ratio=np.nan, singular_crossed="", queries=0, ik_samples=0,
                     path_deviation=0.0, max_displacement=0.0, uniform_samples=0,
                     q_start=nan6 if q_start is None else q_start, q_end=nan6, note=why)


def swept_configurations(cell, motions, *, max_step: float = 0.01) -> tuple:
    """Configurations along every swept move, dense enough to stand for the whole motion.

    Parameters
    ----------
    motions : iterable of MotionRow
    max_step : float
        m: the largest point motion between consecutive samples, by the displacement bound
        (``displacement_bounds``: no point of any body moves more than ``sum_j r_j |dq_j|``).

    Returns
    -------
    q : (m, 6) float
        Joint values (rad) along the joint polylines of the moves (a joint move is one segment; a
        linear move the IK polyline that the sweep follows).
    grow : float
        m: every body position along the moves lies within ``grow`` of the bodies posed at ``q``:
        half a step, plus the largest linear-move path deviation bound.
    """
    coef = displacement_bounds(cell.arm, cell.bodies).max(axis=0)
    pieces, grow = [], 0.5 * max_step
    for m in motions:
        if not (np.isfinite(m.q_start).all() and np.isfinite(m.q_end).all()):
            continue  # not run
        if m.motion == "joint":
            knots = np.stack([m.q_start, m.q_end])
        else:
            lin = linear_path(cell, m.q_start, cell.target(m.to_target).world_from_tcp, coef)
            if lin.path is None:
                continue
            knots = lin.path.q
            grow = max(grow, 0.5 * max_step + float(lin.deviation))
        for a, b in zip(knots[:-1], knots[1:]):
            n = max(1, int(math.ceil(float(coef @ np.abs(b - a)) / max_step)))
            pieces.append(a + np.linspace(0.0, 1.0, n + 1)[:, None] * (b - a))
    q = np.concatenate(pieces) if pieces else np.zeros((0, 6))
    return q, grow


def run_sweep(cell, program=None, *, engine=None, tol: float = TOL, bound_tol: float = BOUND_TOL,
              bound_rel: float = BOUND_REL, path_tol: float = PATH_TOL) -> tuple:
    """Sweep every program of ``cell`` (or the one named, or a ``Program`` object) in every valid start
    branch.

    The first move places the arm: its target's branches that exist and are within limits (the one
    named by the move, if it names one) are the start branches. Each later move is one ``MotionRow``
    per start branch; a joint move keeps the branch label unless it names another and goes to the
    nearest within-limits turn variant of it; a linear move must keep its branch along the line.
    When a move cannot end (no such branch at its target, or the line cannot be followed), the later
    moves of that start branch are rows with status ``unreachable`` ("not run").

    Raises
    ------
    ProgramError
        Unknown program, target, branch label or motion.
    """
    engine = engine or engine_for(cell)
    progs = _programs(cell, program)
    for p in progs:
        validate_program(cell, p)
    targets = {t.name: t for t in cell.targets}
    ik_cache = {}

    def solutions(name):
        if name not in ik_cache:
            ik_cache[name] = cell.arm.ik(cell.base_from_flange(targets[name].world_from_tcp))
        return ik_cache[name]

    rows = []
    for prog in progs:
        moves = tuple(prog.moves)
        first = moves[0]
        sol = solutions(first.to)
        starts = [k for k in range(len(sol)) if sol.twin[k] == k and sol.within_limits[k].all()
                  and (first.branch is None or sol.labels[k] == first.branch)]
        if not starts:
            why = (f"no start branch: target {first.to!r} has no "
                   + (f"{first.branch} branch " if first.branch else "branch ") + "within the joint limits")
            for m, mv in enumerate(moves[1:], start=2):
                rows.append(_row_not_run(prog.name, m, mv, moves[m - 2].to, first.branch or "", why))
            continue
        for k0 in starts:
            q, label, stopped = sol.q[k0].copy(), sol.labels[k0], ""
            for m, mv in enumerate(moves[1:], start=2):
                frm = moves[m - 2].to
                if stopped:
                    rows.append(_row_not_run(prog.name, m, mv, frm, label, stopped))
                    continue
                allowance = cell.stopping_allowance if mv.stopping_allowance is None else mv.stopping_allowance
                want = mv.branch or label
                if mv.motion == "linear":
                    if want != label:
                        rows.append(_row_not_run(prog.name, m, mv, frm, label,
                                                 f"a linear move cannot change branch ({label} to {want})", q))
                        stopped = f"not run: move {m} could not be run"
                        continue
                    row = sweep_move(cell, q, targets[mv.to].world_from_tcp, motion="linear", allowance=allowance,
                                     engine=engine, tol=tol, bound_tol=bound_tol, bound_rel=bound_rel,
                                     path_tol=path_tol,
                                     program=prog.name, move=m, from_target=frm, to_target=mv.to, branch=label)
                    rows.append(row)
                    if not np.isfinite(row.q_end).all():
                        stopped = f"not run: move {m} did not reach its target"
                    elif np.isfinite(row.limit_violation):
                        stopped = f"not run: move {m} leaves the joint limits"
                    else:
                        q, label = row.q_end, row.end_branch
                    continue
                tsol = solutions(mv.to)
                cand = [k for k in range(len(tsol)) if tsol.labels[k] == want]
                inside = [k for k in cand if tsol.within_limits[k].all()]
                if not cand:
                    rows.append(_row_not_run(prog.name, m, mv, frm, label,
                                             f"target {mv.to!r} has no {want} branch"
                                             + (f" ({tsol.reason})" if tsol.reason else ""), q))
                    stopped = f"not run: move {m} did not reach its target"
                    continue
                pool = inside or cand
                k = min(pool, key=lambda i: (np.abs(tsol.q[i] - q).max(), np.abs(tsol.q[i] - q).sum()))
                row = sweep_move(cell, q, tsol.q[k], motion="joint", allowance=allowance, engine=engine, tol=tol,
                                 bound_tol=bound_tol, bound_rel=bound_rel, path_tol=path_tol, program=prog.name,
                                 move=m, from_target=frm,
                                 to_target=mv.to, branch=label)
                rows.append(row)
                if not inside:
                    stopped = f"not run: move {m} ends outside the joint limits"
                else:
                    q, label = tsol.q[k].copy(), want
    return tuple(rows)


__all__ = [
    "MotionRow", "Profile", "STATUS_ORDER", "displacement_bounds", "pair_coefficients", "sweep_move",
    "run_sweep", "validate_program", "linear_path",
]
