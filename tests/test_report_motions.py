"""Motion rows in every report file: clearance.csv / clearance.json, the HTML and PDF Motions section,
the clearance-along-the-move chart, the motion views and the motion-<k>-*.glb scenes.

The demo cell (invented) is checked once for the module; its program gives 12 motion rows. A small
invented cell (tests/test_report_support.py) gives real sweeps of two joint moves, and hand-made
MotionRow values cover the ordering and the empty / non-finite cases.
"""

from __future__ import annotations

import csv
import dataclasses
import datetime as dt
import json
import math
from pathlib import Path

import numpy as np
import pytest
import trimesh

from envelope.cell import load_cell
from envelope.check import CheckResult, run_check, run_motions
from envelope.report import MOTION_GLB_PATTERN, motion_glb_names, write_report
from envelope.report.figures import MOTION_CAPTIONS, motion_chart, motion_figures, view_figure
from envelope.report.motions import CHART_MOVES, MOTION_GLB, drawn_motions, worst_moves, worst_motions
from envelope.report.tables import CSV_COLUMNS, csv_text, write_json
from envelope.scene import STATUS_RGBA, motion_scene
from envelope.sweep import MotionRow

from test_report_support import invented_cell, invented_result, target_configurations

DEMO = Path(__file__).resolve().parents[1] / "envelope" / "demo" / "cell.toml"
NOW = dt.datetime(2026, 12, 1, 23, 0, 0, tzinfo=dt.timezone.utc)
MM_PER_M = 1000.0  # SI definition of the millimetre
DEG_PER_RAD = 180.0 / math.pi
SEVERITY = ("intrusion", "below margin", "outside limits", "unreachable", "clear")  # docs/motions.md


def _strict_json(path):
    def bad(token):
        raise ValueError(f"non-standard JSON number {token}")

    return json.loads(Path(path).read_text(encoding="utf-8"), parse_constant=bad)


def _read_csv(path):
    with open(path, newline="", encoding="utf-8") as fh:
        return list(csv.DictReader(fh))


def _num(text):
    return float("nan") if text == "" else float(text)


def _standard_dh_tcp(cell, q) -> np.ndarray:
    """The TCP position (m, cell frame) by the standard DH product written out here, independently of
    envelope.kinematics: A_i = Rot_z(theta) Trans_z(d) Trans_x(a) Rot_x(alpha) (Spong, Hutchinson &
    Vidyasagar, Robot Modeling and Control, 2006, eq. 3.10)."""
    arm = cell.arm
    assert arm.convention == "standard"
    T = np.asarray(cell.world_from_base, dtype=np.float64).copy()
    for j in range(6):
        th, d, a, al = q[j] + arm.offset[j], arm.d[j], arm.a[j], arm.alpha[j]
        ct, st, ca, sa = math.cos(th), math.sin(th), math.cos(al), math.sin(al)
        T = T @ np.array([[ct, -st * ca, st * sa, a * ct], [st, ct * ca, -ct * sa, a * st], [0, sa, ca, d], [0, 0, 0, 1.0]])
    return (T @ cell.tool.flange_from_tcp)[:3, 3]


@pytest.fixture(scope="module")
def demo():
    return run_check(load_cell(DEMO))


@pytest.fixture(scope="module")
def sweep_only(demo):
    return CheckResult(cell=demo.cell, rows=(), motions=demo.motions, warnings=tuple(demo.cell.warnings))


@pytest.fixture(scope="module")
def sweep_report(sweep_only, tmp_path_factory):
    out = tmp_path_factory.mktemp("sweep")
    (out / "motion-9-stale-1.glb").write_bytes(b"old")  # a stale scene of an earlier run
    (out / "motion-notes.txt").write_text("kept")  # not a scene name: left alone
    return out, write_report(sweep_only, out, now=NOW)


def _motion(status="clear", clearance=0.05, required=0.02, program="p", move=2, branch="b", q=None, profile=None, **kw):
    q = np.zeros(6) if q is None else np.asarray(q, dtype=np.float64)
    values = dict(
        program=program, move=move, from_target="a", to_target="b", motion="joint", branch=branch, end_branch=branch,
        status=status, min_clearance=clearance, required=required, gap=0.0, allowance=0.01, where=0.5, q_at_min=q,
        closest_body="link1", closest_other="table", first_violation=float("nan"), limit_violation=float("nan"),
        peak_speed_ratio=1.0, singular_crossed="", queries=10, ik_samples=0, path_deviation=0.0,
        max_displacement=0.1, uniform_samples=101, q_start=np.zeros(6), q_end=np.zeros(6),
    )
    values.update(kw)
    if profile is not None:
        values["profile"] = profile
    return MotionRow(**values)


