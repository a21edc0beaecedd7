"""The check: every target of a cell in every IK branch, with clearance, as one row per target x branch.

``run_check(cell)`` returns a ``CheckResult``; the report module writes it to files.

Row statuses (``BranchRow.status``), most severe first:

- ``intrusion``: the arm or tool inside a zone (overlap), or a self-contact;
- ``below margin``: some pair between 0 and its required clearance;
- ``outside limits``: the branch exists but a joint is outside its range; its clearance is still
  computed and shown in ``clearance_status``;
- ``unreachable``: the target has no branch at all (the reason is in ``note``);
- ``clear``: every pair at or above its required clearance.

Singularity is a flag on a row (``singular``), not a status.
"""

from __future__ import annotations

import math
import time
from collections.abc import Sequence
from dataclasses import dataclass, field
from functools import cached_property

import numpy as np

from .cell import Cell
from .clearance import STATUS_NAMES, pair_other_name
from .errors import EXIT_CLEAR, EXIT_FINDING, InputError

CLEAR = "clear"
BELOW_MARGIN = "below margin"
INTRUSION = "intrusion"
OUTSIDE_LIMITS = "outside limits"
UNREACHABLE = "unreachable"
ALLOWED_CONTACT = "allowed contact"

STATUS_SEVERITY = {INTRUSION: 0, BELOW_MARGIN: 1, OUTSIDE_LIMITS: 2, UNREACHABLE: 3, CLEAR: 4}
"""Sort key for 'worst rows first'."""


@dataclass(frozen=True, eq=False)
class PairRow:
    """The clearance of one pair (a body against a zone panel or another body) in one configuration.

    Lengths in metres; points in the cell (world) frame. ``distance`` is the certified lower bound
    (never more than the true distance); a negative value is a penetration depth when
    ``depth_known``. ``pruned`` pairs were not queried exactly: ``distance`` is a valid lower bound
    only and the witness points are NaN.
    """

    body: str
    other: str
    kind: str  # "zone" or "self"
    zone_kind: str  # the zone's kind, "" for self pairs
    panel: str
    required: float
    distance: float
    distance_upper: float
    depth_known: bool
    pruned: bool
    witness_body: np.ndarray
    witness_other: np.ndarray
    status: str


@dataclass(frozen=True, eq=False)
class BranchRow:
    """One target in one IK branch (or the single row of an unreachable target).

    Attributes
    ----------
    q : (6,) float
        Joint values in radians (NaN for an unreachable target).
    limit_excess : (6,) float
        Radians beyond the joint's range (0 where within).
    clearance, required, margin : float
        Metres: the worst pair's certified clearance, its required clearance and their difference
        (NaN for an unreachable target).
    twin_of : int
        Index (in ``CheckResult.rows``) of the geometrically identical row this turn variant shares
        its computation with; -1 for a row computed on its own.
    """

    target: str
    target_frame: str
    branch: str
    turn: int
    twin_of: int
    status: str
    clearance_status: str
    q: np.ndarray
    limit_excess: np.ndarray
    singular: tuple
    clearance: float
    required: float
    margin: float
    closest_body: str
    closest_other: str
    witness_body: np.ndarray
    witness_other: np.ndarray
    pairs: tuple = ()
    note: str = ""


