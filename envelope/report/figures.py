"""Report figures (matplotlib, Agg backend): plan view, elevations and the clearance chart.

The views are orthographic projections of the cell in millimetres: zones as translucent grey
silhouettes (red when a finding involves them, fences with a dark outline), half-spaces as a band
along their boundary (left out of a view they would cover entirely, e.g. the floor in the plan view),
and the arm drawn in the worst branch of each of the worst targets, coloured by that row's status.
Every target's TCP is a dot coloured by the worst status among its rows.
"""

from __future__ import annotations

import io

import matplotlib

matplotlib.use("Agg")  # set explicitly: reports are written without a display

import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402
from matplotlib.collections import PolyCollection  # noqa: E402
from matplotlib.lines import Line2D  # noqa: E402
from matplotlib.patches import Patch, Polygon  # noqa: E402
from scipy.spatial import ConvexHull, QhullError  # noqa: E402
from trimesh.transformations import transform_points  # noqa: E402

from ..geometry import HalfSpace, TriMesh  # noqa: E402
from ..scene import STATUS_RGBA, cell_extent, shape_mesh, world_from_frames  # noqa: E402
from ..units import to_mm  # noqa: E402

ARM_DRAW_LIMIT = 6
"""The arm is drawn for at most this many targets (the worst), to keep the views readable."""
DPI = 110
AXIS_NAMES = "XYZ"
VIEWS = {"plan": (0, 1), "elevation-xz": (0, 2), "elevation-yz": (1, 2)}
"""View name -> (horizontal axis, vertical axis) indices of the cell frame."""
VIEW_TITLES = {
    "plan": "Plan view (looking down -Z)",
    "elevation-xz": "Elevation XZ (looking along +Y)",
    "elevation-yz": "Elevation YZ (looking along -X)",
}
FINDING_STATUSES = ("intrusion", "below margin")
_SEVERITY = ("intrusion", "below margin", "outside limits", "unreachable", "allowed contact", "clear")


def _sev(status: str) -> int:
    """Position of a status in ``_SEVERITY`` (an unknown status sorts last)."""
    return _SEVERITY.index(status) if status in _SEVERITY else len(_SEVERITY)


def status_colour(status: str) -> tuple:
    """A matplotlib RGBA (0..1) for a status."""
    r, g, b, a = STATUS_RGBA.get(status, (0, 0, 0, 255))
    return (r / 255, g / 255, b / 255, a / 255)


def drawn_rows(result, limit: int = ARM_DRAW_LIMIT) -> list:
    """Row indices to draw: the worst row with finite joint values of each target, worst targets first."""
    seen, out = set(), []
    for i in result.worst_first():
        row = result.rows[i]
        if row.target in seen or not np.isfinite(np.asarray(row.q, dtype=np.float64)).all():
            continue
        seen.add(row.target)
        out.append(i)
        if len(out) >= limit:
            break
    return out


def zone_of(closest_other: str, zone_names) -> str:
    """The zone named by a row's ``closest_other`` (``zone`` or ``zone/panel``); ``""`` if none (a body)."""
    if closest_other in zone_names:
        return closest_other
    head = closest_other.rpartition("/")[0]
    return head if head in zone_names else ""


def offended_zones(result, rows=None) -> set:
    """Names of zones a finding involves: the closest zone of every intrusion / below-margin row, and
    every zone in an intrusion / below-margin pair of the rows ``rows`` (indices)."""
    zone_names = {z.name for z in result.cell.zones}
    out = set()
    for r in result.rows:
        if r.status in FINDING_STATUSES:
            zone = zone_of(r.closest_other, zone_names)
            if zone:
                out.add(zone)
    for i in rows or ():
        for p in result.rows[i].pairs:
            if p.kind != "self" and p.status in FINDING_STATUSES:
                out.add(p.other)
    return out


