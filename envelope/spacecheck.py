"""The space check: maximum, restricted and operating space of a cell, judged against its fences, fixed
objects, keep-out zones and protective devices, with suggested axis limits.

``run_space_check(cell, result=None)`` computes, in the world (cell) frame:

- the maximum space (mechanical limits, ``cell.arm.limits``);
- the restricted space (the soft axis limits ``cell.settings["soft_limits"]``, the mechanical limits
  where none is given, grown by ``cell.stopping_allowance``);
- the operating space (the within-limits rows of a check ``result``, plus any extra configurations);
- the ISO 13857 verdict of every fence and guard panel, the ISO 13854 crushing points and the ISO 13855
  distance of every protective device, all against the restricted space;
- the distance of every keep-out zone from the restricted space against the zone's clearance;
- suggested axis limits (``suggest_axis_limits``, see docs/spaces.md, "Suggested axis limits").

``write_space_outputs`` writes the spaces (STL, glTF), ``fences.csv``, ``crushing.csv`` and
``space.json`` (``space_summary``). Library values are metres and radians; the summary and the files
millimetres and degrees (through ``envelope.units``).
"""

from __future__ import annotations

import csv
import io
import json
import math
import time
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from . import standards as st
from .errors import InputError
from .fences import (
    PANEL_KINDS,
    _near_voxels,
    crushing_points,
    evaluate_panels,
    protective_device_check,
)
from .kinematics.arm import N_JOINTS
from .space import (
    DEFAULT_PITCH,
    Space,
    maximum_space,
    operating_space,
    restricted_space,
    write_space,
)
from .units import to_degrees, to_mm, to_radians

__all__ = [
    "SpaceCheck",
    "KeepOutCheck",
    "DeviceCheck",
    "AxisSuggestion",
    "run_space_check",
    "suggest_axis_limits",
    "keepout_checks",
    "device_checks",
    "suggestion_record",
    "space_summary",
    "write_space_outputs",
    "write_space_files",
    "fences_csv_text",
    "crushing_csv_text",
    "panel_distance_ok",
    "FENCES_CSV_COLUMNS",
    "CRUSHING_CSV_COLUMNS",
    "SEARCH_STEP_DEG",
    "SEARCH_PITCH",
]

SEARCH_STEP_DEG = 5.0
"""Grid of axis-1 bounds (degrees) the suggestion searches."""
SEARCH_PITCH = 0.04
"""Voxel edge (m) of the search; the suggestion is then verified at the check's pitch."""
_CLEAR = "clear"


# ====================================================================== results
@dataclass(frozen=True)
class KeepOutCheck:
    """A keep-out zone against the restricted space: the distance (lower bound, mm) and its clearance."""

    zone: str
    required_mm: float
    distance_mm: float
    passes: bool


@dataclass(frozen=True)
class DeviceCheck:
    """A protective device's horizontal distance (mm, lower bound) to the restricted space, against S."""

    name: str
    kind: str
    distance_mm: float
    check: object  # fences.ProtectiveDeviceCheck
    passes: bool


@dataclass(frozen=True, eq=False)
class AxisSuggestion:
    """Suggested axis limits, or why there are none.

    Attributes
    ----------
    found : bool
    limits : (6, 2) float or None
        The suggested limits (radians): the restricted space's limits with joint 1 (and, where it
        helped, joints 2 and 3) replaced; None when there is no suggestion.
    joints : tuple of int
        1-based joints whose range the suggestion changes.
    branches : tuple of (str, str)
        ``(target, branch)``: a clear branch of every target within the suggested limits.
    panels, keepouts : tuple
        ``PanelVerdict`` and ``KeepOutCheck`` of the restricted space over the suggested limits,
        recomputed at the check's pitch (the verification).
    verified : bool
        Every panel meets its distances and every keep-out zone its clearance at the check's pitch.
    blocking_targets : tuple of str
        When none is found: the targets that prevent it.
    reason : str
        In words: the suggestion and its distances, or why there is none.
    method : str
        How it was searched.
    """

    found: bool
    limits: np.ndarray | None
    joints: tuple
    branches: tuple
    panels: tuple
    keepouts: tuple
    verified: bool
    blocking_targets: tuple
    reason: str
    method: str


