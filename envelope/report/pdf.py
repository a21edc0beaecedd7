"""report.pdf: the report as a document (reportlab platypus), reproducible apart from the date.

The document is built with reportlab's ``invariant`` mode (fixed document id and internal dates), with
fixed title, author, subject, creator and producer; the only date is the report date printed in the
inputs table, taken from ``now``.
"""

from __future__ import annotations

import contextlib
import io
from xml.sax.saxutils import escape

from reportlab.lib import colors
from reportlab.lib.pagesizes import A4, landscape
from reportlab.lib.styles import getSampleStyleSheet
from reportlab.lib.units import mm
from reportlab.platypus import Image, PageBreak, Paragraph, SimpleDocTemplate, Spacer, Table, TableStyle

from .figures import FIGURE_CAPTIONS  # noqa: F401 - kept for importers
from .spacesection import figure_caption, pdf_story
from .figures import MOTION_CAPTIONS
from .html import HTML_ROW_LIMIT, STATUS_CSS, clearance_table_rows, inputs_rows
from .motions import MOTIONS_NOTE, STATUS_COLUMN, motion_rows, motion_table_rows, motions_text
from .summary import all_warnings, cautions, cell_summary, fmt, status_counts, target_count, tool_version, verdict_text

PDF_TITLE = "envelope clearance report"
PDF_AUTHOR = "envelope"


class _Paragraph(Paragraph):
    """A Paragraph that keeps its last line breaking: a table split over pages is measured again on every
    page, and so is each of its cells; this returns the same breaking for the same width without redoing it."""

    def wrap(self, availWidth, availHeight):
        memo = getattr(self, "_wrap_memo", None)
        if memo is not None and memo[0] == availWidth:
            _, self.width, self._wrapWidths, self.blPara, self.height = memo
            return self.width, self.height
        out = super().wrap(availWidth, availHeight)
        if hasattr(self, "blPara"):  # wrapped (not refused for a too narrow width)
            self._wrap_memo = (availWidth, self.width, self._wrapWidths, self.blPara, self.height)
        return out


def _p(text, style):
    return _Paragraph(escape(str(text)), style)


@contextlib.contextmanager
def _binary_streams():
    """Build with reportlab's ASCII85 stream encoding off (``rl_config.useA85``, restored afterwards):
    images and pages are stored Flate-compressed in binary, as PDF allows, instead of being turned into
    ASCII text (pure Python here, and a quarter larger)."""
    from reportlab import rl_config

    old = rl_config.useA85
    rl_config.useA85 = 0
    try:
        yield
    finally:
        rl_config.useA85 = old


def _grid(data, col_widths=None, header=True, font_size=7.5):
    t = Table(data, colWidths=col_widths, repeatRows=1 if header else 0)
    style = [
        ("GRID", (0, 0), (-1, -1), 0.3, colors.grey),
        ("FONTSIZE", (0, 0), (-1, -1), font_size),
        ("VALIGN", (0, 0), (-1, -1), "TOP"),
        ("LEFTPADDING", (0, 0), (-1, -1), 2),
        ("RIGHTPADDING", (0, 0), (-1, -1), 2),
        ("TOPPADDING", (0, 0), (-1, -1), 1),
        ("BOTTOMPADDING", (0, 0), (-1, -1), 1),
    ]
    if header:
        style += [("BACKGROUND", (0, 0), (-1, 0), colors.HexColor("#eeeeee")), ("FONTNAME", (0, 0), (-1, 0), "Helvetica-Bold")]
    t.setStyle(TableStyle(style))
    return t


def _image(png: bytes, max_width: float, max_height: float):
    from reportlab.lib.utils import ImageReader

    w, h = ImageReader(io.BytesIO(png)).getSize()
    scale = min(max_width / w, max_height / h)
    return Image(io.BytesIO(png), width=w * scale, height=h * scale)


MOTION_PDF_WIDTHS = (8, 9, 20, 8, 36, 12, 22, 18, 15, 14, 14, 11, 30, 13, 12, 14)
"""mm: widths of the motions table's columns but the last (which takes the rest of the page)."""


