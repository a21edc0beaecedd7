"""Distance and closest points of two separated convex polytopes (GJK), compiled, over a batch of poses.

Gilbert, Johnson & Keerthi (1988), "A fast procedure for computing the distance between complex
objects in three-dimensional space", IEEE J. Robotics and Automation 4(2); the closest point of a
simplex to the origin by Voronoi regions as in Ericson (2005), *Real-Time Collision Detection*,
sections 5.1.2 (segment), 5.1.5 (triangle) and 5.1.6 (tetrahedron), with the simplex reduced to the
points that support the closest point.

Each polytope is the convex hull of a vertex array in its own frame, posed by ``R (k, 3, 3)``,
``t (k, 3)``. For each pose the result is the distance and a closest point on each polytope (convex
combinations of vertices, so each lies in its polytope and their separation is an upper bound on the
distance whatever the rounding), and a state: apart, touching or overlapping, or not settled (the
caller asks another method for the last two). The clearance
engine uses the points only as a direction for its certified support-function bounds, so a slightly
unconverged answer loosens a bound, never breaks it.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

MAX_ITER = 64
REL_TOL = 1e-12
"""Stop when ``|v|^2 - v.w <= REL_TOL |v|^2`` (the lower bound ``v.w / |v|`` within about 5e-13 of ``|v|``)."""
TOUCH_TOL = 1e-12
"""m: a distance below this counts as touching."""
SEPARATED, TOUCHING, UNSETTLED, ABOVE, PENETRATING = 0, 1, 2, 3, 4
"""The ``state`` of a query (``ABOVE``: stopped early, the distance is at least the returned value,
which is at least the ``stop_above`` asked for; ``PENETRATING``: overlapping, depth found by EPA)."""


@njit(cache=True, nogil=True)
def _support(P, d0, d1, d2, out):
    """Support point of the point set ``P (m, 3)`` (world) along direction ``d``."""
    best, idx = -np.inf, 0
    for i in range(P.shape[0]):
        s = P[i, 0] * d0 + P[i, 1] * d1 + P[i, 2] * d2
        if s > best:
            best, idx = s, i
    out[0], out[1], out[2] = P[idx, 0], P[idx, 1], P[idx, 2]


@njit(cache=True, nogil=True)
def _dot3(a, b):
    return a[0] * b[0] + a[1] * b[1] + a[2] * b[2]


@njit(cache=True, nogil=True)
def _keep(W, A, B, lam, n, idx, m, wts):
    """Reduce the simplex to the points ``idx[:m]`` with weights ``wts[:m]``."""
    tw = np.empty((4, 3))
    ta = np.empty((4, 3))
    tb = np.empty((4, 3))
    for j in range(m):
        for r in range(3):
            tw[j, r] = W[idx[j], r]
            ta[j, r] = A[idx[j], r]
            tb[j, r] = B[idx[j], r]
    for j in range(m):
        for r in range(3):
            W[j, r] = tw[j, r]
            A[j, r] = ta[j, r]
            B[j, r] = tb[j, r]
        lam[j] = wts[j]
    return m


@njit(cache=True, nogil=True)
def _closest_triangle(W, i0, i1, i2, idx, wts):
    """Closest point of triangle ``W[i0] W[i1] W[i2]`` to the origin (Ericson 5.1.5, p = 0).

    Returns the number of supporting points; ``idx``/``wts`` their indices and weights.
    """
    a, b, c = W[i0], W[i1], W[i2]
    ab0, ab1, ab2 = b[0] - a[0], b[1] - a[1], b[2] - a[2]
    ac0, ac1, ac2 = c[0] - a[0], c[1] - a[1], c[2] - a[2]
    ap0, ap1, ap2 = -a[0], -a[1], -a[2]
    d1 = ab0 * ap0 + ab1 * ap1 + ab2 * ap2
    d2 = ac0 * ap0 + ac1 * ap1 + ac2 * ap2
    if d1 <= 0.0 and d2 <= 0.0:
        idx[0], wts[0] = i0, 1.0
        return 1
    bp0, bp1, bp2 = -b[0], -b[1], -b[2]
    d3 = ab0 * bp0 + ab1 * bp1 + ab2 * bp2
    d4 = ac0 * bp0 + ac1 * bp1 + ac2 * bp2
    if d3 >= 0.0 and d4 <= d3:
        idx[0], wts[0] = i1, 1.0
        return 1
    vc = d1 * d4 - d3 * d2
    if vc <= 0.0 and d1 >= 0.0 and d3 <= 0.0:
        v = d1 / (d1 - d3)
        idx[0], idx[1], wts[0], wts[1] = i0, i1, 1.0 - v, v
        return 2
    cp0, cp1, cp2 = -c[0], -c[1], -c[2]
    d5 = ab0 * cp0 + ab1 * cp1 + ab2 * cp2
    d6 = ac0 * cp0 + ac1 * cp1 + ac2 * cp2
    if d6 >= 0.0 and d5 <= d6:
        idx[0], wts[0] = i2, 1.0
        return 1
    vb = d5 * d2 - d1 * d6
    if vb <= 0.0 and d2 >= 0.0 and d6 <= 0.0:
        w = d2 / (d2 - d6)
        idx[0], idx[1], wts[0], wts[1] = i0, i2, 1.0 - w, w
        return 2
    va = d3 * d6 - d5 * d4
    if va <= 0.0 and (d4 - d3) >= 0.0 and (d5 - d6) >= 0.0:
        w = (d4 - d3) / ((d4 - d3) + (d5 - d6))
        idx[0], idx[1], wts[0], wts[1] = i1, i2, 1.0 - w, w
        return 2
    den = va + vb + vc
    if den == 0.0:  # degenerate (zero-area) triangle: best of its edges' ends
        idx[0], wts[0] = i0, 1.0
        return 1
    v = vb / den
    w = vc / den
    idx[0], idx[1], idx[2], wts[0], wts[1], wts[2] = i0, i1, i2, 1.0 - v - w, v, w
    return 3


@njit(cache=True, nogil=True)
def _point(W, idx, wts, m, out):
    for r in range(3):
        s = 0.0
        for j in range(m):
            s += wts[j] * W[idx[j], r]
        out[r] = s


@njit(cache=True, nogil=True)
def _side(W, i0, i1, i2, i3):
    """Signs of (origin) and (W[i3]) relative to the plane of face i0 i1 i2: their product."""
    a, b, c, d = W[i0], W[i1], W[i2], W[i3]
    ab0, ab1, ab2 = b[0] - a[0], b[1] - a[1], b[2] - a[2]
    ac0, ac1, ac2 = c[0] - a[0], c[1] - a[1], c[2] - a[2]
    n0, n1, n2 = ab1 * ac2 - ab2 * ac1, ab2 * ac0 - ab0 * ac2, ab0 * ac1 - ab1 * ac0
    so = -(a[0] * n0 + a[1] * n1 + a[2] * n2)
    sd = (d[0] - a[0]) * n0 + (d[1] - a[1]) * n1 + (d[2] - a[2]) * n2
    return so * sd


@njit(cache=True, nogil=True)
def _reduce(W, A, B, lam, n, v):
    """Closest point ``v`` of the simplex ``W[:n]`` to the origin; reduces the simplex to its support.

    Returns the new size, or -1 if the origin is inside a tetrahedron (overlap).
    """
    idx = np.empty(4, np.int64)
    wts = np.empty(4)
    if n == 1:
        v[0], v[1], v[2] = W[0, 0], W[0, 1], W[0, 2]
        lam[0] = 1.0
        return 1
    if n == 2:
        d0, d1, d2 = W[1, 0] - W[0, 0], W[1, 1] - W[0, 1], W[1, 2] - W[0, 2]
        dd = d0 * d0 + d1 * d1 + d2 * d2
        s = -(W[0, 0] * d0 + W[0, 1] * d1 + W[0, 2] * d2) / dd if dd > 0 else 0.0
        if s <= 0.0:
            idx[0], wts[0], m = 0, 1.0, 1
        elif s >= 1.0:
            idx[0], wts[0], m = 1, 1.0, 1
        else:
            idx[0], idx[1], wts[0], wts[1], m = 0, 1, 1.0 - s, s, 2
        _point(W, idx, wts, m, v)
        return _keep(W, A, B, lam, n, idx, m, wts)
    if n == 3:
        m = _closest_triangle(W, 0, 1, 2, idx, wts)
        _point(W, idx, wts, m, v)
        return _keep(W, A, B, lam, n, idx, m, wts)
    # tetrahedron: the origin is inside if no face plane separates it from the opposite vertex; else
    # the closest point is the nearest of the faces' closest points (all four are tried: for a nearly
    # flat tetrahedron the plane tests cannot be trusted to pick the face)
    faces = ((0, 1, 2, 3), (0, 1, 3, 2), (0, 2, 3, 1), (1, 2, 3, 0))
    outside = False
    for f in faces:
        if _side(W, f[0], f[1], f[2], f[3]) <= 0.0:
            outside = True
    if not outside:
        return -1
    best = np.inf
    bidx = np.empty(4, np.int64)
    bwts = np.empty(4)
    bm = 0
    p = np.empty(3)
    for f in faces:
        if True:
            m = _closest_triangle(W, f[0], f[1], f[2], idx, wts)
            _point(W, idx, wts, m, p)
            dd = p[0] * p[0] + p[1] * p[1] + p[2] * p[2]
            if dd < best:
                best, bm = dd, m
                for j in range(m):
                    bidx[j], bwts[j] = idx[j], wts[j]
    _point(W, bidx, bwts, bm, v)
    return _keep(W, A, B, lam, n, bidx, bm, bwts)


@njit(cache=True, nogil=True)
def gjk_points(PA, PB, pa, pb, W, stop_above=np.inf):
    """Distance between the convex hulls of world point sets ``PA (na, 3)`` and ``PB (nb, 3)``.

    Writes the closest points into ``pa``, ``pb`` (``(3,)``) and returns ``(distance, state)``.
    ``W (4, 3)`` is scratch; when the state is ``TOUCHING`` because the origin lies inside a
    tetrahedron of the difference, it holds that tetrahedron (a start for ``penetration_bound``) and
    ``W[0, 0]`` is finite, else ``W[0, 0]`` is NaN. With ``stop_above`` finite the iteration stops as
    soon as its certified lower bound ``v.w / |v|`` reaches it (state ``ABOVE``, that bound returned).
    """
    A = np.empty((4, 3))
    B = np.empty((4, 3))
    lam = np.empty(4)
    W0, A0, B0, lam0 = np.empty((4, 3)), np.empty((4, 3)), np.empty((4, 3)), np.empty(4)
    v = np.empty(3)
    a = np.empty(3)
    b = np.empty(3)
    for r in range(3):  # start from the difference of two vertices
        A[0, r], B[0, r] = PA[0, r], PB[0, r]
        W[0, r] = A[0, r] - B[0, r]
        v[r] = W[0, r]
    lam[0] = 1.0
    n = 1
    settled = False
    inside = False
    enclosed = False
    for _ in range(MAX_ITER):
        vv = v[0] * v[0] + v[1] * v[1] + v[2] * v[2]
        if vv < TOUCH_TOL * TOUCH_TOL:
            inside = True
            break
        _support(PA, -v[0], -v[1], -v[2], a)
        _support(PB, v[0], v[1], v[2], b)
        w0, w1, w2 = a[0] - b[0], a[1] - b[1], a[2] - b[2]
        vw = v[0] * w0 + v[1] * w1 + v[2] * w2
        if vv - vw <= REL_TOL * vv:
            settled = True
            break
        if vw > 0.0 and vw >= stop_above * math.sqrt(vv):
            W[0, 0] = np.nan
            return vw / math.sqrt(vv), ABOVE
        dup = False
        for j in range(n):
            if W[j, 0] == w0 and W[j, 1] == w1 and W[j, 2] == w2:
                dup = True
        if dup:  # no new support point: converged to rounding
            settled = True
            break
        for j in range(n):
            lam0[j] = lam[j]
            for r in range(3):
                W0[j, r], A0[j, r], B0[j, r] = W[j, r], A[j, r], B[j, r]
        v0, v1, v2 = v[0], v[1], v[2]
        n0 = n
        W[n, 0], W[n, 1], W[n, 2] = w0, w1, w2
        A[n, 0], A[n, 1], A[n, 2] = a[0], a[1], a[2]
        B[n, 0], B[n, 1], B[n, 2] = b[0], b[1], b[2]
        n += 1
        n_new = _reduce(W, A, B, lam, n, v)
        if n_new < 0:
            inside = True
            enclosed = True
            break
        if v[0] * v[0] + v[1] * v[1] + v[2] * v[2] >= vv:  # no progress (rounding): keep the last simplex
            for j in range(n0):
                lam[j] = lam0[j]
                for r in range(3):
                    W[j, r], A[j, r], B[j, r] = W0[j, r], A0[j, r], B0[j, r]
            v[0], v[1], v[2] = v0, v1, v2
            n = n0
            settled = True
            break
        n = n_new
    for r in range(3):
        sa = 0.0
        sb = 0.0
        for j in range(n):
            sa += lam[j] * A[j, r]
            sb += lam[j] * B[j, r]
        pa[r] = sa
        pb[r] = sb
    d0, d1, d2 = pb[0] - pa[0], pb[1] - pa[1], pb[2] - pa[2]
    dist = math.sqrt(d0 * d0 + d1 * d1 + d2 * d2)
    if not enclosed:
        W[0, 0] = np.nan
    if inside or dist <= TOUCH_TOL:
        return dist, TOUCHING
    return dist, SEPARATED if settled else UNSETTLED


@njit(cache=True, nogil=True)
def pose_points(V, R, t, out):
    """``out[:len(V)] = V @ R.T + t``."""
    for i in range(V.shape[0]):
        for r in range(3):
            out[i, r] = R[r, 0] * V[i, 0] + R[r, 1] * V[i, 1] + R[r, 2] * V[i, 2] + t[r]


@njit(cache=True, nogil=True)
def gjk_batch(Va, Ra, ta, Vb, Rb, tb, epa, dist, pa, pb, state):
    """For each pose ``i``: distance between hull(Va) posed ``Ra[i], ta[i]`` and hull(Vb) posed
    ``Rb[i], tb[i]``, closest points ``pa[i]``, ``pb[i]``, and ``state[i]``: ``SEPARATED``,
    ``TOUCHING`` (touching or overlapping) or ``UNSETTLED``. With ``epa``, overlapping poses go on to
    EPA from GJK's last simplex: ``state`` ``PENETRATING``, ``dist`` minus the depth (a certified
    lower bound on the signed distance), ``pa`` the deepest point of A along the separating
    direction ``n`` and ``pb = pa - depth n``."""
    PA = np.empty(Va.shape)
    PB = np.empty(Vb.shape)
    W = np.empty((4, 3))
    nrm = np.empty(3)
    a = np.empty(3)
    for i in range(Ra.shape[0]):
        pose_points(Va, Ra[i], ta[i], PA)
        pose_points(Vb, Rb[i], tb[i], PB)
        dist[i], state[i] = gjk_points(PA, PB, pa[i], pb[i], W, np.inf)
        if not epa or state[i] != TOUCHING:
            continue
        bound, _, found = penetration_bound(PA, PB, W, nrm)
        if not found:
            continue
        _support(PA, nrm[0], nrm[1], nrm[2], a)
        depth = max(-bound, 0.0)
        for r in range(3):
            pa[i, r] = a[r]
            pb[i, r] = a[r] - depth * nrm[r]
        dist[i], state[i] = -depth, PENETRATING


def _batch(Va, Ra, ta, Vb, Rb, tb, epa):
    Ra, Rb = np.ascontiguousarray(Ra, dtype=np.float64), np.ascontiguousarray(Rb, dtype=np.float64)
    ta, tb = np.ascontiguousarray(ta, dtype=np.float64), np.ascontiguousarray(tb, dtype=np.float64)
    k = len(Ra)
    dist, pa, pb, state = np.empty(k), np.empty((k, 3)), np.empty((k, 3)), np.empty(k, dtype=np.int8)
    gjk_batch(np.ascontiguousarray(Va, dtype=np.float64), Ra, ta, np.ascontiguousarray(Vb, dtype=np.float64),
              Rb, tb, epa, dist, pa, pb, state)
    return dist, pa, pb, state


def signed_distance(Va, Ra, ta, Vb, Rb, tb):
    """``(dist, pa, pb, state)`` as ``gjk_batch`` with EPA: the distance where apart (``SEPARATED``),
    minus the depth where overlapping (``PENETRATING``); other states for the caller to settle."""
    return _batch(Va, Ra, ta, Vb, Rb, tb, True)


def distance(Va, Ra, ta, Vb, Rb, tb):
    """``(dist (k,), pa (k, 3), pb (k, 3), state (k,))`` for vertex arrays and pose stacks (see module doc)."""
    return _batch(Va, Ra, ta, Vb, Rb, tb, False)


EPA_MAX_FACES = 512
EPA_MAX_ITER = 96
EPA_TOL = 1e-9
"""m: EPA stops when the support along the nearest face's normal is within this of the face."""


