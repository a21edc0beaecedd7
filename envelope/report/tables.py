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
from itertools import chain, repeat
from operator import attrgetter

import numpy as np

from ..units import to_degrees, to_mm
from . import textnum
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


def _stacked(items, name: str, dtype, shape: tuple | None = None) -> np.ndarray:
    """``np.stack([np.asarray(getattr(x, name), dtype=dtype).reshape(shape) for x in items])`` (no
    reshape if ``shape`` is None), converted by numpy in one call where the arrays share one shape."""
    arrays = [getattr(x, name) for x in items]
    try:
        out = np.array(arrays, dtype=dtype)  # ValueError for arrays of differing shapes
        if out.ndim == 0 or len(out) != len(arrays) or not len(arrays):
            raise ValueError("not one array per item")
    except (ValueError, TypeError):  # shapes that differ but may reshape alike: one by one
        return np.stack([np.asarray(a, dtype=dtype) if shape is None else np.asarray(a, dtype=dtype).reshape(shape) for a in arrays])
    return out if shape is None else out.reshape(len(arrays), *shape)


def _stack(rows, name: str) -> np.ndarray:
    return _stacked(rows, name, np.float64)


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
        scalars = [np.fromiter(map(float, map(attrgetter(a), rows)), np.float64, len(rows)) for a in ("clearance", "required", "margin")]
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


class _CsvCells(dict):
    """``cells[value]``: the text the ``csv.writer`` of ``csv_text`` writes for the cell ``value`` (a
    str), found by writing it once and kept. Quoting (``QUOTE_MINIMAL``) is decided cell by cell, so a
    row's text is its cells' texts joined by ``,``. ``cells.each(values)``: of any values."""

    def __init__(self):
        super().__init__()
        self._buf = io.StringIO()
        self._writer = csv.writer(self._buf, lineterminator="\n")

    def written(self, value) -> str:
        self._buf.seek(0)
        self._buf.truncate()
        self._writer.writerow([value, ""])  # "<cell>,\n": the second, empty cell is written as nothing
        return self._buf.getvalue()[:-2]

    def __missing__(self, key: str) -> str:
        text = self[key] = self.written(key)
        return text

    def each(self, values) -> list:
        """The cell text of each of ``values``."""
        return [self[v] if type(v) is str else str(v) if type(v) is int else self.written(v) for v in values]


def _fixed_rows(values) -> list:
    """``",".join(fmt_list(row))`` of each row of ``values`` (2-D; 1-D: one value a row)."""
    texts = textnum.row_texts(values, DECIMALS, "fixed", brackets=False)
    if texts is None:  # a number beyond the compiled formatter's range
        values = np.asarray(values, dtype=np.float64)
        values = values.reshape(len(values), -1)
        flat, m = fmt_list(values), values.shape[1]
        texts = [",".join(flat[k * m:(k + 1) * m]) for k in range(len(values))]
    return texts


def csv_target_text(rows, start: int, rank, cells: _CsvCells | None = None) -> str | None:
    """The lines of clearance.csv of ``rows`` (``result.rows[start:start + len(rows)]``; ``rank`` of all
    rows), each with its ``\\n``, as ``csv_target_rows`` then the ``csv.writer`` of ``csv_text`` make
    them, with the numbers of all rows formatted in one compiled call; None where ``row_columns``
    gives none (or a number block is empty), for the caller to write the cells of ``csv_target_rows``.
    ``cells`` keeps the texts of string cells across calls."""
    cols = row_columns(rows)
    if cols is None or cols.q_deg.shape[1] == 0 or cols.witness_body_mm.shape[1] == 0:
        return None
    cells = _CsvCells() if cells is None else cells
    n = len(rows)

    def texts(attr):
        return cells.each(map(attrgetter(attr), rows))

    joints = cols.limit_joint.tolist()
    excess = _fixed_rows(cols.limit_worst_deg)
    tail = ",".join(cells.each(("target", *([""] * (len(CSV_MOTION_COLUMNS) - 1))))) + "\n"
    columns = (
        list(map(str, range(start, start + n))),
        cells.each(rank[start:start + n]),
        texts("target"),
        texts("target_frame"),
        texts("branch"),
        texts("turn"),
        texts("twin_of"),
        texts("status"),
        texts("clearance_status"),
        _fixed_rows(cols.q_deg),
        cells.each(j or "" for j in joints),
        [e if j else "" for e, j in zip(excess, joints)],
        _singular_texts(rows, lambda names: cells.each([";".join(names)])[0]),
        _fixed_rows(np.stack([cols.clearance_mm, cols.required_mm, cols.margin_mm], axis=1)),
        texts("closest_body"),
        texts("closest_other"),
        _fixed_rows(np.concatenate([cols.witness_body_mm, cols.witness_other_mm], axis=1)),
        texts("note"),
    )
    parts = []
    for column in columns:
        parts += [column, repeat(",")]
    parts[-1] = repeat("," + tail)
    return "".join(chain.from_iterable(zip(*parts)))