def _silhouette(points_2d):
    """The convex hull polygon (k, 2) of projected points, or None if degenerate."""
    pts = np.unique(np.round(points_2d, 6), axis=0)
    if len(pts) < 3:
        return None
    try:
        hull = ConvexHull(pts)
    except QhullError:
        return None
    return pts[hull.vertices]


class FigureCache:
    """Work shared by the figures of one result, done once: each target's worst status, the zones of the
    finding rows, the target TCPs, the shape meshes and the drawing extents.

    ``report_figures`` makes one and hands it to every ``view_figure`` call; a figure drawn on its own
    makes its own. The result is not changed, so the cache stays valid for as long as the result lives.
    """

    def __init__(self, result):
        self.result = result
        cell = result.cell
        rank = {s: k for k, s in enumerate(_SEVERITY)}
        unknown = len(_SEVERITY)
        worst: dict = {}  # target -> (severity, status) of its worst row; the first of equals is kept
        zone_names = {z.name for z in cell.zones}
        finding_zones: set = set()
        for r in result.rows:
            k = rank.get(r.status, unknown)
            cur = worst.get(r.target)
            if cur is None or k < cur[0]:
                worst[r.target] = (k, r.status)
            if r.status in FINDING_STATUSES:
                zone = zone_of(r.closest_other, zone_names)
                if zone:
                    finding_zones.add(zone)
        self.worst_status = {t: s for t, (_, s) in worst.items()}
        """Target name -> the worst status among its rows (targets with rows only)."""
        self.finding_zones = finding_zones
        """The zones named by the closest pair of an intrusion / below-margin row."""
        self.tcp_all = np.array([np.asarray(t.world_from_tcp)[:3, 3] for t in cell.targets], dtype=np.float64).reshape(-1, 3)
        """(n_targets, 3) m: every target's TCP in the cell frame, in ``cell.targets`` order."""
        self._meshes: dict = {}
        self._extents: dict = {}
        self._by_status = None

    def targets_by_status(self) -> dict:
        """``{status: indices into cell.targets}``: the targets (with rows) grouped by their worst status."""
        if self._by_status is None:
            out: dict = {}
            for k, t in enumerate(self.result.cell.targets):
                status = self.worst_status.get(t.name)
                if status is not None:
                    out.setdefault(status, []).append(k)
            self._by_status = out
        return self._by_status

    def mesh(self, shape, extent=None, padding: float = 0.0):
        """``(vertices (n, 3) m, faces or None)`` of ``scene.shape_mesh(shape, extent=, padding=)`` in the
        shape's parent frame (faces for a ``TriMesh`` only). The extent matters for half-spaces only."""
        key = (id(shape), float(padding), np.asarray(extent, dtype=np.float64).tobytes() if isinstance(shape, HalfSpace) and extent is not None else None)
        hit = self._meshes.get(key)
        if hit is None:
            m = shape_mesh(shape, extent=extent, padding=padding)
            faces = np.asarray(m.faces) if isinstance(shape, TriMesh) else None
            hit = (shape, np.asarray(m.vertices, dtype=np.float64), faces)  # the shape is kept so its id stays its own
            self._meshes[key] = hit
        return hit[1], hit[2]

    def extent(self, rows, motions) -> np.ndarray:
        """``scene.cell_extent`` of the cell with the arm at the given rows and motions and every target TCP."""
        key = (tuple(rows), tuple(motions))
        if key not in self._extents:
            cell, result = self.result.cell, self.result
            qs = [result.rows[i].q for i in rows] + [result.motions[i].q_at_min for i in motions]
            if qs:
                # the arm at each configuration as points (the vertices cell_extent would take the bounds
                # of), from the cached meshes: the same box without meshing the arm again
                points = [self.tcp_all]
                for q in qs:
                    world_from_frame = world_from_frames(cell, q)
                    for body in cell.bodies:
                        for s in body.shapes:
                            v, _ = self.mesh(s, None, body.padding)
                            points.append(transform_points(v, world_from_frame[body.frame]))
                extent = cell_extent(cell, qs=np.empty((0, 6)), points=np.vstack(points))
            else:
                extent = cell_extent(cell, qs=None, points=self.tcp_all)
            self._extents[key] = extent
        return self._extents[key]


