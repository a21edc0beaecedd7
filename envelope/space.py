"""The arm's spaces in ISO 10218 terms: maximum, restricted and operating space, as conservative voxels.

- ``maximum_space(cell)``: everything the links, tool and payload can sweep over the full joint
  ranges (``cell.arm.limits``);
- ``restricted_space(cell, limits, allowance)``: the same over limited ranges (soft axis limits),
  grown by the stopping allowance;
- ``operating_space(cell, configurations, grow)``: the union of what given configurations occupy,
  grown by ``grow`` (for sampled motions: the sampling step's travel bound).

Every space is CONSERVATIVE: it contains the true swept volume of the modelled solids. The method
(see docs/spaces.md and ``Space.method``), in short:

1. Sphere model. Every shape of a body in DH frame 1..3 is covered by spheres (a capsule or cylinder
   by spheres along its axis, a box by spheres on its mid-plane, a convex or mesh by its oriented
   bounding box); ``Body.padding`` is added to every radius. Everything beyond the wrist (frames
   4..6, tool, payload) is enclosed, for ANY values of joints 4..6, in ONE sphere fixed in frame 3:
   each key point (capsule ends, box corners, hull vertices) is carried back joint by joint, each
   joint's full circle being enclosed in a sphere about its axis (exact distance bounds); the
   sphere's centre is picked among those points to make it smallest (the wrist centre for a
   spherical wrist).
2. Joints 2 and 3 are sampled on a grid of cells over their ranges (joint 1 at 0). In a cell, a
   point moves at most ``sum_j |dq_j| / 2 * r_j`` from its place at the cell's centre, ``r_j`` an
   upper bound of its distance from joint j's axis over the cell; every sphere is grown by that.
3. Joint 1 is exact: the arm rotates rigidly about the fixed axis 1, so the distance from a point x
   to a sphere centre c revolved over the joint-1 range is at least
   ``hypot(rho_x sin g, d2(rho_x cos g, z_x; rho_c, z_c))``, g the angle (at most 90 deg) between x's
   azimuth and the revolved arc, d2 the distance in the meridian half-plane; it is exact where x's
   azimuth is on the arc (g = 0). The meridian distances come from 2-D Euclidean distance transforms
   of the centres (per radius class, per azimuth bin of the centres, rasterised on a fine grid).
4. A world voxel is marked when this lower bound on its centre's distance to the grown spheres is at
   most half the voxel diagonal (plus the allowance): every voxel the true swept solid touches is
   marked. The mesh is the boundary of the union of the marked cubes (it contains the true space).

Lengths in metres, world (cell) frame; outlines for the report in millimetres.
"""

from __future__ import annotations

import math
import os
import tempfile
import threading
import weakref
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
from numba import njit

from . import geometry as g
from .errors import InputError
from .kinematics.arm import N_JOINTS
from .units import to_mm

__all__ = [
    "Space",
    "SpaceFiles",
    "HorizontalDistance",
    "wrist_spheres",
    "wrist_sphere",
    "voxel_mesh",
    "box_footprint",
    "maximum_space",
    "restricted_space",
    "operating_space",
    "write_space",
    "space_outline",
    "DEFAULT_PITCH",
]

DEFAULT_PITCH = 0.02
"""Default voxel edge (m)."""

_FULL_TURN = 2.0 * math.pi - 1e-12


# ====================================================================== result
@dataclass(frozen=True, eq=False)
class Space:
    """A conservative voxel space in the world frame.

    Attributes
    ----------
    kind : str
        ``"maximum"``, ``"restricted"`` or ``"operating"``.
    origin : (3,) float
        World coordinates of the minimum corner of voxel ``[0, 0, 0]``; voxel ``[i, j, k]`` is the cube
        ``origin + pitch * ([i, j, k] + [0, 1])``.
    pitch : float
        Voxel edge, metres.
    occupancy : (nx, ny, nz) bool
        Marked voxels. The union of the marked cubes contains the true space.
    mesh : trimesh.Trimesh
        The boundary of the union of the marked cubes (watertight, world frame, metres).
    bounds : (2, 3) float
        Lower and upper corners of the marked cubes (metres).
    limits : (6, 2) float or None
        Joint ranges used (radians); None for an operating space.
    allowance : float
        Metres added around the swept solid (the stopping allowance, or ``grow``).
    over_approximation : float
        A bound (metres) on how far the marked cubes can reach beyond the swept model solids plus
        ``allowance``, apart from what the method encloses on purpose (see ``method``).
    method : str
        What was computed and what it over-approximates.
    """

    kind: str
    origin: np.ndarray
    pitch: float
    occupancy: np.ndarray
    mesh: object
    bounds: np.ndarray
    limits: np.ndarray | None
    allowance: float
    over_approximation: float
    method: str
    _cache: dict = field(default_factory=dict, repr=False, compare=False)

    # ------------------------------------------------------------------ geometry of the voxels
    @property
    def shape(self) -> tuple:
        return tuple(self.occupancy.shape)

    @property
    def half_diagonal(self) -> float:
        return 0.5 * math.sqrt(3.0) * self.pitch

    def voxel_centers(self, index) -> np.ndarray:
        """``(k, 3)`` world centres of voxels with integer ``index`` ``(k, 3)``."""
        return self.origin + (np.asarray(index, dtype=np.float64) + 0.5) * self.pitch

    def marked_indices(self) -> np.ndarray:
        """``(k, 3)`` int indices of the marked voxels."""
        if "marked" not in self._cache:
            self._cache["marked"] = np.argwhere(self.occupancy)
        return self._cache["marked"]

    def marked_centers(self) -> np.ndarray:
        """``(k, 3)`` world centres of the marked voxels (``voxel_centers(marked_indices())``, read-only)."""
        if "marked centres" not in self._cache:
            c = self.voxel_centers(self.marked_indices())
            c.flags.writeable = False
            self._cache["marked centres"] = c
        return self._cache["marked centres"]

    def boundary_indices(self) -> np.ndarray:
        """``(k, 3)`` int indices of marked voxels with at least one unmarked (or outside) face neighbour."""
        if "boundary" not in self._cache:
            occ = np.pad(self.occupancy, 1)
            inner = occ[1:-1, 1:-1, 1:-1]
            full = inner.copy()
            for axis in range(3):
                for step in (1, -1):
                    full &= np.roll(occ, step, axis=axis)[1:-1, 1:-1, 1:-1]
            self._cache["boundary"] = np.argwhere(inner & ~full)
        return self._cache["boundary"]

    def contains(self, points) -> np.ndarray:
        """``(k,)`` bool: each point lies in a marked voxel (boundary included)."""
        p, single = _promote(points)
        out = np.zeros(len(p), dtype=bool)
        f = (p - self.origin) / self.pitch
        for shift in _corner_shifts(f):
            idx = shift
            ok = np.all((idx >= 0) & (idx < np.array(self.occupancy.shape)), axis=1)
            hit = np.zeros(len(p), dtype=bool)
            hit[ok] = self.occupancy[idx[ok, 0], idx[ok, 1], idx[ok, 2]]
            out |= hit
        return bool(out[0]) if single else out

    # ------------------------------------------------------------------ distances
    def distance_to(self, points) -> np.ndarray:
        """A lower bound on the distance (m) from each point to the space (0 inside).

        Parameters
        ----------
        points : (k, 3) or (3,) float, world frame, metres

        Returns
        -------
        (k,) float64 (a float for one point): the exact distance to the union of the marked cubes
        (the nearest boundary cubes by a k-d tree of their centres), so never more than the distance
        to the true space.
        """
        p, single = _promote(points)
        bidx = self.boundary_indices()
        if len(bidx) == 0:
            out = np.full(len(p), np.inf)
            return float(out[0]) if single else out
        tree = self._tree()
        k = min(8, len(bidx))
        dist, nearest = tree.query(p, k=k)
        dist = dist.reshape(len(p), k)
        nearest = nearest.reshape(len(p), k)
        out = self._cube_distance(p, bidx[nearest])
        if k < len(bidx):
            # a cube whose centre is farther than the k-th is at least (that - half diagonal) away;
            # where that could be closer, look at every centre within (best + half diagonal)
            unsure = np.flatnonzero(dist[:, -1] - self.half_diagonal < out)
            for i in unsure:
                near = tree.query_ball_point(p[i], out[i] + self.half_diagonal)
                if near:
                    out[i] = min(out[i], float(self._cube_distance(p[i:i + 1], bidx[np.array(near)][None])[0]))
        out = np.where(self.contains(p), 0.0, out)
        return float(out[0]) if single else out

    def _cube_distance(self, p, idx):
        """``(n,)`` distance from points (n, 3) to the nearest of the cubes ``idx`` (n, k, 3)."""
        lo = self.voxel_centers(idx) - 0.5 * self.pitch
        gap = np.maximum(np.maximum(lo - p[:, None, :], p[:, None, :] - (lo + self.pitch)), 0.0)
        return np.sqrt((gap * gap).sum(axis=2)).min(axis=1)

    def _tree(self):
        if "tree" not in self._cache:
            from scipy.spatial import cKDTree

            self._cache["tree"] = cKDTree(self.voxel_centers(self.boundary_indices()))
        return self._cache["tree"]

    def column_top(self) -> np.ndarray:
        """``(nx, ny)`` float: the top (m) of the highest marked cube in each column, ``-inf`` if none."""
        if "top" not in self._cache:
            occ = self.occupancy
            any_ = occ.any(axis=2)
            k = occ.shape[2] - 1 - np.argmax(occ[:, :, ::-1], axis=2)
            top = self.origin[2] + (k + 1) * self.pitch
            self._cache["top"] = np.where(any_, top, -np.inf)
        return self._cache["top"]

    def column_centers_xy(self) -> np.ndarray:
        """``(nx, ny, 2)`` world XY of the column centres."""
        nx, ny, _ = self.occupancy.shape
        x = self.origin[0] + (np.arange(nx) + 0.5) * self.pitch
        y = self.origin[1] + (np.arange(ny) + 0.5) * self.pitch
        return np.stack(np.meshgrid(x, y, indexing="ij"), axis=-1)

    def max_height_near(self, xy_polyline, radius: float) -> float | None:
        """The highest point (m) of the space within horizontal distance ``radius`` of a polyline.

        A column counts when its square footprint comes within ``radius`` of the polyline (its centre
        within ``radius`` + half the square's diagonal); its height is the top of its highest marked
        cube. Conservative: never lower than the true space's highest point there.

        Parameters
        ----------
        xy_polyline : (m, 2) float, world XY, metres (m >= 1; one point is a point)
        radius : float, metres >= 0

        Returns
        -------
        float, or None when no part of the space is that near.
        """
        pts = _polyline(xy_polyline)
        if not (math.isfinite(radius) and radius >= 0):
            raise InputError(f"expected a finite radius >= 0 m, got {radius!r}", item="radius")
        top = self.column_top()
        d = _dist_to_polyline(self.column_centers_xy().reshape(-1, 2), pts).reshape(top.shape)
        near = (d <= radius + self.pitch / math.sqrt(2.0)) & np.isfinite(top)
        return float(top[near].max()) if near.any() else None

    def horizontal_distance_to_box(self, box) -> "HorizontalDistance":
        """A lower bound on the horizontal (XY) distance from a ``Box`` (world frame) to the space.

        The box's footprint is the convex hull of its 8 corners projected on XY; each occupied
        column's square footprint is bounded by its centre minus half the square's diagonal.

        Returns
        -------
        HorizontalDistance
            ``distance`` (m, 0 when a footprint overlaps), the column centre where it is smallest,
            and ``per_level`` (nz,) the same bound per voxel layer (``inf`` where the layer is empty).
        """
        poly = box_footprint(box)
        xy = self.column_centers_xy().reshape(-1, 2)
        d = _dist_to_polygon(xy, poly).reshape(self.occupancy.shape[:2])
        d = np.maximum(d - self.pitch / math.sqrt(2.0), 0.0)
        per_level = np.where(self.occupancy, d[:, :, None], np.inf).min(axis=(0, 1))
        occupied = self.occupancy.any(axis=2)
        if not occupied.any():
            return HorizontalDistance(math.inf, None, per_level)
        masked = np.where(occupied, d, np.inf)
        i, j = np.unravel_index(np.argmin(masked), masked.shape)
        at = self.column_centers_xy()[i, j]
        return HorizontalDistance(float(masked[i, j]), np.array(at), per_level)

    def layer_bounds(self) -> np.ndarray:
        """``(nz, 2)`` the bottom and top (m) of every voxel layer."""
        z0 = self.origin[2] + np.arange(self.occupancy.shape[2]) * self.pitch
        return np.column_stack([z0, z0 + self.pitch])


