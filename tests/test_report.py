"""The report files: CSV and JSON contents against the CheckResult, determinism, HTML, PDF, GLB, atomicity."""

from __future__ import annotations

import csv
import datetime as dt
import html
import json
import os
from html.parser import HTMLParser

import numpy as np
import pytest
import trimesh

from envelope import __version__
from envelope.check import CheckResult
from envelope.report import files as report_files
from envelope.report import write_report
from envelope.report.figures import FIGURE_CAPTIONS, VIEWS, clearance_chart, view_figure
from envelope.report.html import HTML_ROW_LIMIT
from envelope.report.summary import cautions
from envelope.report.tables import CSV_COLUMNS
from envelope.units import to_degrees, to_mm

from test_report_support import invented_result

NOW = dt.datetime(2026, 12, 1, 21, 30, 5, tzinfo=dt.timezone.utc)
JSON_KEYS = {
    "format", "format_version", "tool", "units", "verdict", "exit_code", "findings", "counts", "row_count",
    "target_count", "cell", "warnings", "pairs", "pair_status_codes", "witnesses", "motions", "rows",
}
ROW_KEYS = {
    "row", "rank", "target", "frame", "branch", "turn", "twin_of", "status", "clearance_status", "q_deg",
    "limit_excess_deg", "limit_joint", "singular", "clearance_mm", "required_mm", "margin_mm", "closest_body",
    "closest_other", "witness_body_mm", "witness_other_mm", "note", "pairs",
}
PAIR_ARRAYS = {"distance_mm", "distance_upper_mm", "depth_known", "pruned", "status"}
PAIR_KEYS = PAIR_ARRAYS | {"pair", "witness", "witness_body_mm", "witness_other_mm"}


@pytest.fixture(scope="module")
def result():
    return invented_result()


@pytest.fixture(scope="module")
def written(result, tmp_path_factory):
    out = tmp_path_factory.mktemp("report")
    return out, write_report(result, out, now=NOW)


def _strict_json(path):
    def no_constant(name):
        raise ValueError(f"non-standard JSON constant {name}")

    return json.loads(path.read_text(encoding="utf-8"), parse_constant=no_constant)


def test_every_file_is_written_and_no_temporary_file_is_left(written, result):
    out, files = written
    assert {"clearance.csv", "clearance.json", "report.html", "report.pdf"} <= set(files)
    glbs = [n for n in files if n.endswith(".glb")]
    assert len(glbs) == 3  # three targets with a drawable row (the fourth is unreachable)
    assert glbs[0].startswith("worst-1-") and result.rows[result.worst_first()[0]].target in glbs[0]
    assert sorted(p.name for p in out.iterdir()) == sorted(files)
    for path in files.values():
        assert path.stat().st_size > 0


def test_csv_header_and_values_match_the_result(written, result):
    out, _ = written
    with open(out / "clearance.csv", newline="", encoding="utf-8") as fh:
        rows = list(csv.reader(fh))
    assert tuple(rows[0]) == CSV_COLUMNS
    records = [dict(zip(rows[0], r)) for r in rows[1:]]
    assert len(records) == len(result.rows)
    assert sorted(int(r["rank"]) for r in records) == list(range(1, len(result.rows) + 1))
    assert int(records[result.worst_first()[0]]["rank"]) == 1
    for rec, row in zip(records, result.rows):
        assert rec["target"] == row.target and rec["status"] == row.status
        assert rec["singular"] == ";".join(row.singular)
        if np.isfinite(row.clearance):
            assert float(rec["clearance_mm"]) == pytest.approx(to_mm(row.clearance), abs=5e-4)
            assert float(rec["margin_mm"]) == pytest.approx(to_mm(row.margin), abs=5e-4)
            assert float(rec["body_x_mm"]) == pytest.approx(to_mm(row.witness_body[0]), abs=5e-4)
            for j in range(6):
                assert float(rec[f"q{j + 1}_deg"]) == pytest.approx(to_degrees(row.q[j]), abs=5e-4)
                assert len(rec[f"q{j + 1}_deg"].split(".")[1]) == 3  # fixed 3 decimals
        else:
            assert rec["clearance_mm"] == "" and rec["q1_deg"] == ""
        if row.limit_excess.max() > 0:
            j = int(np.argmax(row.limit_excess))
            assert rec["limit_joint"] == str(j + 1)
            assert float(rec["limit_excess_deg"]) == pytest.approx(to_degrees(row.limit_excess[j]), abs=5e-4)
    assert any(r["singular"] == "wrist" for r in records)
    over = [r for r in records if r["branch"] == "over-limit"][0]
    assert over["limit_joint"] == "1" and float(over["limit_excess_deg"]) == pytest.approx(5.0, abs=1e-9)


