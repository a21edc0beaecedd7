"""report.html: one self-contained file (inline CSS, figures as base64 PNG, no network references)."""

from __future__ import annotations

import base64
import dataclasses
from html import escape

from ..units import to_degrees, to_mm
from .figures import FIGURE_CAPTIONS  # noqa: F401 - kept for importers
from .figures import MOTION_CAPTIONS
from .motions import MOTIONS_NOTE, STATUS_COLUMN, motion_rows, motion_table_rows, motions_text
from .spacesection import figure_caption, html_section
from .summary import (
    all_warnings,
    cautions,
    cell_summary,
    fmt,
    singular_names,
    status_counts,
    target_count,
    tool_version,
    verdict_text,
    worst_limit,
)

HTML_ROW_LIMIT = 300
"""At most this many rows (worst first) in the HTML and PDF tables; clearance.csv has them all."""

STATUS_CSS = {
    "clear": "#2ea043",
    "below margin": "#e68c00",
    "intrusion": "#d21e1e",
    "outside limits": "#805ac8",
    "unreachable": "#3c3c3c",
    "allowed contact": "#286edc",
}

_CSS = """
body{font-family:Helvetica,Arial,sans-serif;margin:1.5em auto;max-width:72em;color:#222;line-height:1.35}
h1{font-size:1.5em;margin-bottom:.2em}h2{font-size:1.15em;border-bottom:1px solid #ccc;margin-top:1.6em}
table{border-collapse:collapse;font-size:.82em;margin:.4em 0}
th,td{border:1px solid #ccc;padding:2px 6px;text-align:left;vertical-align:top}
th{background:#f0f0f0}td.num{text-align:right;font-variant-numeric:tabular-nums}
.verdict{font-size:1.25em;font-weight:bold;padding:.6em 1em;color:#fff;border-radius:4px}
.caution{border:2px solid #b58900;background:#fff8e1;padding:.5em 1em;margin:1em 0}
.caution p{margin:.3em 0}.status{font-weight:bold}
figure{margin:1em 0}figure img{max-width:100%;border:1px solid #ddd}
figcaption{font-size:.85em;color:#444}.note{font-size:.85em;color:#555}
"""


def _e(x) -> str:
    return escape(str(x), quote=True)


def _table(header, rows, numeric=()) -> str:
    out = ["<table><thead><tr>", *(f"<th>{_e(h)}</th>" for h in header), "</tr></thead><tbody>"]
    for r in rows:
        out.append("<tr>")
        for k, cell in enumerate(r):
            cls = ' class="num"' if k in numeric else ""
            out.append(f"<td{cls}>{cell}</td>")
        out.append("</tr>")
    out.append("</tbody></table>")
    return "".join(out)


def _status(s: str) -> str:
    return f'<span class="status" style="color:{STATUS_CSS.get(s, "#000")}">{_e(s)}</span>' if s else ""


def clearance_table_rows(result, limit: int = HTML_ROW_LIMIT) -> tuple:
    """``(header, rows of plain strings, shown, total)``: the worst rows first, file units."""
    header = (
        "rank", "target", "branch", "turn", "status", "clearance status", "clearance mm", "required mm",
        "margin mm", "closest body", "closest other", "limit", "singular", "q1..q6 deg", "note",
    )
    order = result.worst_first()
    rows = []
    for pos, i in enumerate(order[:limit]):
        r = result.rows[i]
        joint, excess = worst_limit(r)
        rows.append(
            (
                str(pos + 1), r.target, r.branch, str(r.turn), r.status, r.clearance_status,
                fmt(to_mm(r.clearance), 1), fmt(to_mm(r.required), 1), fmt(to_mm(r.margin), 1),
                r.closest_body, r.closest_other, f"J{joint} +{fmt(excess, 1)}" if joint else "",
                ";".join(singular_names(r)), " ".join(fmt(v, 1) for v in to_degrees(r.q)), r.note,
            )
        )
    return header, rows, len(rows), len(order)


