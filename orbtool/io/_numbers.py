"""Strict conversion of text to numbers with line-accurate error messages.

The fast path hands a whole block to numpy; only when it fails is the block
scanned line by line to name the first offending line and token.
"""

from __future__ import annotations

import warnings

import numpy as np

from ..errors import InputFormatError

__all__ = ["floats", "table", "first_bad_token", "to_float", "to_int"]


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
