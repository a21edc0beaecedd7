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
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .branches import WRIST_SINGULAR_TOL, arm_codes, arm_measures
from .chain import Chain, Frame, axis_frames, newton_polish, pose_error

N_SLOTS = 8
SPHERICAL_TOL = 1e-9
"""Largest |a_4|, |a_5|, |d_5| (m, unified chain) for the last three axes to count as meeting in a point."""
ROOT_IMAG_TOL = 1e-5
"""Largest imaginary part (as an angle, rad) of a quartic root still tried as a real solution."""
CLIP_TOL = 1e-7
"""How far beyond +-1 a cosine may fall (rounding near a boundary) before the branch is dropped."""
POLISH_TRIGGER = 1e-11
"""Wrist-centre error (m) above which a closed-form solution gets full-pose Newton steps (the others
already reproduce the pose to about 1e-11 m / rad, the wrist being solved exactly for their joints 1-3)."""
ACCEPT_TOL = 1e-9
"""Largest pose error (m, and rad) of a returned solution."""
DUPLICATE_TOL = 1e-7
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


def _affine_roots(k0, kc, ks):
    """Both roots of ``k0 + kc cos t + ks sin t = 0``: ``(..., 2)`` angles and a validity mask."""
    r = np.hypot(kc, ks)
    x = -k0 / np.where(r > 0, r, 1.0)
    ok = (np.abs(x) <= 1.0 + CLIP_TOL) & (r > 0)
    base = np.arctan2(ks, kc)
    dt = np.arccos(np.clip(x, -1.0, 1.0))
    return np.stack([base + dt, base - dt], axis=-1), np.stack([ok, ok], axis=-1)


def quartic_roots(b, c, d, e):
    """Real parts and |imaginary parts| ``(n, 4)`` of the roots of monic x^4 + b x^3 + c x^2 + d x + e.

    Ferrari's method (depressed quartic, largest root of the resolvent cubic by Cardano or the
    trigonometric form, refined by Newton), in real arithmetic, vectorised. The callers refine the
    angles further on the trigonometric polynomial itself.
    """
    b2 = b * b
    p = c - 0.375 * b2
    q = d - 0.5 * b * c + 0.125 * b2 * b
    r = e - 0.25 * b * d + 0.0625 * b2 * c - 0.01171875 * b2 * b2
    A2, A1, A0 = p, 0.25 * p * p - r, -0.125 * q * q
    Q = (3 * A1 - A2 * A2) / 9.0
    R = (9 * A2 * A1 - 27 * A0 - 2 * A2 ** 3) / 54.0
    D = Q ** 3 + R * R
    sq = np.sqrt(np.maximum(D, 0.0))
    one = np.cbrt(R + sq) + np.cbrt(R - sq)
    mQ = np.sqrt(np.maximum(-Q, 0.0))
    th = np.arccos(np.clip(R / np.where(mQ > 0, mQ ** 3, 1.0), -1, 1))
    m = np.where(D > 0, one, 2 * mQ * np.cos(th / 3.0)) - A2 / 3.0
    for _ in range(2):
        f = ((m + A2) * m + A1) * m + A0
        df = (3 * m + 2 * A2) * m + A1
        m = m - f / np.where(df == 0, 1.0, df)
    m = np.maximum(m, 0.0)
    sm = np.sqrt(2.0 * m)
    big = sm > 1e-9 * (1 + np.abs(p))
    qs = np.where(big, q / np.where(big, sm, 1.0), 0.0)
    re, im = [], []
    for s in (1.0, -1.0):
        B = -s * sm
        C = 0.5 * p + m + s * 0.5 * qs
        disc = B * B - 4 * C
        rt = np.sqrt(np.abs(disc))
        real = disc >= 0
        re += [np.where(real, (-B + rt) / 2, -B / 2), np.where(real, (-B - rt) / 2, -B / 2)]
        im += [np.where(real, 0.0, rt / 2)] * 2
    re, im = np.stack(re, -1), np.stack(im, -1)
    if not big.all():  # biquadratic y^4 + p y^2 + r: y^2 = z, z = (-p +/- sqrt(p^2 - 4 r)) / 2
        zb = np.sqrt((p * p - 4 * r).astype(complex))
        z = np.stack([(-p + zb) / 2, (-p - zb) / 2], -1)
        y = np.sqrt(z)
        y = np.concatenate([y, -y], -1)[..., [0, 2, 1, 3]]
        re = np.where(big[..., None], re, y.real)
        im = np.where(big[..., None], im, np.abs(y.imag))
    return re - 0.25 * b[..., None], im