@njit(cache=True, nogil=True)
def _support_diff(PA, PB, n0, n1, n2, out, a, b):
    """Support point of hull(PA) - hull(PB) along ``n``."""
    _support(PA, n0, n1, n2, a)
    _support(PB, -n0, -n1, -n2, b)
    out[0], out[1], out[2] = a[0] - b[0], a[1] - b[1], a[2] - b[2]


@njit(cache=True, nogil=True)
def _face(P, i, j, k, F, N, D, f):
    """Face ``f`` = (i, j, k) with its unit normal and offset; False if degenerate."""
    a0, a1, a2 = P[j, 0] - P[i, 0], P[j, 1] - P[i, 1], P[j, 2] - P[i, 2]
    b0, b1, b2 = P[k, 0] - P[i, 0], P[k, 1] - P[i, 1], P[k, 2] - P[i, 2]
    n0, n1, n2 = a1 * b2 - a2 * b1, a2 * b0 - a0 * b2, a0 * b1 - a1 * b0
    nn = math.sqrt(n0 * n0 + n1 * n1 + n2 * n2)
    if nn < 1e-300:
        return False
    F[f, 0], F[f, 1], F[f, 2] = i, j, k
    N[f, 0], N[f, 1], N[f, 2] = n0 / nn, n1 / nn, n2 / nn
    D[f] = N[f, 0] * P[i, 0] + N[f, 1] * P[i, 1] + N[f, 2] * P[i, 2]
    return True


