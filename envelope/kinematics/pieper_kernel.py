"""The compiled per-pose loop of the closed-form solver (``pieper.py`` documents the method).

One pass over the poses with scalar arithmetic only: no temporaries the size of the batch, which is
what made the array form slower than forward kinematics of the eight configurations it returns. The
loop is compiled by numba on first use (cached on disk afterwards) and runs without the GIL. Each
pose's result depends on that pose only, so a pose gives the same bits in any batch.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

from .branches import WRIST_SINGULAR_TOL

# documented in pieper.py, which re-exports them; here so that the compiled code sees plain floats
ROOT_IMAG_TOL = 1e-5
CLIP_TOL = 1e-7
POLISH_TRIGGER = 1e-11
DUPLICATE_TOL = 1e-7

# layout of the scalar constants vector ``k`` (see pieper.PieperModel.kernel_constants)
K_T1SQ, K_S0SQ, K_AZ, K_BZ, K_T1Z, K_G1C, K_G1S, K_G2C, K_G2S, K_LAM, K_NB = range(11)

_BETA = np.array([0.0, 0.5 * np.pi, np.pi, 1.5 * np.pi])
_CB = np.array([1.0, 0.0, -1.0, 0.0])
_SB = np.array([0.0, 1.0, 0.0, -1.0])
_C2B = np.array([1.0, -1.0, 1.0, -1.0])


@njit(cache=True, nogil=True)
def _clip1(x):
    return min(max(x, -1.0), 1.0)


@njit(cache=True, nogil=True)
def _angle2(fx, fy, tx, ty):
    return math.atan2(fx * ty - fy * tx, fx * tx + fy * ty)


@njit(cache=True, nogil=True)
def _angle2cs(fx, fy, tx, ty):
    """``_angle2`` with its cosine and sine (by algebra, not by trigonometric calls)."""
    sn = fx * ty - fy * tx
    cn = fx * tx + fy * ty
    h = math.sqrt(sn * sn + cn * cn)
    if h == 0.0:
        return 0.0, 1.0, 0.0
    return math.atan2(sn, cn), cn / h, sn / h


@njit(cache=True, nogil=True)
def _affine(k0, kc, ks, out_t, out_ok, at):
    """Roots of ``k0 + kc cos t + ks sin t = 0`` into ``out_t[at], out_t[at + 1]``."""
    r = math.sqrt(kc * kc + ks * ks)
    x = -k0 / (r if r > 0 else 1.0)
    ok = abs(x) <= 1.0 + CLIP_TOL and r > 0
    base = math.atan2(ks, kc)
    dt = math.acos(_clip1(x))
    out_t[at] = base + dt
    out_t[at + 1] = base - dt
    out_ok[at] = ok
    out_ok[at + 1] = ok


@njit(cache=True, nogil=True)
def _quartic(b, c, d, e, re, im):
    """Roots of monic x^4 + b x^3 + c x^2 + d x + e (Ferrari), real parts and |imaginary parts|."""
    b2 = b * b
    p = c - 0.375 * b2
    q = d - 0.5 * b * c + 0.125 * b2 * b
    r = e - 0.25 * b * d + 0.0625 * b2 * c - 0.01171875 * b2 * b2
    A2, A1, A0 = p, 0.25 * p * p - r, -0.125 * q * q
    Q = (3 * A1 - A2 * A2) / 9.0
    R = (9 * A2 * A1 - 27 * A0 - 2 * A2 ** 3) / 54.0
    D = Q ** 3 + R * R
    if D > 0:
        sq = math.sqrt(D)
        m = np.cbrt(R + sq) + np.cbrt(R - sq)
    else:
        mQ = math.sqrt(max(-Q, 0.0))
        th = math.acos(_clip1(R / (mQ ** 3 if mQ > 0 else 1.0)))
        m = 2 * mQ * math.cos(th / 3.0)
    m -= A2 / 3.0
    for _ in range(2):
        f = ((m + A2) * m + A1) * m + A0
        df = (3 * m + 2 * A2) * m + A1
        m = m - f / (1.0 if df == 0 else df)
    m = max(m, 0.0)
    sm = math.sqrt(2.0 * m)
    shift = 0.25 * b
    if sm > 1e-9 * (1 + abs(p)):
        qs = q / sm
        for i in range(2):
            s = 1.0 if i == 0 else -1.0
            B = -s * sm
            C = 0.5 * p + m + s * 0.5 * qs
            disc = B * B - 4 * C
            rt = math.sqrt(abs(disc))
            if disc >= 0:
                re[2 * i] = (-B + rt) / 2 - shift
                re[2 * i + 1] = (-B - rt) / 2 - shift
                im[2 * i] = 0.0
                im[2 * i + 1] = 0.0
            else:
                re[2 * i] = -B / 2 - shift
                re[2 * i + 1] = -B / 2 - shift
                im[2 * i] = rt / 2
                im[2 * i + 1] = rt / 2
    else:  # biquadratic y^4 + p y^2 + r: y^2 = z, z = (-p +/- sqrt(p^2 - 4 r)) / 2
        zb = np.sqrt(complex(p * p - 4 * r))
        z0 = np.sqrt((-p + zb) / 2)
        z1 = np.sqrt((-p - zb) / 2)
        ys = (z0, -z0, z1, -z1)
        for i in range(4):
            re[i] = ys[i].real - shift
            im[i] = abs(ys[i].imag)


@njit(cache=True, nogil=True)
def _trig2(k0, k1, k2, k3, k4, t3, c3, s3, ok, re, im):
    """Real roots of ``k0 + k1 cos t + k2 sin t + k3 cos 2t + k4 sin 2t`` (see pieper._trig2_roots)."""
    pick, best = 0, -1.0
    for j in range(4):  # h(pi + beta) with cos(pi + beta) = -cos(beta), sin(pi + beta) = -sin(beta)
        lead = k0 - k1 * _CB[j] - k2 * _SB[j] + k3 * _C2B[j]
        if abs(lead) > best:
            best, pick = abs(lead), j
    beta, cb, sb, c2b = _BETA[pick], _CB[pick], _SB[pick], _C2B[pick]
    K1, K2 = k1 * cb + k2 * sb, -k1 * sb + k2 * cb
    K3, K4 = k3 * c2b, k4 * c2b
    c4 = k0 - K1 + K3
    b = (2 * K2 - 4 * K4) / c4
    c = (2 * k0 - 6 * K3) / c4
    d = (2 * K2 + 4 * K4) / c4
    e = (k0 + K1 + K3) / c4
    _quartic(b, c, d, e, re, im)
    for j in range(4):
        t = re[j]
        ok[j] = im[j] * 2.0 / (1.0 + t * t) < ROOT_IMAG_TOL
        for _ in range(2):
            P = (((t + b) * t + c) * t + d) * t + e
            dP = ((4.0 * t + 3.0 * b) * t + 2.0 * c) * t + d
            lim = 1e-3 * (1.0 + abs(t))
            step = P / dP if abs(dP) > 1e-12 * (1.0 + abs(t)) ** 3 else 0.0
            t = t - min(max(step, -lim), lim)
        u = 1.0 / (1.0 + t * t)
        cphi, sphi = (1.0 - t * t) * u, 2.0 * t * u
        t3[j] = 2.0 * math.atan(t) + beta
        c3[j] = cphi * cb - sphi * sb
        s3[j] = sphi * cb + cphi * sb


@njit(cache=True, nogil=True)
def _rz(F, c, s):
    for i in range(3):
        x, y = F[i], F[3 + i]
        F[i] = c * x + s * y
        F[3 + i] = c * y - s * x


@njit(cache=True, nogil=True)
def _link(F, d, a, ca, sa):
    for i in range(3):
        F[9 + i] += d * F[6 + i]
        F[9 + i] += a * F[i]
        y, z = F[3 + i], F[6 + i]
        F[3 + i] = ca * y + sa * z
        F[6 + i] = ca * z - sa * y


@njit(cache=True, nogil=True)
def solve_batch(T, general, quartic, k, G0inv, g6, s0, sc, ss, Minv, A, B, d, a, ca, sa, off,
                q, valid, wc_out, code, measure, arm_found, need):
    """Fill the fixed-slot outputs for poses ``T`` ``(n, 4, 4)`` (see pieper.solve)."""
    n = T.shape[0]
    t3 = np.empty(4)
    c3 = np.empty(4)
    s3 = np.empty(4)
    t2 = np.empty(4)
    c2a = np.empty(4)
    s2a = np.empty(4)
    t1 = np.empty(4)
    c1a = np.empty(4)
    s1a = np.empty(4)
    ok = np.empty(4, np.bool_)
    r3 = np.empty(2)
    ok3 = np.empty(2, np.bool_)
    re = np.empty(4)
    im = np.empty(4)
    F0 = np.zeros(12)  # the frame after G0: J1
    F0[0] = 1.0
    F0[4] = 1.0
    F0[8] = 1.0
    _link(F0, d[0], a[0], ca[0], sa[0])
    F = np.empty(12)
    Fs = np.empty((4, 12))  # J4 frame of each arm solution
    O = np.empty((4, 9))  # o2, z2, o3 of each arm solution
    Z3 = np.empty((4, 3))
    X1 = np.empty((4, 3))
    werr = np.empty(4)
    # constants of the general case
    Vc0 = Minv[0, 0] * k[K_G1C] + Minv[0, 1] * k[K_G2C]
    Vc1 = Minv[1, 0] * k[K_G1C] + Minv[1, 1] * k[K_G2C]
    Vs0 = Minv[0, 0] * k[K_G1S] + Minv[0, 1] * k[K_G2S]
    Vs1 = Minv[1, 0] * k[K_G1S] + Minv[1, 1] * k[K_G2S]
    S0S0 = s0[0] * s0[0] + s0[1] * s0[1]
    S0Sc = s0[0] * sc[0] + s0[1] * sc[1]
    S0Ss = s0[0] * ss[0] + s0[1] * ss[1]
    Q11 = Vc0 * Vc0 + Vc1 * Vc1 - (sc[0] * sc[0] + sc[1] * sc[1])
    Q22 = Vs0 * Vs0 + Vs1 * Vs1 - (ss[0] * ss[0] + ss[1] * ss[1])
    Q12 = Vc0 * Vs0 + Vc1 * Vs1 - (sc[0] * ss[0] + sc[1] * ss[1])
    ca4, sa4, ca5, sa5, ca6, sa6 = ca[4], sa[4], ca[5], sa[5], ca[6], sa[6]
    for i in range(n):
        # wrist centre and its position in J1
        w0 = T[i, 0, 0] * g6[0] + T[i, 0, 1] * g6[1] + T[i, 0, 2] * g6[2] + T[i, 0, 3]
        w1 = T[i, 1, 0] * g6[0] + T[i, 1, 1] * g6[1] + T[i, 1, 2] * g6[2] + T[i, 1, 3]
        w2 = T[i, 2, 0] * g6[0] + T[i, 2, 1] * g6[1] + T[i, 2, 2] * g6[2] + T[i, 2, 3]
        wc_out[i, 0], wc_out[i, 1], wc_out[i, 2] = w0, w1, w2
        px = w0 * G0inv[0, 0] + w1 * G0inv[0, 1] + w2 * G0inv[0, 2] + G0inv[0, 3]
        py = w0 * G0inv[1, 0] + w1 * G0inv[1, 1] + w2 * G0inv[1, 2] + G0inv[1, 3]
        pz = w0 * G0inv[2, 0] + w1 * G0inv[2, 1] + w2 * G0inv[2, 2] + G0inv[2, 3]
        P1 = 0.5 * ((px * px + py * py + pz * pz) - k[K_T1SQ] - k[K_S0SQ]) - k[K_AZ] * s0[2]
        P2 = pz - k[K_T1Z] - k[K_BZ] * s0[2]
        # ---- theta3 and theta2
        if general:
            V00 = Minv[0, 0] * P1 + Minv[0, 1] * P2
            V01 = Minv[1, 0] * P1 + Minv[1, 1] * P2
            Q00 = (V00 * V00 + V01 * V01) - S0S0
            Q01 = (V00 * Vc0 + V01 * Vc1) - S0Sc
            Q02 = (V00 * Vs0 + V01 * Vs1) - S0Ss
            k0 = Q00 + 0.5 * (Q11 + Q22)
            if quartic:
                _trig2(k0, 2 * Q01, 2 * Q02, 0.5 * (Q11 - Q22), Q12, t3, c3, s3, ok, re, im)
            else:
                _affine(k0, 2 * Q01, 2 * Q02, t3, ok, 0)
                t3[2], t3[3] = t3[0], t3[1]
                ok[2] = False
                ok[3] = False
                for j in range(4):
                    c3[j] = math.cos(t3[j])
                    s3[j] = math.sin(t3[j])
            for j in range(4):
                Vx = V00 + Vc0 * c3[j] + Vs0 * s3[j]
                Vy = V01 + Vc1 * c3[j] + Vs1 * s3[j]
                Sx = s0[0] + sc[0] * c3[j] + ss[0] * s3[j]
                Sy = s0[1] + sc[1] * c3[j] + ss[1] * s3[j]
                t2[j], c2a[j], s2a[j] = _angle2cs(Sx, Sy, Vx, Vy)
        else:
            if k[K_NB] > 1e-12:
                kk0 = P1 - k[K_LAM] * P2
                kc, ks = k[K_G1C] - k[K_LAM] * k[K_G2C], k[K_G1S] - k[K_LAM] * k[K_G2S]
                C0, C1, gc, gs, Pg = B[0], B[1], k[K_G2C], k[K_G2S], P2
            else:
                kk0, kc, ks = P2, k[K_G2C], k[K_G2S]
                C0, C1, gc, gs, Pg = A[0], A[1], k[K_G1C], k[K_G1S], P1
            _affine(kk0, kc, ks, r3, ok3, 0)
            nC = math.sqrt(C0 * C0 + C1 * C1)
            phi0 = math.atan2(C1, C0)
            for r in range(2):
                cr, sr = math.cos(r3[r]), math.sin(r3[r])
                Sx = s0[0] + sc[0] * cr + ss[0] * sr
                Sy = s0[1] + sc[1] * cr + ss[1] * sr
                g = Pg + gc * cr + gs * sr
                nS = math.sqrt(Sx * Sx + Sy * Sy)
                x = g / (nC * nS if nS > 0 else 1.0)
                ok2 = abs(x) <= 1 + CLIP_TOL and nS > 1e-12
                dphi = math.acos(_clip1(x))
                aS = math.atan2(Sy, Sx)
                t2[2 * r] = phi0 + dphi - aS
                t2[2 * r + 1] = phi0 - dphi - aS
                t3[2 * r] = r3[r]
                t3[2 * r + 1] = r3[r]
                ok[2 * r] = ok3[r] and ok2
                ok[2 * r + 1] = ok3[r] and ok2
            for j in range(4):
                c3[j] = math.cos(t3[j])
                s3[j] = math.sin(t3[j])
                c2a[j] = math.cos(t2[j])
                s2a[j] = math.sin(t2[j])
        # ---- theta1 and the partial chain J1..J4
        pxy = math.sqrt(px * px + py * py)
        found = False
        for j in range(4):
            c2, s2 = c2a[j], s2a[j]
            sx = s0[0] + sc[0] * c3[j] + ss[0] * s3[j]
            sy = s0[1] + sc[1] * c3[j] + ss[1] * s3[j]
            sz = s0[2] + sc[2] * c3[j] + ss[2] * s3[j]
            ux, uy, uz = c2 * sx - s2 * sy, s2 * sx + c2 * sy, sz
            vx = ux + a[1]
            vy = ca[1] * uy - sa[1] * uz
            if pxy > 1e-12:
                t1[j], c1a[j], s1a[j] = _angle2cs(vx, vy, px, py)
            else:
                t1[j], c1a[j], s1a[j] = off[0], math.cos(off[0]), math.sin(off[0])
            for m in range(12):
                F[m] = F0[m]
            _rz(F, c1a[j], s1a[j])
            X1[j, 0], X1[j, 1], X1[j, 2] = F[0], F[1], F[2]
            _link(F, d[1], a[1], ca[1], sa[1])
            O[j, 0], O[j, 1], O[j, 2] = F[9], F[10], F[11]
            O[j, 3], O[j, 4], O[j, 5] = F[6], F[7], F[8]
            _rz(F, c2, s2)
            _link(F, d[2], a[2], ca[2], sa[2])
            O[j, 6], O[j, 7], O[j, 8] = F[9], F[10], F[11]
            Z3[j, 0], Z3[j, 1], Z3[j, 2] = F[6], F[7], F[8]
            _rz(F, c3[j], s3[j])
            _link(F, d[3], a[3], ca[3], sa[3])
            e0 = F[9] + d[4] * F[6] - w0
            e1 = F[10] + d[4] * F[7] - w1
            e2 = F[11] + d[4] * F[8] - w2
            werr[j] = math.sqrt(e0 * e0 + e1 * e1 + e2 * e2)
            for m in range(12):
                Fs[j, m] = F[m]
            found = found or ok[j]
        arm_found[i] = found
        # duplicates among the arm solutions (double roots, coincident branches)
        for j in range(1, 4):
            for kk in range(j):
                if ok[kk] and ok[j]:
                    same = (abs(c1a[j] - c1a[kk]) < DUPLICATE_TOL
                            and abs(s1a[j] - s1a[kk]) < DUPLICATE_TOL
                            and abs(c2a[j] - c2a[kk]) < DUPLICATE_TOL
                            and abs(s2a[j] - s2a[kk]) < DUPLICATE_TOL
                            and abs(c3[j] - c3[kk]) < DUPLICATE_TOL
                            and abs(s3[j] - s3[kk]) < DUPLICATE_TOL)
                    if same:
                        ok[j] = False
        # ---- wrist, labels and measures
        colx0, colx1, colx2 = T[i, 0, 0], T[i, 1, 0], T[i, 2, 0]
        colz0 = sa6 * T[i, 0, 1] + ca6 * T[i, 0, 2]
        colz1 = sa6 * T[i, 1, 1] + ca6 * T[i, 1, 2]
        colz2 = sa6 * T[i, 2, 1] + ca6 * T[i, 2, 2]
        # shoulder measure and the shoulder part of the code (o1, z1 are those of J1)
        r0, r1_, r2 = w0 - F0[9], w1 - F0[10], w2 - F0[11]
        rz1 = r0 * F0[6] + r1_ * F0[7] + r2 * F0[8]
        h0, h1, h2 = r0 - rz1 * F0[6], r1_ - rz1 * F0[7], r2 - rz1 * F0[8]
        shoulder = math.sqrt(h0 * h0 + h1 * h1 + h2 * h2)
        for j in range(4):
            hx = Fs[j, 0] * colz0 + Fs[j, 1] * colz1 + Fs[j, 2] * colz2
            hy = Fs[j, 3] * colz0 + Fs[j, 4] * colz1 + Fs[j, 5] * colz2
            hz = Fs[j, 6] * colz0 + Fs[j, 7] * colz1 + Fs[j, 8] * colz2
            wx = Fs[j, 0] * colx0 + Fs[j, 1] * colx1 + Fs[j, 2] * colx2
            wy = Fs[j, 3] * colx0 + Fs[j, 4] * colx1 + Fs[j, 5] * colx2
            wz = Fs[j, 6] * colx0 + Fs[j, 7] * colx1 + Fs[j, 8] * colx2
            xw = (ca4 * ca5 - hz) / (sa4 * sa5)
            okw = abs(xw) <= 1 + CLIP_TOL
            hxy = math.sqrt(hx * hx + hy * hy)
            cw = _clip1(xw)
            K = sa5 * ca4 * cw + ca5 * sa4
            sw = math.sqrt(max(hxy * hxy - K * K, 0.0)) / abs(sa5)
            acw = math.atan2(sw, cw)
            wdet = abs(sa4 * sa5) * sw
            singular_w = wdet < WRIST_SINGULAR_TOL
            h5 = math.sqrt(sw * sw + cw * cw)
            ca5w, sa5w = (cw / h5, sw / h5) if h5 > 0 else (1.0, 0.0)
            # arm code and elbow measure (branches.arm_codes / arm_measures)
            back = (r0 * X1[j, 0] + r1_ * X1[j, 1] + r2 * X1[j, 2]) < 0
            u0, u1, u2 = w0 - O[j, 0], w1 - O[j, 1], w2 - O[j, 2]
            z20, z21, z22 = O[j, 3], O[j, 4], O[j, 5]
            m0, m1, m2 = z21 * u2 - z22 * u1, z22 * u0 - z20 * u2, z20 * u1 - z21 * u0
            up_dir = m0 * F0[6] + m1 * F0[7] + m2 * F0[8]
            alt = m0 * X1[j, 0] + m1 * X1[j, 1] + m2 * X1[j, 2]
            nm = math.sqrt(m0 * m0 + m1 * m1 + m2 * m2)
            sg = up_dir if abs(up_dir) > 1e-12 * (nm + 1e-300) else alt
            sgn = -1.0 if sg < 0 else 1.0
            down = sgn * ((O[j, 6] - O[j, 0]) * m0 + (O[j, 7] - O[j, 1]) * m1 + (O[j, 8] - O[j, 2]) * m2) < 0
            v0, v1, v2 = w0 - O[j, 6], w1 - O[j, 7], w2 - O[j, 8]
            z30, z31, z32 = Z3[j, 0], Z3[j, 1], Z3[j, 2]
            n0, n1, n2 = z31 * v2 - z32 * v1, z32 * v0 - z30 * v2, z30 * v1 - z31 * v0
            n23 = nm * math.sqrt(n0 * n0 + n1 * n1 + n2 * n2)
            c0_, c1_, c2_ = m1 * n2 - m2 * n1, m2 * n0 - m0 * n2, m0 * n1 - m1 * n0
            elbow = math.sqrt(c0_ * c0_ + c1_ * c1_ + c2_ * c2_) / max(n23, 1e-300) if n23 > 1e-300 else 0.0
            code4 = 4 * np.int8(back) + 2 * np.int8(down)
            for w in range(2):
                slot = 2 * j + w
                t5 = acw if w == 0 else -acw
                c5 = ca5w
                s5 = sa5w if w == 0 else -sa5w
                vx5 = sa5 * s5
                vy5 = -sa5 * c5 * ca4 - ca5 * sa4
                if hxy > 1e-12:
                    t4, c4_, s4_ = _angle2cs(vx5, vy5, hx, hy)
                else:
                    t4, c4_, s4_ = off[3], math.cos(off[3]), math.sin(off[3])
                x1_, y1_ = c4_ * wx + s4_ * wy, -s4_ * wx + c4_ * wy
                y2_, z2_ = ca4 * y1_ + sa4 * wz, -sa4 * y1_ + ca4 * wz
                x3_, y3_ = c5 * x1_ + s5 * y2_, -s5 * x1_ + c5 * y2_
                y4_ = ca5 * y3_ + sa5 * z2_
                t6 = math.atan2(y4_, x3_)
                q[i, slot, 0] = t1[j] - off[0]
                q[i, slot, 1] = t2[j] - off[1]
                q[i, slot, 2] = t3[j] - off[2]
                q[i, slot, 3] = t4 - off[3]
                q[i, slot, 4] = t5 - off[4]
                q[i, slot, 5] = t6 - off[5]
                v = ok[j] and okw and (w == 0 or not singular_w)
                valid[i, slot] = v
                need[i, slot] = v and werr[j] > POLISH_TRIGGER
                code[i, slot] = code4 + np.int8(-sa4 * sa5 * s5 < 0)
                measure[i, slot, 0] = wdet
                measure[i, slot, 1] = shoulder
                measure[i, slot, 2] = elbow