@dataclass(frozen=True, eq=False)
class SpaceCheck:
    """Everything the space check found (see the module text). Lengths in metres, angles in radians.

    Attributes
    ----------
    cell_name : str
    pitch : float
        Voxel edge (m) of the spaces.
    risk : str
        ``"high"`` or ``"low"``: the ISO 13857 reach-over table used.
    limits : (6, 2) float
        The restricted space's joint ranges (radians).
    limits_source : str
        ``"soft limits"`` or ``"mechanical limits"``.
    allowance : float
        The stopping allowance the restricted space is grown by (m).
    maximum, restricted : Space
    operating : Space or None
        The within-limits rows of the check that are within the soft limits, and the extra
        configurations; None when there was no configuration to use.
    operating_count : int
        Configurations in the operating space.
    panels : tuple of PanelVerdict
    crushing : tuple of CrushingPoint
    devices : tuple of DeviceCheck
    keepouts : tuple of KeepOutCheck
    suggestion : AxisSuggestion
    timings : dict
    """

    cell_name: str
    pitch: float
    risk: str
    limits: np.ndarray
    limits_source: str
    allowance: float
    maximum: Space
    restricted: Space
    operating: Space | None
    operating_count: int
    panels: tuple
    crushing: tuple
    devices: tuple
    keepouts: tuple
    suggestion: AxisSuggestion
    timings: dict = field(default_factory=dict)

    @property
    def passes(self) -> bool:
        """Every panel passes, no crushing point, every device far enough."""
        return not self.findings()

    def findings(self) -> list:
        """One check status per failing item: ``"intrusion"`` where the restricted space touches a panel
        or fixed object, ``"below margin"`` for any other panel that does not pass, a crushing gap or a
        device too close. Keep-out distances are reported, not counted (the check's rows count them)."""
        out = []
        for v in self.panels:
            if v.verdict != "pass":
                out.append("intrusion" if v.distance_3d_mm <= 0.0 else "below margin")
        out.extend("intrusion" if c.touches else "below margin" for c in self.crushing)
        out.extend("below margin" for d in self.devices if not d.passes)
        return out


# ====================================================================== small helpers
def _mm(x) -> float:
    return float(to_mm(x))


def _check_risk(risk, cell):
    if risk is None:
        risk = cell.settings.get("risk", "high")
    if risk not in st.RISKS:
        raise InputError(f"expected risk 'high' or 'low', got {risk!r}", item="risk")
    return risk


def _soft_limits(cell):
    soft = cell.settings.get("soft_limits")
    mech = np.asarray(cell.arm.limits, dtype=np.float64)
    if soft is None:
        return mech.copy(), "mechanical limits"
    soft = np.asarray(soft, dtype=np.float64)
    same = bool(np.array_equal(soft, mech))
    return soft.copy(), "mechanical limits" if same else "soft limits"


def panel_distance_ok(verdict) -> bool:
    """The panel's distance requirements are met by the space: it does not touch the panel, the
    reach-over margin is >= 0 and the openings' sr is met. (Rules that do not depend on the space, such
    as the bottom gap or a low structure, are left out: axis limits cannot change them.)"""
    if verdict.distance_3d_mm <= 0.0:
        return False
    if verdict.margin_mm is not None and verdict.margin_mm < 0.0:
        return False
    return verdict.opening_ok is not False


def _space_points(space: Space) -> np.ndarray:
    return space.marked_centers()


def keepout_checks(cell, space: Space) -> tuple:
    """``KeepOutCheck`` of every keep-out zone: the lower bound on its distance from the space (every
    marked voxel centre against every shape of the zone, less half the voxel diagonal)."""
    pts = _space_points(space)
    out = []
    for zone in cell.zones:
        if zone.kind != "keep-out":
            continue
        if len(pts) == 0:
            d = math.inf
        else:
            d = min(float((_near_voxels(space, s)[1] - space.half_diagonal).min()) for s in zone.shapes)
        d = max(d, 0.0)
        out.append(KeepOutCheck(zone.name, _mm(zone.clearance), _mm(d) if math.isfinite(d) else math.inf,
                                d >= zone.clearance))
    return tuple(out)


def _dist_to_polyline_2d(p, pts):
    best = np.full(len(p), np.inf)
    for a, b in zip(pts[:-1], pts[1:]):
        d = b - a
        dd = float(d @ d)
        t = np.clip((p - a) @ d / dd, 0.0, 1.0)
        c = a + t[:, None] * d
        best = np.minimum(best, np.sqrt(((p - c) ** 2).sum(axis=1)))
    return best


def device_checks(cell, space: Space) -> tuple:
    """``DeviceCheck`` of every protective device: the horizontal distance from its detection line to
    the space's occupied columns (each column's centre less half its square's diagonal), against
    ISO 13855's S for T = response time + stopping time."""
    occupied = space.occupancy.any(axis=2)
    xy = space.column_centers_xy()[occupied]
    out = []
    for dev in cell.devices:
        if len(xy) == 0:
            dist = math.inf
        else:
            dist = max(float(_dist_to_polyline_2d(xy, np.asarray(dev.points)).min()) - space.pitch / math.sqrt(2.0),
                       0.0)
        d_mm = None if dev.detection_capability is None else _mm(dev.detection_capability)
        dist_mm = _mm(dist) if math.isfinite(dist) else 1e12
        chk = protective_device_check(dist_mm, dev.total_time, d_mm, dev.kind)
        out.append(DeviceCheck(dev.name, dev.kind, _mm(dist) if math.isfinite(dist) else math.inf, chk, chk.passes))
    return tuple(out)