def _add_patch(ax, patch) -> None:
    """``ax.add_patch`` without widening the data limits (slow for many outlines): the views set their
    limits themselves."""
    ax.add_artist(patch)


def _draw_shape(ax, shape, world_from_parent, axes, extent, padding, *, face, edge, lw, z, cache, label=None):
    vertices, faces = cache.mesh(shape, extent, padding)
    world = to_mm(transform_points(vertices, world_from_parent))
    pts = world[:, axes]
    if isinstance(shape, TriMesh):
        # the triangles of a (possibly non-convex) mesh, in the face colour blended onto white and drawn
        # opaque, so that overlapping triangles do not darken each other
        r, g, b, a = face
        solid = (1 - a + a * r, 1 - a + a * g, 1 - a + a * b, 1.0)
        tris = world[faces][:, :, axes]
        ax.add_collection(PolyCollection(tris, facecolors=[solid], edgecolors="none", antialiaseds=False, zorder=z - 0.5))
        poly = _silhouette(pts)
        if poly is not None:
            _add_patch(ax, Polygon(poly, closed=True, fill=False, edgecolor=edge, linewidth=lw, linestyle=":", zorder=z))
        return
    poly = _silhouette(pts)
    if poly is not None:
        _add_patch(ax, Polygon(poly, closed=True, facecolor=face, edgecolor=edge, linewidth=lw, zorder=z, label=label))


