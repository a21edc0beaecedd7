"""Motion rows (``envelope.sweep.MotionRow``) in the report: order, CSV cells, JSON records, table rows.

Everything here is in file units (mm, degrees), converted through ``envelope.units`` and rounded to
``summary.DECIMALS`` decimals (path fractions and speed ratios to ``FRACTION_DECIMALS``), so a re-run
writes identical bytes. The figures of motions are in ``figures`` (``motion_chart``, ``view_figure``'s
``motions``), the scenes in ``envelope.scene.motion_scene``.

Worst first, among motions only: by status severity (intrusion, below margin, outside limits,
unreachable, clear), then by margin ``min_clearance - required`` (smallest first, NaN last), then by
position in ``result.motions``. A *move* is one ``(program, move)``; its branches are its motion rows,
and a move is as bad as its worst motion row.
"""

from __future__ import annotations

import numpy as np

from ..units import to_degrees, to_mm
from .summary import fmt, rnd, rnd_list

FRACTION_DECIMALS = 4
"""Decimals of a path fraction (0..1) or a joint-speed ratio in clearance.csv / clearance.json."""
MOTION_GLB = 3
"""Scenes (and plan / elevation drawings) are made for the worst configuration of at most this many
moves, the worst."""
CHART_MOVES = 6
"""The clearance-along-the-move chart has one small panel for each of at most this many moves, the worst."""
MOTION_SEVERITY = {"intrusion": 0, "below margin": 1, "outside limits": 2, "unreachable": 3, "clear": 4}
"""Status severity of a motion row (``envelope.sweep.STATUS_ORDER``); an unknown status sorts last."""

CSV_MOTION_COLUMNS = (
    "kind",
    "program",
    "move",
    "from_target",
    "motion",
    "path_fraction",
    "first_violation",
    "allowance_mm",
    "peak_speed_ratio",
    "singular_crossed",
    "queries",
)
"""The columns appended to clearance.csv for motion rows (blank for target rows, except ``kind``)."""


def is_motion_row(m) -> bool:
    """True for an ``envelope.sweep.MotionRow`` (other motion objects are only dumped into clearance.json)."""
    from ..sweep import MotionRow

    return isinstance(m, MotionRow)


def motion_rows(result) -> list:
    """``[(index into result.motions, MotionRow)]`` of every ``MotionRow`` of ``result``, in order."""
    return [(i, m) for i, m in enumerate(result.motions) if is_motion_row(m)]


def margin(m) -> float:
    """``min_clearance - required`` (m); NaN when nothing was swept."""
    return float(m.min_clearance) - float(m.required)


def _key(i, m) -> tuple:
    mg = margin(m)
    return (MOTION_SEVERITY.get(m.status, len(MOTION_SEVERITY)), np.inf if np.isnan(mg) else mg, i)


def worst_motions(result) -> list:
    """Indices into ``result.motions`` of the motion rows, worst first (see the module docstring)."""
    return [i for i, m in sorted(motion_rows(result), key=lambda im: _key(*im))]


def motion_ranks(result) -> dict:
    """``{index into result.motions: 1-based worst-first rank among the motion rows}``."""
    return {i: pos + 1 for pos, i in enumerate(worst_motions(result))}


def worst_moves(result, limit: int | None = None) -> list:
    """The moves worst first, each as the list of its motion-row indices worst first (at most ``limit``)."""
    groups: dict = {}
    for i in worst_motions(result):
        m = result.motions[i]
        groups.setdefault((m.program, m.move), []).append(i)
    out = list(groups.values())  # dicts keep first-seen order: the worst row of each move comes first
    return out if limit is None else out[:limit]


def drawn_motions(result, limit: int = MOTION_GLB) -> list:
    """Indices of the motion rows drawn and exported: the worst row with a finite ``q_at_min`` of each
    of the ``limit`` worst moves (moves with no such row are skipped), worst first."""
    out = []
    for group in worst_moves(result):
        for i in group:
            if np.isfinite(np.asarray(result.motions[i].q_at_min, dtype=np.float64)).all():
                out.append(i)
                break
        if len(out) >= limit:
            break
    return out


def move_label(m) -> str:
    """``program move n: from -> to (motion)``."""
    return f"{m.program} move {m.move}: {m.from_target} -> {m.to_target} ({m.motion})"


def _frac(x) -> str:
    return fmt(x, FRACTION_DECIMALS)


def csv_cells(i, m, rank: int, columns, frame: str = "") -> list:
    """One clearance.csv row of motion row ``m`` (index ``i`` in ``result.motions``), in ``columns`` order.

    Target columns: ``row`` = the index in clearance.json ``motions``, ``rank`` = the worst-first rank
    among motions, ``target`` = the move's end target (``frame``: the frame it was given in),
    ``branch`` = its start branch, ``q*_deg`` = the
    configuration at the certified minimum, ``clearance_mm`` = the certified minimum; the others that do
    not apply to a move are blank.
    """
    q_deg = to_degrees(np.asarray(m.q_at_min, dtype=np.float64))
    values = {
        "row": i,
        "rank": rank,
        "target": m.to_target,
        "frame": frame,
        "branch": m.branch,
        "status": m.status,
        "clearance_mm": fmt(to_mm(m.min_clearance)),
        "required_mm": fmt(to_mm(m.required)),
        "margin_mm": fmt(to_mm(margin(m))),
        "closest_body": m.closest_body,
        "closest_other": m.closest_other,
        "note": m.note,
        "kind": "motion",
        "program": m.program,
        "move": int(m.move),
        "from_target": m.from_target,
        "motion": m.motion,
        "path_fraction": _frac(m.where),
        "first_violation": _frac(m.first_violation),
        "allowance_mm": fmt(to_mm(m.allowance)),
        "peak_speed_ratio": _frac(m.peak_speed_ratio),
        "singular_crossed": m.singular_crossed,
        "queries": int(m.queries),
    }
    for k in range(6):
        values[f"q{k + 1}_deg"] = fmt(q_deg[k])
    return [values.get(c, "") for c in columns]