# ---------------------------------------------------------------------- ordering


def test_motions_rank_by_status_then_margin_with_nan_last():
    cell = invented_cell()
    motions = (
        _motion("clear", 0.50, 0.02, move=2),  # margin 0.48
        _motion("below margin", 0.03, 0.05, move=3),  # margin -0.02
        _motion("clear", 0.10, 0.02, move=4),  # margin 0.08
        _motion("unreachable", float("nan"), float("nan"), move=5, q=np.full(6, np.nan)),
        _motion("intrusion", -0.01, 0.05, move=6),
        _motion("below margin", 0.04, 0.05, move=3, branch="c"),  # margin -0.01: same move as index 1
    )
    result = CheckResult(cell=cell, rows=(), motions=motions)
    assert worst_motions(result) == [4, 1, 5, 3, 2, 0]
    assert worst_moves(result) == [[4], [1, 5], [3], [2], [0]]  # a move's branches stay together
    assert drawn_motions(result) == [4, 1, 2]  # the unreachable move has no configuration: skipped
    assert drawn_motions(result, 2) == [4, 1] and drawn_motions(result, 5) == [4, 1, 2, 0]


# ---------------------------------------------------------------------- clearance.csv


def test_csv_motion_rows_follow_the_target_rows_and_match_the_motion_rows(demo):
    rows = list(csv.DictReader(csv_text(demo).splitlines()))
    assert list(rows[0]) == list(CSV_COLUMNS)
    assert CSV_COLUMNS[-11:] == (
        "kind", "program", "move", "from_target", "motion", "path_fraction", "first_violation", "allowance_mm",
        "peak_speed_ratio", "singular_crossed", "queries",
    )
    n = len(demo.rows)
    assert len(rows) == n + len(demo.motions) == n + 12
    targets, motions = rows[:n], rows[n:]
    assert all(r["kind"] == "target" for r in targets)
    assert all(r[c] == "" for r in targets for c in CSV_COLUMNS[-10:])
    assert all(r["kind"] == "motion" for r in motions)
    frames = {t.name: t.frame for t in demo.cell.targets}
    for k, (r, m) in enumerate(zip(motions, demo.motions)):
        assert int(r["row"]) == k
        assert (r["program"], int(r["move"]), r["from_target"], r["target"], r["motion"], r["branch"], r["status"]) == (
            m.program, m.move, m.from_target, m.to_target, m.motion, m.branch, m.status)
        assert r["frame"] == frames[m.to_target]
        assert (r["closest_body"], r["closest_other"]) == (m.closest_body, m.closest_other)
        # mm and degrees at 3 decimals: within half a unit of the last digit
        assert float(r["clearance_mm"]) == pytest.approx(m.min_clearance * MM_PER_M, abs=5e-4)
        assert float(r["required_mm"]) == pytest.approx(m.required * MM_PER_M, abs=5e-4)
        assert float(r["margin_mm"]) == pytest.approx((m.min_clearance - m.required) * MM_PER_M, abs=5e-4)
        assert float(r["allowance_mm"]) == pytest.approx(m.allowance * MM_PER_M, abs=5e-4)
        q_deg = [float(r[f"q{j}_deg"]) for j in range(1, 7)]
        np.testing.assert_allclose(q_deg, np.asarray(m.q_at_min) * DEG_PER_RAD, atol=5e-4)
        assert float(r["path_fraction"]) == pytest.approx(m.where, abs=5e-5)
        assert float(r["peak_speed_ratio"]) == pytest.approx(m.peak_speed_ratio, abs=5e-5)
        assert int(r["queries"]) == m.queries and r["singular_crossed"] == m.singular_crossed
        fv = _num(r["first_violation"])
        assert (math.isnan(fv) and math.isnan(m.first_violation)) or fv == pytest.approx(m.first_violation, abs=5e-5)
    # rank: worst first among the motions (status, then margin)
    ranked = sorted(motions, key=lambda r: int(r["rank"]))
    assert sorted(int(r["rank"]) for r in motions) == list(range(1, 13))
    keys = [(SEVERITY.index(r["status"]), float(r["margin_mm"])) for r in ranked]
    assert keys == sorted(keys)
    assert ranked[0]["status"] == "below margin" and ranked[0]["program"] == "machine-cycle"


