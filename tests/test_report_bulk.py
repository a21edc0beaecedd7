"""The table writers' bulk path (many rows converted at once) writes the same bytes as the row-by-row,
pair-by-pair path, on a real ``run_check`` result with turn variants, rows outside limits and
unreachable targets; and its vectorised helpers agree with the one-value functions they replace."""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest

from envelope.cell import load_cell
from envelope.check import run_check
from envelope.demo import demo_cell_path
from envelope.report import tables
from envelope.report.summary import fmt, fmt_list, worst_limit


@pytest.fixture(scope="module")
def checked():
    return run_check(load_cell(demo_cell_path()), programs=False)


def _files(result, folder, witnesses):
    folder.mkdir(exist_ok=True)
    tables.write_csv(result, folder / "clearance.csv")
    tables.write_json(result, folder / "clearance.json", witnesses=witnesses)
    return (folder / "clearance.csv").read_bytes(), (folder / "clearance.json").read_bytes()


def _pair_by_pair(result):
    """The same result with every row's pairs materialised as plain ``PairRow`` tuples."""
    return dataclasses.replace(result, rows=tuple(dataclasses.replace(r, pairs=tuple(r.pairs)) for r in result.rows))


def test_the_demo_check_has_every_kind_of_row(checked):
    statuses = {r.status for r in checked.rows}
    assert {"outside limits", "unreachable", "intrusion", "clear"} <= statuses
    assert any(r.twin_of >= 0 for r in checked.rows), "expected turn variants"
    assert any(hasattr(r.pairs, "result") for r in checked.rows), "run_check is expected to return lazy pair tables"


@pytest.mark.parametrize("witnesses", tables.WITNESSES)
def test_bulk_path_writes_the_same_bytes_as_row_by_row(checked, tmp_path, monkeypatch, witnesses):
    fast = _files(checked, tmp_path / "fast", witnesses)
    # small chunks: turn variants and their twins fall into different chunks
    monkeypatch.setattr(tables, "BULK_ROWS", 7)
    assert _files(checked, tmp_path / "chunks", witnesses) == fast
    # rows of both kinds in one chunk: every third row read pair by pair
    mixed = dataclasses.replace(
        checked, rows=tuple(dataclasses.replace(r, pairs=tuple(r.pairs)) if i % 3 == 0 else r for i, r in enumerate(checked.rows))
    )
    assert _files(mixed, tmp_path / "mixed", witnesses) == fast
    # the reference: no bulk conversion at all, every pair read one by one
    monkeypatch.setattr(tables, "row_columns", lambda rows: None)
    assert _files(_pair_by_pair(checked), tmp_path / "slow", witnesses) == fast


def test_fmt_list_matches_fmt():
    rng = np.random.default_rng(3)
    values = np.concatenate(
        [[np.nan, np.inf, -np.inf, 0.0, -0.0, -0.0004, 0.0005, -0.0005, 0.49999, -2.5, 1e20, -1e-300], rng.normal(0, 50, 200)]
    )
    for decimals in (0, 3, 4):
        assert fmt_list(values, decimals) == [fmt(v, decimals) for v in values]
    assert fmt_list(values.reshape(-1, 2)) == [fmt(v) for v in values]


def test_worst_limits_matches_worst_limit_row_by_row():
    rng = np.random.default_rng(5)
    excess = np.where(rng.random((300, 6)) < 0.6, 0.0, rng.normal(0, 0.3, (300, 6)))
    excess[rng.random((300, 6)) < 0.1] = np.nan
    excess[:4] = [[np.nan] * 6, [0.2, 0.2, 0, 0, 0, 0], [np.inf, 0.1, 0, 0, 0, 0], [np.inf, np.nan, -np.inf, np.inf, 0, 0]]
    joint, worst_deg = tables.worst_limits(excess)
    for k, row_excess in enumerate(excess):
        row = type("Row", (), {"limit_excess": row_excess})()
        assert (int(joint[k]), float(worst_deg[k])) == worst_limit(row), f"row {k}: {row_excess}"