def view_figure(result, view: str = "plan", *, rows=None, motions=(), cache=None):
    """One orthographic view of the cell as a matplotlib Figure (axes in mm, equal aspect).

    Parameters
    ----------
    result : CheckResult
    view : {"plan", "elevation-xz", "elevation-yz"}
    rows : list of int, optional
        Rows whose arm configuration is drawn; ``drawn_rows(result)`` by default.
    motions : list of int, optional
        Indices into ``result.motions`` whose worst configuration (``q_at_min``) is drawn too, hatched
        with dashed outlines, a diamond at the TCP and labelled ``M<k>`` (k = position in this list + 1);
        ``motions.drawn_motions(result)`` gives the usual choice.
    cache : FigureCache, optional
        Work shared with other figures of the same result (made here if None).
    """
    cell = result.cell
    if cache is None:
        cache = FigureCache(result)
    axes = VIEWS[view]
    depth_axis = 3 - axes[0] - axes[1]
    if rows is None:
        rows = drawn_rows(result)
    motions = list(motions)
    extent = cache.extent(rows, motions)
    if rows or not motions:
        offended = set(cache.finding_zones)
        for i in rows:
            for p in result.rows[i].pairs:
                if p.kind != "self" and p.status in FINDING_STATUSES:
                    offended.add(p.other)
    else:
        offended = set()
    offended |= motion_offended_zones(result, motions)
    fig, ax = plt.subplots(figsize=(7.0, 6.0), dpi=DPI)

    for zone in cell.zones:
        bad = zone.name in offended
        alpha = 0.10 if zone.kind == "fence" else 0.30  # fences are thin panels: mostly their outline
        face = (0.85, 0.15, 0.15, alpha) if bad else (0.55, 0.55, 0.55, alpha)
        edge = (0.15, 0.15, 0.15, 1.0) if zone.kind == "fence" else ((0.7, 0.1, 0.1, 1.0) if bad else (0.4, 0.4, 0.4, 1.0))
        lw = 1.6 if zone.kind == "fence" else 0.6
        centres = []
        for shape in zone.shapes:
            if isinstance(shape, HalfSpace) and abs(shape.normal[depth_axis]) > 0.99:
                continue  # the plane faces the viewer: it would cover the whole view
            _draw_shape(ax, shape, np.eye(4), axes, extent, 0.0, face=face, edge=edge, lw=lw, z=1, cache=cache)
            if not isinstance(shape, HalfSpace):
                v, _ = cache.mesh(shape)
                centres.append(to_mm(((v.min(axis=0) + v.max(axis=0)) / 2))[list(axes)])
        if centres and view == "plan" and len(cell.zones) <= 30:  # names only in the plan: elevations crowd
            c = np.mean(centres, axis=0)
            ax.annotate(zone.name, c, fontsize=7, ha="center", va="center", color=(0.2, 0.2, 0.2), zorder=5)

    from .spacesection import restricted_outlines

    outlines = restricted_outlines(result, view)
    for loop in outlines:
        ax.plot(loop[:, 0], loop[:, 1], color=(0.1, 0.3, 0.85), linewidth=1.1, linestyle="--", zorder=4)

    for i in rows:
        row = result.rows[i]
        world_from_frame = world_from_frames(cell, row.q)
        colour = status_colour(row.status)
        face = colour[:3] + (0.45,)
        for body in cell.bodies:
            for shape in body.shapes:
                _draw_shape(
                    ax, shape, world_from_frame[body.frame], axes, extent, body.padding,
                    face=face, edge=colour[:3] + (0.9,), lw=0.5, z=3, cache=cache,
                )
        tcp = to_mm((world_from_frame[6] @ cell.tool.flange_from_tcp)[:3, 3])
        ax.annotate(
            f"{row.target} ({row.branch})", tcp[list(axes)], fontsize=7, xytext=(4, 4),
            textcoords="offset points", zorder=6,
        )

    for k, i in reversed(list(enumerate(motions, start=1))):  # the worst (M1) drawn last, on top
        _draw_motion_arm(ax, result, i, k, axes, extent, cache)

    # every target's TCP, coloured by the worst status among its rows
    # (one collection per status, the more severe drawn on top where dots overlap)
    worst = cache.worst_status if rows or not motions else {}  # a motions-only view leaves the target dots out
    for status, keep in sorted(cache.targets_by_status().items(), key=lambda kv: -_sev(kv[0])) if worst else ():
        tcps = to_mm(cache.tcp_all[keep])[:, list(axes)]
        ax.scatter(tcps[:, 0], tcps[:, 1], s=14, color=status_colour(status), edgecolors="black", linewidths=0.4, zorder=7)

    base = to_mm(np.asarray(cell.world_from_base)[:3, 3])[list(axes)]
    ax.plot([base[0]], [base[1]], marker="+", color="black", markersize=10, zorder=8)

    lo, hi = to_mm(extent[0])[list(axes)], to_mm(extent[1])[list(axes)]
    if outlines:
        pts = np.vstack(outlines)
        lo, hi = np.minimum(lo, pts.min(axis=0)), np.maximum(hi, pts.max(axis=0))
    ax.set_xlim(lo[0], hi[0])
    ax.set_ylim(lo[1], hi[1])
    ax.set_aspect("equal", adjustable="box")
    ax.set_xlabel(f"{AXIS_NAMES[axes[0]]} (mm, cell frame)")
    ax.set_ylabel(f"{AXIS_NAMES[axes[1]]} (mm, cell frame)")
    ax.set_title(VIEW_TITLES[view], fontsize=10)
    ax.grid(True, linewidth=0.3, alpha=0.5)

    statuses = sorted({result.rows[i].status for i in rows} | set(worst.values()) | {result.motions[i].status for i in motions}, key=_sev)
    handles = [Patch(facecolor=(0.55, 0.55, 0.55, 0.3), edgecolor=(0.4, 0.4, 0.4), label="zone")]
    if offended:
        handles.append(Patch(facecolor=(0.85, 0.15, 0.15, 0.3), edgecolor=(0.7, 0.1, 0.1), label="zone with a finding"))
    if any(z.kind == "fence" for z in cell.zones):
        handles.append(Patch(facecolor=(0.55, 0.55, 0.55, 0.3), edgecolor=(0.15, 0.15, 0.15), linewidth=1.6, label="fence"))
    handles += [Patch(facecolor=status_colour(s)[:3] + (0.45,), edgecolor=status_colour(s), label=f"arm / TCP: {s}") for s in statuses]
    if motions:
        handles.append(Patch(facecolor="none", edgecolor=(0.2, 0.2, 0.2), hatch="////", linestyle="--", label="M<k>: worst configuration of a move"))
        for k, i in enumerate(motions, start=1):
            m = result.motions[i]
            handles.append(Line2D(
                [], [], marker="D", markersize=5, color=status_colour(m.status), markeredgecolor="black", linestyle="none",
                label=f"M{k}: {m.program} move {m.move} {m.from_target} -> {m.to_target}\n      [{m.branch}] s={m.where:.2f}, {m.status}",
            ))
    handles.append(Line2D([], [], marker="+", color="black", linestyle="none", markersize=9, label="arm base"))
    if outlines:
        handles.append(Line2D([], [], color=(0.1, 0.3, 0.85), linewidth=1.1, linestyle="--", label="restricted space"))
    ax.legend(handles=handles, fontsize=7, loc="upper left", bbox_to_anchor=(1.01, 1.0), borderaxespad=0.0)
    fig.tight_layout()
    return fig