def csv_text(result) -> str:
    """clearance.csv as text: one row per target x branch, in ``result.rows`` order, then one row per
    motion (``envelope.sweep.MotionRow``), in ``result.motions`` order."""
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(CSV_COLUMNS)
    rank = ranks(result)
    cells = _CsvCells()
    for start, chunk in row_chunks(result.rows):
        text = csv_target_text(chunk, start, rank, cells)
        if text is None:
            w.writerows(csv_target_rows(chunk, start, rank))
        else:
            buf.write(text)
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
    try:
        defs, res, zone_kinds = pairs.defs, pairs.result, pairs.zone_kinds
    except AttributeError:
        return None
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
    from ..clearance import STATUS_NAMES

    defs, index = [], {}
    cache = {} if cache is None else cache
    seen_shared: dict = {}  # id -> the shared key list itself (held, so the id stays unique)
    pending: list = []  # status code arrays of lazy rows not yet added to ``statuses``
    # a lazy row can only add a status name that ``statuses`` lacks (an invalid code fails when the
    # row is written): with every name there, its codes need no reading
    collect = statuses is not None and not all(name in statuses for name in STATUS_NAMES)
    last_defs = None  # the shared definitions of the previous lazy row (the usual case: all the same)
    for row in result.rows:
        lazy = lazy_pairs(row)
        if lazy is not None:
            if collect:
                pending.append(np.asarray(lazy[1].status, dtype=np.int64).reshape(-1))
                if len(pending) >= BULK_ROWS:
                    _add_statuses(statuses, pending)
            if lazy[0] is last_defs:
                continue  # the same shared definitions as the row before
            last_defs = lazy[0]
            keys = shared_keys(lazy[0], lazy[2], cache)
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

        codes = np.concatenate(pending)
        n = len(STATUS_NAMES)
        known = all(name in statuses for name in STATUS_NAMES)  # the usual case: nothing to add
        if not (known and (codes.size == 0 or (codes.min() >= -n and codes.max() < n))):
            codes, first = np.unique(codes, return_index=True)
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


_ROW_TEXT_FIELDS = (
    ("target", "target"),
    ("frame", "target_frame"),
    ("branch", "branch"),
    ("status", "status"),
    ("clearance_status", "clearance_status"),
    ("closest_body", "closest_body"),
    ("closest_other", "closest_other"),
    ("note", "note"),
)
"""``(key, BranchRow attribute)`` of the fields of a clearance.json row written as they are."""
_ROW_INT_FIELDS = (("turn", "turn"), ("twin_of", "twin_of"))
"""``(key, BranchRow attribute)`` of the fields written as ``int(...)``."""
_ROW_NUMBER_FIELDS = (
    "q_deg", "limit_excess_deg", "limit_joint", "clearance_mm", "required_mm", "margin_mm", "witness_body_mm", "witness_other_mm",
)
"""The keys of the numbers of a row, converted and rounded by the caller of ``_record_fields``."""


def _record_fields(i, rank, row, **numbers) -> dict:
    """The fields of one clearance.json row but ``pairs``: the row's own texts, and ``numbers``
    (already converted and rounded: ``_ROW_NUMBER_FIELDS``), so the bulk and the one-row paths share
    one layout (``_ROW_TEXT_FIELDS``, ``_ROW_INT_FIELDS``; ``json_row_lines``)."""
    rec = {"row": i, "rank": rank}
    rec.update({key: getattr(row, attr) for key, attr in _ROW_TEXT_FIELDS})
    rec.update({key: int(getattr(row, attr)) for key, attr in _ROW_INT_FIELDS})
    rec["singular"] = singular_names(row)
    rec.update(numbers)
    return rec


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

