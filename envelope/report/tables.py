"""The clearance table (``clearance.csv``) and the full record (``clearance.json``).

Both are documented column by column in docs/outputs.md. Neither holds a timestamp; numbers are
rounded to ``summary.DECIMALS`` decimals and keys are sorted, so a re-run writes identical bytes.
"""

from __future__ import annotations

import csv
import dataclasses
import io
import json
from dataclasses import dataclass

import numpy as np

from ..units import to_degrees, to_mm
from .files import AtomicWriter, write_text_atomic
from .motions import CSV_MOTION_COLUMNS, motion_ranks, motion_record, motion_rows
from .motions import csv_cells as motion_csv_cells
from .summary import (
    all_warnings,
    cell_summary,
    fmt,
    rnd,
    rnd_list,
    singular_names,
    status_counts,
    target_count,
    tool_version,
    worst_limit,
)

CSV_COLUMNS = (
    "row",
    "rank",
    "target",
    "frame",
    "branch",
    "turn",
    "twin_of",
    "status",
    "clearance_status",
    "q1_deg",
    "q2_deg",
    "q3_deg",
    "q4_deg",
    "q5_deg",
    "q6_deg",
    "limit_joint",
    "limit_excess_deg",
    "singular",
    "clearance_mm",
    "required_mm",
    "margin_mm",
    "closest_body",
    "closest_other",
    "body_x_mm",
    "body_y_mm",
    "body_z_mm",
    "other_x_mm",
    "other_y_mm",
    "other_z_mm",
    "note",
    *CSV_MOTION_COLUMNS,
)
"""The columns of clearance.csv, in order (stable; new columns are only ever appended). Target rows
first, then motion rows (``kind`` tells them apart; see ``motions.csv_cells``)."""

JSON_FORMAT = "envelope-clearance"
JSON_FORMAT_VERSION = 1
PAIR_STATUS_CODES = ("clear", "below margin", "intrusion", "allowed contact")
"""Per-pair ``status`` codes in clearance.json: index into this list (a status not listed is appended
to ``pair_status_codes`` in the file itself, which is the authority)."""


def ranks(result) -> list:
    """``rank[i]``: the 1-based position of row i in ``result.worst_first()``."""
    out = [0] * len(result.rows)
    for pos, i in enumerate(result.worst_first()):
        out[i] = pos + 1
    return out


def csv_text(result) -> str:
    """clearance.csv as text: one row per target x branch, in ``result.rows`` order, then one row per
    motion (``envelope.sweep.MotionRow``), in ``result.motions`` order."""
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(CSV_COLUMNS)
    rank = ranks(result)
    for i, row in enumerate(result.rows):
        q_deg = to_degrees(row.q)
        joint, excess = worst_limit(row)
        wb = to_mm(row.witness_body)
        wo = to_mm(row.witness_other)
        w.writerow(
            [
                i,
                rank[i],
                row.target,
                row.target_frame,
                row.branch,
                row.turn,
                row.twin_of,
                row.status,
                row.clearance_status,
                *(fmt(v) for v in q_deg),
                joint or "",
                fmt(excess) if joint else "",
                ";".join(singular_names(row)),
                fmt(to_mm(row.clearance)),
                fmt(to_mm(row.required)),
                fmt(to_mm(row.margin)),
                row.closest_body,
                row.closest_other,
                *(fmt(v) for v in wb),
                *(fmt(v) for v in wo),
                row.note,
                "target",
                *([""] * (len(CSV_MOTION_COLUMNS) - 1)),
            ]
        )
    motion_rank = motion_ranks(result)
    frames = {t.name: t.frame for t in result.cell.targets}
    for i, m in motion_rows(result):  # after the target rows, in sweep order; ``rank`` among motions
        w.writerow(motion_csv_cells(i, m, motion_rank[i], CSV_COLUMNS, frames.get(m.to_target, "")))
    return buf.getvalue()


def write_csv(result, path):
    return write_text_atomic(path, csv_text(result))


# ---------------------------------------------------------------------- JSON


def _pair_key(p) -> tuple:
    return (p.body, p.other, p.kind, p.zone_kind, p.panel, float(p.required))


@dataclass(frozen=True, eq=False)
class PairTable:
    """One row's pairs as parallel arrays (metres), however the row holds them.

    ``keys[k]`` is ``(body, other, kind, zone_kind, panel, required)`` of entry k.
    """

    keys: list
    distance: np.ndarray
    distance_upper: np.ndarray
    depth_known: np.ndarray
    pruned: np.ndarray
    status: list
    witness_body: np.ndarray
    witness_other: np.ndarray
    shared: bool = False  # ``keys`` is the cached list of definitions shared by many rows


