"""Numbers as report text, compiled: the exact bytes that the Python formatting of the report writers
produces, written for whole arrays at once into one byte buffer (numba).

Three ways of writing a float ``x`` with ``d`` decimals, each the text of one integer ``m`` (``m / 10**d``):

- ``"numpy"``: ``json.dumps(float(np.round(x, d)) + 0.0)``, what ``summary.rnd_list`` then the JSON
  encoder write: ``m = rint(x * 10**d)`` in floating point (numpy's rounding);
- ``"python"``: ``json.dumps(round(x, d) + 0.0)``, what ``summary.rnd`` then the JSON encoder write:
  ``m`` the exact half-even rounding of the binary value ``x * 10**d`` (Python's correctly rounded
  ``round``, not numpy's);
- ``"fixed"``: ``summary.fmt(x, d)`` (``f"{x:.{d}f}"`` without ``-0``; ``""`` for NaN, ``inf`` /
  ``-inf``), with the same exact ``m`` as ``"python"``.

The JSON texts are Python's shortest ``repr`` of ``m / 10**d``: for ``|m| < 10**15`` that is the digits
of ``m`` with the decimal point put back and trailing zeros dropped (``395.0``, ``0.005``, ``-12.25``):
the decimal ``m / 10**d`` reads back as that float (the division is correctly rounded), and any other
decimal within the float's rounding interval (narrower than ``10**-d / 4`` there) needs more digits.
Non-finite values are ``null`` (as ``rnd`` / ``rnd_list`` make them); ``-0.0`` is ``0.0``.

Outside that range (``|x| * 10**d >= 10**15``, ``decimals`` not in ``0..MAX_DECIMALS``, or for the JSON
styles a non-zero value below ``1e-4``, which ``repr`` writes in exponent form) the functions return
None, and the caller writes those numbers with the Python formatting, which is the reference.
"""

from __future__ import annotations

import numpy as np
from numba import njit

STYLES = ("numpy", "python", "fixed")
MAX_DECIMALS = 8
"""Most decimals handled (the exact rounding splits ``x`` into two 26-bit halves, each times ``10**d``
exact for ``10**d < 2**27``)."""
LIMIT = 1e15
"""``|x| * 10**decimals`` must stay below this (``m`` exact, shortest ``repr`` as above)."""

_NUMPY, _PYTHON, _FIXED = 0, 1, 2
_WIDTH = 24
"""Bytes one number may take, but its decimals (sign, 15 digits, ``0.``, separator, and spare)."""


# ---------------------------------------------------------------------- compiled pieces


@njit(cache=True, nogil=True)
def _put_uint(buf, pos, v):
    """The decimal digits of ``v >= 0`` at ``buf[pos:]``; returns the position after them."""
    n = 1
    t = v // 10
    while t:
        n += 1
        t //= 10
    end = pos + n
    for k in range(end - 1, pos - 1, -1):
        buf[k] = 48 + v % 10
        v //= 10
    return end


@njit(cache=True, nogil=True)
def _put_int(buf, pos, v):
    if v < 0:
        buf[pos] = 45  # -
        return _put_uint(buf, pos + 1, -v)
    return _put_uint(buf, pos, v)


@njit(cache=True, nogil=True)
def _exact_scaled(x, scale):
    """``x * scale`` (``scale = 10**d``) rounded half-even to an integer as if computed exactly."""
    y = x * scale
    if abs(y) < 0.25:  # the exact product is below 1/2 too
        return 0.0
    t = 134217729.0 * x  # Veltkamp split: x = hi + lo, each with at most 26 significant bits
    hi = t - (t - x)
    lo = x - hi
    a = hi * scale  # both exact (26 bits times at most 27)
    b = lo * scale
    s = a + b  # = y, with the error e (TwoSum): a + b == s + e exactly
    bv = s - a
    av = s - bv
    e = (a - av) + (b - bv)
    n = np.rint(s)
    if abs(s - n) == 0.5:  # s is a half-integer: the exact product may lie off the tie
        if e > 0.0:
            n = s + 0.5
        elif e < 0.0:
            n = s - 0.5
    return n