def _trig2_roots(k0, k1, k2, k3, k4):
    """Real roots of ``k0 + k1 cos t + k2 sin t + k3 cos 2t + k4 sin 2t`` (arrays ``(n,)``).

    Returns ``(n, 4)`` angles, their cosines and sines, and validity. The variable is first shifted by the multiple of pi/2
    that keeps the half-angle quartic's leading coefficient largest, so a root at t = pi is found too.
    """
    betas = np.array([0.0, 0.5 * np.pi, np.pi, 1.5 * np.pi])
    # leading coefficient of the quartic in tan(phi/2) with t = phi + beta is h(pi + beta)
    tt = np.pi + betas
    lead = k0[:, None] + k1[:, None] * np.cos(tt) + k2[:, None] * np.sin(tt) + k3[:, None] * np.cos(2 * tt) \
        + k4[:, None] * np.sin(2 * tt)
    pick = np.argmax(np.abs(lead), axis=1)
    beta = betas[pick]
    cb, sb = np.array([1.0, 0.0, -1.0, 0.0])[pick], np.array([0.0, 1.0, 0.0, -1.0])[pick]
    c2b, s2b = np.array([1.0, -1.0, 1.0, -1.0])[pick], 0.0
    K1, K2 = k1 * cb + k2 * sb, -k1 * sb + k2 * cb
    K3, K4 = k3 * c2b + k4 * s2b, -k3 * s2b + k4 * c2b
    c4 = k0 - K1 + K3
    coeffs = np.stack([2 * K2 - 4 * K4, 2 * k0 - 6 * K3, 2 * K2 + 4 * K4, k0 + K1 + K3], axis=-1) / c4[:, None]
    tr, ti = quartic_roots(coeffs[:, 0], coeffs[:, 1], coeffs[:, 2], coeffs[:, 3])
    ok = ti * 2.0 / (1.0 + tr * tr) < ROOT_IMAG_TOL
    # Newton steps on the quartic itself (Horner), then the angle and its cosine and sine by algebra
    b, c, d, e = (coeffs[:, k, None] for k in range(4))
    t = tr
    for _ in range(2):
        P = (((t + b) * t + c) * t + d) * t + e
        dP = ((4.0 * t + 3.0 * b) * t + 2.0 * c) * t + d
        step = np.where(np.abs(dP) > 1e-12 * (1.0 + np.abs(t)) ** 3, P / np.where(dP == 0, 1.0, dP), 0.0)
        t = t - np.clip(step, -1e-3 * (1.0 + np.abs(t)), 1e-3 * (1.0 + np.abs(t)))
    u = 1.0 / (1.0 + t * t)
    cphi, sphi = (1.0 - t * t) * u, 2.0 * t * u
    cb_, sb_ = cb[:, None], sb[:, None]
    return 2.0 * np.arctan(t) + beta[:, None], cphi * cb_ - sphi * sb_, sphi * cb_ + cphi * sb_, ok


