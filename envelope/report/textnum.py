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
"""Bytes one number takes at most besides its decimals (sign, 15 digits, ``0.``, separator, spare); also
the scratch room a number of other than 3 decimals is written into before it is moved into place."""


# ---------------------------------------------------------------------- compiled pieces

_DIGIT_PAIRS = np.frombuffer("".join(f"{k:02d}" for k in range(100)).encode("ascii"), dtype=np.uint8).copy()
"""``_DIGIT_PAIRS[2 * k:2 * k + 2]``: the two digits of ``0 <= k < 100``."""


def _fraction_table(strip: bool):
    """``(texts (1000, 3), lengths (1000,))``: the three decimals of ``k / 1000``, trailing zeros
    dropped (one digit kept) if ``strip``."""
    texts, lengths = np.zeros((1000, 3), dtype=np.uint8), np.zeros(1000, dtype=np.int64)
    for k in range(1000):
        t = f"{k:03d}".rstrip("0") or "0" if strip else f"{k:03d}"
        texts[k, : len(t)] = np.frombuffer(t.encode("ascii"), dtype=np.uint8)
        lengths[k] = len(t)
    return texts, lengths


_FRAC3_JSON, _FRAC3_JSON_LEN = _fraction_table(True)
_FRAC3_FIXED, _ = _fraction_table(False)


@njit(cache=True, nogil=True)
def _put_uint(buf, pos, w):
    """The decimal digits of ``0 <= w < 10**16`` at ``buf[pos:]``; returns the position after them."""
    if w < 10:
        buf[pos] = 48 + w
        return pos + 1
    if w < 100:
        buf[pos] = _DIGIT_PAIRS[2 * w]
        buf[pos + 1] = _DIGIT_PAIRS[2 * w + 1]
        return pos + 2
    n = 3
    p = 1000
    while n < 16 and w >= p:
        n += 1
        p *= 10
    k = pos + n - 1
    while w >= 100:  # right to left, two digits at a time
        q = w // 100
        r = w - q * 100
        buf[k] = _DIGIT_PAIRS[2 * r + 1]
        buf[k - 1] = _DIGIT_PAIRS[2 * r]
        k -= 2
        w = q
    if w >= 10:
        buf[k] = _DIGIT_PAIRS[2 * w + 1]
        buf[k - 1] = _DIGIT_PAIRS[2 * w]
    else:
        buf[k] = 48 + w
    return pos + n


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
def _put_number(buf, pos, x, decimals, scale, style, small):
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
    y = x * scale
    if not abs(y) < 1e15:
        return -1
    n = np.rint(y) if style == _NUMPY else _exact_scaled(x, scale)
    if n < 0:  # (-0.0 is not: no sign, as np.round(...) + 0.0 and fmt write it)
        buf[pos] = 45  # -
        pos += 1
        n = -n
    m = np.int64(n)
    if style != _FIXED and 0 < m < small:  # below 1e-4: repr writes an exponent
        return -1
    if decimals == 3:  # the report's decimals: the fraction from a table
        whole = m // 1000
        frac = m - whole * 1000
        pos = _put_uint(buf, pos, whole)
        buf[pos] = 46  # .
        if style == _FIXED:
            buf[pos + 1] = _FRAC3_FIXED[frac, 0]
            buf[pos + 2] = _FRAC3_FIXED[frac, 1]
            buf[pos + 3] = _FRAC3_FIXED[frac, 2]
            return pos + 4
        buf[pos + 1] = _FRAC3_JSON[frac, 0]
        buf[pos + 2] = _FRAC3_JSON[frac, 1]
        buf[pos + 3] = _FRAC3_JSON[frac, 2]
        return pos + 1 + _FRAC3_JSON_LEN[frac]
    # any other decimals: right to left from buf[pos + _WIDTH - 1] (the room one number may take),
    # then moved to pos
    frac_digits = decimals
    if style != _FIXED:
        while frac_digits > 0 and m % 10 == 0:  # trailing zeros dropped, one digit kept
            m //= 10
            frac_digits -= 1
    k = pos + _WIDTH - 1
    if style != _FIXED and frac_digits == 0:
        buf[k] = 48  # x.0
        k -= 1
    for _ in range(frac_digits):
        q = m // 10
        buf[k] = 48 + (m - q * 10)
        m = q
        k -= 1
    if style != _FIXED or decimals > 0:
        buf[k] = 46  # .
        k -= 1
    while True:  # the whole part, at least one digit
        q = m // 10
        buf[k] = 48 + (m - q * 10)
        m = q
        k -= 1
        if m == 0:
            break
    start = k + 1
    length = pos + _WIDTH - start
    for j in range(length):
        buf[pos + j] = buf[start + j]
    return pos + length