@njit(cache=True, nogil=True)
def _put_number(buf, pos, x, decimals, scale, iscale, style, small):
    """One number at ``buf[pos:]``: returns the position after it, or -1 if out of range."""
    if not np.isfinite(x):
        if style == _FIXED:
            if np.isnan(x):
                return pos
            if x < 0:
                buf[pos] = 45
                pos += 1
            buf[pos] = 105  # inf
            buf[pos + 1] = 110
            buf[pos + 2] = 102
            return pos + 3
        buf[pos] = 110  # null
        buf[pos + 1] = 117
        buf[pos + 2] = 108
        buf[pos + 3] = 108
        return pos + 4
    if not abs(x * scale) < 1e15:
        return -1
    n = np.rint(x * scale) if style == _NUMPY else _exact_scaled(x, scale)
    m = np.int64(n)
    if m < 0:
        buf[pos] = 45
        pos += 1
        m = -m
    whole = m // iscale
    frac = m - whole * iscale
    if style == _FIXED:
        pos = _put_uint(buf, pos, whole)
        if decimals > 0:
            buf[pos] = 46  # .
            for k in range(pos + decimals, pos, -1):
                buf[k] = 48 + frac % 10
                frac //= 10
            pos += decimals + 1
        return pos
    if m == 0:  # 0.0 (np.round(...) + 0.0 turns -0.0 into 0.0)
        buf[pos] = 48
        buf[pos + 1] = 46
        buf[pos + 2] = 48
        return pos + 3
    if m < small:  # below 1e-4: repr writes an exponent
        return -1
    pos = _put_uint(buf, pos, whole)
    buf[pos] = 46
    pos += 1
    if frac == 0:
        buf[pos] = 48
        return pos + 1
    k = decimals
    while frac % 10 == 0:
        frac //= 10
        k -= 1
    for j in range(pos + k - 1, pos - 1, -1):
        buf[j] = 48 + frac % 10
        frac //= 10
    return pos + k


@njit(cache=True, nogil=True)
def _rows_kernel(values, decimals, scale, iscale, style, small, opener, closer, sep, buf, offs):
    """Row i of ``values`` (n, k) as its numbers joined by ``sep``, between ``opener`` and ``closer``
    (0: none), at ``buf[offs[i]:offs[i + 1]]``. False if a number is out of range."""
    pos = 0
    offs[0] = 0
    for i in range(values.shape[0]):
        if opener:
            buf[pos] = opener
            pos += 1
        for j in range(values.shape[1]):
            if j:
                buf[pos] = sep
                pos += 1
            pos = _put_number(buf, pos, values[i, j], decimals, scale, iscale, style, small)
            if pos < 0:
                return False
        if closer:
            buf[pos] = closer
            pos += 1
        offs[i + 1] = pos
    return True


@njit(cache=True, nogil=True)
def _put_piece(buf, pos, lit, lit_offs, k):
    for j in range(lit_offs[k], lit_offs[k + 1]):
        buf[pos] = lit[j]
        pos += 1
    return pos


@njit(cache=True, nogil=True)
def _put_ints(buf, pos, row):
    buf[pos] = 91  # [
    pos += 1
    for j in range(row.shape[0]):
        if j:
            buf[pos] = 44
            pos += 1
        pos = _put_int(buf, pos, row[j])
    buf[pos] = 93  # ]
    return pos + 1


@njit(cache=True, nogil=True)
def _put_floats(buf, pos, row, decimals, scale, iscale, small):
    buf[pos] = 91
    pos += 1
    for j in range(row.shape[0]):
        if j:
            buf[pos] = 44
            pos += 1
        pos = _put_number(buf, pos, row[j], decimals, scale, iscale, _NUMPY, small)
        if pos < 0:
            return -1
    buf[pos] = 93
    return pos + 1


@njit(cache=True, nogil=True)
def _put_points(buf, pos, points, keep, decimals, scale, iscale, small):
    """``[[x,y,z],...]`` of the rows of ``points`` (P, 3) where ``keep``."""
    buf[pos] = 91
    pos += 1
    first = True
    for j in range(points.shape[0]):
        if not keep[j]:
            continue
        if not first:
            buf[pos] = 44
            pos += 1
        first = False
        pos = _put_floats(buf, pos, points[j], decimals, scale, iscale, small)
        if pos < 0:
            return -1
    buf[pos] = 93
    return pos + 1


