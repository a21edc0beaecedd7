"""Inverse kinematics results and the two entry points behind ``Arm.ik``.

``Arm.ik(base_from_flange)`` with one ``(4, 4)`` pose returns ``IKSolutions`` (every distinct solution,
turn variants included); with ``(..., 4, 4)`` poses it returns ``IKBatch`` (fixed slots, no Python
loop per pose). Arms with a spherical wrist are solved in closed form (``pieper.py``), others
numerically from many starts (``numeric.py``).
"""

from __future__ import annotations

from dataclasses import dataclass
import numpy as np

from ..errors import InputError
from ..poses import validate_pose
from . import numeric, pieper
from .branches import BRANCH_LABELS, SINGULAR_TOLS, place_in_limits, turn_counts

N_SLOTS = 8
CHUNK = 2048
"""Poses per vectorised pass in ``ik_batch``."""


@dataclass(frozen=True, eq=False)
class IKSolutions:
    """Every inverse-kinematics solution of one ``base_from_flange`` pose.

    Rows are solutions: first the distinct branches (in solver order), then their turn variants.

    Attributes
    ----------
    q : (k, 6) float64
        Joint values (rad). Each angle is the equivalent (multiple of 2 pi) inside its joint's range
        with the smallest magnitude; if no equivalent is inside, it is wrapped to [-pi, pi] and flagged
        in ``within_limits``/``excess``. Such rows stay in the result.
    labels : tuple of k str
        Branch label per row, e.g. ``"front-up-pos"`` (see ``branches.py``, docs/conventions.md).
    code : (k,) int8
        Branch code, ``BRANCH_LABELS[code] == label``.
    within_limits : (k, 6) bool
    excess : (k, 6) float64
        Radians outside the range per joint (0 inside).
    singular_wrist, singular_shoulder, singular_elbow : (k,) bool
        At a singularity (tolerances in ``branches.py``). At a wrist singularity only theta4 + theta6
        is fixed and one representative is returned.
    singular_measure : (k, 3) float64
        [|det[z4 z5 z6]| (wrist), distance of the wrist centre from axis 1 (m), elbow sine].
    twin : (k,) int
        Row of the representative: ``twin[i] == i`` for a branch, else the branch this row is a turn
        variant of (same geometry: same link poses, only a joint turned by whole turns).
    method : str
        ``"closed-form"`` or ``"numeric"``.
    complete : bool
        True if the list is proven complete (closed form); False for the numerical solver.
    starts : int
        Start configurations used by the numerical solver (0 for closed form).
    reachable : bool
        At least one row lies within all joint limits.
    reason : str
        Why the pose is not reachable ("" if it is).
    wrist_centre : (3,) float64
        Wrist centre of the target in the base frame (m); for a non-spherical wrist ``nan``.
    """

    q: np.ndarray
    labels: tuple
    code: np.ndarray
    within_limits: np.ndarray
    excess: np.ndarray
    singular_wrist: np.ndarray
    singular_shoulder: np.ndarray
    singular_elbow: np.ndarray
    singular_measure: np.ndarray
    twin: np.ndarray
    method: str
    complete: bool
    starts: int
    reachable: bool
    reason: str
    wrist_centre: np.ndarray

    def __len__(self) -> int:
        return int(self.q.shape[0])

    @property
    def all_within_limits(self) -> np.ndarray:
        """``(k,)`` bool: every joint of the row inside its range."""
        return self.within_limits.all(axis=-1)

    @property
    def is_representative(self) -> np.ndarray:
        """``(k,)`` bool: the row is a branch, not a turn variant."""
        return self.twin == np.arange(len(self))