@dataclass(frozen=True, eq=False)
class HorizontalDistance:
    """Horizontal distance bound from a panel to a space: ``distance`` (m), ``at_xy`` (2,) or None,
    ``per_level`` (nz,) per voxel layer."""

    distance: float
    at_xy: np.ndarray | None
    per_level: np.ndarray


@dataclass(frozen=True)
class SpaceFiles:
    """The files ``write_space`` wrote."""

    stl: Path
    glb: Path


# ====================================================================== small helpers
def _promote(x):
    arr = np.asarray(x, dtype=np.float64)
    single = arr.ndim == 1
    arr = arr[None, :] if single else arr
    if arr.ndim != 2 or arr.shape[1] != 3:
        raise InputError(f"expected points of shape (3,) or (k, 3), got {np.shape(x)}", item="points")
    return arr, single


def _corner_shifts(f):
    """Voxel indices a point with fractional index ``f`` lies in (several on shared faces)."""
    base = np.floor(f).astype(np.int64)
    on = np.isclose(f, np.round(f), atol=1e-9)
    out = [base]
    for axis in range(3):
        extra = []
        for idx in out:
            alt = idx.copy()
            alt[on[:, axis], axis] -= 1
            extra.append(alt)
        out += extra
    return out


def _polyline(xy):
    pts = np.asarray(xy, dtype=np.float64)
    if pts.ndim != 2 or pts.shape[1] != 2 or len(pts) < 1 or not np.isfinite(pts).all():
        raise InputError(f"expected a finite (m >= 1, 2) polyline, got shape {np.shape(xy)}", item="xy_polyline")
    return pts


def _dist_to_polyline(p, pts):
    """``(k,)`` distance from 2-D points ``p`` to the polyline ``pts`` (m, 2)."""
    if len(pts) == 1:
        return np.sqrt(((p - pts[0]) ** 2).sum(axis=1))
    best = np.full(len(p), np.inf)
    for a, b in zip(pts[:-1], pts[1:]):
        d = b - a
        dd = float(d @ d)
        t = np.zeros(len(p)) if dd == 0 else np.clip((p - a) @ d / dd, 0.0, 1.0)
        c = a + t[:, None] * d
        best = np.minimum(best, np.sqrt(((p - c) ** 2).sum(axis=1)))
    return best


def _dist_to_polygon(p, poly):
    """``(k,)`` distance from 2-D points to a convex polygon (counter-clockwise), 0 inside."""
    closed = np.vstack([poly, poly[:1]])
    edge = _dist_to_polyline(p, closed)
    inside = np.ones(len(p), dtype=bool)
    for a, b in zip(closed[:-1], closed[1:]):
        e = b - a
        inside &= (e[0] * (p[:, 1] - a[1]) - e[1] * (p[:, 0] - a[0])) >= -1e-12
    return np.where(inside, 0.0, edge)


def box_footprint(box) -> np.ndarray:
    """``(m, 2)`` counter-clockwise convex footprint (XY) of a ``Box``."""
    from scipy.spatial import ConvexHull

    def make():
        xy = g.box_corners(box)[:, :2]
        hull = ConvexHull(xy)
        out = xy[hull.vertices]  # scipy gives 2-D hull vertices counter-clockwise
        out.flags.writeable = False
        return out

    return g._cached(box, "footprint", make).copy()


# ====================================================================== sphere model of the bodies
def _key_points(shape):
    """``(points (k, 3), radius)``: the shape lies in the convex hull of the points grown by radius."""
    if isinstance(shape, g.Sphere):
        return shape.center[None, :], shape.radius
    if isinstance(shape, g.Capsule):
        return np.stack([shape.p0, shape.p1]), shape.radius
    if isinstance(shape, g.Box):
        return g.box_corners(shape), 0.0
    if isinstance(shape, g.Cylinder):
        return g.box_corners(g.Box([2 * shape.radius, 2 * shape.radius, shape.length], shape.pose)), 0.0
    if isinstance(shape, (g.Convex, g.TriMesh)):
        return np.asarray(g.convex_hull(shape).vertices if isinstance(shape, g.TriMesh) else shape.vertices), 0.0
    raise InputError(f"a moving body cannot hold a {type(shape).__name__}", item="body shape")


def _spheres_along(p0, p1, r, excess):
    """Spheres covering the capsule p0-p1 of radius r, each at most ``excess`` larger than needed."""
    length = float(np.linalg.norm(p1 - p0))
    step = 2.0 * math.sqrt((r + excess) ** 2 - r * r)
    n = max(1, int(math.ceil(length / step)))
    t = np.linspace(0.0, 1.0, n + 1)
    centres = p0 + t[:, None] * (p1 - p0)
    return centres, math.sqrt(r * r + (0.5 * length / n) ** 2)


