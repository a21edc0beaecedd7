"""write_report with jobs >= 2: clearance.json written by a forked process, the same bytes."""

from __future__ import annotations

import pytest

import envelope.report as report
from test_report_support import invented_result


@pytest.fixture(scope="module")
def result():
    return invented_result()


FIXED = dict(now=__import__("datetime").datetime(2026, 1, 2, 3, 4, 5, tzinfo=__import__("datetime").timezone.utc))


@pytest.fixture(scope="module")
def one(result, tmp_path_factory):
    return report.write_report(result, tmp_path_factory.mktemp("one"), **FIXED)


def test_two_jobs_write_the_same_files(result, one, tmp_path):
    two = report.write_report(result, tmp_path / "two", jobs=2, **FIXED)
    assert sorted(one) == sorted(two)
    for name in ("clearance.csv", "clearance.json", "report.html"):
        assert one[name].read_bytes() == two[name].read_bytes(), name
    assert not [p for p in (tmp_path / "two").iterdir() if p.name.startswith(".")]  # no temporary left


def test_a_failing_json_process_is_replaced_by_this_one(result, one, tmp_path, monkeypatch, capfd):
    def boom(result, path):
        raise RuntimeError("simulated failure in the JSON process")

    monkeypatch.setattr(report, "_json_child", boom)
    files = report.write_report(result, tmp_path / "out", jobs=2, **FIXED)
    assert files["clearance.json"].read_bytes() == one["clearance.json"].read_bytes()
    assert "simulated failure" in capfd.readouterr().err