def _motion_story(result, figures: dict, styles, width, height) -> list:
    """The Motions section: the table worst first, its note, then each motion figure on its own page."""
    small, h2 = styles
    tiny = small.clone("tiny", fontSize=6, leading=7)
    header, rows, shown, total = motion_table_rows(result, HTML_ROW_LIMIT)
    story = [PageBreak(), _p("Motions (worst first)", h2), _p(motions_text(result), small)]
    if shown < total:
        story.append(_p(f"The {shown} worst of {total} motion rows; every one is in clearance.csv and clearance.json.", small))
    wrap = (2, 4, 6, 12, 15)
    data = [[_p(h, tiny) for h in header]] + [[_p(c, tiny) if k in wrap else c for k, c in enumerate(r)] for r in rows]
    widths = [w * mm for w in MOTION_PDF_WIDTHS]
    widths.append(width - sum(widths))
    table = _grid(data, col_widths=widths, font_size=6)
    colours = [
        ("TEXTCOLOR", (STATUS_COLUMN, k), (STATUS_COLUMN, k), colors.HexColor(STATUS_CSS.get(r[STATUS_COLUMN], "#000000")))
        for k, r in enumerate(rows, start=1)
    ]
    if colours:
        table.setStyle(TableStyle(colours))
    story += [table, _p(MOTIONS_NOTE, small)]
    for name, caption in MOTION_CAPTIONS.items():
        if name in figures:
            story += [PageBreak(), _image(figures[name], width, height - 20 * mm), _p(caption, small)]
    return story


