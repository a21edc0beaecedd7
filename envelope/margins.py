"""Worst margins of many configurations, compiled: what a layout map needs from the clearance engine.

``CompiledMargins.build(engine)`` takes the pairs, shapes, paddings and required clearances of a
``ClearanceEngine`` and ``worst_margins(q)`` returns, per configuration, the engine's two summary
values -- the worst margin (smallest distance minus required clearance over the pairs that are not
allowed contacts) and the overall status -- from one compiled loop per configuration, without the
per-pair tables.

Supported cells: bodies that are convex hulls or boxes, zones that are boxes, convex hulls,
half-spaces or triangle meshes (non-watertight, or watertight and consistently wound). ``build``
returns None for anything else (spheres, capsules, cylinders; meshes that need trimesh's ray test),
and the caller keeps using the engine.

Per configuration, per shape pair (as the engine pairs them):

- a cheap lower bound first: bounding spheres (body-body), the signed distance of the body's sphere
  centre to the half-space, or its distance to the zone's axis-aligned box, less the sphere radius;
  pairs are visited in order of that bound's margin and the visit stops at the first whose margin is
  above 0 and above the worst found (it and every later pair is clear and cannot be the worst: the
  engine's pruning rule);
- then the exact value: a half-space against the posed vertices (exact signed distance, depth
  included); two polytopes by GJK (``envelope.gjk``), the value being the support-function gap along
  the GJK direction, a certified lower bound within about 1e-12 m of the distance; a zone mesh as
  the minimum over its triangles (each a polytope; triangles whose bounding sphere cannot beat the
  minimum found are skipped), and, when the body is clear of every triangle of a watertight mesh,
  the engine's inside tests (the body's interior point by winding number, the mesh's first vertex in
  the body hull).
- Padding is subtracted as in the engine. A zone mesh touched (bound - padding <= 0) has no defined
  depth: the margin is -inf, status intrusion, as in the engine. Two overlapping polytopes: the
  depth by EPA (``gjk.penetration_bound``, a certified lower bound on the signed distance, equal to
  it to about 1e-9 m); in the rare case that GJK touched without enclosing the origin (or did not
  settle) the margin is returned as the upper bound ``-padding - required`` and the configuration is
  flagged ``approximate`` (the map asks the engine for those).
- A pair whose GJK lower bound already shows it clear by more than the worst margin found stops
  there (it can be neither the worst pair nor a finding).

So the verdicts are the engine's (exact, up to the engine's own slack of about 1e-6 m below the true
distance at a threshold), and every margin not flagged equals the engine's to 1e-5 m and python-fcl's to
its tolerance
(tests/test_margins.py).
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

from . import geometry as g
from .gjk import ABOVE, SEPARATED, TOUCHING, gjk_points, penetration_bound, pose_points

_POLY, _HALF, _MESH = 0, 1, 2
_CLEAR, _BELOW, _INTRUSION = 0, 1, 2


class CompiledMargins:
    """Compiled ``(worst_margin, overall)`` of a ``ClearanceEngine``'s configurations (see module doc)."""

    def __init__(self, engine, arrays):
        self.engine = engine
        self._a = arrays

    @classmethod
    def build(cls, engine) -> "CompiledMargins | None":
        from .clearance import _KIND_HALF, _KIND_MESH, _polytope_vertices

        slots = engine._slots
        S = len(slots)
        kind = np.zeros(S, np.int64)
        body = np.array([s.body for s in slots], np.int64)
        verts, vstart = [], [0]
        tris, tstart = [], [0]
        center, radius = np.zeros((S, 3)), np.zeros(S)
        hs_n, hs_off = np.zeros((S, 3)), np.zeros(S)
        lo, hi = np.zeros((S, 3)), np.zeros((S, 3))
        inside_test = np.zeros(S, np.bool_)
        interior = np.zeros((S, 3))
        for k, s in enumerate(slots):
            v = np.zeros((0, 3))
            if s.kind == _KIND_HALF:
                kind[k] = _HALF
                hs_n[k], hs_off[k] = s.shape.normal, s.shape.offset
            elif s.kind == _KIND_MESH:
                if s.body >= 0 or (s.shape.watertight and not s.wound):
                    return None
                kind[k] = _MESH
                tris.append(np.asarray(s.tris, dtype=np.float64))
                v = np.asarray(s.shape.vertices, dtype=np.float64)
                inside_test[k] = bool(s.shape.watertight)
            else:
                v = _polytope_vertices(s.shape)
                if v is None:
                    return None
                kind[k] = _POLY
            verts.append(v)
            vstart.append(vstart[-1] + len(v))
            tstart.append(tstart[-1] + (len(tris[-1]) if kind[k] == _MESH else 0))
            if kind[k] != _HALF:
                center[k], radius[k] = s.center, s.radius
                if s.body < 0:
                    lo[k], hi[k] = v.min(axis=0), v.max(axis=0)
                interior[k] = g.interior_point(s.shape) if s.body >= 0 else v[0]
        V = np.ascontiguousarray(np.concatenate(verts) if verts else np.zeros((0, 3)))
        T = np.ascontiguousarray(np.concatenate(tris) if tris else np.zeros((0, 3, 3)))
        tc = T.mean(axis=1) if len(T) else np.zeros((0, 3))
        tr = np.sqrt(((T - tc[:, None]) ** 2).sum(axis=2)).max(axis=1) if len(T) else np.zeros(0)
        pairs = engine.pairs
        req = np.array([p.required for p in pairs], dtype=np.float64)
        allowed = np.array([bool(p.allowed) for p in pairs], dtype=np.bool_)
        pad = np.asarray(engine._pair_pad, dtype=np.float64)
        sp_pair = np.asarray(engine._sp_pair)
        arrays = dict(
            kind=kind, body=body, V=V, vstart=np.array(vstart, np.int64), T=T, tstart=np.array(tstart, np.int64),
            tc=np.ascontiguousarray(tc), tr=np.ascontiguousarray(tr), center=center, radius=radius, hs_n=hs_n,
            hs_off=hs_off, lo=lo, hi=hi, inside_test=inside_test, interior=interior,
            sp_a=np.asarray(engine._sp_a, np.int64), sp_b=np.asarray(engine._sp_b, np.int64),
            sp_pair=sp_pair.astype(np.int64), req=req, allowed=allowed, pad=pad,
        )
        return cls(engine, arrays)

    def worst_margins(self, q) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """``(worst_margin (n,), overall (n,) int8, approximate (n,) bool)`` for ``q (n, 6)`` radians.

        ``overall`` uses the engine's status codes; ``approximate`` marks configurations with two
        overlapping polytopes, whose worst margin is only an upper bound (see module doc).
        """
        e = self.engine
        q2 = np.atleast_2d(e._q(q))
        n = len(q2)
        margin, overall, approx = np.empty(n), np.empty(n, np.int8), np.empty(n, np.bool_)
        a = self._a
        nb = e._n_body_slots
        for i in range(0, n, 1024):
            W = e._world_from_frames(q2[i:i + 1024])[:, e._S_frame[:nb]]
            R = np.ascontiguousarray(W[..., :3, :3])
            t = np.ascontiguousarray(W[..., :3, 3])
            _kernel(R, t, a["kind"], a["body"], a["V"], a["vstart"], a["T"], a["tstart"], a["tc"], a["tr"],
                    a["center"], a["radius"], a["hs_n"], a["hs_off"], a["lo"], a["hi"], a["inside_test"],
                    a["interior"], a["sp_a"], a["sp_b"], a["sp_pair"], a["req"], a["allowed"], a["pad"],
                    margin[i:i + 1024], overall[i:i + 1024], approx[i:i + 1024])
        return margin, overall, approx