@njit(cache=True, nogil=True)
def _pairs_kernel(which, depth, dist, upper, pruned, codes, keep, wb, wo, lit, lit_offs, decimals, scale, iscale, small, buf, offs):
    """The pairs entry of result ``which[u]`` at ``buf[offs[u]:offs[u + 1]]`` (see ``pairs_entry_texts``)."""
    pos = 0
    offs[0] = 0
    for u in range(which.shape[0]):
        r = which[u]
        pos = _put_piece(buf, pos, lit, lit_offs, 0)
        pos = _put_ints(buf, pos, depth[r])
        pos = _put_piece(buf, pos, lit, lit_offs, 1)
        pos = _put_floats(buf, pos, dist[r], decimals, scale, iscale, small)
        if pos < 0:
            return False
        pos = _put_piece(buf, pos, lit, lit_offs, 2)
        pos = _put_floats(buf, pos, upper[r], decimals, scale, iscale, small)
        if pos < 0:
            return False
        pos = _put_piece(buf, pos, lit, lit_offs, 3)
        pos = _put_ints(buf, pos, pruned[r])
        pos = _put_piece(buf, pos, lit, lit_offs, 4)
        pos = _put_ints(buf, pos, codes[r])
        pos = _put_piece(buf, pos, lit, lit_offs, 5)
        buf[pos] = 91
        pos += 1
        first = True
        for j in range(keep.shape[1]):
            if keep[r, j]:
                if not first:
                    buf[pos] = 44
                    pos += 1
                first = False
                pos = _put_uint(buf, pos, j)
        buf[pos] = 93
        pos += 1
        pos = _put_piece(buf, pos, lit, lit_offs, 6)
        pos = _put_points(buf, pos, wb[r], keep[r], decimals, scale, iscale, small)
        if pos < 0:
            return False
        pos = _put_piece(buf, pos, lit, lit_offs, 7)
        pos = _put_points(buf, pos, wo[r], keep[r], decimals, scale, iscale, small)
        if pos < 0:
            return False
        pos = _put_piece(buf, pos, lit, lit_offs, 8)
        offs[u + 1] = pos
    return True


# ---------------------------------------------------------------------- Python side


def _constants(decimals: int, style: str):
    """``(scale, iscale, style code, small)`` of a supported call, else None."""
    if style not in STYLES:
        raise ValueError(f"style must be one of {STYLES}, got {style!r}")
    if isinstance(decimals, bool) or not isinstance(decimals, (int, np.integer)) or not 0 <= decimals <= MAX_DECIMALS:
        return None
    decimals = int(decimals)
    small = 10 ** (decimals - 4) if decimals > 4 and style != "fixed" else 0
    # the float factor numpy's round multiplies by (exact for these decimals)
    return float(10**decimals), 10**decimals, STYLES.index(style), small


def _split(buf, offs) -> list:
    """The texts ``buf[offs[i]:offs[i + 1]]`` as str."""
    text = buf[: offs[-1]].tobytes().decode("ascii")
    bounds = offs.tolist()
    return [text[a:b] for a, b in zip(bounds[:-1], bounds[1:])]


def row_texts(values, decimals: int = 3, style: str = "numpy", brackets: bool = True, sep: str = ",") -> list | None:
    """The text of each row of ``values`` (2-D; 1-D: one value a row), numbers in ``style`` (one of
    ``STYLES``) joined by ``sep``, in ``[...]`` if ``brackets``; None if a number is out of range.

    ``style="numpy"``, brackets: ``json.dumps(rnd_list(row))`` of each row (compact separators);
    ``style="python"``, 1-D, no brackets: ``json.dumps(rnd(v))`` of each value;
    ``style="fixed"``, no brackets: ``sep.join(fmt_list(row))`` of each row.
    """
    consts = _constants(decimals, style)
    if consts is None:
        return None
    scale, iscale, code, small = consts
    values = np.asarray(values, dtype=np.float64)
    if values.ndim == 1:
        values = values.reshape(-1, 1)
    if values.ndim != 2:
        raise ValueError(f"values must be 1-D or 2-D, got shape {values.shape}")
    n, k = values.shape
    values = np.ascontiguousarray(values)
    buf = np.empty(n * (k * (_WIDTH + decimals) + 2) + 1, dtype=np.uint8)
    offs = np.empty(n + 1, dtype=np.int64)
    opener, closer = (ord("["), ord("]")) if brackets else (0, 0)
    if not _rows_kernel(values, decimals, scale, iscale, code, small, opener, closer, ord(sep), buf, offs):
        return None
    return _split(buf, offs)


