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
    DECIMALS,
    all_warnings,
    cell_summary,
    fmt,
    fmt_list,
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


# ---------------------------------------------------------------------- bulk conversion

BULK_ROWS = 2048
"""Rows converted together by the table writers: bounds their memory (the bytes do not depend on it)."""


def row_chunks(rows, size: int | None = None):
    """``(start, rows[start:start + size])`` over ``rows``, in order (``size``: ``BULK_ROWS`` if None)."""
    size = BULK_ROWS if size is None else size
    for start in range(0, len(rows), size):
        yield start, rows[start:start + size]


@dataclass(frozen=True, eq=False)
class RowColumns:
    """The numbers of n target rows in file units, each converted for all rows in one numpy call.

    ``q_deg``, ``limit_excess_deg`` : (n, 6); ``clearance_mm``, ``required_mm``, ``margin_mm`` : (n,);
    ``witness_body_mm``, ``witness_other_mm`` : (n, 3); ``limit_joint`` : (n,) int and
    ``limit_worst_deg`` : (n,) float are ``summary.worst_limit`` of each row.
    """

    q_deg: np.ndarray
    limit_excess_deg: np.ndarray
    clearance_mm: np.ndarray
    required_mm: np.ndarray
    margin_mm: np.ndarray
    witness_body_mm: np.ndarray
    witness_other_mm: np.ndarray
    limit_joint: np.ndarray
    limit_worst_deg: np.ndarray


def _stack(rows, name: str) -> np.ndarray:
    return np.stack([np.asarray(getattr(r, name), dtype=np.float64) for r in rows])


def worst_limits(excess) -> tuple:
    """``(joint, excess_deg)``, each (n,): ``summary.worst_limit`` of every row of ``excess`` (n, m) rad.

    The joint is 1-based, 0 (with excess 0) where no joint is beyond its range; like ``np.nanargmax``
    the first of equal largest excesses counts, NaN entries are ignored.
    """
    excess = np.asarray(excess, dtype=np.float64)
    masked = np.where(np.isnan(excess), -np.inf, excess)
    j = masked.argmax(axis=1)
    top = masked[np.arange(len(masked)), j]
    beyond = np.isfinite(excess).any(axis=1) & (top > 0)
    return np.where(beyond, j + 1, 0), np.where(beyond, to_degrees(top), 0.0)


def row_columns(rows) -> RowColumns | None:
    """The ``RowColumns`` of ``rows``; None when there are none or their arrays do not stack (rows
    of differing shapes), for the caller to convert row by row."""
    try:
        q, excess = _stack(rows, "q"), _stack(rows, "limit_excess")
        wb, wo = _stack(rows, "witness_body"), _stack(rows, "witness_other")
        scalars = [np.array([float(getattr(r, a)) for r in rows]) for a in ("clearance", "required", "margin")]
    except (ValueError, TypeError):
        return None
    if any(a.ndim != 2 for a in (q, excess, wb, wo)) or excess.shape[1] == 0 or wb.shape != wo.shape:
        return None
    joint, worst_deg = worst_limits(excess)
    return RowColumns(
        q_deg=to_degrees(q),
        limit_excess_deg=to_degrees(excess),
        clearance_mm=to_mm(scalars[0]),
        required_mm=to_mm(scalars[1]),
        margin_mm=to_mm(scalars[2]),
        witness_body_mm=to_mm(wb),
        witness_other_mm=to_mm(wo),
        limit_joint=joint,
        limit_worst_deg=worst_deg,
    )


# ---------------------------------------------------------------------- CSV