def motion_record(i, m, rank: int) -> dict:
    """One motion of clearance.json (see docs/outputs.md, "motions")."""
    p = m.profile
    s = np.asarray(p.s, dtype=np.float64)
    return {
        "index": i,
        "rank": rank,
        "program": m.program,
        "move": int(m.move),
        "from_target": m.from_target,
        "to_target": m.to_target,
        "motion": m.motion,
        "branch": m.branch,
        "end_branch": m.end_branch,
        "status": m.status,
        "min_clearance_mm": rnd(to_mm(m.min_clearance)),
        "required_mm": rnd(to_mm(m.required)),
        "margin_mm": rnd(to_mm(margin(m))),
        "gap_mm": rnd(to_mm(m.gap)),
        "allowance_mm": rnd(to_mm(m.allowance)),
        "path_deviation_mm": rnd(to_mm(m.path_deviation)),
        "max_displacement_mm": rnd(to_mm(m.max_displacement)),
        "where": rnd(m.where, FRACTION_DECIMALS),
        "q_at_min_deg": rnd_list(to_degrees(np.asarray(m.q_at_min, dtype=np.float64))),
        "q_start_deg": rnd_list(to_degrees(np.asarray(m.q_start, dtype=np.float64))),
        "q_end_deg": rnd_list(to_degrees(np.asarray(m.q_end, dtype=np.float64))),
        "closest_body": m.closest_body,
        "closest_other": m.closest_other,
        "first_violation": rnd(m.first_violation, FRACTION_DECIMALS),
        "limit_violation": rnd(m.limit_violation, FRACTION_DECIMALS),
        "peak_speed_ratio": rnd(m.peak_speed_ratio, FRACTION_DECIMALS),
        "singular_crossed": m.singular_crossed,
        "queries": int(m.queries),
        "ik_samples": int(m.ik_samples),
        "uniform_samples": int(m.uniform_samples),
        "profile": {
            "s": rnd_list(s, FRACTION_DECIMALS + 2),
            "clearance_mm": rnd_list(to_mm(np.asarray(p.clearance, dtype=np.float64))),
            "required_mm": rnd_list(to_mm(np.asarray(p.required, dtype=np.float64))),
        },
        "note": m.note,
    }


def motion_counts(result) -> dict:
    """``{status: number of motion rows}`` for every status present, most severe first."""
    counts: dict = {}
    for _, m in motion_rows(result):
        counts[m.status] = counts.get(m.status, 0) + 1
    return dict(sorted(counts.items(), key=lambda kv: (MOTION_SEVERITY.get(kv[0], len(MOTION_SEVERITY)), kv[0])))


MOTION_TABLE_HEADER = (
    "rank", "drawn", "program", "move", "from -> to", "motion", "branch", "status", "min clearance mm",
    "required mm", "allowance mm", "where s", "closest pair", "first violation s", "peak speed ratio",
    "singularity crossed", "queries",
)
"""Columns of the motions table in report.html / report.pdf (status is column ``STATUS_COLUMN``);
``drawn`` is ``M<k>`` for the configurations drawn in the motion views and exported as scenes."""
STATUS_COLUMN = 7


def motion_table_rows(result, limit: int | None = None) -> tuple:
    """``(header, rows of plain strings, shown, total)``: the motion rows worst first, file units.

    ``required mm`` includes the stopping allowance (and a linear move's path deviation), shown again
    on its own under ``allowance mm``; ``where s`` and ``first violation s`` are path fractions 0..1.
    """
    order = worst_motions(result)
    drawn = {i: f"M{k}" for k, i in enumerate(drawn_motions(result), start=1)}
    rows = []
    for pos, i in enumerate(order if limit is None else order[:limit]):
        m = result.motions[i]
        branch = m.branch if m.end_branch in ("", m.branch) else f"{m.branch} -> {m.end_branch}"
        pair = f"{m.closest_body} - {m.closest_other}" if m.closest_body else ""
        rows.append(
            (
                str(pos + 1), drawn.get(i, ""), m.program, str(m.move), f"{m.from_target} -> {m.to_target}", m.motion, branch,
                m.status, fmt(to_mm(m.min_clearance), 1), fmt(to_mm(m.required), 1), fmt(to_mm(m.allowance), 1),
                fmt(m.where, 3), pair, fmt(m.first_violation, 3), fmt(m.peak_speed_ratio, 2), m.singular_crossed,
                str(int(m.queries)),
            )
        )
    return MOTION_TABLE_HEADER, rows, len(rows), len(order)


def motions_text(result) -> str:
    """One sentence: the number of motion rows and moves, and the counts per status."""
    counts = motion_counts(result)
    n_moves = len(worst_moves(result))
    return (
        f"{sum(counts.values())} move x branch rows for {n_moves} moves: "
        + ", ".join(f"{n} {s}" for s, n in counts.items())
        + "."
    )


MOTIONS_NOTE = (
    "Min clearance: the certified lower bound over the whole move of the pair with the smallest margin "
    "(never more than the true minimum; negative: penetration). Required: that pair's clearance with the "
    "move's stopping allowance (zone pairs only; not added to self pairs) and, for a linear move, the path "
    "deviation bound included; the allowance is also shown on its own. where s / first violation s: path fractions 0..1 of the move. Peak speed "
    "ratio: the largest joint speed along the move over that of a joint move between the same ends "
    "(1 for a joint move). Moves are ranked worst first among themselves: by status, then by margin."
)