def _same_as_twin(twins, arrays) -> np.ndarray:
    """``rep[u]``: the first of the results whose arrays are bitwise equal to result u's, following
    ``twins[u]`` (an earlier result, or -1) while they are; ``arrays`` (R, ...) each, stacked."""
    twins = np.asarray(twins, dtype=np.int64)
    rep = np.arange(len(twins))
    k = np.flatnonzero(twins >= 0)
    if len(k) == 0:
        return rep
    t = twins[k]
    same = textnum.equal_rows(arrays, k, t)
    rep[k[same]] = t[same]
    while True:  # twins are earlier rows: chains end
        nxt = rep[rep]
        if np.array_equal(nxt, rep):
            return rep
        rep = nxt


def _pair_arrays_of(results, twins, index, status_codes, n_defs, witnesses, cache, defs, zone_kinds) -> tuple:
    """``(arrays, rep, unique)``: the pairs entries (``_row_pairs``) of ``results`` (ClearanceResult of
    one configuration each, all over the pair definitions ``defs``), every column converted for all
    results at once, as ``textnum.PairArrays`` of the results ``unique``; ``rep[u]``: the result whose
    entry result u's is. ``twins[u]``: an earlier result that is likely the same (a turn variant's
    twin) or -1; where it is bitwise the same, it is not written again. Raises ValueError if the
    results differ in size or a number is beyond the compiled formatter's range."""
    from ..clearance import STATUS_NAMES

    status = _stacked(results, "status", np.int64, (-1,))
    _add_statuses(status_codes, [status.ravel()])
    code_of = {s: k for k, s in enumerate(status_codes)}
    codes = np.array([code_of.get(s, -1) for s in STATUS_NAMES], dtype=np.int64)[status]
    clear = np.array([s == "clear" for s in STATUS_NAMES], dtype=bool)[status]
    pruned = _stacked(results, "pruned", bool, (-1,))
    depth_known = _stacked(results, "depth_known", bool, (-1,))
    distance = _stacked(results, "distance", np.float64, (-1,))
    distance_upper = _stacked(results, "distance_upper", np.float64, (-1,))
    witness_body = _stacked(results, "witness_body", np.float64, (-1, 3))
    witness_other = _stacked(results, "witness_other", np.float64, (-1, 3))
    keep = ~pruned if witnesses == "all" else (~pruned & ~clear)
    rep = _same_as_twin(twins, (status, pruned, depth_known, distance, distance_upper, witness_body, witness_other))
    unique = np.flatnonzero(rep == np.arange(len(rep)))
    keep = keep[unique]
    who, which = np.nonzero(keep)  # row-major: each result's kept pairs together, in pair order
    at = unique[who]
    pair = ENCODE(pair_positions(shared_keys(defs, zone_kinds, cache), True, index, n_defs, cache))
    arrays = textnum.PairArrays(
        depth_known[unique], to_mm(distance[unique]), to_mm(distance_upper[unique]), pruned[unique], codes[unique],
        keep, to_mm(witness_body[at, which]), to_mm(witness_other[at, which]), pair, DECIMALS,
    )
    if not (arrays.ok and arrays.in_range()):
        raise ValueError("a pair number beyond the compiled formatter's range")
    return arrays, rep, unique


