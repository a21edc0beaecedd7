"""Clearance: lower bounds on the distance between every moving body and every zone, and between links.

``ClearanceEngine(cell)`` lists the pairs to test once (``engine.pairs``), builds the python-fcl geometry
once, and ``engine.evaluate(q)`` returns, per configuration and per pair, a *lower bound* on the
distance between the modelled solids (negative: a penetration depth, where one is defined), an upper
estimate, witness points and a status.

Pairs
-----
- every body (links, then tool bodies) against every zone shape (one pair per zone panel/shape);
  a body named in ``zone.allowed`` gives an *allowed* pair, status "allowed contact", never a finding;
- self pairs: every two bodies whose DH frames differ by 2 or more, minus ``cell.self_pairs_allowed``.
  Bodies in the same frame cannot move relative to each other and bodies in adjacent frames share a
  joint (they touch by design), so neither is checked. With the tool in frame 6 this checks the tool
  against links in frames 0..4 (base to forearm); the wrist link (frame 5) is adjacent to the tool.
  Self pairs require ``cell.self_clearance``.

How distances are bounded (never more clearance than there is)
--------------------------------------------------------------
For two convex solids A, B and any unit direction u, ``gap(u) = min_B u.y - max_A u.x =
-h_B(-u) - h_A(u)`` (h: support function) is at most their signed distance (the distance when apart,
minus the penetration depth when they overlap; the signed distance is the maximum of gap(u) over u).
The engine evaluates exact support functions of every primitive (``envelope.geometry.support``) along
several directions and reports the largest gap (and never less than the bounding-sphere bound):

- sphere/capsule against sphere/capsule: the direction between the closest points of the two core
  segments (Lumelsky 1985, vectorised); the result is the exact signed distance, depth included;
- other convex pairs: the python-fcl witness direction (both signs), the centre-to-centre direction,
  the other shape's axes, and, when the witness distance and the bound still differ by more than
  1e-8 m, a direction refined by alternating projections (closest points of primitives) started at
  python-fcl's witness. The value is a valid lower bound whatever python-fcl's error (python-fcl 0.7
  overstates some capsule-box distances by tenths of a millimetre); the python-fcl witness distance
  is kept as ``distance_upper``. Typical shortfall below the true distance: < 1e-6 m;
- penetration depths of convex pairs come from the same bound (python-fcl signed distance supplies
  the direction), so they are never understated.

- Link and tool meshes are replaced by their convex hulls (python-fcl ``Convex``): the hull contains
  the mesh, so distances only get smaller (safe).
- Half-space zones: exact analytic distance and depth ``-h_A(-n) - offset``.
- Zone meshes (not convex): the lower bound is the minimum over the mesh's triangles (each convex)
  of each triangle's best gap along its normal (both signs), the python-fcl witness direction (both
  signs), the direction from the body centre, and a direction refined by alternating projections
  between the body and the triangle -- a valid lower bound on the distance to the surface. (A
  triangle whose cheaper bound -- sphere bound, outer-box gap along its normal -- is not below the
  minimum found cannot attain it and is skipped: the value is the full minimum.) A watertight mesh
  is a solid: an explicit inside test (a point of the body inside the mesh; a mesh vertex inside the
  body) reports a body wholly inside the zone, or the zone inside a body, which touches no triangle.
  The point test is only made when the body is certified clear of every triangle, so the point is
  off the surface: the winding number (``geometry.winding_number``) decides it, trimesh's ray test
  for a mesh that is not consistently wound. When a body touches or enters a zone mesh the depth is not defined:
  ``depth_known`` is False and the distance is the sentinel ``DEPTH_UNKNOWN`` (-0.0), status
  intrusion. A non-watertight zone mesh is a surface only (the cell loader warns).
- Every primitive zone also gets the analytic inside test (belt and braces: for convex solids the gap
  bound is already negative when one contains the other).
- ``Body.padding`` inflates a body: the distance is reduced by exactly the padding (a penetration depth
  grows by it). Witness points are on the bare shapes.

Status
------
intrusion when the distance is <= 0 (contact or penetration), below margin when 0 < distance <
required, clear when distance >= required; allowed pairs are always "allowed contact".

Pruning
-------
Analytic pairs (sphere/capsule pairs, half-spaces) are always exact, vectorised over the batch. For
the others a cheap lower bound is computed: bounding spheres (against a zone box, or the outer box
of a convex or mesh zone, the signed distance from the body's sphere centre to the box less its
radius, when larger), and -- unless the sphere margin is
already above max(0, T), T the smaller of the best analytic margin and the smallest upper bound from
two interior points of a pair's solids, in that configuration -- support gaps of an outer
shape (the primitive itself, an oriented bounding box for convex hulls and meshes) along the centre
direction and the other shape's axes. Pairs are visited in order of that bound's margin (distance -
required); a pair is skipped (``pruned``, reported with the cheap bound, which is <= the exact bound)
when its cheap margin is > 0 (so it is clear either way) and above the worst margin found so far (so
it cannot become the worst pair). The reported exact bound is the larger of both bounds, so pruning
never changes a status, the worst pair or its value. Allowed pairs are always pruned when ``prune``
is on (their status does not depend on the distance). A pair's minimum over many configurations is
therefore exact whenever it is below the required clearance.

Batching
--------
Configurations are evaluated in blocks of up to 1024. Within a block the exact queries that the
one-by-one visit above makes are found in rounds -- first every pair with a cheap margin <= 0 (the
visit never stops before those), then, per configuration, the next pair in cheap-margin order while
its margin is <= the worst so far -- and each round's queries are batched per pair across
configurations: python-fcl is called once per query (for its witness direction), every support gap,
projection, mesh bound and inside test is one numpy expression over the batch. Only elementwise
arithmetic is used there, so a configuration's values do not depend on the batch it is in. The
visited pairs and the values are those of the one-by-one path (kept as the reference, ``_exact_pair``;
tests/test_clearance_fast.py compares the two).

Processes
---------
python-fcl objects neither pickle nor release the GIL. ``evaluate_parallel`` fans a batch out over a
``ProcessPoolExecutor`` whose initializer (``init_worker``) rebuilds the engine from the (picklable)
``Cell`` in each worker; ``engine_for(cell, prune)`` is the module-level cache keyed by cell identity.
Every configuration is evaluated independently, so results do not depend on how a batch is split.
"""

from __future__ import annotations

import weakref
from dataclasses import dataclass

import fcl
import numpy as np

from . import geometry as g
from . import gjk
from .errors import InputError

STATUS_CLEAR = 0
STATUS_BELOW_MARGIN = 1
STATUS_INTRUSION = 2
STATUS_ALLOWED = 3
STATUS_NAMES = ("clear", "below margin", "intrusion", "allowed contact")
"""``STATUS_NAMES[code]`` is the status text of a status code."""

DEPTH_UNKNOWN = -0.0
"""The distance reported (with ``depth_known`` False) when a body touches or enters a non-convex zone."""

_KIND_CONVEX, _KIND_MESH, _KIND_HALF = 0, 1, 2
_BLOCK = 1024  # configurations per block (exact queries are batched per pair across a block)


@dataclass(frozen=True)
class Pair:
    """One tested pair: ``body`` against ``other`` (a zone or another body).

    ``kind`` is ``"zone"`` or ``"self"``; ``zone`` the zone name (``""`` for self pairs); ``panel`` the
    zone shape's panel name (``""`` when the zone names none); ``required`` the required clearance (m);
    ``allowed`` True for an allowed contact (never a finding).
    """

    index: int
    body: str
    other: str
    kind: str
    zone: str
    panel: str
    required: float
    allowed: bool


def pair_other_name(pair) -> str:
    """'zone/panel' for a zone pair (the panel name alone when it already names the zone)."""
    if not pair.panel or pair.panel == pair.other:
        return pair.other
    return pair.panel if pair.panel.startswith(pair.other) else f"{pair.other}/{pair.panel}"


@dataclass(frozen=True, eq=False)
class ClearanceResult:
    """Clearance of one configuration (pair arrays ``(P,)``) or a batch (``(n, P)``).

    Attributes (``...`` is ``()`` for one configuration, ``(n,)`` for a batch)
    ----------
    distance : (..., P) float
        Lower bound on the distance between the (padded) solids, m; negative: penetration depth where
        ``depth_known``; ``DEPTH_UNKNOWN`` (-0.0) where not.
    distance_upper : (..., P) float
        Upper estimate (python-fcl witness distance; ``inf`` for pruned pairs), >= ``distance``.
    depth_known : (..., P) bool
    witness_body, witness_other : (..., P, 3) float
        World points on the bare body and on the other shape (NaN for pruned pairs).
    status : (..., P) int8
        ``STATUS_*`` codes.
    pruned : (..., P) bool
        True where the exact query was skipped (``distance`` is then the cheap lower bound).
    margin : (..., P) float
        ``distance - required``.
    worst : (...) int
        Index of the worst non-allowed pair by margin (an intrusion of unknown depth ranks first; ties
        go to the lowest index); -1 if every pair is allowed.
    worst_margin : (...) float
        Its margin (``-inf`` for an intrusion of unknown depth, ``inf`` if there is none).
    overall : (...) int8
        The most severe status over non-allowed pairs (clear, below margin or intrusion).
    """

    distance: np.ndarray
    distance_upper: np.ndarray
    depth_known: np.ndarray
    witness_body: np.ndarray
    witness_other: np.ndarray
    status: np.ndarray
    pruned: np.ndarray
    margin: np.ndarray
    worst: np.ndarray
    worst_margin: np.ndarray
    overall: np.ndarray

    _FIELDS = (
        "distance",
        "distance_upper",
        "depth_known",
        "witness_body",
        "witness_other",
        "status",
        "pruned",
        "margin",
        "worst",
        "worst_margin",
        "overall",
    )

    @classmethod
    def concatenate(cls, results) -> "ClearanceResult":
        """One batch result from batch results ``(n_k, P)``, in order."""
        results = list(results)
        return cls(**{f: np.concatenate([getattr(r, f) for r in results], axis=0) for f in cls._FIELDS})

    def take(self, index) -> "ClearanceResult":
        """The configuration(s) ``index`` (an int, slice or index array) of a batch result."""
        return ClearanceResult(**{f: getattr(self, f)[index] for f in self._FIELDS})

    _index = take



CONTACT_PUSH = 1e-5
"""m: in contact, the second object is moved this far towards the first before python-fcl's signed
distance is asked for, and the answer lowered by as much (see ``_fcl_distance``)."""


