"""Geometry of the cell: solid shapes, the bodies of the arm and tool, and the zones.

Every shape is a *solid* (a closed region of space), in metres, given in the frame of whatever holds
it: a body's shapes in its DH frame (``frame`` 0..6; the tool and payload in frame 6, the flange),
a zone's shapes in the cell (world) frame. Shapes are immutable; arrays are read-only float64.

Shape kinds:

- ``Sphere(center, radius)``
- ``Capsule(p0, p1, radius)``: the points within ``radius`` of the segment p0-p1
- ``Box(extents, pose)``: full edge lengths, centred at the origin of ``pose`` (parent_from_box)
- ``Cylinder(radius, length, pose)``: axis along z of ``pose``, centred at its origin
- ``HalfSpace(normal, offset)``: the points x with ``normal . x <= offset`` (unit normal, pointing out
  of the solid)
- ``Convex(vertices)``: the convex hull of the vertices
- ``TriMesh(vertices, faces, watertight, source)``: a triangle mesh; a watertight mesh is treated as
  the solid it encloses, a non-watertight one as a surface only (with a warning)
"""

from __future__ import annotations

import weakref as _weakref
from dataclasses import dataclass, field
from typing import Union

import math

import numpy as np
from numba import njit


def _ro(x, shape=None) -> np.ndarray:
    arr = np.array(x, dtype=np.float64, copy=True)
    if shape is not None and arr.shape != shape:
        raise ValueError(f"expected shape {shape}, got {arr.shape}")
    arr.flags.writeable = False
    return arr


@dataclass(frozen=True, eq=False)
class Sphere:
    center: np.ndarray
    radius: float

    def __post_init__(self):
        object.__setattr__(self, "center", _ro(self.center, (3,)))
        object.__setattr__(self, "radius", float(self.radius))


@dataclass(frozen=True, eq=False)
class Capsule:
    p0: np.ndarray
    p1: np.ndarray
    radius: float

    def __post_init__(self):
        object.__setattr__(self, "p0", _ro(self.p0, (3,)))
        object.__setattr__(self, "p1", _ro(self.p1, (3,)))
        object.__setattr__(self, "radius", float(self.radius))


@dataclass(frozen=True, eq=False)
class Box:
    extents: np.ndarray
    pose: np.ndarray = field(default_factory=lambda: np.eye(4))

    def __post_init__(self):
        object.__setattr__(self, "extents", _ro(self.extents, (3,)))
        object.__setattr__(self, "pose", _ro(self.pose, (4, 4)))


@dataclass(frozen=True, eq=False)
class Cylinder:
    radius: float
    length: float
    pose: np.ndarray = field(default_factory=lambda: np.eye(4))

    def __post_init__(self):
        object.__setattr__(self, "radius", float(self.radius))
        object.__setattr__(self, "length", float(self.length))
        object.__setattr__(self, "pose", _ro(self.pose, (4, 4)))


@dataclass(frozen=True, eq=False)
class HalfSpace:
    normal: np.ndarray
    offset: float

    def __post_init__(self):
        n = _ro(self.normal, (3,))
        norm = float(np.linalg.norm(n))
        if not abs(norm - 1.0) <= 1e-9:
            raise ValueError(f"half-space normal must be a unit vector, got norm {norm:.9g}")
        object.__setattr__(self, "normal", n)
        object.__setattr__(self, "offset", float(self.offset))


@dataclass(frozen=True, eq=False)
class Convex:
    vertices: np.ndarray

    def __post_init__(self):
        v = _ro(self.vertices)
        if v.ndim != 2 or v.shape[1] != 3 or len(v) < 4:
            raise ValueError(f"a convex shape needs (n >= 4, 3) vertices, got {v.shape}")
        object.__setattr__(self, "vertices", v)


@dataclass(frozen=True, eq=False)
class TriMesh:
    vertices: np.ndarray
    faces: np.ndarray
    watertight: bool
    source: str = ""

    def __post_init__(self):
        object.__setattr__(self, "vertices", _ro(self.vertices))
        f = np.array(self.faces, dtype=np.int64, copy=True)
        f.flags.writeable = False
        object.__setattr__(self, "faces", f)
        object.__setattr__(self, "watertight", bool(self.watertight))


