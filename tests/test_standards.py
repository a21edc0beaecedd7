"""Tests of envelope.standards against the values of the shared reference.

"REF" below is shared/reference/safety-standards.md (values from secondary public sources S1..S9,
with confidence marks H/M/U); the source id given beside each value is the one the reference names.
"""

from __future__ import annotations

import dataclasses
import math
import re
from pathlib import Path

import pytest

from envelope import standards as st
from envelope.errors import InputError

REF_PATH = Path(__file__).resolve().parents[2] / "shared" / "reference" / "safety-standards.md"


# ---------------------------------------------------------------- the whole tables against the reference file


def _ref_table(heading: str):
    """Parse the markdown table that follows ``heading`` in REF: (columns, {row: values})."""
    if not REF_PATH.exists():
        pytest.skip(f"reference file not present: {REF_PATH}")
    text = REF_PATH.read_text(encoding="utf-8")
    start = text.index(heading)
    block = []  # the table ends at the first non-table line after it began
    for ln in text[start:].splitlines()[1:]:
        if ln.startswith("|"):
            block.append(ln)
        elif block:
            break
    header, rows = block[0], block[2:]
    cols = [int(c) for c in header.strip("|").split("|")[1:]]
    table = {}
    for ln in rows:
        cells = [c.strip() for c in ln.strip("|").split("|")]
        table[int(cells[0])] = [int(c) for c in cells[1:]]
    return cols, table


@pytest.mark.parametrize(
    "heading, table",
    [
        ("Low risk (H, [S2]", st.REACH_OVER_LOW),  # REF, from [S2]
        ("High risk (U, from memory", st.REACH_OVER_HIGH),  # REF, from memory (U)
    ],
)
def test_reach_over_tables_equal_reference_file(heading, table):
    cols, ref = _ref_table(heading)
    assert list(table.columns_b_mm) == cols
    assert list(table.rows_a_mm) == list(ref)
    for row, values in zip(table.rows_a_mm, table.c_mm):
        assert list(values) == ref[row], row


def test_table_marks():
    assert st.REACH_OVER_LOW.confidence == "H"  # REF: low-risk table H [S2]
    assert st.REACH_OVER_HIGH.confidence == "U"  # REF: high-risk table from memory, unverified
    assert "from memory" in st.REACH_OVER_HIGH.note and "unverified" in st.REACH_OVER_HIGH.note


def test_opening_table_equals_reference_file():
    if not REF_PATH.exists():
        pytest.skip(f"reference file not present: {REF_PATH}")
    text = REF_PATH.read_text(encoding="utf-8")
    start = text.index("| e (mm) | slot | square | round |")
    rows = [ln for ln in text[start:].split("\n\n")[0].splitlines()[2:]]
    assert len(rows) == len(st.OPENING_BANDS)
    for ln, band in zip(rows, st.OPENING_BANDS):
        cells = [c.strip() for c in ln.strip("|").split("|")]
        edges = [int(x) for x in re.findall(r"\d+", cells[0])]
        assert edges == ([band[1]] if band[0] == 0 else [band[0], band[1]])
        assert [int(re.match(r"\d+", c).group()) for c in cells[1:]] == list(band[2:])


# ---------------------------------------------------------------- ISO 13857 reaching over


@pytest.mark.parametrize(
    "a, b, risk, c",
    [
        (2000, 1400, "low", 700),  # REF, from [S2]: low risk a=2000, b=1400 -> 700
        (2200, 2000, "low", 350),  # REF, from [S2]
        (1000, 1000, "low", 1400),  # REF, from [S2]
        (0, 1200, "low", 200),  # REF, from [S2]
        (2400, 2400, "low", 100),  # REF, from [S2]
        (2400, 2500, "low", 0),  # REF, from [S2]
        (1400, 1800, "low", 100),  # REF, from [S2]
        (2000, 2000, "high", 600),  # REF, from memory (U): b=2000 column matched to a consultant's bands
        (1600, 2000, "high", 500),  # REF, from memory (U)
        (2600, 2500, "high", 100),  # REF, from memory (U)
        (1400, 1400, "high", 1100),  # REF, from memory (U)
        (0, 1000, "high", 1100),  # REF, from memory (U)
    ],
)
def test_reach_over_on_grid(a, b, risk, c):
    r = st.reach_over_distance(a, b, risk)
    assert r.c_mm == c
    assert r.row_a_mm == a and r.column_b_mm == b and r.rows_bracketing_mm == (a, a)
    assert r.structure_counts
    assert r.confidence == ("U" if risk == "high" else "H")
    assert r.sources == ("S2", "S4")
    assert r.risk == risk and r.a_mm == a and r.b_mm == b