@njit(cache=True, nogil=True)
def penetration_bound(PA, PB, S, nrm):
    """Certified lower bound on the signed distance of two overlapping polytopes (<= -depth).

    The expanding polytope algorithm (van den Bergen 2001, "Proximity queries and penetration depth
    computation on 3D game objects", GDC) on hull(PA) - hull(PB), started from the tetrahedron ``S
    (4, 3)`` of the difference that encloses the origin (GJK's last simplex); the value returned is the support gap along the final
    face normal, ``-h(n)``, which is a lower bound on the signed distance whatever the iteration did.
    Returns ``(bound, upper, ok)``: the signed distance lies in ``[bound, upper]`` (``upper`` is minus
    the nearest face's distance: the expanded polytope lies inside the difference); ``ok`` is False
    when the start did not enclose the origin (the caller asks another method). ``nrm (3,)`` receives
    the direction whose gap is ``bound``.
    """
    P = np.empty((EPA_MAX_ITER + 4, 3))
    F = np.empty((EPA_MAX_FACES, 3), np.int64)
    N = np.empty((EPA_MAX_FACES, 3))
    D = np.empty(EPA_MAX_FACES)
    alive = np.zeros(EPA_MAX_FACES, np.bool_)
    a = np.empty(3)
    b = np.empty(3)
    w = np.empty(3)
    if not np.isfinite(S[0, 0]):
        return 0.0, 0.0, False
    for k in range(4):
        P[k, 0], P[k, 1], P[k, 2] = S[k, 0], S[k, 1], S[k, 2]
    np_ = 4
    c0 = (P[0, 0] + P[1, 0] + P[2, 0] + P[3, 0]) / 4
    c1 = (P[0, 1] + P[1, 1] + P[2, 1] + P[3, 1]) / 4
    c2 = (P[0, 2] + P[1, 2] + P[2, 2] + P[3, 2]) / 4
    nf = 0
    for (i, j, k) in ((0, 1, 2), (0, 3, 1), (0, 2, 3), (1, 3, 2)):
        if not _face(P, i, j, k, F, N, D, nf):
            return 0.0, 0.0, False
        # orient outwards (away from the tetrahedron's centroid)
        if N[nf, 0] * (P[i, 0] - c0) + N[nf, 1] * (P[i, 1] - c1) + N[nf, 2] * (P[i, 2] - c2) < 0:
            _face(P, i, k, j, F, N, D, nf)
        if D[nf] < -1e-12:  # the origin is outside this face: the start does not enclose it
            return 0.0, 0.0, False
        alive[nf] = True
        nf += 1
    best_bound = -np.inf
    last = 0.0
    edges = np.empty((3 * EPA_MAX_FACES, 2), np.int64)
    for _ in range(EPA_MAX_ITER):
        f, dmin = -1, np.inf
        for g in range(nf):
            if alive[g] and D[g] < dmin:
                f, dmin = g, D[g]
        if f < 0:
            return best_bound, 0.0, False
        n0, n1, n2 = N[f, 0], N[f, 1], N[f, 2]
        _support_diff(PA, PB, n0, n1, n2, w, a, b)
        h = w[0] * n0 + w[1] * n1 + w[2] * n2
        if -h > best_bound:  # gap along n: a certified lower bound on the signed distance
            best_bound = -h
            nrm[0], nrm[1], nrm[2] = n0, n1, n2
        if h - dmin <= EPA_TOL or np_ >= P.shape[0]:
            return best_bound, -dmin, True
        P[np_, 0], P[np_, 1], P[np_, 2] = w[0], w[1], w[2]
        # remove the faces the new point sees; the horizon is their edges not shared between two of them
        ne = 0
        for g in range(nf):
            if alive[g]:
                i0 = F[g, 0]
                if N[g, 0] * (w[0] - P[i0, 0]) + N[g, 1] * (w[1] - P[i0, 1]) + N[g, 2] * (w[2] - P[i0, 2]) > 0.0:
                    alive[g] = False
                    for (u, v) in ((F[g, 0], F[g, 1]), (F[g, 1], F[g, 2]), (F[g, 2], F[g, 0])):
                        shared = -1
                        for e in range(ne):
                            if edges[e, 0] == v and edges[e, 1] == u:
                                shared = e
                        if shared >= 0:
                            edges[shared, 0], edges[shared, 1] = edges[ne - 1, 0], edges[ne - 1, 1]
                            ne -= 1
                        else:
                            edges[ne, 0], edges[ne, 1] = u, v
                            ne += 1
        if nf + ne > EPA_MAX_FACES:
            return best_bound, -dmin, True
        for e in range(ne):
            if not _face(P, edges[e, 0], edges[e, 1], np_, F, N, D, nf):
                continue
            alive[nf] = True
            nf += 1
        np_ += 1
        last = -dmin
    return best_bound, last, True


def penetration(Va, Ra, ta, Vb, Rb, tb):
    """``(depth (k,), pa (k, 3), pb (k, 3), ok (k,))``: where the posed hulls overlap and EPA could
    start, ``ok`` and the depth (minus a certified lower bound on the signed distance) with the
    points of ``gjk_batch``."""
    dist, pa, pb, state = _batch(Va, Ra, ta, Vb, Rb, tb, True)
    ok = state == PENETRATING
    return np.where(ok, -dist, 0.0), pa, pb, ok