Shape = Union[Sphere, Capsule, Box, Cylinder, HalfSpace, Convex, TriMesh]


@dataclass(frozen=True, eq=False)
class Body:
    """A rigid part of the arm or tool: shapes in DH frame ``frame`` (0 base .. 6 flange).

    ``padding`` (metres) inflates every shape of the body (dress pack, cables): distances from the
    body are ``padding`` smaller than from its bare shapes. ``role`` is ``"link"``, ``"tool"`` or
    ``"payload"``.
    """

    name: str
    frame: int
    shapes: tuple
    padding: float = 0.0
    role: str = "link"


@dataclass(frozen=True, eq=False)
class Zone:
    """A fixed region of the cell (world frame) the arm and tool must keep clear of.

    ``kind`` is one of ``ZONE_KINDS``; ``clearance`` the required clearance in metres; ``allowed``
    the names of bodies allowed to touch it (reported as allowed contact); ``panels`` names each
    shape (a fence run has one panel per segment); ``attributes`` holds kind-specific data (fence
    height, bottom gap, thickness, opening size...), in metres.
    """

    name: str
    kind: str
    shapes: tuple
    clearance: float
    allowed: frozenset = frozenset()
    panels: tuple = ()
    attributes: dict = field(default_factory=dict)


ZONE_KINDS = ("fence", "guard", "keep-out", "fixture", "machine", "floor", "wall", "ceiling")


# ---------------------------------------------------------------------------------------------------
# Geometric functions on shapes: interior points, bounding spheres, support functions, inside tests.
#
# Directions and points are ``(k, 3)`` float64 arrays (a single ``(3,)`` is promoted and squeezed
# back). Every function works in the frame the shape is given in; ``transformed`` moves a shape.


_CACHE = _weakref.WeakKeyDictionary()
"""Per-shape derived data (hull facets, trimesh objects), keyed weakly by the (immutable) shape."""


def _cached(shape, key, make):
    entry = _CACHE.setdefault(shape, {})
    if key not in entry:
        entry[key] = make()
    return entry[key]


def _promote(x):
    arr = np.asarray(x, dtype=np.float64)
    single = arr.ndim == 1
    return (arr[None, :] if single else arr), single


def is_convex_kind(shape) -> bool:
    """True for shapes that are convex solids by kind (a ``TriMesh`` or ``HalfSpace`` is not counted)."""
    return isinstance(shape, (Sphere, Capsule, Box, Cylinder, Convex))


def convex_hull(shape) -> Convex:
    """The convex hull of a ``TriMesh`` or ``Convex`` as a ``Convex`` (its distinct hull vertices).

    A body's mesh may be replaced by its hull for clearance: the hull contains the mesh, so every
    distance to it is smaller or equal (safe).
    """
    from scipy.spatial import ConvexHull

    v = np.asarray(shape.vertices)
    hull = ConvexHull(v)
    return Convex(v[np.unique(hull.vertices)])


def hull_equations(shape) -> np.ndarray:
    """``(m, 4)`` outward facet planes ``a . x + b <= 0`` of a ``Convex`` (or a mesh's hull), unit normals."""
    from scipy.spatial import ConvexHull

    return _cached(shape, "hull_eq", lambda: np.ascontiguousarray(ConvexHull(np.asarray(shape.vertices)).equations))


def hull_faces(shape) -> np.ndarray:
    """``(m, 3)`` int triangles of the convex hull of ``shape.vertices`` (indices into ``vertices``)."""
    from scipy.spatial import ConvexHull

    return _cached(shape, "hull_faces", lambda: np.ascontiguousarray(ConvexHull(np.asarray(shape.vertices)).simplices))


