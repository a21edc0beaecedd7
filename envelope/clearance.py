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
  between the body and the triangle -- a valid lower bound on the distance to the surface. A
  watertight mesh is a solid: an explicit inside test (a point of the body inside the mesh, trimesh's
  ray test; a mesh vertex inside the body) reports a body wholly inside the zone, or the zone inside a
  body, which touches no triangle. When a body touches or enters a zone mesh the depth is not defined:
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
the others a cheap lower bound is computed: bounding spheres, and -- unless the sphere margin is
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
_BLOCK = 64  # configurations per vectorised block (bounds memory)


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
    if kind == _KIND_MESH:
        tris = np.asarray(shape.vertices)[np.asarray(shape.faces)]
        nrm = np.cross(tris[:, 1] - tris[:, 0], tris[:, 2] - tris[:, 0])
        ln = np.linalg.norm(nrm, axis=1)
        slot.tris = tris
        slot.tri_normals = np.where(ln[:, None] > 0, nrm / np.where(ln > 0, ln, 1.0)[:, None], [0.0, 0.0, 1.0])
    return slot


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
    uz = _dot(u, zz)
    return h + rho[..., None] * np.sqrt(np.maximum(1.0 - uz * uz, 0.0))


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
        res = ClearanceResult.concatenate(parts) if parts else self._evaluate_block(q2)
        return res._index(0) if q.ndim == 1 else res

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
            h = -(ta @ nrm) + g.support(a.shape, local)
            val = -h - b.shape.offset
            pt = np.einsum("nij,nj->ni", Ra, g.support_point(a.shape, local)) + ta
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
            cheap_sp[:, m] = sphere
            pm = self._sp_pair[m]
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
            if I.size:
                aa, bb = a[J], b[J]
                u0 = _unit(d[I, J], np.array([0.0, 0.0, 1.0]))  # (k, 3)
                ax = axes[I, bb]  # (k, 3, 3)
                sgn = np.sign(_dot(ax, u0[:, None, :]))
                sgn = np.where(sgn == 0, 1.0, sgn)
                U = np.concatenate([u0[:, None], ax * sgn[..., None]], axis=1)  # (k, 4, 3)
                h_a = _outer_support(oc[I, aa], ow[I, aa], self._S_r[aa], self._S_rho[aa], zax[I, aa], U)
                h_b = _outer_support(oc[I, bb], ow[I, bb], self._S_r[bb], self._S_rho[bb], zax[I, bb], -U)
                gap = (-h_b - h_a).max(axis=-1)
                cheap_sp[I, m[J]] = np.maximum(sphere[I, J], gap)

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
        cheap_d = cheap - self._pair_pad
        cheap_margin = cheap_d - self.required
        scratch = (exact_sp, upper_sp, wb_sp, wo_sp)

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
        return self._finish(dist, upper, known, wb, wo, pruned)

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
            req = fcl.DistanceRequest(enable_nearest_points=True, enable_signed_distance=True)
            res = fcl.DistanceResult()
            d_fcl = float(fcl.distance(oa, ob, req, res))
            p0, p1 = (np.asarray(x, dtype=np.float64) for x in res.nearest_points)
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