@njit(cache=True, nogil=True)
def _rows_kernel(values, decimals, scale, style, small, opener, closer, sep, buf, offs):
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
            pos = _put_number(buf, pos, values[i, j], decimals, scale, style, small)
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
def _put_floats(buf, pos, row, decimals, scale, small):
    buf[pos] = 91
    pos += 1
    for j in range(row.shape[0]):
        if j:
            buf[pos] = 44
            pos += 1
        pos = _put_number(buf, pos, row[j], decimals, scale, _NUMPY, small)
        if pos < 0:
            return -1
    buf[pos] = 93
    return pos + 1


@njit(cache=True, nogil=True)
def _put_points(buf, pos, points, start, stop, decimals, scale, small):
    """``[[x,y,z],...]`` of ``points[start:stop]`` ((K, 3))."""
    buf[pos] = 91
    pos += 1
    for j in range(start, stop):
        if j > start:
            buf[pos] = 44
            pos += 1
        pos = _put_floats(buf, pos, points[j], decimals, scale, small)
        if pos < 0:
            return -1
    buf[pos] = 93
    return pos + 1


@njit(cache=True, nogil=True)
def _put_entry(buf, pos, r, depth, dist, upper, pruned, codes, keep, point_start, wb, wo, lit, lit_offs, decimals, scale, small):
    """The pairs entry of result r at ``buf[pos:]`` (see ``pairs_entry_texts``); returns the position
    after it, or -1 if a number is out of range."""
    pos = _put_piece(buf, pos, lit, lit_offs, 0)
    pos = _put_ints(buf, pos, depth[r])
    pos = _put_piece(buf, pos, lit, lit_offs, 1)
    pos = _put_floats(buf, pos, dist[r], decimals, scale, small)
    if pos < 0:
        return -1
    pos = _put_piece(buf, pos, lit, lit_offs, 2)
    pos = _put_floats(buf, pos, upper[r], decimals, scale, small)
    if pos < 0:
        return -1
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
    pos = _put_points(buf, pos, wb, point_start[r], point_start[r + 1], decimals, scale, small)
    if pos < 0:
        return -1
    pos = _put_piece(buf, pos, lit, lit_offs, 7)
    pos = _put_points(buf, pos, wo, point_start[r], point_start[r + 1], decimals, scale, small)
    if pos < 0:
        return -1
    return _put_piece(buf, pos, lit, lit_offs, 8)


@njit(cache=True, nogil=True)
def _copy(out, pos, src, start, stop):
    n = stop - start
    out[pos:pos + n] = src[start:stop]
    return pos + n


@njit(cache=True, nogil=True)
def _lines_kernel(text, gaps, entry_of, copy_of, extra_of, extra, extra_offs, depth, dist, upper, pruned, codes, keep, point_start, wb, wo, lit, lit_offs, decimals, scale, small, out, starts, ends):
    """``text`` with gap g (a NUL at ``gaps[g]``) replaced by: the entry of result ``entry_of[g]``
    written here, or a copy of the text put into gap ``copy_of[g]`` (an earlier gap), or entry
    ``extra_of[g]`` of ``(extra, extra_offs)``; the text of gap g at ``out[starts[g]:ends[g]]``.
    Returns the length written, or -1 if a number is out of range."""
    pos = 0
    prev = 0
    for g in range(gaps.shape[0]):
        pos = _copy(out, pos, text, prev, gaps[g])
        prev = gaps[g] + 1
        starts[g] = pos
        if entry_of[g] >= 0:
            pos = _put_entry(out, pos, entry_of[g], depth, dist, upper, pruned, codes, keep, point_start, wb, wo, lit, lit_offs, decimals, scale, small)
            if pos < 0:
                return -1
        elif copy_of[g] >= 0:
            pos = _copy(out, pos, out, starts[copy_of[g]], ends[copy_of[g]])
        else:
            pos = _copy(out, pos, extra, extra_offs[extra_of[g]], extra_offs[extra_of[g] + 1])
        ends[g] = pos
    return _copy(out, pos, text, prev, text.shape[0])