def test_csv_blank_cells_for_a_move_that_was_not_run():
    cell = invented_cell()
    nan6 = np.full(6, np.nan)
    m = _motion("unreachable", float("nan"), float("nan"), q=nan6, where=float("nan"), closest_body="", closest_other="",
                note="not run: the previous move could not end")
    text = csv_text(CheckResult(cell=cell, rows=(), motions=(m,)))
    (r,) = list(csv.DictReader(text.splitlines()))
    assert r["status"] == "unreachable" and r["kind"] == "motion"
    assert r["clearance_mm"] == r["required_mm"] == r["margin_mm"] == r["path_fraction"] == r["q1_deg"] == ""
    assert r["note"] == "not run: the previous move could not end"


# ---------------------------------------------------------------------- clearance.json


def test_json_motion_records(demo, tmp_path):
    path = write_json(demo, tmp_path / "clearance.json")
    doc = _strict_json(path)
    recs = doc["motions"]
    assert len(recs) == 12
    assert doc["findings"] == len(demo.findings())
    rank = {i: k + 1 for k, i in enumerate(worst_motions(demo))}
    for i, (rec, m) in enumerate(zip(recs, demo.motions)):
        assert rec["index"] == i and rec["rank"] == rank[i]
        assert (rec["program"], rec["move"], rec["from_target"], rec["to_target"], rec["branch"], rec["end_branch"]) == (
            m.program, m.move, m.from_target, m.to_target, m.branch, m.end_branch)
        assert rec["min_clearance_mm"] == pytest.approx(m.min_clearance * MM_PER_M, abs=5e-4)
        assert rec["required_mm"] == pytest.approx(m.required * MM_PER_M, abs=5e-4)
        assert rec["allowance_mm"] == pytest.approx(m.allowance * MM_PER_M, abs=5e-4)
        np.testing.assert_allclose(rec["q_at_min_deg"], np.asarray(m.q_at_min) * DEG_PER_RAD, atol=5e-4)
        prof = rec["profile"]
        assert len(prof["s"]) == len(prof["clearance_mm"]) == len(prof["required_mm"]) == len(m.profile.s) > 0
        np.testing.assert_allclose(prof["clearance_mm"], np.asarray(m.profile.clearance) * MM_PER_M, atol=5e-4)
        np.testing.assert_allclose(prof["required_mm"], np.asarray(m.profile.required) * MM_PER_M, atol=5e-4)
        np.testing.assert_allclose(prof["s"], m.profile.s, atol=5e-7)
        assert rec["first_violation"] is None or 0.0 <= rec["first_violation"] <= 1.0
        assert "seconds" not in rec  # a timing would make the file differ run to run
    # one motion per line between "motions": [ and ]: the file stays readable line by line
    lines = path.read_text(encoding="utf-8").splitlines()
    start = lines.index(' "motions": [')
    assert all(json.loads(lines[start + 1 + k].rstrip(",")) == recs[k] for k in range(12))


def test_csv_and_json_are_byte_identical_on_a_rerun(sweep_only, tmp_path):
    cell = load_cell(DEMO)  # a fresh load and a fresh sweep
    again = CheckResult(cell=cell, rows=(), motions=run_motions(cell), warnings=tuple(cell.warnings))
    assert csv_text(again) == csv_text(sweep_only)
    a = write_json(sweep_only, tmp_path / "a.json").read_bytes()
    b = write_json(again, tmp_path / "b.json").read_bytes()
    assert a == b


# ---------------------------------------------------------------------- figures