def transformed(shape, parent_from_frame):
    """``shape`` (given in ``frame``) expressed in ``parent``: ``parent_from_frame`` is ``(4, 4)`` rigid."""
    T = np.asarray(parent_from_frame, dtype=np.float64)
    R, t = T[:3, :3], T[:3, 3]

    def p(x):
        return R @ np.asarray(x) + t

    if isinstance(shape, Sphere):
        return Sphere(p(shape.center), shape.radius)
    if isinstance(shape, Capsule):
        return Capsule(p(shape.p0), p(shape.p1), shape.radius)
    if isinstance(shape, Box):
        return Box(shape.extents, T @ shape.pose)
    if isinstance(shape, Cylinder):
        return Cylinder(shape.radius, shape.length, T @ shape.pose)
    if isinstance(shape, HalfSpace):
        n = R @ shape.normal
        n = n / np.linalg.norm(n)
        return HalfSpace(n, shape.offset + float(n @ t))
    if isinstance(shape, Convex):
        return Convex(shape.vertices @ R.T + t)
    if isinstance(shape, TriMesh):
        return TriMesh(shape.vertices @ R.T + t, shape.faces, shape.watertight, shape.source)
    raise TypeError(f"not a shape: {type(shape).__name__}")


def interior_point(shape) -> np.ndarray:
    """``(3,)`` a point of the solid (for a mesh: its first vertex, which lies on its boundary)."""
    if isinstance(shape, Sphere):
        return np.array(shape.center)
    if isinstance(shape, Capsule):
        return np.array(shape.p0)
    if isinstance(shape, (Box, Cylinder)):
        return np.array(shape.pose[:3, 3])
    if isinstance(shape, Convex):
        return shape.vertices.mean(axis=0)
    if isinstance(shape, TriMesh):
        return np.array(shape.vertices[0])
    if isinstance(shape, HalfSpace):
        return shape.normal * shape.offset
    raise TypeError(f"not a shape: {type(shape).__name__}")


def bounding_sphere(shape) -> tuple[np.ndarray, float]:
    """``(center (3,), radius)`` of a sphere that contains the solid (not minimal; exact for spheres).

    A ``HalfSpace`` is unbounded: radius ``inf``.
    """
    if isinstance(shape, Sphere):
        return np.array(shape.center), shape.radius
    if isinstance(shape, Capsule):
        return 0.5 * (shape.p0 + shape.p1), 0.5 * float(np.linalg.norm(shape.p1 - shape.p0)) + shape.radius
    if isinstance(shape, Box):
        return np.array(shape.pose[:3, 3]), 0.5 * float(np.linalg.norm(shape.extents))
    if isinstance(shape, Cylinder):
        return np.array(shape.pose[:3, 3]), float(np.hypot(shape.radius, 0.5 * shape.length))
    if isinstance(shape, (Convex, TriMesh)):
        v = np.asarray(shape.vertices)
        c = 0.5 * (v.min(axis=0) + v.max(axis=0))
        return c, float(np.sqrt(((v - c) ** 2).sum(axis=1).max()))
    if isinstance(shape, HalfSpace):
        return shape.normal * shape.offset, np.inf
    raise TypeError(f"not a shape: {type(shape).__name__}")


def support(shape, directions) -> np.ndarray:
    """Support function ``h(u) = max over x in the solid of u . x``.

    Parameters
    ----------
    directions : (k, 3) or (3,) float
        Need not be unit vectors (``h`` is positively homogeneous).

    Returns
    -------
    (k,) float64, or a float for a single direction. ``inf`` for a half-space except along its normal.
    """
    u, single = _promote(directions)
    if isinstance(shape, Sphere):
        h = u @ shape.center + shape.radius * np.sqrt((u * u).sum(axis=1))
    elif isinstance(shape, Capsule):
        h = np.maximum(u @ shape.p0, u @ shape.p1) + shape.radius * np.sqrt((u * u).sum(axis=1))
    elif isinstance(shape, Box):
        R, t = shape.pose[:3, :3], shape.pose[:3, 3]
        h = u @ t + np.abs(u @ R) @ (0.5 * shape.extents)
    elif isinstance(shape, Cylinder):
        z, c = shape.pose[:3, 2], shape.pose[:3, 3]
        uz = u @ z
        radial = np.sqrt(np.maximum((u * u).sum(axis=1) - uz * uz, 0.0))
        h = u @ c + 0.5 * shape.length * np.abs(uz) + shape.radius * radial
    elif isinstance(shape, (Convex, TriMesh)):
        h = (u @ shape.vertices.T).max(axis=1)
    elif isinstance(shape, HalfSpace):
        un = u @ shape.normal
        off = u - un[:, None] * shape.normal
        along = (un > 0) & ((off * off).sum(axis=1) <= 1e-24 * np.maximum((u * u).sum(axis=1), 1e-300))
        h = np.where(along, un * shape.offset, np.inf)
    else:
        raise TypeError(f"not a shape: {type(shape).__name__}")
    return float(h[0]) if single else h