def motion_offended_zones(result, motions) -> set:
    """Names of the zones that decide the motions ``motions`` (indices) whose status is a finding."""
    zone_names = {z.name for z in result.cell.zones}
    out = set()
    for i in motions:
        m = result.motions[i]
        if m.status in FINDING_STATUSES:
            zone = zone_of(m.closest_other, zone_names)
            if zone:
                out.add(zone)
    return out


def _draw_motion_arm(ax, result, i, k, axes, extent, cache):
    """The arm at motion ``i``'s worst configuration: hatched, dashed outlines, diamond TCP, ``M<k>`` label."""
    cell = result.cell
    m = result.motions[i]
    world_from_frame = world_from_frames(cell, m.q_at_min)
    colour = status_colour(m.status)
    for body in cell.bodies:
        for shape in body.shapes:
            vertices, _ = cache.mesh(shape, extent, body.padding)
            poly = _silhouette(to_mm(transform_points(vertices, world_from_frame[body.frame]))[:, axes])
            if poly is not None:
                _add_patch(ax, Polygon(
                    poly, closed=True, facecolor=colour[:3] + (0.18,), edgecolor=colour[:3] + (1.0,), hatch="////",
                    linewidth=0.9, linestyle="--", zorder=3.5 - 0.01 * k,
                ))
    tcp = to_mm((world_from_frame[6] @ cell.tool.flange_from_tcp)[:3, 3])[list(axes)]
    ax.plot([tcp[0]], [tcp[1]], marker="D", markersize=6, color=colour, markeredgecolor="black", markeredgewidth=0.6, zorder=7.5)
    ax.annotate(
        f"M{k}", tcp, fontsize=7, fontweight="bold", xytext=(6, 11 - 9 * k),
        textcoords="offset points", zorder=8, bbox={"boxstyle": "round,pad=0.15", "fc": (1, 1, 1, 0.75), "ec": "none"},
    )