def test_motion_chart_draws_the_profiles_of_the_worst_moves(demo):
    moves = worst_moves(demo)
    fig = motion_chart(demo)
    panels = [ax for ax in fig.axes if ax.get_visible()]
    assert len(panels) == min(CHART_MOVES, len(moves)) == 6
    for ax, group in zip(panels, moves):
        first = demo.motions[group[0]]
        assert f"move {first.move}:" in ax.get_title() and first.status in ax.get_title()
        solid = [ln for ln in ax.get_lines() if ln.get_linestyle() == "-" and ln.get_marker() in ("None", "", None)]
        dashed = [ln for ln in ax.get_lines() if ln.get_linestyle() == "--"]
        assert len(solid) == len(dashed) == len(group)  # one line per move x branch, each with its requirement
        m = demo.motions[group[0]]
        order = np.argsort(m.profile.s, kind="stable")
        np.testing.assert_allclose(solid[0].get_ydata(), np.asarray(m.profile.clearance)[order] * MM_PER_M)
        np.testing.assert_allclose(dashed[0].get_ydata(), np.asarray(m.profile.required)[order] * MM_PER_M)
        assert solid[0].get_linewidth() > solid[-1].get_linewidth() or len(group) == 1  # the worst branch emphasised
        # the diamonds sit at the certified minima; the certified margin is no more than any sampled one
        diamonds = [ln for ln in ax.get_lines() if ln.get_marker() == "D"]
        ys = sorted(float(d.get_ydata()[0]) for d in diamonds)
        np.testing.assert_allclose(ys, sorted(demo.motions[i].min_clearance * MM_PER_M for i in group))
        sampled_margin = np.nanmin(np.asarray(solid[0].get_ydata()) - np.asarray(dashed[0].get_ydata()))
        assert (m.min_clearance - m.required) * MM_PER_M <= sampled_margin + 1e-9
        assert ax.get_xlim() == (0.0, 1.0) and "mm" in (panels[0].get_ylabel())
    import matplotlib.pyplot as plt

    plt.close(fig)


def test_motion_views_draw_the_worst_configurations_at_their_tcp(demo):
    drawn = drawn_motions(demo)
    assert len(drawn) == MOTION_GLB == 3
    for view, axes in (("plan", (0, 1)), ("elevation-xz", (0, 2))):
        fig = view_figure(demo, view, rows=[], motions=drawn)
        ax = fig.axes[0]
        labels = [t.get_text() for t in ax.get_legend().get_texts()]
        for k, i in enumerate(drawn, start=1):
            m = demo.motions[i]
            assert any(lab.startswith(f"M{k}: {m.program} move {m.move} ") for lab in labels)
        marks = [ln for ln in ax.get_lines() if ln.get_marker() == "D"]
        got = sorted((float(ln.get_xdata()[0]), float(ln.get_ydata()[0])) for ln in marks)
        want = sorted(tuple(_standard_dh_tcp(demo.cell, demo.motions[i].q_at_min)[list(axes)] * MM_PER_M) for i in drawn)
        np.testing.assert_allclose(got, want, atol=1e-6)
        assert {t.get_text() for t in ax.texts} >= {"M1", "M2", "M3"}
        import matplotlib.pyplot as plt

        plt.close(fig)


# ---------------------------------------------------------------------- the sweep-only report


def test_sweep_only_report_has_the_motion_section_and_no_target_noise(sweep_report, sweep_only):
    out, files = sweep_report
    text = files["report.html"].read_text(encoding="utf-8")
    assert "<h2>Motions</h2>" in text and "12 move x branch rows for 6 moves" in text
    assert "Clearance table (worst first)" not in text and "target x branch rows" not in text
    assert "<h2>Pictures</h2>" not in text
    assert "see the motions table" in text  # the verdict points at the right table
    section = text.split("<h2>Motions</h2>", 1)[1]
    table = section.split("</table>", 1)[0]
    assert table.count("<tr>") == 1 + 12
    for name in MOTION_CAPTIONS:
        assert f'alt="{name}"' in section
    assert text.count("data:image/png;base64,") == len(MOTION_CAPTIONS)
    order = [sweep_only.motions[i] for i in worst_motions(sweep_only)]
    body_rows = table.split("<tbody>", 1)[1].split("<tr>")[1:]
    assert all(f"<td>{m.branch}</td>" in r and m.status in r for r, m in zip(body_rows, order))
    assert "M1" in body_rows[0]
    doc = _strict_json(files["clearance.json"])
    assert doc["rows"] == [] and doc["verdict"] == "below margin" and len(doc["motions"]) == 12
    rows = _read_csv(files["clearance.csv"])
    assert len(rows) == 12 and {r["kind"] for r in rows} == {"motion"}


def test_sweep_only_pdf_has_the_motions_table_and_figures(sweep_report, sweep_only):
    pypdf = pytest.importorskip("pypdf")
    _, files = sweep_report
    reader = pypdf.PdfReader(files["report.pdf"])
    pages = [" ".join(p.extract_text().split()) for p in reader.pages]
    flat = " ".join(pages)
    assert "Motions (worst first)" in flat and "Clearance table (worst first)" not in flat
    for caption in MOTION_CAPTIONS.values():
        k = next(k for k, p in enumerate(pages) if " ".join(caption.split())[:60] in p)
        assert len(reader.pages[k].images) == 1
    first = sweep_only.motions[0]
    assert f"{first.from_target} -> {first.to_target}" in flat