def _row_configurations(result, limits) -> np.ndarray:
    """``(n, 6)`` joint values of the within-limits rows (clear, below margin, intrusion) of a check that
    are also within ``limits`` (the soft limits), in row order, each geometry once: a turn variant (the
    same posed bodies as its twin) only when its twin row is not used itself (outside the limits)."""
    rows = result.rows
    if not rows:
        return np.zeros((0, N_JOINTS))
    q = np.array([r.q for r in rows], dtype=np.float64).reshape(-1, N_JOINTS)
    usable = np.array([r.status not in ("outside limits", "unreachable") for r in rows], dtype=bool)
    usable &= np.isfinite(q).all(axis=1) & _within_rows(q, limits)
    twin = np.array([r.twin_of for r in rows], dtype=np.int64)
    own = twin < 0
    use = usable & own
    stand_in = np.flatnonzero(usable & ~own)
    stand_in = stand_in[~usable[twin[stand_in]]]  # usable variants of twins that are not
    use[stand_in[np.unique(twin[stand_in], return_index=True)[1]]] = True  # the first of each twin
    return q[use]


# ====================================================================== the check
def run_space_check(cell, *, result=None, pitch: float = DEFAULT_PITCH, risk: str | None = None,
                    configurations=None, grow: float = 0.0, suggest: bool = True,
                    search_pitch: float | None = None) -> SpaceCheck:
    """The space check of ``cell`` (see the module text).

    Parameters
    ----------
    cell : envelope.cell.Cell
    result : CheckResult, optional
        The check of the same cell: its within-limits rows make the operating space and its clear rows
        decide the suggested axis limits (none without it).
    pitch : float
        Voxel edge of the spaces, metres.
    risk : {"high", "low"}, optional
        ISO 13857 reach-over table; the cell's ``settings["risk"]`` (default high) when None.
    configurations : (n, 6) float, optional
        More configurations (radians) for the operating space, e.g. sampled motions, grown by ``grow``.
    grow : float
        Metres added around every configuration of the operating space.
    suggest : bool
        Search for suggested axis limits (needs ``result``).
    search_pitch : float, optional
        Voxel edge of the suggestion's search (default ``max(SEARCH_PITCH, pitch)``).

    Returns
    -------
    SpaceCheck
    """
    if result is not None and result.cell is not cell:
        raise InputError("the check result is of another cell object", item="result")
    risk = _check_risk(risk, cell)
    timings = {}
    t0 = time.perf_counter()
    maximum = maximum_space(cell, pitch=pitch)
    t1 = time.perf_counter()
    timings["maximum_s"] = t1 - t0
    limits, source = _soft_limits(cell)
    restricted = restricted_space(cell, limits, cell.stopping_allowance, pitch=pitch)
    t2 = time.perf_counter()
    timings["restricted_s"] = t2 - t1

    parts = []
    if result is not None:
        parts.append(_row_configurations(result, limits))
    extra = None
    if configurations is not None:
        extra = np.asarray(configurations, dtype=np.float64)
        if extra.ndim == 1:
            extra = extra[None, :]
        if extra.ndim != 2 or extra.shape[1] != N_JOINTS:
            raise InputError(f"expected configurations of shape (n, 6), got {np.shape(configurations)}",
                             item="configurations")
        parts.append(extra)
    Q = np.vstack(parts) if parts else np.zeros((0, N_JOINTS))
    operating = operating_space(cell, Q, grow=grow, pitch=pitch) if len(Q) else None
    t3 = time.perf_counter()
    timings["operating_s"] = t3 - t2

    panels = evaluate_panels(cell, restricted, risk=risk)
    crushing = crushing_points(cell, restricted)
    devices = device_checks(cell, restricted)
    keepouts = keepout_checks(cell, restricted)
    t4 = time.perf_counter()
    timings["judging_s"] = t4 - t3

    if not suggest:
        suggestion = _no_suggestion("not searched (suggest=False)", ())
    elif result is None:
        suggestion = _no_suggestion("no check result: the suggestion needs the check's clear branches", ())
    else:
        suggestion = suggest_axis_limits(cell, result, limits=limits, pitch=pitch, risk=risk,
                                         search_pitch=search_pitch)
    timings["suggestion_s"] = time.perf_counter() - t4
    limits = np.array(limits)
    limits.flags.writeable = False
    return SpaceCheck(
        cell_name=cell.name, pitch=float(pitch), risk=risk, limits=limits, limits_source=source,
        allowance=float(cell.stopping_allowance), maximum=maximum, restricted=restricted, operating=operating,
        operating_count=len(Q), panels=panels, crushing=crushing, devices=devices, keepouts=keepouts,
        suggestion=suggestion, timings=timings,
    )


# ====================================================================== suggested axis limits
def _no_suggestion(reason, blocking, method="") -> AxisSuggestion:
    return AxisSuggestion(False, None, (), (), (), (), False, tuple(blocking), reason, method)


