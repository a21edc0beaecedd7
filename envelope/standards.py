"""Machine-safety standard values: safety distances, minimum gaps and protective-device positioning.

Standards covered (values only, as pure look-ups and formulas):

- ISO 13857:2019, safety distances to prevent hazard zones being reached by the upper and lower limbs
  (persons 14 years and older): reaching upwards, reaching over a protective structure (low-risk and
  high-risk tables), reaching through regular openings (upper limbs).
- ISO 13854, minimum gaps to avoid crushing of parts of the human body.
- ISO 13855:2010, positioning of protective devices with respect to the approach speed of the body:
  ``S = K * T + C`` (the 2024 edition restates it as ``S = K * T + D_DS + Z``).
- Perimeter guard rules (fence height, bottom gap) as stated by accident insurers.

The values were taken from secondary public sources (safety bodies, regulators, consultants), not from
purchased copies of the standards, and some are from memory. Each constant below names its sources
(``S1`` .. ``S9``, see ``SOURCES``) and a confidence mark: ``H`` stated consistently by a credible
public page, ``M`` one secondary page, ``U`` from memory, unverified. Every result carries the values,
the table row and column used, the confidence mark and the source ids, so a report can show them. Confirm
every value against the current edition of each standard before relying on it (see ``CAUTIONS``).

Units: these are the standards' own numbers, so lengths here are millimetres and times seconds, and the
names say so (``a_mm``, ``T_s``). Library geometry in metres is converted with ``envelope.units.to_mm``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from types import MappingProxyType

from .errors import InputError

__all__ = [
    "SOURCES",
    "CONFIDENCE",
    "CAUTIONS",
    "CAUTION_LINE",
    "REACH_UPWARDS_LIMIT_MM",
    "REACH_OVER_LOW",
    "REACH_OVER_HIGH",
    "OPENING_BANDS",
    "MIN_GAPS_MM",
    "ISO13855_2024_NOTE",
    "ReachOverTable",
    "ReachOverResult",
    "ReachUpwardsResult",
    "OpeningResult",
    "CrushingGapResult",
    "ProtectiveDistanceResult",
    "GuardRulesResult",
    "reach_over_distance",
    "reach_upwards",
    "opening_distance",
    "crushing_gap_check",
    "protective_device_distance",
    "guard_rules",
]

SOURCES = MappingProxyType(
    {
        "S1": 'gt-engineering.it, "EN ISO 13857 safety distances, upper limbs"',
        "S2": 'safety-products.de, "Safety distances upper and lower limbs"',
        "S3": 'zt-grassberger.at, "ISO 13857 safety distance"',
        "S4": "DGUV Information 209-074 (German statutory accident insurance), section 4.2.1.1",
        "S5": 'AUVA (Austrian accident insurer) lexicon, "Safety distances" (ISO 13854 gaps)',
        "S6": 'gt-engineering.it, "EN ISO 13855" sections 5 and 6.3',
        "S7": 'gt-engineering.it, "EN ISO 10218-2" definitions and "EN ISO 10218-1 5.12 axis limiting"',
        "S8": 'robot-safety.net, "Dimensions and fastening of robot safety fences" and "Restricted space"',
        "S9": "OSHA Technical Manual, section IV chapter 4 (industrial robots)",
    }
)
"""The secondary public pages the values come from, by id."""

CONFIDENCE = MappingProxyType(
    {
        "H": "stated consistently by a credible public page",
        "M": "one secondary page",
        "U": "from memory, unverified",
    }
)
"""What each confidence mark means."""

RISKS = ("high", "low")

# ---------------------------------------------------------------------------------------------------
# Cautions a report carries (our own wording of the points in the shared reference).

CAUTIONS = (
    "This is a design aid for pre-checking zones and clearances. It does not replace the risk "
    "assessment to ISO 12100 by a competent person, the validation of the safety functions to "
    "ISO 13849-2, or the arm maker's measured stopping times and distances.",
    "The applicable law and codes take precedence: in the EU the Machinery Regulation (EU) 2023/1230 "
    "from 20 January 2027 and Directive 2006/42/EC until then; in the US the OSHA general duty clause "
    "and 29 CFR 1910.212.",
    "The geometry is only as good as the meshes and parameters it was given. Clearances do not include "
    "the distance the arm travels while stopping unless that distance was entered.",
    "Standard values were taken from secondary public sources and must be confirmed against the current "
    "edition of each standard; the high-risk reach-over table of ISO 13857 is from memory and unverified.",
)
"""The caution paragraphs a report prints, in order."""

CAUTION_LINE = (
    "Design aid only: does not replace the ISO 12100 risk assessment, ISO 13849-2 validation, the arm "
    "maker's stopping data or the applicable law; confirm standard values against current editions."
)
"""A one-line version of ``CAUTIONS`` for CLI help."""


def _finite_mm(value, name: str, *, positive: bool = False) -> float:
    """``value`` as a float that is finite and >= 0 (or > 0), else InputError naming ``name``."""
    try:
        x = float(value)
    except (TypeError, ValueError):
        raise InputError(f"expected a number of millimetres, got {value!r}", item=name) from None
    if not math.isfinite(x) or x < 0 or (positive and x == 0):
        bound = "> 0" if positive else ">= 0"
        raise InputError(f"expected a finite value {bound}, got {value!r}", item=name)
    return x


def _risk(risk: str) -> str:
    if risk not in RISKS:
        raise InputError(f"expected risk 'high' or 'low', got {risk!r}", item="risk")
    return risk


# ---------------------------------------------------------------------------------------------------
# ISO 13857:2019 reaching upwards.
# Sources S1, S2; confidence H. Low risk = friction or abrasion only; a robot cell is normally high
# risk (crushing, shearing) [S4].

REACH_UPWARDS_LIMIT_MM = MappingProxyType({"low": 2500, "high": 2700})
"""Hazard height from which no safety distance is needed, by risk (ISO 13857, H, [S1][S2])."""


@dataclass(frozen=True)
class ReachUpwardsResult:
    """Whether a hazard zone at ``hazard_height_mm`` is out of reach upwards (ISO 13857)."""

    hazard_height_mm: float
    risk: str
    limit_mm: int
    needs_distance: bool
    note: str
    standard: str = "ISO 13857:2019, reaching upwards"
    confidence: str = "H"
    sources: tuple = ("S1", "S2")


def reach_upwards(hazard_height_mm, risk: str = "high") -> ReachUpwardsResult:
    """Reaching upwards: no safety distance from 2700 mm (high risk) / 2500 mm (low risk) hazard height.

    Parameters
    ----------
    hazard_height_mm : float
        Height of the lowest point of the hazard zone above the floor.
    risk : {"high", "low"}

    Returns
    -------
    ReachUpwardsResult
    """
    risk = _risk(risk)
    h = _finite_mm(hazard_height_mm, "hazard_height_mm")
    limit = REACH_UPWARDS_LIMIT_MM[risk]
    needs = h < limit
    note = (
        f"hazard zone below {limit} mm ({risk} risk): a safety distance or guard is needed"
        if needs
        else f"hazard zone at or above {limit} mm ({risk} risk): no safety distance needed"
    )
    return ReachUpwardsResult(h, risk, limit, needs, note)


# ---------------------------------------------------------------------------------------------------
# ISO 13857:2019 reaching over a protective structure.
# a = hazard-zone height (rows), b = structure height (columns), c = horizontal distance, all mm.


@dataclass(frozen=True, eq=False)
class ReachOverTable:
    """A reach-over table: ``c_mm[r][k]`` is c for hazard height ``rows_a_mm[r]`` and structure
    height ``columns_b_mm[k]``. Rows run from the top hazard height down to 0."""

    risk: str
    rows_a_mm: tuple
    columns_b_mm: tuple
    c_mm: tuple
    confidence: str
    sources: tuple
    note: str


# Low risk: confidence H, source S2 (rows 2400..600 also match an older national regulation's table);
# the look-up rules (structure < 1000 mm does not count, more-conservative neighbour) H, [S2][S4].
REACH_OVER_LOW = ReachOverTable(
    risk="low",
    rows_a_mm=(2500, 2400, 2200, 2000, 1800, 1600, 1400, 1200, 1000, 800, 600, 400, 200, 0),
    columns_b_mm=(1000, 1200, 1400, 1600, 1800, 2000, 2200, 2400, 2500),
    c_mm=(
        (0, 0, 0, 0, 0, 0, 0, 0, 0),  # a = 2500
        (100, 100, 100, 100, 100, 100, 100, 100, 0),  # 2400
        (600, 600, 500, 500, 400, 350, 250, 0, 0),  # 2200
        (1100, 900, 700, 600, 500, 350, 0, 0, 0),  # 2000
        (1100, 1000, 900, 900, 600, 0, 0, 0, 0),  # 1800
        (1300, 1000, 900, 900, 500, 0, 0, 0, 0),  # 1600
        (1300, 1000, 900, 800, 100, 0, 0, 0, 0),  # 1400
        (1400, 1000, 900, 500, 0, 0, 0, 0, 0),  # 1200
        (1400, 1000, 900, 300, 0, 0, 0, 0, 0),  # 1000
        (1300, 900, 600, 0, 0, 0, 0, 0, 0),  # 800
        (1200, 500, 0, 0, 0, 0, 0, 0, 0),  # 600
        (1200, 300, 0, 0, 0, 0, 0, 0, 0),  # 400
        (1100, 200, 0, 0, 0, 0, 0, 0, 0),  # 200
        (1100, 200, 0, 0, 0, 0, 0, 0, 0),  # 0
    ),
    confidence="H",
    sources=("S2", "S4"),
    note="ISO 13857:2019 reach-over table, low risk (H, [S2])",
)
"""ISO 13857:2019 reaching over, low risk (H, [S2]; rules [S2][S4])."""

# High risk: confidence U, FROM MEMORY, UNVERIFIED; only the b = 2000 column was matched against a
# consultant's published bands. The look-up rules are H, [S2][S4].
REACH_OVER_HIGH = ReachOverTable(
    risk="high",
    rows_a_mm=(2700, 2600, 2400, 2200, 2000, 1800, 1600, 1400, 1200, 1000, 800, 600, 400, 200, 0),
    columns_b_mm=(1000, 1200, 1400, 1600, 1800, 2000, 2200, 2400, 2500, 2700),
    c_mm=(
        (0, 0, 0, 0, 0, 0, 0, 0, 0, 0),  # a = 2700
        (900, 800, 700, 600, 600, 500, 400, 300, 100, 0),  # 2600
        (1100, 1000, 900, 800, 700, 600, 400, 300, 100, 0),  # 2400
        (1300, 1200, 1000, 900, 800, 600, 400, 300, 0, 0),  # 2200
        (1400, 1300, 1100, 900, 800, 600, 400, 0, 0, 0),  # 2000
        (1500, 1400, 1100, 900, 800, 600, 0, 0, 0, 0),  # 1800
        (1500, 1400, 1100, 900, 800, 500, 0, 0, 0, 0),  # 1600
        (1500, 1400, 1100, 900, 800, 0, 0, 0, 0, 0),  # 1400
        (1500, 1400, 1100, 900, 700, 0, 0, 0, 0, 0),  # 1200
        (1500, 1400, 1000, 800, 0, 0, 0, 0, 0, 0),  # 1000
        (1500, 1300, 900, 600, 0, 0, 0, 0, 0, 0),  # 800
        (1400, 1300, 800, 0, 0, 0, 0, 0, 0, 0),  # 600
        (1400, 1200, 400, 0, 0, 0, 0, 0, 0, 0),  # 400
        (1200, 900, 0, 0, 0, 0, 0, 0, 0, 0),  # 200
        (1100, 500, 0, 0, 0, 0, 0, 0, 0, 0),  # 0
    ),
    confidence="U",
    sources=("S2", "S4"),
    note="ISO 13857:2019 reach-over table, high risk: from memory, unverified (U); rules from [S2][S4]",
)
"""ISO 13857:2019 reaching over, high risk (U, from memory, unverified)."""

REACH_OVER_MIN_STRUCTURE_MM = 1000
"""A protective structure lower than this does not count (ISO 13857, H, [S2][S4])."""
REACH_OVER_HIGH_RISK_MEASURES_BELOW_MM = 1400
"""For high risk, a structure lower than this needs additional measures (ISO 13857, H, [S2][S4])."""

_REACH_OVER = {"low": REACH_OVER_LOW, "high": REACH_OVER_HIGH}


@dataclass(frozen=True)
class ReachOverResult:
    """The horizontal distance c needed when reaching over a structure (ISO 13857:2019).

    Attributes
    ----------
    a_mm, b_mm : float
        The hazard-zone height and the structure height given.
    risk : str
        ``"high"`` or ``"low"``: which table was used.
    c_mm : float or None
        The required horizontal distance from the structure to the hazard zone; None when the structure
        does not count (lower than 1000 mm).
    row_a_mm : int or None
        The table row used (hazard height); None when no row was looked up.
    rows_bracketing_mm : (int, int) or None
        The table rows at or below and at or above ``a_mm`` (equal when ``a_mm`` is a row); of these
        the one giving the larger c is ``row_a_mm``.
    column_b_mm : int or None
        The table column used: the largest column at or below ``b_mm``.
    structure_counts : bool
        False when the structure is lower than 1000 mm.
    additional_measures : bool
        True when the structure does not count, or (high risk) is lower than 1400 mm.
    note : str
        What was decided, in words.
    """

    a_mm: float
    b_mm: float
    risk: str
    c_mm: float | None
    row_a_mm: int | None
    rows_bracketing_mm: tuple | None
    column_b_mm: int | None
    structure_counts: bool
    additional_measures: bool
    note: str
    table: str
    confidence: str
    sources: tuple
    standard: str = "ISO 13857:2019, reaching over a protective structure"


def reach_over_distance(a_mm, b_mm, risk: str = "high") -> ReachOverResult:
    """Required horizontal distance c when reaching over a protective structure (ISO 13857:2019).

    Rules (H, [S2][S4]): a structure lower than 1000 mm does not count (additional measures needed);
    for high risk a structure lower than 1400 mm needs additional measures; for ``b`` between columns
    the next lower column is used (above the last column, the last column); for ``a`` between rows the
    bracketing row giving the larger c is used; no interpolation (the usual reading, U). From a hazard
    height of 2700 mm (high) / 2500 mm (low) no distance is needed.

    Parameters
    ----------
    a_mm : float
        Height of the hazard zone above the floor.
    b_mm : float
        Height of the protective structure (its top edge) above the floor.
    risk : {"high", "low"}
        ``"high"`` (crushing, shearing: a robot cell) uses the high-risk table, which is from memory and
        unverified (confidence U); ``"low"`` (friction, abrasion only) the low-risk table (H).

    Returns
    -------
    ReachOverResult

    Raises
    ------
    InputError
        For a risk other than "high"/"low", or a height that is negative or not finite.
    """
    risk = _risk(risk)
    a = _finite_mm(a_mm, "a_mm")
    b = _finite_mm(b_mm, "b_mm")
    table = _REACH_OVER[risk]
    confidence = table.confidence
    top = REACH_UPWARDS_LIMIT_MM[risk]
    counts = b >= REACH_OVER_MIN_STRUCTURE_MM

    def result(c, row, rows, column, measures, note):
        return ReachOverResult(
            a, b, risk, c, row, rows, column, counts, measures, note, table.note, confidence, table.sources
        )

    if a >= top:
        return result(
            0.0, None, None, None, False,
            f"hazard zone at or above {top} mm ({risk} risk): no safety distance needed",
        )
    if not counts:
        return result(
            None, None, None, None, True,
            f"structure lower than {REACH_OVER_MIN_STRUCTURE_MM} mm: structure does not count: "
            "additional measures needed",
        )

    columns = table.columns_b_mm
    k = max(i for i, col in enumerate(columns) if col <= b)  # next lower column; the last above the table
    rows = table.rows_a_mm  # descending, ending at 0
    r_above = max(i for i, row in enumerate(rows) if row >= a)  # the lowest row at or above a
    r_below = min(i for i, row in enumerate(rows) if row <= a)  # the highest row at or below a
    c_above = table.c_mm[r_above][k]
    c_below = table.c_mm[r_below][k]
    r = r_above if c_above >= c_below else r_below
    c = float(table.c_mm[r][k])
    measures = risk == "high" and b < REACH_OVER_HIGH_RISK_MEASURES_BELOW_MM
    note = f"c = {c:g} mm from row a = {rows[r]} mm, column b = {columns[k]} mm ({risk} risk)"
    if risk == "high":
        note += "; high-risk table from memory, unverified"
    if measures:
        note += (
            f"; high risk: structure lower than {REACH_OVER_HIGH_RISK_MEASURES_BELOW_MM} mm needs "
            "additional measures"
        )
    return result(c, rows[r], (rows[r_below], rows[r_above]), columns[k], measures, note)


# ---------------------------------------------------------------------------------------------------
# ISO 13857:2019 reaching through regular openings, upper limbs.
# Sources S3, S2; confidence H. e = side of a square, diameter of a round hole, narrowest dimension
# of a slot; sr = distance from the opening to the hazard (mm). Band k covers low < e <= high.

OPENING_BANDS = (
    # (low, high, slot, square, round)
    (0, 4, 2, 2, 2),
    (4, 6, 10, 5, 5),
    (6, 8, 20, 15, 5),
    (8, 10, 80, 25, 20),
    (10, 12, 100, 80, 80),
    (12, 20, 120, 120, 120),
    (20, 30, 850, 120, 120),  # slot: 200 if the slot is at most 65 mm long (SLOT_SHORT_*)
    (30, 40, 850, 200, 120),
    (40, 120, 850, 850, 850),
)
"""ISO 13857:2019 openings, upper limbs: ``(low_mm, high_mm, sr_slot, sr_square, sr_round)`` for
``low < e <= high`` (the first band is ``e <= 4``) (H, [S3][S2])."""

SLOT_SHORT_BAND_MM = (20, 30)
SLOT_SHORT_MAX_LENGTH_MM = 65
SLOT_SHORT_SR_MM = 200
"""A slot with 20 < e <= 30 that is at most 65 mm long needs sr = 200 mm, not 850 (H, [S3][S2])."""

OPENING_MAX_MM = 120
"""Openings wider than this are treated as reaching over (H, [S3][S2])."""
WHOLE_BODY_MM = MappingProxyType({"slot": 180, "square": 240, "round": 240})
"""Openings wider than this let the whole body through (H, [S2])."""

_SHAPES = ("slot", "square", "round")


@dataclass(frozen=True)
class OpeningResult:
    """The safety distance sr for reaching through a regular opening (ISO 13857:2019, upper limbs).

    Attributes
    ----------
    sr_mm : float or None
        Required distance from the opening to the hazard; None for openings over 120 mm, which are
        treated as reaching over (``treated_as_reach_over``).
    band : str
        The band of the table used, e.g. ``"20 < e <= 30"``, or ``"e > 120"``.
    band_low_mm, band_high_mm : float
        The band's edges (``band_high_mm`` is ``inf`` for openings over 120 mm).
    slot_short : bool
        True when the short-slot value (200 mm, slot at most 65 mm long) was used.
    whole_body_access : bool
        True for a slot over 180 mm or a square/round opening over 240 mm.
    """

    e_mm: float
    shape: str
    slot_length_mm: float | None
    sr_mm: float | None
    band: str
    band_low_mm: float
    band_high_mm: float
    slot_short: bool
    treated_as_reach_over: bool
    whole_body_access: bool
    note: str
    standard: str = "ISO 13857:2019, reaching through regular openings, upper limbs"
    confidence: str = "H"
    sources: tuple = ("S3", "S2")


def opening_distance(e_mm, shape: str = "slot", slot_length_mm=None) -> OpeningResult:
    """Safety distance sr for reaching through a regular opening with the upper limbs (ISO 13857:2019).

    Parameters
    ----------
    e_mm : float
        Narrowest dimension of a slot, side of a square, diameter of a round opening (> 0).
    shape : {"slot", "square", "round"}
    slot_length_mm : float, optional
        The slot's length (its longer side), for the short-slot rule in 20 < e <= 30 (sr = 200 mm when
        at most 65 mm long). Without it, the longer-slot value 850 mm is used. Only for slots.

    Returns
    -------
    OpeningResult

    Raises
    ------
    InputError
        Unknown shape, e not finite and > 0, a slot length for a square/round opening, or a slot length
        shorter than e.
    """
    if shape not in _SHAPES:
        raise InputError(f"expected shape 'slot', 'square' or 'round', got {shape!r}", item="shape")
    e = _finite_mm(e_mm, "e_mm", positive=True)
    length = None
    if slot_length_mm is not None:
        if shape != "slot":
            raise InputError(
                f"slot_length_mm applies to shape 'slot' only, got it for shape {shape!r}", item="slot_length_mm"
            )
        length = _finite_mm(slot_length_mm, "slot_length_mm", positive=True)
        if length < e:
            raise InputError(
                f"expected a slot length >= e = {e:g} mm (e is the narrowest dimension), got {length:g} mm",
                item="slot_length_mm",
            )
    whole_body = e > WHOLE_BODY_MM[shape]
    if e > OPENING_MAX_MM:
        note = f"opening over {OPENING_MAX_MM} mm: treated as reaching over"
        if whole_body:
            note += f"; a {shape} over {WHOLE_BODY_MM[shape]} mm lets the whole body through"
        return OpeningResult(
            e, shape, length, None, f"e > {OPENING_MAX_MM}", float(OPENING_MAX_MM), math.inf, False, True,
            whole_body, note,
        )
    low, high, *values = next(band for band in OPENING_BANDS if e <= band[1])
    sr = values[_SHAPES.index(shape)]
    band = f"e <= {high}" if low == 0 else f"{low} < e <= {high}"
    short = (
        shape == "slot" and (low, high) == SLOT_SHORT_BAND_MM and length is not None
        and length <= SLOT_SHORT_MAX_LENGTH_MM
    )
    if short:
        sr = SLOT_SHORT_SR_MM
        note = f"sr = {sr} mm: slot {band} mm at most {SLOT_SHORT_MAX_LENGTH_MM} mm long"
    else:
        note = f"sr = {sr} mm for a {shape}, {band} mm"
        if shape == "slot" and (low, high) == SLOT_SHORT_BAND_MM and length is None:
            note += f" (slot length not given: a slot at most {SLOT_SHORT_MAX_LENGTH_MM} mm long would need 200 mm)"
    return OpeningResult(e, shape, length, float(sr), band, float(low), float(high), short, False, whole_body, note)


# ---------------------------------------------------------------------------------------------------
# ISO 13854 minimum gaps to avoid crushing. Source S5; confidence H.

MIN_GAPS_MM = MappingProxyType(
    {"body": 500, "head": 300, "leg": 180, "foot": 120, "toes": 50, "arm": 120, "hand": 100, "finger": 25}
)
"""ISO 13854 minimum gaps by body part, mm (H, [S5])."""


@dataclass(frozen=True)
class CrushingGapResult:
    """Whether a gap is a crushing point for a body part (ISO 13854)."""

    gap_mm: float
    body_part: str
    min_gap_mm: int
    crushing_point: bool
    note: str
    standard: str = "ISO 13854, minimum gaps to avoid crushing"
    confidence: str = "H"
    sources: tuple = ("S5",)


def crushing_gap_check(gap_mm, body_part: str = "body") -> CrushingGapResult:
    """Is a gap (between the restricted space and a fixed object) a crushing point? (ISO 13854)

    A gap smaller than the minimum gap of the body part that can enter it is a crushing point to be
    resolved in the risk assessment; a gap equal to the minimum is not flagged.

    Parameters
    ----------
    gap_mm : float
    body_part : str
        One of ``MIN_GAPS_MM``: body, head, leg, foot, toes, arm, hand, finger.

    Returns
    -------
    CrushingGapResult
    """
    if body_part not in MIN_GAPS_MM:
        raise InputError(
            f"expected a body part among {', '.join(MIN_GAPS_MM)}, got {body_part!r}", item="body_part"
        )
    gap = _finite_mm(gap_mm, "gap_mm")
    minimum = MIN_GAPS_MM[body_part]
    crushing = gap < minimum
    if crushing:
        note = f"gap {gap:g} mm < {minimum} mm minimum for the {body_part}: crushing point, resolve in the risk assessment"
    else:
        note = f"gap {gap:g} mm >= {minimum} mm minimum for the {body_part}"
    return CrushingGapResult(gap, body_part, minimum, crushing, note)


# ---------------------------------------------------------------------------------------------------
# ISO 13855:2010 minimum distance S = K * T + C. Source S6; confidence H for the d <= 40 mm and
# multi-beam rules, M for 40 < d <= 70 mm and single beam.

ISO13855_2024_NOTE = (
    "ISO 13855:2024 restates this as S = K*T + D_DS + Z (Z: supplementary distance); check before relying on it."
)
"""The note every ISO 13855 result carries about the 2024 edition ([S6])."""

_KINDS = ("perpendicular", "multi-beam", "single-beam")


@dataclass(frozen=True)
class ProtectiveDistanceResult:
    """The minimum distance S of a protective device from the hazard zone (ISO 13855:2010).

    Attributes
    ----------
    T_s : float
        Overall response time: the device's response time plus the machine's stopping time.
    d_mm : float or None
        Detection capability (perpendicular approach); None for beam devices.
    K_mm_per_s, C_mm : float
        The approach speed and intrusion distance of the formula used.
    formula : str
        The formula used, e.g. ``"S = 1600*T + 8*(d - 14), at least 500"``.
    S_formula_mm : float
        ``K*T + C`` before the minimum is applied.
    minimum_mm : float
        The minimum of the branch used (0 where none).
    S_mm : float
        The minimum distance.
    S_first_try_mm : float or None
        For d <= 40 mm, ``2000*T + 8*(d - 14)`` (the value that decides the branch); else None.
    """

    T_s: float
    d_mm: float | None
    kind: str
    K_mm_per_s: float
    C_mm: float
    formula: str
    S_formula_mm: float
    minimum_mm: float
    S_mm: float
    S_first_try_mm: float | None
    note: str
    confidence: str
    sources: tuple = ("S6",)
    standard: str = "ISO 13855:2010, positioning of protective devices"


def protective_device_distance(T_s, d_mm=None, kind: str = "perpendicular") -> ProtectiveDistanceResult:
    """Minimum distance S = K*T + C of a protective device from the hazard zone (ISO 13855:2010).

    - ``"perpendicular"`` approach, d <= 40 mm: S = 2000*T + 8*(d - 14), at least 100 mm; if that gives
      more than 500 mm, S = 1600*T + 8*(d - 14), at least 500 mm (H, [S6]).
    - ``"perpendicular"``, 40 < d <= 70 mm: S = 1600*T + 850 (M, [S6]).
    - ``"multi-beam"``: S = 1600*T + 850 (H, [S6]); ``"single-beam"``: S = 1600*T + 1200 (M, [S6]).

    Parameters
    ----------
    T_s : float
        Response time of the device plus stopping time of the machine, seconds (>= 0).
    d_mm : float, optional
        Detection capability, mm; required for ``"perpendicular"`` (0 < d <= 70), not used otherwise.
    kind : {"perpendicular", "multi-beam", "single-beam"}

    Returns
    -------
    ProtectiveDistanceResult
        Its ``note`` says that the 2024 edition restates the formula.

    Raises
    ------
    InputError
        Unknown kind, T not finite and >= 0, d missing or outside 0 < d <= 70 mm for a perpendicular
        approach, or d given for a beam device.
    """
    if kind not in _KINDS:
        raise InputError(f"expected kind among {', '.join(_KINDS)}, got {kind!r}", item="kind")
    try:
        T = float(T_s)
    except (TypeError, ValueError):
        raise InputError(f"expected a time in seconds, got {T_s!r}", item="T_s") from None
    if not math.isfinite(T) or T < 0:
        raise InputError(f"expected a finite time >= 0 s, got {T_s!r}", item="T_s")

    if kind != "perpendicular":
        if d_mm is not None:
            raise InputError(f"d_mm applies to kind 'perpendicular' only, got it for {kind!r}", item="d_mm")
        C = 850.0 if kind == "multi-beam" else 1200.0
        S = 1600.0 * T + C
        formula = f"S = 1600*T + {C:g}"
        confidence = "H" if kind == "multi-beam" else "M"
        note = f"{formula} ({kind} device); {ISO13855_2024_NOTE}"
        return ProtectiveDistanceResult(T, None, kind, 1600.0, C, formula, S, 0.0, S, None, note, confidence)

    if d_mm is None:
        raise InputError("expected a detection capability d_mm for a perpendicular approach, got None", item="d_mm")
    d = _finite_mm(d_mm, "d_mm", positive=True)
    if d > 70:
        raise InputError(
            f"expected a detection capability 0 < d <= 70 mm for a perpendicular approach, got {d:g} mm "
            "(use kind 'multi-beam' or 'single-beam')",
            item="d_mm",
        )
    if d > 40:
        S = 1600.0 * T + 850.0
        formula = "S = 1600*T + 850"
        note = f"{formula} (40 < d <= 70 mm); {ISO13855_2024_NOTE}"
        return ProtectiveDistanceResult(T, d, kind, 1600.0, 850.0, formula, S, 0.0, S, None, note, "M")

    C = 8.0 * (d - 14.0)
    first = 2000.0 * T + C
    if first <= 500.0:
        K, minimum, S_formula = 2000.0, 100.0, first
        formula = "S = 2000*T + 8*(d - 14), at least 100"
    else:
        K, minimum, S_formula = 1600.0, 500.0, 1600.0 * T + C
        formula = "S = 1600*T + 8*(d - 14), at least 500 (2000*T + C gave more than 500)"
    S = max(S_formula, minimum)
    note = f"{formula}; S = {S:g} mm; {ISO13855_2024_NOTE}"
    return ProtectiveDistanceResult(T, d, kind, K, C, formula, S_formula, minimum, S, first, note, "H")


# ---------------------------------------------------------------------------------------------------
# Perimeter guards. Sources S4, S8; confidence H.

GUARD_MIN_HEIGHT_MM = 1400
"""Perimeter fence at least this high, against climbing over (H, [S4][S8])."""
GUARD_MAX_BOTTOM_GAP_MM = 180
"""Bottom edge of the fence at most this high above the floor, against crawling under (H, [S4][S8])."""


@dataclass(frozen=True)
class GuardRulesResult:
    """Whether a perimeter fence meets the height and bottom-gap rules."""

    height_mm: float
    bottom_gap_mm: float
    min_height_mm: int
    max_bottom_gap_mm: int
    height_ok: bool
    bottom_gap_ok: bool
    passes: bool
    note: str
    standard: str = "perimeter guard rules (accident insurers' guidance)"
    confidence: str = "H"
    sources: tuple = ("S4", "S8")


def guard_rules(height_mm, bottom_gap_mm) -> GuardRulesResult:
    """Check a perimeter fence: height at least 1400 mm, bottom gap at most 180 mm (H, [S4][S8]).

    Parameters
    ----------
    height_mm : float
        Height of the fence's top edge above the floor.
    bottom_gap_mm : float
        Height of its bottom edge above the floor.

    Returns
    -------
    GuardRulesResult
    """
    h = _finite_mm(height_mm, "height_mm")
    g = _finite_mm(bottom_gap_mm, "bottom_gap_mm")
    if g >= h:
        raise InputError(
            f"expected the bottom gap below the fence height {h:g} mm, got {g:g} mm", item="bottom_gap_mm"
        )
    height_ok = h >= GUARD_MIN_HEIGHT_MM
    gap_ok = g <= GUARD_MAX_BOTTOM_GAP_MM
    problems = []
    if not height_ok:
        problems.append(f"fence {h:g} mm is lower than {GUARD_MIN_HEIGHT_MM} mm (climbing over)")
    if not gap_ok:
        problems.append(f"bottom gap {g:g} mm is more than {GUARD_MAX_BOTTOM_GAP_MM} mm (crawling under)")
    note = "; ".join(problems) if problems else "fence height and bottom gap meet the guard rules"
    return GuardRulesResult(
        h, g, GUARD_MIN_HEIGHT_MM, GUARD_MAX_BOTTOM_GAP_MM, height_ok, gap_ok, height_ok and gap_ok, note
    )
