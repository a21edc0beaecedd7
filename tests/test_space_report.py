"""The report's space section: only present when ``result.space`` is set."""

from __future__ import annotations

import dataclasses
import datetime as dt
import json
from pathlib import Path

import pytest

from envelope.cell import load_cell
from envelope.check import run_check
from envelope.report import write_report
from envelope.report.spacesection import HIGH_RISK_WARNING, panel_rows, restricted_outlines
from envelope.spacecheck import run_space_check, space_summary

CELL_FILE = Path(__file__).parent / "data" / "space-cell.toml"
NOW = dt.datetime(2026, 1, 2, 3, 4, 5, tzinfo=dt.timezone.utc)


@pytest.fixture(scope="module")
def results():
    cell = load_cell(CELL_FILE)
    check = run_check(cell)
    space = run_space_check(cell, result=check, pitch=0.08, suggest=False)
    return check, dataclasses.replace(check, space=space)


def test_without_a_space_the_json_has_no_space_key(results, tmp_path):
    check, _ = results
    write_report(check, tmp_path, now=NOW)
    assert "space" not in json.loads((tmp_path / "clearance.json").read_text())
    assert "Spaces, fences" not in (tmp_path / "report.html").read_text()


def test_with_a_space_every_file_carries_it(results, tmp_path):
    _, with_space = results
    write_report(with_space, tmp_path, now=NOW)
    data = json.loads((tmp_path / "clearance.json").read_text())
    assert data["space"] == space_summary(with_space.space)
    html = (tmp_path / "report.html").read_text()
    assert "Spaces, fences and protective devices" in html and HIGH_RISK_WARNING in html
    assert "north fence/panel 1" in html and "No suggested axis limits: not searched" in html
    assert "dashed blue line is the outline of the restricted space" in html
    # a re-run writes the same clearance.json bytes
    first = (tmp_path / "clearance.json").read_bytes()
    write_report(with_space, tmp_path, now=NOW)
    assert (tmp_path / "clearance.json").read_bytes() == first


def test_outlines_and_panel_rows(results):
    check, with_space = results
    assert restricted_outlines(check, "plan") == ()
    loops = restricted_outlines(with_space, "plan")
    assert loops and all((loop[0] == loop[-1]).all() for loop in loops)  # closed, mm
    assert restricted_outlines(with_space, "elevation-yz") == ()
    (row,) = panel_rows(with_space.space)
    assert row[0] == "north fence/panel 1" and row[9] == "fail" and row[11] == "U"