def inputs_rows(result, now_text: str) -> list:
    summary = cell_summary(result.cell)
    rows = [("tool", f"envelope {tool_version()}"), ("report date", now_text), ("cell", summary["name"]), ("cell file", summary["source"])]
    rows += [(f"input {k + 1}", f"{i['file']}  SHA-256 {i['sha256']}") for k, i in enumerate(summary["inputs"])]
    return rows


def _motions_html(result, figures=None) -> str:
    """The Motions section: ``MotionRow`` motions as a table worst first with their figures (see
    ``motions``); any other motion objects as a plain dump of their simple fields."""
    if not result.motions:
        return ""
    if motion_rows(result):
        return _motion_rows_html(result, figures or {})
    items = []
    for m in result.motions:
        if dataclasses.is_dataclass(m):
            fields = [(f.name, getattr(m, f.name)) for f in dataclasses.fields(m)]
            simple = [(k, v) for k, v in fields if isinstance(v, (str, int, float)) or v is None]
        else:
            simple = [("motion", m)]
        items.append(simple)
    keys = []
    for simple in items:
        for k, _ in simple:
            if k not in keys:
                keys.append(k)
    rows = []
    for simple in items:
        d = dict(simple)
        rows.append(tuple(_status(str(d[k])) if k == "status" else _e(fmt(d[k]) if isinstance(d.get(k), float) else d.get(k, "")) for k in keys))
    return "<h2>Motions</h2>" + _table(keys, rows)


def _motion_rows_html(result, figures: dict) -> str:
    header, rows, shown, total = motion_table_rows(result, HTML_ROW_LIMIT)
    parts = ["<h2>Motions</h2>", f"<p>{_e(motions_text(result))}</p>"]
    parts.append("<p>Moves worst first (by status, then by margin), one row per move x start branch.</p>")
    if shown < total:
        parts.append(f'<p class="note">The {shown} worst of {total} motion rows; every one is in clearance.csv and clearance.json.</p>')
    html_rows = [tuple(_status(c) if k == STATUS_COLUMN else _e(c) for k, c in enumerate(r)) for r in rows]
    parts.append(_table(header, html_rows, numeric=(0, 3, 8, 9, 10, 11, 13, 14, 16)))
    parts.append(f'<p class="note">{_e(MOTIONS_NOTE)}</p>')
    for name, caption in MOTION_CAPTIONS.items():
        if name in figures:
            data = base64.b64encode(figures[name]).decode("ascii")
            parts.append(
                f'<figure><img alt="{_e(name)}" src="data:image/png;base64,{data}">'
                f"<figcaption>{_e(caption)}</figcaption></figure>"
            )
    return "".join(parts)


