"""Dense report figures and the PDF build: every row drawn, the worst on top, shared work giving the same
pictures and the same document as doing it again for each figure."""

from __future__ import annotations

import dataclasses

import matplotlib.pyplot as plt
import numpy as np
import pytest

from envelope.check import CheckResult
from envelope.report import pdf as report_pdf
from envelope.report.figures import (
    FigureCache, chart_points, clearance_chart, drawn_rows, png_bytes, report_figures, view_figure,
)
from envelope.scene import STATUS_RGBA, cell_extent
from envelope.units import to_mm

from test_report_support import invented_result


@pytest.fixture(scope="module")
def base():
    return invented_result()


def _dense(base, n_targets: int = 400):
    """``n_targets`` copies of every reachable invented row, each copy its own target; the rows of one copy
    sit at the clearance of a clear row, and one of them is the single intrusion (the worst row)."""
    clear = next(r for r in base.rows if r.status == "clear")
    intrusion = next(r for r in base.rows if r.status == "intrusion")
    rows = []
    for k in range(n_targets):
        for b in range(6):
            rows.append(dataclasses.replace(clear, target=f"t{k}", branch=f"b{b}", clearance=clear.clearance + 1e-6 * b))
    worst_at = 3 * n_targets + 2  # a row in the middle, hidden among clear rows at its own clearance
    rows[worst_at] = dataclasses.replace(intrusion, target=rows[worst_at].target, branch="worst", clearance=clear.clearance,
                                         margin=-1.0)
    return CheckResult(cell=base.cell, rows=tuple(rows)), worst_at


def _pixel(fig, ax, x, y):
    """RGB (0..255) of the rendered figure at data point (x, y)."""
    fig.canvas.draw()
    px, py = ax.transData.transform((x, y))
    img = np.asarray(fig.canvas.buffer_rgba())
    return tuple(int(v) for v in img[int(round(img.shape[0] - py)), int(round(px)), :3])


def test_dense_chart_draws_every_row_and_the_worst_on_top(base):
    result, worst = _dense(base)
    assert len(result.rows) > 2000  # the small-marker size of a dense chart
    pts = chart_points(result)
    fig = clearance_chart(result)
    ax = fig.axes[0]
    by_label = {c.get_label(): c for c in ax.collections}
    # every row with a clearance is one marker of its status, at its place, in mm
    for status in {r.status for r in result.rows}:
        want = sorted((float(pts["x"][i]), float(to_mm(r.clearance))) for i, r in enumerate(result.rows) if r.status == status)
        got = sorted(map(tuple, np.asarray(by_label[status].get_offsets(), dtype=np.float64)))
        np.testing.assert_allclose(got, want)
    assert (float(pts["x"][worst]), float(to_mm(result.rows[worst].clearance))) in set(map(tuple, by_label["intrusion"].get_offsets()))
    assert by_label["intrusion"].get_zorder() > by_label["clear"].get_zorder()
    # and it is what one sees there: the intrusion colour, not the clear rows drawn around it
    rgb = _pixel(fig, ax, pts["x"][worst], float(to_mm(result.rows[worst].clearance)))
    assert rgb == STATUS_RGBA["intrusion"][:3], rgb
    plt.close(fig)


def test_dense_chart_has_a_required_bar_over_every_row(base):
    result, _ = _dense(base)
    pts = chart_points(result)
    fig = clearance_chart(result)
    (bars,) = [ln for ln in fig.axes[0].get_lines() if ln.get_label() == "required clearance"]
    xy = np.asarray(bars.get_xydata(), dtype=np.float64).reshape(-1, 3, 2)  # (start, end, break) per bar
    assert np.isnan(xy[:, 2]).all() and len(xy) == len(result.rows)
    np.testing.assert_allclose(xy[:, :2, 1], np.repeat(to_mm(np.array([r.required for r in result.rows]))[:, None], 2, axis=1))
    np.testing.assert_allclose(xy[:, :2, 0].mean(axis=1), pts["x"])  # centred on its marker
    assert (xy[:, 1, 0] > xy[:, 0, 0]).all() and (xy[:, 1, 0] - xy[:, 0, 0] <= pts["width"] + 1e-12).all()
    plt.close(fig)


def test_chart_places_branches_side_by_side_in_their_target_column(base):
    pts = chart_points(base)
    assert pts["targets"] == list(dict.fromkeys(r.target for r in base.rows))
    for t, name in enumerate(pts["targets"]):
        xs = [pts["x"][i] for i, r in enumerate(base.rows) if r.target == name]
        n = len(xs)
        np.testing.assert_allclose(xs, [t - 0.4 + (k + 0.5) * 0.8 / n for k in range(n)])


def test_view_draws_the_worst_target_dot_on_top(base):
    # two targets at the same TCP, the second one clear: the dot seen there is the intrusion's
    cell = base.cell
    bad = next(r for r in base.rows if r.status == "intrusion")
    pose = next(t for t in cell.targets if t.name == bad.target).world_from_tcp
    twin = dataclasses.replace(cell.targets[0], name="twin", world_from_tcp=pose)
    cell2 = dataclasses.replace(cell, targets=cell.targets + (twin,))
    clear = next(r for r in base.rows if r.status == "clear")
    result = CheckResult(cell=cell2, rows=base.rows + (dataclasses.replace(clear, target="twin"),))
    fig = view_figure(result, "plan", rows=[])
    ax = fig.axes[0]
    xy = to_mm(np.asarray(pose)[:3, 3])[:2]
    assert _pixel(fig, ax, *xy) == STATUS_RGBA["intrusion"][:3]
    plt.close(fig)


def test_shared_extent_is_the_scene_extent(base):
    cache = FigureCache(base)
    rows = drawn_rows(base)
    tcps = np.array([np.asarray(t.world_from_tcp)[:3, 3] for t in base.cell.targets])
    want = cell_extent(base.cell, qs=[base.rows[i].q for i in rows], points=tcps)
    np.testing.assert_allclose(cache.extent(rows, ()), want, rtol=0, atol=1e-12)
    np.testing.assert_array_equal(cache.extent([], ()), cell_extent(base.cell, points=tcps))


def test_shared_work_gives_the_same_pictures(base):
    figures = report_figures(base)  # one cache for every view
    for view in ("plan", "elevation-xz", "elevation-yz"):
        alone = png_bytes(view_figure(base, view, rows=drawn_rows(base)))  # a cache of its own
        assert alone == figures[view], view


def test_pdf_paragraph_memo_gives_the_same_document(base, monkeypatch):
    # a table of 300 rows over several pages: each page measures the rest of the table again
    many = CheckResult(cell=base.cell, rows=base.rows * 60, warnings=base.warnings)
    figures = {"chart": report_figures(base)["chart"]}
    memo = report_pdf.pdf_bytes(many, figures, "2026-12-01 21:30:05 UTC")
    monkeypatch.setattr(report_pdf, "_Paragraph", report_pdf.Paragraph)
    plain = report_pdf.pdf_bytes(many, figures, "2026-12-01 21:30:05 UTC")
    assert memo == plain


def test_pdf_build_restores_the_reportlab_setting(base):
    from reportlab import rl_config

    before = rl_config.useA85
    data = report_pdf.pdf_bytes(base, {}, "2026-12-01 21:30:05 UTC")
    assert rl_config.useA85 == before
    assert data.startswith(b"%PDF") and b"/ASCII85Decode" not in data