def _fcl_distance(oa, ob, mesh_pair: bool, contact: bool = False):
    """python-fcl distance and witness points ``(d, (p_a, p_b))`` of two posed objects, without crashing.

    python-fcl 0.7's signed distance can crash the process: a segmentation fault for a convex hull
    touching a triangle mesh, and libccd's "origin is outside of the polytope" abort for convex shapes
    that touch exactly (seen for a capsule on a box face at round coordinates). So the plain distance
    is asked first; it is final when the objects are apart, and for mesh pairs (whose depth is
    unknown anyway). For convex pairs in contact the signed distance is asked with ``ob`` moved
    ``CONTACT_PUSH`` towards ``oa`` (strictly into contact, away from the degenerate exact touch) and
    lowered by ``CONTACT_PUSH``: the signed distance is 1-Lipschitz in a translation, so the value
    stays at or below the true signed distance (safe), and at most ``2 * CONTACT_PUSH`` below it.
    Witness points are only a direction hint for the support-function bounds. ``contact``: the caller
    knows the convex objects touch or overlap (GJK said so), so the plain query is skipped.
    """
    if not (contact and not mesh_pair):
        req = fcl.DistanceRequest(enable_nearest_points=True, enable_signed_distance=False)
        res = fcl.DistanceResult()
        d = float(fcl.distance(oa, ob, req, res))
        if d > 0.0 or mesh_pair:
            return d, res.nearest_points
    ta, tb = np.asarray(oa.getTranslation(), dtype=np.float64), np.asarray(ob.getTranslation(), dtype=np.float64)
    Rb = np.asarray(ob.getRotation(), dtype=np.float64)
    u = ta - tb
    n = float(np.linalg.norm(u))
    u = u / n if n > 1e-12 else np.array([0.0, 0.0, 1.0])
    ob.setTransform(fcl.Transform(Rb, tb + CONTACT_PUSH * u))
    try:
        req = fcl.DistanceRequest(enable_nearest_points=True, enable_signed_distance=True)
        res = fcl.DistanceResult()
        d = float(fcl.distance(oa, ob, req, res)) - CONTACT_PUSH
        p_a, p_b = (np.asarray(x, dtype=np.float64) for x in res.nearest_points)
    finally:
        ob.setTransform(fcl.Transform(Rb, tb))
    return d, (p_a, p_b - CONTACT_PUSH * u)

# ----------------------------------------------------------------------------------------- slots
@dataclass(eq=False)
class _Slot:
    """One shape taking part in pairs: a body shape (in its DH frame) or a zone shape (world)."""

    shape: object  # exact shape, local (body frame) or world (zone); meshes of bodies -> hull
    kind: int
    body: int  # body index, -1 for a zone
    frame: int
    pad: float
    center: np.ndarray  # bounding sphere centre (local)
    radius: float
    outer: tuple  # (c (3,), w (3, 3)) outer support data, see _outer (local)
    r: float
    rho: float
    zaxis: np.ndarray
    axes: np.ndarray  # (3, 3) rows: face axes (local)
    interior: np.ndarray  # (3,) a point of the solid (local)
    obj: object = None  # fcl.CollisionObject
    frame_from_obj: np.ndarray = None
    tris: np.ndarray = None  # zone meshes: (T, 3, 3) triangles
    tri_normals: np.ndarray = None
    tri_centers: np.ndarray = None
    tri_radius: np.ndarray = None
    wound: bool = False  # zone meshes: closed and consistently wound (winding-number inside test)
    verts: np.ndarray = None  # convex polytopes (hulls, boxes): vertices (local; world for a zone), for GJK


def _outer(shape):
    """Outer support data ``(c (3,), w (3, 3), r, rho, z (3,))`` of a shape (its own frame):

    ``h(u) <= u.c + sum_j |u.w_j| + r |u| + rho |u x z|``, with equality for spheres, capsules, boxes
    and cylinders; a convex shape or mesh is replaced by an oriented bounding box of its vertices
    (which contains it, so the bound stays valid).
    """
    ez = np.array([0.0, 0.0, 1.0])
    w = np.zeros((3, 3))
    if isinstance(shape, g.Sphere):
        return np.array(shape.center), w, shape.radius, 0.0, ez
    if isinstance(shape, g.Capsule):
        w[0] = 0.5 * (shape.p1 - shape.p0)
        return 0.5 * (shape.p0 + shape.p1), w, shape.radius, 0.0, ez
    if isinstance(shape, g.Box):
        w = (shape.pose[:3, :3] * (0.5 * shape.extents)).T
        return np.array(shape.pose[:3, 3]), w, 0.0, 0.0, ez
    if isinstance(shape, g.Cylinder):
        z = np.array(shape.pose[:3, 2])
        w[0] = 0.5 * shape.length * z
        return np.array(shape.pose[:3, 3]), w, 0.0, shape.radius, z
    import trimesh

    v = np.asarray(shape.vertices)
    to_origin, extents = trimesh.bounds.oriented_bounds(v)
    box = g.Box(np.asarray(extents) * (1 + 1e-9) + 1e-9, np.linalg.inv(to_origin))
    return _outer(box)


def _axes(shape):
    if isinstance(shape, (g.Box, g.Cylinder)):
        return np.array(shape.pose[:3, :3].T)
    if isinstance(shape, g.Capsule):
        d = shape.p1 - shape.p0
        n = np.linalg.norm(d)
        if n > 0:
            return _frame_with_z(d / n).T
    return np.eye(3)


def _frame_with_z(z):
    """A rotation (3, 3) whose third column is the unit vector ``z``."""
    a = np.array([1.0, 0.0, 0.0]) if abs(z[0]) < 0.9 else np.array([0.0, 1.0, 0.0])
    x = np.cross(a, z)
    x /= np.linalg.norm(x)
    y = np.cross(z, x)
    return np.column_stack([x, y, z])


def _fcl_geometry(shape):
    """(fcl geometry, frame_from_obj (4, 4)) of a convex shape or a mesh."""
    T = np.eye(4)
    if isinstance(shape, g.Sphere):
        T[:3, 3] = shape.center
        return fcl.Sphere(shape.radius), T
    if isinstance(shape, g.Capsule):
        d = shape.p1 - shape.p0
        length = float(np.linalg.norm(d))
        T[:3, 3] = 0.5 * (shape.p0 + shape.p1)
        if length == 0.0:
            return fcl.Sphere(shape.radius), T
        T[:3, :3] = _frame_with_z(d / length)
        return fcl.Capsule(shape.radius, length), T
    if isinstance(shape, g.Box):
        return fcl.Box(*shape.extents), np.array(shape.pose)
    if isinstance(shape, g.Cylinder):
        return fcl.Cylinder(shape.radius, shape.length), np.array(shape.pose)
    if isinstance(shape, g.Convex):
        faces = g.hull_faces(shape)
        flat = np.hstack([np.full((len(faces), 1), 3), faces]).ravel()
        return fcl.Convex(np.array(shape.vertices), len(faces), flat), T
    if isinstance(shape, g.TriMesh):
        m = fcl.BVHModel()
        m.beginModel(len(shape.vertices), len(shape.faces))
        m.addSubModel(np.array(shape.vertices), np.array(shape.faces))
        m.endModel()
        return m, T
    raise TypeError(type(shape).__name__)


def _transform(M):
    return fcl.Transform(np.ascontiguousarray(M[:3, :3]), np.ascontiguousarray(M[:3, 3]))


def _make_slot(shape, *, body, frame, pad, item):
    if body >= 0:
        if isinstance(shape, g.HalfSpace):
            raise InputError("a moving body cannot be a half-space (expected a bounded shape)", item=item)
        if isinstance(shape, g.TriMesh):
            shape = g.convex_hull(shape)  # safe: the hull contains the mesh
        kind = _KIND_CONVEX
    elif isinstance(shape, g.HalfSpace):
        kind = _KIND_HALF
    elif isinstance(shape, g.TriMesh):
        kind = _KIND_MESH
    else:
        kind = _KIND_CONVEX
    if not isinstance(shape, (g.Sphere, g.Capsule, g.Box, g.Cylinder, g.HalfSpace, g.Convex, g.TriMesh)):
        raise InputError(f"unknown shape type {type(shape).__name__}", item=item)
    if kind == _KIND_HALF:
        n = np.array(shape.normal)
        return _Slot(shape, kind, body, frame, pad, n * shape.offset, np.inf, (n * shape.offset, np.zeros((3, 3))), 0.0, 0.0,
                     n, np.eye(3), n * shape.offset)
    c, rad = g.bounding_sphere(shape)
    oc, ow, r, rho, z = _outer(shape)
    slot = _Slot(shape, kind, body, frame, pad, c, rad, (oc, ow), r, rho, z, _axes(shape), g.interior_point(shape))
    geom, slot.frame_from_obj = _fcl_geometry(shape)
    slot.obj = fcl.CollisionObject(geom, _transform(slot.frame_from_obj))
    slot.verts = _polytope_vertices(shape)
    if kind == _KIND_MESH:
        tris = np.asarray(shape.vertices)[np.asarray(shape.faces)]
        nrm = np.cross(tris[:, 1] - tris[:, 0], tris[:, 2] - tris[:, 0])
        ln = np.linalg.norm(nrm, axis=1)
        slot.tris = tris
        slot.tri_normals = np.where(ln[:, None] > 0, nrm / np.where(ln > 0, ln, 1.0)[:, None], [0.0, 0.0, 1.0])
        slot.tri_centers = tris.mean(axis=1)
        slot.wound = bool(shape.watertight) and g.is_consistently_wound(shape)
        slot.tri_radius = np.sqrt(((tris - slot.tri_centers[:, None]) ** 2).sum(axis=2)).max(axis=1)
    return slot


def _polytope_vertices(shape):
    """``(m, 3)`` vertices whose convex hull is ``shape`` (a box or a convex hull), else None."""
    if isinstance(shape, g.Convex):
        return np.ascontiguousarray(shape.vertices, dtype=np.float64)
    if isinstance(shape, g.Box):
        return np.ascontiguousarray(g.box_corners(shape), dtype=np.float64)
    return None