def pair_table(row, cache: dict | None = None) -> PairTable:
    """The pairs of ``row`` as a ``PairTable``.

    A lazy pair sequence from ``run_check`` (with ``defs``, ``result`` and ``zone_kinds``) is read
    straight from its arrays, without building a ``PairRow`` per pair; any other sequence of
    ``PairRow`` is read pair by pair. ``cache`` keeps the definition keys of shared ``defs``.
    """
    pairs = row.pairs
    defs, res, zone_kinds = (getattr(pairs, a, None) for a in ("defs", "result", "zone_kinds"))
    if defs is not None and zone_kinds is not None and hasattr(res, "distance") and hasattr(res, "status"):
        from ..clearance import STATUS_NAMES

        cache = {} if cache is None else cache
        hit = cache.get(id(defs))
        if hit is None or hit[0] is not defs:
            keys = [
                (p.body, p.other, p.kind, zone_kinds.get(p.zone, "") if p.kind == "zone" else "", p.panel, float(p.required))
                for p in defs
            ]
            hit = cache[id(defs)] = (defs, keys)
        names = np.array(STATUS_NAMES, dtype=object)
        return PairTable(
            keys=hit[1],
            distance=np.asarray(res.distance, dtype=np.float64).reshape(-1),
            distance_upper=np.asarray(res.distance_upper, dtype=np.float64).reshape(-1),
            depth_known=np.asarray(res.depth_known, dtype=bool).reshape(-1),
            pruned=np.asarray(res.pruned, dtype=bool).reshape(-1),
            status=list(names[np.asarray(res.status, dtype=np.int64).reshape(-1)]),
            witness_body=np.asarray(res.witness_body, dtype=np.float64).reshape(-1, 3),
            witness_other=np.asarray(res.witness_other, dtype=np.float64).reshape(-1, 3),
            shared=True,
        )
    items = list(pairs)
    return PairTable(
        keys=[_pair_key(p) for p in items],
        distance=np.array([p.distance for p in items], dtype=np.float64),
        distance_upper=np.array([p.distance_upper for p in items], dtype=np.float64),
        depth_known=np.array([bool(p.depth_known) for p in items], dtype=bool),
        pruned=np.array([bool(p.pruned) for p in items], dtype=bool),
        status=[p.status for p in items],
        witness_body=np.array([p.witness_body for p in items], dtype=np.float64).reshape(-1, 3),
        witness_other=np.array([p.witness_other for p in items], dtype=np.float64).reshape(-1, 3),
    )


def pair_definitions(result, cache: dict | None = None, statuses: list | None = None) -> tuple:
    """``(definitions, index)``: every distinct pair (in first-seen order) and ``{key: position}``.

    Every pair status met that ``statuses`` (a list) lacks is appended to it.
    """
    defs, index = [], {}
    seen_shared: dict = {}  # id -> the shared key list itself (held, so the id stays unique)
    for row in result.rows:
        table = pair_table(row, cache)
        if statuses is not None:
            for st in dict.fromkeys(table.status):
                if st not in statuses:
                    statuses.append(st)
        if table.shared:
            if seen_shared.get(id(table.keys)) is table.keys:
                continue  # the same shared definitions as an earlier row
            seen_shared[id(table.keys)] = table.keys
        for key in table.keys:
            if key not in index:
                index[key] = len(defs)
                body, other, kind, zone_kind, panel, required = key
                defs.append(
                    {
                        "body": body,
                        "other": other,
                        "kind": kind,
                        "zone_kind": zone_kind,
                        "panel": panel,
                        "required_mm": rnd(to_mm(required)),
                    }
                )
    return defs, index


WITNESSES = ("findings", "all")
"""Which pairs' witness points clearance.json holds: ``findings`` (every pair that is not ``clear``,
the default, keeping big checks compact) or ``all`` (every pair that was not pruned)."""


def _row_pairs(row, index: dict, status_codes: list, n_defs: int, witnesses: str, cache: dict) -> dict:
    t = pair_table(row, cache)
    for s in dict.fromkeys(t.status):
        if s not in status_codes:
            status_codes.append(s)
    code_of = {s: k for k, s in enumerate(status_codes)}
    where_cache = cache.setdefault("where", {})  # only for shared key lists, which it holds
    hit = where_cache.get(id(t.keys)) if t.shared else None
    if hit is None or hit[0] is not t.keys:
        where = [index[key] for key in t.keys]
        # null: the row holds every defined pair, in definition order (the usual case: saves an array)
        pair = None if len(where) == n_defs and where == list(range(n_defs)) else where
        hit = (t.keys, pair)
        if t.shared:
            where_cache[id(t.keys)] = hit
    status = np.array(t.status, dtype=object)
    keep_mask = ~t.pruned if witnesses == "all" else (~t.pruned & (status != "clear"))
    keep = np.flatnonzero(keep_mask)
    return {
        "pair": hit[1],
        "distance_mm": rnd_list(to_mm(t.distance)),
        "distance_upper_mm": rnd_list(to_mm(t.distance_upper)),
        "depth_known": t.depth_known.astype(np.int8).tolist(),
        "pruned": t.pruned.astype(np.int8).tolist(),
        "status": [code_of[s] for s in t.status],
        "witness": keep.tolist(),
        "witness_body_mm": rnd_list(to_mm(t.witness_body[keep])),
        "witness_other_mm": rnd_list(to_mm(t.witness_other[keep])),
    }