def _search_profile(cell, limits, pitch):
    """Voxel centres (axis frame, (k, 3)) of a conservative cover of the restricted space over joint-1
    range [0, step] (axis frame: z along joint 1, origin on it), and the radius bound ``rho_max``."""
    from .space import _axis_frame, _mark_turned, _swept_model

    inst = _swept_model(cell, limits, pitch).inst  # _swept_instances(cell, limits, 0.5 * pitch, 0.25 * pitch)
    axis_from_world, world_from_axis = _axis_frame(cell)
    axis_from_base = axis_from_world @ np.asarray(cell.world_from_base, dtype=np.float64)
    ca = inst.centres @ axis_from_base[:3, :3].T + axis_from_base[:3, 3]
    rho = np.hypot(ca[:, 0], ca[:, 1])
    step = math.radians(SEARCH_STEP_DEG)
    # samples of joint 1 over [0, step]: a point at distance rho from the axis is within rho * d / 2 of
    # the nearest sample (half the arc between samples); every sphere is grown by that
    n = max(1, int(math.ceil(step * float(rho.max()) / (0.5 * pitch))))
    d = step / n
    angles = np.arange(n + 1) * d
    allowance = float(cell.stopping_allowance)
    origin, occ = _mark_turned(ca, inst.radii + 0.5 * d * rho, angles, pitch, allowance)
    centres = origin + (np.argwhere(occ) + 0.5) * pitch
    return centres, world_from_axis


def _sector_space(centres, world_from_axis, angle, pitch, allowance) -> Space:
    """The cover of joint-1 range [angle, angle + step]: the profile turned by ``angle`` about the axis,
    each turned cube (within half a diagonal of its centre) covered by the 3 x 3 x 3 world voxels
    around the voxel holding its centre. A search-only Space (no mesh)."""
    from scipy.ndimage import binary_dilation

    c, s = math.cos(angle), math.sin(angle)
    rot = np.array([[c, -s, 0.0], [s, c, 0.0], [0.0, 0.0, 1.0]])
    W = world_from_axis[:3, :3] @ rot
    P = centres @ W.T + world_from_axis[:3, 3]
    base = np.floor(P / pitch).astype(np.int64)
    lo = base.min(axis=0) - 2
    hi = base.max(axis=0) + 3
    occ = np.zeros(tuple(hi - lo), dtype=bool)
    k = base - lo
    occ[k[:, 0], k[:, 1], k[:, 2]] = True
    occ = binary_dilation(occ, structure=np.ones((3, 3, 3), dtype=bool))
    origin = lo * pitch
    idx = np.argwhere(occ)
    bounds = np.stack([origin + idx.min(axis=0) * pitch, origin + (idx.max(axis=0) + 1) * pitch])
    return Space("restricted", origin.astype(np.float64), float(pitch), occ, None, bounds, None, allowance,
                 float("nan"), "search cover of one joint-1 sector (not a result)")


def _sector_faults(cell, space, risk) -> tuple:
    """Names of the panels (distance requirements) and keep-out zones a sector's cover violates."""
    bad = []
    if any(z.kind in PANEL_KINDS for z in cell.zones):
        bad += [v.panel for v in evaluate_panels(cell, space, risk=risk) if not panel_distance_ok(v)]
    bad += [k.zone for k in keepout_checks(cell, space) if not k.passes]
    return tuple(bad)


def _deg(x) -> float:
    return float(to_degrees(x))


def _clear_rows(result):
    """``{target: [(branch, q (6,)), ...]}`` of the clear rows, in target order (every target listed)."""
    out = _ClearRows((t.name, []) for t in result.cell.targets)
    for r in result.rows:
        out.setdefault(r.target, [])
    rows = [r for r in result.rows if r.status == _CLEAR]
    finite = np.isfinite(np.array([r.q for r in rows], dtype=np.float64).reshape(-1, N_JOINTS)).all(axis=1)
    for r, ok in zip(rows, finite.tolist()):
        if ok:
            out[r.target].append((r.branch if not r.turn else f"{r.branch} (turn {r.turn})", np.asarray(r.q)))
    return out


def _within(q, lim) -> bool:
    return bool(np.all((q >= lim[:, 0] - 1e-12) & (q <= lim[:, 1] + 1e-12)))


def _within_rows(q, lim) -> np.ndarray:
    """``(n,)`` bool: ``_within`` of every row of ``q`` (n, k) against ``lim`` (k, 2)."""
    return np.all((q >= lim[:, 0] - 1e-12) & (q <= lim[:, 1] + 1e-12), axis=1)


class _ClearRows(dict):
    """``{target: [(branch, q), ...]}`` (``_clear_rows``), with its ``_ClearIndex`` built once."""

    @property
    def index(self) -> "_ClearIndex":
        if not hasattr(self, "_index"):
            self._index = _ClearIndex(self)
        return self._index