def test_reach_over_between_rows_takes_larger_c():
    # REF rules (H, [S2][S4]): for a between rows, the bracketing row that gives the larger c
    r = st.reach_over_distance(1500, 1800, "low")  # rows 1400 -> 100, 1600 -> 500 (REF, from [S2])
    assert (r.c_mm, r.row_a_mm, r.rows_bracketing_mm) == (500, 1600, (1400, 1600))
    r = st.reach_over_distance(1900, 1800, "low")  # rows 1800 -> 600, 2000 -> 500 (REF, from [S2])
    assert (r.c_mm, r.row_a_mm, r.rows_bracketing_mm) == (600, 1800, (1800, 2000))
    r = st.reach_over_distance(1100, 1000, "high")  # rows 1000 -> 1500, 1200 -> 1500 (REF, from memory)
    assert r.c_mm == 1500
    r = st.reach_over_distance(2650, 1000, "high")  # rows 2600 -> 900, 2700 -> 0 (REF, from memory)
    assert (r.c_mm, r.row_a_mm) == (900, 2600)
    r = st.reach_over_distance(100, 1200, "high")  # rows 0 -> 500, 200 -> 900 (REF, from memory)
    assert (r.c_mm, r.row_a_mm, r.rows_bracketing_mm) == (900, 200, (0, 200))


def test_reach_over_between_columns_takes_next_lower():
    # REF rules (H, [S2][S4]): for b between columns, the next lower column
    r = st.reach_over_distance(2000, 1900, "low")  # column 1800 -> 500, not 2000 -> 350 (REF, from [S2])
    assert (r.c_mm, r.column_b_mm) == (500, 1800)
    r = st.reach_over_distance(2200, 2399.9, "low")  # column 2200 -> 250 (REF, from [S2])
    assert (r.c_mm, r.column_b_mm) == (250, 2200)
    # both at once: a = 1700 (rows 1600/1800), b = 1300 (column 1200): 1000 either way (REF, from [S2])
    r = st.reach_over_distance(1700, 1300, "low")
    assert (r.c_mm, r.column_b_mm, r.rows_bracketing_mm) == (1000, 1200, (1600, 1800))
    # b above the last column: the last column (REF: 2500 low, 2700 high)
    r = st.reach_over_distance(2400, 3000, "low")
    assert (r.c_mm, r.column_b_mm) == (0, 2500)
    r = st.reach_over_distance(2600, 2699, "high")
    assert (r.c_mm, r.column_b_mm) == (100, 2500)
    r = st.reach_over_distance(2600, 5000, "high")
    assert (r.c_mm, r.column_b_mm) == (0, 2700)


def test_reach_over_structure_under_1000_does_not_count():
    # REF rules (H, [S2][S4]): a structure lower than 1000 mm does not count
    for risk in ("low", "high"):
        r = st.reach_over_distance(1400, 999, risk)
        assert r.c_mm is None and not r.structure_counts and r.additional_measures
        assert "structure does not count: additional measures needed" in r.note
        assert r.row_a_mm is None and r.column_b_mm is None and r.rows_bracketing_mm is None
        r = st.reach_over_distance(1400, 1000, risk)
        assert r.structure_counts and r.c_mm == (1300 if risk == "low" else 1500)  # REF, [S2] / from memory


def test_reach_over_high_risk_under_1400_flagged():
    # REF rules (H, [S2][S4]): for high risk, structures lower than 1400 mm need additional measures
    r = st.reach_over_distance(2000, 1399, "high")
    assert r.additional_measures and r.column_b_mm == 1200 and r.c_mm == 1300  # REF, from memory (U)
    assert "lower than 1400 mm needs additional measures" in r.note
    r = st.reach_over_distance(2000, 1400, "high")
    assert not r.additional_measures and r.c_mm == 1100  # REF, from memory (U)
    r = st.reach_over_distance(2000, 1399, "low")  # the flag is for high risk only
    assert not r.additional_measures and r.c_mm == 900  # REF, from [S2]