def chart_points(result) -> dict:
    """What ``clearance_chart`` draws, as arrays (one entry per row of ``result.rows``, in order).

    ``targets``: the target names in check order; ``x``: each row's position (its target's column
    index, its branches side by side in it); ``width``: the branch slot width; ``clearance_mm``,
    ``required_mm``; ``status``: each row's status.
    """
    rows = result.rows
    n = len(rows)
    index: dict = {}
    col = np.empty(n, dtype=np.int64)
    for k, row in enumerate(rows):
        col[k] = index.setdefault(row.target, len(index))
    per_target = np.bincount(col, minlength=len(index))
    # slot of each row within its target: its position among the target's rows, in row order
    order = np.argsort(col, kind="stable")
    starts = np.cumsum(per_target) - per_target
    slot = np.empty(n, dtype=np.int64)
    slot[order] = np.arange(n) - np.repeat(starts, per_target)
    width = 0.8 / per_target[col]
    x = col - 0.4 + (slot + 0.5) * width
    clearance = to_mm(np.fromiter((r.clearance for r in rows), dtype=np.float64, count=n))
    required = to_mm(np.fromiter((r.required for r in rows), dtype=np.float64, count=n))
    status = np.array([r.status for r in rows], dtype=object)
    return {"targets": list(index), "x": x, "width": width, "clearance_mm": clearance, "required_mm": required, "status": status}


def _marker_z(status: str) -> float:
    """zorder of a status's markers in the clearance chart: the more severe on top where markers overlap."""
    return 3.0 + 0.01 * (len(_SEVERITY) - _sev(status))


def clearance_chart(result):
    """Clearance (mm) of every target x branch row against its required clearance, as a Figure.

    One column per target (in check order), its branches side by side in it; a marker per branch
    coloured by status, the more severe statuses drawn on top; the required clearance of the branch's
    closest pair as a black bar above it; an unreachable target as a cross on the zero line. Every row
    is drawn (the bars as one line with breaks, the markers as one collection per status).
    """
    pts = chart_points(result)
    targets, x, width = pts["targets"], pts["x"], pts["width"]
    c, r, status = pts["clearance_mm"], pts["required_mm"], pts["status"]
    n = len(targets)
    fig, ax = plt.subplots(figsize=(max(7.0, min(14.0, 0.35 * n + 3.0)), 4.2), dpi=DPI)
    size = 22 if len(result.rows) < 2000 else 6
    finite = np.isfinite(c)
    statuses = sorted(set(status[finite].tolist()), key=_sev)
    for st in statuses:
        sel = finite & (status == st)
        ax.scatter(x[sel], c[sel], s=size, color=status_colour(st), edgecolors="black", linewidths=0.3, label=st,
                   zorder=_marker_z(st))
    has_req = np.isfinite(r)
    if has_req.any():
        # every bar as one line broken by NaNs (one path, not one artist per row)
        xr, rr, hw = x[has_req], r[has_req], 0.4 * width[has_req]
        nan = np.full(len(xr), np.nan)
        ax.plot(np.column_stack((xr - hw, xr + hw, nan)).ravel(), np.column_stack((rr, rr, nan)).ravel(),
                color="black", linewidth=1.2, solid_capstyle="butt", zorder=2, label="required clearance")
    unreachable = x[~finite & (status == "unreachable")]
    if len(unreachable):
        ax.scatter(unreachable, np.zeros(len(unreachable)), marker="x", s=30, color=status_colour("unreachable"),
                   label="unreachable (no branch)", zorder=_marker_z("unreachable"))
    ax.axhline(0.0, color=(0.3, 0.3, 0.3), linewidth=0.6)
    ax.set_xlim(-0.7, max(n, 1) - 0.3)
    if n <= 40:
        ax.set_xticks(range(n))
        ax.set_xticklabels(targets, rotation=60, ha="right", fontsize=7)
        ax.set_xlabel("target")
    else:
        ax.set_xlabel("target (index in check order; names in clearance.csv)")
    ax.set_ylabel("clearance (mm)")
    ax.set_title("Clearance per target and branch against the required clearance", fontsize=10)
    ax.grid(True, axis="y", linewidth=0.3, alpha=0.5)
    if ax.get_legend_handles_labels()[0]:
        ax.legend(fontsize=7, loc="upper left", bbox_to_anchor=(1.01, 1.0), borderaxespad=0.0)
    else:
        ax.text(0.5, 0.5, "no rows", transform=ax.transAxes, ha="center", va="center")
    fig.tight_layout()
    return fig