def pdf_bytes(result, figures: dict, now_text: str) -> bytes:
    """The whole report.pdf as bytes (A4 landscape)."""
    buf = io.BytesIO()
    page = landscape(A4)
    doc = SimpleDocTemplate(
        buf,
        pagesize=page,
        leftMargin=14 * mm,
        rightMargin=14 * mm,
        topMargin=12 * mm,
        bottomMargin=12 * mm,
        title=PDF_TITLE,
        author=PDF_AUTHOR,
        subject=f"clearance check of cell {result.cell.name}",
        creator=f"envelope {tool_version()}",
        producer=f"envelope {tool_version()}",
        invariant=1,
    )
    width = page[0] - 28 * mm
    height = page[1] - 24 * mm
    ss = getSampleStyleSheet()
    body, small, h1, h2 = ss["BodyText"], ss["BodyText"].clone("small", fontSize=7.5, leading=9), ss["Title"], ss["Heading2"]
    summary = cell_summary(result.cell)
    verdict = result.verdict
    story = [_p(f"Clearance check: {summary['name']}", h1)]

    vt = Table([[_p(f"Verdict: {verdict_text(result)}", ss["Heading3"].clone("v", textColor=colors.white))]], colWidths=[width])
    vt.setStyle(TableStyle([("BACKGROUND", (0, 0), (-1, -1), colors.HexColor(STATUS_CSS.get(verdict, "#000000")))]))
    story += [vt, Spacer(1, 4 * mm)]

    caution = [[_p("CAUTION", ss["Heading4"])]] + [[_p(c, small)] for c in cautions()]
    ct = Table(caution, colWidths=[width])
    ct.setStyle(TableStyle([("BOX", (0, 0), (-1, -1), 1.2, colors.HexColor("#b58900")), ("BACKGROUND", (0, 0), (-1, -1), colors.HexColor("#fff8e1"))]))
    story += [ct, Spacer(1, 3 * mm)]
    counts = status_counts(result)
    motions_only = not result.rows and bool(motion_rows(result))  # ``envelope sweep``: no target table
    if not motions_only:
        story.append(_p(f"{len(result.rows)} target x branch rows for {target_count(result)} targets: " + ", ".join(f"{n} {s}" for s, n in counts.items()) + ".", body))
    if motion_rows(result):
        story.append(_p(motions_text(result), body))

    story.append(_p("Inputs", h2))
    story.append(_grid([["item", "value"]] + [[a, _p(b, small)] for a, b in inputs_rows(result, now_text)], col_widths=[35 * mm, width - 35 * mm]))

    story.append(_p("Cell", h2))
    m, t = summary["mount"], summary["tool"]["flange_from_tcp"]
    story.append(
        _p(
            f"Arm {summary['arm']['name']}, DH convention {summary['arm']['convention']}; mount (cell from base) "
            f"xyz {m['xyz_mm']} mm, rpy {m['rpy_deg']} deg ({m['rpy_convention']}); TCP (flange from TCP) xyz "
            f"{t['xyz_mm']} mm, rpy {t['rpy_deg']} deg. Self clearance {fmt(summary['self_clearance_mm'], 1)} mm; "
            f"stopping allowance {fmt(summary['stopping_allowance_mm'], 1)} mm.",
            body,
        )
    )
    keys = ("joint", "a_mm", "alpha_deg", "d_mm", "offset_deg", "lower_deg", "upper_deg")
    dh = [["joint", "a mm", "alpha deg", "d mm", "offset deg", "lower deg", "upper deg"]]
    dh += [[str(j["joint"])] + [fmt(j[k], 3) for k in keys[1:]] for j in summary["arm"]["dh"]]
    story += [_grid(dh), Spacer(1, 2 * mm)]
    zones = [["zone", "kind", "required mm", "panels", "shapes", "allowed contact"]]
    zones += [
        [_p(z["name"], small), z["kind"], fmt(z["clearance_mm"], 1), _p(", ".join(z["panels"]), small), _p(", ".join(z["shapes"]), small), _p(", ".join(z["allowed"]), small)]
        for z in summary["zones"]
    ]
    story += [_grid(zones, col_widths=[50 * mm, 22 * mm, 22 * mm, 60 * mm, 50 * mm, width - 204 * mm]), Spacer(1, 2 * mm)]
    bodies = [["body", "role", "frame", "padding mm", "shapes"]]
    bodies += [[b["name"], b["role"], str(b["frame"]), fmt(b["padding_mm"], 1), ", ".join(b["shapes"])] for b in summary["bodies"]]
    story.append(_grid(bodies))

    story.append(_p("Warnings", h2))
    warnings = all_warnings(result)
    story += [_p(f"- {w}", small) for w in warnings] or [_p("None.", body)]

    for name, png in figures.items():
        if name in MOTION_CAPTIONS:
            continue  # in the Motions section
        story.append(PageBreak())
        story.append(_image(png, width, height - 20 * mm))
        story.append(_p(figure_caption(result, name), small))

    space_story = pdf_story(result, lambda data, font_size=7.5: _grid(data, font_size=font_size), _p, (body, small, h2), width)
    if space_story:
        story.append(PageBreak())
        story += space_story

    if not motions_only:
        story.append(PageBreak())
        story.append(_p("Clearance table (worst first)", h2))
        header, rows, shown, total = clearance_table_rows(result, HTML_ROW_LIMIT)
        if shown < total:
            story.append(_p(f"The {shown} worst of {total} rows; every row is in clearance.csv and clearance.json.", small))
        keep = (0, 1, 2, 4, 5, 6, 7, 8, 9, 10, 11, 12, 13)  # the note column is left to the CSV
        data = [[header[k] for k in keep]] + [[_p(r[k], small) if k in (1, 9, 10, 13) else r[k] for k in keep] for r in rows]
        widths = [10 * mm, 32 * mm, 20 * mm, 20 * mm, 20 * mm, 17 * mm, 17 * mm, 15 * mm, 22 * mm, 28 * mm, 15 * mm, 13 * mm]
        widths.append(width - sum(widths))
        table = _grid(data, col_widths=widths, font_size=6.5)
        styles = []
        for k, r in enumerate(rows, start=1):
            styles.append(("TEXTCOLOR", (3, k), (3, k), colors.HexColor(STATUS_CSS.get(r[4], "#000000"))))
        if styles:
            table.setStyle(TableStyle(styles))
        story.append(table)
        story.append(_p("Clearance: the certified lower bound of the closest pair (negative: penetration). Margin = clearance - required. Lengths in mm, angles in degrees.", small))

    if motion_rows(result):
        story += _motion_story(result, figures, (small, h2), width, height)
    elif result.motions:
        story.append(_p("Motions", h2))
        from .tables import _jsonable

        for mo in result.motions:
            rec = _jsonable(mo)
            if isinstance(rec, dict):
                text = "; ".join(f"{k}: {v}" for k, v in rec.items() if not isinstance(v, (list, dict)))
            else:
                text = str(rec)
            story.append(_p(text, small))

    with _binary_streams():
        doc.build(story)
    return buf.getvalue()