class _ClearIndex:
    """The clear rows of ``_clear_rows`` as arrays: ``q`` (m, 6) in target order then row order,
    ``target`` (m,) the index of each row's target in ``names``."""

    def __init__(self, clear):
        self.names = tuple(clear)
        rows = [(t, q) for t, (_, entries) in enumerate(clear.items()) for _, q in entries]
        self.q = np.array([q for _, q in rows], dtype=np.float64).reshape(-1, N_JOINTS)
        self.target = np.array([t for t, _ in rows], dtype=np.int64)
        self.branches = [b for entries in clear.values() for b, _ in entries]

    def first_within(self, lim):
        """``(picks, missing)`` as ``_covering``: per target (in order), the branch of its first clear row
        within ``lim``, or the target in ``missing``."""
        inside = np.flatnonzero(_within_rows(self.q, lim))
        first = {}
        for k in inside[np.unique(self.target[inside], return_index=True)[1]]:
            first[int(self.target[k])] = self.branches[k]
        picks, missing = [], []
        for t, name in enumerate(self.names):
            (missing.append(name) if t not in first else picks.append((name, first[t])))
        return picks, missing


def _search(cell, limits, grid, clear, risk, search_pitch):
    """Sector faults over ``grid`` (joint-1 bounds) with ``limits`` for joints 2..6, and the best run."""
    centres, world_from_axis = _search_profile(cell, limits, search_pitch)
    faults = []
    for a in grid[:-1]:
        sp = _sector_space(centres, world_from_axis, float(a), search_pitch, float(cell.stopping_allowance))
        faults.append(_sector_faults(cell, sp, risk))
    ok = [not f for f in faults]
    runs = []  # maximal runs of sectors without fault: (first sector, last sector)
    k = 0
    while k < len(ok):
        if ok[k]:
            j = k
            while j + 1 < len(ok) and ok[j + 1]:
                j += 1
            runs.append((k, j))
            k = j + 1
        else:
            k += 1

    def chosen(lo, hi):
        lim = limits.copy()
        lim[0] = [grid[lo], grid[hi + 1]]
        picks, missing = _covering(clear, lim)
        return lim, picks, missing

    candidates = []
    for lo, hi in runs:
        lim, picks, missing = chosen(lo, hi)
        candidates.append((len(missing), -(hi - lo), lo, hi, lim, picks, missing))
    candidates.sort(key=lambda c: c[:3])
    return faults, candidates


def _blocking(clear, faults, grid, limits):
    """Targets that prevent a suggestion, and a text saying why."""
    no_clear = [t for t, rows in clear.items() if not rows]
    if no_clear:
        return no_clear, ("target(s) " + ", ".join(repr(t) for t in no_clear)
                          + " have no clear branch in the check: no axis limits can keep them")
    blocked, texts = [], []
    for target, rows in clear.items():
        usable = [(b, q) for b, q in rows if _within(q[1:], limits[1:])]
        why = []
        good = False
        for b, q in usable:
            k = int(np.searchsorted(grid, q[0], side="right")) - 1
            ks = {min(max(k, 0), len(faults) - 1)}
            if k >= 1 and abs(q[0] - grid[k]) < 1e-12:
                ks.add(k - 1)  # on a bound: either neighbouring sector will do
            if any(not faults[j] for j in ks):
                good = True
                break
            j = min(ks)
            line = f"q1 = {_deg(q[0]):.1f} deg: {', '.join(faults[j])}"
            if line not in why:
                why.append(line)
        if not usable:
            why.append("no clear branch within the other joints' limits")
        if not good:
            blocked.append(target)
            texts.append(f"target {target!r} ({'; '.join(why)})")
    if blocked:
        return blocked, ("every clear branch of " + "; ".join(texts)
                         + " needs joint 1 in a sector where the restricted space fails the panel or keep-out "
                         "zone named")
    return [], ""