def test_reach_over_no_distance_from_top_height():
    # REF (H, [S1][S2]): no distance from 2700 mm (high) / 2500 mm (low) hazard height
    for risk, top in (("high", 2700), ("low", 2500)):
        r = st.reach_over_distance(top, 1000, risk)
        assert r.c_mm == 0 and not r.additional_measures and r.row_a_mm is None
        assert "no safety distance needed" in r.note
        r = st.reach_over_distance(top, 500, risk)  # even without a counting structure
        assert r.c_mm == 0
        r = st.reach_over_distance(top - 1, 1000, risk)
        assert r.c_mm > 0  # 900 high (from memory), 100 low ([S2])
    assert st.reach_over_distance(2499, 1000, "low").c_mm == 100  # REF, from [S2]: rows 2400/2500
    assert st.reach_over_distance(2699, 1000, "high").c_mm == 900  # REF, from memory (U)


def test_reach_over_high_note_says_unverified():
    r = st.reach_over_distance(2000, 2000)
    assert r.risk == "high" and r.confidence == "U"
    assert "from memory, unverified" in r.note and "unverified" in r.table


@pytest.mark.parametrize(
    "args, match",
    [
        ((2000, 1400, "medium"), r"risk: expected risk 'high' or 'low', got 'medium'"),
        ((-1, 1400, "low"), r"a_mm: expected a finite value >= 0, got -1"),
        ((2000, math.nan, "low"), r"b_mm: expected a finite value >= 0, got nan"),
        ((2000, "tall", "low"), r"b_mm: expected a number of millimetres, got 'tall'"),
    ],
)
def test_reach_over_bad_input(args, match):
    with pytest.raises(InputError, match=match):
        st.reach_over_distance(*args)


def test_results_are_frozen():
    r = st.reach_over_distance(2000, 1400, "low")
    with pytest.raises(dataclasses.FrozenInstanceError):
        r.c_mm = 0


# ---------------------------------------------------------------- ISO 13857 reaching upwards


def test_reach_upwards():
    # REF (H, [S1][S2]): no distance needed from 2500 mm (low) / 2700 mm (high)
    assert not st.reach_upwards(2700, "high").needs_distance
    assert st.reach_upwards(2699.9, "high").needs_distance
    assert not st.reach_upwards(2500, "low").needs_distance
    assert st.reach_upwards(2499, "low").needs_distance
    r = st.reach_upwards(3000)
    assert r.risk == "high" and r.limit_mm == 2700 and r.confidence == "H" and r.sources == ("S1", "S2")


# ---------------------------------------------------------------- ISO 13857 openings

# REF, from [S3][S2]: expected sr (mm) at each band edge; None = over 120 mm, treated as reaching over
OPENING_CASES = {
    "slot": [2, 10, 10, 20, 80, 100, 120, 850, 850, 850, None],
    "square": [2, 5, 5, 15, 25, 80, 120, 120, 200, 850, None],
    "round": [2, 5, 5, 5, 20, 80, 120, 120, 120, 850, None],
}
EDGES = [4, 4.0001, 6, 8, 10, 12, 20, 30, 40, 120, 120.1]


@pytest.mark.parametrize("shape", ["slot", "square", "round"])
@pytest.mark.parametrize("k", range(len(EDGES)))
def test_opening_band_edges(shape, k):
    e, sr = EDGES[k], OPENING_CASES[shape][k]
    r = st.opening_distance(e, shape)
    assert r.sr_mm == sr
    assert r.treated_as_reach_over == (sr is None)
    assert r.confidence == "H" and r.sources == ("S3", "S2")
    if sr is not None:
        assert r.band_low_mm < e <= r.band_high_mm
        assert not r.whole_body_access
    else:
        assert r.band == "e > 120" and "treated as reaching over" in r.note


def test_opening_band_names():
    assert st.opening_distance(4, "round").band == "e <= 4"
    assert st.opening_distance(4.0001, "round").band == "4 < e <= 6"
    assert st.opening_distance(120, "round").band == "40 < e <= 120"
    assert st.opening_distance(0.5, "square").sr_mm == 2  # REF: e <= 4 -> 2


def test_opening_slot_length_special_case():
    # REF, from [S3][S2]: slot 20 < e <= 30 -> 850, or 200 if the slot is at most 65 mm long
    assert st.opening_distance(25, "slot", slot_length_mm=65).sr_mm == 200
    assert st.opening_distance(25, "slot", slot_length_mm=65).slot_short
    assert st.opening_distance(25, "slot", slot_length_mm=65.1).sr_mm == 850
    r = st.opening_distance(25, "slot")
    assert r.sr_mm == 850 and not r.slot_short and "slot length not given" in r.note
    assert st.opening_distance(30, "slot", slot_length_mm=40).sr_mm == 200
    assert st.opening_distance(20.001, "slot", slot_length_mm=40).sr_mm == 200
    # outside the 20 < e <= 30 band the length does not matter
    assert st.opening_distance(20, "slot", slot_length_mm=40).sr_mm == 120
    assert st.opening_distance(30.001, "slot", slot_length_mm=40).sr_mm == 850


