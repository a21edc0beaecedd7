"""What every report file shares: number formatting, the cell summary, statuses, cautions.

Everything here is already in file units (millimetres, degrees), converted once through
``envelope.units``, and rounded to fixed decimals so that output is byte-identical run to run.
"""

from __future__ import annotations

import math

import numpy as np

from .. import __version__
from ..poses import euler_from_rotation
from ..units import to_degrees, to_mm

DECIMALS = 3
"""Decimals of every length (mm) and angle (deg) written to a report file."""

STATUS_ORDER = ("intrusion", "below margin", "outside limits", "unreachable", "allowed contact", "clear")
"""Row and pair statuses, most severe first (for legends and counts)."""

SINGULARITY_NAMES = ("shoulder", "elbow", "wrist")
"""Names used when ``BranchRow.singular`` holds booleans (one per kind, in this order)."""

try:  # the wording owned by envelope.standards, when present
    from ..standards import CAUTIONS as _CAUTIONS
except Exception:  # noqa: BLE001 - the module may not exist yet; the fallback says the same
    _CAUTIONS = None

FALLBACK_CAUTIONS = (
    "A design aid for pre-checking zones and clearances, not a safety function: it does not replace "
    "the risk assessment by a competent person, the validation of the installed safety functions, or "
    "the applicable law and codes, which take precedence.",
    "Clearances are computed for the programmed target poses (and motions, where listed) from the "
    "geometry and parameters given; they are only as good as those meshes, dimensions and joint data.",
    "Stopping distance and overtravel are not included unless a stopping allowance was entered in the "
    "cell file; take them from the arm maker's stopping data.",
    "Required clearances come from the cell file; check them against the standard that applies to the "
    "guard or zone (for example the ISO 13857 safety distances for reaching over or through guards).",
)


def cautions() -> tuple:
    """The caution paragraphs printed at the top of the HTML and PDF reports."""
    if _CAUTIONS:
        return tuple(_CAUTIONS) if not isinstance(_CAUTIONS, str) else (_CAUTIONS,)
    return FALLBACK_CAUTIONS


def rnd(x, decimals: int = DECIMALS):
    """``x`` rounded for JSON: a float with fixed decimals (``-0.0`` made ``0.0``), ``None`` if not finite."""
    x = float(x)
    if not math.isfinite(x):
        return None
    return round(x, decimals) + 0.0


def rnd_list(values, decimals: int = DECIMALS) -> list:
    """An array rounded for JSON, nested like the array, non-finite entries as ``None``."""
    arr = np.asarray(values, dtype=np.float64)
    r = np.round(arr, decimals) + 0.0
    out = r.tolist()
    if np.isfinite(arr).all():
        return out
    bad = ~np.isfinite(arr)
    flat = np.asarray(r, dtype=object).ravel()
    flat[bad.ravel()] = None
    return flat.reshape(arr.shape).tolist()


def fmt(x, decimals: int = DECIMALS) -> str:
    """``x`` as text with fixed decimals; ``""`` for NaN, ``inf`` / ``-inf`` for infinities, no ``-0``."""
    x = float(x)
    if math.isnan(x):
        return ""
    if math.isinf(x):
        return "inf" if x > 0 else "-inf"
    s = f"{x:.{decimals}f}"
    if s.startswith("-") and float(s) == 0.0:
        s = s[1:]
    return s


def fmt_list(values, decimals: int = DECIMALS) -> list:
    """``[fmt(v, decimals) for v in values]`` over the flattened array, in one pass (for big tables).

    Same text as ``fmt``: fixed-decimal formatting already writes ``inf`` / ``-inf``; only ``nan``
    (made ``""``) and the negative zero (``-0.000``, made ``0.000``) need fixing afterwards.
    """
    spec = f".{decimals}f"
    negative_zero = format(-0.0, spec)
    fixes = {"nan": "", negative_zero: negative_zero[1:]}
    flat = np.asarray(values, dtype=np.float64).ravel().tolist()
    return [fixes.get(s, s) for s in [format(v, spec) for v in flat]]


def mm(x) -> float:
    """Metres as millimetres (a float)."""
    return float(to_mm(x))


def singular_names(row) -> list:
    """The singularity names of a row: its ``singular`` strings, or the names of its true flags."""
    flags = tuple(row.singular or ())
    if all(isinstance(f, str) for f in flags):
        return [f for f in flags if f]
    names = SINGULARITY_NAMES if len(flags) == len(SINGULARITY_NAMES) else [f"s{i + 1}" for i in range(len(flags))]
    return [n for n, f in zip(names, flags) if bool(f)]