def _covering_spheres(shape, excess):
    """``(centres (k, 3), radius)``: spheres whose union contains the shape (same frame)."""
    if isinstance(shape, g.Sphere):
        return shape.center[None, :], shape.radius
    if isinstance(shape, g.Capsule):
        return _spheres_along(shape.p0, shape.p1, shape.radius, excess)
    if isinstance(shape, g.Cylinder):
        z, c = shape.pose[:3, 2], shape.pose[:3, 3]
        h = 0.5 * shape.length
        return _spheres_along(c - h * z, c + h * z, shape.radius, excess)
    if isinstance(shape, (g.Convex, g.TriMesh)):
        import trimesh

        pts, _ = _key_points(shape)
        to_origin, extents = trimesh.bounds.oriented_bounds(pts)
        return _covering_spheres(g.Box(extents, np.linalg.inv(to_origin)), excess)
    if isinstance(shape, g.Box):
        ext = np.asarray(shape.extents)
        order = np.argsort(ext)  # thinnest axis first
        thin, a1, a2 = order
        hz = 0.5 * ext[thin]
        step = max(2.0 * hz, excess, 1e-4)
        axes_pts = []
        halves = []
        for ax in (a1, a2):
            n = max(1, int(math.ceil(ext[ax] / step)))
            axes_pts.append(np.linspace(-0.5 * ext[ax], 0.5 * ext[ax], n + 1))
            halves.append(0.5 * ext[ax] / n)
        u, v = np.meshgrid(axes_pts[0], axes_pts[1], indexing="ij")
        local = np.zeros((u.size, 3))
        local[:, a1] = u.ravel()
        local[:, a2] = v.ravel()
        centres = local @ shape.pose[:3, :3].T + shape.pose[:3, 3]
        return centres, math.sqrt(hz * hz + halves[0] ** 2 + halves[1] ** 2)
    raise InputError(f"a moving body cannot hold a {type(shape).__name__}", item="body shape")


def _read_only(spheres):
    c = np.array(spheres[0], dtype=np.float64)
    c.flags.writeable = False
    return c, float(spheres[1])


def _moving_bodies(cell):
    bodies = [b for b in cell.links if b.frame >= 1] + list(cell.tool.bodies)
    for b in bodies:
        if not 0 <= b.frame <= N_JOINTS:
            raise InputError(f"expected a DH frame 0..6, got {b.frame}", item=f'body "{b.name}"')
    return bodies


def _frame_spheres(cell, frames, excess):
    """``(frame (k,), centres (k, 3), radii (k,))`` for bodies in the given frames (local coordinates)."""
    fr, cs, rs = [], [], []
    for b in _moving_bodies(cell):
        if b.frame not in frames:
            continue
        for s in b.shapes:  # the shapes are immutable: their covering spheres are computed once
            c, r = g._cached(s, ("covering spheres", float(excess)),
                             lambda s=s: _read_only(_covering_spheres(s, excess)))
            fr.append(np.full(len(c), b.frame))
            cs.append(c)
            rs.append(np.full(len(c), r + b.padding))
    if not fr:
        return np.zeros(0, int), np.zeros((0, 3)), np.zeros(0)
    return np.concatenate(fr), np.vstack(cs), np.concatenate(rs)


def _dh_parts(arm, j):
    """``(L, R)`` with ``frame_(j-1)_from_frame_j = L @ Rz(theta_j) @ R`` (j = 1..6)."""
    i = j - 1

    def rx(a):
        c, s = math.cos(a), math.sin(a)
        return np.array([[1, 0, 0, 0], [0, c, -s, 0], [0, s, c, 0], [0, 0, 0, 1.0]])

    def t(x, y, z):
        T = np.eye(4)
        T[:3, 3] = (x, y, z)
        return T

    if arm.convention == "standard":
        return np.eye(4), t(0, 0, arm.d[i]) @ t(arm.a[i], 0, 0) @ rx(arm.alpha[i])
    return rx(arm.alpha[i]) @ t(arm.a[i], 0, 0), t(0, 0, arm.d[i])


def wrist_spheres(cell, excess: float = 0.005):
    """``(centres (k, 3) in DH frame 3, radii (k,))``: spheres fixed in frame 3 whose union contains
    every body in frames 4..6 (links, tool, payload, padding included) for ANY values of joints 4..6.

    Each covering sphere (centre v in frame k, radius r) is carried to frame k-1 as a sphere about the
    centre of the circle v runs on about joint k's axis, the circle's radius added to r (every position
    of the sphere over a full turn of joint k lies in it); repeated down to frame 3. Spheres inside
    another are dropped. Empty arrays when there is nothing beyond frame 3.
    """
    fr, local, radii = _frame_spheres(cell, (4, 5, 6), excess)
    if len(radii) == 0:
        return np.zeros((0, 3)), np.zeros(0)
    P, R = local.copy(), radii.copy()
    for j in range(N_JOINTS, 3, -1):
        sel = fr >= j
        if not sel.any():
            continue
        L, Rt = _dh_parts(cell.arm, j)
        w = P[sel] @ Rt[:3, :3].T + Rt[:3, 3]
        R[sel] = R[sel] + np.hypot(w[:, 0], w[:, 1])
        on_axis = np.column_stack([np.zeros(len(w)), np.zeros(len(w)), w[:, 2]])
        P[sel] = on_axis @ L[:3, :3].T + L[:3, 3]
    order = np.argsort(-R)
    keep = []
    for i in order:
        if not any(np.linalg.norm(P[i] - P[k]) + R[i] <= R[k] + 1e-12 for k in keep):
            keep.append(i)
    keep = np.array(keep)
    return P[keep], R[keep]


def wrist_sphere(cell):
    """``(centre (3,) in frame 3, radius)``: ONE sphere containing ``wrist_spheres`` (so every body in
    frames 4..6 for any joint 4..6 values), about the candidate centre that makes it smallest (the
    wrist centre for a spherical wrist); for reports. Radius 0 when there is nothing beyond frame 3."""
    P, R = wrist_spheres(cell)
    if len(R) == 0:
        return np.zeros(3), 0.0
    cands = np.vstack([P, P.mean(axis=0), np.zeros(3)])
    need = (np.sqrt(((P[None, :, :] - cands[:, None, :]) ** 2).sum(axis=2)) + R[None, :]).max(axis=1)
    k = int(np.argmin(need))
    return cands[k], float(need[k])


# ====================================================================== the swept spheres (q1 = 0)
@dataclass(frozen=True)
class _Instances:
    centres: np.ndarray  # (n, 3) base frame, joint 1 at 0
    radii: np.ndarray  # (n,) grown
    max_growth: float
    cover_excess: float
    n_cells: tuple


def _joint_axes(arm, q, frames=None):
    """``(points, directions)`` (..., 6, 3) of the joint axes (base frame); like ``Arm.joint_axes``,
    whose batch result has its axes in another order (advanced indexing), so done here from frames
    (``frames``: ``arm.frames(q)`` when already computed)."""
    F = arm.frames(q) if frames is None else frames
    idx = np.arange(N_JOINTS) if arm.convention == "standard" else np.arange(1, N_JOINTS + 1)
    sel = F[..., idx, :, :]
    return sel[..., :3, 3], sel[..., :3, 2]


def _distance_to_axes(points, axis_p, axis_u):
    """``(n,)`` distance from points (n, 3) to axes (n, 3)+(n, 3)."""
    v = points - axis_p
    along = (v * axis_u).sum(axis=-1)
    return np.sqrt(np.maximum((v * v).sum(axis=-1) - along * along, 0.0))


