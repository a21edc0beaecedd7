"""The report of a real ``run_check`` result: the lazy per-pair tables read fast give the same file as
the same pairs materialised one by one, and the files agree with the engine's arrays."""

from __future__ import annotations

import csv
import dataclasses
import datetime as dt
import json

import numpy as np
import pytest

from envelope.check import run_check
from envelope.report import write_report
from envelope.report.tables import pair_table, write_json
from envelope.units import to_mm

from test_report_support import invented_cell

NOW = dt.datetime(2026, 12, 1, 12, 0, tzinfo=dt.timezone.utc)


@pytest.fixture(scope="module")
def checked():
    return run_check(invented_cell())


def test_fast_pair_path_equals_the_pair_by_pair_path(checked, tmp_path):
    rows = checked.rows
    assert any(hasattr(r.pairs, "result") for r in rows), "run_check is expected to return lazy pair tables"
    materialised = dataclasses.replace(checked, rows=tuple(dataclasses.replace(r, pairs=tuple(r.pairs)) for r in rows))
    for witnesses in ("findings", "all"):
        write_json(checked, tmp_path / "fast.json", witnesses=witnesses)
        write_json(materialised, tmp_path / "slow.json", witnesses=witnesses)
        assert (tmp_path / "fast.json").read_bytes() == (tmp_path / "slow.json").read_bytes()
    t = pair_table(rows[0])
    assert t.shared and len(t.keys) == len(rows[0].pairs)


def test_report_of_a_real_check(checked, tmp_path):
    files = write_report(checked, tmp_path, now=NOW)
    with open(files["clearance.csv"], newline="") as fh:
        records = list(csv.DictReader(fh))
    assert len(records) == len(checked.rows)
    for rec, row in zip(records, checked.rows):
        assert rec["status"] == row.status and rec["closest_other"] == row.closest_other
        if np.isfinite(row.clearance):
            assert float(rec["clearance_mm"]) == pytest.approx(to_mm(row.clearance), abs=5e-4)
    doc = json.loads(files["clearance.json"].read_text())
    assert doc["verdict"] == checked.verdict
    # the closest pair of every computed row is, in the JSON pair table, the entry with the smallest margin
    for rec, row in zip(doc["rows"], checked.rows):
        if not row.pairs or "depth unknown" in row.note:
            continue  # an overlap of unknown depth ranks first whatever its recorded distance
        where = range(len(doc["pairs"])) if rec["pairs"]["pair"] is None else rec["pairs"]["pair"]
        margins = [d - doc["pairs"][k]["required_mm"] for d, k in zip(rec["pairs"]["distance_mm"], where)]
        assert min(margins) == pytest.approx(rec["margin_mm"], abs=2e-3)
    assert any(n.endswith(".glb") for n in files)
