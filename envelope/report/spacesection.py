"""The space section of the report: restricted-space outlines for the views, and the fence-panel,
crushing-point, device and suggested-limits tables, from ``result.space`` (a ``SpaceCheck``).

Every function here returns nothing (or empty) when ``result.space`` is None, so a report without a
space check is unchanged byte for byte.
"""

from __future__ import annotations

from ..units import to_degrees, to_mm

HIGH_RISK_WARNING = (
    "The high-risk reach-over table of ISO 13857 used here is from memory and unverified (confidence U): "
    "confirm every c value against the standard before relying on a verdict."
)
"""Printed above the fence-panel table whenever a panel was judged by the high-risk table."""

VERDICT_CSS = {"pass": "#2ea043", "additional measures": "#e68c00", "fail": "#d21e1e"}
"""Colours of the panel verdicts in report.html (those of clear, below margin and intrusion)."""

OUTLINE_VIEWS = {"plan": "plan", "elevation-xz": "elevation"}
"""Report view -> ``space_outline`` view (the outline exists for the plan and the XZ elevation)."""

OUTLINE_CAPTION = (" The dashed blue line is the outline of the restricted space (soft axis limits, grown by "
                   "the stopping allowance; conservative voxels).")


def restricted_outlines(result, view: str) -> tuple:
    """Closed loops (mm) of the restricted space for a report view, or () (no space, or the YZ view)."""
    space = getattr(result, "space", None)
    if space is None or view not in OUTLINE_VIEWS:
        return ()
    from ..space import space_outline

    return space_outline(space.restricted, OUTLINE_VIEWS[view])


def _f(x, decimals: int = 0) -> str:
    if x is None:
        return ""
    return f"{float(x):.{decimals}f}"


PANEL_HEADER = ("panel", "b mm", "bottom gap mm", "a mm", "horizontal distance mm", "c mm", "margin mm",
                "sr mm", "3-D distance mm", "verdict", "table row a / column b", "confidence", "reasons")


def panel_rows(space) -> list:
    """One row of plain strings per fence / guard panel (``PANEL_HEADER``)."""
    rows = []
    for v in space.panels:
        ro = v.reach_over
        cell = "" if ro is None else f"{ro.row_a_mm} / {ro.column_b_mm} ({v.risk} risk)"
        rows.append((
            v.panel, _f(v.b_mm), _f(v.bottom_gap_mm), _f(v.a_mm), _f(v.distance_mm), _f(v.c_mm), _f(v.margin_mm),
            "" if v.opening is None else _f(v.opening.sr_mm), _f(v.distance_3d_mm), v.verdict, cell, v.confidence,
            "; ".join(v.reasons),
        ))
    return rows


CRUSHING_HEADER = ("zone / shape", "kind", "gap mm (lower bound)", "minimum gap mm", "touches", "nearest point mm")


def crushing_rows(space) -> list:
    return [
        (c.panel, c.kind, _f(c.gap_mm), str(c.check.min_gap_mm), "yes" if c.touches else "no",
         " ".join(_f(v) for v in c.point_mm))
        for c in space.crushing
    ]


DEVICE_HEADER = ("device", "kind", "T s", "d mm", "distance mm", "S mm", "formula", "passes")


def device_rows(space) -> list:
    return [
        (d.name, d.kind, f"{d.check.required.T_s:.3f}", _f(d.check.required.d_mm), _f(d.distance_mm),
         _f(d.check.required.S_mm), d.check.required.formula, "yes" if d.passes else "no")
        for d in space.devices
    ]


KEEPOUT_HEADER = ("keep-out zone", "distance mm (lower bound)", "clearance mm", "met")


def keepout_rows(space) -> list:
    return [(k.zone, _f(k.distance_mm), _f(k.required_mm), "yes" if k.passes else "no") for k in space.keepouts]


def limits_rows(space) -> list:
    """``(joint, restricted-space range deg, suggested range deg)`` rows."""
    sug = space.suggestion
    out = []
    for j in range(6):
        lo, hi = to_degrees(space.limits[j])
        s = "" if sug.limits is None else "{:.1f} .. {:.1f}".format(*to_degrees(sug.limits[j]))
        out.append((str(j + 1), f"{lo:.1f} .. {hi:.1f}", s))
    return out


def space_intro(space) -> str:
    """One paragraph: what was computed."""
    r = space.restricted
    return (
        f"Restricted space over the {space.limits_source}, grown by the stopping allowance "
        f"{float(to_mm(space.allowance)):.0f} mm; {float(to_mm(space.pitch)):g} mm voxels, conservative (the cubes reach at "
        f"most {float(to_mm(r.over_approximation)):.0f} mm beyond the modelled solids, besides the wrist enclosure). "
        f"Fence panels judged by ISO 13857 ({space.risk} risk), crushing gaps by ISO 13854, protective devices "
        f"by ISO 13855, all against the restricted space. {len(space.findings())} space finding(s)."
    )