def csv_target_cells(i, row, rank: int) -> list:
    """One clearance.csv row of target row ``row`` (index ``i``), converted on its own.

    The reference for ``csv_target_rows``, which converts many rows at once to the same text.
    """
    q_deg = to_degrees(row.q)
    joint, excess = worst_limit(row)
    wb = to_mm(row.witness_body)
    wo = to_mm(row.witness_other)
    return [
        i,
        rank,
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


def csv_target_rows(rows, start: int, rank) -> list:
    """The clearance.csv rows of ``rows`` (``result.rows[start:start + len(rows)]``; ``rank`` of all
    rows), the same cells as ``csv_target_cells`` row by row, with the numbers converted and formatted
    for all rows at once (``row_columns``)."""
    cols = row_columns(rows)
    if cols is None:
        return [csv_target_cells(start + k, row, rank[start + k]) for k, row in enumerate(rows)]
    nq, nw = cols.q_deg.shape[1], cols.witness_body_mm.shape[1]
    q = fmt_list(cols.q_deg)
    excess = fmt_list(cols.limit_worst_deg)
    clearance, required, margin = (fmt_list(a) for a in (cols.clearance_mm, cols.required_mm, cols.margin_mm))
    wb, wo = fmt_list(cols.witness_body_mm), fmt_list(cols.witness_other_mm)
    joints = cols.limit_joint.tolist()
    tail = ["target", *([""] * (len(CSV_MOTION_COLUMNS) - 1))]
    out = []
    for k, row in enumerate(rows):
        i, joint = start + k, joints[k]
        out.append(
            [
                i, rank[i], row.target, row.target_frame, row.branch, row.turn, row.twin_of, row.status,
                row.clearance_status, *q[k * nq:(k + 1) * nq], joint or "", excess[k] if joint else "",
                ";".join(singular_names(row)), clearance[k], required[k], margin[k], row.closest_body,
                row.closest_other, *wb[k * nw:(k + 1) * nw], *wo[k * nw:(k + 1) * nw], row.note, *tail,
            ]
        )
    return out


def csv_text(result) -> str:
    """clearance.csv as text: one row per target x branch, in ``result.rows`` order, then one row per
    motion (``envelope.sweep.MotionRow``), in ``result.motions`` order."""
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(CSV_COLUMNS)
    rank = ranks(result)
    for start, chunk in row_chunks(result.rows):
        w.writerows(csv_target_rows(chunk, start, rank))
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


def lazy_pairs(row):
    """``(defs, result, zone_kinds)`` of a row whose pairs are a lazy sequence from ``run_check``
    (``check.PairRows``: definitions, one ``ClearanceResult``, zone kinds), else None."""
    pairs = row.pairs
    defs, res, zone_kinds = (getattr(pairs, a, None) for a in ("defs", "result", "zone_kinds"))
    if defs is not None and zone_kinds is not None and hasattr(res, "distance") and hasattr(res, "status"):
        return defs, res, zone_kinds
    return None


def shared_keys(defs, zone_kinds, cache: dict) -> list:
    """The definition keys (``PairTable.keys``) of shared pair definitions ``defs``, kept in ``cache``."""
    hit = cache.get(id(defs))
    if hit is None or hit[0] is not defs:
        keys = [
            (p.body, p.other, p.kind, zone_kinds.get(p.zone, "") if p.kind == "zone" else "", p.panel, float(p.required))
            for p in defs
        ]
        hit = cache[id(defs)] = (defs, keys)
    return hit[1]


def pair_table(row, cache: dict | None = None) -> PairTable:
    """The pairs of ``row`` as a ``PairTable``.

    A lazy pair sequence from ``run_check`` (with ``defs``, ``result`` and ``zone_kinds``) is read
    straight from its arrays, without building a ``PairRow`` per pair; any other sequence of
    ``PairRow`` is read pair by pair. ``cache`` keeps the definition keys of shared ``defs``.
    """
    lazy = lazy_pairs(row)
    if lazy is not None:
        from ..clearance import STATUS_NAMES

        defs, res, zone_kinds = lazy
        names = np.array(STATUS_NAMES, dtype=object)
        return PairTable(
            keys=shared_keys(defs, zone_kinds, {} if cache is None else cache),
            distance=np.asarray(res.distance, dtype=np.float64).reshape(-1),
            distance_upper=np.asarray(res.distance_upper, dtype=np.float64).reshape(-1),
            depth_known=np.asarray(res.depth_known, dtype=bool).reshape(-1),
            pruned=np.asarray(res.pruned, dtype=bool).reshape(-1),
            status=list(names[np.asarray(res.status, dtype=np.int64).reshape(-1)]),
            witness_body=np.asarray(res.witness_body, dtype=np.float64).reshape(-1, 3),
            witness_other=np.asarray(res.witness_other, dtype=np.float64).reshape(-1, 3),
            shared=True,
        )
    items = list(row.pairs)
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
    cache = {} if cache is None else cache
    seen_shared: dict = {}  # id -> the shared key list itself (held, so the id stays unique)
    pending: list = []  # status code arrays of lazy rows not yet added to ``statuses``
    for row in result.rows:
        lazy = lazy_pairs(row)
        if lazy is not None:
            keys = shared_keys(lazy[0], lazy[2], cache)
            pending.append(np.asarray(lazy[1].status, dtype=np.int64).reshape(-1))
            if len(pending) >= BULK_ROWS:
                _add_statuses(statuses, pending)
        else:
            _add_statuses(statuses, pending)  # keep first-seen order across both kinds of rows
            table = pair_table(row, cache)
            if statuses is not None:
                for st in dict.fromkeys(table.status):
                    if st not in statuses:
                        statuses.append(st)
            keys = table.keys
        if lazy is not None:
            if seen_shared.get(id(keys)) is keys:
                continue  # the same shared definitions as an earlier row
            seen_shared[id(keys)] = keys
        for key in keys:
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
    _add_statuses(statuses, pending)
    return defs, index


def _add_statuses(statuses: list | None, pending: list) -> None:
    """Append to ``statuses`` the status names of the codes in ``pending`` (arrays, emptied) that it
    lacks, in first-seen order, as reading them one by one would."""
    if pending and statuses is not None:
        from ..clearance import STATUS_NAMES

        codes, first = np.unique(np.concatenate(pending), return_index=True)
        for code in codes[np.argsort(first)].tolist():
            name = STATUS_NAMES[code]
            if name not in statuses:
                statuses.append(name)
    pending.clear()


WITNESSES = ("findings", "all")
"""Which pairs' witness points clearance.json holds: ``findings`` (every pair that is not ``clear``,
the default, keeping big checks compact) or ``all`` (every pair that was not pruned)."""


def pair_positions(keys, shared: bool, index: dict, n_defs: int, cache: dict):
    """The ``pair`` entry of a row's pairs: the position of each key in the definitions ``index``,
    or None when the row holds every defined pair in definition order (the usual case: saves an
    array). Kept in ``cache`` for a ``shared`` key list."""
    where_cache = cache.setdefault("where", {})  # only for shared key lists, which it holds
    hit = where_cache.get(id(keys)) if shared else None
    if hit is None or hit[0] is not keys:
        where = [index[key] for key in keys]
        pair = None if len(where) == n_defs and where == list(range(n_defs)) else where
        hit = (keys, pair)
        if shared:
            where_cache[id(keys)] = hit
    return hit[1]


def _row_pairs(row, index: dict, status_codes: list, n_defs: int, witnesses: str, cache: dict) -> dict:
    t = pair_table(row, cache)
    for s in dict.fromkeys(t.status):
        if s not in status_codes:
            status_codes.append(s)
    code_of = {s: k for k, s in enumerate(status_codes)}
    status = np.array(t.status, dtype=object)
    keep_mask = ~t.pruned if witnesses == "all" else (~t.pruned & (status != "clear"))
    keep = np.flatnonzero(keep_mask)
    return {
        "pair": pair_positions(t.keys, t.shared, index, n_defs, cache),
        "distance_mm": rnd_list(to_mm(t.distance)),
        "distance_upper_mm": rnd_list(to_mm(t.distance_upper)),
        "depth_known": t.depth_known.astype(np.int8).tolist(),
        "pruned": t.pruned.astype(np.int8).tolist(),
        "status": [code_of[s] for s in t.status],
        "witness": keep.tolist(),
        "witness_body_mm": rnd_list(to_mm(t.witness_body[keep])),
        "witness_other_mm": rnd_list(to_mm(t.witness_other[keep])),
    }


def _record_fields(i, rank, row, **numbers) -> dict:
    """The fields of one clearance.json row but ``pairs``: the row's own texts, and ``numbers``
    (already converted and rounded: q_deg, limit_excess_deg, limit_joint, clearance_mm, required_mm,
    margin_mm, witness_body_mm, witness_other_mm), so the bulk and the one-row paths share one layout."""
    return {
        "row": i,
        "rank": rank,
        "target": row.target,
        "frame": row.target_frame,
        "branch": row.branch,
        "turn": int(row.turn),
        "twin_of": int(row.twin_of),
        "status": row.status,
        "clearance_status": row.clearance_status,
        "singular": singular_names(row),
        "closest_body": row.closest_body,
        "closest_other": row.closest_other,
        "note": row.note,
        **numbers,
    }


def row_record(i, row, rank, index, status_codes, n_defs, witnesses="findings", cache=None) -> dict:
    """One row of clearance.json (see docs/outputs.md)."""
    joint, excess = worst_limit(row)
    rec = _record_fields(
        i, rank, row,
        q_deg=rnd_list(to_degrees(row.q)),
        limit_excess_deg=rnd_list(to_degrees(row.limit_excess)),
        limit_joint=joint,
        clearance_mm=rnd(to_mm(row.clearance)),
        required_mm=rnd(to_mm(row.required)),
        margin_mm=rnd(to_mm(row.margin)),
        witness_body_mm=rnd_list(to_mm(row.witness_body)),
        witness_other_mm=rnd_list(to_mm(row.witness_other)),
    )
    rec["pairs"] = _row_pairs(row, index, status_codes, n_defs, witnesses, {} if cache is None else cache)
    return rec


ENCODE = json.JSONEncoder(sort_keys=True, separators=(",", ":"), allow_nan=False).encode
"""One compact clearance.json line: ``json.dumps(value, sort_keys=True, separators=(",", ":"),
allow_nan=False)``, with the encoder built once."""

_RESULT_FIELDS = ("distance", "distance_upper", "depth_known", "pruned", "status", "witness_body", "witness_other")


def _memory_key(res) -> tuple:
    """Equal for two ``ClearanceResult`` whose pair arrays are the same memory (a turn variant and its
    twin are views of one configuration's results), so their pairs entry is the same text."""
    out = []
    for name in _RESULT_FIELDS:
        a = np.asarray(getattr(res, name))
        out.append((a.__array_interface__["data"][0], a.shape, a.strides, a.dtype.str))
    return tuple(out)


_ENCODE_NONFINITE = json.JSONEncoder(separators=(",", ":")).encode
"""Like ``ENCODE`` but writing non-finite floats as ``NaN`` / ``Infinity`` / ``-Infinity`` (for numbers
only, where ``list_texts`` then makes them ``null``)."""


def list_texts(values, decimals: int | None = DECIMALS) -> list:
    """``[ENCODE(rnd_list(v, decimals)) for v in values]`` for the rows of a 2-D array, encoded at once.

    ``decimals=None``: integers or booleans, written as they are (``ENCODE(v.tolist())``). One call
    encodes the nested list; its text splits at ``],[`` because the rows hold numbers only.
    """
    values = np.asarray(values)
    if len(values) == 0:
        return []
    if decimals is None and values.ndim == 2 and values.shape[1] and ((values >= 0) & (values <= 9)).all():
        return _digit_texts(values)
    if decimals is None:
        text = ENCODE(values.tolist())
    else:
        rounded = np.round(values.astype(np.float64), decimals) + 0.0
        text = _ENCODE_NONFINITE(rounded.tolist())
        if not np.isfinite(rounded).all():  # rnd_list writes every non-finite entry as null
            text = text.replace("-Infinity", "null").replace("Infinity", "null").replace("NaN", "null")
    return ["[" + part + "]" for part in text[2:-2].split("],[")]


def _digit_texts(values) -> list:
    """``[ENCODE(v.tolist()) for v in values]`` for a 2-D array of the integers 0..9 (flags and status
    codes), built as bytes: ``[d,d,...,d]``, one ASCII digit per value."""
    n, m = values.shape
    text = np.full((n, 2 * m + 1), ord(","), dtype=np.uint8)
    text[:, 0], text[:, -1] = ord("["), ord("]")
    text[:, 1::2] = values.astype(np.uint8) + ord("0")
    line = text.tobytes().decode("ascii")
    width = 2 * m + 1
    return [line[k * width:(k + 1) * width] for k in range(n)]


def _pairs_texts_of(results, index, status_codes, n_defs, witnesses, cache, defs, zone_kinds) -> list:
    """``ENCODE`` of the pairs entries (``_row_pairs``) of ``results`` (ClearanceResult of one
    configuration each, all over the pair definitions ``defs``), every column converted and encoded
    for all results at once. Raises ValueError if the results differ in size."""
    from ..clearance import STATUS_NAMES

    def stacked(name, dtype, shape):
        return np.stack([np.asarray(getattr(r, name), dtype=dtype).reshape(shape) for r in results])

    status = stacked("status", np.int64, -1)
    _add_statuses(status_codes, [status.ravel()])
    code_of = {s: k for k, s in enumerate(status_codes)}
    codes = np.array([code_of.get(s, -1) for s in STATUS_NAMES], dtype=np.int64)[status]
    clear = np.array([s == "clear" for s in STATUS_NAMES], dtype=bool)[status]
    pruned = stacked("pruned", bool, -1)
    keep = ~pruned if witnesses == "all" else (~pruned & ~clear)
    who, which = np.nonzero(keep)  # row-major: each result's kept pairs together, in pair order
    bounds = np.concatenate([[0], np.cumsum(np.bincount(who, minlength=len(results)))]).tolist()
    witness_body = rnd_list(to_mm(stacked("witness_body", np.float64, (-1, 3))[who, which]))
    witness_other = rnd_list(to_mm(stacked("witness_other", np.float64, (-1, 3))[who, which]))
    which = which.tolist()
    # the keys in sorted order, as ENCODE writes them
    head = '{"depth_known":'
    columns = zip(
        list_texts(stacked("depth_known", bool, -1).astype(np.int8), None),
        list_texts(to_mm(stacked("distance", np.float64, -1))),
        list_texts(to_mm(stacked("distance_upper", np.float64, -1))),
        list_texts(pruned.astype(np.int8), None),
        list_texts(codes, None),
    )
    pair = ENCODE(pair_positions(shared_keys(defs, zone_kinds, cache), True, index, n_defs, cache))
    out = []
    for u, (depth_known, distance, upper, pruned_text, status_text) in enumerate(columns):
        a, b = bounds[u], bounds[u + 1]
        if a < b:
            witness = ENCODE(which[a:b]), ENCODE(witness_body[a:b]), ENCODE(witness_other[a:b])
        else:
            witness = "[]", "[]", "[]"
        out.append(
            f'{head}{depth_known},"distance_mm":{distance},"distance_upper_mm":{upper},"pair":{pair},'
            f'"pruned":{pruned_text},"status":{status_text},"witness":{witness[0]},'
            f'"witness_body_mm":{witness[1]},"witness_other_mm":{witness[2]}}}'
        )
    return out


def pairs_texts(rows, index, status_codes, n_defs, witnesses, cache, start: int = 0) -> list:
    """``ENCODE`` of each row's pairs entry (as ``_row_pairs`` makes it), or None for a row whose pairs
    are not a lazy ``run_check`` sequence (or do not stack): those go pair by pair.

    ``rows`` are ``result.rows[start:...]``. A turn variant whose results are the same memory as its
    twin's (``twin_of``, in ``rows``) reuses the twin's text.
    """
    texts = [None] * len(rows)
    groups: dict = {}  # id(defs) -> (defs, zone_kinds, [[result, row positions, memory key or None]])
    slot_of: dict = {}  # row position -> (its group's list, the entry of its result)
    for k, row in enumerate(rows):
        lazy = lazy_pairs(row)
        if lazy is None:
            continue
        defs, res, zone_kinds = lazy
        members = groups.setdefault(id(defs), (defs, zone_kinds, []))[2]
        twin = slot_of.get(int(row.twin_of) - start)
        if twin is not None and twin[0] is members:
            entry = twin[1]
            if entry[2] is None:
                entry[2] = _memory_key(entry[0])
            if entry[2] == _memory_key(res):
                entry[1].append(k)
                slot_of[k] = twin
                continue
        members.append([res, [k], None])
        slot_of[k] = (members, members[-1])
    for defs, zone_kinds, members in groups.values():
        try:
            encoded = _pairs_texts_of([m[0] for m in members], index, status_codes, n_defs, witnesses, cache, defs, zone_kinds)
        except ValueError:  # results of differing sizes
            continue
        for (_, where, _), text in zip(members, encoded):
            for k in where:
                texts[k] = text
    return texts


def _splice(record: dict, key: str, text: str) -> str:
    """``ENCODE(record)`` with ``key`` added, whose value's ``ENCODE`` is ``text`` (not encoded again).

    ``record`` is encoded with ``key`` set to None, then ``"<key>":null`` is replaced: in JSON text
    that can only be the key, since a quote inside a string is escaped and only a key is followed by
    a colon. ``key`` must be a plain key not already in ``record`` (so it occurs exactly once).
    """
    marker = json.dumps(key) + ":"
    return ENCODE({**record, key: None}).replace(marker + "null", marker + text, 1)


def json_row_lines(rows, start, rank, index, status_codes, n_defs, witnesses="findings", cache=None) -> list:
    """The clearance.json lines of ``rows`` (``result.rows[start:start + len(rows)]``; ``rank`` of all
    rows): ``ENCODE(row_record(...))`` of each, with the numbers converted for all rows at once
    (``row_columns``, ``pairs_texts``)."""
    cache = {} if cache is None else cache
    cols = row_columns(rows)
    if cols is None:
        return [
            ENCODE(row_record(start + k, row, rank[start + k], index, status_codes, n_defs, witnesses, cache))
            for k, row in enumerate(rows)
        ]
    texts = pairs_texts(rows, index, status_codes, n_defs, witnesses, cache, start)
    q, excess = rnd_list(cols.q_deg), rnd_list(cols.limit_excess_deg)
    wb, wo = rnd_list(cols.witness_body_mm), rnd_list(cols.witness_other_mm)
    clearance, required, margin = ([rnd(v) for v in a.tolist()] for a in (cols.clearance_mm, cols.required_mm, cols.margin_mm))
    joints = cols.limit_joint.tolist()
    out = []
    for k, row in enumerate(rows):
        i = start + k
        rec = _record_fields(
            i, rank[i], row, q_deg=q[k], limit_excess_deg=excess[k], limit_joint=joints[k],
            clearance_mm=clearance[k], required_mm=required[k], margin_mm=margin[k],
            witness_body_mm=wb[k], witness_other_mm=wo[k],
        )
        if texts[k] is None:
            rec["pairs"] = _row_pairs(row, index, status_codes, n_defs, witnesses, cache)
            out.append(ENCODE(rec))
        else:
            out.append(_splice(rec, "pairs", texts[k]))
    return out


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
        for start, chunk in row_chunks(result.rows):
            lines = json_row_lines(chunk, start, rank, index, status_codes, len(defs), witnesses, cache)
            out.write(",\n".join(lines))
            out.write(",\n" if start + len(chunk) < n else "\n]")
        out.write(after)
        out.write("\n")
    return path