def pair_entries(rows, index, status_codes, n_defs, witnesses, cache, start: int = 0) -> tuple:
    """``(arrays, entry_of, copy_of, extra)``, the pairs entry of each row (as ``_row_pairs`` makes
    it) for ``textnum.fill_pairs``: row k's is result ``entry_of[k]`` of ``arrays`` (a
    ``textnum.PairArrays``, or None), else the same as row ``copy_of[k]``'s (an earlier row), else
    ``extra[k]`` (``ENCODE`` of the entry, ASCII bytes), which is None for a row whose pairs are not a
    lazy ``run_check`` sequence (or do not stack, or hold a number beyond the compiled formatter's
    range): those go pair by pair.

    ``rows`` are ``result.rows[start:...]``. A turn variant whose results are bitwise those of its twin
    (``twin_of``, in ``rows``) copies the twin's entry.
    """
    n = len(rows)
    entry_of, copy_of, extra = np.full(n, -1, dtype=np.int64), np.full(n, -1, dtype=np.int64), [None] * n
    groups: dict = {}  # id(defs) -> (defs, zone_kinds, row positions, results, twin of each result)
    slot_of: dict = {}  # row position -> (its group, the position of its result there)
    lazies = list(map(lazy_pairs, rows))
    first = lazies[0] if lazies else None
    if first is not None and all(lazy is not None and lazy[0] is first[0] for lazy in lazies):
        # the usual case, every row over the same definitions: one group, twins found at once
        twin = np.fromiter(map(int, map(attrgetter("twin_of"), rows)), np.int64, n) - start
        k = np.arange(n)
        twins = np.where((twin >= 0) & (twin < k), twin, -1)  # earlier rows only
        groups[id(first[0])] = (first[0], first[2], k, [lazy[1] for lazy in lazies], twins)
        lazies = ()
    for k, (row, lazy) in enumerate(zip(rows, lazies)):
        if lazy is None:
            continue
        defs, res, zone_kinds = lazy
        group = groups.get(id(defs))
        if group is None:
            group = groups[id(defs)] = (defs, zone_kinds, [], [], [])
        twin = slot_of.get(int(row.twin_of) - start)
        group[4].append(twin[1] if twin is not None and twin[0] is group else -1)
        slot_of[k] = (group, len(group[2]))
        group[2].append(k)
        group[3].append(res)
    main = None
    for defs, zone_kinds, where, results, twins in groups.values():
        try:
            arrays, rep, unique = _pair_arrays_of(results, twins, index, status_codes, n_defs, witnesses, cache, defs, zone_kinds)
        except ValueError:  # results of differing sizes, or out of range: pair by pair
            continue
        where = np.asarray(where, dtype=np.int64)
        if main is None:  # written into place
            main = arrays
            entry_of[where[unique]] = np.arange(len(unique))
            copied = rep != np.arange(len(rep))
            copy_of[where[copied]] = where[rep[copied]]
        else:  # rows over other definitions (not from one run_check): given as text
            entries = arrays.entries()
            slot = np.empty(len(rep), dtype=np.int64)
            slot[unique] = np.arange(len(unique))
            for k, j in zip(where.tolist(), slot[rep].tolist()):
                extra[k] = entries[j]
    return main, entry_of, copy_of, extra


class _JsonTexts(dict):
    """``texts[s]``: ``ENCODE(s)`` of a str ``s``, kept."""

    def __missing__(self, key: str) -> str:
        text = self[key] = ENCODE(key)
        return text

    def each(self, values) -> list:
        """``[ENCODE(v) for v in values]``."""
        return [self[v] if type(v) is str else str(v) if type(v) is int else ENCODE(v) for v in values]


def _json_lists(values) -> list:
    """``ENCODE(rnd_list(row))`` of each row of the 2-D ``values``."""
    texts = textnum.row_texts(values, DECIMALS, "numpy")
    return [ENCODE(v) for v in rnd_list(values)] if texts is None else texts


def _json_numbers(values) -> list:
    """``ENCODE(rnd(v))`` of each value of the 1-D ``values``."""
    texts = textnum.row_texts(values, DECIMALS, "python", brackets=False)
    return [ENCODE(rnd(v)) for v in np.asarray(values).tolist()] if texts is None else texts


def _singular_texts(rows, encode) -> list:
    """``encode(singular_names(row))`` of each row, kept for equal ``singular`` tuples."""
    seen: dict = {}
    out = []
    for flags in map(attrgetter("singular"), rows):
        try:
            key = tuple(flags or ())
            text = seen.get(key)
            if text is None:
                text = seen[key] = encode(singular_names(_Flags(flags)))
        except TypeError:  # unhashable flags
            text = encode(singular_names(_Flags(flags)))
        out.append(text)
    return out


@dataclass(frozen=True)
class _Flags:
    """A stand-in row with only the ``singular`` flags (for ``summary.singular_names``)."""

    singular: object