@dataclass(frozen=True, eq=False)
class IKBatch:
    """Inverse kinematics of a batch of poses ``(..., 4, 4)``, in fixed slots.

    Attributes
    ----------
    q : (..., 8, 6) float64
        Joint values (rad) placed in the limits as in ``IKSolutions.q``; ``nan`` in empty slots.
    valid : (..., 8) bool
        The slot holds a solution. A slot is a solver branch, not a label: read ``code``.
    within_limits : (..., 8, 6) bool
    excess : (..., 8, 6) float64
    code : (..., 8) int8
        Branch code (``BRANCH_LABELS[code]``); -1 in empty slots.
    singular_wrist, singular_shoulder, singular_elbow : (..., 8) bool
    reachable : (..., ) bool
        Some valid slot lies within all joint limits.
    method, complete, starts
        As in ``IKSolutions``. Turn variants are not enumerated here (``IKSolutions`` does it). The
        numerical solver keeps at most 8 distinct solutions per pose here (a 6R arm can have 16).
    """

    q: np.ndarray
    valid: np.ndarray
    within_limits: np.ndarray
    excess: np.ndarray
    code: np.ndarray
    singular_wrist: np.ndarray
    singular_shoulder: np.ndarray
    singular_elbow: np.ndarray
    reachable: np.ndarray
    method: str
    complete: bool
    starts: int

    @property
    def labels(self) -> np.ndarray:
        """``(..., 8)`` str array of branch labels ("" in empty slots)."""
        table = np.array(BRANCH_LABELS + ("",))
        return table[np.where(self.code >= 0, self.code, len(BRANCH_LABELS))]


NUMERIC_CHUNK = 64
"""Poses per pass of the numerical solver in ``ik_each`` (bounds its (poses, starts, starts) temporaries)."""
VARIANT_CHUNK = 4096
"""Branch rows per pass of the vectorised turn-variant enumeration."""


def _raw(arm, flat: np.ndarray, n_starts: int, slots: int | None):
    """``(q, valid, code, measure, method, complete, starts, extra)`` for ``(n, 4, 4)`` poses."""
    if arm.spherical_wrist:
        raw = pieper.solve(arm._pieper, flat)
        return raw.q, raw.valid, raw.code, raw.measure, "closed-form", True, 0, raw
    q, ok, code, measure = numeric.solve(arm.chain, arm.offset, flat, n_starts=n_starts, slots=slots)
    return q, ok, code, measure, "numeric", False, n_starts, None


def ik_batch(arm, base_from_flange, *, n_starts: int = 32) -> IKBatch:
    """Batch form of ``Arm.ik`` for ``(..., 4, 4)`` poses (see ``IKBatch``)."""
    T = validate_pose(base_from_flange, item="base_from_flange")
    if T.ndim < 3:
        raise InputError(f"ik_batch expects poses of shape (n, 4, 4), got {T.shape}", item="base_from_flange")
    shape = T.shape[:-2]
    flat = np.ascontiguousarray(T.reshape(-1, 4, 4))
    n = len(flat)
    # every chunk fills its rows of these completely
    q = np.empty((n, N_SLOTS, 6))
    valid = np.empty((n, N_SLOTS), bool)
    within = np.empty((n, N_SLOTS, 6), bool)
    excess = np.empty((n, N_SLOTS, 6))
    code = np.empty((n, N_SLOTS), np.int8)
    sing = np.empty((n, N_SLOTS, 3), bool)
    method, complete, starts = ("closed-form", True, 0) if arm.spherical_wrist else ("numeric", False, n_starts)
    # chunks of poses keep the temporaries in cache (about 2x faster than one pass for 1e5 poses)
    for i in range(0, n, CHUNK):
        sl = slice(i, i + CHUNK)
        qc, vc, cc, mc = _raw(arm, flat[sl], n_starts, N_SLOTS)[:4]
        pc, wc, ec = place_in_limits(qc, arm.limits)
        v3 = vc[..., None]
        q[sl] = np.where(v3, pc, np.nan)
        valid[sl] = vc
        within[sl] = wc & v3
        excess[sl] = np.where(v3, ec, 0.0)
        code[sl] = np.where(vc, cc, -1)
        sing[sl] = (mc < SINGULAR_TOLS) & v3
    reach = (valid & within.all(-1)).any(-1)
    r = lambda a: a.reshape(shape + a.shape[1:])  # noqa: E731
    return IKBatch(
        q=r(q), valid=r(valid), within_limits=r(within), excess=r(excess), code=r(code),
        singular_wrist=r(sing[..., 0]), singular_shoulder=r(sing[..., 1]), singular_elbow=r(sing[..., 2]),
        reachable=r(reach), method=method, complete=complete, starts=starts,
    )