# ---------------------------------------------------------------------- Python side


def _constants(decimals: int, style: str):
    """``(scale, style code, small)`` of a supported call, else None."""
    if style not in STYLES:
        raise ValueError(f"style must be one of {STYLES}, got {style!r}")
    if isinstance(decimals, bool) or not isinstance(decimals, (int, np.integer)) or not 0 <= decimals <= MAX_DECIMALS:
        return None
    decimals = int(decimals)
    small = 10 ** (decimals - 4) if decimals > 4 and style != "fixed" else 0
    # the float factor numpy's round multiplies by (exact for these decimals)
    return float(10**decimals), STYLES.index(style), small


def _split(buf, offs) -> list:
    """The texts ``buf[offs[i]:offs[i + 1]]`` as str."""
    text = str(buf[: offs[-1]].data, "ascii")
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
    scale, code, small = consts
    values = np.asarray(values, dtype=np.float64)
    if values.ndim == 1:
        values = values.reshape(-1, 1)
    if values.ndim != 2:
        raise ValueError(f"values must be 1-D or 2-D, got shape {values.shape}")
    n, k = values.shape
    values = np.ascontiguousarray(values)
    buf = np.empty(n * (k * (_WIDTH + decimals) + 2) + 2 * _WIDTH, dtype=np.uint8)  # + scratch room
    offs = np.empty(n + 1, dtype=np.int64)
    opener, closer = (ord("["), ord("]")) if brackets else (0, 0)
    if not _rows_kernel(values, decimals, scale, code, small, opener, closer, ord(sep), buf, offs):
        return None
    return _split(buf, offs)


PAIRS_KEYS = ("depth_known", "distance_mm", "distance_upper_mm", "pair", "pruned", "status", "witness", "witness_body_mm", "witness_other_mm")
"""The keys of a clearance.json pairs entry, in the sorted order the JSON encoder writes them."""


def _int_width(a) -> int:
    """Bytes one entry of the int array ``a`` may take with its separator."""
    if a.size == 0:
        return 2
    return len(str(max(int(a.max()), -int(a.min()), 0))) + 2


def pairs_entry_texts(depth_known, distance_mm, distance_upper_mm, pruned, status, keep, witness_body_mm, witness_other_mm, pair_text: str, decimals: int = 3) -> list | None:
    """The compact JSON text (sorted keys) of the pairs entry of each of R results (P pairs each), or
    None if a number is out of range.

    ``depth_known``, ``pruned``, ``status`` (R, P): integers (or booleans, written as 0 / 1);
    ``distance_mm``, ``distance_upper_mm`` (R, P): floats, ``numpy`` style; ``keep`` (R, P): the pairs
    whose positions are the ``witness`` entry, and whose points ``witness_body_mm``,
    ``witness_other_mm`` (K, 3), K = ``keep.sum()``, in the order of ``np.nonzero(keep)``, are written
    ``[x,y,z]`` each, ``numpy`` style; ``pair_text``: the JSON text of the ``pair`` entry of all.
    The text is ``json.dumps(entry, sort_keys=True, separators=(",", ":"))`` of ``{"depth_known":
    depth_known[r].tolist(), "distance_mm": rnd_list(distance_mm[r]), ..., "witness_other_mm":
    rnd_list(points of r)}``.
    """
    out = pairs_entry_bytes(depth_known, distance_mm, distance_upper_mm, pruned, status, keep, witness_body_mm, witness_other_mm, pair_text, decimals)
    return None if out is None else _split(*out)