def html_text(result, figures: dict, now_text: str) -> str:
    """The whole report.html as text."""
    summary = cell_summary(result.cell)
    verdict = result.verdict
    parts = [
        "<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">",
        f"<title>envelope check: {_e(summary['name'])}</title><style>{_CSS}</style></head><body>",
        f"<h1>Clearance check: {_e(summary['name'])}</h1>",
        f'<div class="verdict" style="background:{STATUS_CSS.get(verdict, "#000")}">Verdict: {_e(verdict_text(result))}</div>',
        '<div class="caution"><p><b>CAUTION</b></p>',
        *(f"<p>{_e(c)}</p>" for c in cautions()),
        "</div>",
    ]
    counts = status_counts(result)
    motions_only = not result.rows and bool(motion_rows(result))  # ``envelope sweep``: no target table
    if not motions_only:
        parts.append(
            f"<p>{len(result.rows)} target x branch rows for {target_count(result)} targets: "
            + ", ".join(f"{n} {_status(s)}" for s, n in counts.items())
            + ".</p>"
        )
    if motion_rows(result):
        parts.append(f"<p>{_e(motions_text(result))}</p>")
    parts.append("<h2>Inputs</h2>" + _table(("item", "value"), [(_e(a), _e(b)) for a, b in inputs_rows(result, now_text)]))

    parts.append("<h2>Cell</h2>")
    m = summary["mount"]
    t = summary["tool"]["flange_from_tcp"]
    parts.append(
        f"<p>Arm <b>{_e(summary['arm']['name'])}</b>, DH convention {_e(summary['arm']['convention'])}; mount "
        f"(cell from base) xyz {_e(m['xyz_mm'])} mm, rpy {_e(m['rpy_deg'])} deg ({_e(m['rpy_convention'])}); "
        f"TCP (flange from TCP) xyz {_e(t['xyz_mm'])} mm, rpy {_e(t['rpy_deg'])} deg. "
        f"Self clearance {_e(fmt(summary['self_clearance_mm'], 1))} mm; stopping allowance "
        f"{_e(fmt(summary['stopping_allowance_mm'], 1))} mm.</p>"
    )
    dh_head = ("joint", "a mm", "alpha deg", "d mm", "offset deg", "lower deg", "upper deg")
    dh_rows = [
        tuple(_e(fmt(j[k], 3) if k != "joint" else j[k]) for k in ("joint", "a_mm", "alpha_deg", "d_mm", "offset_deg", "lower_deg", "upper_deg"))
        for j in summary["arm"]["dh"]
    ]
    parts.append(_table(dh_head, dh_rows, numeric=range(7)))
    zone_rows = [
        (_e(z["name"]), _e(z["kind"]), _e(fmt(z["clearance_mm"], 1)), _e(", ".join(z["panels"])), _e(", ".join(z["shapes"])), _e(", ".join(z["allowed"])))
        for z in summary["zones"]
    ]
    parts.append("<p>Zones</p>" + _table(("zone", "kind", "required mm", "panels", "shapes", "allowed contact"), zone_rows, numeric=(2,)))
    body_rows = [
        (_e(b["name"]), _e(b["role"]), _e(b["frame"]), _e(fmt(b["padding_mm"], 1)), _e(", ".join(b["shapes"])))
        for b in summary["bodies"]
    ]
    parts.append("<p>Moving bodies</p>" + _table(("body", "role", "frame", "padding mm", "shapes"), body_rows, numeric=(2, 3)))

    warnings = all_warnings(result)
    parts.append("<h2>Warnings</h2>")
    if warnings:
        parts.append("<ul>" + "".join(f"<li>{_e(w)}</li>" for w in warnings) + "</ul>")
    else:
        parts.append("<p>None.</p>")

    pictures = {name: png for name, png in figures.items() if name not in MOTION_CAPTIONS}  # those: in Motions
    if pictures:
        parts.append("<h2>Pictures</h2>")
    for name, png in pictures.items():
        data = base64.b64encode(png).decode("ascii")
        parts.append(
            f'<figure><img alt="{_e(name)}" src="data:image/png;base64,{data}">'
            f"<figcaption>{_e(figure_caption(result, name))}</figcaption></figure>"
        )
    parts.append(html_section(result, _table, _status, _e))

    header, rows, shown, total = clearance_table_rows(result)
    if not motions_only:
        parts.append("<h2>Clearance table (worst first)</h2>")
        if shown < total:
            parts.append(f'<p class="note">The {shown} worst of {total} rows; every row is in clearance.csv and clearance.json.</p>')
        html_rows = [
            tuple(_status(c) if k in (4, 5) else _e(c) for k, c in enumerate(r))
            for r in rows
        ]
        parts.append(_table(header, html_rows, numeric=(0, 3, 6, 7, 8)))
        parts.append(
            '<p class="note">Clearance: the certified lower bound of the closest pair (negative: penetration). '
            "Margin = clearance - required. Lengths in mm, angles in degrees.</p>"
        )
    parts.append(_motions_html(result, figures))
    parts.append(f'<p class="note">Written by envelope {_e(tool_version())} on {_e(now_text)}.</p>')
    parts.append("</body></html>\n")
    return "".join(parts)