def test_json_has_the_documented_keys_and_the_pair_tables(written, result):
    out, _ = written
    doc = _strict_json(out / "clearance.json")
    assert set(doc) == JSON_KEYS
    assert doc["tool"] == {"name": "envelope", "version": __version__}
    assert doc["verdict"] == result.verdict and doc["row_count"] == len(result.rows)
    cell = doc["cell"]
    assert cell["inputs"][0]["sha256"] == result.cell.inputs[0][1]
    assert [z["name"] for z in cell["zones"]] == [z.name for z in result.cell.zones]
    assert cell["arm"]["dh"][1]["a_mm"] == 600.0 and cell["arm"]["dh"][1]["offset_deg"] == -90.0
    codes = doc["pair_status_codes"]
    assert doc["witnesses"] == "findings"
    for rec, row in zip(doc["rows"], result.rows):
        assert set(rec) == ROW_KEYS
        pt = rec["pairs"]
        assert set(pt) == PAIR_KEYS
        assert all(len(pt[k]) == len(row.pairs) for k in PAIR_ARRAYS)
        where = list(range(len(doc["pairs"]))) if pt["pair"] is None else pt["pair"]
        assert len(where) == len(row.pairs)
        for k, p in enumerate(row.pairs):
            d = doc["pairs"][where[k]]
            assert (d["body"], d["other"], d["panel"], d["kind"]) == (p.body, p.other, p.panel, p.kind)
            assert d["required_mm"] == pytest.approx(to_mm(p.required), abs=5e-4)
            assert pt["distance_mm"][k] == pytest.approx(to_mm(p.distance), abs=5e-4)
            assert codes[pt["status"][k]] == p.status
        # witness points for exactly the pairs that are not clear (and not pruned)
        assert pt["witness"] == [k for k, p in enumerate(row.pairs) if p.status != "clear" and not p.pruned]
        for j, k in enumerate(pt["witness"]):
            np.testing.assert_allclose(pt["witness_other_mm"][j], to_mm(row.pairs[k].witness_other), atol=5e-4)
            np.testing.assert_allclose(pt["witness_body_mm"][j], to_mm(row.pairs[k].witness_body), atol=5e-4)
    assert any(r["pairs"]["witness"] for r in doc["rows"])
    unreachable = [r for r in doc["rows"] if r["status"] == "unreachable"][0]
    assert unreachable["clearance_mm"] is None and unreachable["q_deg"] == [None] * 6
    assert [r["singular"] for r in doc["rows"]] == [list(r.singular) for r in result.rows]


def test_json_all_witnesses_option(result, tmp_path):
    from envelope.report.tables import write_json

    write_json(result, tmp_path / "c.json", witnesses="all")
    doc = _strict_json(tmp_path / "c.json")
    for rec, row in zip(doc["rows"], result.rows):
        assert len(rec["pairs"]["witness"]) == len(row.pairs)
    with pytest.raises(ValueError, match="witnesses must be one of"):
        write_json(result, tmp_path / "d.json", witnesses="some")


def test_re_running_writes_identical_bytes(result, tmp_path, written):
    out1, files1 = written
    files2 = write_report(result, tmp_path, now=NOW)
    assert set(files1) == set(files2)
    for name in files1:
        assert (out1 / name).read_bytes() == (tmp_path / name).read_bytes(), name


def test_only_html_and_pdf_change_with_the_date(result, tmp_path, written):
    out1, _ = written
    write_report(result, tmp_path, now=NOW + dt.timedelta(days=3))
    for name in ("clearance.csv", "clearance.json"):
        assert (out1 / name).read_bytes() == (tmp_path / name).read_bytes()
    assert "2026-12-04 21:30:05 UTC" in (tmp_path / "report.html").read_text(encoding="utf-8")


