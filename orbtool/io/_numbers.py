"""Strict conversion of text to numbers with line-accurate error messages.

The fastest path decodes blocks written in a fixed column layout (every line
the same length, every number in the same columns, as PROCAR and DOSCAR
writers do) with array arithmetic on the bytes (:func:`fixed_columns`); the
next hands a whole block to numpy's text parser; only when that fails is the
block scanned line by line to name the first offending line and token. Any
block the fixed-layout decoder does not fully recognise goes to the next path
unchanged, so what is accepted and every error message stay the same.
"""

from __future__ import annotations

import warnings

import numpy as np

from ..errors import InputFormatError

__all__ = ["floats", "fixed_columns", "table", "first_bad_token", "to_float", "to_int"]


def first_bad_token(lines, first_line: int):
    """(line number, token) of the first token that is not a float, or None."""
    for i, ln in enumerate(lines):
        for tok in ln.split():
            try:
                float(tok)
            except ValueError:
                return first_line + i, tok
    return None


def _fromstring(text: str) -> np.ndarray | None:
    """All floats of ``text`` or None if some token is not a number."""
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        try:
            return np.fromstring(text, dtype=np.float64, sep=" ")
        except (DeprecationWarning, ValueError):
            return None


def floats(lines, path, first_line: int, what: str, count: int | None = None,
           finite: bool = True) -> np.ndarray:
    """Every number on ``lines`` (a list of str) as one float array.

    Parameters
    ----------
    lines : list of str
    path : file name for messages
    first_line : 1-based number of ``lines[0]`` in the file
    what : what the numbers are (for messages)
    count : expected number of values, if known
    finite : refuse NaN and inf
    """
    arr = fixed_columns(lines)
    if arr is None:
        text = " ".join(lines)
        arr = _fromstring(text) if text.strip() else np.empty(0)
    if arr is None:
        bad = first_bad_token(lines, first_line)
        if bad is not None:
            raise InputFormatError(path, bad[0], f"expected a number in {what}, found {bad[1]!r}", field=what)
        raise InputFormatError(path, first_line, f"could not read the numbers of {what}", field=what)
    if count is not None and arr.size != count:
        where = first_line + len(lines) - 1 if arr.size < count else first_line
        raise InputFormatError(path, where, f"{what}: expected {count} values, found {arr.size}", field=what)
    if finite and arr.size and not np.isfinite(arr).all():
        k = int(np.flatnonzero(~np.isfinite(arr))[0])
        line = _line_of_value(lines, k, first_line)
        raise InputFormatError(path, line, f"{what} contains NaN or inf", field=what)
    return arr


_POW10 = 10.0 ** np.arange(23)  # exact in binary64 up to 1e22
_MIN_LINES = 64  # below this the per-call overhead is larger than the gain