def suggest_axis_limits(cell, result, *, limits=None, pitch: float = DEFAULT_PITCH, risk: str | None = None,
                        search_pitch: float | None = None) -> AxisSuggestion:
    """The widest joint-1 range (and, where that is not enough, narrower joint-2/3 ranges) whose
    restricted space meets every fence panel's distances and every keep-out zone's clearance while
    every target keeps a clear branch of ``result`` within it.

    Search (docs/spaces.md): joint-1 bounds on a ``SEARCH_STEP_DEG`` grid over the mechanical range;
    each sector's restricted space covered at ``search_pitch``; a range is acceptable when all its
    sectors are (the checks are minima over the space, so a union fails exactly when a part fails);
    the widest acceptable range holding a clear branch of every target is verified with
    ``restricted_space`` at ``pitch`` and shrunk by a sector at a time until it verifies.

    Parameters
    ----------
    cell : Cell
    result : CheckResult
        The check of ``cell``: its clear rows are the branches a target may use.
    limits : (6, 2) float, optional
        Joint ranges (radians) kept for joints 2..6 (the soft limits by default).
    """
    risk = _check_risk(risk, cell)
    if limits is None:
        limits, _ = _soft_limits(cell)
    limits = np.array(limits, dtype=np.float64)
    sp = max(SEARCH_PITCH, float(pitch)) if search_pitch is None else float(search_pitch)
    mech = np.asarray(cell.arm.limits, dtype=np.float64)
    step = math.radians(SEARCH_STEP_DEG)
    n = int(math.ceil((mech[0, 1] - mech[0, 0]) / step - 1e-9))
    grid = np.minimum(mech[0, 0] + np.arange(n + 1) * step, mech[0, 1])
    grid[-1] = mech[0, 1]
    clear = _clear_rows(result)
    method = (f"joint-1 bounds on a {SEARCH_STEP_DEG:g} deg grid over [{_deg(mech[0, 0]):g}, {_deg(mech[0, 1]):g}] "
              f"deg; each sector's restricted space covered with {sp * 1e3:g} mm voxels; the widest run of "
              f"sectors meeting every panel's distances and keep-out clearance that holds a clear branch of "
              f"every target, verified at {pitch * 1e3:g} mm")
    no_clear = [t for t, rows in clear.items() if not rows]
    if no_clear:
        blocking, text = _blocking(clear, [()], grid, limits)
        return _no_suggestion(text, blocking, method)

    tries = [((1,), limits)]
    qs = np.array([q for rows in clear.values() for _, q in rows])
    for margin_deg in (15.0, 5.0):  # joints 2 and 3 narrowed to the clear branches' span plus a margin
        lim = limits.copy()
        for j in (1, 2):
            m = math.radians(margin_deg)
            lo = math.floor((_deg(qs[:, j].min() - m)) / SEARCH_STEP_DEG) * SEARCH_STEP_DEG
            hi = math.ceil((_deg(qs[:, j].max() + m)) / SEARCH_STEP_DEG) * SEARCH_STEP_DEG
            lim[j] = [max(limits[j, 0], float(to_radians(lo))), min(limits[j, 1], float(to_radians(hi)))]
        if not np.allclose(lim, tries[-1][1]):
            tries.append(((1, 2, 3), lim))

    searched = []
    for joints, lim in tries:
        faults, candidates = _search(cell, lim, grid, clear, risk, sp)
        searched.append((faults, lim, candidates))
        for missing_count, _, lo, hi, cand, picks, missing in candidates:
            if missing_count:
                break
            coarse = _verify_and_shrink(cell, clear, grid, lo, hi, lim, sp, risk, budget=12)
            if coarse is None:
                continue
            verified = _verify_and_shrink(cell, clear, grid, coarse[0], coarse[1], lim, pitch, risk, budget=3)
            if verified is not None:
                _, _, cand, picks, panels, keepouts = verified
                changed = tuple(j + 1 for j in range(N_JOINTS) if not np.allclose(cand[j], limits[j]))
                cand.flags.writeable = False
                text = _suggestion_text(cand, changed, panels, keepouts)
                return AxisSuggestion(True, cand, changed, tuple(picks), panels, keepouts, True, (), text, method)
    # why not: the targets blocked under the most permissive joint-2/3 ranges tried (fewest blocked)
    best = None
    for faults, lim, candidates in searched:
        blocking, text = _blocking(clear, faults, grid, lim)
        if not blocking:
            if candidates and candidates[0][0]:
                blocking = list(candidates[0][6])
                text = ("no run of acceptable joint-1 sectors holds a clear branch of every target: the widest "
                        f"that holds the most leaves out {', '.join(repr(t) for t in blocking)}")
            else:
                blocking = list(clear)
                text = ("the acceptable joint-1 ranges found did not verify at the check's pitch; every target "
                        "is affected")
        if best is None or len(blocking) <= len(best[0]):
            best = (blocking, text)
    blocking, text = best
    return _no_suggestion(text, blocking, method)


def _covering(clear, cand):
    """``(picks, missing)``: ``(target, branch)`` of every target's first clear row within ``cand``, and
    the targets that have none."""
    index = clear.index if isinstance(clear, _ClearRows) else _ClearIndex(clear)
    return index.first_within(cand)


def _nearest_azimuth(cell, space, panels, keepouts):
    """Joint-1 azimuth (rad, axis frame) of the space's voxel nearest a failing panel or keep-out zone."""
    from .space import _axis_frame

    names = {v.panel for v in panels if not panel_distance_ok(v)} | {k.zone for k in keepouts if not k.passes}
    pts = _space_points(space)
    best, at = math.inf, None
    for zone in cell.zones:
        for k, shape in enumerate(zone.shapes):
            panel = zone.panels[k] if k < len(zone.panels) else zone.name
            if panel in names or zone.name in names:
                index, d = _near_voxels(space, shape)
                i = int(np.argmin(d))
                if d[i] < best:
                    best, at = float(d[i]), pts[index[i]]
    if at is None:
        return None
    axis_from_world, _ = _axis_frame(cell)
    a = axis_from_world[:3, :3] @ at + axis_from_world[:3, 3]
    return math.atan2(a[1], a[0])