def test_opening_whole_body_access():
    # REF (H, [S2]): slot over 180 mm, square/round over 240 mm lets the whole body through
    assert not st.opening_distance(180, "slot").whole_body_access
    assert st.opening_distance(180.1, "slot").whole_body_access
    for shape in ("square", "round"):
        assert not st.opening_distance(240, shape).whole_body_access
        r = st.opening_distance(240.1, shape)
        assert r.whole_body_access and r.treated_as_reach_over and "whole body" in r.note


@pytest.mark.parametrize(
    "args, kwargs, match",
    [
        ((10, "hexagon"), {}, r"shape: expected shape 'slot', 'square' or 'round', got 'hexagon'"),
        ((0, "slot"), {}, r"e_mm: expected a finite value > 0, got 0"),
        ((-3, "round"), {}, r"e_mm: expected a finite value > 0"),
        ((math.inf, "round"), {}, r"e_mm: expected a finite value > 0, got inf"),
        ((25, "square"), {"slot_length_mm": 50}, r"slot_length_mm: .* shape 'slot' only, got it for shape 'square'"),
        ((25, "slot"), {"slot_length_mm": 20}, r"slot_length_mm: expected a slot length >= e = 25 mm .* got 20 mm"),
    ],
)
def test_opening_bad_input(args, kwargs, match):
    with pytest.raises(InputError, match=match):
        st.opening_distance(*args, **kwargs)


# ---------------------------------------------------------------- ISO 13854 gaps


def test_min_gaps_values():
    # REF, from [S5]: ISO 13854 minimum gaps, mm
    assert dict(st.MIN_GAPS_MM) == {
        "body": 500, "head": 300, "leg": 180, "foot": 120, "toes": 50, "arm": 120, "hand": 100, "finger": 25,
    }


def test_crushing_gap_check():
    r = st.crushing_gap_check(300)  # REF, from [S5]: body needs 500 mm
    assert r.crushing_point and r.min_gap_mm == 500 and r.body_part == "body" and "crushing point" in r.note
    assert not st.crushing_gap_check(600).crushing_point
    assert not st.crushing_gap_check(500).crushing_point  # "smaller than the gap" (REF): equal is not
    assert st.crushing_gap_check(499.9).crushing_point
    assert not st.crushing_gap_check(300, "head").crushing_point  # REF, from [S5]: head 300
    assert st.crushing_gap_check(24, "finger").crushing_point  # REF, from [S5]: finger 25
    assert st.crushing_gap_check(300).sources == ("S5",) and st.crushing_gap_check(300).confidence == "H"
    with pytest.raises(InputError, match=r"body_part: expected a body part among body, head.*got 'tail'"):
        st.crushing_gap_check(300, "tail")
    with pytest.raises(InputError, match=r"gap_mm: expected a finite value >= 0"):
        st.crushing_gap_check(-1)


# ---------------------------------------------------------------- ISO 13855 S = K*T + C


def test_iso13855_worked_example():
    # REF, from [S6]: T = 0.32 s, d = 14 mm -> 2000*0.32 = 640 > 500, so S = 1600*0.32 = 512 mm
    r = st.protective_device_distance(0.32, 14)
    assert r.S_first_try_mm == pytest.approx(640)
    assert r.S_mm == pytest.approx(512) and r.K_mm_per_s == 1600 and r.C_mm == 0 and r.minimum_mm == 500
    assert r.confidence == "H" and r.sources == ("S6",)
    assert "2024" in r.note and "D_DS + Z" in r.note


@pytest.mark.parametrize(
    "T, d, S, K",
    [
        # REF, from [S6]: S = 2000T + 8(d - 14), at least 100 mm, while that is <= 500 mm
        (0.1, 14, 200, 2000),  # 2000*0.1 = 200
        (0.01, 14, 100, 2000),  # 20 -> at least 100
        (0.0, 30, 128, 2000),  # 8*16 = 128
        (0.25, 14, 500, 2000),  # exactly 500: stays on the 2000 branch
        (0.5, 40, 1008, 1600),  # 1000 + 208 > 500 -> 800 + 208 = 1008
        (0.2, 20, 448, 2000),  # 400 + 48 = 448
    ],
)
def test_iso13855_perpendicular_d_up_to_40(T, d, S, K):
    r = st.protective_device_distance(T, d)
    assert r.S_mm == pytest.approx(S)
    assert r.K_mm_per_s == K
    assert r.C_mm == pytest.approx(8 * (d - 14))