def support_point(shape, directions) -> np.ndarray:
    """A point of the solid where the support function is attained, ``(k, 3)`` (or ``(3,)``).

    Not defined for a half-space (raises ``TypeError``).
    """
    u, single = _promote(directions)
    norm = np.sqrt((u * u).sum(axis=1))
    unit = u / np.where(norm > 0, norm, 1.0)[:, None]
    if isinstance(shape, Sphere):
        p = shape.center + shape.radius * unit
    elif isinstance(shape, Capsule):
        a, b = u @ shape.p0, u @ shape.p1
        base = np.where((a >= b)[:, None], shape.p0, shape.p1)
        p = base + shape.radius * unit
    elif isinstance(shape, Box):
        R, t = shape.pose[:3, :3], shape.pose[:3, 3]
        s = np.sign(u @ R) * (0.5 * shape.extents)
        p = t + s @ R.T
    elif isinstance(shape, Cylinder):
        z, c = shape.pose[:3, 2], shape.pose[:3, 3]
        uz = u @ z
        radial = u - uz[:, None] * z
        rn = np.sqrt((radial * radial).sum(axis=1))
        radial = radial / np.where(rn > 0, rn, 1.0)[:, None]
        p = c + (0.5 * shape.length * np.sign(uz))[:, None] * z + shape.radius * radial
    elif isinstance(shape, (Convex, TriMesh)):
        p = shape.vertices[np.argmax(u @ shape.vertices.T, axis=1)]
    else:
        raise TypeError(f"no support point for {type(shape).__name__}")
    return p[0] if single else p


def _trimesh_of(shape):
    import trimesh

    return _cached(
        shape, "trimesh", lambda: trimesh.Trimesh(np.array(shape.vertices), np.array(shape.faces), process=False)
    )


def contains_points(shape, points, tol: float = 0.0) -> np.ndarray:
    """``(k,)`` bool: each point lies in the solid (boundary included, widened by ``tol`` metres).

    A watertight ``TriMesh`` is tested as the solid it encloses (trimesh's ray test, ``tol`` ignored);
    a non-watertight mesh is a surface and contains no point.
    """
    p, single = _promote(points)
    if isinstance(shape, Sphere):
        inside = ((p - shape.center) ** 2).sum(axis=1) <= (shape.radius + tol) ** 2
    elif isinstance(shape, Capsule):
        d = shape.p1 - shape.p0
        dd = float(d @ d)
        t = np.zeros(len(p)) if dd == 0 else np.clip((p - shape.p0) @ d / dd, 0.0, 1.0)
        c = shape.p0 + t[:, None] * d
        inside = ((p - c) ** 2).sum(axis=1) <= (shape.radius + tol) ** 2
    elif isinstance(shape, Box):
        local = (p - shape.pose[:3, 3]) @ shape.pose[:3, :3]
        inside = (np.abs(local) <= 0.5 * shape.extents + tol).all(axis=1)
    elif isinstance(shape, Cylinder):
        local = (p - shape.pose[:3, 3]) @ shape.pose[:3, :3]
        inside = (np.abs(local[:, 2]) <= 0.5 * shape.length + tol) & (
            local[:, 0] ** 2 + local[:, 1] ** 2 <= (shape.radius + tol) ** 2
        )
    elif isinstance(shape, HalfSpace):
        inside = p @ shape.normal <= shape.offset + tol
    elif isinstance(shape, Convex):
        eq = hull_equations(shape)
        inside = (p @ eq[:, :3].T + eq[:, 3] <= tol).all(axis=1)
    elif isinstance(shape, TriMesh):
        inside = np.asarray(_trimesh_of(shape).contains(p), dtype=bool) if shape.watertight else np.zeros(len(p), bool)
    else:
        raise TypeError(f"not a shape: {type(shape).__name__}")
    return bool(inside[0]) if single else inside