def _verify_and_shrink(cell, clear, grid, lo, hi, lim, pitch, risk, budget: int):
    """Verify sectors lo..hi with ``restricted_space`` at ``pitch``; while it fails, drop the end sector
    nearer (in azimuth) the space's point closest to what fails, keeping a clear branch of every
    target. ``(lo, hi, limits, picks, panels, keepouts)`` or None after ``budget`` tries."""
    while budget > 0 and lo <= hi:
        cand = lim.copy()
        cand[0] = [grid[lo], grid[hi + 1]]
        picks, missing = _covering(clear, cand)
        if missing:
            return None
        budget -= 1
        space = restricted_space(cell, cand, cell.stopping_allowance, pitch=pitch)
        panels = evaluate_panels(cell, space, risk=risk)
        keepouts = keepout_checks(cell, space)
        if all(panel_distance_ok(v) for v in panels) and all(k.passes for k in keepouts):
            return lo, hi, cand, picks, panels, keepouts
        phi = _nearest_azimuth(cell, space, panels, keepouts)
        if phi is None:
            return None

        def gap(bound):
            return abs((phi - bound + math.pi) % (2 * math.pi) - math.pi)

        if gap(grid[lo]) < gap(grid[hi + 1]):
            lo += 1
        else:
            hi -= 1
    return None


def _suggestion_text(lim, changed, panels, keepouts) -> str:
    ranges = ", ".join(f"joint {j}: {_deg(lim[j - 1, 0]):.1f} .. {_deg(lim[j - 1, 1]):.1f} deg" for j in changed)
    parts = [f"set {ranges}" if changed else "the current limits already meet every distance"]
    for v in panels:
        m = "" if v.margin_mm is None else f", margin {v.margin_mm:.0f} mm over c = {v.c_mm:g} mm"
        parts.append(f"{v.panel}: {v.distance_mm:.0f} mm{m} ({v.verdict})")
    for k in keepouts:
        parts.append(f"{k.zone}: {k.distance_mm:.0f} mm (clearance {k.required_mm:g} mm)")
    return "; ".join(parts)


# ====================================================================== summary and files
def _r(x, decimals: int = 3):
    if x is None:
        return None
    x = float(x)
    if not math.isfinite(x):
        return None
    return round(x, decimals) + 0.0


def _space_record(space: Space | None):
    if space is None:
        return None
    return {
        "pitch_mm": _r(to_mm(space.pitch)),
        "voxels": int(space.occupancy.sum()),
        "bounds_mm": [[_r(v) for v in row] for row in to_mm(space.bounds)],
        "allowance_mm": _r(to_mm(space.allowance)),
        "over_approximation_mm": _r(to_mm(space.over_approximation)),
        "limits_deg": None if space.limits is None else [[_r(v) for v in row] for row in to_degrees(space.limits)],
        "method": space.method,
    }


def _panel_record(v) -> dict:
    ro = v.reach_over
    return {
        "zone": v.zone,
        "panel": v.panel,
        "verdict": v.verdict,
        "reasons": list(v.reasons),
        "b_mm": _r(v.b_mm),
        "bottom_gap_mm": _r(v.bottom_gap_mm),
        "thickness_mm": _r(v.thickness_mm),
        "floor_z_mm": _r(v.floor_z_mm),
        "a_mm": _r(v.a_mm),
        "a_max_mm": _r(v.a_max_mm),
        "distance_mm": _r(v.distance_mm),
        "distance_3d_mm": _r(v.distance_3d_mm),
        "c_mm": _r(v.c_mm),
        "margin_mm": _r(v.margin_mm),
        "reach_mm": _r(v.reach_mm),
        "row_a_mm": None if ro is None else ro.row_a_mm,
        "column_b_mm": None if ro is None else ro.column_b_mm,
        "sr_mm": None if v.opening is None else _r(v.opening.sr_mm),
        "opening_ok": v.opening_ok,
        "risk": v.risk,
        "confidence": v.confidence,
        "sources": list(v.standard_sources),
    }


def _crushing_record(c) -> dict:
    return {
        "zone": c.zone,
        "panel": c.panel,
        "kind": c.kind,
        "gap_mm": _r(c.gap_mm),
        "minimum_mm": _r(c.check.min_gap_mm),
        "touches": bool(c.touches),
        "point_mm": [_r(v) for v in c.point_mm],
        "body_part": c.body_part,
    }


def _device_record(d) -> dict:
    req = d.check.required
    return {
        "name": d.name,
        "kind": d.kind,
        "distance_mm": _r(d.distance_mm),
        "S_mm": _r(req.S_mm),
        "T_s": _r(req.T_s, 6),
        "d_mm": _r(req.d_mm),
        "formula": req.formula,
        "margin_mm": _r(d.check.margin_mm),
        "passes": bool(d.passes),
        "confidence": req.confidence,
        "note": d.check.note,
    }


def _keepout_record(k) -> dict:
    return {"zone": k.zone, "required_mm": _r(k.required_mm), "distance_mm": _r(k.distance_mm), "passes": k.passes}