@njit(cache=True, nogil=True)
def _gap(PA, PB, pa, pb):
    """Support gap of hull(PA) and hull(PB) along ``pb - pa`` (a lower bound on their distance)."""
    u0, u1, u2 = pb[0] - pa[0], pb[1] - pa[1], pb[2] - pa[2]
    nu = math.sqrt(u0 * u0 + u1 * u1 + u2 * u2)
    u0, u1, u2 = u0 / nu, u1 / nu, u2 / nu
    ha = -np.inf
    for i in range(PA.shape[0]):
        ha = max(ha, PA[i, 0] * u0 + PA[i, 1] * u1 + PA[i, 2] * u2)
    hb = np.inf
    for i in range(PB.shape[0]):
        hb = min(hb, PB[i, 0] * u0 + PB[i, 1] * u1 + PB[i, 2] * u2)
    return hb - ha


@njit(cache=True, nogil=True)
def _kernel(R, t, kind, body, V, vstart, T, tstart, tc, tr, center, radius, hs_n, hs_off, lo, hi, inside_test,
            interior, sp_a, sp_b, sp_pair, req, allowed, pad, margin_out, overall_out, approx_out):
    n = R.shape[0]
    S = kind.shape[0]
    M = sp_a.shape[0]
    nv_max = 1
    for s in range(S):
        nv_max = max(nv_max, vstart[s + 1] - vstart[s])
    posed = np.empty((S, nv_max, 3))  # world vertices of each body slot, filled when first needed
    have = np.zeros(S, np.bool_)
    cw = np.empty((S, 3))  # world sphere centres
    cheap = np.empty(M)
    pa = np.empty(3)
    pb = np.empty(3)
    tri = np.empty((3, 3))
    pt = np.empty((1, 3))
    Wsx = np.empty((4, 3))
    nrm = np.empty(3)
    for i in range(n):
        for s in range(S):
            have[s] = False
            if body[s] >= 0:
                for r in range(3):
                    cw[s, r] = R[i, s, r, 0] * center[s, 0] + R[i, s, r, 1] * center[s, 1] \
                        + R[i, s, r, 2] * center[s, 2] + t[i, s, r]
            else:
                cw[s, 0], cw[s, 1], cw[s, 2] = center[s, 0], center[s, 1], center[s, 2]
        for m in range(M):
            p = sp_pair[m]
            if allowed[p]:
                cheap[m] = np.inf
                continue
            sa, sb = sp_a[m], sp_b[m]
            if kind[sb] == _HALF:
                lb = cw[sa, 0] * hs_n[sb, 0] + cw[sa, 1] * hs_n[sb, 1] + cw[sa, 2] * hs_n[sb, 2] - hs_off[sb] - radius[sa]
            elif body[sb] >= 0:
                d0, d1, d2 = cw[sa, 0] - cw[sb, 0], cw[sa, 1] - cw[sb, 1], cw[sa, 2] - cw[sb, 2]
                lb = math.sqrt(d0 * d0 + d1 * d1 + d2 * d2) - radius[sa] - radius[sb]
            else:
                dd = 0.0
                for r in range(3):
                    x = max(lo[sb, r] - cw[sa, r], 0.0, cw[sa, r] - hi[sb, r])
                    dd += x * x
                lb = math.sqrt(dd) - radius[sa]
            cheap[m] = lb - pad[p] - req[p]
        order = np.argsort(cheap)
        worst = np.inf
        status = _CLEAR
        approx = False
        for m in order:
            cm = cheap[m]
            if cm == np.inf or (cm > worst and cm > 0.0):
                break
            p = sp_pair[m]
            sa, sb = sp_a[m], sp_b[m]
            if not have[sa]:
                pose_points(V[vstart[sa]:vstart[sa + 1]], R[i, sa], t[i, sa], posed[sa])
                have[sa] = True
            PA = posed[sa, :vstart[sa + 1] - vstart[sa]]
            if kind[sb] == _HALF:
                lbv = np.inf
                for k in range(PA.shape[0]):
                    lbv = min(lbv, PA[k, 0] * hs_n[sb, 0] + PA[k, 1] * hs_n[sb, 1] + PA[k, 2] * hs_n[sb, 2])
                d = lbv - hs_off[sb] - pad[p]
                mg = d - req[p]
            elif kind[sb] == _POLY:
                if body[sb] >= 0:
                    if not have[sb]:
                        pose_points(V[vstart[sb]:vstart[sb + 1]], R[i, sb], t[i, sb], posed[sb])
                        have[sb] = True
                    PB = posed[sb, :vstart[sb + 1] - vstart[sb]]
                else:
                    PB = V[vstart[sb]:vstart[sb + 1]]
                # a pair clear by more than the worst found cannot matter: GJK may stop there
                dist, state = gjk_points(PA, PB, pa, pb, Wsx, pad[p] + req[p] + max(worst, 0.0))
                if state == ABOVE:
                    continue
                if state == SEPARATED:
                    d = max(_gap(PA, PB, pa, pb), 0.0) - pad[p]
                    mg = d - req[p]
                elif state == TOUCHING:
                    lbv, _, found = penetration_bound(PA, PB, Wsx, nrm)
                    if found:
                        d = min(lbv, 0.0) - pad[p]
                        mg = d - req[p]
                    else:
                        d = 0.0
                        mg = -pad[p] - req[p]
                        approx = True
                else:  # not settled: its lower bound is not known here
                    d = 0.0
                    mg = -pad[p] - req[p]
                    approx = True
            else:  # zone mesh: minimum over triangles, then the inside tests
                best = np.inf
                touched = False
                enough = pad[p] + req[p] + max(worst, 0.0)  # no need to know a triangle beyond this
                for k in range(tstart[sb], tstart[sb + 1]):
                    d0, d1, d2 = cw[sa, 0] - tc[k, 0], cw[sa, 1] - tc[k, 1], cw[sa, 2] - tc[k, 2]
                    if math.sqrt(d0 * d0 + d1 * d1 + d2 * d2) - radius[sa] - tr[k] >= best:
                        continue
                    for u in range(3):
                        for r in range(3):
                            tri[u, r] = T[k, u, r]
                    dist, state = gjk_points(PA, tri, pa, pb, Wsx, min(best, enough))
                    if state == ABOVE:
                        best = min(best, dist)
                        continue
                    if state != SEPARATED:
                        touched = True
                        break
                    best = min(best, max(_gap(PA, tri, pa, pb), 0.0))
                d = best - pad[p]
                if not touched and d > 0.0 and inside_test[sb]:
                    for r in range(3):
                        pt[0, r] = R[i, sa, r, 0] * interior[sa, 0] + R[i, sa, r, 1] * interior[sa, 1] \
                            + R[i, sa, r, 2] * interior[sa, 2] + t[i, sa, r]
                    if abs(g.winding_of_triangles(T, tstart[sb], tstart[sb + 1], pt[0])) > 0.5:
                        touched = True
                    else:
                        pt[0, 0], pt[0, 1], pt[0, 2] = V[vstart[sb], 0], V[vstart[sb], 1], V[vstart[sb], 2]
                        dist, state = gjk_points(PA, pt, pa, pb, Wsx)
                        if state == TOUCHING:
                            touched = True
                if touched or d <= 0.0:
                    mg = -np.inf
                    d = 0.0
                else:
                    mg = d - req[p]
            if d <= 0.0:
                status = _INTRUSION
            elif mg < 0.0 and status < _BELOW:
                status = _BELOW
            worst = min(worst, mg)
        margin_out[i] = worst
        overall_out[i] = status
        approx_out[i] = approx