class _Refs(HTMLParser):
    def __init__(self):
        super().__init__()
        self.refs, self.imgs = [], 0

    def handle_starttag(self, tag, attrs):
        self.imgs += tag == "img"
        for k, v in attrs:
            if k in ("src", "href", "srcset", "data", "action") and v is not None:
                self.refs.append(v)


def test_html_is_self_contained_with_verdict_and_cautions(written, result):
    out, _ = written
    text = (out / "report.html").read_text(encoding="utf-8")
    parser = _Refs()
    parser.feed(text)
    assert parser.imgs == len(VIEWS) + 1
    assert parser.refs and all(r.startswith("data:image/png;base64,") for r in parser.refs)
    assert "url(" not in text and "@import" not in text and "<script" not in text
    for c in cautions():
        assert html.escape(c, quote=True) in text
    assert f"Verdict: {result.verdict.upper()}" in text
    assert "2026-12-01 21:30:05 UTC" in text
    assert result.cell.inputs[0][1] in text


def test_html_table_is_capped_with_a_pointer_to_the_csv(result, tmp_path):
    many = CheckResult(cell=result.cell, rows=result.rows * 60, warnings=result.warnings)  # 420 rows
    files = write_report(many, tmp_path, now=NOW)
    text = files["report.html"].read_text(encoding="utf-8")
    table = text.split("Clearance table (worst first)")[1]
    assert table.count("<tr>") == HTML_ROW_LIMIT + 1  # header + capped rows
    assert f"The {HTML_ROW_LIMIT} worst of {len(many.rows)} rows" in table and "clearance.csv" in table
    with open(files["clearance.csv"], newline="") as fh:
        assert sum(1 for _ in csv.reader(fh)) == len(many.rows) + 1


def test_pdf_pages_text_and_metadata(written, result):
    pypdf = pytest.importorskip("pypdf")
    out, _ = written
    reader = pypdf.PdfReader(out / "report.pdf")
    pages = [p.extract_text() for p in reader.pages]
    flat = [" ".join(p.split()) for p in pages]
    assert "Verdict: INTRUSION" in flat[0] and "CAUTION" in flat[0]
    assert " ".join(cautions()[0].split())[:60] in " ".join(flat[:2])
    # one page per figure, in order, each holding one image and its caption, then the table
    figure_pages = [k for k, p in enumerate(flat) for name, cap in FIGURE_CAPTIONS.items() if " ".join(cap.split())[:50] in p]
    assert len(figure_pages) == len(FIGURE_CAPTIONS)
    assert figure_pages == list(range(figure_pages[0], figure_pages[0] + len(FIGURE_CAPTIONS)))
    assert all(len(reader.pages[k].images) == 1 for k in figure_pages)
    table_page = figure_pages[-1] + 1
    assert "Clearance table (worst first)" in flat[table_page]
    assert len(reader.pages) == table_page + 1  # seven rows fit on one page
    for row in result.rows:
        assert row.target in flat[table_page]
    meta = reader.metadata
    assert meta.title == "envelope clearance report" and meta.author == "envelope"
    assert "2026-12-01 21:30:05 UTC" in " ".join(flat)


def test_glb_scenes_load_with_every_part(written, result):
    out, files = written
    for name in (n for n in files if n.endswith(".glb")):
        scene = trimesh.load(files[name])
        nodes = set(scene.graph.nodes_geometry)
        assert {f"body:{b.name}" for b in result.cell.bodies} <= nodes
        assert sum(n.startswith("zone:") for n in nodes) == sum(len(z.shapes) for z in result.cell.zones)


def test_stale_scene_files_are_removed_but_others_kept(result, tmp_path):
    (tmp_path / "worst-9-old.glb").write_bytes(b"old")
    (tmp_path / "mine.glb").write_bytes(b"user file")
    write_report(result, tmp_path, now=NOW)
    assert not (tmp_path / "worst-9-old.glb").exists()
    assert (tmp_path / "mine.glb").read_bytes() == b"user file"


def test_interrupted_write_leaves_neither_final_nor_temporary_file(tmp_path, monkeypatch):
    target = tmp_path / "clearance.csv"

    def broken_replace(src, dst):
        raise OSError("disk gone")

    monkeypatch.setattr(report_files.os, "replace", broken_replace)
    with pytest.raises(OSError, match="disk gone"):
        report_files.write_bytes_atomic(target, b"abc")
    with pytest.raises(RuntimeError):
        with report_files.AtomicWriter(tmp_path / "clearance.json") as w:
            w.write("{")
            raise RuntimeError("interrupted")
    assert list(tmp_path.iterdir()) == []