def _swept_instances(cell, limits, growth_budget, cover_excess) -> _Instances:
    arm = cell.arm
    frame_ids, local, radii = _frame_spheres(cell, (1, 2, 3), cover_excess)
    wc, wr = wrist_spheres(cell, cover_excess)
    if len(wr):
        frame_ids = np.concatenate([frame_ids, np.full(len(wr), 3)])
        local = np.vstack([local, wc])
        radii = np.concatenate([radii, wr])
    if len(radii) == 0:
        raise InputError("the arm has no moving geometry (links 1..6 and tool have no shapes)", item="cell")

    # reach bounds from axes 2 and 3 (any configuration), to size the grid
    q0 = np.zeros(N_JOINTS)
    F0 = arm.frames(q0)
    ap, au = _joint_axes(arm, q0, F0)
    pos0 = np.einsum("kij,kj->ki", F0[frame_ids, :3, :3], local) + F0[frame_ids, :3, 3]
    sel3 = frame_ids == 3
    r3 = _distance_to_axes(pos0, ap[2], au[2]) + radii  # invariant under q3 for frame-3 spheres
    r3max = float(r3[sel3].max()) if sel3.any() else 0.0
    # for sizing the grid: the distance from axis 2 is at most |x - p3| + |p3 - p2| (frame-3 spheres)
    # or |x - p2| (frame-2 spheres), p_j the point on axis j, which do not change with joints 2, 3
    d_p2 = np.sqrt(((pos0 - ap[1]) ** 2).sum(axis=1))
    d_p3 = np.sqrt(((pos0 - ap[2]) ** 2).sum(axis=1)) + float(np.linalg.norm(ap[2] - ap[1]))
    r2all = np.where(sel3, d_p3, d_p2) + radii
    sel23 = frame_ids >= 2
    r2max = float(r2all[sel23].max()) if sel23.any() else 0.0

    span2 = float(limits[1, 1] - limits[1, 0])
    span3 = float(limits[2, 1] - limits[2, 0])
    # budget split in half between joints 2 and 3: dq/2 * r <= budget/2
    n2 = max(1, int(math.ceil(span2 * r2max / growth_budget))) if r2max > 0 else 1
    n3 = max(1, int(math.ceil(span3 * r3max / growth_budget))) if r3max > 0 else 1
    d2, d3 = span2 / n2, span3 / n3
    q2 = limits[1, 0] + (np.arange(n2) + 0.5) * d2
    q3 = limits[2, 0] + (np.arange(n3) + 0.5) * d3

    out_c, out_r = [], []
    growth = 0.0
    # frame 1: fixed with joint 1 at 0
    m1 = frame_ids == 1
    if m1.any():
        out_c.append(pos0[m1])
        out_r.append(radii[m1])
    # frame 2: depends on q2 only
    m2 = frame_ids == 2
    if m2.any():
        Q = np.zeros((n2, N_JOINTS))
        Q[:, 1] = q2
        FQ = arm.frames(Q)
        F = FQ[:, 2]  # (n2, 4, 4)
        P = np.einsum("nij,kj->nki", F[:, :3, :3], local[m2]) + F[:, None, :3, 3]
        AP, AU = _joint_axes(arm, Q, FQ)
        rr = _distance_to_axes(P, AP[:, None, 1], AU[:, None, 1]) + radii[m2]
        gr = 0.5 * d2 * rr
        growth = max(growth, float(gr.max()))
        out_c.append(P.reshape(-1, 3))
        out_r.append((radii[m2][None, :] + gr).reshape(-1))
    # frame 3: q2 x q3 grid
    if sel3.any():
        Q = np.zeros((n2, n3, N_JOINTS))
        Q[:, :, 1] = q2[:, None]
        Q[:, :, 2] = q3[None, :]
        Q = Q.reshape(-1, N_JOINTS)
        rad3 = radii[sel3]
        r3s = r3[sel3]
        for start in range(0, len(Q), 20000):
            Qc = Q[start:start + 20000]
            FQ = arm.frames(Qc)
            F = FQ[:, 3]
            P = np.einsum("nij,kj->nki", F[:, :3, :3], local[sel3]) + F[:, None, :3, 3]
            AP, AU = _joint_axes(arm, Qc, FQ)
            r2 = _distance_to_axes(P, AP[:, None, 1], AU[:, None, 1]) + rad3 + 0.5 * d3 * r3s
            gr = 0.5 * d2 * r2 + 0.5 * d3 * r3s
            growth = max(growth, float(gr.max()))
            out_c.append(P.reshape(-1, 3))
            out_r.append((rad3[None, :] + gr).reshape(-1))
    return _Instances(np.vstack(out_c), np.concatenate(out_r), growth, cover_excess, (n2, n3))


# ====================================================================== rasterising
def _radius_classes(radii, tol):
    """``(labels (n,), class_radius (m,))``: radii grouped in bands of width ``tol``; a class's radius is
    the largest of its members (so using it never under-states a sphere)."""
    band = np.floor((radii - radii.min()) / tol).astype(np.int64)
    present = np.bincount(band) > 0  # the bands used, in order: labels as np.unique's inverse, no sort
    rank = np.cumsum(present) - 1
    labels = rank[band]
    reps = np.full(int(present.sum()), -np.inf)
    np.maximum.at(reps, labels, radii)
    return labels.reshape(-1), reps


def mark_spheres(centres, radii, pitch: float, grow: float = 0.0):
    """Conservative voxels of a union of spheres grown by ``grow`` (metres, world frame).

    Parameters
    ----------
    centres : (m, 3) float
    radii : (m,) float

    Returns
    -------
    origin : (3,) float
        Lower corner of voxel [0, 0, 0].
    occupancy : (nx, ny, nz) bool
        A voxel is marked when its centre is within half its diagonal of a grown sphere: sphere
        centres are rasterised to voxel centres (at most half a diagonal ``t`` away) and dilated by a
        Euclidean distance transform, per class of nearly equal radii, with the rasterisation error
        ``t`` allowed for (``|x - c| >= edt - t``), so no voxel the union touches is missed.
    """
    C = np.asarray(centres, dtype=np.float64)
    R = np.asarray(radii, dtype=np.float64)
    t = 0.5 * math.sqrt(3.0) * pitch
    labels, class_r = _radius_classes(R, 0.25 * pitch)
    lo = (C - R[:, None]).min(axis=0) - grow - 2 * t
    hi = (C + R[:, None]).max(axis=0) + grow + 2 * t
    origin, n = _world_grid(lo, hi, pitch)
    idx = np.clip(np.rint((C - origin) / pitch - 0.5).astype(np.int64), 0, np.array(n) - 1)
    masks = np.zeros((len(class_r),) + n, dtype=bool)
    masks[labels, idx[:, 0], idx[:, 1], idx[:, 2]] = True
    return origin, _dilate_classes(masks, class_r, pitch, grow)


def _dilate_classes(masks, class_r, pitch, grow):
    """``(nx, ny, nz)`` bool: voxels whose centre is within half a diagonal ``t`` (plus ``grow``) of a sphere
    of class c centred in a voxel of ``masks[c]`` (radius ``class_r[c]``), the rasterisation error ``t``
    allowed for: the union over the classes of ``edt(masks[c]) - t - class_r[c] <= t + grow``."""
    t = 0.5 * math.sqrt(3.0) * pitch
    occ = np.zeros(masks.shape[1:], dtype=bool)
    for c in range(len(class_r)):
        occ |= _edt(masks[c], pitch) - t - class_r[c] <= t + grow
    return occ


@njit(cache=True, nogil=True)
def _posed_extent(W, frame, local, radii, lo, hi):
    """Lower (``lo``) and upper (``hi``) corners, updated in place, of the spheres ``local`` (in DH frames
    ``frame``, radii ``radii``) posed by every ``W[n]`` ((n, 7, 4, 4) world frames): the centre of
    sphere k in pose n is ``W[n, frame[k], :3, :3] @ local[k] + W[n, frame[k], :3, 3]``, summed in the
    order of ``np.einsum("nkij,kj->nki", ...)`` then the translation added."""
    for a in range(W.shape[0]):
        for k in range(len(frame)):
            f = frame[k]
            for i in range(3):
                c = W[a, f, i, 0] * local[k, 0]
                c += W[a, f, i, 1] * local[k, 1]
                c += W[a, f, i, 2] * local[k, 2]
                c = c + W[a, f, i, 3]
                if c - radii[k] < lo[i]:
                    lo[i] = c - radii[k]
                if c + radii[k] > hi[i]:
                    hi[i] = c + radii[k]


@njit(cache=True, nogil=True)
def _posed_marks(W, frame, local, labels, origin, pitch, masks):
    """Set ``masks[labels[k], i, j, l]`` for the voxel nearest each posed sphere centre (see
    ``_posed_extent``), as ``mark_spheres`` rasterises: ``rint((c - origin) / pitch - 0.5)`` clipped."""
    n0, n1, n2 = masks.shape[1], masks.shape[2], masks.shape[3]
    for a in range(W.shape[0]):
        for k in range(len(frame)):
            f = frame[k]
            v0 = _voxel_of(W, a, f, local, k, 0, origin[0], pitch, n0)
            v1 = _voxel_of(W, a, f, local, k, 1, origin[1], pitch, n1)
            v2 = _voxel_of(W, a, f, local, k, 2, origin[2], pitch, n2)
            masks[labels[k], v0, v1, v2] = True


@njit(cache=True, nogil=True, inline="always")
def _voxel_of(W, a, f, local, k, i, o, pitch, n):
    c = W[a, f, i, 0] * local[k, 0]
    c += W[a, f, i, 1] * local[k, 1]
    c += W[a, f, i, 2] * local[k, 2]
    c = c + W[a, f, i, 3]
    return min(max(int(np.rint((c - o) / pitch - 0.5)), 0), n - 1)


def _edt(mask, spacing):
    from scipy.ndimage import distance_transform_edt

    if not mask.any():
        return np.full(mask.shape, np.inf, dtype=np.float32)
    return distance_transform_edt(~mask, sampling=spacing).astype(np.float32)


