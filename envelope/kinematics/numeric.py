"""Numerical inverse kinematics for arms without a spherical wrist: damped least squares
(Levenberg-Marquardt) from many deterministic starts, vectorised over poses and starts.

Completeness is not guaranteed: a solution no start converges to is missed. The starts are a fixed
scrambled set (seeded), identical for every call, so results are reproducible.
"""

from __future__ import annotations

import numpy as np

from .branches import codes_from_geometry, singularity_measures
from .chain import Chain, axis_frames, jacobian, pose_error

DEFAULT_STARTS = 64
MAX_ITERATIONS = 80
CONVERGED_TOL = 1e-11
"""Largest pose-error component (m, rad) of a converged start."""
DISTINCT_TOL = 1e-6
"""Two converged starts whose joints agree within this (rad, modulo 2 pi) are one solution."""


def starts(count: int) -> np.ndarray:
    """``(count, 6)`` deterministic start configurations in ``[-pi, pi)``."""
    rng = np.random.default_rng(20261201)
    return rng.uniform(-np.pi, np.pi, size=(count, 6))


def levenberg_marquardt(chain: Chain, offset, q0: np.ndarray, target: np.ndarray, iterations: int = MAX_ITERATIONS):
    """Vectorised LM: ``q0`` ``(m, 6)``, ``target`` ``(m, 4, 4)``; returns q (wrapped) and the final max error.

    Each iteration works only on the configurations not yet converged.
    """
    q = np.array(q0, dtype=np.float64)
    T = np.asarray(target)
    o, z, F = axis_frames(chain, q + offset)
    err = pose_error(T, F)
    cost = np.einsum("...i,...i->...", err, err)
    lam = np.full(len(q), 1e-3)
    eye = np.eye(6)
    act = np.flatnonzero(cost > CONVERGED_TOL**2)
    for _ in range(iterations):
        if act.size == 0:
            break
        J = jacobian(o[act], z[act], F[act])
        Jt = np.swapaxes(J, -1, -2)
        A = Jt @ J + lam[act, None, None] * eye
        dq = np.linalg.solve(A, (Jt @ err[act, :, None]))[..., 0]
        qt = q[act] + dq
        ot, zt, Ft = axis_frames(chain, qt + offset)
        errt = pose_error(T[act], Ft)
        costt = np.einsum("...i,...i->...", errt, errt)
        better = costt < cost[act]
        idx = act[better]
        q[idx], o[idx], z[idx], F[idx] = qt[better], ot[better], zt[better], Ft[better]
        err[idx], cost[idx] = errt[better], costt[better]
        lam[act] = np.where(better, np.maximum(lam[act] * 0.3, 1e-12), np.minimum(lam[act] * 10.0, 1e6))
        act = act[(cost[act] > CONVERGED_TOL**2) & (lam[act] < 1e6)]
    return np.remainder(q + np.pi, 2 * np.pi) - np.pi, np.abs(err).max(-1)


def solve(chain: Chain, offset, base_from_flange: np.ndarray, n_starts: int = DEFAULT_STARTS, slots: int | None = None):
    """Distinct solutions for ``(n, 4, 4)`` poses.

    Returns
    -------
    q : (n, k, 6), valid : (n, k), code : (n, k) int8, measure : (n, k, 3)
        ``k = n_starts`` or ``slots``; valid solutions first, in order of first discovery.
    """
    n = base_from_flange.shape[0]
    q0 = np.broadcast_to(starts(n_starts), (n, n_starts, 6)).reshape(-1, 6)
    T = np.broadcast_to(base_from_flange[:, None], (n, n_starts, 4, 4)).reshape(-1, 4, 4)
    q, err = levenberg_marquardt(chain, offset, q0, T)
    q, err = q.reshape(n, n_starts, 6), err.reshape(n, n_starts)
    ok = err < CONVERGED_TOL * 10
    diff = q[:, :, None, :] - q[:, None, :, :]
    same = (np.abs(np.remainder(diff + np.pi, 2 * np.pi) - np.pi) < DISTINCT_TOL).all(-1)
    earlier = np.tril(np.ones((n_starts, n_starts), bool), -1)
    dup = (same & earlier & ok[:, None, :]).any(-1)
    ok = ok & ~dup
    order = np.argsort(~ok, axis=1, kind="stable")
    q = np.take_along_axis(q, order[..., None], axis=1)
    ok = np.take_along_axis(ok, order, axis=1)
    k = n_starts if slots is None else slots
    if k > n_starts:
        q = np.concatenate([q, np.zeros((n, k - n_starts, 6))], 1)
        ok = np.concatenate([ok, np.zeros((n, k - n_starts), bool)], 1)
    q, ok = q[:, :k], ok[:, :k]
    o, z, _ = axis_frames(chain, q + offset)
    # x axis of DH frame 1 = G0 Rz(theta1) e_x
    G0 = chain.link_matrix(0)[:3, :3]
    th1 = q[..., 0] + offset[0]
    x1 = np.cos(th1)[..., None] * G0[:, 0] + np.sin(th1)[..., None] * G0[:, 1]
    # "wrist centre": foot on axis 5 of the common normal of axes 4 and 5 = origin of J5
    w = o[..., 4, :]
    wsign = np.einsum("...i,...i->...", np.cross(z[..., 3, :], z[..., 5, :]), z[..., 4, :])
    code = codes_from_geometry(w, o[..., 0, :], z[..., 0, :], x1, o[..., 1, :], z[..., 1, :], o[..., 2, :], wsign)
    wsin = np.abs(wsign)  # |det[z4 z5 z6]|
    measure = singularity_measures(w, o[..., 0, :], z[..., 0, :], o[..., 1, :], z[..., 1, :], o[..., 2, :],
                                   z[..., 2, :], wsin)
    return q, ok, code, measure
