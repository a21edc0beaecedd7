"""The compiled number writer (``envelope.report.textnum``) writes exactly what the Python formatting of
the report writers writes, over random and edge values, and declines (None) outside its range.

The reference in every comparison is the writers' own Python path, which the bulk path must match byte
for byte: ``summary.rnd_list`` (numpy's ``np.round``) or ``summary.rnd`` (Python's ``round``), then the
standard library's ``json.dumps`` (Python's shortest ``repr`` of a float), and ``summary.fmt``
(``format(x, ".3f")``).
"""

from __future__ import annotations

import json

import numpy as np
import pytest

from envelope.report import textnum
from envelope.report.summary import fmt, rnd, rnd_list

COMPACT = {"separators": (",", ":"), "allow_nan": False}

EDGES = [
    0.0, -0.0, 0.0005, -0.0005, 0.0015, 0.0025, -0.0025, 0.00049999, 0.0004, 1e-4, -1e-4, 1e-3, 0.1, 0.2, 0.3,
    0.49999, 0.5, 1.5, 2.5, -2.5, 0.0625, 0.125, 0.375, 1 / 3, 2 / 3, 395.0, 394.9996, 394.9995, -394.9995,
    999.9995, 999.99949999, 1234.5675, 1e6 + 0.0005, 123456789.1235, 999999999999.999, -999999999999.999,
    5e11 + 0.0625, 1e-300, -1e-300, 5e-324, 7.0, -7.0, 100.0, 1000.0, 1e9,
]


def _values(seed: int = 0) -> np.ndarray:
    """Edge values, plain random ones over many scales, and values next to the rounding ties of 3 decimals."""
    rng = np.random.default_rng(seed)
    ties = (rng.integers(-10**7, 10**7, 3000) + 0.5) / 1000.0  # k.5 thousandths, mostly not exact in binary
    near = np.concatenate([np.nextafter(ties, np.inf), np.nextafter(ties, -np.inf), ties])
    exact = rng.integers(-10**6, 10**6, 2000) / 16.0  # exact binary fractions: exact ties at 3 decimals
    return np.concatenate(
        [
            EDGES,
            rng.normal(0, 1, 3000),
            rng.normal(0, 1e-3, 2000),
            rng.normal(0, 300, 5000),
            rng.uniform(-1e11, 1e11, 2000),
            np.round(rng.uniform(-1e4, 1e4, 2000), 3),  # already rounded: trailing zeros, integers
            rng.integers(-1000, 1000, 1000).astype(float),
            near,
            exact,
        ]
    )


def _in_range(values, decimals):
    return values[np.abs(values) * 10.0**decimals < 1e15]


@pytest.mark.parametrize("decimals", [0, 1, 2, 3, 4])
def test_numpy_style_is_json_of_rnd_list(decimals):
    values = _in_range(_values(decimals), decimals)
    got = textnum.row_texts(values, decimals, "numpy", brackets=False)
    assert got is not None
    want = [json.dumps(v, **COMPACT) for v in rnd_list(values, decimals)]  # reference: rnd_list + json.dumps
    bad = [(v, g, w) for v, g, w in zip(values, got, want) if g != w]
    assert not bad, bad[:5]


@pytest.mark.parametrize("decimals", [0, 1, 2, 3, 4])
def test_python_style_is_json_of_rnd(decimals):
    values = _in_range(_values(10 + decimals), decimals)
    got = textnum.row_texts(values, decimals, "python", brackets=False)
    assert got is not None
    want = [json.dumps(rnd(v, decimals), **COMPACT) for v in values]  # reference: Python's round + json.dumps
    bad = [(v, g, w) for v, g, w in zip(values, got, want) if g != w]
    assert not bad, bad[:5]


@pytest.mark.parametrize("decimals", [0, 1, 3, 6, 8])
def test_fixed_style_is_fmt(decimals):
    values = np.concatenate([_in_range(_values(20 + decimals), decimals), [np.nan, np.inf, -np.inf]])
    got = textnum.row_texts(values, decimals, "fixed", brackets=False)
    assert got is not None
    want = [fmt(v, decimals) for v in values]  # reference: summary.fmt (format(x, ".Nf"), no -0)
    bad = [(v, g, w) for v, g, w in zip(values, got, want) if g != w]
    assert not bad, bad[:5]


def test_the_two_roundings_differ_where_python_and_numpy_do():
    # 0.0005 * 1000 is 0.5 in floating point (numpy rounds that to even: 0), but the binary value of
    # 0.0005 lies above one half thousandth (Python's correctly rounded round gives 0.001)
    assert np.round(0.0005, 3) == 0.0 and round(0.0005, 3) == 0.001  # the references disagree
    assert textnum.row_texts([0.0005], 3, "numpy", brackets=False) == ["0.0"]
    assert textnum.row_texts([0.0005], 3, "python", brackets=False) == ["0.001"]
    assert textnum.row_texts([0.0005], 3, "fixed", brackets=False) == [fmt(0.0005)] == ["0.001"]


def test_rows_are_json_lists_and_non_finite_is_null():
    rng = np.random.default_rng(4)
    values = rng.normal(0, 100, (40, 6))
    values[3, 2], values[7, 0], values[7, 5], values[9, 1] = np.nan, np.inf, -np.inf, -0.0
    got = textnum.row_texts(values, 3, "numpy")
    assert got == [json.dumps(r, **COMPACT) for r in rnd_list(values)]  # reference: rnd_list + json.dumps
    assert "null" in got[3] and got[7].count("null") == 2
    csv_rows = textnum.row_texts(values, 3, "fixed", brackets=False, sep=",")
    assert csv_rows == [",".join(fmt(v) for v in r) for r in values]  # reference: summary.fmt