def _angle2(fx, fy, tx, ty):
    """Angle of the rotation taking 2D direction ``(fx, fy)`` to ``(tx, ty)``."""
    return np.arctan2(fx * ty - fy * tx, fx * tx + fy * ty)


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
    ch, off = model.chain, model.offset
    T = base_from_flange
    n = T.shape[0]
    # Products with a pose are written out element by element (no BLAS call over the batch), so a
    # pose's result is the same bit for bit whatever batch it is solved in.
    g6 = model.G6inv[:, 3]
    wc = T[:, :3, 0] * g6[0] + T[:, :3, 1] * g6[1] + T[:, :3, 2] * g6[2] + T[:, :3, 3]
    G0 = model.G0inv
    p = wc[:, 0:1] * G0[:3, 0] + wc[:, 1:2] * G0[:3, 1] + wc[:, 2:3] * G0[:3, 2] + G0[:3, 3]
    px, py, pz = p[:, 0], p[:, 1], p[:, 2]
    P1 = 0.5 * ((px * px + py * py + pz * pz) - model.t1sq - model.s0sq) - model.az * model.s0[2]
    P2 = pz - model.t1z - model.bz * model.s0[2]

    # ---- theta3 (and for the parallel case theta2) -------------------------------------------
    if model.mode == "general":
        Mi = model.Minv
        V0 = np.stack([Mi[0, 0] * P1 + Mi[0, 1] * P2, Mi[1, 0] * P1 + Mi[1, 1] * P2], -1)  # (n, 2)
        Vc = model.Minv @ np.array([model.g1c, model.g2c])
        Vs = model.Minv @ np.array([model.g1s, model.g2s])
        S0, Sc, Ss = model.S0, model.Sc, model.Ss
        Q00 = (V0[:, 0] * V0[:, 0] + V0[:, 1] * V0[:, 1]) - S0 @ S0
        Q01 = (V0[:, 0] * Vc[0] + V0[:, 1] * Vc[1]) - S0 @ Sc
        Q02 = (V0[:, 0] * Vs[0] + V0[:, 1] * Vs[1]) - S0 @ Ss
        Q11, Q22, Q12 = Vc @ Vc - Sc @ Sc, Vs @ Vs - Ss @ Ss, Vc @ Vs - Sc @ Ss
        k0 = Q00 + 0.5 * (Q11 + Q22)
        k1, k2 = 2 * Q01, 2 * Q02
        if model.quartic:
            ones = np.ones(n)
            t3, c3, s3, ok3 = _trig2_roots(k0, k1, k2, 0.5 * (Q11 - Q22) * ones, Q12 * ones)
        else:
            t3, ok3 = _affine_roots(k0, k1, k2)
            t3 = np.concatenate([t3, t3], -1)[:, :4]
            ok3 = np.concatenate([ok3, np.zeros_like(ok3)], -1)
            c3, s3 = np.cos(t3), np.sin(t3)
        Vx = V0[:, None, 0] + Vc[0] * c3 + Vs[0] * s3
        Vy = V0[:, None, 1] + Vc[1] * c3 + Vs[1] * s3
        Sx = S0[0] + Sc[0] * c3 + Ss[0] * s3
        Sy = S0[1] + Sc[1] * c3 + Ss[1] * s3
        t2 = _angle2(Sx, Sy, Vx, Vy)
        ok = ok3
    else:
        nB = np.linalg.norm(model.B)
        if nB > 1e-12:
            k0 = P1 - model.lam * P2
            kc, ks = model.g1c - model.lam * model.g2c, model.g1s - model.lam * model.g2s
            C, gc, gs, Pg = model.B, model.g2c, model.g2s, P2
        else:
            k0, kc, ks = P2, model.g2c, model.g2s
            C, gc, gs, Pg = model.A, model.g1c, model.g1s, P1
        r3, ok3 = _affine_roots(k0, kc, ks)  # (n, 2)
        c3, s3 = np.cos(r3), np.sin(r3)
        Sx = model.S0[0] + model.Sc[0] * c3 + model.Ss[0] * s3
        Sy = model.S0[1] + model.Sc[1] * c3 + model.Ss[1] * s3
        g = Pg[:, None] + gc * c3 + gs * s3
        nS = np.hypot(Sx, Sy)
        nC = np.linalg.norm(C)
        x = g / np.where(nS > 0, nC * nS, 1.0)
        ok2 = (np.abs(x) <= 1 + CLIP_TOL) & (nS > 1e-12)
        phi0 = np.arctan2(C[1], C[0])
        dphi = np.arccos(np.clip(x, -1, 1))
        aS = np.arctan2(Sy, Sx)
        t2 = np.stack([phi0 + dphi - aS, phi0 - dphi - aS], -1).reshape(n, 4)  # (n, 2 roots3, 2 roots2)
        t3 = np.repeat(r3, 2, axis=1)
        ok = np.repeat(ok3, 2, axis=1) & np.stack([ok2, ok2], -1).reshape(n, 4)

    # ---- theta1 ------------------------------------------------------------------------------
    if model.mode != "general":
        c3, s3 = np.cos(t3), np.sin(t3)
    c2, s2 = np.cos(t2), np.sin(t2)
    sx = model.s0[0] + model.sc[0] * c3 + model.ss[0] * s3
    sy = model.s0[1] + model.sc[1] * c3 + model.ss[1] * s3
    sz = model.s0[2] + model.sc[2] * c3 + model.ss[2] * s3
    ux, uy, uz = c2 * sx - s2 * sy, s2 * sx + c2 * sy, sz
    ca1, sa1 = np.cos(ch.alpha[1]), np.sin(ch.alpha[1])
    vx = ux + ch.a[1]
    vy = ca1 * uy - sa1 * uz
    pxy = np.hypot(p[:, 0], p[:, 1])[:, None]
    t1 = np.where(pxy > 1e-12, _angle2(vx, vy, p[:, None, 0], p[:, None, 1]), off[0])

    # ---- partial chain J1..J4 for the 4 arm solutions ----------------------------------------
    f = Frame.identity((n, 4)).link(ch.d[0], ch.a[0], ch.alpha[0])
    o1, z1 = f.p, f.z
    f.rz(np.cos(t1), np.sin(t1))
    x1 = f.x
    f.link(ch.d[1], ch.a[1], ch.alpha[1])
    o2, z2 = f.p, f.z
    f.rz(c2, s2).link(ch.d[2], ch.a[2], ch.alpha[2])
    o3, z3 = f.p, f.z
    f.rz(c3, s3).link(ch.d[3], ch.a[3], ch.alpha[3])  # J4
    w_arm = f.p + ch.d[4] * f.z
    werr = np.linalg.norm(w_arm - wc[:, None, :], axis=-1)

    # duplicates among the arm solutions (double roots, coincident branches): compare cos and sin
    cs = np.stack([np.cos(t1), np.sin(t1), c2, s2, c3, s3], -1)
    for j in range(1, 4):
        for k in range(j):
            same = (np.abs(cs[:, j] - cs[:, k]) < DUPLICATE_TOL).all(-1) & ok[:, k]
            ok[:, j] &= ~same

    # ---- wrist -------------------------------------------------------------------------------
    ca6, sa6 = np.cos(ch.alpha[6]), np.sin(ch.alpha[6])
    RT = T[:, :3, :3]
    # R_T Rx(alpha6)^T: columns x' = x, z' = sa6 y + ca6 z
    colx = RT[:, :, 0]
    colz = sa6 * RT[:, :, 1] + ca6 * RT[:, :, 2]
    def dot(ax, col):  # (n, 4, 3) . (n, 3) -> (n, 4)
        return ax[..., 0] * col[:, None, 0] + ax[..., 1] * col[:, None, 1] + ax[..., 2] * col[:, None, 2]

    hx, hy, hz = dot(f.x, colz), dot(f.y, colz), dot(f.z, colz)
    ex = np.stack([dot(ax, colx) for ax in (f.x, f.y, f.z)], -1)  # W e_x  (n,4,3)
    a4, a5 = ch.alpha[4], ch.alpha[5]
    ca4, sa4, ca5, sa5 = np.cos(a4), np.sin(a4), np.cos(a5), np.sin(a5)
    xw = (ca4 * ca5 - hz) / (sa4 * sa5)
    okw = np.abs(xw) <= 1 + CLIP_TOL
    hxy = np.hypot(hx, hy)
    # |sin t5| from |h_xy|^2 = (sa5 sin t5)^2 + K^2, K = sa5 ca4 cos t5 + ca5 sa4: accurate near t5 = 0
    # where arccos(cos t5) would lose half the digits
    cw = np.clip(xw, -1, 1)
    K = sa5 * ca4 * cw + ca5 * sa4
    sw = np.sqrt(np.maximum(hxy**2 - K**2, 0.0)) / abs(sa5)
    acw = np.arctan2(sw, cw)
    t5 = np.stack([acw, -acw], -1)  # (n,4,2)
    # wrist singular: axes 4, 5, 6 coplanar, |det[z4 z5 z6]| = |sa4 sa5 sin t5|; the two wrist solutions
    # then coincide (or, with axes 4 and 6 aligned, only t4 + t6 is fixed): keep one representative
    wdet = np.abs(sa4 * sa5) * sw
    singular_w = wdet < WRIST_SINGULAR_TOL
    ca5w, sa5w = np.cos(acw), np.sin(acw)  # cos is even and sin odd: the second wrist solution's follow
    c5, s5 = np.stack([ca5w, ca5w], -1), np.stack([sa5w, -sa5w], -1)
    vx5 = sa5 * s5
    vyy, vzz = -sa5 * c5, ca5
    vy5 = vyy * ca4 - vzz * sa4
    t4 = np.where((hxy > 1e-12)[..., None], _angle2(vx5, vy5, hx[..., None], hy[..., None]), off[3])
    # theta6: N e_x = Rx(-a5) Rz(-t5) Rx(-a4) Rz(-t4) W e_x
    c4_, s4_ = np.cos(t4), np.sin(t4)
    wx, wy, wz = ex[..., 0][..., None], ex[..., 1][..., None], ex[..., 2][..., None]
    x1_, y1_ = c4_ * wx + s4_ * wy, -s4_ * wx + c4_ * wy
    y2_, z2_ = ca4 * y1_ + sa4 * wz, -sa4 * y1_ + ca4 * wz
    x3_, y3_ = c5 * x1_ + s5 * y2_, -s5 * x1_ + c5 * y2_
    y4_ = ca5 * y3_ + sa5 * z2_
    t6 = np.arctan2(y4_, x3_)
    okw2 = np.stack([okw, okw & ~singular_w], -1)

    theta = np.empty((n, 4, 2, 6))
    theta[..., 0] = t1[..., None]
    theta[..., 1] = t2[..., None]
    theta[..., 2] = t3[..., None]
    theta[..., 3], theta[..., 4], theta[..., 5] = t4, t5, t6
    q = (theta - off).reshape(n, N_SLOTS, 6)  # not wrapped: branches.place_in_limits does that
    valid = (ok[..., None] & okw2).reshape(n, N_SLOTS)

    # ---- polish the few that need it, then accept ----------------------------------------------
    need = (np.repeat(werr, 2, axis=1) > POLISH_TRIGGER) & valid
    if need.any():
        idx = np.nonzero(need)
        qp = newton_polish(ch, off, q[idx], T[idx[0]], iterations=3)
        _, _, F = axis_frames(ch, qp + off)
        err = np.abs(pose_error(T[idx[0]], F)).max(-1)
        q[idx] = qp
        valid[idx] = err < ACCEPT_TOL

    # ---- labels and singularity measures -------------------------------------------------------
    w4 = np.broadcast_to(wc[:, None, :], (n, 4, 3))
    code4 = arm_codes(w4, o1, z1, x1, o2, z2, o3)
    am = arm_measures(w4, o1, z1, o2, z2, o3, z3)
    wsign = -sa4 * sa5 * s5.reshape(n, N_SLOTS)  # (z4 x z6) . z5
    code = (np.repeat(code4, 2, axis=1) + (wsign < 0)).astype(np.int8)
    measure = np.empty((n, N_SLOTS, 3))
    measure[..., 0] = np.repeat(wdet, 2, axis=1)
    measure[..., 1:] = np.repeat(am, 2, axis=1)
    return RawSolution(q=q, valid=valid, wrist_centre=wc, code=code, measure=measure,
                       arm_found=ok.any(-1))