def fixed_columns(lines) -> np.ndarray | None:
    """Every number of ``lines`` (row-major), decoded from fixed columns; None if the block
    is not in a fixed layout the decoder fully understands (then use the general parser).

    Accepted: all lines of equal length; columns that are blank on every line separate the
    fields; inside a field, on every line, blanks, an optional ``-``/``+``, digits, an
    optional ``.`` in the same column on all lines and an optional ``E``/``e`` exponent
    (sign and digits) in the same columns. The digits form an integer ``m`` < 2⁵³ and the
    value is ``m / 10^k`` or ``m · 10^k`` with ``10^k`` exact (|k| ≤ 22): one correctly
    rounded operation on exact operands, so the result equals Python's ``float(token)``
    (IEEE 754 correct rounding of division and multiplication); the rare tokens with
    |k| > 22 are handed to numpy's (correctly rounded) text-to-float conversion. The digit sums are one
    matrix product of small integers, exact in binary64 whatever the summation order.
    """
    n = len(lines)
    if n < _MIN_LINES:
        return None
    width = len(lines[0])
    if width == 0 or len(set(map(len, lines))) != 1:
        return None
    try:
        buf = "".join(lines).encode("ascii")
    except UnicodeEncodeError:
        return None
    c = np.frombuffer(buf, dtype=np.uint8).reshape(n, width)
    ct = np.empty((width, n), dtype=np.uint8)  # one row per text column, transposed in cache-sized blocks
    for r in range(0, n, 1024):
        ct[:, r:r + 1024] = c[r:r + 1024].T
    blank = ct == 32
    used = ~blank.all(axis=1)
    if not used.any():
        return None
    digit = (ct >= 48) & (ct <= 57)
    digit_all = digit.all(axis=1)
    dot_any, e_any = (ct == 46).any(axis=1), ((ct == 69) | (ct == 101)).any(axis=1)
    edges = np.flatnonzero(np.diff(np.concatenate(([0], used.view(np.int8), [0]))))
    out = np.empty((edges.size // 2, n))
    for i, (lo, hi) in enumerate(zip(edges[::2], edges[1::2])):
        stop, k = hi, None
        es = np.flatnonzero(e_any[lo:hi])
        if es.size:
            e = lo + int(es[0])
            if es.size > 1 or not ((ct[e] == 69) | (ct[e] == 101)).all() or hi - e < 3 \
                    or not digit_all[e + 2:hi].all() or not ((ct[e + 1] == 45) | (ct[e + 1] == 43)).all():
                return None
            k = np.zeros(n, dtype=np.int64)
            for col in range(e + 2, hi):
                k = k * 10 + (ct[col] - 48)
            k = np.where(ct[e + 1] == 45, -k, k)
            stop = e
        ds = np.flatnonzero(dot_any[lo:stop])
        mcols = list(range(lo, stop))
        frac = 0
        if ds.size:
            d = lo + int(ds[0])
            if ds.size > 1 or not (ct[d] == 46).all() or d == lo or d + 1 >= stop or not digit_all[d - 1] \
                    or not digit_all[d + 1:stop].all():
                return None
            frac = stop - d - 1
            mcols.remove(d)
        if len(mcols) > 17 or not digit_all[mcols[-1]]:
            return None
        m = np.zeros(n)
        neg = np.zeros(n, dtype=bool)
        seen = np.zeros(n, dtype=bool)  # a sign or digit met: only digits may follow
        for col in mcols:
            row, dg = ct[col], digit[col]
            sign = (row == 45) | (row == 43)
            if not (dg | (~seen & (sign | blank[col]))).all():
                return None
            neg |= row == 45
            seen |= ~blank[col]
            m = m * 10.0 + np.where(dg, row, 48) - 48.0  # exact: integers below 2**53
        if m.max() >= 2.0 ** 53:
            return None
        k = -frac if k is None else k - frac
        v = np.where(k < 0, m / _POW10[np.clip(-k, 0, 22)], m * _POW10[np.clip(k, 0, 22)])
        v = np.where(neg, -v, v)
        far = np.flatnonzero(np.abs(k) > 22)
        if far.size:  # 10^|k| not exact in binary64: these few tokens go through the correctly rounded text parser
            v[far] = np.ascontiguousarray(c[far, lo:hi]).view(f"S{hi - lo}").ravel().astype(np.float64)
        out[i] = v
    return out.T.ravel()


def _line_of_value(lines, k: int, first_line: int) -> int:
    seen = 0
    for i, ln in enumerate(lines):
        seen += len(ln.split())
        if seen > k:
            return first_line + i
    return first_line + len(lines) - 1


def table(lines, path, first_line: int, ncols: int, what: str, finite: bool = True) -> np.ndarray:
    """A rectangular block of numbers, shape (len(lines), ncols); every line
    must hold exactly ``ncols`` numbers."""
    arr = floats(lines, path, first_line, what, finite=finite)
    if arr.size != len(lines) * ncols:
        for i, ln in enumerate(lines):
            n = len(ln.split())
            if n != ncols:
                raise InputFormatError(path, first_line + i, f"{what}: expected {ncols} columns, found {n}",
                                       field=what)
    return arr.reshape(len(lines), ncols)


def to_float(tok: str, path, line: int, what: str) -> float:
    try:
        v = float(tok.replace("D", "E").replace("d", "e"))
    except (ValueError, AttributeError):
        raise InputFormatError(path, line, f"expected a number for {what}, found {tok!r}", field=what) from None
    if not np.isfinite(v):
        raise InputFormatError(path, line, f"{what} is not finite ({tok!r})", field=what)
    return v


def to_int(tok: str, path, line: int, what: str) -> int:
    try:
        return int(tok)
    except (ValueError, TypeError):
        raise InputFormatError(path, line, f"expected an integer for {what}, found {tok!r}", field=what) from None