def ik_single(arm, base_from_flange, *, n_starts: int = numeric.DEFAULT_STARTS) -> IKSolutions:
    """Single-pose form of ``Arm.ik`` (see ``IKSolutions``)."""
    T = validate_pose(base_from_flange, item="base_from_flange")
    if T.shape != (4, 4):
        raise InputError(f"ik_single expects one (4, 4) pose, got {T.shape}", item="base_from_flange")
    return _solutions(arm, T[None], n_starts)[0]


def ik_each(arm, base_from_flange, *, n_starts: int = numeric.DEFAULT_STARTS) -> list:
    """``IKSolutions`` of every pose of a ``(n, 4, 4)`` batch, equal to ``[ik_single(arm, T) for T in ...]``.

    One vectorised solve for all poses, vectorised limit placement and turn-variant enumeration, then
    a cheap per-pose assembly (slices of shared arrays); only the ``reason`` of an unreachable pose is
    worked out per pose.
    """
    T = validate_pose(base_from_flange, item="base_from_flange")
    if T.ndim != 3:
        raise InputError(f"ik_each expects poses of shape (n, 4, 4), got {T.shape}", item="base_from_flange")
    return _solutions(arm, np.ascontiguousarray(T), n_starts)


def _raw_all(arm, flat: np.ndarray, n_starts: int):
    """Solver output for ``(n, 4, 4)`` poses in chunks: ``q (n, k, 6)``, ``valid (n, k)``, ``code (n, k)``,
    ``measure (n, k, 3)``, ``wrist_centre (n, 3)``, ``arm_found (n,)`` (closed form only, else None)."""
    n = len(flat)
    step = CHUNK if arm.spherical_wrist else NUMERIC_CHUNK
    parts = []
    for i in range(0, n, step):
        q, valid, code, measure, _, _, _, raw = _raw(arm, flat[i : i + step], n_starts, None)
        extra = (raw.wrist_centre, raw.arm_found) if raw is not None else (None, None)
        parts.append((q, valid, code, measure) + extra)
    if len(parts) == 1:
        return parts[0]
    cat = lambda k: None if parts[0][k] is None else np.concatenate([p[k] for p in parts])  # noqa: E731
    return tuple(cat(k) for k in range(6))