BRANCH_COLOURS = ("#1f77b4", "#9467bd", "#17becf", "#8c564b", "#e377c2", "#7f7f7f", "#bcbd22", "#2ca02c")
"""Line colours of the branches within one panel of the motion chart (the status is the marker)."""


def motion_chart(result, limit: int | None = None):
    """Clearance along each of the worst moves, as a Figure of small multiples (one panel per move).

    Panels are the ``limit`` (``motions.CHART_MOVES``) worst moves, worst first, left to right then
    down. In a panel: one solid line per start branch, the certified clearance lower bound (mm) of the
    pair with the smallest margin at each sampled path fraction; the same branch's required clearance
    (allowance included) as a dashed line; a diamond at the certified minimum, coloured by status. The
    worst branch of the move is drawn thicker; the panel title (and frame, for a finding) takes the
    move's status colour.
    """
    from .motions import CHART_MOVES, worst_moves

    limit = CHART_MOVES if limit is None else limit
    moves = worst_moves(result)
    shown = moves[:limit]
    n = max(len(shown), 1)
    ncols = min(3, n)
    nrows = -(-n // ncols)
    fig, axs = plt.subplots(nrows, ncols, figsize=(4.2 * ncols + 0.6, 3.0 * nrows + 0.8), dpi=DPI, squeeze=False)
    for k, ax in enumerate(axs.ravel()):
        if k >= len(shown):
            ax.set_visible(False)
            if not shown and k == 0:
                ax.set_visible(True)
                ax.text(0.5, 0.5, "no motions", transform=ax.transAxes, ha="center", va="center")
            continue
        group = shown[k]
        first = result.motions[group[0]]
        colour = status_colour(first.status)
        drawn = False
        for b, i in enumerate(group):
            m = result.motions[i]
            s = np.asarray(m.profile.s, dtype=np.float64)
            order = np.argsort(s, kind="stable")
            s = s[order]
            c = to_mm(np.asarray(m.profile.clearance, dtype=np.float64)[order])
            r = to_mm(np.asarray(m.profile.required, dtype=np.float64)[order])
            line = BRANCH_COLOURS[b % len(BRANCH_COLOURS)]
            lw = 1.8 if b == 0 else 1.0
            if np.isfinite(c).any():
                ax.plot(s, c, color=line, linewidth=lw, label=m.branch or "(no branch)", zorder=3 if b == 0 else 2)
                drawn = True
            if np.isfinite(r).any():
                ax.plot(s, r, color=line, linewidth=0.9, linestyle="--", zorder=2)
            if np.isfinite(m.where) and np.isfinite(m.min_clearance):
                ax.plot([m.where], [float(to_mm(m.min_clearance))], marker="D", markersize=5, color=status_colour(m.status),
                        markeredgecolor="black", markeredgewidth=0.5, linestyle="none", zorder=4)
        if not drawn:
            ax.text(0.5, 0.85, "no clearance profile", transform=ax.transAxes, ha="center", va="center", fontsize=8)
        ax.set_title(f"{k + 1}. {first.program} move {first.move}: {first.from_target} -> {first.to_target}\n"
                     f"({first.motion}) {first.status}", fontsize=8, color=colour[:3])
        if first.status in FINDING_STATUSES:
            for spine in ax.spines.values():
                spine.set_edgecolor(colour[:3])
                spine.set_linewidth(1.6)
        ax.set_xlim(0.0, 1.0)
        ax.grid(True, linewidth=0.3, alpha=0.5)
        ax.tick_params(labelsize=7)
        if k % ncols == 0:
            ax.set_ylabel("clearance (mm)", fontsize=8)
        if k // ncols == nrows - 1 or k + ncols >= len(shown):
            ax.set_xlabel("path fraction s", fontsize=8)
        if drawn:
            ax.legend(fontsize=6.5, loc="best", title="start branch", title_fontsize=6.5)
    title = "Clearance along each move: solid certified clearance, dashed required (allowance included), diamond the minimum"
    if len(moves) > len(shown):
        title += f"\n(the {len(shown)} worst of {len(moves)} moves; every move is in the motions table)"
    fig.suptitle(title, fontsize=9)
    fig.tight_layout()
    return fig


def png_bytes(fig) -> bytes:
    """The figure as PNG bytes (no software / date metadata, so re-runs give the same bytes); closes it."""
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=DPI, metadata={"Software": None}, bbox_inches="tight", pad_inches=0.1)
    plt.close(fig)
    return buf.getvalue()