def row_record(i, row, rank, index, status_codes, n_defs, witnesses="findings", cache=None) -> dict:
    """One row of clearance.json (see docs/outputs.md)."""
    joint, excess = worst_limit(row)
    rec = {
        "row": i,
        "rank": rank,
        "target": row.target,
        "frame": row.target_frame,
        "branch": row.branch,
        "turn": int(row.turn),
        "twin_of": int(row.twin_of),
        "status": row.status,
        "clearance_status": row.clearance_status,
        "q_deg": rnd_list(to_degrees(row.q)),
        "limit_excess_deg": rnd_list(to_degrees(row.limit_excess)),
        "limit_joint": joint,
        "singular": singular_names(row),
        "clearance_mm": rnd(to_mm(row.clearance)),
        "required_mm": rnd(to_mm(row.required)),
        "margin_mm": rnd(to_mm(row.margin)),
        "closest_body": row.closest_body,
        "closest_other": row.closest_other,
        "witness_body_mm": rnd_list(to_mm(row.witness_body)),
        "witness_other_mm": rnd_list(to_mm(row.witness_other)),
        "note": row.note,
    }
    rec["pairs"] = _row_pairs(row, index, status_codes, n_defs, witnesses, {} if cache is None else cache)
    return rec


def _jsonable(value):
    """A motion (or any dataclass / array / scalar) as plain JSON values, floats rounded."""
    if dataclasses.is_dataclass(value) and not isinstance(value, type):
        return {f.name: _jsonable(getattr(value, f.name)) for f in dataclasses.fields(value)}
    if isinstance(value, dict):
        return {str(k): _jsonable(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_jsonable(v) for v in value]
    if isinstance(value, np.ndarray):
        if value.dtype.kind in "fc":
            return rnd_list(value, 6)
        return value.tolist()
    if isinstance(value, (bool, np.bool_)):
        return bool(value)
    if isinstance(value, (int, np.integer)):
        return int(value)
    if isinstance(value, (float, np.floating)):
        return rnd(value, 6)
    if value is None or isinstance(value, str):
        return value
    return str(value)


_ROWS_SENTINEL = "@@ROWS@@"
_MOTIONS_SENTINEL = "@@MOTIONS@@"


def motions_json(result) -> str:
    """The ``motions`` array of clearance.json as text, one compact motion per line.

    A ``MotionRow`` becomes ``motions.motion_record``; any other motion object its fields as plain
    values (``_jsonable``).
    """
    rank = motion_ranks(result)
    recs = [
        motion_record(i, m, rank[i]) if i in rank else _jsonable(m) for i, m in enumerate(result.motions)
    ]
    if not recs:
        return "[]"
    return "[\n" + ",\n".join(json.dumps(r, sort_keys=True, separators=(",", ":"), allow_nan=False) for r in recs) + "\n]"


def write_json(result, path, *, witnesses: str = "findings"):
    """Write clearance.json: a pretty header, then one row per line; atomic.

    ``witnesses``: one of ``WITNESSES``.
    """
    if witnesses not in WITNESSES:
        raise ValueError(f"witnesses must be one of {WITNESSES}, got {witnesses!r}")
    cache: dict = {}
    status_codes = list(PAIR_STATUS_CODES)
    defs, index = pair_definitions(result, cache, status_codes)  # also completes status_codes
    rank = ranks(result)
    head = {
        "format": JSON_FORMAT,
        "format_version": JSON_FORMAT_VERSION,
        "tool": {"name": "envelope", "version": tool_version()},
        "units": {"length": "mm", "angle": "deg"},
        "verdict": result.verdict,
        "exit_code": int(result.exit_code),
        "findings": len(result.findings()),
        "counts": status_counts(result),
        "row_count": len(result.rows),
        "target_count": target_count(result),
        "cell": cell_summary(result.cell),
        "warnings": all_warnings(result),
        "pairs": defs,
        "witnesses": witnesses,
        "motions": _MOTIONS_SENTINEL,
        "rows": _ROWS_SENTINEL,
    }
    head["pair_status_codes"] = status_codes
    if getattr(result, "space", None) is not None:  # only then: a report without it keeps its bytes
        from .spacesection import space_json

        head["space"] = space_json(result)
    text = json.dumps(head, sort_keys=True, indent=1, allow_nan=False)
    text = text.replace(json.dumps(_MOTIONS_SENTINEL), motions_json(result), 1)
    before, after = text.split(json.dumps(_ROWS_SENTINEL), 1)
    n = len(result.rows)
    with AtomicWriter(path) as out:  # rows are streamed: a big check is never held as one string
        out.write(before)
        out.write("[\n" if n else "[]")
        for i, row in enumerate(result.rows):
            rec = row_record(i, row, rank[i], index, status_codes, len(defs), witnesses, cache)
            out.write(json.dumps(rec, sort_keys=True, separators=(",", ":"), allow_nan=False))
            out.write(",\n" if i + 1 < n else "\n]")
        out.write(after)
        out.write("\n")
    return path
