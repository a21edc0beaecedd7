"""Fence and guard panels against the restricted space, by ISO 13857 / ISO 13854 (via envelope.standards).

For each panel (one ``Box`` per panel of a zone of kind ``"fence"`` or ``"guard"``; its attributes
``height``, ``bottom_gap``, ``thickness`` and optional ``opening_size`` / ``opening_shape`` in metres)
``evaluate_panels(cell, space)`` gives a ``PanelVerdict``:

- the structure height b (top edge above the floor), the bottom gap, the opening;
- the horizontal distance from the panel to the restricted space, per voxel layer;
- reaching over (ISO 13857): for every voxel layer of the space (heights z0..z1) the table value c
  for the layer's heights (the larger of the look-ups at z0 and z1, each by the table's own rule for
  heights between rows; no interpolation) is compared with that layer's horizontal distance d; the
  layer with the smallest margin d - c governs. This checks every point of the space at its own
  height, so it is never less strict than the per-point reading; the hazard height a reported is that
  layer's top (and ``a_max_mm``, the highest point of the space within the largest c of the table
  column, is given as well);
- reaching through openings: sr for e and shape, against the 3-D distance from the panel to the space;
- reaching upwards and the guard rules (height >= 1400 mm, bottom gap <= 180 mm).

Verdict: ``"fail"`` when a required distance is not met (reach over or through), the bottom gap is
over 180 mm, or the space touches the panel; ``"additional measures"`` when the structure does not
count (lower than 1000 mm), is lower than 1400 mm (high risk; the guard rule), or has openings over
120 mm; else ``"pass"``.

``crushing_points(cell, space)``: where the restricted space comes closer to a fixed object (zones of
kinds fence, guard, fixture, machine, wall) than the ISO 13854 body gap (500 mm); where the space's
bound cannot exclude a touch the point is kept and marked ``touches``.

Values in millimetres here (the standards' numbers, names end in ``_mm``); the library geometry is
in metres and converted once with ``envelope.units.to_mm``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from . import geometry as g
from . import standards as st
from .errors import InputError
from .space import Space
from .units import to_metres, to_mm

__all__ = [
    "PanelVerdict",
    "LayerCheck",
    "CrushingPoint",
    "ProtectiveDeviceCheck",
    "VERDICTS",
    "PANEL_KINDS",
    "FIXED_KINDS",
    "evaluate_panels",
    "evaluate_panel",
    "crushing_points",
    "protective_device_check",
    "distance_to_shape_lower",
]

VERDICTS = ("pass", "additional measures", "fail")
PANEL_KINDS = ("fence", "guard")
FIXED_KINDS = ("fence", "guard", "fixture", "machine", "wall")
"""Zone kinds counted as fixed objects for crushing points (not keep-out, floor or ceiling)."""


def _mm(x) -> float:
    return float(to_mm(x))


@dataclass(frozen=True)
class LayerCheck:
    """Reach-over check of one voxel layer of the space (heights ``z0_mm``..``z1_mm``)."""

    z0_mm: float
    z1_mm: float
    distance_mm: float
    c_mm: float | None
    margin_mm: float | None
    row_a_mm: int | None
    column_b_mm: int | None


@dataclass(frozen=True)
class PanelVerdict:
    """The ISO 13857 verdict of one fence or guard panel, with every value used.

    Attributes
    ----------
    zone, panel : str
    verdict : str
        One of ``VERDICTS``.
    reasons : tuple of str
        Why, in words (every failed or flagged rule).
    b_mm, bottom_gap_mm, thickness_mm : float
        Structure height (top edge), bottom gap, thickness.
    floor_z_mm : float
        World z of the floor under the panel (its bottom edge less the bottom gap); every height
        (a, the layers) is measured from it.
    risk : str
        ``"high"`` or ``"low"``: the reach-over table used.
    distance_mm : float
        Horizontal distance from the panel to the space (lower bound, all heights).
    distance_3d_mm : float
        3-D distance from the panel to the space (lower bound).
    a_mm : float or None
        Hazard height of the governing layer (its top); None when the space has no layer.
    a_max_mm : float or None
        The highest point of the space within ``reach_mm`` of the panel (horizontally).
    reach_mm : float
        The largest c of the table column for b (the relevant reach distance).
    c_mm : float or None
        The required horizontal distance of the governing layer (None: the structure does not count).
    margin_mm : float or None
        ``distance - c`` of the governing layer.
    reach_over : ReachOverResult or None
        The table look-up of the governing layer (row, column, confidence, sources).
    layers : tuple of LayerCheck
        Every layer of the space with its distance and c.
    opening : OpeningResult or None
        Reaching through the panel's openings (None when it has none).
    opening_ok : bool or None
        ``distance_3d >= sr``; None without openings or for openings treated as reaching over.
    upwards : ReachUpwardsResult or None
        Reaching upwards for the lowest point of the space within ``reach_mm`` of the panel.
    guard : GuardRulesResult
    standard_sources : tuple
        Every source id used.
    space_method : str
        The method text of the space used.
    """

    zone: str
    panel: str
    verdict: str
    reasons: tuple
    b_mm: float
    bottom_gap_mm: float
    thickness_mm: float
    floor_z_mm: float
    risk: str
    distance_mm: float
    distance_3d_mm: float
    a_mm: float | None
    a_max_mm: float | None
    reach_mm: float
    c_mm: float | None
    margin_mm: float | None
    reach_over: object
    layers: tuple
    opening: object
    opening_ok: bool | None
    upwards: object
    guard: object
    confidence: str
    standard_sources: tuple
    space_method: str


def _panel_attributes(zone, item):
    att = zone.attributes or {}
    missing = [k for k in ("height", "bottom_gap") if k not in att]
    if missing:
        raise InputError(f"a fence or guard zone needs attributes 'height' and 'bottom_gap' (metres), missing "
                         f"{missing}", item=item)
    return att


def _c_for(z_mm, b_mm, risk, memo=None):
    a = max(z_mm, 0.0)
    if memo is None:
        return st.reach_over_distance(a, b_mm, risk)
    if a not in memo:  # layers share their edges: each height looked up once per panel
        memo[a] = st.reach_over_distance(a, b_mm, risk)
    return memo[a]


def distance_to_shape_lower(shape, points) -> np.ndarray:
    """``(k,)`` a lower bound on the distance (m) from points (k, 3) to a zone shape (<= 0 inside).

    Exact for spheres, capsules, boxes, cylinders and half-spaces; for a convex shape the largest
    facet-plane distance; for a mesh that of its convex hull (the hull contains the mesh).
    """
    p = np.asarray(points, dtype=np.float64)
    if isinstance(shape, g.Sphere):
        return np.sqrt(((p - shape.center) ** 2).sum(axis=1)) - shape.radius
    if isinstance(shape, g.Capsule):
        d = shape.p1 - shape.p0
        dd = float(d @ d)
        t = np.zeros(len(p)) if dd == 0 else np.clip((p - shape.p0) @ d / dd, 0.0, 1.0)
        c = shape.p0 + t[:, None] * d
        return np.sqrt(((p - c) ** 2).sum(axis=1)) - shape.radius
    if isinstance(shape, g.Box):
        local = (p - shape.pose[:3, 3]) @ shape.pose[:3, :3]
        q = np.abs(local) - 0.5 * shape.extents
        outside = np.sqrt((np.maximum(q, 0.0) ** 2).sum(axis=1))
        return outside + np.minimum(q.max(axis=1), 0.0)
    if isinstance(shape, g.Cylinder):
        local = (p - shape.pose[:3, 3]) @ shape.pose[:3, :3]
        dr = np.hypot(local[:, 0], local[:, 1]) - shape.radius
        dz = np.abs(local[:, 2]) - 0.5 * shape.length
        return np.hypot(np.maximum(dr, 0), np.maximum(dz, 0)) + np.minimum(np.maximum(dr, dz), 0.0)
    if isinstance(shape, g.HalfSpace):
        return p @ shape.normal - shape.offset
    if isinstance(shape, (g.Convex, g.TriMesh)):
        eq = _hull_equations(shape)
        return (p @ eq[:, :3].T + eq[:, 3]).max(axis=1)
    raise TypeError(f"not a shape: {type(shape).__name__}")


def _hull_equations(shape):
    """Facet planes of a ``Convex``, or of a mesh's hull (the hull computed once per mesh)."""
    if isinstance(shape, g.Convex):
        return g.hull_equations(shape)
    return g._cached(shape, "hull of mesh", lambda: g.hull_equations(g.convex_hull(shape)))