def _axis_frame(cell):
    """``axis_from_world`` (4, 4): z along joint 1's axis (fixed in the base), origin on it."""
    p, u = _joint_axes(cell.arm, np.zeros(N_JOINTS))
    o, z = p[0], u[0] / np.linalg.norm(u[0])
    helper = np.array([1.0, 0, 0]) if abs(z[0]) < 0.9 else np.array([0, 1.0, 0])
    x = helper - (helper @ z) * z
    x /= np.linalg.norm(x)
    y = np.cross(z, x)
    base_from_axis = np.eye(4)
    base_from_axis[:3, 0], base_from_axis[:3, 1], base_from_axis[:3, 2], base_from_axis[:3, 3] = x, y, z, o
    world_from_axis = np.asarray(cell.world_from_base, dtype=np.float64) @ base_from_axis
    return np.linalg.inv(world_from_axis), world_from_axis


class _Meridian:
    """Per (azimuth bin, radius class): 2-D distance fields of the instance centres in (rho, z)."""

    def __init__(self, rho, phi, z, labels, class_r, spacing, bin_width):
        self.h = spacing
        self.class_r = class_r
        rmax = float(class_r.max())
        self.rho0 = 0.0
        self.z0 = float(z.min() - rmax - 2 * spacing)
        nr = int(math.ceil((rho.max() + rmax + 2 * spacing) / spacing)) + 1
        nz = int(math.ceil((z.max() + rmax + 2 * spacing - self.z0) / spacing)) + 1
        self.shape = (nr, nz)
        ir = np.clip(np.rint(rho / spacing).astype(np.int64), 0, nr - 1)
        iz = np.clip(np.rint((z - self.z0) / spacing).astype(np.int64), 0, nz - 1)
        self.nbins = max(1, int(math.ceil(2 * math.pi / bin_width)))
        self.bin_width = 2 * math.pi / self.nbins
        b = np.clip(((phi + math.pi) / self.bin_width).astype(np.int64), 0, self.nbins - 1)
        self.fields = {}  # (bin, class) -> (nr, nz) float32
        self.counts = {}  # (bin, class) -> number of centres
        self.merged = {}  # class -> (nr, nz)
        key = (b * len(class_r) + labels)
        per_key = np.bincount(key)
        keys = np.flatnonzero(per_key)
        counts = per_key[keys]
        # one field per (bin, class) key, stacked in key order; the fields dict holds views of it
        stack = np.zeros((len(keys),) + self.shape, dtype=bool)
        slot = (np.cumsum(per_key > 0) - 1)[key]
        stack[slot, ir, iz] = True
        for c in range(len(class_r)):
            m = stack[(keys % len(class_r)) == c].any(axis=0)
            if m.any():
                self.merged[c] = _edt(m, spacing)
        self.stack = np.empty((len(keys),) + self.shape, dtype=np.float32)
        for i, kk in enumerate(keys):
            k = (int(kk // len(class_r)), int(kk % len(class_r)))
            self.stack[i] = _edt(stack[i], spacing)
            self.fields[k] = self.stack[i]
            self.counts[k] = int(counts[i])
        self.keys = [(int(kk // len(class_r)), int(kk % len(class_r))) for kk in keys]
        self.raster_error = 0.5 * math.sqrt(2.0) * spacing
        # Extent of all centres: beyond the fields' raster these give a tight, exact lower bound
        # (a point at meridian radius rho is at least rho - max(rho_i) from every centre, and likewise
        # in z), where the raster bound alone (field at the clipped edge minus the offset) is loose.
        self.rho_max = float(rho.max())
        self.z_min = float(z.min())
        self.z_max = float(z.max())

    def outer(self, rho, z):
        """Lower bound on the meridian distance from (rho, z) to every centre, from their extent."""
        return np.maximum(np.maximum(rho - self.rho_max, z - self.z_max), self.z_min - z)

    def lookup(self, field_, rho, z, clamp=True, radius=0.0):
        """Lower bound on the meridian distance from (rho, z) to the centres of one field (clamped at 0).

        ``radius``: the field already has this much subtracted (the merged fields subtract class radii
        up to the largest), so the extent bound is lowered by it too.
        """
        nr, nz = self.shape
        ir = np.clip(np.rint(rho / self.h).astype(np.int64), 0, nr - 1)
        iz = np.clip(np.rint((z - self.z0) / self.h).astype(np.int64), 0, nz - 1)
        off = np.hypot(rho - ir * self.h, z - (self.z0 + iz * self.h))
        out = np.maximum(field_[ir, iz] - off - self.raster_error, self.outer(rho, z) - radius)
        return np.maximum(out, 0.0) if clamp else out

    def bin_arc(self, b, lo, hi):
        """(start, length) of the azimuths the centres of bin b reach over joint 1 in [lo, hi]."""
        b0 = -math.pi + b * self.bin_width
        return b0 + lo, self.bin_width + (hi - lo)


def _angle_gap(phi, start, length):
    """Angular distance from azimuths ``phi`` to the arc [start, start + length] (0 on it)."""
    if length >= _FULL_TURN:
        return np.zeros_like(phi)
    u = np.mod(phi - start, 2 * math.pi)
    return np.where(u <= length, 0.0, np.minimum(u - length, 2 * math.pi - u))


@njit(cache=True, nogil=True)
def _bins_kernel(rho, phi, z, stack, f_index, f_start, f_length, f_radius, h, z0, raster_error, rho_max, z_min,
                 z_max, thr):
    """``(m,)`` bool: point i (meridian radius ``rho``, azimuth ``phi``, height ``z``, axis frame) is within
    ``thr`` of a sphere of an azimuth-bin field revolved over its arc. The fields are tried in the order
    given (``stack[f_index[f]]``, arc ``f_start[f]`` + [0, ``f_length[f]``], class radius ``f_radius[f]``),
    each point until one marks it: per point, the same arithmetic as ``_angle_gap`` and
    ``_Meridian.lookup`` on whole arrays."""
    two_pi = 2.0 * math.pi
    half_pi = 0.5 * math.pi
    nr, nz = stack.shape[1], stack.shape[2]
    out = np.zeros(len(rho), dtype=np.bool_)
    for i in range(len(rho)):
        r = rho[i]
        for f in range(len(f_index)):
            length = f_length[f]
            gap = 0.0
            if length < _FULL_TURN:
                u = np.mod(phi[i] - f_start[f], two_pi)
                if u > length:
                    gap = min(u - length, two_pi - u)
            gam = min(gap, half_pi)
            side = r * math.sin(gam)
            rc = f_radius[f]
            if not side - rc <= thr:
                continue
            rr = r * math.cos(gam)
            zz = z[i]
            ir = min(max(int(np.rint(rr / h)), 0), nr - 1)
            iz = min(max(int(np.rint((zz - z0) / h)), 0), nz - 1)
            off = math.hypot(rr - ir * h, zz - (z0 + iz * h))
            d2 = max(np.float64(stack[f_index[f], ir, iz]) - off - raster_error,
                     max(max(rr - rho_max, zz - z_max), z_min - zz))
            d2 = max(d2, 0.0)
            if math.hypot(side, d2) - rc <= thr:
                out[i] = True
                break
    return out


def _world_grid(lo, hi, pitch):
    origin = np.floor(lo / pitch) * pitch
    n = np.maximum(np.ceil((hi - origin) / pitch).astype(np.int64), 1)
    return origin, tuple(int(v) for v in n)


@dataclass(frozen=True, eq=False)
class _Revolved:
    """What the marking of a swept space needs that does not depend on the joint-1 range or the
    allowance: the instances (joint 1 at 0), their meridian fields and extent (axis frame)."""

    inst: _Instances
    mer: "_Meridian"
    class_r: np.ndarray
    merged: np.ndarray  # (nr, nz) float32: min over classes of (class field - class radius)
    order: tuple  # (bin, class) keys, the most populated first
    f_index: np.ndarray  # (F,) slot in mer.stack of each key of order
    f_radius: np.ndarray  # (F,) class radius of each key of order
    rho_reach: float  # max(rho + radius)
    z_lo: float  # min(z - radius)
    z_hi: float  # max(z + radius)
    bin_width: float
    class_tol: float


def _revolved(inst: _Instances, ca, meridian_spacing, bin_width, class_tol) -> _Revolved:
    """The model of ``inst``, whose centres are ``ca`` in the axis frame (``_axis_frame``)."""
    rho = np.hypot(ca[:, 0], ca[:, 1])
    phi = np.arctan2(ca[:, 1], ca[:, 0])
    z = ca[:, 2]
    labels, class_r = _radius_classes(inst.radii, class_tol)
    mer = _Meridian(rho, phi, z, labels, class_r, meridian_spacing, bin_width)
    # one field for the full turn: min over classes of (distance to the class's centres - radius);
    # the lookup penalty does not depend on the class, so this is the same lower bound in one gather
    merged = None
    for c, f in mer.merged.items():
        merged = f - np.float32(class_r[c]) if merged is None else np.minimum(merged, f - np.float32(class_r[c]))
    # fields of the azimuth bins, the most populated first (they mark most voxels, which then drop out)
    order = sorted(mer.fields, key=lambda key: -mer.counts[key])
    slot = {key: i for i, key in enumerate(mer.keys)}
    f_index = np.array([slot[key] for key in order], dtype=np.int64)
    f_radius = np.array([class_r[c] for _, c in order], dtype=np.float64)
    return _Revolved(inst, mer, class_r, merged, tuple(order), f_index, f_radius,
                     float((rho + inst.radii).max()), float((z - inst.radii).min()),
                     float((z + inst.radii).max()), float(bin_width), float(class_tol))


_MODELS: dict = {}
"""The few latest ``_Revolved`` models: ``(id(cell), joint-2/3 limits, pitch) -> (weakref to the cell,
model)``; dropped with their cell (a cell is immutable, so a model stays valid while it lives)."""
_MODELS_KEPT = 2
_MODELS_LOCK = threading.Lock()


def _swept_model(cell, limits, p) -> _Revolved:
    """The ``_Revolved`` model of ``cell`` for ``limits`` (joints 2 and 3 matter) at pitch ``p``: built
    once and shared by the spaces and searches that differ only in joint 1 (and the allowance)."""
    lim23 = np.asarray(limits, dtype=np.float64)[1:3]
    key = (id(cell), lim23.tobytes(), float(p))
    with _MODELS_LOCK:
        hit = _MODELS.pop(key, None)
        if hit is not None and hit[0]() is cell:
            _MODELS[key] = hit  # most recent last
            return hit[1]
    inst = _swept_instances(cell, limits, 0.5 * p, 0.25 * p)
    axis_from_world, _ = _axis_frame(cell)
    axis_from_base = axis_from_world @ np.asarray(cell.world_from_base, dtype=np.float64)
    ca = inst.centres @ axis_from_base[:3, :3].T + axis_from_base[:3, 3]
    reach = max(float((np.hypot(ca[:, 0], ca[:, 1]) + inst.radii).max()), p)
    bin_width = min(p / reach, math.pi / 8)  # a limited joint-1 range ends at most about p late
    model = _revolved(inst, ca, 0.5 * p, bin_width, 0.25 * p)

    def forget(_ref, key=key):  # the cell is gone (may run inside the lock, in garbage collection)
        _MODELS.pop(key, None)

    with _MODELS_LOCK:
        _MODELS[key] = (weakref.ref(cell, forget), model)
        while len(_MODELS) > _MODELS_KEPT:
            _MODELS.pop(next(iter(_MODELS)), None)
    return model


def _mark_revolved(cell, model: _Revolved, q1_lo, q1_hi, pitch, allowance):
    axis_from_world, world_from_axis = _axis_frame(cell)
    inst, mer, class_r, merged = model.inst, model.mer, model.class_r, model.merged
    f_index, f_radius = model.f_index, model.f_radius
    arcs = [mer.bin_arc(b, q1_lo, q1_hi) for b, _ in model.order]
    f_start = np.array([a[0] for a in arcs], dtype=np.float64)
    f_length = np.array([a[1] for a in arcs], dtype=np.float64)

    t = 0.5 * math.sqrt(3.0) * pitch
    thr = t + allowance
    reach = model.rho_reach + thr
    zlo = model.z_lo - thr
    zhi = model.z_hi + thr
    corners = np.array([[sx * reach, sy * reach, zz] for sx in (-1, 1) for sy in (-1, 1) for zz in (zlo, zhi)])
    wc = corners @ world_from_axis[:3, :3].T + world_from_axis[:3, 3]
    origin, n = _world_grid(wc.min(axis=0), wc.max(axis=0), pitch)
    full = (q1_hi - q1_lo) >= _FULL_TURN
    nx, ny, nz = n
    xs = origin[0] + (np.arange(nx) + 0.5) * pitch
    ys = origin[1] + (np.arange(ny) + 0.5) * pitch
    X, Y = np.meshgrid(xs, ys, indexing="ij")
    R, tr = axis_from_world[:3, :3], axis_from_world[:3, 3]
    base = np.column_stack([X.ravel(), Y.ravel()]) @ R[:, :2].T + tr  # axis coordinates at world z = 0
    flat = np.zeros(nx * ny * nz, dtype=bool)  # layer-major: index = k * nx * ny + xy
    block = max(1, 2_000_000 // (nx * ny))
    nxy = nx * ny
    vertical = abs(abs(R[2, 2]) - 1.0) < 1e-12  # joint 1's axis along world z: rho, phi per column only
    if vertical:
        col_rho = np.hypot(base[:, 0], base[:, 1])
        col_phi = np.arctan2(base[:, 1], base[:, 0])
        col_ir = np.clip(np.rint(col_rho / mer.h).astype(np.int64), 0, mer.shape[0] - 1)
        col_dr = col_rho - col_ir * mer.h
        block = 1
    for k0 in range(0, nz, block):
        ks = np.arange(k0, min(nz, k0 + block))
        zc = origin[2] + (ks + 0.5) * pitch
        if vertical:
            pz0 = float(base[0, 2] + zc[0] * R[2, 2])
            iz = int(np.clip(np.rint((pz0 - mer.z0) / mer.h), 0, mer.shape[1] - 1))
            dz = pz0 - (mer.z0 + iz * mer.h)
            bound = np.maximum(merged[col_ir, iz] - np.hypot(col_dr, dz) - mer.raster_error,
                               mer.outer(col_rho, pz0) - np.float32(class_r.max()))
            cand = bound <= thr
            idx = np.flatnonzero(cand)
            r_, ph, z_ = col_rho[idx], col_phi[idx], np.full(len(idx), pz0)
        else:
            A = (base[None, :, :] + zc[:, None, None] * R[:, 2][None, None, :]).reshape(-1, 3)
            prho = np.hypot(A[:, 0], A[:, 1])
            pz = A[:, 2]
            cand = mer.lookup(merged, prho, pz, clamp=False, radius=float(class_r.max())) <= thr
            idx = np.flatnonzero(cand)
            r_, ph, z_ = prho[idx], np.arctan2(A[idx, 1], A[idx, 0]), pz[idx]
        if not full:
            done = _bins_kernel(r_, ph, z_, mer.stack, f_index, f_start, f_length, f_radius, mer.h, mer.z0,
                                mer.raster_error, mer.rho_max, mer.z_min, mer.z_max, thr)
            cand = np.zeros(len(cand), dtype=bool)
            cand[idx[done]] = True
        flat[k0 * nxy:(ks[-1] + 1) * nxy] = cand
    occ = np.ascontiguousarray(flat.reshape(nz, nx, ny).transpose(1, 2, 0))
    end_excess = mer.bin_width * reach if not full else 0.0
    return origin, occ, end_excess, mer


# ====================================================================== mesh
def voxel_mesh(occupancy, origin, pitch):
    """The boundary of the union of marked cubes as a ``trimesh.Trimesh`` (outward normals)."""
    import trimesh

    occ = np.pad(np.asarray(occupancy, dtype=bool), 1)
    quads = []
    # for each axis and direction: faces where a marked voxel meets an unmarked one
    unit = np.eye(3, dtype=np.int64)
    for axis in range(3):
        for step in (1, -1):
            nb = np.roll(occ, -step, axis=axis)
            idx = np.argwhere(occ & ~nb) - 1  # voxel indices (unpadded)
            if len(idx) == 0:
                continue
            u, v = [a for a in range(3) if a != axis]
            base = idx.copy()
            if step == 1:
                base[:, axis] += 1
            c0 = base
            c1 = base + unit[u]
            c2 = base + unit[u] + unit[v]
            c3 = base + unit[v]
            q = np.stack([c0, c1, c2, c3], axis=1)
            # orientation: (u, v, axis) right-handed when axis follows u x v
            right = np.cross(unit[u], unit[v])[axis] > 0
            if (step == 1) != right:
                q = q[:, ::-1]
            quads.append(q)
    if not quads:
        return trimesh.Trimesh()
    Q = np.vstack(quads)  # (m, 4, 3) lattice corners, 0 .. shape
    flat = Q.reshape(-1, 3)
    dims = np.array(occ.shape, dtype=np.int64)  # padded shape >= unpadded shape + 1 corners
    keys = (flat[:, 0] * dims[1] + flat[:, 1]) * dims[2] + flat[:, 2]
    ukeys, inv = np.unique(keys, return_inverse=True)
    verts = np.column_stack([ukeys // (dims[1] * dims[2]), (ukeys // dims[2]) % dims[1], ukeys % dims[2]])
    inv = inv.reshape(-1, 4)
    faces = np.vstack([inv[:, [0, 1, 2]], inv[:, [0, 2, 3]]])
    vertices = np.asarray(origin, dtype=np.float64) + verts.astype(np.float64) * pitch
    return trimesh.Trimesh(vertices=vertices, faces=faces, process=False)


def _trim(origin, occ, pitch):
    """Crop the grid to the marked voxels plus one empty layer around them."""
    if not occ.any():
        return origin, occ
    idx = np.argwhere(occ)
    lo = np.maximum(idx.min(axis=0) - 1, 0)
    hi = np.minimum(idx.max(axis=0) + 2, np.array(occ.shape))
    return origin + lo * pitch, occ[lo[0]:hi[0], lo[1]:hi[1], lo[2]:hi[2]].copy()


def _finish(kind, origin, occ, pitch, limits, allowance, excess, method) -> Space:
    origin, occ = _trim(np.asarray(origin, dtype=np.float64), occ, pitch)
    occ.flags.writeable = False
    origin.flags.writeable = False
    mesh = voxel_mesh(occ, origin, pitch)
    if occ.any():
        idx = np.argwhere(occ)
        bounds = np.stack([origin + idx.min(axis=0) * pitch, origin + (idx.max(axis=0) + 1) * pitch])
    else:
        bounds = np.full((2, 3), np.nan)
    bounds.flags.writeable = False
    lim = None
    if limits is not None:
        lim = np.array(limits, dtype=np.float64)
        lim.flags.writeable = False
    return Space(kind, origin, float(pitch), occ, mesh, bounds, lim, float(allowance), float(excess), method)


# ====================================================================== public API
def _check_pitch(pitch):
    try:
        p = float(pitch)
    except (TypeError, ValueError):
        raise InputError(f"expected a voxel pitch in metres, got {pitch!r}", item="pitch") from None
    if not (math.isfinite(p) and p > 0):
        raise InputError(f"expected a finite voxel pitch > 0 m, got {pitch!r}", item="pitch")
    return p


def _check_length(value, name):
    try:
        x = float(value)
    except (TypeError, ValueError):
        raise InputError(f"expected a length in metres, got {value!r}", item=name) from None
    if not (math.isfinite(x) and x >= 0):
        raise InputError(f"expected a finite length >= 0 m, got {value!r}", item=name)
    return x


def _check_limits(cell, limits):
    lim = np.asarray(limits, dtype=np.float64)
    if lim.shape != (N_JOINTS, 2):
        raise InputError(f"expected joint limits of shape (6, 2) radians, got {lim.shape}", item="limits")
    if not np.isfinite(lim).all():
        raise InputError("joint limits contain a non-finite value", item="limits")
    bad = np.flatnonzero(lim[:, 0] > lim[:, 1])
    if bad.size:
        j = int(bad[0])
        raise InputError(f"joint {j + 1}: lower limit {lim[j, 0]:.6g} rad is above upper {lim[j, 1]:.6g} rad",
                         item="limits")
    return lim


def _swept(kind, cell, limits, allowance, pitch):
    p = _check_pitch(pitch)
    meridian = 0.5 * p
    cover = 0.25 * p
    model = _swept_model(cell, limits, p)
    inst, class_tol = model.inst, model.class_tol
    origin, occ, end_excess, mer = _mark_revolved(cell, model, float(limits[0, 0]), float(limits[0, 1]), p,
                                                  allowance)
    t = 0.5 * math.sqrt(3.0) * p
    excess = 2 * t + 2 * mer.raster_error + class_tol + inst.max_growth + cover + end_excess
    n2, n3 = inst.n_cells
    method = (
        f"{kind} space, conservative voxels of {p * 1e3:g} mm. Sphere model of links 1..3 (capsule/cylinder "
        f"spheres at most {cover * 1e3:g} mm larger than the solid; boxes by mid-plane spheres; convex and mesh "
        "shapes by their oriented bounding box); everything in frames 4..6 (links, tool, payload) enclosed in "
        "spheres fixed in frame 3 valid for any joint 4..6 values (each covering sphere carried back joint by "
        "joint, a full turn of each joint enclosed; all within "
        f"{wrist_sphere(cell)[1] * 1e3:.1f} mm of the wrist centre). Joints 2, 3 sampled on a {n2} x {n3} grid; each sphere grown "
        f"by sum |dq_j|/2 * r_j (at most {inst.max_growth * 1e3:.1f} mm). Joint 1 exact by revolution about "
        f"its axis over [{math.degrees(limits[0, 0]):.6g}, {math.degrees(limits[0, 1]):.6g}] deg (meridian "
        f"distance fields at {meridian * 1e3:g} mm"
        + (f", azimuth bins {math.degrees(mer.bin_width):.3g} deg: up to {end_excess * 1e3:.0f} mm more at "
           "the ends of the joint-1 range" if end_excess else "")
        + f"). A voxel is marked when its centre is within half its diagonal ({t * 1e3:.1f} mm)"
        + (f" plus the allowance {allowance * 1e3:g} mm" if allowance else "")
        + f" of the grown spheres. Beyond the modelled solids the cubes reach at most {excess * 1e3:.0f} mm"
        + (f" (of which {end_excess * 1e3:.0f} mm only at the joint-1 range ends)" if end_excess else "")
        + ", besides the wrist enclosure. The arm's base (frame 0) is not part of the space."
    )
    return _finish(kind, origin, occ, p, limits, allowance, excess, method)


def maximum_space(cell, *, pitch: float = DEFAULT_PITCH) -> Space:
    """The maximum space: what links 1..6, tool and payload can sweep over ``cell.arm.limits``.

    Parameters
    ----------
    cell : envelope.cell.Cell
    pitch : float
        Voxel edge, metres (default 0.02).

    Returns
    -------
    Space
        Conservative: contains the true swept volume (see ``Space.method``).
    """
    return _swept("maximum", cell, np.asarray(cell.arm.limits, dtype=np.float64), 0.0, pitch)


def restricted_space(cell, limits, allowance=None, *, pitch: float = DEFAULT_PITCH) -> Space:
    """The restricted space: swept over limited joint ranges, grown by the stopping allowance.

    Parameters
    ----------
    cell : envelope.cell.Cell
    limits : (6, 2) float
        Limited joint ranges (soft axis limits), radians.
    allowance : float, optional
        Metres added around the swept solid (the stopping distance); ``cell.stopping_allowance`` by
        default.
    pitch : float
        Voxel edge, metres.
    """
    lim = _check_limits(cell, limits)
    a = _check_length(cell.stopping_allowance if allowance is None else allowance, "allowance")
    return _swept("restricted", cell, lim, a, pitch)


def _mark_turned(centres, radii, angles, pitch, grow):
    """``mark_spheres`` of the spheres ``centres`` (k, 3), ``radii`` (k,) turned about the z axis by each
    of ``angles``: the turned centres ``(cos a x - sin a y, sin a x + cos a y, z)`` never stored."""
    ca = np.ascontiguousarray(centres, dtype=np.float64)
    radii = np.ascontiguousarray(radii, dtype=np.float64)
    c = np.ascontiguousarray(np.cos(angles), dtype=np.float64)
    s = np.ascontiguousarray(np.sin(angles), dtype=np.float64)
    t = 0.5 * math.sqrt(3.0) * pitch
    labels, class_r = _radius_classes(radii, 0.25 * pitch)  # the same classes as of the radii repeated
    lo = np.full(3, np.inf)
    hi = np.full(3, -np.inf)
    _turned_extent(ca, radii, c, s, lo, hi)
    origin, n = _world_grid(lo - grow - 2 * t, hi + grow + 2 * t, pitch)
    masks = np.zeros((len(class_r),) + n, dtype=bool)
    _turned_marks(ca, labels, c, s, np.asarray(origin, dtype=np.float64), float(pitch), masks)
    return origin, _dilate_classes(masks, class_r, pitch, grow)


@njit(cache=True, nogil=True)
def _turned_extent(ca, radii, c, s, lo, hi):
    for a in range(len(c)):
        for k in range(len(radii)):
            r = radii[k]
            x = c[a] * ca[k, 0] - s[a] * ca[k, 1]
            y = s[a] * ca[k, 0] + c[a] * ca[k, 1]
            z = ca[k, 2]
            lo[0] = min(lo[0], x - r)
            lo[1] = min(lo[1], y - r)
            lo[2] = min(lo[2], z - r)
            hi[0] = max(hi[0], x + r)
            hi[1] = max(hi[1], y + r)
            hi[2] = max(hi[2], z + r)


@njit(cache=True, nogil=True)
def _turned_marks(ca, labels, c, s, origin, pitch, masks):
    n0, n1, n2 = masks.shape[1], masks.shape[2], masks.shape[3]
    for a in range(len(c)):
        for k in range(len(labels)):
            x = c[a] * ca[k, 0] - s[a] * ca[k, 1]
            y = s[a] * ca[k, 0] + c[a] * ca[k, 1]
            z = ca[k, 2]
            v0 = min(max(int(np.rint((x - origin[0]) / pitch - 0.5)), 0), n0 - 1)
            v1 = min(max(int(np.rint((y - origin[1]) / pitch - 0.5)), 0), n1 - 1)
            v2 = min(max(int(np.rint((z - origin[2]) / pitch - 0.5)), 0), n2 - 1)
            masks[labels[k], v0, v1, v2] = True


_POSE_CHUNK = 20000
"""Configurations posed at a time by the operating space (bounds the (n, 7, 4, 4) frames)."""


def _mark_posed(cell, Q, frame, local, radii, pitch, grow):
    """``mark_spheres`` of the spheres ``local`` (DH frames ``frame``, radii ``radii``) posed at every
    configuration of ``Q``, without the (n x k) posed centres: each chunk of configurations is posed
    (world frames as ``world_from_base @ arm.frames``) once for the extent and once for the marks."""
    world_from_base = np.asarray(cell.world_from_base, dtype=np.float64)
    frame = np.ascontiguousarray(frame, dtype=np.int64)
    local = np.ascontiguousarray(local, dtype=np.float64)
    radii = np.ascontiguousarray(radii, dtype=np.float64)
    chunks = [slice(i, i + _POSE_CHUNK) for i in range(0, len(Q), _POSE_CHUNK)]

    def posed(chunk):
        return np.ascontiguousarray(world_from_base @ cell.arm.frames(Q[chunk]))  # (n, 7, 4, 4)

    t = 0.5 * math.sqrt(3.0) * pitch
    labels, class_r = _radius_classes(radii, 0.25 * pitch)  # the same classes as of the radii repeated
    lo = np.full(3, np.inf)
    hi = np.full(3, -np.inf)
    single = posed(chunks[0]) if len(chunks) == 1 else None  # else posed again for the marks
    for chunk in chunks:
        _posed_extent(posed(chunk) if single is None else single, frame, local, radii, lo, hi)
    lo = lo - grow - 2 * t
    hi = hi + grow + 2 * t
    origin, n = _world_grid(lo, hi, pitch)
    masks = np.zeros((len(class_r),) + n, dtype=bool)
    for chunk in chunks:
        _posed_marks(posed(chunk) if single is None else single, frame, local, labels,
                     np.asarray(origin, dtype=np.float64), float(pitch), masks)
    return origin, _dilate_classes(masks, class_r, pitch, grow)


def operating_space(cell, configurations, *, grow: float = 0.0, pitch: float = DEFAULT_PITCH) -> Space:
    """The operating space: the union of what the given configurations occupy, grown by ``grow``.

    Parameters
    ----------
    cell : envelope.cell.Cell
    configurations : (n, 6) or (6,) float, radians
    grow : float
        Metres added around every posed body (for sampled motions: a bound on the travel between
        samples).
    pitch : float
        Voxel edge, metres.
    """
    p = _check_pitch(pitch)
    grow = _check_length(grow, "grow")
    Q = np.asarray(configurations, dtype=np.float64)
    if Q.ndim == 1:
        Q = Q[None, :]
    if Q.ndim != 2 or Q.shape[1] != N_JOINTS or len(Q) == 0:
        raise InputError(f"expected configurations of shape (n >= 1, 6), got {np.shape(configurations)}",
                         item="configurations")
    bad = np.flatnonzero(~np.isfinite(Q).all(axis=1))
    if bad.size:
        raise InputError(f"configuration {int(bad[0])} has a non-finite joint value", item="configurations")
    cover = 0.25 * p
    fr, local, radii = _frame_spheres(cell, tuple(range(1, N_JOINTS + 1)), cover)
    if len(radii) == 0:
        raise InputError("the arm has no moving geometry (links 1..6 and tool have no shapes)", item="cell")
    t = 0.5 * math.sqrt(3.0) * p
    origin, occ = _mark_posed(cell, Q, fr, local, radii, p, grow)
    excess = 4 * t + 0.25 * p + cover
    method = (
        f"operating space of {len(Q)} configuration(s), conservative voxels of {p * 1e3:g} mm: every body "
        f"(links 1..6, tool, payload) as covering spheres (at most {cover * 1e3:g} mm larger for capsules), "
        f"posed, grown by {grow * 1e3:g} mm; sphere centres rasterised to voxel centres and dilated by a "
        f"Euclidean distance transform; a voxel is marked when its centre is within half its diagonal "
        f"({t * 1e3:.1f} mm) of a grown sphere. Beyond the modelled solids plus the growth the cubes reach at "
        f"most {excess * 1e3:.0f} mm. The arm's base (frame 0) is not part of the space."
    )
    return _finish("operating", origin, occ, p, None, grow, excess, method)


# ====================================================================== files and outlines
def _atomic_write(path: Path, data: bytes) -> None:
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=path.name + ".", suffix=".tmp")
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
        os.replace(tmp, path)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise


def write_space(space: Space, path_stem) -> SpaceFiles:
    """Write the space's mesh as ``<stem>.stl`` and ``<stem>.glb``, in millimetres (atomic writes).

    Files use millimetres (the project's file unit); the mesh is scaled once on the way out.
    """
    import trimesh

    stem = Path(path_stem)
    mesh = space.mesh.copy()
    mesh.apply_scale(float(to_mm(1.0)))
    stl = stem.with_name(stem.name + ".stl")
    glb = stem.with_name(stem.name + ".glb")
    _atomic_write(stl, trimesh.exchange.stl.export_stl(mesh))
    scene = trimesh.Scene(mesh)
    _atomic_write(glb, trimesh.exchange.gltf.export_glb(scene))
    return SpaceFiles(stl, glb)


def _pixel_loops(image):
    """Closed boundary loops (lattice corner coordinates) of the True pixels of a 2-D image."""
    img = np.pad(np.asarray(image, dtype=bool), 1)
    edges = {}
    # directed edges, filled region on the left (counter-clockwise outer loops)
    a = img[1:-1, 1:-1]
    for di, dj, make in (
        (0, -1, lambda i, j: ((i + 1, j), (i, j))),  # below (j-1) empty: edge along bottom, -x
        (0, 1, lambda i, j: ((i, j + 1), (i + 1, j + 1))),  # above empty: +x along top
        (-1, 0, lambda i, j: ((i, j), (i, j + 1))),  # left empty: +y along left side
        (1, 0, lambda i, j: ((i + 1, j + 1), (i + 1, j))),  # right empty: -y along right
    ):
        nb = img[1 + di:img.shape[0] - 1 + di, 1 + dj:img.shape[1] - 1 + dj]
        for i, j in np.argwhere(a & ~nb):
            s, e = make(int(i), int(j))
            edges.setdefault(s, []).append(e)
    loops = []
    while edges:
        start = next(iter(edges))
        loop = [start]
        cur = start
        while True:
            nxt_list = edges.get(cur)
            if not nxt_list:
                break
            nxt = nxt_list.pop()
            if not nxt_list:
                del edges[cur]
            if nxt == start:
                break
            loop.append(nxt)
            cur = nxt
        pts = np.array(loop + [start], dtype=np.float64)
        # drop collinear points
        keep = [0]
        for k in range(1, len(pts) - 1):
            d1 = pts[k] - pts[keep[-1]]
            d2 = pts[k + 1] - pts[k]
            if abs(d1[0] * d2[1] - d1[1] * d2[0]) > 0:
                keep.append(k)
        keep.append(len(pts) - 1)
        loops.append(pts[keep])
    return loops


def space_outline(space: Space, view: str = "plan") -> tuple:
    """Outline polylines of the space for drawings, in millimetres.

    Parameters
    ----------
    view : {"plan", "elevation"}
        ``"plan"``: the footprint on the XY plane (world x, y); ``"elevation"``: the silhouette seen
        along world y, on the XZ plane (x, z).

    Returns
    -------
    tuple of (m, 2) float arrays
        Closed loops (first point repeated last) of the boundary of the projected voxel squares; outer
        loops run counter-clockwise, holes clockwise. Conservative like the space.
    """
    if view == "plan":
        image = space.occupancy.any(axis=2)
        o = space.origin[[0, 1]]
    elif view == "elevation":
        image = space.occupancy.any(axis=1)
        o = space.origin[[0, 2]]
    else:
        raise InputError(f"expected view 'plan' or 'elevation', got {view!r}", item="view")
    return tuple(to_mm(o + loop * space.pitch) for loop in _pixel_loops(image))