def test_motion_scenes_load_back_with_their_parts(sweep_report, sweep_only):
    out, files = sweep_report
    names = motion_glb_names(sweep_only)
    assert list(names) == [n for n in files if n.startswith("motion-")]
    worst = sweep_only.motions[drawn_motions(sweep_only)[0]]
    assert list(names)[0] == f"motion-1-{worst.program}-{worst.move}.glb"
    assert all(MOTION_GLB_PATTERN.match(n) for n in names)
    assert not (out / "motion-9-stale-1.glb").exists() and (out / "motion-notes.txt").exists()
    cell = sweep_only.cell
    for name, i in names.items():
        m = sweep_only.motions[i]
        scene = trimesh.load(files[name])  # trimesh reads the GLB back on its own
        nodes = set(scene.graph.nodes_geometry)
        assert {f"body:{b.name}" for b in cell.bodies} <= nodes
        assert any(n.startswith("zone:") for n in nodes)
        transform, geom = scene.graph[f"body:{m.closest_body}"]
        colour = tuple(int(c) for c in scene.geometry[geom].visual.material.baseColorFactor)
        assert colour == STATUS_RGBA[m.status]
        # the tool tip at q_at_min lies inside the tool's drawn mesh bounds (cell frame, independent FK)
        tool = scene.geometry[scene.graph[f"body:{cell.tool.bodies[0].name}"][1]].copy()
        tool.apply_transform(transform)  # every node carries the same Z-up -> Y-up turn
        tcp = _standard_dh_tcp(cell, m.q_at_min)
        lo, hi = tool.bounds
        tcp_gltf = np.array([tcp[0], tcp[2], -tcp[1]])  # (x, y, z) -> (x, z, -y), docs/outputs.md
        assert np.all(tcp_gltf >= lo - 0.05) and np.all(tcp_gltf <= hi + 0.05)


# ---------------------------------------------------------------------- a small invented cell


def test_real_sweeps_of_a_small_cell_in_every_output(tmp_path):
    from envelope.sweep import sweep_move

    base = invented_result()
    cell = base.cell
    q = target_configurations()
    moves = (("home", "pick-table"), ("home", "place-east"))
    motions = tuple(
        sweep_move(cell, q[a][0][1], q[b][0][1], motion="joint", program="cycle 1", move=k + 2, from_target=a, to_target=b)
        for k, (a, b) in enumerate(moves)
    )
    result = dataclasses.replace(base, motions=motions)
    files = write_report(result, tmp_path, now=NOW)
    rows = _read_csv(files["clearance.csv"])
    assert [r["kind"] for r in rows] == ["target"] * len(base.rows) + ["motion"] * 2
    for r, m in zip(rows[len(base.rows):], motions):
        assert float(r["clearance_mm"]) == pytest.approx(m.min_clearance * MM_PER_M, abs=5e-4)
        assert r["program"] == "cycle 1" and r["status"] == m.status
    # a program name with a space becomes "_" in the scene name
    glbs = sorted(n for n in files if n.startswith("motion-"))
    assert len(glbs) == 2 and all(n.startswith(f"motion-{k}-cycle_1-") for k, n in zip((1, 2), glbs))
    text = files["report.html"].read_text(encoding="utf-8")
    assert "<h2>Motions</h2>" in text and "Clearance table (worst first)" in text and "<h2>Pictures</h2>" in text
    pictures = text.split("<h2>Pictures</h2>", 1)[1].split("<h2>", 1)[0]
    assert 'alt="motion-chart"' not in pictures  # the motion figures sit in the Motions section
    # a re-run writes the same CSV and JSON
    assert csv_text(result) == files["clearance.csv"].read_text(encoding="utf-8")
    assert write_json(result, tmp_path / "again.json").read_bytes() == files["clearance.json"].read_bytes()
    # without motions: no motion figures, no motion scenes
    assert motion_figures(base) == {} and motion_glb_names(base) == {}
    scene = motion_scene(cell, motions[0])
    assert f"body:{motions[0].closest_body}" in scene.graph.nodes_geometry