def closest_point(shape, points) -> np.ndarray:
    """The point of the solid nearest to each point, ``(k, 3)`` (a point inside is its own answer).

    Defined for spheres, capsules, boxes, cylinders and half-spaces (``TypeError`` otherwise).
    """
    p, single = _promote(points)
    if isinstance(shape, Sphere):
        d = p - shape.center
        n = np.sqrt((d * d).sum(axis=1))
        scale = np.where(n > shape.radius, shape.radius / np.where(n > 0, n, 1.0), 1.0)
        out = shape.center + d * scale[:, None]
    elif isinstance(shape, Capsule):
        c = closest_on_segment(shape.p0, shape.p1, p)
        d = p - c
        n = np.sqrt((d * d).sum(axis=1))
        scale = np.where(n > shape.radius, shape.radius / np.where(n > 0, n, 1.0), 1.0)
        out = c + d * scale[:, None]
    elif isinstance(shape, Box):
        R, t = shape.pose[:3, :3], shape.pose[:3, 3]
        h = 0.5 * shape.extents
        out = np.clip((p - t) @ R, -h, h) @ R.T + t
    elif isinstance(shape, Cylinder):
        R, t = shape.pose[:3, :3], shape.pose[:3, 3]
        local = (p - t) @ R
        z = np.clip(local[:, 2], -0.5 * shape.length, 0.5 * shape.length)
        rad = np.hypot(local[:, 0], local[:, 1])
        scale = np.where(rad > shape.radius, shape.radius / np.where(rad > 0, rad, 1.0), 1.0)
        out = np.column_stack([local[:, 0] * scale, local[:, 1] * scale, z]) @ R.T + t
    elif isinstance(shape, HalfSpace):
        s = p @ shape.normal - shape.offset
        out = p - np.maximum(s, 0.0)[:, None] * shape.normal
    else:
        raise TypeError(f"no closest point for {type(shape).__name__}")
    return out[0] if single else out


def closest_on_segment(p0, p1, points) -> np.ndarray:
    """``(k, 3)`` nearest points of the segment p0-p1 to ``points (k, 3)``."""
    d = np.asarray(p1) - np.asarray(p0)
    dd = float(d @ d)
    t = np.zeros(len(points)) if dd == 0 else np.clip((points - p0) @ d / dd, 0.0, 1.0)
    return p0 + t[:, None] * d


def closest_on_triangles(tris, points) -> np.ndarray:
    """Nearest points of triangles ``tris (T, 3, 3)`` to points ``(T, 3)`` (one point per triangle).

    The Voronoi-region method of Ericson, "Real-Time Collision Detection" (2005), sec. 5.1.5, vectorised.
    """
    a, b, c = tris[:, 0], tris[:, 1], tris[:, 2]
    p = np.broadcast_to(points, a.shape)
    ab, ac, ap = b - a, c - a, p - a
    d1, d2 = (ab * ap).sum(1), (ac * ap).sum(1)
    bp = p - b
    d3, d4 = (ab * bp).sum(1), (ac * bp).sum(1)
    cp = p - c
    d5, d6 = (ab * cp).sum(1), (ac * cp).sum(1)
    va = d3 * d6 - d5 * d4
    vb = d5 * d2 - d1 * d6
    vc = d1 * d4 - d3 * d2
    denom = va + vb + vc
    safe = np.where(np.abs(denom) > 1e-300, denom, 1.0)
    out = a + ab * (vb / safe)[:, None] + ac * (vc / safe)[:, None]  # interior
    # edges (checked before vertices, which override them)
    with np.errstate(invalid="ignore", divide="ignore"):
        m_bc = (va <= 0) & (d4 - d3 >= 0) & (d5 - d6 >= 0)
        w = (d4 - d3) / np.where(m_bc, (d4 - d3) + (d5 - d6), 1.0)
        out = np.where(m_bc[:, None], b + w[:, None] * (c - b), out)
        m_ac = (vb <= 0) & (d2 >= 0) & (d6 <= 0)
        w = d2 / np.where(m_ac, d2 - d6, 1.0)
        out = np.where(m_ac[:, None], a + w[:, None] * ac, out)
        m_ab = (vc <= 0) & (d1 >= 0) & (d3 <= 0)
        w = d1 / np.where(m_ab, d1 - d3, 1.0)
        out = np.where(m_ab[:, None], a + w[:, None] * ab, out)
    out = np.where(((d6 >= 0) & (d5 <= d6))[:, None], c, out)
    out = np.where(((d3 >= 0) & (d4 <= d3))[:, None], b, out)
    out = np.where(((d1 <= 0) & (d2 <= 0))[:, None], a, out)
    return out