def suggestion_record(s: AxisSuggestion) -> dict:
    return {
        "found": s.found,
        "limits_deg": None if s.limits is None else [[_r(v) for v in row] for row in to_degrees(s.limits)],
        "joints": list(s.joints),
        "branches": [{"target": t, "branch": b} for t, b in s.branches],
        "panels": [{"panel": v.panel, "verdict": v.verdict, "distance_mm": _r(v.distance_mm),
                    "c_mm": _r(v.c_mm), "margin_mm": _r(v.margin_mm)} for v in s.panels],
        "keepouts": [_keepout_record(k) for k in s.keepouts],
        "verified": s.verified,
        "blocking_targets": list(s.blocking_targets),
        "reason": s.reason,
        "method": s.method,
    }


def space_summary(space_check: SpaceCheck) -> dict:
    """The space check as plain JSON values (mm, degrees, rounded to 3 decimals; keys sorted; no time)."""
    sc = space_check
    out = {
        "cell": sc.cell_name,
        "pitch_mm": _r(to_mm(sc.pitch)),
        "risk": sc.risk,
        "passes": sc.passes,
        "findings": len(sc.findings()),
        "limits_deg": [[_r(v) for v in row] for row in to_degrees(sc.limits)],
        "limits_source": sc.limits_source,
        "allowance_mm": _r(to_mm(sc.allowance)),
        "spaces": {
            "maximum": _space_record(sc.maximum),
            "restricted": _space_record(sc.restricted),
            "operating": _space_record(sc.operating),
        },
        "operating_count": sc.operating_count,
        "panels": [_panel_record(v) for v in sc.panels],
        "crushing": [_crushing_record(c) for c in sc.crushing],
        "devices": [_device_record(d) for d in sc.devices],
        "keepouts": [_keepout_record(k) for k in sc.keepouts],
        "suggestion": suggestion_record(sc.suggestion),
        "caution": st.CAUTIONS[-1],
    }
    return json.loads(json.dumps(out, sort_keys=True, allow_nan=False))


FENCES_CSV_COLUMNS = ("zone", "panel", "verdict", "b_mm", "bottom_gap_mm", "thickness_mm", "floor_z_mm", "a_mm",
                      "a_max_mm", "distance_mm", "distance_3d_mm", "c_mm", "margin_mm", "row_a_mm", "column_b_mm",
                      "sr_mm", "opening_ok", "risk", "confidence", "sources", "reasons")
"""Columns of fences.csv (docs/outputs.md)."""
CRUSHING_CSV_COLUMNS = ("zone", "panel", "kind", "gap_mm", "minimum_mm", "touches", "x_mm", "y_mm", "z_mm",
                        "body_part")
"""Columns of crushing.csv (docs/outputs.md)."""


def _cell(v) -> str:
    if v is None:
        return ""
    if isinstance(v, bool):
        return "yes" if v else "no"
    if isinstance(v, float):
        return f"{v:.3f}"
    if isinstance(v, (list, tuple)):
        return ";".join(str(x) for x in v)
    return str(v)


def fences_csv_text(space_check: SpaceCheck) -> str:
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(FENCES_CSV_COLUMNS)
    for v in space_check.panels:
        rec = _panel_record(v)
        w.writerow([_cell(rec[c if c != "sources" else "sources"]) for c in FENCES_CSV_COLUMNS])
    return buf.getvalue()


def crushing_csv_text(space_check: SpaceCheck) -> str:
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(CRUSHING_CSV_COLUMNS)
    for c in space_check.crushing:
        rec = _crushing_record(c)
        x, y, z = rec["point_mm"]
        w.writerow([_cell(rec[k]) for k in CRUSHING_CSV_COLUMNS[:6]] + [_cell(x), _cell(y), _cell(z),
                                                                          _cell(rec["body_part"])])
    return buf.getvalue()


def write_space_files(space_check: SpaceCheck, out_dir) -> dict:
    """``<kind>-space.stl`` and ``<kind>-space.glb`` (mm) for each space, atomic; ``{name: Path}``."""
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    files = {}
    for kind in ("maximum", "restricted", "operating"):
        space = getattr(space_check, kind)
        if space is None:
            continue
        written = write_space(space, out / f"{kind}-space")
        files[written.stl.name] = written.stl
        files[written.glb.name] = written.glb
    return files


def write_space_outputs(space_check: SpaceCheck, out_dir) -> dict:
    """Every output of ``envelope space``: the spaces, ``fences.csv``, ``crushing.csv``, ``space.json``."""
    from .report.files import write_text_atomic

    out = Path(out_dir)
    files = write_space_files(space_check, out)
    files["fences.csv"] = write_text_atomic(out / "fences.csv", fences_csv_text(space_check))
    files["crushing.csv"] = write_text_atomic(out / "crushing.csv", crushing_csv_text(space_check))
    text = json.dumps(space_summary(space_check), sort_keys=True, indent=1, allow_nan=False) + "\n"
    files["space.json"] = write_text_atomic(out / "space.json", text)
    return files
