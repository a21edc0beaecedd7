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

from dataclasses import dataclass, field
from typing import Union

import numpy as np


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