def test_iso13855_at_least_500_branch():
    # REF, from [S6]: 2000*0.2 + 128 = 528 > 500, so 1600*0.2 + 128 = 448, at least 500 -> 500
    r = st.protective_device_distance(0.2, 30)
    assert r.S_first_try_mm == pytest.approx(528) and r.S_formula_mm == pytest.approx(448)
    assert r.minimum_mm == 500 and r.S_mm == 500


def test_iso13855_other_kinds():
    r = st.protective_device_distance(0.3, 50)  # REF, from [S6] (M): 40 < d <= 70 -> 1600T + 850
    assert r.S_mm == pytest.approx(1330) and r.confidence == "M" and r.C_mm == 850
    assert st.protective_device_distance(0.3, 70).S_mm == pytest.approx(1330)
    # REF, from [S6]: d = 40 is still the 8(d - 14) rule: 600 + 208 > 500 -> 1600*0.3 + 208 = 688
    assert st.protective_device_distance(0.3, 40).S_mm == pytest.approx(688)
    r = st.protective_device_distance(0.3, kind="multi-beam")  # REF, from [S6]: 1600T + 850
    assert r.S_mm == pytest.approx(1330) and r.d_mm is None and r.confidence == "H"
    r = st.protective_device_distance(0.3, kind="single-beam")  # REF, from [S6] (M): 1600T + 1200
    assert r.S_mm == pytest.approx(1680) and r.confidence == "M"
    assert all("2024" in st.protective_device_distance(0.1, d, k).note for d, k in [(14, "perpendicular"), (None, "multi-beam")])


@pytest.mark.parametrize(
    "args, kwargs, match",
    [
        ((0.3,), {}, r"d_mm: expected a detection capability d_mm for a perpendicular approach, got None"),
        ((0.3, 71), {}, r"d_mm: expected a detection capability 0 < d <= 70 mm .* got 71 mm"),
        ((0.3, 14), {"kind": "multi-beam"}, r"d_mm: d_mm applies to kind 'perpendicular' only"),
        ((-0.1, 14), {}, r"T_s: expected a finite time >= 0 s, got -0.1"),
        ((math.nan, 14), {}, r"T_s: expected a finite time >= 0 s, got nan"),
        ((0.3, 14), {"kind": "angled"}, r"kind: expected kind among perpendicular, multi-beam, single-beam"),
    ],
)
def test_iso13855_bad_input(args, kwargs, match):
    with pytest.raises(InputError, match=match):
        st.protective_device_distance(*args, **kwargs)


# ---------------------------------------------------------------- guards


def test_guard_rules_edges():
    # REF (H, [S4][S8]): fence at least 1400 mm high, bottom edge at most 180 mm above the floor
    r = st.guard_rules(1400, 180)
    assert r.height_ok and r.bottom_gap_ok and r.passes and r.sources == ("S4", "S8") and r.confidence == "H"
    r = st.guard_rules(1399, 180)
    assert not r.height_ok and r.bottom_gap_ok and not r.passes and "climbing over" in r.note
    r = st.guard_rules(1400, 181)
    assert r.height_ok and not r.bottom_gap_ok and not r.passes and "crawling under" in r.note
    r = st.guard_rules(1399, 181)
    assert not r.passes and "climbing" in r.note and "crawling" in r.note
    with pytest.raises(InputError, match=r"bottom_gap_mm: expected the bottom gap below the fence height"):
        st.guard_rules(150, 180)


# ---------------------------------------------------------------- cautions


def test_cautions_cover_the_points():
    text = " ".join(st.CAUTIONS)
    assert isinstance(st.CAUTIONS, tuple) and len(st.CAUTIONS) >= 3
    for needle in [
        "design aid", "ISO 12100", "competent person", "ISO 13849-2", "stopping", "(EU) 2023/1230",
        "20 January 2027", "2006/42/EC", "general duty clause", "29 CFR 1910.212", "precedence",
        "meshes and parameters", "secondary public sources", "current edition", "from memory and unverified",
    ]:
        assert needle in text, needle
    assert "\n" not in st.CAUTION_LINE and len(st.CAUTION_LINE) < 240
    assert "ISO 12100" in st.CAUTION_LINE