def suggestion_text(space) -> str:
    sug = space.suggestion
    head = "Suggested axis limits: " if sug.found else "No suggested axis limits: "
    text = head + sug.reason
    if sug.blocking_targets:
        text += " (prevented by: " + ", ".join(sug.blocking_targets) + ")"
    return text


def uses_high_risk(space) -> bool:
    return any(v.risk == "high" and v.confidence == "U" for v in space.panels) or (space.risk == "high"
                                                                                 and bool(space.panels))


def space_json(result):
    """The ``space`` value of clearance.json (``spacecheck.space_summary``), or None."""
    space = getattr(result, "space", None)
    if space is None:
        return None
    from ..spacecheck import space_summary

    return space_summary(space)


def figure_caption(result, name: str) -> str:
    """The caption of report figure ``name``, with the restricted-space outline noted where drawn."""
    from .figures import FIGURE_CAPTIONS

    text = FIGURE_CAPTIONS.get(name, name)
    if getattr(result, "space", None) is not None and name in OUTLINE_VIEWS:
        text += OUTLINE_CAPTION
    return text


def html_section(result, table, status, e) -> str:
    """The report.html section (``table(header, rows, numeric)``, ``status(text)``, ``e`` escape from html.py)."""
    space = getattr(result, "space", None)
    if space is None:
        return ""
    parts = ["<h2>Spaces, fences and protective devices</h2>", f"<p>{e(space_intro(space))}</p>"]
    parts.append("<p>Fence and guard panels (ISO 13857)</p>")
    if uses_high_risk(space):
        parts.append(f'<div class="caution"><p>{e(HIGH_RISK_WARNING)}</p></div>')
    rows = [tuple(f'<span class="status" style="color:{VERDICT_CSS.get(c, "#000")}">{e(c)}</span>' if k == 9
                  else e(c) for k, c in enumerate(r)) for r in panel_rows(space)]
    parts.append(table(PANEL_HEADER, rows, numeric=range(1, 9)) if rows else "<p>No fence or guard panels.</p>")
    parts.append("<p>Crushing points (ISO 13854: gaps between the restricted space and fixed objects)</p>")
    rows = [tuple(e(c) for c in r) for r in crushing_rows(space)]
    parts.append(table(CRUSHING_HEADER, rows, numeric=(2, 3)) if rows else "<p>None.</p>")
    parts.append("<p>Protective devices (ISO 13855)</p>")
    rows = [tuple(e(c) for c in r) for r in device_rows(space)]
    parts.append(table(DEVICE_HEADER, rows, numeric=(2, 3, 4, 5)) if rows else "<p>None in the cell file.</p>")
    if space.keepouts:
        parts.append("<p>Keep-out zones against the restricted space (reported, not counted)</p>")
        parts.append(table(KEEPOUT_HEADER, [tuple(e(c) for c in r) for r in keepout_rows(space)], numeric=(1, 2)))
    parts.append("<p>Axis limits (degrees)</p>")
    parts.append(table(("joint", "restricted space", "suggested"), [tuple(e(c) for c in r) for r in limits_rows(space)]))
    parts.append(f"<p>{e(suggestion_text(space))}</p>")
    parts.append(f'<p class="note">Search: {e(space.suggestion.method)}.</p>')
    return "".join(parts)


def pdf_story(result, grid, p, styles, width) -> list:
    """The report.pdf flowables (``grid(data, col_widths, header, font_size)``, ``p(text, style)`` from pdf.py)."""
    space = getattr(result, "space", None)
    if space is None:
        return []
    body, small, h2 = styles
    story = [p("Spaces, fences and protective devices", h2), p(space_intro(space), small)]
    story.append(p("Fence and guard panels (ISO 13857)", body))
    if uses_high_risk(space):
        story.append(p("CAUTION: " + HIGH_RISK_WARNING, small))
    data = [list(PANEL_HEADER)] + [[p(c, small) if k in (0, 10, 12) else c for k, c in enumerate(r)]
                                   for r in panel_rows(space)]
    if len(data) > 1:
        story.append(grid(data, font_size=6.0))
    story.append(p("Crushing points (ISO 13854)", body))
    rows = crushing_rows(space)
    story.append(grid([list(CRUSHING_HEADER)] + [list(r) for r in rows], font_size=6.5) if rows else p("None.", small))
    story.append(p("Protective devices (ISO 13855)", body))
    rows = device_rows(space)
    story.append(grid([list(DEVICE_HEADER)] + [list(r) for r in rows], font_size=6.5) if rows
                 else p("None in the cell file.", small))
    if space.keepouts:
        story.append(p("Keep-out zones against the restricted space (reported, not counted)", body))
        story.append(grid([list(KEEPOUT_HEADER)] + [list(r) for r in keepout_rows(space)], font_size=6.5))
    story.append(p("Axis limits (degrees)", body))
    story.append(grid([["joint", "restricted space", "suggested"]] + [list(r) for r in limits_rows(space)],
                      font_size=6.5))
    story.append(p(suggestion_text(space), small))
    story.append(p("Search: " + space.suggestion.method + ".", small))
    return story