def _lipschitz(shape) -> float:
    """A bound on how fast ``distance_to_shape_lower`` of the shape changes (per metre moved): 1 for the
    exact distances and for maxima of unit-normal planes, up to rounding of the poses and normals."""
    if isinstance(shape, (g.Box, g.Cylinder)):
        return max(1.0, float(np.linalg.norm(shape.pose[:3, :3], 2)))
    if isinstance(shape, g.HalfSpace):
        return max(1.0, float(np.linalg.norm(shape.normal)))
    if isinstance(shape, (g.Convex, g.TriMesh)):
        return max(1.0, float(np.sqrt((_hull_equations(shape)[:, :3] ** 2).sum(axis=1)).max()))
    return 1.0  # spheres and capsules: exact distances


_BLOCK = 4
"""Edge (voxels) of the blocks the marked voxels are grouped in to find those nearest a shape."""
_SLACK = 1e-7
"""Metres allowed for rounding when a block's bound rules out its voxels (far above the rounding)."""


def _blocks(space: Space):
    """``(label (k,), centres (b, 3), radius)``: the block of every marked voxel (marked order), the
    centres of the blocks holding marked voxels, and the largest distance from a block's centre to a
    voxel centre in it."""
    if "blocks" not in space._cache:
        occ = np.asarray(space.occupancy, dtype=bool)
        nb = -(-np.array(occ.shape) // _BLOCK)
        padded = np.zeros(tuple(nb * _BLOCK), dtype=bool)
        padded[:occ.shape[0], :occ.shape[1], :occ.shape[2]] = occ
        used = padded.reshape(nb[0], _BLOCK, nb[1], _BLOCK, nb[2], _BLOCK).any(axis=(1, 3, 5))
        b3 = np.argwhere(used)
        number = np.full(tuple(nb), -1, dtype=np.int64)
        number[b3[:, 0], b3[:, 1], b3[:, 2]] = np.arange(len(b3))
        b = space.marked_indices() // _BLOCK
        label = number[b[:, 0], b[:, 1], b[:, 2]]
        centres = space.origin + (b3 * _BLOCK + 0.5 * _BLOCK) * space.pitch
        radius = 0.5 * (_BLOCK - 1) * space.pitch * math.sqrt(3.0)
        space._cache["blocks"] = (label, centres, radius)
    return space._cache["blocks"]


def _near_voxels(space: Space, shape):
    """``(index (m,), lower (m,))``: marked voxels (indices into ``space.marked_indices()``, ascending) and
    their ``distance_to_shape_lower`` to ``shape``, such that every other marked voxel's is larger than
    the smallest of these: min and argmin (first in marked order) over them are those over all.

    The marked voxels are grouped in blocks of ``_BLOCK``^3; the bound of a block's centre less its
    radius (times the bound's Lipschitz constant) bounds its voxels from below, and the exact bound of
    the voxels of the best block bounds the minimum from above: only blocks that can reach below that
    are evaluated voxel by voxel. Cached in the space per shape.
    """
    key = ("near", id(shape))
    hit = space._cache.get(key)
    if hit is not None and hit[0] is shape:
        return hit[1], hit[2]
    pts = space.marked_centers()
    if len(pts) <= 8 * _BLOCK ** 3:
        index = np.arange(len(pts))
    else:
        label, centres, radius = _blocks(space)
        fb = distance_to_shape_lower(shape, centres)
        lower = fb - _lipschitz(shape) * radius - _SLACK
        first = np.flatnonzero(label == int(np.argmin(fb)))
        upper = float(distance_to_shape_lower(shape, pts[first]).min())  # a marked voxel's bound
        index = np.flatnonzero((lower <= upper)[label])
    d = distance_to_shape_lower(shape, pts[index])
    space._cache[key] = (shape, index, d)  # the shape kept: its id stays its own
    return index, d


def _space_points(space: Space):
    return space.marked_centers()


def _distance_3d(space: Space, shape):
    """Lower bound (m) on the distance from the space to a shape, and the space-side voxel centre."""
    pts = _space_points(space)
    if len(pts) == 0:
        return math.inf, None
    index, f = _near_voxels(space, shape)
    d = f - space.half_diagonal
    k = int(np.argmin(d))
    return float(d[k]), pts[index[k]]


def evaluate_panel(space: Space, zone, panel_index: int, *, risk: str = "high") -> PanelVerdict:
    """The verdict of panel ``panel_index`` of a fence or guard zone (see the module text)."""
    item = f'zone "{zone.name}"'
    att = _panel_attributes(zone, item)
    shape = zone.shapes[panel_index]
    if not isinstance(shape, g.Box):
        raise InputError(f"expected a fence panel to be a Box, got {type(shape).__name__}", item=item)
    panel = zone.panels[panel_index] if panel_index < len(zone.panels) else f"{zone.name}/panel {panel_index + 1}"
    b = _mm(att["height"])
    gap = _mm(att["bottom_gap"])
    thickness = _mm(att.get("thickness", float(min(shape.extents))))
    if risk not in ("high", "low"):
        raise InputError(f"expected risk 'high' or 'low', got {risk!r}", item="risk")
    table = st.REACH_OVER_HIGH if risk == "high" else st.REACH_OVER_LOW

    hd = space.horizontal_distance_to_box(shape)
    d3, _ = _distance_3d(space, shape)
    d3_mm = _mm(max(d3, 0.0))
    # heights are above the floor under the panel: the panel's bottom edge less its bottom gap
    floor_z = float(g.box_corners(shape)[:, 2].min()) - float(att["bottom_gap"])
    floor_mm = _mm(floor_z)
    # rounded to 1e-6 mm so that a layer edge on a table row (1400.0000000000002) reads as the row
    layers_z = np.round(to_mm(space.layer_bounds()) - floor_mm, 6)
    reasons = []
    sources = set()

    # reaching over, layer by layer
    guard = st.guard_rules(b, gap)
    sources.update(guard.sources)
    counts = b >= st.REACH_OVER_MIN_STRUCTURE_MM
    if counts:
        k_col = max(i for i, col in enumerate(table.columns_b_mm) if col <= b)
        reach_mm = float(max(row[k_col] for row in table.c_mm))
    else:
        reach_mm = float(max(max(row) for row in table.c_mm))
    layers = []
    governing = None
    gov_result = None
    memo = {}
    for k, (z0, z1) in enumerate(layers_z):
        dist = float(hd.per_level[k])
        if not math.isfinite(dist):
            continue
        dist_mm = _mm(dist)
        if counts:
            r0, r1 = _c_for(z0, b, risk, memo), _c_for(z1, b, risk, memo)
            res = r0 if (r0.c_mm or 0.0) >= (r1.c_mm or 0.0) else r1
            c = res.c_mm
            margin = dist_mm - c
        else:
            res, c, margin = None, None, None
        lc = LayerCheck(float(z0), float(z1), dist_mm, c, margin, res.row_a_mm if res else None,
                        res.column_b_mm if res else None)
        layers.append(lc)
        if margin is not None and (governing is None or margin < governing.margin_mm):
            governing, gov_result = lc, res
    if gov_result is not None:
        sources.update(gov_result.sources)
    a_max = _highest_near(space, shape, _to_m(reach_mm))
    a_max_mm = None if a_max is None else _mm(a_max - floor_z)

    # hazard height for reaching upwards: the lowest point of the space near the panel
    low = _lowest_near(space, shape, _to_m(reach_mm))
    upwards = None if low is None else st.reach_upwards(_mm(max(low - floor_z, 0.0)), risk)
    if upwards is not None:
        sources.update(upwards.sources)

    verdict = 0
    if d3 <= 0.0:
        verdict = 2
        reasons.append("the space touches or crosses the panel (within the space's over-approximation)")
    if not counts:
        verdict = max(verdict, 1)
        reasons.append(f"structure {b:g} mm lower than {st.REACH_OVER_MIN_STRUCTURE_MM} mm does not count "
                       "(ISO 13857): additional measures needed")
    elif governing is not None and governing.margin_mm < 0:
        verdict = 2
        reasons.append(f"reaching over: horizontal distance {governing.distance_mm:.0f} mm < c = "
                       f"{governing.c_mm:g} mm (a = {governing.z1_mm:.0f} mm, row {governing.row_a_mm}, "
                       f"column b = {governing.column_b_mm} mm, {risk} risk)")
    if gov_result is not None and gov_result.additional_measures:
        verdict = max(verdict, 1)
        reasons.append(f"high risk: structure lower than {st.REACH_OVER_HIGH_RISK_MEASURES_BELOW_MM} mm needs "
                       "additional measures (ISO 13857)")
    if not guard.height_ok:
        verdict = max(verdict, 1)
        reasons.append(f"fence {b:g} mm lower than {guard.min_height_mm} mm (guard rule against climbing "
                       "over): additional measures")
    if not guard.bottom_gap_ok:
        verdict = 2
        reasons.append(f"bottom gap {gap:g} mm more than {guard.max_bottom_gap_mm} mm (crawling under)")

    opening, opening_ok = None, None
    if "opening_size" in att:
        e = _mm(att["opening_size"])
        shape_kind = att.get("opening_shape", "slot")
        length = att.get("opening_length")
        opening = st.opening_distance(e, shape_kind, None if length is None else _mm(length))
        sources.update(opening.sources)
        if opening.treated_as_reach_over:
            if opening.whole_body_access:
                verdict = 2
                reasons.append(f"openings of {e:g} mm let the whole body through")
            else:
                verdict = max(verdict, 1)
                reasons.append(f"openings of {e:g} mm are over {st.OPENING_MAX_MM} mm: assess them as reaching "
                               "over at the opening's edge (additional measures)")
        else:
            opening_ok = d3_mm >= opening.sr_mm
            if not opening_ok:
                verdict = 2
                reasons.append(f"reaching through: distance {d3_mm:.0f} mm < sr = {opening.sr_mm:g} mm "
                               f"({shape_kind}, {opening.band} mm)")
    if not reasons:
        reasons.append("every required distance is met")
    confidence = "U" if (risk == "high" and counts) else "H"
    return PanelVerdict(
        zone=zone.name, panel=panel, verdict=VERDICTS[verdict], reasons=tuple(reasons), b_mm=b,
        bottom_gap_mm=gap, thickness_mm=thickness, floor_z_mm=floor_mm, risk=risk, distance_mm=_mm(hd.distance), distance_3d_mm=d3_mm,
        a_mm=None if governing is None else governing.z1_mm, a_max_mm=a_max_mm, reach_mm=reach_mm,
        c_mm=None if governing is None else governing.c_mm,
        margin_mm=None if governing is None else governing.margin_mm, reach_over=gov_result,
        layers=tuple(layers), opening=opening, opening_ok=opening_ok, upwards=upwards, guard=guard,
        confidence=confidence, standard_sources=tuple(sorted(sources)), space_method=space.method,
    )


def _to_m(mm) -> float:
    return float(to_metres(mm, "mm"))


def _near_columns(space: Space, box, reach) -> np.ndarray:
    """``(nx, ny)`` bool: columns whose square footprint comes within ``reach`` of the box's footprint."""
    from .space import _dist_to_polygon, box_footprint

    xy = space.column_centers_xy().reshape(-1, 2)
    d = _dist_to_polygon(xy, box_footprint(box)).reshape(space.occupancy.shape[:2])
    return d <= reach + space.pitch / math.sqrt(2.0)


def _highest_near(space: Space, box, reach) -> float | None:
    """The top (m) of the highest marked cube whose column comes within ``reach`` of the panel."""
    top = np.where(_near_columns(space, box, reach), space.column_top(), -np.inf)
    return float(top.max()) if np.isfinite(top).any() else None


def _lowest_near(space: Space, box, reach) -> float | None:
    """The bottom (m) of the lowest marked cube whose column comes within ``reach`` of the panel."""
    occ = space.occupancy & _near_columns(space, box, reach)[:, :, None]
    if not occ.any():
        return None
    k = int(np.argmax(occ.any(axis=(0, 1))))
    return float(space.origin[2] + k * space.pitch)


def evaluate_panels(cell, space: Space, *, risk: str = "high") -> tuple:
    """``PanelVerdict`` for every panel of every fence and guard zone of the cell, in order."""
    out = []
    for zone in cell.zones:
        if zone.kind not in PANEL_KINDS:
            continue
        for k in range(len(zone.shapes)):
            out.append(evaluate_panel(space, zone, k, risk=risk))
    return tuple(out)


# ---------------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class CrushingPoint:
    """A gap between the restricted space and a fixed object smaller than the ISO 13854 minimum.

    ``gap_mm`` is a lower bound on the gap (the space is conservative); ``point_mm`` (3,) the centre
    of the space's voxel nearest the object; ``check`` the ``CrushingGapResult``. ``touches`` is True
    when the bound is 0: the space touches or overlaps the object, or leaves a gap smaller than the
    space's ``over_approximation`` (an intrusion for the clearance check, or a crushing point).
    """

    zone: str
    panel: str
    kind: str
    gap_mm: float
    touches: bool
    point_mm: tuple
    body_part: str
    check: object


def crushing_points(cell, space: Space, *, body_part: str = "body", kinds=FIXED_KINDS) -> tuple:
    """Crushing points (ISO 13854): fixed objects closer to the space than the body part's gap.

    A zone shape counts when its gap to the space (lower bound) is below the minimum gap of
    ``body_part`` (500 mm for the body). A bound of 0 cannot tell a touch (an intrusion, for the
    clearance check) from a gap smaller than the space's resolution, so it is reported too, with
    ``touches=True`` (conservative). One ``CrushingPoint`` per zone shape.
    """
    out = []
    minimum = st.MIN_GAPS_MM.get(body_part)
    if minimum is None:
        st.crushing_gap_check(0.0, body_part)  # raises the standard module's error
    for zone in cell.zones:
        if zone.kind not in kinds:
            continue
        for k, shape in enumerate(zone.shapes):
            gap, at = _distance_3d(space, shape)
            if not math.isfinite(gap):
                continue
            gap_mm = _mm(max(gap, 0.0))
            check = st.crushing_gap_check(gap_mm, body_part)
            if check.crushing_point:
                panel = zone.panels[k] if k < len(zone.panels) else zone.name
                out.append(CrushingPoint(zone.name, panel, zone.kind, gap_mm, gap <= 0.0,
                                         tuple(float(v) for v in to_mm(at)), body_part, check))
    return tuple(out)


# ---------------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class ProtectiveDeviceCheck:
    """A protective device's actual distance to the space against the ISO 13855 minimum S."""

    device_distance_mm: float
    required: object
    passes: bool
    margin_mm: float
    note: str


def protective_device_check(device_distance_to_space_mm, T_s, d_mm=None, kind: str = "perpendicular"):
    """Is a protective device far enough from the space? S from ``standards.protective_device_distance``.

    Parameters
    ----------
    device_distance_to_space_mm : float
        The device's detection zone to the restricted space, mm (>= 0).
    T_s, d_mm, kind
        As ``envelope.standards.protective_device_distance``.
    """
    try:
        dist = float(device_distance_to_space_mm)
    except (TypeError, ValueError):
        raise InputError(f"expected a distance in mm, got {device_distance_to_space_mm!r}",
                         item="device_distance_to_space_mm") from None
    if not (math.isfinite(dist) and dist >= 0):
        raise InputError(f"expected a finite distance >= 0 mm, got {device_distance_to_space_mm!r}",
                         item="device_distance_to_space_mm")
    req = st.protective_device_distance(T_s, d_mm, kind)
    ok = dist >= req.S_mm
    note = (f"device {dist:g} mm from the space {'>=' if ok else '<'} S = {req.S_mm:g} mm ({req.formula})")
    return ProtectiveDeviceCheck(dist, req, ok, dist - req.S_mm, note)