_LINE_KEYS = tuple(sorted(("row", "rank", *(k for k, _ in _ROW_TEXT_FIELDS), *(k for k, _ in _ROW_INT_FIELDS), "singular", *_ROW_NUMBER_FIELDS, "pairs")))
"""The keys of a clearance.json row, in the order ``ENCODE`` (``sort_keys``) writes them."""
_LINE_PIECES = tuple("{" * (k == 0) + "," * (k > 0) + ENCODE(key) + ":" for k, key in enumerate(_LINE_KEYS)) + ("}",)
"""The literal text of a row line: piece k, then the text of the value of ``_LINE_KEYS[k]``, ..., ``}``."""


def json_rows_text(rows, start, rank, index, status_codes, n_defs, witnesses="findings", cache=None) -> str:
    """The clearance.json lines of ``rows`` (``result.rows[start:start + len(rows)]``; ``rank`` of all
    rows) joined by ``,\\n``: ``ENCODE(row_record(...))`` of each, with the numbers converted and written
    for all rows at once (``row_columns``, ``pair_entries``, ``textnum``), and each line put together
    from the texts of its values (the keys in ``ENCODE``'s sorted order, ``_LINE_PIECES``); the pairs
    entries, the bulk of the text, are written into place by ``textnum.fill_pairs``."""
    cache = {} if cache is None else cache
    cols = row_columns(rows)
    if cols is None:
        return ",\n".join(
            ENCODE(row_record(start + k, row, rank[start + k], index, status_codes, n_defs, witnesses, cache))
            for k, row in enumerate(rows)
        )
    arrays, entry_of, copy_of, extra = pair_entries(rows, index, status_codes, n_defs, witnesses, cache, start)
    for k in np.flatnonzero((entry_of < 0) & (copy_of < 0)).tolist():  # in row order, as the one-row path adds statuses
        if extra[k] is None:
            extra[k] = ENCODE(_row_pairs(rows[k], index, status_codes, n_defs, witnesses, cache)).encode("ascii")
    strings = cache.setdefault("json_texts", _JsonTexts())
    n = len(rows)
    columns = {
        "row": list(map(str, range(start, start + n))),
        "rank": strings.each(rank[start:start + n]),
        **{key: strings.each(map(attrgetter(attr), rows)) for key, attr in _ROW_TEXT_FIELDS},
        **{key: list(map(str, map(int, map(attrgetter(attr), rows)))) for key, attr in _ROW_INT_FIELDS},
        "singular": _singular_texts(rows, ENCODE),
        "q_deg": _json_lists(cols.q_deg),
        "limit_excess_deg": _json_lists(cols.limit_excess_deg),
        "limit_joint": list(map(str, cols.limit_joint.tolist())),
        "clearance_mm": _json_numbers(cols.clearance_mm),
        "required_mm": _json_numbers(cols.required_mm),
        "margin_mm": _json_numbers(cols.margin_mm),
        "witness_body_mm": _json_lists(cols.witness_body_mm),
        "witness_other_mm": _json_lists(cols.witness_other_mm),
        "pairs": repeat("\0"),  # a gap for the entry (JSON text holds no raw NUL)
    }
    parts = []
    for piece, key in zip(_LINE_PIECES, _LINE_KEYS):
        parts += [repeat(piece), columns[key]]
    parts += [repeat(_LINE_PIECES[-1] + ",\n")]
    lines = "".join(chain.from_iterable(zip(*parts)))[:-2]
    text = textnum.fill_pairs(lines, entry_of, copy_of, extra, arrays)
    if text is None:  # not expected: pair_entries checked the range
        raise ValueError("a pair number beyond the compiled formatter's range")
    return text


def json_row_lines(rows, start, rank, index, status_codes, n_defs, witnesses="findings", cache=None) -> list:
    """The clearance.json lines of ``rows`` (``result.rows[start:start + len(rows)]``; ``rank`` of all
    rows): ``ENCODE(row_record(...))`` of each (``json_rows_text``, split: no line holds a newline)."""
    return json_rows_text(rows, start, rank, index, status_codes, n_defs, witnesses, cache).split(",\n") if len(rows) else []


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
            out.write(json_rows_text(chunk, start, rank, index, status_codes, len(defs), witnesses, cache))
            out.write(",\n" if start + len(chunk) < n else "\n]")
        out.write(after)
        out.write("\n")
    return path