def turn_variants(q_rows: np.ndarray, ok: np.ndarray, limits: np.ndarray):
    """Every turn variant of the rows ``ok`` of ``q_rows`` ``(r, 6)`` (placed in the limits).

    A variant adds whole turns ``2 pi m`` (``m != 0``) to joints whose range holds more than one
    equivalent angle. Returns the source row of each variant ``(v,)`` and the turn counts ``(v, 6)``
    float, ordered by source row, then as ``itertools.product`` over the joints' counts (joint 1 slowest).
    """
    rows = np.flatnonzero(ok)
    empty = np.empty(0, np.int64), np.empty((0, 6))
    if rows.size == 0:
        return empty
    m_lo, m_hi = turn_counts(q_rows[rows], limits)
    active = np.flatnonzero((m_lo != 0).any(0) | (m_hi != 0).any(0))
    if active.size == 0:
        return empty
    ranges = [np.arange(m_lo[:, j].min(), m_hi[:, j].max() + 1) for j in active]
    grid = np.stack(np.meshgrid(*ranges, indexing="ij"), -1).reshape(-1, active.size)  # first joint slowest
    grid = grid[(grid != 0).any(-1)]
    lo, hi = m_lo[:, active], m_hi[:, active]
    src, counts = [], []
    step = max(1, VARIANT_CHUNK * 64 // max(len(grid), 1))
    for i in range(0, len(rows), step):
        sl = slice(i, i + step)
        fits = ((grid >= lo[sl, None]) & (grid <= hi[sl, None])).all(-1)
        r, c = np.nonzero(fits)
        src.append(rows[sl][r])
        counts.append(grid[c])
    m = np.zeros((sum(len(s) for s in src), 6))
    m[:, active] = np.concatenate(counts)
    return np.concatenate(src), m


def _solutions(arm, flat: np.ndarray, n_starts: int) -> list:
    """``IKSolutions`` per pose of validated ``(n, 4, 4)`` poses."""
    n = len(flat)
    if n == 0:
        return []
    q, valid, code, measure, wc, arm_found = _raw_all(arm, flat, n_starts)
    closed = arm.spherical_wrist
    method, complete, starts = ("closed-form", True, 0) if closed else ("numeric", False, n_starts)
    placed, within, excess = place_in_limits(q, arm.limits)
    # branch rows, by pose then slot
    pb, sb = np.nonzero(valid)
    nb = np.count_nonzero(valid, axis=1)
    rank = (np.cumsum(valid, axis=1) - 1)[pb, sb]  # row of the branch in its pose's result
    bq, bw, be, bc, bm = placed[pb, sb], within[pb, sb], excess[pb, sb], code[pb, sb], measure[pb, sb]
    b_in = bw.all(-1)
    # turn variants of the in-limit branches
    vsrc, vm = turn_variants(bq, b_in, arm.limits)
    vq = bq[vsrc] + 2 * np.pi * vm
    pv = pb[vsrc]
    nv = np.bincount(pv, minlength=n)
    # per pose: its branches, then its variants
    start = np.zeros(n + 1, np.int64)
    np.cumsum(nb + nv, out=start[1:])
    v_first = np.zeros(n, np.int64)
    np.cumsum(nv[:-1], out=v_first[1:])
    pos_b = start[pb] + rank
    pos_v = start[pv] + nb[pv] + (np.arange(len(pv)) - v_first[pv])
    total = int(start[-1])
    Q = np.empty((total, 6))
    Q[pos_b], Q[pos_v] = bq, vq
    W = np.ones((total, 6), bool)  # turn variants lie inside the limits by construction
    W[pos_b] = bw
    E = np.zeros((total, 6))
    E[pos_b] = be
    C = np.empty(total, np.int8)
    C[pos_b], C[pos_v] = bc, bc[vsrc]
    M = np.empty((total, 3))
    M[pos_b], M[pos_v] = bm, bm[vsrc]
    TW = np.empty(total, np.int64)
    TW[pos_b], TW[pos_v] = rank, rank[vsrc]
    S = M < SINGULAR_TOLS
    S_w, S_s, S_e = S[:, 0], S[:, 1], S[:, 2]
    labels = [BRANCH_LABELS[c] for c in C.tolist()]
    reach = (np.bincount(pb, weights=b_in, minlength=n) > 0).tolist()
    bounds, nbl = start.tolist(), nb.tolist()
    wcs = wc if closed else np.full((n, 3), np.nan)
    # the nearest reachable wrist centre, for the poses with no position solution, in one call
    gaps = {}
    if closed:
        far = np.flatnonzero(~np.array(reach) & (nb == 0) & ~arm_found)
        if far.size:
            g, beyond = wrist_centre_gaps(arm, wcs[far])
            gaps = dict(zip(far.tolist(), zip(g.tolist(), beyond.tolist())))
    out = []
    for p in range(n):
        s, e = bounds[p], bounds[p + 1]
        reason = ""
        if not reach[p]:
            b = slice(s, s + nbl[p])
            found = bool(arm_found[p]) if closed else False
            reason = _reason(arm, gaps.get(p), found, nbl[p], Q[b], E[b], C[b], method, starts)
        out.append(IKSolutions(
            q=Q[s:e], labels=tuple(labels[s:e]), code=C[s:e], within_limits=W[s:e], excess=E[s:e],
            singular_wrist=S_w[s:e], singular_shoulder=S_s[s:e], singular_elbow=S_e[s:e],
            singular_measure=M[s:e], twin=TW[s:e], method=method, complete=complete, starts=starts,
            reachable=reach[p], reason=reason, wrist_centre=wcs[p],
        ))
    return out


def _reason(arm, gap_beyond, arm_found, k, placed, excess, code, method, starts) -> str:
    if k > 0:
        worst = excess.max(-1)
        i = int(np.argmin(worst))
        j = int(np.argmax(excess[i]))
        return (
            f"every branch is outside the joint limits; closest: {BRANCH_LABELS[code[i]]} with joint {j + 1} at "
            f"{np.degrees(placed[i, j]):.3f} deg, {np.degrees(excess[i, j]):.3f} deg outside "
            f"[{np.degrees(arm.limits[j, 0]):.3f}, {np.degrees(arm.limits[j, 1]):.3f}] deg"
        )
    if method == "numeric":
        return f"no solution found from {starts} starts (the numerical search is not guaranteed complete)"
    if arm_found:
        return "the wrist cannot reach the orientation: axis 6 cannot take the required direction"
    gap, beyond = gap_beyond
    if beyond:
        return f"wrist centre beyond reach by {gap * 1e3:.3f} mm"
    return f"wrist centre inside the inner unreachable region, {gap * 1e3:.3f} mm from the reachable region"


def wrist_centre_of(arm, theta123: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Wrist centre and the axis-2 point ``o_2`` for DH angles of joints 1-3 ``(..., 3)``."""
    from .chain import Frame

    ch = arm.chain
    f = Frame.identity(theta123.shape[:-1]).link(ch.d[0], ch.a[0], ch.alpha[0])
    f.rz(np.cos(theta123[..., 0]), np.sin(theta123[..., 0])).link(ch.d[1], ch.a[1], ch.alpha[1])
    o2 = f.p
    for k in (1, 2):
        f.rz(np.cos(theta123[..., k]), np.sin(theta123[..., k])).link(ch.d[k + 1], ch.a[k + 1], ch.alpha[k + 1])
    return f.p + ch.d[4] * f.z, o2


GAP_GRID = 36
"""Grid steps per joint (joints 1-3) for the start points of the nearest-reachable-wrist-centre search."""
GAP_STARTS = 5
GAP_ITERATIONS = 200
GAP_CHUNK = 16
"""Wrist centres per pass of the grid search (bounds its (chunk, GAP_GRID ** 3) temporaries)."""


def _wrist_centre_grid(arm) -> tuple[np.ndarray, np.ndarray]:
    """Joint grid ``(m, 3)`` and its wrist centres ``(3, m)`` (one contiguous row per coordinate), cached."""
    if "wc_grid" not in arm._cache:
        g = np.linspace(-np.pi, np.pi, GAP_GRID + 1)[:-1]
        grid = np.stack(np.meshgrid(g, g, g, indexing="ij"), -1).reshape(-1, 3)
        pts, _ = wrist_centre_of(arm, grid)
        arm._cache["wc_grid"] = (grid, np.ascontiguousarray(pts.T))
    return arm._cache["wc_grid"]


def _wrist_centre_derivatives(arm, t: np.ndarray):
    """Wrist centre ``w`` ``(..., 3)``, ``o_2``, ``J = d w / d theta_1..3`` ``(..., 3, 3)`` (columns) and the
    second derivatives ``(..., 3, 3, 3)`` for DH angles ``(..., 3)``.

    Column k of J is ``z_k x (w - o_k)``; ``d^2 w / d theta_j d theta_k = z_min(j,k) x J_max(j,k)`` (a
    revolute chain: joint j turns everything distal to it).
    """
    from .chain import Frame

    ch = arm.chain
    f = Frame.identity(t.shape[:-1]).link(ch.d[0], ch.a[0], ch.alpha[0])
    pts, axes = [], []
    for k in range(3):
        pts.append(f.p)
        axes.append(np.broadcast_to(f.z, t.shape[:-1] + (3,)))
        f.rz(np.cos(t[..., k]), np.sin(t[..., k])).link(ch.d[k + 1], ch.a[k + 1], ch.alpha[k + 1])
    w = f.p + ch.d[4] * f.z
    cols = [np.cross(z, w - o) for z, o in zip(axes, pts)]
    H = np.empty(t.shape[:-1] + (3, 3, 3))
    for j in range(3):
        for k in range(j, 3):
            H[..., j, k, :] = H[..., k, j, :] = np.cross(axes[j], cols[k])
    return w, pts[1], np.stack(cols, -1), np.moveaxis(H, -1, -3)


def wrist_centre_gaps(arm, wc: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """``(m,)`` distances (m) from wrist centres ``wc`` ``(m, 3)`` to the nearest reachable wrist centre,
    and ``(m,)`` bool: beyond reach (see ``wrist_centre_gap``).

    The nearest point is found from the 5 nearest points of a 36^3 grid over joints 1-3, refined by
    damped Newton steps on ``|w(theta) - wc|^2`` with its exact gradient and Hessian (the nearest point
    of an unreachable centre is a stretched or folded arm, where Gauss-Newton alone converges slowly).
    Row by row, so a centre's result does not depend on the others in the call.
    """
    wc = np.asarray(wc, dtype=np.float64).reshape(-1, 3)
    m = len(wc)
    grid, pts = _wrist_centre_grid(arm)
    starts = np.empty((m, GAP_STARTS, 3))
    for i in range(0, m, GAP_CHUNK):
        c = wc[i : i + GAP_CHUNK]
        d2 = (pts[0] - c[:, 0:1]) ** 2 + (pts[1] - c[:, 1:2]) ** 2 + (pts[2] - c[:, 2:3]) ** 2
        near = np.argpartition(d2, GAP_STARTS, axis=1)[:, :GAP_STARTS]
        near = np.take_along_axis(near, np.argsort(np.take_along_axis(d2, near, 1), axis=1, kind="stable"), 1)
        starts[i : i + GAP_CHUNK] = grid[near]
    t = starts.reshape(-1, 3)
    target = np.repeat(wc, GAP_STARTS, axis=0)

    def model(tt, tgt):
        w, _, J, H2 = _wrist_centre_derivatives(arm, tt)
        r = w - tgt
        g = np.einsum("nij,ni->nj", J, r)
        H = np.einsum("nij,nik->njk", J, J) + np.einsum("ni,nijk->njk", r, H2)
        return np.einsum("ni,ni->n", r, r), g, H

    cost, g, H = model(t, target)
    lam = np.full(len(t), 1e-9)
    act = np.arange(len(t))
    for _ in range(GAP_ITERATIONS):
        if act.size == 0:
            break
        # saddle-free: the Hessian's eigenvalues taken by magnitude, plus Levenberg-Marquardt damping
        ev, V = np.linalg.eigh(H[act])
        ev = np.abs(ev) + lam[act, None] * (1.0 + np.abs(ev).max(-1))[:, None]
        step = -np.einsum("nij,nj->ni", V, np.einsum("nji,nj->ni", V, g[act]) / ev)
        tn = t[act] + step
        cn, gn, Hn = model(tn, target[act])
        better = cn < cost[act]
        idx = act[better]
        t[idx], cost[idx], g[idx], H[idx] = tn[better], cn[better], gn[better], Hn[better]
        lam[act] = np.where(better, np.maximum(lam[act] * 0.1, 1e-15), lam[act] * 10.0)
        small = np.abs(step).max(-1) < 1e-13
        act = act[~(small | (lam[act] > 1e6))]
    cost = cost.reshape(m, GAP_STARTS)
    best = np.argmin(cost, axis=1)
    t_best = t.reshape(m, GAP_STARTS, 3)[np.arange(m), best]
    w_star, o2, _, _ = _wrist_centre_derivatives(arm, t_best)
    gap = np.sqrt(np.einsum("ij,ij->i", w_star - wc, w_star - wc))
    beyond = np.linalg.norm(wc - o2, axis=-1) > np.linalg.norm(w_star - o2, axis=-1)
    return gap, beyond


def wrist_centre_gap(arm, wc: np.ndarray) -> tuple[float, bool]:
    """Distance (m) from ``wc`` to the nearest reachable wrist centre, and whether it lies beyond reach.

    Beyond reach means farther from the shoulder point ``o_2`` than the nearest reachable point is
    (measured at the joint values of that point); otherwise it is in an inner unreachable region.
    """
    gap, beyond = wrist_centre_gaps(arm, np.asarray(wc, dtype=np.float64)[None])
    return float(gap[0]), bool(beyond[0])