PAIRS_KEYS = ("depth_known", "distance_mm", "distance_upper_mm", "pair", "pruned", "status", "witness", "witness_body_mm", "witness_other_mm")
"""The keys of a clearance.json pairs entry, in the sorted order the JSON encoder writes them."""


def _int_width(a) -> int:
    """Bytes one entry of the int array ``a`` may take with its separator."""
    if a.size == 0:
        return 2
    return len(str(max(int(a.max()), -int(a.min()), 0))) + 2


def pairs_entry_texts(which, depth_known, distance_mm, distance_upper_mm, pruned, status, keep, witness_body_mm, witness_other_mm, pair_text: str, decimals: int = 3) -> list | None:
    """The compact JSON text (sorted keys) of the pairs entry of results ``which`` (indices into the
    first axis of the arrays), or None if a number is out of range.

    Per result r (P pairs): ``depth_known``, ``pruned`` and ``status`` (R, P) integers written as they
    are; ``distance_mm``, ``distance_upper_mm`` (R, P) floats, ``numpy`` style; ``witness`` the positions
    where ``keep`` (R, P); ``witness_body_mm``, ``witness_other_mm`` (R, P, 3) the points there, each
    ``[x,y,z]``, ``numpy`` style. ``pair_text`` is the JSON text of the ``pair`` entry (the same for all).
    That is ``json.dumps`` (``sort_keys``, separators ``,`` and ``:``) of
    ``{"depth_known": [...], "distance_mm": rnd_list(...), ..., "witness_other_mm": rnd_list(points)}``.
    """
    consts = _constants(decimals, "numpy")
    if consts is None:
        return None
    scale, iscale, _, small = consts
    ints = [np.ascontiguousarray(a, dtype=np.int64) for a in (depth_known, pruned, status)]
    floats = [np.ascontiguousarray(a, dtype=np.float64) for a in (distance_mm, distance_upper_mm)]
    points = [np.ascontiguousarray(a, dtype=np.float64) for a in (witness_body_mm, witness_other_mm)]
    keep = np.ascontiguousarray(keep, dtype=np.bool_)
    which = np.ascontiguousarray(which, dtype=np.int64)
    shape = keep.shape
    if len(shape) != 2 or any(a.shape != shape for a in ints + floats) or any(p.shape != (*shape, 3) for p in points):
        raise ValueError("the pair arrays differ in shape")
    k = [f'"{key}":' for key in PAIRS_KEYS]  # literal pieces between the written columns
    pieces = ["{" + k[0], "," + k[1], "," + k[2], "," + k[3] + pair_text + "," + k[4], "," + k[5], "," + k[6], "," + k[7], "," + k[8], "}"]
    lit_bytes = [p.encode("ascii") for p in pieces]
    lit = np.frombuffer(b"".join(lit_bytes), dtype=np.uint8)
    lit_offs = np.concatenate([[0], np.cumsum([len(b) for b in lit_bytes])]).astype(np.int64)
    n_pairs = shape[1]
    fw = _WIDTH + decimals
    width = sum(_int_width(a) for a in ints)
    row_bound = n_pairs * (width + 2 * fw) + len(lit) + 8
    kept = keep[which].sum(axis=1) if len(which) else np.zeros(0, dtype=np.int64)
    bound = len(which) * row_bound + int(kept.sum()) * (len(str(n_pairs)) + 1 + 2 * (3 * fw + 3)) + 1
    buf = np.empty(bound, dtype=np.uint8)
    offs = np.empty(len(which) + 1, dtype=np.int64)
    ok = _pairs_kernel(which, ints[0], floats[0], floats[1], ints[1], ints[2], keep, points[0], points[1], lit, lit_offs, decimals, scale, iscale, small, buf, offs)
    return _split(buf, offs) if ok else None