def test_atomic_write_replaces_an_existing_file(tmp_path):
    target = tmp_path / "report.html"
    target.write_text("old")
    report_files.write_text_atomic(target, "new")
    assert target.read_text() == "new"
    assert os.listdir(tmp_path) == ["report.html"]


def test_figures_have_mm_axes_equal_aspect_and_legend(result):
    import matplotlib

    assert matplotlib.get_backend().lower() == "agg"
    for view, (h, v) in VIEWS.items():
        fig = view_figure(result, view)
        ax = fig.axes[0]
        assert ax.get_xlabel().startswith("XYZ"[h]) and "mm" in ax.get_xlabel()
        assert ax.get_ylabel().startswith("XYZ"[v]) and "mm" in ax.get_ylabel()
        assert ax.get_aspect() == 1.0
        labels = [t.get_text() for t in ax.get_legend().get_texts()]
        assert "zone with a finding" in labels and "arm / TCP: intrusion" in labels
    fig = clearance_chart(result)
    ax = fig.axes[0]
    assert "mm" in ax.get_ylabel()
    assert "required clearance" in [t.get_text() for t in ax.get_legend().get_texts()]
    # the markers sit at the rows' clearances, in mm
    ys = sorted(float(y) for c in ax.collections if hasattr(c, "get_offsets") for y in np.asarray(c.get_offsets())[:, 1] if c.get_label() in {r.status for r in result.rows})
    want = sorted(float(to_mm(r.clearance)) for r in result.rows if np.isfinite(r.clearance))
    np.testing.assert_allclose(ys, want)


def test_motions_are_reported_when_present(result, tmp_path):
    import base64
    import dataclasses

    @dataclasses.dataclass(frozen=True)
    class Motion:  # the report only needs plain fields and a status; the real type comes with motions
        name: str
        start: str
        end: str
        status: str
        clearance: float
        samples: np.ndarray

    motion = Motion("pick-to-place", "pick-table", "place-east", "below margin", 0.0123456, np.linspace(0, 1, 3))
    with_motion = dataclasses.replace(result, motions=(motion,))
    files = write_report(with_motion, tmp_path, now=NOW)
    text = files["report.html"].read_text(encoding="utf-8")
    assert "<h2>Motions</h2>" in text and "pick-to-place" in text
    doc = _strict_json(files["clearance.json"])
    assert doc["motions"] == [
        {"name": "pick-to-place", "start": "pick-table", "end": "place-east", "status": "below margin",
         "clearance": 0.012346, "samples": [0.0, 0.5, 1.0]}
    ]
    assert "Motions" in " ".join(p.extract_text() for p in pytest.importorskip("pypdf").PdfReader(files["report.pdf"]).pages)
    # without motions the section is absent
    assert "<h2>Motions</h2>" not in write_report(result, tmp_path / "b", now=NOW)["report.html"].read_text()
    # every embedded picture is a PNG
    for chunk in text.split('src="data:image/png;base64,')[1:]:
        assert base64.b64decode(chunk.split('"', 1)[0])[:8] == b"\x89PNG\r\n\x1a\n"


def test_odd_names_and_an_empty_result(result, tmp_path):
    import dataclasses

    odd = 'cell "Süd", <1>&2'
    row = dataclasses.replace(result.rows[1], target=odd)
    files = write_report(dataclasses.replace(result, rows=(row,)), tmp_path / "odd", now=NOW)
    with open(files["clearance.csv"], newline="", encoding="utf-8") as fh:
        assert list(csv.DictReader(fh))[0]["target"] == odd
    assert html.escape(odd) in files["report.html"].read_text(encoding="utf-8")
    assert [n for n in files if n.endswith(".glb")] == ["worst-1-cell_S_d_1_2.glb"]
    empty = write_report(dataclasses.replace(result, rows=()), tmp_path / "empty", now=NOW)
    doc = _strict_json(empty["clearance.json"])
    assert doc["rows"] == [] and doc["verdict"] == "clear" and doc["pairs"] == []