class PairArrays:
    """The columns of the pairs entries of R results (P pairs each), checked and converted for the
    kernels; ``bound[r]``: bytes entry r may take. Arguments as ``pairs_entry_texts``. ``ok``: False
    if the decimals are not supported (then nothing else is set)."""

    def __init__(self, depth_known, distance_mm, distance_upper_mm, pruned, status, keep, witness_body_mm, witness_other_mm, pair_text: str, decimals: int = 3):
        consts = _constants(decimals, "numpy")
        self.ok = consts is not None
        if not self.ok:
            return
        self.decimals = int(decimals)
        self.scale, _, self.small = consts
        self.ints = [np.ascontiguousarray(a, dtype=np.int64) for a in (depth_known, pruned, status)]
        self.floats = [np.ascontiguousarray(a, dtype=np.float64) for a in (distance_mm, distance_upper_mm)]
        self.keep = keep = np.ascontiguousarray(keep, dtype=np.bool_)
        kept = keep.sum(axis=1) if keep.ndim == 2 else np.zeros(0, dtype=np.int64)
        self.point_start = np.concatenate([[0], np.cumsum(kept)]).astype(np.int64)
        self.points = [np.ascontiguousarray(a, dtype=np.float64).reshape(-1, 3) for a in (witness_body_mm, witness_other_mm)]
        shape = keep.shape
        if len(shape) != 2 or any(a.shape != shape for a in self.ints + self.floats) or any(len(p) != self.point_start[-1] for p in self.points):
            raise ValueError("the pair arrays differ in shape")
        k = [f'"{key}":' for key in PAIRS_KEYS]  # literal pieces between the written columns
        pieces = ["{" + k[0], "," + k[1], "," + k[2], "," + k[3] + pair_text + "," + k[4], "," + k[5], "," + k[6], "," + k[7], "," + k[8], "}"]
        lit_bytes = [p.encode("ascii") for p in pieces]
        self.lit = np.frombuffer(b"".join(lit_bytes), dtype=np.uint8)
        self.lit_offs = np.concatenate([[0], np.cumsum([len(b) for b in lit_bytes])]).astype(np.int64)
        fw = _WIDTH + self.decimals
        row_bound = shape[1] * (sum(_int_width(a) for a in self.ints) + 2 * fw + 1) + len(self.lit) + 32  # + brackets
        self.bound = row_bound + kept * (len(str(shape[1])) + 2 + 2 * (3 * fw + 3))

    def in_range(self) -> bool:
        """Every float is within the range the kernels write (else they stop with -1 / None)."""
        for a in (*self.floats, *self.points):
            a = np.abs(a[np.isfinite(a)]) * self.scale
            if not (a < LIMIT).all() or (self.small and ((np.rint(a) >= 1) & (np.rint(a) < self.small)).any()):
                return False
        return True

    def entries(self) -> list:
        """The entries as ASCII bytes, one per result (every number in range: ``in_range``)."""
        out = _bare_entries(self)
        if out is None:
            raise ValueError("a number out of range")
        data, offs = out[0].tobytes(), out[1].tolist()
        return [data[a:b] for a, b in zip(offs[:-1], offs[1:])]

    def args(self) -> tuple:
        """The kernels' arguments from ``depth`` to ``small``."""
        depth, pruned, codes = self.ints
        return (depth, *self.floats, pruned, codes, self.keep, self.point_start, *self.points, self.lit, self.lit_offs, self.decimals, self.scale, self.small)


def pairs_entry_bytes(depth_known, distance_mm, distance_upper_mm, pruned, status, keep, witness_body_mm, witness_other_mm, pair_text: str, decimals: int = 3):
    """``(buf, offs)``: the texts of ``pairs_entry_texts`` as ASCII bytes, entry r at
    ``buf[offs[r]:offs[r + 1]]``; None if a number is out of range."""
    arrays = PairArrays(depth_known, distance_mm, distance_upper_mm, pruned, status, keep, witness_body_mm, witness_other_mm, pair_text, decimals)
    return _bare_entries(arrays) if arrays.ok else None


def _bare_entries(arrays: PairArrays):
    """``(buf, offs)`` of every entry of ``arrays``, one after the other; None if out of range."""
    n = len(arrays.keep)
    entry_of = np.arange(n, dtype=np.int64)
    out = _write(np.zeros(n, dtype=np.uint8), np.arange(n, dtype=np.int64), entry_of, np.full(n, -1, dtype=np.int64), [None] * n, arrays)
    if out is None:
        return None
    buf, starts, ends = out
    return buf, np.concatenate([[0], ends]).astype(np.int64)