def report_figures(result) -> dict:
    """``{name: PNG bytes}``: ``plan``, ``elevation-xz``, ``elevation-yz`` and ``chart``, then the
    ``motion_figures``. A result with motions and no target rows (``envelope sweep``) has only the
    motion figures."""
    cache = FigureCache(result)
    if not result.rows and result.motions:
        return motion_figures(result, cache=cache)
    rows = drawn_rows(result)
    out = {view: png_bytes(view_figure(result, view, rows=rows, cache=cache)) for view in VIEWS}
    out["chart"] = png_bytes(clearance_chart(result))
    return out | motion_figures(result, cache=cache)


def motion_figures(result, cache=None) -> dict:
    """``{name: PNG bytes}`` of the motions (empty without ``MotionRow`` motions): ``motion-chart`` and
    ``motion-plan``, ``motion-elevation-xz``, ``motion-elevation-yz`` (the worst configuration of each of
    the ``motions.MOTION_GLB`` worst moves, no target arms). Captions in ``MOTION_CAPTIONS``."""
    from .motions import drawn_motions, motion_rows

    if not motion_rows(result):
        return {}
    out = {"motion-chart": png_bytes(motion_chart(result))}
    drawn = drawn_motions(result)
    if drawn:
        cache = FigureCache(result) if cache is None else cache
        for view in VIEWS:
            out[f"motion-{view}"] = png_bytes(view_figure(result, view, rows=[], motions=drawn, cache=cache))
    return out


MOTION_CAPTIONS = {
    "motion-chart": "Clearance along each of the worst moves (one panel per move, worst first): a solid line per "
    "start branch is the certified clearance lower bound (mm) of the pair with the smallest margin along the "
    "path (path fraction 0..1), the dashed line of the same colour its required clearance with the stopping "
    "allowance included; the diamond marks the certified minimum over the whole move (between samples it can lie below the line), coloured by status.",
    "motion-plan": "Plan view (mm) of the worst configuration of each of the worst moves (M1 = worst, as in the "
    "motions table), hatched with dashed outlines in the colour of the move's status, a diamond at the TCP. "
    "Grey: zones; dark outline: fences; red: a zone that decides a move with a finding.",
    "motion-elevation-xz": "Elevation XZ (mm) of the worst configuration of each of the worst moves, as in the motion plan view.",
    "motion-elevation-yz": "Elevation YZ (mm) of the worst configuration of each of the worst moves, as in the motion plan view.",
}
"""Captions of the motion figures (report.html / report.pdf, Motions section)."""


FIGURE_CAPTIONS = {
    "plan": "Plan view of the cell (mm). Grey: zones; red: zones with a finding; dark outline: fences. "
    "The arm is drawn in the worst branch of each of the worst targets, coloured by that row's status; "
    "dots are the target TCPs, coloured by the worst status among their rows; + is the arm base.",
    "elevation-xz": "Elevation of the cell in the XZ plane (mm), same colours as the plan view.",
    "elevation-yz": "Elevation of the cell in the YZ plane (mm), same colours as the plan view.",
    "chart": "Clearance of each target x branch row (markers, coloured by status) against the required "
    "clearance of its closest pair (black bars). Negative clearance is a penetration.",
}