@dataclass(frozen=True, eq=False)
class CheckResult:
    """Everything a check found: the cell, one row per target x branch, and motions (if any)."""

    cell: Cell
    rows: tuple
    motions: tuple = ()
    warnings: tuple = ()
    timings: dict = field(default_factory=dict)
    space: object = None
    """The space check (maximum / restricted space, fence panel verdicts, crushing points, suggested
    axis limits) when it was run, else None."""

    def worst_first(self) -> list:
        """Row indices sorted worst first: by status severity, then by margin (then row order)."""
        return list(self._worst_order)

    @cached_property
    def _worst_order(self) -> tuple:
        n = len(self.rows)
        if n == 0:
            return ()
        severity = np.fromiter((STATUS_SEVERITY[r.status] for r in self.rows), dtype=np.int64, count=n)
        margin = np.fromiter((r.margin for r in self.rows), dtype=np.float64, count=n)
        margin = np.where(np.isnan(margin), np.inf, margin)
        return tuple(np.lexsort((np.arange(n), margin, severity)).tolist())

    @property
    def exit_code(self) -> int:
        """0 when every target has a within-limits branch and all of those are clear, else 1."""
        return EXIT_CLEAR if self.verdict == CLEAR else EXIT_FINDING

    @property
    def verdict(self) -> str:
        """``clear``, or the most severe finding among within-limits branches and targets."""
        return min(self.findings(), key=STATUS_SEVERITY.__getitem__, default=CLEAR)

    def findings(self) -> list:
        """The statuses that count as findings, one per offending target (and motion).

        A within-limits branch that is not clear is a finding; so is a target with no within-limits
        branch at all (its rows are all ``outside limits`` or it is ``unreachable``): the program
        could not run it. Branches outside limits of a target that has a within-limits branch are
        shown but are not findings. A motion that is not clear is a finding, and so is each failing
        fence panel, crushing point or protective device of the space check (``space``).
        """
        return list(self._findings)

    @cached_property
    def _findings(self) -> tuple:
        out = []
        by_target: dict = {}
        for row in self.rows:
            by_target.setdefault(row.target, []).append(row)
        for rows in by_target.values():
            runnable = [r for r in rows if r.status not in (OUTSIDE_LIMITS, UNREACHABLE)]
            if not runnable:
                out.append(min((r.status for r in rows), key=STATUS_SEVERITY.__getitem__))
            out.extend(r.status for r in runnable if r.status != CLEAR)
        out.extend(m.status for m in self.motions if m.status != CLEAR)
        if self.space is not None:
            out.extend(self.space.findings())
        return tuple(out)


class PairRows(Sequence):
    """The per-pair table of one row, read lazily from the engine's arrays (a sequence of PairRow).

    ``pairs`` are the engine's pair definitions, ``result`` one configuration's ``ClearanceResult``;
    ``zone_kinds`` maps zone names to their kind.
    """

    def __init__(self, pairs, result, zone_kinds):
        self.defs = pairs
        self.result = result
        self.zone_kinds = zone_kinds

    def __len__(self) -> int:
        return len(self.defs)

    def __getitem__(self, i):
        if isinstance(i, slice):
            return [self[j] for j in range(*i.indices(len(self)))]
        p, r = self.defs[i], self.result
        return PairRow(
            body=p.body,
            other=p.other,
            kind=p.kind,
            zone_kind=self.zone_kinds.get(p.zone, "") if p.kind == "zone" else "",
            panel=p.panel,
            required=p.required,
            distance=float(r.distance[i]),
            distance_upper=float(r.distance_upper[i]),
            depth_known=bool(r.depth_known[i]),
            pruned=bool(r.pruned[i]),
            witness_body=r.witness_body[i],
            witness_other=r.witness_other[i],
            status=STATUS_NAMES[int(r.status[i])],
        )


def _joint_note(q, limits) -> str:
    """'joint 4 above its range by 12.300 deg; ...' for the joints of ``q`` outside ``limits``."""
    parts = []
    for j, (v, (lo, hi)) in enumerate(zip(np.asarray(q).tolist(), np.asarray(limits).tolist())):
        if v > hi:
            parts.append(f"joint {j + 1} above its range by {math.degrees(v - hi):.3f} deg")
        elif v < lo:
            parts.append(f"joint {j + 1} below its range by {math.degrees(lo - v):.3f} deg")
    return "; ".join(parts)


_SINGULAR_NAMES = ("wrist", "shoulder", "elbow")