def fill_pairs(text: str, entry_of, copy_of, extra, arrays: PairArrays | None) -> str | None:
    """``text`` (ASCII) with its k-th NUL character replaced by: the pairs entry of result
    ``entry_of[k]`` of ``arrays`` (written straight into place), or else the same text as gap
    ``copy_of[k]`` (an earlier one), or else ``extra[k]`` (ASCII bytes). None if a number is out of
    range. ``text`` must hold one NUL per gap (JSON text never holds a raw NUL: the encoder escapes it).
    """
    data = np.frombuffer(text.encode("ascii"), dtype=np.uint8)
    out = _write(data, np.flatnonzero(data == 0), entry_of, copy_of, extra, arrays)
    return None if out is None else str(out[0].data, "ascii")


def _write(data, gaps, entry_of, copy_of, extra, arrays: PairArrays | None):
    """``(out, starts, ends)`` of ``fill_pairs`` (``data`` the text's bytes, ``gaps`` its NULs, gap k's
    text at ``out[starts[k]:ends[k]]``); None if a number is out of range."""
    n = len(gaps)
    entry_of = np.ascontiguousarray(entry_of, dtype=np.int64)
    copy_of = np.ascontiguousarray(copy_of, dtype=np.int64)
    if len(entry_of) != n or len(copy_of) != n or len(extra) != n:
        raise ValueError("the text does not hold one NUL per gap")
    if arrays is None:
        arrays = PairArrays(*([np.zeros((0, 0))] * 6), np.zeros((0, 3)), np.zeros((0, 3)), "null")
    elif not arrays.ok:
        return None
    formatted, copied = entry_of >= 0, (entry_of < 0) & (copy_of >= 0)
    if (entry_of >= len(arrays.keep)).any() or (copy_of[copied] >= np.arange(n)[copied]).any():
        raise ValueError("an entry index out of range (or a copy of a later gap)")
    given = [b"" if formatted[k] or copied[k] else extra[k] for k in range(n)]
    if any(g is None for g in given):
        raise ValueError("a gap without an entry")
    extra_buf = np.frombuffer(b"".join(given), dtype=np.uint8)
    extra_offs = np.concatenate([[0], np.cumsum([len(g) for g in given])]).astype(np.int64)
    size = np.where(formatted, arrays.bound[np.where(formatted, entry_of, 0)] if len(arrays.bound) else 0, 0)
    bound = len(data) + int(extra_offs[-1]) + int(size.sum()) + 2 * _WIDTH
    if copied.any():  # a copy is as long as the (formatted or given) text it copies, at most
        own = size + np.diff(extra_offs)
        for k in np.flatnonzero(copied).tolist():
            own[k] = own[copy_of[k]]
        bound += int(own[copied].sum())
    out = np.empty(bound, dtype=np.uint8)
    starts, ends = np.empty(n, dtype=np.int64), np.empty(n, dtype=np.int64)
    length = _lines_kernel(data, gaps, entry_of, copy_of, np.arange(n, dtype=np.int64), extra_buf, extra_offs, *arrays.args(), out, starts, ends)
    return None if length < 0 else (out[:length], starts, ends)


@njit(cache=True, nogil=True)
def _equal_rows_kernel(a, k, t, same):
    for i in range(k.shape[0]):
        if same[i]:
            x, y = a[k[i]], a[t[i]]
            diff = x[0] ^ y[0]
            for j in range(1, a.shape[1]):
                diff |= x[j] ^ y[j]
            same[i] = diff == 0


def equal_rows(arrays, k, t) -> np.ndarray:
    """``same[i]``: rows ``k[i]`` and ``t[i]`` of every array of ``arrays`` (each (R, ...)) are the same
    bits (so they make the same text: ``-0.0`` and ``0.0``, or two NaN payloads, count as different)."""
    k = np.ascontiguousarray(k, dtype=np.int64)
    t = np.ascontiguousarray(t, dtype=np.int64)
    same = np.ones(len(k), dtype=np.bool_)
    for a in arrays:
        a = np.ascontiguousarray(a)
        a = a.reshape(len(a), -1).view(np.uint8)
        if a.shape[1]:
            _equal_rows_kernel(a, k, t, same)
    return same