def test_out_of_range_declines():
    assert textnum.row_texts([1e12, 1.0], 3, "numpy") is None  # 1e15 thousandths: beyond the exact range
    assert textnum.row_texts([1e12], 3, "fixed") is None
    assert textnum.row_texts([0.00001], 6, "numpy") is None  # repr writes 1e-05
    assert textnum.row_texts([0.00001], 6, "fixed", brackets=False) == [fmt(0.00001, 6)]
    assert textnum.row_texts([1.0], 9, "numpy") is None
    assert textnum.row_texts([1.0], -1, "numpy") is None
    with pytest.raises(ValueError):
        textnum.row_texts([1.0], 3, "octal")


def test_small_decimals_above_the_exponent_limit():
    values = np.array([1e-4, 2e-4, -3.5e-4, 0.000123456, 0.0001, 5e-5])  # 5e-5 rounds to 0.0001 at 4 decimals
    for decimals in (4, 5, 6):
        got = textnum.row_texts(values, decimals, "numpy", brackets=False)
        want = [json.dumps(v) for v in rnd_list(values, decimals)]  # reference: rnd_list + json.dumps
        if got is not None:
            assert got == want
        else:  # declined only where a rounded value is below 1e-4 (exponent form)
            assert any("e" in w for w in want)


def test_pairs_entries_are_json_of_the_entry_dict():
    rng = np.random.default_rng(7)
    r, p = 9, 13
    distance = rng.normal(0, 200, (r, p))
    pruned = rng.random((r, p)) < 0.3
    upper = np.where(pruned, np.inf, distance + rng.random((r, p)))
    depth = rng.random((r, p)) < 0.5
    status = rng.integers(0, 4, (r, p))
    keep = ~pruned & (rng.random((r, p)) < 0.4)
    keep[2] = False  # a result without witnesses
    body = rng.normal(0, 500, (r, p, 3))
    other = rng.normal(0, 500, (r, p, 3))
    body[keep & (rng.random((r, p)) < 0.1)] = np.nan
    who, which = np.nonzero(keep)
    for pair in ("null", "[0,2,1]"):
        got = textnum.pairs_entry_texts(depth, distance, upper, pruned, status, keep, body[who, which], other[who, which], pair)
        for k in range(r):
            entry = {
                "depth_known": depth[k].astype(int).tolist(),
                "distance_mm": rnd_list(distance[k]),
                "distance_upper_mm": rnd_list(upper[k]),
                "pair": json.loads(pair),
                "pruned": pruned[k].astype(int).tolist(),
                "status": status[k].tolist(),
                "witness": np.flatnonzero(keep[k]).tolist(),
                "witness_body_mm": rnd_list(body[k][keep[k]]),
                "witness_other_mm": rnd_list(other[k][keep[k]]),
            }
            # reference: the dict the one-row writer builds, through json.dumps with sorted keys
            assert got[k] == json.dumps(entry, sort_keys=True, **COMPACT), k
    with pytest.raises(ValueError):
        textnum.pairs_entry_texts(depth, distance[:, :-1], upper, pruned, status, keep, body[who, which], other[who, which], "null")
    distance[4, 4] = 1e13
    assert textnum.pairs_entry_texts(depth, distance, upper, pruned, status, keep, body[who, which], other[who, which], "null") is None


def test_fill_pairs_writes_copies_and_gives_entries():
    rng = np.random.default_rng(8)
    r, p = 3, 4
    distance = rng.normal(0, 200, (r, p))
    depth, pruned = rng.random((r, p)) < 0.5, np.zeros((r, p), dtype=bool)
    status = rng.integers(0, 4, (r, p))
    keep = rng.random((r, p)) < 0.5
    points = rng.normal(0, 500, (int(keep.sum()), 3))
    arrays = textnum.PairArrays(depth, distance, distance + 1, pruned, status, keep, points, points + 1, "null")
    entries = textnum.pairs_entry_texts(depth, distance, distance + 1, pruned, status, keep, points, points + 1, "null")
    text = "a\0,b\0,c\0,d\0,e\0"
    got = textnum.fill_pairs(text, [2, -1, 0, -1, -1], [-1, 0, -1, 2, -1], [None, None, None, None, b'{"x":1}'], arrays)
    e = entries
    assert got == f'a{e[2]},b{e[2]},c{e[0]},d{e[0]},e{{"x":1}}'
    assert textnum.fill_pairs("plain", [], [], [], None) == "plain"
    assert textnum.fill_pairs("\0|\0", [-1, -1], [-1, 0], [b"[]", None], None) == "[]|[]"
    with pytest.raises(ValueError):  # two gaps, one entry
        textnum.fill_pairs("a\0b\0", [0], [-1], [None], arrays)
    with pytest.raises(ValueError):  # a copy of a later gap
        textnum.fill_pairs("a\0b\0", [-1, 0], [1, -1], [None, None], arrays)
    with pytest.raises(ValueError):  # a gap without an entry
        textnum.fill_pairs("a\0", [-1], [-1], [None], arrays)


def test_equal_rows_compares_bits():
    a = np.array([[0.0, 1.0, np.nan], [0.0, 1.0, np.nan], [-0.0, 1.0, np.nan], [0.0, 1.5, np.nan]])
    flags = np.array([[True, False], [True, False], [True, False], [True, True]])
    same = textnum.equal_rows([a, flags], [1, 2, 3, 3], [0, 0, 0, 1])
    assert same.tolist() == [True, False, False, False]  # -0.0 is not the bits of 0.0
    assert textnum.equal_rows([a[:, :0]], [1], [0]).tolist() == [True]