def box_corners(box) -> np.ndarray:
    """``(8, 3)`` corners of a ``Box`` in its parent frame."""
    h = 0.5 * np.asarray(box.extents)
    s = np.array([[i, j, k] for i in (-1, 1) for j in (-1, 1) for k in (-1, 1)], dtype=np.float64)
    return (s * h) @ box.pose[:3, :3].T + box.pose[:3, 3]


def winding_number(shape, points) -> np.ndarray:
    """``(k,)`` generalised winding number of a closed ``TriMesh`` about each point (``(k, 3)``).

    The sum of the signed solid angles of the triangles seen from the point, over 4 pi, with the
    closed form of van Oosterom and Strackee, "The solid angle of a plane triangle", IEEE Trans.
    Biomed. Eng. 30 (1983). For a watertight, consistently wound mesh it is +-1 (the sign follows the
    winding) for a point inside and 0 outside; it is not reliable for a point on the surface itself.
    """
    p, single = _promote(points)
    tris = _cached(shape, "tris", lambda: np.ascontiguousarray(np.asarray(shape.vertices, dtype=np.float64)[np.asarray(shape.faces)]))
    p = np.ascontiguousarray(p, dtype=np.float64).reshape(-1, 3)
    w = np.empty(len(p))
    _winding_batch(tris, p, w)
    return float(w[0]) if single else w


def is_consistently_wound(shape) -> bool:
    """True if every edge of a ``TriMesh`` is used once in each direction (closed and consistently wound)."""
    f = np.asarray(shape.faces)
    if not len(f):
        return False
    e = np.concatenate([f[:, [0, 1]], f[:, [1, 2]], f[:, [2, 0]]])
    fwd = {(int(i), int(j)) for i, j in e}
    return len(fwd) == len(e) and all((j, i) in fwd for i, j in fwd)


@njit(cache=True, nogil=True)
def winding_of_triangles(T, t0, t1, p):
    """Winding number about point ``p (3,)`` of triangles ``T[t0:t1]`` (``(k, 3, 3)``), see ``winding_number``."""
    w = 0.0
    for k in range(t0, t1):
        a0, a1, a2 = T[k, 0, 0] - p[0], T[k, 0, 1] - p[1], T[k, 0, 2] - p[2]
        b0, b1, b2 = T[k, 1, 0] - p[0], T[k, 1, 1] - p[1], T[k, 1, 2] - p[2]
        c0, c1, c2 = T[k, 2, 0] - p[0], T[k, 2, 1] - p[1], T[k, 2, 2] - p[2]
        la = math.sqrt(a0 * a0 + a1 * a1 + a2 * a2)
        lb = math.sqrt(b0 * b0 + b1 * b1 + b2 * b2)
        lc = math.sqrt(c0 * c0 + c1 * c1 + c2 * c2)
        num = a0 * (b1 * c2 - b2 * c1) + a1 * (b2 * c0 - b0 * c2) + a2 * (b0 * c1 - b1 * c0)
        den = la * lb * lc + (a0 * b0 + a1 * b1 + a2 * b2) * lc + (a0 * c0 + a1 * c1 + a2 * c2) * lb \
            + (b0 * c0 + b1 * c1 + b2 * c2) * la
        w += math.atan2(num, den)
    return w / (2.0 * np.pi)


@njit(cache=True, nogil=True)
def _winding_batch(T, P, out):
    for i in range(P.shape[0]):
        out[i] = winding_of_triangles(T, 0, T.shape[0], P[i])