def _separation_batch(A, B, Ra, ta, Rb, tb, fallback):
    """Distance and closest points ``(d (k,), p_a (k, 3), p_b (k, 3))`` of slots ``A``, ``B`` at slot
    poses ``Ra, ta, Rb, tb`` (``(k, 3, 3)``, ``(k, 3)``; ignored for a zone slot, whose shape is in
    world coordinates).

    Two polytopes (hulls, boxes) go to the compiled GJK (``envelope.gjk``) where they are apart and
    to its EPA where they overlap (the deepest point of the first along the penetration direction,
    and that point moved back by the depth); ``fallback(js, contact)`` supplies python-fcl's answer for the rest as ``(d (m,), pts (m, 2, 3))``
    (``contact``: GJK found them touching or overlapping, so the plain distance query can be
    skipped). Either way only the direction of the points is used for the certified bounds.
    """
    k = len(Ra)
    d = np.empty(k)
    pa, pb = np.empty((k, 3)), np.empty((k, 3))
    if A.verts is None or B.verts is None:
        df, pts = fallback(np.arange(k), False)
        return df, pts[:, 0], pts[:, 1]
    eye, zero = np.broadcast_to(np.eye(3), (k, 3, 3)), np.zeros((k, 3))
    RA, TA = (Ra, ta) if A.body >= 0 else (eye, zero)
    RB, TB = (Rb, tb) if B.body >= 0 else (eye, zero)
    dg, ga, gb, state = gjk.signed_distance(A.verts, RA, TA, B.verts, RB, TB)
    ok = (state == gjk.SEPARATED) | (state == gjk.PENETRATING)
    d[ok], pa[ok], pb[ok] = dg[ok], ga[ok], gb[ok]
    for which, contact in ((gjk.TOUCHING, True), (gjk.UNSETTLED, False)):
        todo = np.flatnonzero(state == which)
        if todo.size:
            df, pts = fallback(todo, contact)
            d[todo], pa[todo], pb[todo] = df, pts[:, 0], pts[:, 1]
    return d, pa, pb


def segment_closest_points(p0, p1, q0, q1):
    """Closest points of segments p0-p1 and q0-q1, ``(..., 3)`` each -> ``(c_p, c_q)``.

    The clamped closed-form solution of the segment-segment distance (Lumelsky 1985, "On fast
    computation of distance between line segments", Inf. Proc. Letters 21; in the form of Ericson,
    "Real-Time Collision Detection" 2005, sec. 5.1.9), vectorised; degenerate (point) segments allowed.
    """
    d1, d2, r = p1 - p0, q1 - q0, p0 - q0
    a = _dot(d1, d1)
    e = _dot(d2, d2)
    f = _dot(d2, r)
    c = _dot(d1, r)
    b = _dot(d1, d2)
    eps = 1e-300
    a_ok, e_ok = a > eps, e > eps
    denom = a * e - b * b
    s = np.where(denom > 1e-14 * np.maximum(a * e, eps), np.clip((b * f - c * e) / np.where(denom > 0, denom, 1.0), 0, 1), 0.0)
    t = np.where(e_ok, (b * s + f) / np.where(e_ok, e, 1.0), 0.0)
    s = np.where(t < 0, np.clip(-c / np.where(a_ok, a, 1.0), 0, 1), np.where(t > 1, np.clip((b - c) / np.where(a_ok, a, 1.0), 0, 1), s))
    t = np.clip(t, 0, 1)
    s = np.where(e_ok, s, np.clip(-c / np.where(a_ok, a, 1.0), 0, 1))
    t = np.where(e_ok, t, 0.0)
    s = np.where(a_ok, s, 0.0)
    t = np.where(a_ok, t, np.where(e_ok, np.clip(f / np.where(e_ok, e, 1.0), 0, 1), 0.0))
    return p0 + s[..., None] * d1, q0 + t[..., None] * d2


def _unit(v, fallback):
    n = np.sqrt(_dot(v, v))[..., None]
    return np.where(n > 1e-300, v / np.where(n > 1e-300, n, 1.0), fallback)


def _PROJECTABLE(shape):
    return isinstance(shape, (g.Sphere, g.Capsule, g.Box, g.Cylinder))


def _dot(a, b):
    """``a . b`` over the last axis of length 3 (faster than a reduction over a short axis)."""
    return a[..., 0] * b[..., 0] + a[..., 1] * b[..., 1] + a[..., 2] * b[..., 2]


def _outer_support(c, w, r, rho, z, u):
    """Outer support ``(..., k)`` along unit ``u (..., k, 3)``; c, z ``(..., 3)``, w ``(..., 3, 3)``, r, rho ``(...)``."""
    cc, zz = c[..., None, :], z[..., None, :]
    h = _dot(u, cc) + r[..., None]
    for j in range(3):
        h = h + np.abs(_dot(u, w[..., None, j, :]))
    if not rho.any():  # no cylinder among the shapes: the term is zero
        return h
    uz = _dot(u, zz)
    return h + rho[..., None] * np.sqrt(np.maximum(1.0 - uz * uz, 0.0))


def _rows_times(u, M):
    """``u @ M`` over the last axes, elementwise: ``u (..., 3)``, ``M (..., 3, 3)`` (broadcast)."""
    return u[..., 0, None] * M[..., 0, :] + u[..., 1, None] * M[..., 1, :] + u[..., 2, None] * M[..., 2, :]


def _times_rows(M, x):
    """``M @ x`` over the last axes, elementwise: ``M (..., 3, 3)``, ``x (..., 3)`` (broadcast)."""
    return x[..., None, 0] * M[..., :, 0] + x[..., None, 1] * M[..., :, 1] + x[..., None, 2] * M[..., :, 2]


def _support_local(shape, u):
    """``envelope.geometry.support`` along ``u (..., 3)`` (any leading shape), elementwise arithmetic."""
    if isinstance(shape, g.Sphere):
        return _dot(u, shape.center) + shape.radius * np.sqrt(_dot(u, u))
    if isinstance(shape, g.Capsule):
        return np.maximum(_dot(u, shape.p0), _dot(u, shape.p1)) + shape.radius * np.sqrt(_dot(u, u))
    if isinstance(shape, g.Box):
        Rb, tb, e = shape.pose[:3, :3], shape.pose[:3, 3], 0.5 * shape.extents
        return (_dot(u, tb) + np.abs(_dot(u, Rb[:, 0])) * e[0] + np.abs(_dot(u, Rb[:, 1])) * e[1]
                + np.abs(_dot(u, Rb[:, 2])) * e[2])
    if isinstance(shape, g.Cylinder):
        z, c = shape.pose[:3, 2], shape.pose[:3, 3]
        uz = _dot(u, z)
        radial = np.sqrt(np.maximum(_dot(u, u) - uz * uz, 0.0))
        return _dot(u, c) + 0.5 * shape.length * np.abs(uz) + shape.radius * radial
    if isinstance(shape, (g.Convex, g.TriMesh)):
        V = shape.vertices
        return (u[..., None, 0] * V[:, 0] + u[..., None, 1] * V[:, 1] + u[..., None, 2] * V[:, 2]).max(axis=-1)
    raise TypeError(f"no bounded support for {type(shape).__name__}")


def _closest_local(shape, p):
    """``envelope.geometry.closest_point`` of a primitive for points ``p (..., 3)``, elementwise arithmetic."""
    if isinstance(shape, (g.Sphere, g.Capsule)):
        if isinstance(shape, g.Sphere):
            c = np.broadcast_to(shape.center, p.shape)
        else:
            d = shape.p1 - shape.p0
            dd = float(d @ d)
            s = np.zeros(p.shape[:-1]) if dd == 0 else np.minimum(np.maximum(_dot(p - shape.p0, d) / dd, 0.0), 1.0)
            c = shape.p0 + s[..., None] * d
        v = p - c
        n = np.sqrt(_dot(v, v))
        scale = np.where(n > shape.radius, shape.radius / np.where(n > 0, n, 1.0), 1.0)
        return c + v * scale[..., None]
    Rb, tb = shape.pose[:3, :3], shape.pose[:3, 3]
    local = _rows_times(p - tb, Rb)
    if isinstance(shape, g.Box):
        h = 0.5 * shape.extents
        local = np.minimum(np.maximum(local, -h), h)  # (np.clip, without its call overhead)
    elif isinstance(shape, g.Cylinder):
        z = np.minimum(np.maximum(local[..., 2], -0.5 * shape.length), 0.5 * shape.length)
        rad = np.hypot(local[..., 0], local[..., 1])
        scale = np.where(rad > shape.radius, shape.radius / np.where(rad > 0, rad, 1.0), 1.0)
        local = np.stack([local[..., 0] * scale, local[..., 1] * scale, z], axis=-1)
    else:
        raise TypeError(f"no closest point for {type(shape).__name__}")
    return _times_rows(Rb, local) + tb


