"""Closed-form inverse kinematics of arms with a spherical wrist (Pieper's method), vectorised.

Written on the unified chain of ``chain.py``: ``base_from_flange = G0 Rz(t1) G1 Rz(t2) G2 Rz(t3) G3
Rz(t4) G4 Rz(t5) G5 Rz(t6) G6`` with ``G_k = Tz(d_k) Tx(a_k) Rx(alpha_k)``. The last three axes meet
in one point, the wrist centre, exactly when ``a_4 = a_5 = d_5 = 0`` and ``sin(alpha_4)``,
``sin(alpha_5)`` are not 0 (unified indices); then the wrist centre is the origin of ``J_5`` and
``w = (base_from_flange @ inv(G6))[:3, 3]`` whatever theta_6 is.

Position (joints 1-3, any DH values). With ``p = inv(G0) w`` and ``s(t3) = G2 Rz(t3) g3`` (``g3`` the
wrist centre in link 3), ``p = Rz(t1) G1 Rz(t2) s``. Rotation about axis 1 keeps ``|p|^2`` and
``p_z``; with ``a = R1^T t1`` and ``b = R1^T e_z`` (``G1 = (R1, t1)``) this leaves two equations
linear in ``(cos t2, sin t2)``::

    A . Rot(t2) S = (|p|^2 - |t1|^2 - |s|^2) / 2 - a_z s_z      (A = (a_x, a_y), S = (s_x, s_y))
    B . Rot(t2) S = p_z - t1_z - b_z s_z                          (B = (b_x, b_y))

whose right-hand sides are affine in ``(cos t3, sin t3)``.

- General case (``A``, ``B`` independent): solve for ``V = Rot(t2) S``; ``|V|^2 = |S|^2`` is a
  trigonometric polynomial of degree 2 in t3, i.e. a quartic in ``tan(t3 / 2)``: up to 4 roots, each
  with one t2.
- ``A`` parallel to ``B`` (``a_1 = 0``) or ``B = 0`` (``sin(alpha_1) = 0``, axes 1 and 2
  parallel): a combination of the two equations has no t2, so t3 comes from ``k0 + kc cos t3 + ks
  sin t3 = 0`` (2 roots) and t2 from the remaining equation (2 roots each).

Then ``t1`` from the angle of ``p`` about axis 1, and the wrist from ``R = Rz(t4) Rx(alpha_4) Rz(t5)
Rx(alpha_5) Rz(t6)`` (2 solutions). Results are fixed slots: 4 arm solutions x 2 wrist solutions,
slot ``2 * arm + wrist``.

The per-pose arithmetic is one compiled loop (``pieper_kernel.py``, numba); this module builds the
arm constants, polishes the rare solutions that need it and accepts them.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property

import numpy as np

from . import pieper_kernel as kernel
from .chain import Chain, axis_frames, newton_polish, pose_error

N_SLOTS = 8
SPHERICAL_TOL = 1e-9
"""Largest |a_4|, |a_5|, |d_5| (m, unified chain) for the last three axes to count as meeting in a point."""
ROOT_IMAG_TOL = kernel.ROOT_IMAG_TOL
"""Largest imaginary part (as an angle, rad) of a quartic root still tried as a real solution."""
CLIP_TOL = kernel.CLIP_TOL
"""How far beyond +-1 a cosine may fall (rounding near a boundary) before the branch is dropped."""
POLISH_TRIGGER = kernel.POLISH_TRIGGER
"""Wrist-centre error (m) above which a closed-form solution gets full-pose Newton steps (the others
already reproduce the pose to about 1e-11 m / rad, the wrist being solved exactly for their joints 1-3)."""
ACCEPT_TOL = 1e-9
"""Largest pose error (m, and rad) of a returned solution."""
DUPLICATE_TOL = kernel.DUPLICATE_TOL
"""Two arm solutions whose joints 1-3 agree within this (rad, modulo 2 pi) are one solution."""


def is_spherical(chain: Chain) -> bool:
    """True if the last three joint axes meet in one point (from the DH table, either convention)."""
    return bool(
        abs(chain.a[4]) < SPHERICAL_TOL
        and abs(chain.a[5]) < SPHERICAL_TOL
        and abs(chain.d[5]) < SPHERICAL_TOL
        and abs(np.sin(chain.alpha[4])) > 1e-6
        and abs(np.sin(chain.alpha[5])) > 1e-6
    )


@dataclass(frozen=True)
class PieperModel:
    """Arm constants of the closed-form solver, built once per arm."""

    chain: Chain
    offset: np.ndarray
    mode: str  # "general", "parallel"
    quartic: bool
    G0inv: np.ndarray
    t1sq: float
    g1c: float
    g1s: float
    g2c: float
    g2s: float
    az: float
    bz: float
    t1z: float
    s0sq: float
    S0: np.ndarray
    Sc: np.ndarray
    Ss: np.ndarray
    s0: np.ndarray
    sc: np.ndarray
    ss: np.ndarray
    A: np.ndarray
    B: np.ndarray
    Minv: np.ndarray
    lam: float
    G6inv: np.ndarray

    @classmethod
    def build(cls, chain: Chain, offset: np.ndarray) -> "PieperModel":
        from ..errors import InputError

        d, a, al = chain.d, chain.a, chain.alpha
        g3 = np.array([a[3], -np.sin(al[3]) * d[4], d[3] + np.cos(al[3]) * d[4]])
        ca2, sa2 = np.cos(al[2]), np.sin(al[2])
        R2 = np.array([[1, 0, 0], [0, ca2, -sa2], [0, sa2, ca2]])
        t2 = np.array([a[2], 0.0, d[2]])
        sc = R2 @ np.array([g3[0], g3[1], 0.0])
        ss = R2 @ np.array([-g3[1], g3[0], 0.0])
        s0 = R2 @ np.array([0.0, 0.0, g3[2]]) + t2
        rho2 = g3[0] ** 2 + g3[1] ** 2
        if rho2 < 1e-18:
            raise InputError("the wrist centre lies on axis 3: joint 3 cannot move it", item="arm")
        ca1, sa1 = np.cos(al[1]), np.sin(al[1])
        R1 = np.array([[1, 0, 0], [0, ca1, -sa1], [0, sa1, ca1]])
        t1 = np.array([a[1], 0.0, d[1]])
        av = R1.T @ t1
        bv = R1.T @ np.array([0.0, 0.0, 1.0])
        A, B = av[:2].copy(), bv[:2].copy()
        g1c = -(s0 @ sc) - av[2] * sc[2]
        g1s = -(s0 @ ss) - av[2] * ss[2]
        g2c = -bv[2] * sc[2]
        g2s = -bv[2] * ss[2]
        nA, nB = np.linalg.norm(A), np.linalg.norm(B)
        D = A[0] * B[1] - A[1] * B[0]
        scale = max(nA, 1.0)
        Minv = np.zeros((2, 2))
        lam = 0.0
        quartic = False
        if abs(D) > 1e-9 * scale * max(nB, 1e-300) and nB > 1e-12 and nA > 1e-12:
            mode = "general"
            Minv = np.array([[B[1], -A[1]], [-B[0], A[0]]]) / D
            Vc = Minv @ np.array([g1c, g2c])
            Vs = Minv @ np.array([g1s, g2s])
            Q11 = Vc @ Vc - sc[:2] @ sc[:2]
            Q22 = Vs @ Vs - ss[:2] @ ss[:2]
            Q12 = Vc @ Vs - sc[:2] @ ss[:2]
            quartic = np.hypot((Q11 - Q22) / 2, Q12) > 1e-12 * max(1.0, abs(Q11) + abs(Q22))
        else:
            mode = "parallel"
            if nB > 1e-12:
                lam = float(A @ B) / nB**2
                kc, ks = g1c - lam * g2c, g1s - lam * g2s
            elif nA > 1e-12:
                kc, ks = g2c, g2s
            else:
                raise InputError("axes 1 and 2 coincide: the arm cannot position its wrist", item="arm")
            if np.hypot(kc, ks) < 1e-12:
                raise InputError("joints 1-3 cannot place the wrist centre in 3D (degenerate DH table)", item="arm")
        G0inv = np.linalg.inv(chain.link_matrix(0))
        G6inv = np.linalg.inv(chain.link_matrix(6))
        return cls(
            chain=chain, offset=offset, mode=mode, quartic=bool(quartic), G0inv=G0inv, t1sq=float(t1 @ t1),
            g1c=float(g1c), g1s=float(g1s), g2c=float(g2c), g2s=float(g2s), az=float(av[2]), bz=float(bv[2]),
            t1z=float(t1[2]), s0sq=float(s0 @ s0 + rho2), S0=s0[:2].copy(), Sc=sc[:2].copy(), Ss=ss[:2].copy(),
            s0=s0, sc=sc, ss=ss, A=A, B=B, Minv=Minv, lam=lam, G6inv=G6inv,
        )

    @cached_property
    def kernel_args(self) -> tuple:
        """The constants in the order ``pieper_kernel.solve_batch`` takes them."""
        k = np.zeros(11)
        k[[kernel.K_T1SQ, kernel.K_S0SQ, kernel.K_AZ, kernel.K_BZ, kernel.K_T1Z, kernel.K_G1C, kernel.K_G1S,
           kernel.K_G2C, kernel.K_G2S, kernel.K_LAM, kernel.K_NB]] = [
            self.t1sq, self.s0sq, self.az, self.bz, self.t1z, self.g1c, self.g1s, self.g2c, self.g2s, self.lam,
            float(np.linalg.norm(self.B))]
        ch = self.chain
        f = lambda v: np.ascontiguousarray(v, dtype=np.float64)  # noqa: E731
        return (self.mode == "general", self.quartic, k, f(self.G0inv), f(self.G6inv[:3, 3]), f(self.s0), f(self.sc),
                f(self.ss), f(self.Minv), f(self.A), f(self.B), f(ch.d), f(ch.a), f(np.cos(ch.alpha)),
                f(np.sin(ch.alpha)), f(self.offset))


@dataclass(frozen=True)
class RawSolution:
    """Fixed-slot output of a solver for ``n`` poses (see ``ik.IKBatch`` for the public form)."""

    q: np.ndarray  # (n, 8, 6) joint values (not wrapped, not yet placed in the limits)
    valid: np.ndarray  # (n, 8)
    wrist_centre: np.ndarray  # (n, 3) or (n, 8, 3)
    code: np.ndarray  # (n, 8) int8 branch code (branches.py)
    measure: np.ndarray  # (n, 8, 3) singularity measures
    arm_found: np.ndarray  # (n,) any position solution (before wrist / checks)


def solve(model: PieperModel, base_from_flange: np.ndarray) -> RawSolution:
    """All closed-form solutions for ``(n, 4, 4)`` poses (validated by the caller)."""
    T = np.ascontiguousarray(base_from_flange, dtype=np.float64)
    n = T.shape[0]
    q = np.empty((n, N_SLOTS, 6))
    valid = np.empty((n, N_SLOTS), bool)
    wc = np.empty((n, 3))
    code = np.empty((n, N_SLOTS), np.int8)
    measure = np.empty((n, N_SLOTS, 3))
    arm_found = np.empty(n, bool)
    need = np.empty((n, N_SLOTS), bool)
    kernel.solve_batch(T, *model.kernel_args, q, valid, wc, code, measure, arm_found, need)
    # ---- polish the few that need it, then accept ----------------------------------------------
    if need.any():
        ch, off = model.chain, model.offset
        idx = np.nonzero(need)
        qp = newton_polish(ch, off, q[idx], T[idx[0]], iterations=3)
        _, _, F = axis_frames(ch, qp + off)
        err = np.abs(pose_error(T[idx[0]], F)).max(-1)
        q[idx] = qp
        valid[idx] = err < ACCEPT_TOL

    return RawSolution(q=q, valid=valid, wrist_centre=wc, code=code, measure=measure, arm_found=arm_found)
