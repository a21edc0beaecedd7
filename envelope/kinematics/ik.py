"""Inverse kinematics results and the two entry points behind ``Arm.ik``.

``Arm.ik(base_from_flange)`` with one ``(4, 4)`` pose returns ``IKSolutions`` (every distinct solution,
turn variants included); with ``(..., 4, 4)`` poses it returns ``IKBatch`` (fixed slots, no Python
loop per pose). Arms with a spherical wrist are solved in closed form (``pieper.py``), others
numerically from many starts (``numeric.py``).
"""

from __future__ import annotations

from dataclasses import dataclass
from itertools import product

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
    q, valid, code, measure, method, complete, starts, raw = _raw(arm, T[None], n_starts, None)
    q, valid, code, measure = q[0], valid[0], code[0], measure[0]
    keep = np.flatnonzero(valid)
    q, code, measure = q[keep], code[keep], measure[keep]
    placed, within, excess = place_in_limits(q, arm.limits)

    # turn variants of joints whose range holds more than one equivalent angle
    rows_q, rows_src = [placed], [np.arange(len(keep))]
    m_lo, m_hi = turn_counts(placed, arm.limits)
    for i in range(len(keep)):
        if not within[i].all():
            continue
        choices = [range(m_lo[i, j], m_hi[i, j] + 1) for j in range(6)]
        for ms in product(*choices):
            if not any(ms):
                continue
            rows_q.append(placed[i] + 2 * np.pi * np.array(ms, dtype=float))
            rows_src.append(np.array([i]))
    qv = np.vstack([r.reshape(-1, 6) for r in rows_q])
    src = np.concatenate(rows_src)
    within_v = np.ones(qv.shape, bool)  # turn variants lie inside the limits by construction
    excess_v = np.zeros(qv.shape)
    within_v[: len(keep)], excess_v[: len(keep)] = within, excess
    code_v, meas_v = code[src], measure[src]
    sing = meas_v < SINGULAR_TOLS
    reachable = bool(within_v.all(-1).any())
    wc = raw.wrist_centre[0] if raw is not None else np.full(3, np.nan)
    reason = ""
    if not reachable:
        reason = _reason(arm, T, wc, raw, len(keep), placed, excess, code, method, starts)
    return IKSolutions(
        q=qv, labels=tuple(BRANCH_LABELS[c] for c in code_v), code=code_v.astype(np.int8), within_limits=within_v,
        excess=excess_v, singular_wrist=sing[:, 0], singular_shoulder=sing[:, 1], singular_elbow=sing[:, 2],
        singular_measure=meas_v, twin=src, method=method, complete=complete, starts=starts, reachable=reachable,
        reason=reason, wrist_centre=wc,
    )


def _reason(arm, T, wc, raw, k, placed, excess, code, method, starts) -> str:
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
    if raw.arm_found[0]:
        return "the wrist cannot reach the orientation: axis 6 cannot take the required direction"
    gap, beyond = wrist_centre_gap(arm, wc)
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


def wrist_centre_gap(arm, wc: np.ndarray) -> tuple[float, bool]:
    """Distance (m) from ``wc`` to the nearest reachable wrist centre, and whether it lies beyond reach.

    Beyond reach means farther from the shoulder point ``o_2`` than the nearest reachable point is
    (measured at the joint values of that point); otherwise it is in an inner unreachable region.
    """
    from scipy.optimize import least_squares  # scipy: the local refinement of the nearest point

    g = np.linspace(-np.pi, np.pi, 37)[:-1]
    grid = np.stack(np.meshgrid(g, g, g, indexing="ij"), -1).reshape(-1, 3)
    pts, _ = wrist_centre_of(arm, grid)
    best = grid[np.argsort(np.linalg.norm(pts - wc, axis=-1))[:5]]
    sols = [least_squares(lambda t: wrist_centre_of(arm, t)[0] - wc, b, xtol=1e-15, ftol=1e-15, gtol=1e-15) for b in best]
    s = min(sols, key=lambda r: r.cost)
    w_star, o2 = wrist_centre_of(arm, s.x)
    gap = float(np.linalg.norm(w_star - wc))
    return gap, bool(np.linalg.norm(wc - o2) > np.linalg.norm(w_star - o2))