def worst_limit(row) -> tuple:
    """``(joint number 1..6 or 0, excess in degrees)`` of the joint furthest outside its range."""
    excess = np.asarray(row.limit_excess, dtype=np.float64)
    if excess.size == 0 or not np.isfinite(excess).any() or np.nanmax(excess) <= 0:
        return 0, 0.0
    j = int(np.nanargmax(excess))
    return j + 1, float(to_degrees(excess[j]))


def status_counts(result) -> dict:
    """``{status: number of rows}`` for every status present, in ``STATUS_ORDER``."""
    counts: dict = {}
    for row in result.rows:
        counts[row.status] = counts.get(row.status, 0) + 1
    order = {s: i for i, s in enumerate(STATUS_ORDER)}
    return dict(sorted(counts.items(), key=lambda kv: (order.get(kv[0], len(order)), kv[0])))


def target_count(result) -> int:
    return len({row.target for row in result.rows})


CLEAR_TEXT = "clear"


def verdict_text(result) -> str:
    """One line: the verdict and the count of findings."""
    verdict = result.verdict
    n = len(result.findings())
    motions_only = not result.rows and bool(result.motions)  # ``envelope sweep``
    if verdict == "clear":
        if motions_only:
            return "CLEAR: every move, in every start branch, keeps its required clearance (certified over the whole move)."
        return "CLEAR: every target has a within-limits branch and every such branch keeps its required clearance."
    moving = any(getattr(m, "status", CLEAR_TEXT) != CLEAR_TEXT for m in result.motions)
    table = "the motions table" if motions_only else ("the clearance and motions tables" if moving else "the clearance table")
    return f"{verdict.upper()}: {n} finding{'s' if n != 1 else ''} (see {table}, worst first)."


def pose_summary(pose) -> dict:
    """A pose as ``xyz_mm`` and fixed-xyz (roll-pitch-yaw) ``rpy_deg``, rounded."""
    pose = np.asarray(pose, dtype=np.float64)
    return {
        "xyz_mm": rnd_list(to_mm(pose[:3, 3])),
        "rpy_deg": rnd_list(to_degrees(euler_from_rotation(pose[:3, :3], "fixed-xyz"))),
        "rpy_convention": "fixed-xyz",
    }


def shape_kind(shape) -> str:
    return type(shape).__name__.lower()


def cell_summary(cell) -> dict:
    """The cell in file units, JSON-ready: name, source, inputs, arm, mount, tool, bodies, zones, warnings."""
    arm = cell.arm
    dh = []
    for j in range(6):
        dh.append(
            {
                "joint": j + 1,
                "a_mm": rnd(mm(arm.a[j])),
                "alpha_deg": rnd(to_degrees(arm.alpha[j])),
                "d_mm": rnd(mm(arm.d[j])),
                "offset_deg": rnd(to_degrees(arm.offset[j])),
                "lower_deg": rnd(to_degrees(arm.limits[j, 0])),
                "upper_deg": rnd(to_degrees(arm.limits[j, 1])),
            }
        )
    bodies = [
        {
            "name": b.name,
            "frame": int(b.frame),
            "role": b.role,
            "padding_mm": rnd(mm(b.padding)),
            "shapes": [shape_kind(s) for s in b.shapes],
        }
        for b in cell.bodies
    ]
    from ..scene import zone_panel_names

    zones = [
        {
            "name": z.name,
            "kind": z.kind,
            "clearance_mm": rnd(mm(z.clearance)),
            "allowed": sorted(z.allowed),
            "panels": list(zone_panel_names(z)),
            "shapes": [shape_kind(s) for s in z.shapes],
        }
        for z in cell.zones
    ]
    return {
        "name": cell.name,
        "source": str(cell.source),
        "inputs": [{"file": str(f), "sha256": str(h)} for f, h in cell.inputs],
        "arm": {"name": arm.name, "convention": arm.convention, "dh": dh},
        "mount": pose_summary(cell.world_from_base),
        "tool": {"flange_from_tcp": pose_summary(cell.tool.flange_from_tcp)},
        "bodies": bodies,
        "zones": zones,
        "self_clearance_mm": rnd(mm(cell.self_clearance)),
        "stopping_allowance_mm": rnd(mm(cell.stopping_allowance)),
        "targets": len(cell.targets),
        "warnings": [str(w) for w in cell.warnings],
    }


def tool_version() -> str:
    return __version__


def all_warnings(result) -> list:
    """Load-time warnings of the cell, then the check's own warnings, without repeats, in order."""
    seen = []
    for w in tuple(result.cell.warnings) + tuple(result.warnings):
        w = str(w)
        if w not in seen:
            seen.append(w)
    return seen