def _singular_flags(sol, k) -> tuple:
    flags = (sol.singular_wrist[k], sol.singular_shoulder[k], sol.singular_elbow[k])
    return tuple(n for n, f in zip(_SINGULAR_NAMES, flags) if f)


def _all_singular_flags(sol) -> list:
    """``[_singular_flags(sol, k) for k in range(len(sol))]``, the flags read once per pose."""
    cols = zip(sol.singular_wrist.tolist(), sol.singular_shoulder.tolist(), sol.singular_elbow.tolist())
    return [tuple(n for n, f in zip(_SINGULAR_NAMES, fl) if f) for fl in cols]


def _evaluate(cell, q, *, jobs, progress, prune, chunk=1024):
    """Clearance of configurations ``q (n, 6)``, in chunks, in this process or ``jobs`` workers.

    Every configuration is evaluated on its own, so the split into chunks and processes does not
    change any value.
    """
    from .clearance import ClearanceResult, engine_for, evaluate_in_worker, init_worker

    if jobs > 1:
        chunk = max(1, min(chunk, -(-len(q) // (4 * jobs))))
    chunks = [q[i:i + chunk] for i in range(0, len(q), chunk)]
    parts = []
    report = progress or (lambda done, total: None)
    if jobs <= 1 or len(chunks) <= 1:
        engine = engine_for(cell, prune)
        for c in chunks:
            parts.append(engine.evaluate(c))
            report(sum(len(p.overall) for p in parts), len(q))
    else:
        from concurrent.futures import ProcessPoolExecutor

        with ProcessPoolExecutor(jobs, initializer=init_worker, initargs=(cell, prune)) as pool:
            for part in pool.map(evaluate_in_worker, chunks):
                parts.append(part)
                report(sum(len(p.overall) for p in parts), len(q))
    return ClearanceResult.concatenate(parts), engine_for(cell, prune).pairs


def branch_order(sol) -> list:
    """Row order of one pose's solutions: branches by branch code, each followed by its turn variants."""
    reps = sorted((k for k in range(len(sol)) if sol.twin[k] == k), key=lambda k: (int(sol.code[k]), k))
    return [j for k in reps for j in range(len(sol)) if sol.twin[j] == k]


def solve_targets(cell: Cell) -> list:
    """Every IK solution (``IKSolutions``) of every target of ``cell``, in target order."""
    if not cell.targets:
        return []
    world_from_tcp = np.stack([t.world_from_tcp for t in cell.targets])
    base_from_flange = cell.base_from_flange(world_from_tcp)
    return cell.arm.ik_each(base_from_flange)


def run_motions(cell: Cell, program=None, *, prune: bool = True) -> tuple:
    """Certified sweeps of the cell's programs (all, or the one named), every valid start branch.

    Returns the ``MotionRow`` tuple of ``envelope.sweep.run_sweep``; an empty tuple when the cell has
    no programs and none is named.
    """
    from .clearance import engine_for
    from .sweep import run_sweep

    if program is None and not cell.programs:
        return ()
    return tuple(run_sweep(cell, program, engine=engine_for(cell, prune)))


def run_check(cell: Cell, *, jobs: int = 1, progress=None, prune: bool = True, programs: bool = True) -> CheckResult:
    """Check every target of ``cell`` in every IK branch (turn variants included).

    Parameters
    ----------
    cell : Cell
    jobs : int
        Worker processes for the clearance computation; results are identical for any value.
    progress : callable(done, total), optional
        Called as configurations are evaluated.
    prune : bool
        Skip exact distance queries that cannot change a status or the worst pair (never changes
        a result; ``False`` computes every pair exactly).
    programs : bool
        Also sweep the cell's programs (``run_motions``) into ``CheckResult.motions``.

    Returns
    -------
    CheckResult
        One row per target x branch (one row for an unreachable target), in target order.
    """
    if not cell.targets:
        raise InputError("the cell has no targets to check", file=cell.source or None, item="targets")
    timings = {}
    t0 = time.perf_counter()
    solutions = solve_targets(cell)
    t1 = time.perf_counter()
    timings["ik_s"] = t1 - t0

    # Only branches are computed; a turn variant shares its twin's geometry and clearance.
    configs, index_of = [], {}
    for t, sol in enumerate(solutions):
        for k in range(len(sol)):
            if sol.twin[k] == k:
                index_of[(t, k)] = len(configs)
                configs.append(sol.q[k])
    q = np.array(configs, dtype=np.float64).reshape(-1, 6)
    if len(q):
        clearance, pair_defs = _evaluate(cell, q, jobs=jobs, progress=progress, prune=prune)
    else:
        clearance, pair_defs = None, ()
    t2 = time.perf_counter()
    timings["clearance_s"] = t2 - t1

    zone_kinds = {z.name: z.kind for z in cell.zones}
    rows = []
    nan3 = np.full(3, np.nan)
    for t, (target, sol) in enumerate(zip(cell.targets, solutions)):
        if len(sol) == 0:
            rows.append(
                BranchRow(
                    target=target.name, target_frame=target.frame, branch="", turn=0, twin_of=-1,
                    status=UNREACHABLE, clearance_status="", q=np.full(6, np.nan), limit_excess=np.zeros(6),
                    singular=(), clearance=np.nan, required=np.nan, margin=np.nan, closest_body="",
                    closest_other="", witness_body=nan3, witness_other=nan3, pairs=(), note=sol.reason,
                )
            )
            continue
        first_row = {}
        turns = {}
        within_all = sol.within_limits.all(axis=1).tolist()
        singular_all = _all_singular_flags(sol)
        for k in branch_order(sol):
            rep = int(sol.twin[k])
            res = clearance._index(index_of[(t, rep)])
            worst = int(res.worst)
            notes = []
            if worst >= 0:
                p = pair_defs[worst]
                dist = float(res.distance[worst])
                required = float(p.required)
                margin = dist - required
                clearance_status = STATUS_NAMES[int(res.overall)]
                closest_body = p.body
                closest_other = pair_other_name(p)
                wb, wo = res.witness_body[worst], res.witness_other[worst]
                if clearance_status == INTRUSION and not bool(res.depth_known[worst]):
                    notes.append("overlap, depth unknown")
            else:
                dist = required = margin = np.nan
                clearance_status = CLEAR
                closest_body = closest_other = ""
                wb = wo = nan3
                notes.append("no pair to check")
            within = within_all[k]
            status = clearance_status if within else OUTSIDE_LIMITS
            if not within:
                notes.append(_joint_note(sol.q[k], cell.arm.limits))
            singular = singular_all[k]
            if "wrist" in singular:
                notes.append("wrist singular: only q4 + q6 is fixed, one representative shown")
            if rep != k:
                turns[rep] = turns.get(rep, 0) + 1
                notes.append(f"turn variant of the {sol.labels[rep]} branch")
            rows.append(
                BranchRow(
                    target=target.name, target_frame=target.frame, branch=sol.labels[k],
                    turn=turns.get(rep, 0) if rep != k else 0,
                    twin_of=first_row[rep] if rep != k else -1,
                    status=status, clearance_status=clearance_status, q=sol.q[k].copy(),
                    limit_excess=sol.excess[k].copy(), singular=singular, clearance=dist,
                    required=required, margin=margin, closest_body=closest_body,
                    closest_other=closest_other, witness_body=wb, witness_other=wo,
                    pairs=PairRows(pair_defs, res, zone_kinds) if worst >= 0 or len(pair_defs) else (),
                    note="; ".join(notes),
                )
            )
            if rep == k:
                first_row[k] = len(rows) - 1
    t3 = time.perf_counter()
    timings["rows_s"] = t3 - t2
    motions = run_motions(cell, prune=prune) if programs else ()
    timings["sweep_s"] = time.perf_counter() - t3
    return CheckResult(cell=cell, rows=tuple(rows), motions=motions, warnings=tuple(cell.warnings), timings=timings)


def check_cell(cell: Cell, *, jobs: int = 1, progress=None, space: bool = True, space_pitch: float = 0.04,
               risk: str | None = None) -> CheckResult:
    """The whole check of ``envelope check``: ``run_check`` (targets and programs), then the space check.

    The operating space holds the within-limits target configurations and the programmed motions
    (``envelope.sweep.swept_configurations``, grown so that the samples cover the whole motion).

    Parameters
    ----------
    space : bool
        Run the space check (``envelope.spacecheck.run_space_check``) into ``CheckResult.space``.
    space_pitch : float
        Voxel size of the spaces, m.
    risk : {"high", "low"}, optional
        ISO 13857 risk level for the fence tables (default: the cell's).
    """
    import dataclasses

    result = run_check(cell, jobs=jobs, progress=progress)
    if not space:
        return result
    from .spacecheck import run_space_check
    from .sweep import swept_configurations

    t0 = time.perf_counter()
    q_motion, grow = swept_configurations(cell, result.motions)
    sc = run_space_check(cell, result=result, pitch=space_pitch, risk=risk,
                         configurations=q_motion if len(q_motion) else None, grow=grow if len(q_motion) else 0.0)
    timings = dict(result.timings, space_s=time.perf_counter() - t0)
    return dataclasses.replace(result, space=sc, timings=timings)


def solve_pose(cell: Cell, xyz_mm, angles_deg, *, frame: str = "world", convention: str = "fixed-xyz") -> dict:
    """The branch table of one TCP pose given in file units (mm, degrees) in a named frame.

    Returns a plain dict (JSON-ready, mm and degrees): ``summary``, ``reason``, ``branches`` (each
    with ``branch``, ``q_deg``, ``within_limits``, ``excess_deg``, ``singular``, ``turn_of``,
    ``notes``).
    """
    from .poses import pose_from_euler
    from .units import to_degrees, to_metres, to_radians

    if frame != "world" and frame not in cell.frames:
        known = ", ".join(sorted(cell.frames)) or "none"
        raise InputError(f"unknown frame {frame!r} (known frames: world, {known})", item="--frame")
    world_from_frame = np.eye(4) if frame == "world" else cell.frames[frame]
    frame_from_tcp = pose_from_euler(to_metres(xyz_mm, "mm"), to_radians(angles_deg, "deg"), convention)
    base_from_flange = cell.base_from_flange(world_from_frame @ frame_from_tcp)
    sol = cell.arm.ik(base_from_flange)
    branches = []
    for k in branch_order(sol):
        notes = []
        if not sol.within_limits[k].all():
            notes.append(_joint_note(sol.q[k], cell.arm.limits))
        singular = _singular_flags(sol, k)
        if singular:
            notes.append("singular: " + ", ".join(singular))
        if sol.twin[k] != k:
            notes.append(f"turn variant of {sol.labels[sol.twin[k]]}")
        branches.append(
            {
                "branch": sol.labels[k],
                "q_deg": [round(float(v), 6) + 0.0 for v in to_degrees(sol.q[k])],
                "within_limits": bool(sol.within_limits[k].all()),
                "excess_deg": [round(float(v), 6) for v in to_degrees(sol.excess[k])],
                "singular": list(singular),
                "turn_of": "" if sol.twin[k] == k else sol.labels[sol.twin[k]],
                "notes": "; ".join(notes),
            }
        )
    n_ok = sum(b["within_limits"] for b in branches)
    summary = f"{len(branches)} solutions, {n_ok} within limits ({sol.method}"
    summary += ", complete)" if sol.complete else f", not guaranteed complete: {sol.starts} starts)"
    return {"summary": summary, "reason": sol.reason, "branches": branches, "method": sol.method,
            "complete": bool(sol.complete)}