# ----------------------------------------------------------------------------------------- engine
class ClearanceEngine:
    """Pairs and python-fcl geometry of one cell, built once; ``evaluate(q)`` is then a pure function.

    Parameters
    ----------
    cell : envelope.cell.Cell
    prune : bool
        Skip exact queries that cannot change any status nor the worst pair (see module docs).

    Attributes
    ----------
    cell, prune
    pairs : tuple of Pair
    bodies : tuple of Body
        ``cell.bodies``: links, then tool bodies (the order of ``body_poses``).
    required : (P,) float
    allowed : (P,) bool
    """

    def __init__(self, cell, *, prune: bool = True):
        self.cell = cell
        self.prune = bool(prune)
        self._scalar = False  # True: the one-by-one reference path (tests compare the two)
        self.bodies = tuple(cell.bodies)
        names = [b.name for b in self.bodies]
        if len(set(names)) != len(names):
            raise InputError(f"body names must be unique, got {names}", item="bodies")
        for b in self.bodies:
            if not 0 <= int(b.frame) <= 6:
                raise InputError(f"body frame must be 0..6, got {b.frame}", item=f'body "{b.name}"')
            if not b.padding >= 0:
                raise InputError(f"padding must be >= 0 m, got {b.padding}", item=f'body "{b.name}"')
        for z in cell.zones:
            if not z.clearance >= 0:
                raise InputError(f"required clearance must be >= 0 m, got {z.clearance}", item=f'zone "{z.name}"')
        if not cell.self_clearance >= 0:
            raise InputError(f"self clearance must be >= 0 m, got {cell.self_clearance}", item="self clearance")
        self._world_from_base = np.asarray(cell.world_from_base, dtype=np.float64)
        self._body_frame = np.array([int(b.frame) for b in self.bodies], dtype=np.int64)

        slots = []
        body_slots = []
        for bi, b in enumerate(self.bodies):
            ids = []
            for k, s in enumerate(b.shapes):
                slots.append(_make_slot(s, body=bi, frame=int(b.frame), pad=float(b.padding),
                                        item=f'body "{b.name}" shape {k + 1}'))
                ids.append(len(slots) - 1)
            body_slots.append(ids)
        self._n_body_slots = len(slots)

        pairs, sp_a, sp_b, sp_pair, pair_kind = [], [], [], [], []

        def add_pair(body, other, kind, zone, panel, required, allowed, a_ids, b_ids, pk):
            idx = len(pairs)
            pairs.append(Pair(idx, body, other, kind, zone, panel, float(required), bool(allowed)))
            pair_kind.append(pk)
            for a in a_ids:
                for b_ in b_ids:
                    sp_a.append(a)
                    sp_b.append(b_)
                    sp_pair.append(idx)

        zone_slot = []
        for z in cell.zones:
            ids = []
            for k, s in enumerate(z.shapes):
                slots.append(_make_slot(s, body=-1, frame=-1, pad=0.0, item=f'zone "{z.name}" shape {k + 1}'))
                ids.append(len(slots) - 1)
            zone_slot.append(ids)
        for bi, b in enumerate(self.bodies):
            if not body_slots[bi]:
                continue
            for zi, z in enumerate(cell.zones):
                for k, sid in enumerate(zone_slot[zi]):
                    if len(z.panels) == len(z.shapes):
                        panel = str(z.panels[k])
                    else:
                        panel = "" if len(z.shapes) == 1 else f"shape {k + 1}"
                    add_pair(b.name, z.name, "zone", z.name, panel, z.clearance, b.name in z.allowed,
                             body_slots[bi], [sid], slots[sid].kind)
        allowed_self = {frozenset(p) for p in cell.self_pairs_allowed}
        for i in range(len(self.bodies)):
            for j in range(i + 1, len(self.bodies)):
                bi, bj = self.bodies[i], self.bodies[j]
                if abs(int(bi.frame) - int(bj.frame)) < 2 or frozenset((bi.name, bj.name)) in allowed_self:
                    continue
                if not body_slots[i] or not body_slots[j]:
                    continue
                add_pair(bi.name, bj.name, "self", "", "", cell.self_clearance, False,
                         body_slots[i], body_slots[j], _KIND_CONVEX)

        self.pairs = tuple(pairs)
        self._slots = slots
        self.required = np.array([p.required for p in pairs], dtype=np.float64)
        self.allowed = np.array([p.allowed for p in pairs], dtype=bool)
        for a in (self.required, self.allowed):
            a.flags.writeable = False
        self._pair_kind = np.array(pair_kind, dtype=np.int64)
        self._sp_a = np.array(sp_a, dtype=np.int64)
        self._sp_b = np.array(sp_b, dtype=np.int64)
        self._sp_pair = np.array(sp_pair, dtype=np.int64)
        self._pair_sps = [[] for _ in pairs]
        for m, p in enumerate(sp_pair):
            self._pair_sps[p].append(m)
        self._sp_start = np.array([sps[0] for sps in self._pair_sps], dtype=np.int64)
        # padding of a pair: the body's (zone pairs) or both bodies' (self pairs)
        self._pair_pad = np.array([slots[sp_a[k]].pad + slots[sp_b[k]].pad for k in self._sp_start.tolist()])
        M = len(sp_pair)
        caps_slot = np.array([isinstance(sl.shape, (g.Sphere, g.Capsule)) and sl.kind == _KIND_CONVEX for sl in slots])
        half = np.array([slots[b].kind == _KIND_HALF for b in sp_b], dtype=bool).reshape(M)
        caps = (caps_slot[self._sp_a] & caps_slot[self._sp_b]) if M else np.zeros(0, bool)
        self._sp_half = np.flatnonzero(half)
        self._sp_caps = np.flatnonzero(caps)
        self._sp_analytic = half | caps
        self._sp_cheap = np.flatnonzero(~(half | caps))
        self._pair_analytic = np.array([bool(self._sp_analytic[sps].all()) for sps in self._pair_sps], dtype=bool)
        an_pair_ok = self._pair_analytic & ~np.array([p.allowed for p in pairs], dtype=bool)
        self._sp_an_checked = np.flatnonzero(an_pair_ok[self._sp_pair]) if M else np.zeros(0, np.int64)
        not_allowed = ~np.array([p.allowed for p in pairs], dtype=bool)
        self._sp_checked = np.flatnonzero(not_allowed[self._sp_pair] & ~half) if M else np.zeros(0, np.int64)
        self._pair_single = np.array([len(sps) == 1 for sps in self._pair_sps], dtype=bool)
        self._S_seg = np.array(
            [[sl.shape.p0, sl.shape.p1] if isinstance(sl.shape, g.Capsule)
             else [sl.shape.center, sl.shape.center] if isinstance(sl.shape, g.Sphere) else np.zeros((2, 3))
             for sl in slots]
        ).reshape(len(slots), 2, 3)

        # stacked slot data for the vectorised cheap bound
        self._S_oc = np.array([s.outer[0] for s in slots]).reshape(len(slots), 3)
        self._S_ow = np.array([s.outer[1] for s in slots]).reshape(len(slots), 3, 3)
        self._S_r = np.array([s.r for s in slots])
        self._S_rho = np.array([s.rho for s in slots])
        self._S_z = np.array([s.zaxis for s in slots]).reshape(len(slots), 3)
        self._S_axes = np.array([s.axes for s in slots]).reshape(len(slots), 3, 3)
        self._S_center = np.array([s.center for s in slots]).reshape(len(slots), 3)
        self._S_radius = np.array([s.radius for s in slots])
        self._S_interior = np.array([s.interior for s in slots]).reshape(len(slots), 3)
        self._S_frame = np.array([max(s.frame, 0) for s in slots], dtype=np.int64)
        self._S_moving = np.array([s.body >= 0 for s in slots], dtype=bool)
        # zone shapes inside a box (a box zone; the outer box of a convex or mesh zone) among the cheap
        # shape pairs, for the centre-to-box bound: (row in _sp_cheap, world_from_box R, t, half extents)
        rows, box_R, box_t, box_h = [], [], [], []
        for j, mm in enumerate(self._sp_cheap.tolist()):
            zs = slots[sp_b[mm]]
            if zs.body >= 0:
                continue
            if isinstance(zs.shape, g.Box):
                Rz, tz, hz = zs.shape.pose[:3, :3], zs.shape.pose[:3, 3], 0.5 * zs.shape.extents
            elif isinstance(zs.shape, (g.Convex, g.TriMesh)) and zs.r == 0.0 and zs.rho == 0.0:
                hz = np.linalg.norm(zs.outer[1], axis=1)  # outer box: centre c, rows w_j = h_j * axis_j
                if not (hz > 0).all():
                    continue
                Rz, tz = (zs.outer[1] / hz[:, None]).T, zs.outer[0]
            else:
                continue
            rows.append(j)
            box_R.append(Rz)
            box_t.append(tz)
            box_h.append(hz)
        self._cheap_box_rows = np.array(rows, dtype=np.int64)
        self._box_R = np.array(box_R, dtype=np.float64).reshape(-1, 3, 3)
        self._box_t = np.array(box_t, dtype=np.float64).reshape(-1, 3)
        self._box_h = np.array(box_h, dtype=np.float64).reshape(-1, 3)

    # ------------------------------------------------------------------------------- posing
    def _q(self, q):
        q = np.asarray(q, dtype=np.float64)
        if q.ndim not in (1, 2) or q.shape[-1] != 6:
            raise InputError(f"joint values must have shape (6,) or (n, 6), got {q.shape}", item="q")
        if not np.isfinite(q).all():
            bad = np.argwhere(~np.isfinite(np.atleast_2d(q)))[0]
            raise InputError(f"joint values must be finite, got {np.atleast_2d(q)[tuple(bad)]} at row {bad[0]}",
                             item="q")
        return q

    def _world_from_frames(self, q2):
        F = self.cell.arm.frames(q2)  # (n, 7, 4, 4)
        return self._world_from_base @ F

    def body_poses(self, q) -> np.ndarray:
        """``world_from_body_frame`` of every body (``self.bodies`` order).

        Parameters
        ----------
        q : (6,) or (n, 6) float, radians

        Returns
        -------
        (n_bodies, 4, 4) or (n, n_bodies, 4, 4) float64
        """
        q = self._q(q)
        W = self._world_from_frames(np.atleast_2d(q))[:, self._body_frame]
        return W[0] if q.ndim == 1 else W

    # ------------------------------------------------------------------------------- evaluation
    def evaluate(self, q) -> ClearanceResult:
        """Clearance of one configuration ``q (6,)`` or a batch ``q (n, 6)`` (radians).

        Returns a ``ClearanceResult`` with pair arrays ``(P,)`` for ``(6,)`` and ``(n, P)`` for
        ``(n, 6)``. Each configuration is evaluated independently of the others.
        """
        q = self._q(q)
        q2 = np.atleast_2d(q)
        parts = [self._evaluate_block(q2[i:i + _BLOCK]) for i in range(0, len(q2), _BLOCK)]
        res = (parts[0] if len(parts) == 1 else ClearanceResult.concatenate(parts)) if parts else self._evaluate_block(q2)
        return res._index(0) if q.ndim == 1 else res

    def worst_margins(self, q) -> tuple[np.ndarray, np.ndarray]:
        """``(worst_margin (n,), overall (n,))`` of ``evaluate(q)`` for a batch ``(n, 6)``, keeping only
        these per block (no per-pair arrays for the whole batch: what a map needs)."""
        q2 = np.atleast_2d(self._q(q))
        margin, overall = np.empty(len(q2)), np.empty(len(q2), dtype=np.int8)
        for i in range(0, len(q2), _BLOCK):
            part = self._evaluate_block(q2[i:i + _BLOCK])
            margin[i:i + _BLOCK], overall[i:i + _BLOCK] = part.worst_margin, part.overall
        return margin, overall

    def evaluate_parallel(self, q, *, processes: int = 2, chunk_size: int | None = None) -> ClearanceResult:
        """``evaluate(q)`` for a batch ``(n, 6)``, fanned out over worker processes.

        Each worker rebuilds the engine from ``self.cell`` once (``init_worker``); the result is
        identical to ``evaluate(q)``.
        """
        from concurrent.futures import ProcessPoolExecutor

        q = self._q(q)
        if q.ndim != 2:
            raise InputError(f"evaluate_parallel needs a batch (n, 6), got {q.shape}", item="q")
        if chunk_size is None:
            chunk_size = max(1, -(-len(q) // (4 * processes)))
        chunks = [q[i:i + chunk_size] for i in range(0, len(q), chunk_size)]
        if not chunks:
            return self.evaluate(q)
        with ProcessPoolExecutor(processes, initializer=init_worker, initargs=(self.cell, self.prune)) as ex:
            parts = list(ex.map(evaluate_in_worker, chunks))
        return ClearanceResult.concatenate(parts)

    def _shape_pair_bounds(self, R, t):
        """Per shape pair ``(n, M)``: cheap bound, analytic exact bound, upper estimate, witnesses ``(n, M, 3)``."""
        n = len(R)
        slots = self._slots
        Rt = np.swapaxes(R, -1, -2)
        ctr = (R @ self._S_center[..., None])[..., 0] + t
        oc = (R @ self._S_oc[..., None])[..., 0] + t
        ow = self._S_ow @ Rt
        zax = (R @ self._S_z[..., None])[..., 0]
        axes = self._S_axes @ Rt

        M = len(self._sp_a)
        cheap_sp = np.full((n, M), np.inf)
        exact_sp = np.full((n, M), np.inf)
        upper_sp = np.full((n, M), np.inf)
        wb_sp = np.full((n, M, 3), np.nan)
        wo_sp = np.full((n, M, 3), np.nan)
        # ---- half-space shape pairs: exact, vectorised
        for mm in self._sp_half:
            sa = self._sp_a[mm]
            a, b = slots[sa], slots[self._sp_b[mm]]
            Ra, ta = R[:, sa], t[:, sa]
            nrm = b.shape.normal
            local = -np.einsum("nij,i->nj", Ra, nrm)  # R^T (-n)
            if isinstance(a.shape, (g.Convex, g.TriMesh)):  # support value and point from one product
                dots = local @ a.shape.vertices.T
                best_v = np.argmax(dots, axis=1)
                h_local, p_local = dots[np.arange(len(dots)), best_v], a.shape.vertices[best_v]
            else:
                h_local, p_local = g.support(a.shape, local), g.support_point(a.shape, local)
            h = -(ta @ nrm) + h_local
            val = -h - b.shape.offset
            pt = np.einsum("nij,nj->ni", Ra, p_local) + ta
            exact_sp[:, mm] = upper_sp[:, mm] = val
            wb_sp[:, mm] = pt
            wo_sp[:, mm] = pt - val[:, None] * nrm
        # ---- sphere/capsule against sphere/capsule: segment-segment distance, certified by a support gap
        m = self._sp_caps
        if m.size:
            a, b = self._sp_a[m], self._sp_b[m]
            seg = np.einsum("nsij,skj->nski", R, self._S_seg) + t[:, :, None]
            A0, A1, B0, B1 = seg[:, a, 0], seg[:, a, 1], seg[:, b, 0], seg[:, b, 1]
            ca, cb = segment_closest_points(A0, A1, B0, B1)
            d = cb - ca
            nd = np.sqrt(_dot(d, d))
            perp = _unit(np.cross(A1 - A0, B1 - B0), _unit(np.cross(A1 - A0 + [1e-3, 2e-3, 3e-3], [0.0, 0.0, 1.0]),
                                                              np.array([1.0, 0.0, 0.0])))
            u = np.where((nd > 1e-12)[..., None], d / np.where(nd > 1e-12, nd, 1.0)[..., None], perp)
            ra, rb = self._S_r[a], self._S_r[b]
            ua0, ua1 = _dot(u, A0), _dot(u, A1)
            ub0, ub1 = _dot(u, B0), _dot(u, B1)
            gap_p = np.minimum(ub0, ub1) - np.maximum(ua0, ua1) - ra - rb
            gap_m = np.minimum(ua0, ua1) - np.maximum(ub0, ub1) - ra - rb  # along -u
            exact_sp[:, m] = np.maximum(gap_p, gap_m)
            upper_sp[:, m] = nd - ra - rb
            wb_sp[:, m] = ca + ra[:, None] * u
            wo_sp[:, m] = cb - rb[:, None] * u
        an = self._sp_analytic
        cheap_sp[:, an] = exact_sp[:, an]

        # ---- cheap bound of the other shape pairs: bounding spheres, then (where it can matter) the
        # outer-support gap along the centre direction and the other shape's axes
        m = self._sp_cheap
        if m.size:
            a, b = self._sp_a[m], self._sp_b[m]
            d = ctr[:, b] - ctr[:, a]
            sphere = np.sqrt(_dot(d, d)) - self._S_radius[a] - self._S_radius[b]
            jb = self._cheap_box_rows
            if jb.size:
                # a body's bounding sphere against a zone box (or the outer box of a zone): the distance
                # from its centre to the box, less its radius (a box's bounding sphere is a poor bound
                # for a long panel)
                # (signed: a centre inside the box gives minus its depth below the nearest face, the
                # penetration depth of the ball, which is at least that of the body it contains)
                local = _rows_times(ctr[:, a[jb]] - self._box_t, self._box_R)
                out = local - np.clip(local, -self._box_h, self._box_h)
                below = self._box_h - np.abs(local)
                inside = np.minimum(np.minimum(below[..., 0], below[..., 1]), below[..., 2])
                sd = np.where(inside >= 0.0, -inside, np.sqrt(_dot(out, out)))
                sphere[:, jb] = np.maximum(sphere[:, jb], sd - self._S_radius[a[jb]])
            cheap_sp[:, m] = sphere
            pm = self._sp_pair[m]
        posed = (ctr, oc, ow, zax, axes)
        obb_done = np.zeros((n, M), dtype=bool)  # where the outer-support gap is in cheap_sp
        obb_done[:, self._sp_analytic] = True
        if m.size:
            if self.prune:
                # a pair whose sphere margin is above max(0, the best analytic margin) is pruned
                # whatever its tighter bound: skip computing that (it changes no status nor worst)
                sel_an = self._sp_an_checked
                if sel_an.size:
                    pa_ = self._sp_pair[sel_an]
                    s_best = (exact_sp[:, sel_an] - self._pair_pad[pa_] - self.required[pa_]).min(axis=1)
                else:
                    s_best = np.full(n, np.inf)
                # and the final worst margin is at most any pair's distance between two points of its
                # solids (interior points), less padding and required clearance
                ip = (R @ self._S_interior[..., None])[..., 0] + t
                ck = self._sp_checked
                if ck.size:
                    dd = ip[:, self._sp_b[ck]] - ip[:, self._sp_a[ck]]
                    pk = self._sp_pair[ck]
                    s_best = np.minimum(s_best, (np.sqrt(_dot(dd, dd)) - self._pair_pad[pk] - self.required[pk]).min(axis=1))
                thr = np.maximum(s_best, 0.0)
                need = (sphere - self._pair_pad[pm] - self.required[pm] <= thr[:, None]) & ~self.allowed[pm]
                I, J = np.nonzero(need)
            else:
                I, J = np.nonzero(np.ones((n, m.size), dtype=bool))
            self._outer_gap(posed, cheap_sp, obb_done, I, m[J])
        return cheap_sp, exact_sp, upper_sp, wb_sp, wo_sp, posed, obb_done

    def _outer_gap(self, posed, cheap_sp, obb_done, I, mm):
        """Raise the cheap bound of shape pairs ``mm`` in configurations ``I`` (both ``(k,)``) to the
        outer-support gap along the centre direction and the other shape's axes (in place)."""
        if not I.size:
            return
        ctr, oc, ow, zax, axes = posed
        aa, bb = self._sp_a[mm], self._sp_b[mm]
        u0 = _unit(ctr[I, bb] - ctr[I, aa], np.array([0.0, 0.0, 1.0]))  # (k, 3)
        ax = axes[I, bb]  # (k, 3, 3)
        sgn = np.sign(_dot(ax, u0[:, None, :]))
        sgn = np.where(sgn == 0, 1.0, sgn)
        U = np.concatenate([u0[:, None], ax * sgn[..., None]], axis=1)  # (k, 4, 3)
        h_a = _outer_support(oc[I, aa], ow[I, aa], self._S_r[aa], self._S_rho[aa], zax[I, aa], U)
        h_b = _outer_support(oc[I, bb], ow[I, bb], self._S_r[bb], self._S_rho[bb], zax[I, bb], -U)
        gap = (-h_b - h_a).max(axis=-1)
        cheap_sp[I, mm] = np.maximum(cheap_sp[I, mm], gap)
        obb_done[I, mm] = True

    def _evaluate_block(self, q2) -> ClearanceResult:
        n, P = len(q2), len(self.pairs)
        W = self._world_from_frames(q2)  # (n, 7, 4, 4)
        slots = self._slots
        nb = self._n_body_slots
        # slot poses (n, S, 3, 3) / (n, S, 3): zones are fixed (identity)
        S = len(slots)
        R = np.broadcast_to(np.eye(3), (n, S, 3, 3)).copy()
        t = np.zeros((n, S, 3))
        Wb = W[:, self._S_frame[:nb]]
        R[:, :nb] = Wb[..., :3, :3]
        t[:, :nb] = Wb[..., :3, 3]
        cheap_sp, exact_sp, upper_sp, wb_sp, wo_sp, posed, obb_done = self._shape_pair_bounds(R, t)

        M = len(self._sp_a)
        cheap = np.minimum.reduceat(cheap_sp, self._sp_start, axis=1) if M else np.zeros((n, 0))
        dist = np.full((n, P), np.inf)
        upper = np.full((n, P), np.inf)
        known = np.ones((n, P), dtype=bool)
        wb = np.full((n, P, 3), np.nan)
        wo = np.full((n, P, 3), np.nan)
        pruned = np.zeros((n, P), dtype=bool)
        # analytic pairs: the shape pair with the smallest bound gives the witnesses
        full = self._pair_analytic
        one = full & self._pair_single
        sp1 = self._sp_start[one]
        dist[:, one] = exact_sp[:, sp1]
        upper[:, one] = upper_sp[:, sp1]
        wb[:, one] = wb_sp[:, sp1]
        wo[:, one] = wo_sp[:, sp1]
        for p in np.flatnonzero(full & ~self._pair_single):
            sps = np.array(self._pair_sps[p])
            k = sps[np.argmin(exact_sp[:, sps], axis=1)]
            rows = np.arange(n)
            dist[:, p] = exact_sp[rows, k]
            upper[:, p] = upper_sp[:, sps].min(axis=1)
            wb[:, p] = wb_sp[rows, k]
            wo[:, p] = wo_sp[rows, k]
        dist[:, full] -= self._pair_pad[full]
        upper[:, full] -= self._pair_pad[full]
        scratch = (exact_sp, upper_sp, wb_sp, wo_sp)
        cheap_d = cheap - self._pair_pad
        cheap_margin = cheap_d - self.required
        if self._scalar:
            self._exact_loop_scalar(n, P, R, t, cheap_sp, scratch, dist, upper, known, wb, wo, pruned,
                                    cheap_d, cheap_margin)
            return self._finish(dist, upper, known, wb, wo, pruned)
        # world_from_obj of the body slots (python-fcl transforms), contiguous for fcl.Transform
        Rw = np.empty((n, nb, 3, 3))
        tw = np.empty((n, nb, 3))
        for s in range(nb):
            F = slots[s].frame_from_obj
            Rw[:, s] = R[:, s] @ F[:3, :3]
            tw[:, s] = (R[:, s] @ F[:3, 3]) + t[:, s]
        Wobj = (Rw, tw)

        def run(I, J):
            """Exact bounds of the (configuration, pair) cells ``(I[k], J[k])``, batched per pair."""
            if not I.size:
                return
            order = np.argsort(J, kind="stable")
            I, J = I[order], J[order]
            cut = np.flatnonzero(np.diff(J)) + 1
            for Ik, Jk in zip(np.split(I, cut), np.split(J, cut)):
                for mm in self._pair_sps[int(Jk[0])]:  # every exact bound starts from the full cheap bound
                    miss = Ik[~obb_done[Ik, mm]]
                    self._outer_gap(posed, cheap_sp, obb_done, miss, np.full(len(miss), mm))
                self._exact_batch(int(Jk[0]), Ik, R, t, Wobj, cheap_sp, scratch, dist, upper, known, wb, wo)

        exact_cols = ~full
        if not self.prune:
            I, J = np.nonzero(np.broadcast_to(exact_cols, (n, P)))
            run(I, J)
            return self._finish(dist, upper, known, wb, wo, pruned)
        # The pairs a one-by-one visit in order of cheap margin would query exactly (see module docs):
        # 1. every non-allowed pair whose cheap margin is <= 0 (the visit never stops before them);
        cand = exact_cols & ~self.allowed
        row = np.where(self.allowed, np.inf, cheap_margin)
        done = np.zeros((n, P), dtype=bool)
        first = cand & (row <= 0.0)
        I, J = np.nonzero(first)
        run(I, J)
        done |= first
        exact_margin = np.where(known, dist - self.required, -np.inf)
        best = np.where(full & ~self.allowed, cheap_margin, np.where(done, exact_margin, np.inf)).min(axis=1) if P \
            else np.full(n, np.inf)
        # 2. then, in ascending cheap margin, each pair while its cheap margin is <= the worst margin so
        #    far (one pair per configuration per round, batched per pair across configurations)
        rest = np.where(cand & ~first, row, np.inf)
        order = np.argsort(rest, axis=1, kind="stable")
        ptr = 0
        active = np.flatnonzero(best > 0.0)
        while active.size and ptr < P:
            p_next = order[active, ptr]
            c_next = rest[active, p_next]
            go = (c_next <= best[active]) & np.isfinite(c_next)
            active, p_next = active[go], p_next[go]
            if not active.size:
                break
            run(active, p_next)
            done[active, p_next] = True
            m = np.where(known[active, p_next], dist[active, p_next] - self.required[p_next], -np.inf)
            best[active] = np.minimum(best[active], m)
            active = active[best[active] > 0.0]
            ptr += 1
        skip = ~done & exact_cols
        pruned[:] = skip
        dist[skip] = cheap_d[skip]
        return self._finish(dist, upper, known, wb, wo, pruned)

    def _exact_loop_scalar(self, n, P, R, t, cheap_sp, scratch, dist, upper, known, wb, wo, pruned, cheap_d,
                           cheap_margin):
        """Reference path (``_scalar``): one configuration and one pair at a time (``_exact_pair``)."""
        full = self._pair_analytic
        cache = {}
        allowed_l = self.allowed.tolist()
        half_l = full.tolist()
        req_l = self.required.tolist()
        not_half = ~full
        for i in range(n):
            best = np.inf
            if self.prune:
                row = np.where(self.allowed, np.inf, cheap_margin[i])
                order = np.argsort(row, kind="stable")
                cms = row[order].tolist()
                done = np.zeros(P, dtype=bool)
                for p, cm in zip(order.tolist(), cms):
                    if allowed_l[p] or (cm > best and cm > 0.0):
                        break  # every later pair is allowed, or clear and above the worst: prune the rest
                    done[p] = True
                    if half_l[p]:
                        best = min(best, cm)
                        continue
                    self._exact_pair(p, i, R, t, cheap_sp, scratch, dist, upper, known, wb, wo, cache)
                    best = min(best, dist[i, p] - req_l[p] if known[i, p] else -np.inf)
                skip = ~done & not_half
                pruned[i] = skip
                dist[i, skip] = cheap_d[i, skip]
            else:
                for p in range(P):
                    if not half_l[p]:
                        self._exact_pair(p, i, R, t, cheap_sp, scratch, dist, upper, known, wb, wo, cache)
            cache.clear()

    def _finish(self, dist, upper, known, wb, wo, pruned) -> ClearanceResult:
        req = self.required
        status = np.where(dist <= 0.0, STATUS_INTRUSION, np.where(dist < req, STATUS_BELOW_MARGIN, STATUS_CLEAR))
        status = np.where(~known, STATUS_INTRUSION, status)
        status = np.where(self.allowed, STATUS_ALLOWED, status).astype(np.int8)
        margin = dist - req
        key = np.where(known, margin, -np.inf)
        key = np.where(self.allowed, np.inf, key)
        n = len(dist)
        if dist.shape[1]:
            worst = np.argmin(key, axis=1)
            worst_margin = key[np.arange(n), worst]
            none = np.all(self.allowed) if len(self.allowed) else True
            worst = np.where(none, -1, worst)
            sev = np.where(self.allowed, 0, status)
            overall = sev.max(axis=1).astype(np.int8)
        else:
            worst = np.full(n, -1)
            worst_margin = np.full(n, np.inf)
            overall = np.zeros(n, dtype=np.int8)
        upper = np.maximum(upper, dist)
        return ClearanceResult(dist, upper, known, wb, wo, status, pruned, margin, worst.astype(np.int64),
                               worst_margin, overall)

    # ------------------------------------------------------------------------------- batched exact queries
    # The same bound as ``_exact_pair`` (the one-configuration reference kept below), for one pair over
    # many configurations at once: python-fcl is still called once per configuration (for its witness
    # direction), every support gap, projection and mesh bound is one numpy expression over the batch.
    # Only elementwise arithmetic is used, so a configuration's values do not depend on the batch.

    def _fcl_batch(self, sa, sb, I, Wobj, contact=False):
        """python-fcl signed distance and witnesses of slots ``sa``, ``sb`` in configurations ``I``."""
        A, B = self._slots[sa], self._slots[sb]
        oa, ob = A.obj, B.obj
        k = len(I)
        d = np.empty(k)
        pts = np.empty((k, 2, 3))
        move_a, move_b = A.body >= 0, B.body >= 0
        Ra_, ta_ = (Wobj[0][:, sa], Wobj[1][:, sa]) if move_a else (None, None)
        Rb_, tb_ = (Wobj[0][:, sb], Wobj[1][:, sb]) if move_b else (None, None)
        Transform = fcl.Transform
        mesh_pair = A.kind == _KIND_MESH or B.kind == _KIND_MESH
        for j, i in enumerate(I.tolist()):
            if move_a:
                oa.setTransform(Transform(Ra_[i], ta_[i]))
            if move_b:
                ob.setTransform(Transform(Rb_[i], tb_[i]))
            d[j], pts[j] = _fcl_distance(oa, ob, mesh_pair, contact)
        return d, pts

    def _separation(self, sa, sb, I, Ra, ta, Rb, tb, Wobj):
        """``_separation_batch`` of slots ``sa``, ``sb`` in configurations ``I`` (python-fcl as fallback)."""
        A, B = self._slots[sa], self._slots[sb]
        return _separation_batch(A, B, Ra, ta, Rb, tb, lambda js, contact: self._fcl_batch(sa, sb, I[js], Wobj, contact))

    def _world_from_obj_i(self, s, i, Wobj):
        slot = self._slots[s]
        if slot.body < 0:
            return slot.frame_from_obj
        M = np.eye(4)
        M[:3, :3] = Wobj[0][i, s]
        M[:3, 3] = Wobj[1][i, s]
        return M

    def _hb(self, s, Rs, ts, U):
        """World support of slot ``s`` along ``U (k, m, 3)``, slot poses ``Rs (k, 3, 3)``, ``ts (k, 3)``."""
        slot = self._slots[s]
        if slot.body < 0:
            return _support_local(slot.shape, U)
        return _dot(U, ts[:, None]) + _support_local(slot.shape, _rows_times(U, Rs[:, None]))

    def _project_b(self, s, Rs, ts, pts):
        """Closest points of slot ``s`` (world) to world points ``(k, m, 3)``."""
        slot = self._slots[s]
        if slot.body < 0:
            return _closest_local(slot.shape, pts)
        Rm, tm = Rs[:, None], ts[:, None]
        return _times_rows(Rm, _closest_local(slot.shape, _rows_times(pts - tm, Rm))) + tm

    def _exact_batch(self, p, I, R, t, Wobj, cheap_sp, scratch, dist, upper, known, wb, wo):
        """Exact bound of pair ``p`` in configurations ``I (k,)`` (see ``_exact_pair``), written in place."""
        k = len(I)
        pad = self._pair_pad[p]
        best_lb = np.full(k, np.inf)
        best_up = np.full(k, np.inf)
        best_known = np.ones(k, dtype=bool)
        best_wb = np.full((k, 3), np.nan)
        best_wo = np.full((k, 3), np.nan)
        for mm in self._pair_sps[p]:
            sa, sb = int(self._sp_a[mm]), int(self._sp_b[mm])
            if self._sp_analytic[mm]:
                exact_sp, upper_sp, wb_sp, wo_sp = scratch
                e = exact_sp[I, mm]
                bt = e < best_lb
                best_lb = np.where(bt, e, best_lb)
                best_wb = np.where(bt[:, None], wb_sp[I, mm], best_wb)
                best_wo = np.where(bt[:, None], wo_sp[I, mm], best_wo)
                best_up = np.minimum(best_up, upper_sp[I, mm])
                continue
            A, B = self._slots[sa], self._slots[sb]
            Ra, ta, Rb, tb = R[I, sa], t[I, sa], R[I, sb], t[I, sb]
            d_fcl, p0, p1 = self._separation(sa, sb, I, Ra, ta, Rb, tb, Wobj)
            fin = (np.isfinite(p0).all(axis=1) & np.isfinite(p1).all(axis=1) & np.isfinite(d_fcl)
                   & (np.abs(p0).max(axis=1) < 1e6) & (np.abs(p1).max(axis=1) < 1e6))
            if not fin.all():  # no usable witness (seen for meshes in contact)
                p0[~fin] = np.nan
                p1[~fin] = np.nan
                d_fcl = np.where(fin | np.isfinite(d_fcl), d_fcl, 0.0)
            v = p1 - p0
            nv = np.where(np.isfinite(v).all(axis=1), np.sqrt(_dot(v, v)), 0.0)
            bad = (nv > 0) & (np.abs(nv - np.abs(d_fcl)) > 1e-6 * np.maximum(1.0, np.abs(d_fcl)))
            for j in np.flatnonzero(bad).tolist():
                # python-fcl sometimes returns a witness in its object's local frame (seen for
                # mesh-sphere pairs): take the reading whose separation matches the distance
                i = int(I[j])
                Ma, Mb = self._world_from_obj_i(sa, i, Wobj), self._world_from_obj_i(sb, i, Wobj)
                cand = []
                for x, y in ((p0[j], p1[j]), (p1[j], p0[j])):
                    for xa in (x, Ma[:3, :3] @ x + Ma[:3, 3]):
                        for yb in (y, Mb[:3, :3] @ y + Mb[:3, 3]):
                            cand.append((xa, yb))
                C = np.array(cand)
                err = np.abs(np.sqrt(_dot(C[:, 1] - C[:, 0], C[:, 1] - C[:, 0])) - abs(d_fcl[j]))
                p0[j], p1[j] = C[int(np.argmin(err))]
                vj = p1[j] - p0[j]
                nv[j] = float(np.sqrt(vj @ vj))
            v = p1 - p0
            ok = nv > 1e-12
            u = np.where(ok[:, None], v / np.where(ok, nv, 1.0)[:, None], np.array([0.0, 0.0, 1.0]))
            U = np.stack([u, -u], axis=1)  # (k, 2, 3): witness direction, both signs
            h_a = self._hb(sa, Ra, ta, U)
            e0 = np.minimum(np.abs(h_a[:, 0] - _dot(U[:, 0], p0)), np.abs(h_a[:, 1] - _dot(U[:, 1], p0)))
            e1 = np.minimum(np.abs(h_a[:, 0] - _dot(U[:, 0], p1)), np.abs(h_a[:, 1] - _dot(U[:, 1], p1)))
            swap = (ok & (e1 < e0))[:, None]
            pa, pb = np.where(swap, p1, p0), np.where(swap, p0, p1)
            lb = cheap_sp[I, mm].copy()
            if B.kind == _KIND_MESH:
                # where python-fcl reports contact the depth is unknown whatever the bound (see below)
                sep = np.flatnonzero(d_fcl > 0.0)
                if sep.size:
                    lb[sep] = np.maximum(lb[sep], self._mesh_bound_batch(
                        sa, Ra[sep], ta[sep], B, U[sep], ok[sep], h_a[sep], np.maximum(nv[sep], d_fcl[sep])))
                inside = np.zeros(k, dtype=bool)
                cand = (lb - pad > 0.0) & (d_fcl > 0.0)
                if B.shape.watertight and cand.any():
                    pt = _times_rows(Ra[cand], A.interior) + ta[cand]
                    inside[cand] = self._inside_zone_mesh(B, pt)
                cand &= ~inside
                if cand.any():  # the zone wholly inside the body: a mesh vertex inside the body solid
                    v0 = _rows_times(B.shape.vertices[0] - ta[cand], Ra[cand])
                    inside[cand] = g.contains_points(A.shape, v0)
                kn = ~(inside | (lb - pad <= 0.0) | (d_fcl <= 0.0))
                lb = np.where(kn, lb, np.inf)  # replaced by the sentinel below
                up = np.where(d_fcl > 0, nv, 0.0)
            else:
                kn = np.ones(k, dtype=bool)
                gap = (-self._hb(sb, Rb, tb, -U) - h_a).max(axis=1)
                lb = np.where(ok, np.maximum(lb, gap), lb)
                if _PROJECTABLE(A.shape) and _PROJECTABLE(B.shape):
                    ref = np.flatnonzero((d_fcl > 0) & (nv - lb > 1e-8))
                    if ref.size:
                        # python-fcl's witness direction is a little off: refine it by alternating
                        # projections (converge to the closest pair of two convex sets)
                        Ra_, ta_, Rb_, tb_ = Ra[ref], ta[ref], Rb[ref], tb[ref]
                        x = pb[ref][:, None]
                        for _ in range(6):
                            ya = self._project_b(sa, Ra_, ta_, x)
                            x = self._project_b(sb, Rb_, tb_, ya)
                        w = (x - ya)[:, 0]
                        nw = np.sqrt(_dot(w, w))
                        okw = nw > 1e-12  # False for NaN witnesses
                        Uw = np.where(okw[:, None], w / np.where(okw, nw, 1.0)[:, None], np.array([0.0, 0.0, 1.0]))[:, None]
                        gw = (-self._hb(sb, Rb_, tb_, -Uw) - self._hb(sa, Ra_, ta_, Uw))[:, 0]
                        lb[ref] = np.where(okw, np.maximum(lb[ref], gw), lb[ref])
                if B.body < 0:
                    chk = np.flatnonzero(cheap_sp[I, mm] <= 0.0)
                    if chk.size:
                        # analytic inside test: a point of the body inside the zone, a point of the zone in the body
                        pt = _times_rows(Ra[chk], A.interior) + ta[chk]
                        zin = _rows_times(B.interior - ta[chk], Ra[chk])
                        ins = g.contains_points(B.shape, pt) | g.contains_points(A.shape, zin)
                        lb[chk] = np.where(ins, np.minimum(lb[chk], 0.0), lb[chk])
                up = np.where(d_fcl > 0, nv, np.minimum(d_fcl, 0.0))
            upd = ~kn | (lb < best_lb)
            best_known &= kn
            best_wb = np.where(upd[:, None], pa, best_wb)
            best_wo = np.where(upd[:, None], pb, best_wo)
            best_lb = np.where(kn & (lb < best_lb), lb, best_lb)
            best_up = np.minimum(best_up, up)
        v = best_lb - pad
        unknown = np.where(np.isfinite(best_lb) & (v < 0.0), v, DEPTH_UNKNOWN)
        dist[I, p] = np.where(best_known, v, unknown)
        upper[I, p] = best_up - pad
        known[I, p] = best_known
        wb[I, p] = best_wb
        wo[I, p] = best_wo

    @staticmethod
    def _inside_zone_mesh(slot, pts):
        """``(k,)`` bool: points inside a watertight zone mesh, for points known to be off its surface.

        Only called where the body's bound to every triangle is positive, so the point is strictly
        off the surface: the winding number (exactly 0 or +-1 there) then agrees with trimesh's ray
        test, which is the fallback for a mesh that is not consistently wound.
        """
        if slot.wound:
            return np.abs(g.winding_number(slot.shape, pts)) > 0.5
        return g.contains_points(slot.shape, pts)

    def _mesh_bound_batch(self, sa, Ra, ta, slot_b, U, ok, h_u, level):
        """``_mesh_bound`` over configurations: body slot ``sa`` posed ``Ra (k, 3, 3)``, ``ta (k, 3)``,
        witness directions ``U (k, 2, 3)`` (used where ``ok``) with the body's supports ``h_u (k, 2)``;
        returns ``(k,)``.

        The mesh bound is a minimum over triangles of ``max(gap, sphere bound)``. A cheaper bound on
        each triangle's value (its sphere bound, and its gap along the triangle normal with the body's
        outer box in place of the body) limits the work: a triangle whose cheaper bound is not below
        the minimum over the evaluated ones cannot attain the minimum, so the value is the full minimum
        (``level (k,)`` is a guess of it, python-fcl's distance, used only to choose the first set).
        """
        cen, rt, nrm, tris = slot_b.tri_centers, slot_b.tri_radius, slot_b.tri_normals, slot_b.tris
        k = len(ta)
        slot_a = self._slots[sa]
        ca = _times_rows(Ra, slot_a.center) + ta  # (k, 3)
        dd = cen[None] - ca[:, None]
        sph = np.sqrt(_dot(dd, dd)) - rt - slot_a.radius  # (k, T)
        # outer-box gap along +-normal: tri_min(u) - h_outer(u)
        oc = _times_rows(Ra, slot_a.outer[0]) + ta  # (k, 3)
        ow = _times_rows(Ra[:, None], slot_a.outer[1])  # (k, 3, 3) rows
        zz = _times_rows(Ra, slot_a.zaxis)
        pn = _dot(nrm[None], oc[:, None])  # (k, T)
        spread = slot_a.r + sum(np.abs(_dot(nrm[None], ow[:, None, j])) for j in range(3))
        if slot_a.rho:
            uz = _dot(nrm[None], zz[:, None])
            spread = spread + slot_a.rho * np.sqrt(np.maximum(1.0 - uz * uz, 0.0))
        tv = _dot(nrm, tris[:, 0])  # a triangle is flat: every vertex has the same offset along its normal
        tv = np.minimum(np.minimum(tv, _dot(nrm, tris[:, 1])), _dot(nrm, tris[:, 2]))
        tv_hi = np.maximum(np.maximum(_dot(nrm, tris[:, 0]), _dot(nrm, tris[:, 1])), _dot(nrm, tris[:, 2]))
        # along +n: tri_min(n) - h(n) >= tv - (pn + spread); along -n: -tv_hi - h(-n) >= -tv_hi + pn - spread
        pre = np.maximum(sph, np.maximum(tv - pn - spread, pn - spread - tv_hi))
        # first every triangle whose cheaper bound is below python-fcl's distance (+1 mm): the minimum
        # is normally among them; where the minimum found is above that level, the remaining
        # triangles below the minimum are evaluated too (python-fcl's value only orders the work)
        level = np.where(np.isfinite(level), level + 1e-3, np.inf)
        best = np.full(k, np.inf)
        todo = pre < level[:, None]
        for _ in range(2):
            ci, ti = np.nonzero(todo)
            if ci.size:
                np.minimum.at(best, ci, self._tri_bound(sa, Ra, ta, ca, slot_b, U, ok, h_u, ci, ti, sph[ci, ti]))
            todo = (pre >= level[:, None]) & (pre < best[:, None]) & (best > level)[:, None]
            if not todo.any():
                break
        return best

    def _tri_bound(self, sa, Ra, ta, ca, slot_b, U, ok, h_u, ci, ti, sph):
        """Bound from body slot ``sa`` (configuration ``ci``) to mesh triangle ``ti``, ``(m,)`` each."""
        tris, cen = slot_b.tris[ti], slot_b.tri_centers[ti]
        nrm = slot_b.tri_normals[ti]
        Rm, tm, cm = Ra[ci], ta[ci], ca[ci]
        slot_a = self._slots[sa]
        dc = _unit(cen - cm, np.array([0.0, 0.0, 1.0]))  # (m, 3)
        q = g.closest_on_triangles(tris, cm)
        if _PROJECTABLE(slot_a.shape):
            for _ in range(3):
                c = self._project_b(sa, Rm, tm, q[:, None])[:, 0]
                q = g.closest_on_triangles(tris, c)
            dq = _unit(q - c, dc)
        else:
            dq = _unit(q - cm, dc)
        D = np.stack([nrm, -nrm, dc, dq], axis=1)  # (m, 4, 3)
        h_a = _dot(D, tm[:, None]) + _support_local(slot_a.shape, _rows_times(D, Rm[:, None]))

        def tri_min(D):
            return np.minimum(np.minimum(_dot(D, tris[:, None, 0]), _dot(D, tris[:, None, 1])), _dot(D, tris[:, None, 2]))

        gap = (tri_min(D) - h_a).max(axis=1)
        # the witness directions (both signs), where python-fcl gave one
        gw = (tri_min(U[ci]) - h_u[ci]).max(axis=1)
        gap = np.where(ok[ci], np.maximum(gap, gw), gap)
        return np.maximum(gap, sph)

    # ------------------------------------------------------------------------------- exact queries
    def _obj(self, s, i, R, t, cache):
        slot = self._slots[s]
        if slot.body < 0:
            return slot.obj
        if s not in cache:
            T = np.eye(4)
            T[:3, :3] = R[i, s]
            T[:3, 3] = t[i, s]
            T = T @ slot.frame_from_obj
            slot.obj.setTransform(_transform(T))
            cache[s] = T
        return slot.obj

    def _world_from_obj(self, s, cache):
        slot = self._slots[s]
        return slot.frame_from_obj if slot.body < 0 else cache[s]

    def _h(self, s, i, R, t, U):
        """Exact world support of slot ``s`` in configuration ``i`` along directions ``U (k, 3)``."""
        slot = self._slots[s]
        if slot.body < 0:
            return g.support(slot.shape, U)
        return U @ t[i, s] + g.support(slot.shape, U @ R[i, s])

    def _exact_pair(self, p, i, R, t, cheap_sp, scratch, dist, upper, known, wb, wo, cache):
        pad = self._pair_pad[p]
        best_lb, best_up, best_known = np.inf, np.inf, True
        best_wb = best_wo = np.full(3, np.nan)
        for mm in self._pair_sps[p]:
            sa, sb = int(self._sp_a[mm]), int(self._sp_b[mm])
            if self._sp_analytic[mm]:
                exact_sp, upper_sp, wb_sp, wo_sp = scratch
                if exact_sp[i, mm] < best_lb:
                    best_lb, best_wb, best_wo = exact_sp[i, mm], wb_sp[i, mm], wo_sp[i, mm]
                best_up = min(best_up, upper_sp[i, mm])
                continue
            oa, ob = self._obj(sa, i, R, t, cache), self._obj(sb, i, R, t, cache)
            mesh_pair = self._slots[sa].kind == _KIND_MESH or self._slots[sb].kind == _KIND_MESH

            def fallback(js, contact, oa=oa, ob=ob, mesh_pair=mesh_pair):
                dj, pts = _fcl_distance(oa, ob, mesh_pair, contact)
                return np.array([dj]), np.asarray(pts, dtype=np.float64)[None]

            d1, p0, p1 = _separation_batch(self._slots[sa], self._slots[sb], R[i:i + 1, sa], t[i:i + 1, sa],
                                           R[i:i + 1, sb], t[i:i + 1, sb], fallback)
            d_fcl, p0, p1 = float(d1[0]), p0[0], p1[0]
            if not (np.isfinite(p0).all() and np.isfinite(p1).all() and np.isfinite(d_fcl)
                    and np.abs(p0).max() < 1e6 and np.abs(p1).max() < 1e6):
                p0 = p1 = np.full(3, np.nan)  # no usable witness (seen for meshes in contact)
                d_fcl = d_fcl if np.isfinite(d_fcl) else 0.0
            v = p1 - p0
            nv = float(np.sqrt(v @ v)) if np.isfinite(v).all() else 0.0
            if nv > 0 and abs(nv - abs(d_fcl)) > 1e-6 * max(1.0, abs(d_fcl)):
                # python-fcl sometimes returns a witness in its object's local frame (seen for
                # mesh-sphere pairs): take the reading whose separation matches the distance
                Ma, Mb = self._world_from_obj(sa, cache), self._world_from_obj(sb, cache)
                cand = []
                for x, y in ((p0, p1), (p1, p0)):
                    for xa in (x, Ma[:3, :3] @ x + Ma[:3, 3]):
                        for yb in (y, Mb[:3, :3] @ y + Mb[:3, 3]):
                            cand.append((xa, yb))
                C = np.array(cand)
                err = np.abs(np.sqrt(_dot(C[:, 1] - C[:, 0], C[:, 1] - C[:, 0])) - abs(d_fcl))
                p0, p1 = C[int(np.argmin(err))]
                v = p1 - p0
                nv = float(np.sqrt(v @ v))
            # directions: witness (both signs: python-fcl's point order is not reliable for meshes)
            U = np.array([v / nv, -v / nv]) if nv > 1e-12 else np.zeros((0, 3))
            # which witness is on the body: the one attaining the body's support along the direction
            if nv > 1e-12:
                h_a = self._h(sa, i, R, t, U)
                e0 = min(abs(h_a[0] - U[0] @ p0), abs(h_a[1] - U[1] @ p0))
                e1 = min(abs(h_a[0] - U[0] @ p1), abs(h_a[1] - U[1] @ p1))
                pa, pb = (p1, p0) if e1 < e0 else (p0, p1)
            else:
                pa, pb = p0, p1
            slot_b = self._slots[sb]
            lb = cheap_sp[i, mm]
            kn = True
            if slot_b.kind == _KIND_MESH:
                lb = max(lb, self._mesh_bound(sa, i, R, t, slot_b, U))
                inside = False
                if lb - pad > 0.0 and d_fcl > 0.0 and slot_b.shape.watertight:
                    pt = R[i, sa] @ self._slots[sa].interior + t[i, sa]
                    inside = bool(g.contains_points(slot_b.shape, pt[None])[0])
                if not inside and lb - pad > 0.0 and d_fcl > 0.0:
                    # the zone wholly inside the body: a mesh vertex inside the body solid
                    v0 = (slot_b.shape.vertices[0] - t[i, sa]) @ R[i, sa]
                    inside = bool(g.contains_points(self._slots[sa].shape, v0[None])[0])
                if inside or lb - pad <= 0.0 or d_fcl <= 0.0:
                    kn = False
                    lb = np.inf  # replaced by the sentinel below
                up = nv if d_fcl > 0 else 0.0
            else:
                if U.size:
                    lb = max(lb, float((-self._h(sb, i, R, t, -U) - self._h(sa, i, R, t, U)).max()))
                if d_fcl > 0 and nv - lb > 1e-8 and _PROJECTABLE(self._slots[sa].shape) and _PROJECTABLE(slot_b.shape):
                    # python-fcl's witness direction is a little off: refine it by alternating projections
                    # (converge to the closest pair of two convex sets); any direction gives a valid bound
                    x = pb
                    for _ in range(6):
                        ya = self._project(sa, i, R, t, x[None])[0]
                        x = self._project(sb, i, R, t, ya[None])[0]
                    w = x - ya
                    nw = float(np.sqrt(w @ w))
                    if nw > 1e-12:
                        Uw = (w / nw)[None]
                        lb = max(lb, float((-self._h(sb, i, R, t, -Uw) - self._h(sa, i, R, t, Uw))[0]))
                if slot_b.body < 0 and cheap_sp[i, mm] <= 0.0:
                    # analytic inside test: a point of the body inside the zone, a point of the zone in the body
                    pt = R[i, sa] @ self._slots[sa].interior + t[i, sa]
                    zin = (slot_b.interior - t[i, sa]) @ R[i, sa]
                    if (g.contains_points(slot_b.shape, pt[None])[0]
                            or g.contains_points(self._slots[sa].shape, zin[None])[0]):
                        lb = min(lb, 0.0)
                up = nv if d_fcl > 0 else min(d_fcl, 0.0)
            if not kn:
                best_known = False
                best_wb, best_wo = pa, pb
            elif lb < best_lb:
                best_lb, best_wb, best_wo = lb, pa, pb
            best_up = min(best_up, up)
        if best_known:
            dist[i, p] = best_lb - pad
        else:
            dist[i, p] = min(DEPTH_UNKNOWN, best_lb - pad) if np.isfinite(best_lb) else DEPTH_UNKNOWN
        upper[i, p] = best_up - pad
        known[i, p] = best_known
        wb[i, p] = best_wb
        wo[i, p] = best_wo

    def _project(self, s, i, R, t, pts):
        """Closest points of slot ``s`` (world) to world points ``(k, 3)`` in configuration ``i``."""
        slot = self._slots[s]
        if slot.body < 0:
            return g.closest_point(slot.shape, pts)
        Rs, ts = R[i, s], t[i, s]
        return g.closest_point(slot.shape, (pts - ts) @ Rs) @ Rs.T + ts

    def _mesh_bound(self, sa, i, R, t, slot_b, U):
        """Lower bound on the distance from convex slot ``sa`` to the triangles of a zone mesh.

        Each triangle is convex: its bound is the best support gap over its normal (both signs), the
        witness directions ``U``, the direction to it from the body centre and a direction refined by
        alternating projections between the body and the triangle; the mesh bound is the minimum.
        """
        tris, nrm = slot_b.tris, slot_b.tri_normals
        Ra, ta = R[i, sa], t[i, sa]
        slot_a = self._slots[sa]
        ca = Ra @ slot_a.center + ta
        cen = tris.mean(axis=1)
        dc = _unit(cen - ca, np.array([0.0, 0.0, 1.0]))
        dirs = [nrm, -nrm, dc]
        q = g.closest_on_triangles(tris, ca)
        if _PROJECTABLE(slot_a.shape):
            for _ in range(3):
                c = self._project(sa, i, R, t, q)
                q = g.closest_on_triangles(tris, c)
            dirs.append(_unit(q - c, dc))
        else:
            dirs.append(_unit(q - ca, dc))
        for u in U:
            dirs.append(np.broadcast_to(u, nrm.shape))
        D = np.stack(dirs, axis=1)  # (T, k, 3)
        T_, k = D.shape[:2]
        flat = D.reshape(-1, 3)
        h_a = (flat @ ta + g.support(slot_a.shape, flat @ Ra)).reshape(T_, k)
        tri_min = np.einsum("tkc,tjc->tkj", D, tris).min(axis=2)
        gap = (tri_min - h_a).max(axis=1)
        rt = np.sqrt(((tris - cen[:, None]) ** 2).sum(axis=2)).max(axis=1)
        sph = np.sqrt(((cen - ca) ** 2).sum(axis=1)) - rt - slot_a.radius
        return float(np.maximum(gap, sph).min())


# ----------------------------------------------------------------------------------------- processes
_ENGINES: dict = {}
"""Module-level engine cache: id(cell) -> (weakref to cell, {prune: engine})."""
_WORKER = {}


def engine_for(cell, prune: bool = True) -> ClearanceEngine:
    """The cached ``ClearanceEngine`` of ``cell`` (built on first use in this process)."""
    key = id(cell)
    entry = _ENGINES.get(key)
    if entry is None or entry[0]() is not cell:
        entry = (weakref.ref(cell), {})
        _ENGINES[key] = entry
    engines = entry[1]
    if prune not in engines:
        engines[prune] = ClearanceEngine(cell, prune=prune)
    return engines[prune]


def init_worker(cell, prune: bool = True) -> None:
    """Process-pool initializer: build (or fetch) this worker's engine for ``cell``."""
    _WORKER["engine"] = engine_for(cell, prune)


def evaluate_in_worker(q) -> ClearanceResult:
    """Evaluate a batch ``(n, 6)`` with the engine set up by ``init_worker`` in this process."""
    return _WORKER["engine"].evaluate(q)
