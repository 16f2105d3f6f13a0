"""Fast, strict, memory-light parsing of the long value blocks of grid files.

Grid files hold tens of millions of numbers. They are read in chunks of a
few MB and parsed straight into the preallocated output array, so peak
memory stays close to the size of the result. Inside a chunk, numbers
written with a fixed layout (``[-]d.dddddE±dd`` as cube and CHGCAR writers
do) are decoded with array arithmetic on the bytes (digit columns times
powers of ten); any chunk not in that layout (varying widths, ``nan``, junk)
falls back to numpy's text parser, which is slower but still vectorised and
refuses non-numeric tokens.
"""

from __future__ import annotations

import re
import warnings

import numpy as np

from ..errors import InputFormatError

__all__ = ["ValueReader"]

_CHUNK = 1 << 21
# byte -> 0 for whitespace, 1 otherwise (bytes.translate is much faster than a numpy lookup)
_CLASS = bytes(0 if b in (9, 10, 11, 12, 13, 32) else 1 for b in range(256))


class _Layout:
    """Fixed token layout ``[sign] a-digits . b-digits [e sign c-digits]``.

    Every token holds exactly one '.', so the dots anchor the tokens: the digits
    of token i are at fixed offsets from its dot. Coverage is verified by
    checking that the tokens and whitespace tile the block exactly.
    """

    def __init__(self, a: int, b: int, c: int, echar: bool):
        self.a, self.b, self.c, self.echar = a, b, c, echar
        self.tail = b + ((2 + c) if echar else 0)  # bytes after the dot
        self.length = a + 1 + self.tail
        # offsets from the dot of the mantissa digits, most significant first
        self.mant_offsets = np.r_[-a:0, 1:b + 1]
        self.exp_offsets = np.arange(b + 3, b + 3 + c)

    @classmethod
    def detect(cls, tok: bytes):
        t = tok.lstrip(b"+-")
        m = re.fullmatch(rb"(\d+)\.(\d+)(?:([eEdD])[-+](\d+))?", t)
        if m is None:
            return None
        a, b = len(m.group(1)), len(m.group(2))
        if a + b > 17 or (m.group(3) is not None and len(m.group(4)) > 3):
            return None
        if m.group(3) is None:
            return cls(a, b, 0, False)
        return cls(a, b, len(m.group(4)), True)

    def decode(self, buf: np.ndarray, dots: np.ndarray):
        """Values of the tokens anchored at ``dots`` and the end byte of the last one,
        or None if the block is not tiled by tokens of this layout and whitespace."""
        n = buf.size
        t0 = dots - self.a
        t1 = dots + self.tail + 1
        if t0[0] < 0 or t1[-1] > n:
            return None
        before = buf[np.maximum(t0 - 1, 0)]
        before[t0 == 0] = 32
        sign = (before == 45) | (before == 43)
        start = t0 - sign
        pre = buf[np.maximum(start - 1, 0)]
        pre[start == 0] = 32
        stop = int(t1[-1])
        post = buf[np.minimum(t1, n - 1)]
        post[t1 == n] = 32
        if pre.max() > 32 or post.max() > 32:
            return None
        if np.count_nonzero(buf[:stop] > 32) != dots.size * self.length + int(np.count_nonzero(sign)):
            return None
        # the mantissa digits, left-padded with '0' to 8 or 16 bytes, as a (ntok, W) byte matrix
        nd = self.mant_offsets.size
        width = 8 if nd <= 8 else 16
        ext = np.concatenate([buf[:stop], _ZERO])  # last byte is a '0' used for padding
        offs = np.concatenate([np.full(width - nd, -1 << 40), self.mant_offsets])
        idx = dots[:, None] + offs
        np.maximum(idx, -1, out=idx)  # padding columns -> index -1 -> the '0' at the end of ext
        digits = np.take(ext, idx)
        if (digits - np.uint8(48)).max(initial=0) > 9:
            return None
        words = digits.view("<u8")
        mant = _eight_digits(words[:, 0]).astype(np.int64)
        if width == 16:
            mant = mant * 100_000_000 + _eight_digits(words[:, 1]).astype(np.int64)
        bad = np.zeros(dots.size, dtype=bool)
        scale = np.full(dots.size, -self.b, dtype=np.int64)
        if self.echar:
            ec = buf[dots + (self.b + 1)] | np.uint8(0x20)
            es = buf[dots + (self.b + 2)]
            bad |= ~((ec == 101) | (ec == 100)) | ~((es == 45) | (es == 43))
            e = np.zeros(dots.size, dtype=np.int64)
            for off in self.exp_offsets:
                d = buf[dots + off] - np.uint8(48)
                bad |= d > 9
                e *= 10
                e += d
            scale += np.where(es == 45, -e, e)
        if bad.any():
            return None
        m = mant.astype(np.float64)
        # one correctly rounded operation when 10**|scale| is exact (|scale| <= 22)
        val = m / _POW10[np.minimum(-scale, _POW10.size - 1)]
        pos = scale > 0
        if pos.any():
            val[pos] = m[pos] * _POW10[np.minimum(scale[pos], _POW10.size - 1)]
        neg = sign & (before == 45)
        if neg.any():
            np.negative(val, out=val, where=neg)
        return val, stop


_ZERO = np.array([48], dtype=np.uint8)
_M1, _M2, _M3 = np.uint64(0x0F0F0F0F0F0F0F0F), np.uint64(0x00FF00FF00FF00FF), np.uint64(0x0000FFFF0000FFFF)


def _eight_digits(w: np.ndarray) -> np.ndarray:
    """Value of 8 ASCII digits packed little-endian in each uint64 (most significant first).

    The three multiply-shift steps combine digit pairs, then pairs of pairs, then halves
    (the SWAR method of W. Muła and D. Lemire, "Faster integer parsing", 2018 blog post and
    simdjson). Products wrap modulo 2**64 by design.
    """
    with np.errstate(over="ignore"):
        w = ((w & _M1) * np.uint64(2561)) >> np.uint64(8)
        w = ((w & _M2) * np.uint64(6553601)) >> np.uint64(16)
        return ((w & _M3) * np.uint64(42949672960001)) >> np.uint64(32)


_POW10 = np.array([float(f"1e{k}") for k in range(0, 330)])  # correctly rounded; inf beyond 1e308


class ValueReader:
    """Reads whitespace-separated numbers from a binary stream into arrays.

    Parameters
    ----------
    stream : binary file object (already past any header that was read by lines)
    path : file name for messages
    line : 1-based line number of the first byte of ``pending``
    pending : bytes already read from the stream but not yet consumed
    bar : tqdm progress bar (updated with bytes read) or None
    """

    def __init__(self, stream, path, line: int, pending: bytes = b"", bar=None):
        self.stream, self.path, self.line, self.pending, self.bar = stream, path, line, pending, bar
        self.eof = False
        self.layout = None

    def _more(self) -> bool:
        if self.eof:
            return False
        data = self.stream.read(_CHUNK)
        if self.bar is not None:
            self.bar.update(len(data))
        if not data:
            self.eof = True
            return False
        self.pending += data
        return True

    def fill(self, out: np.ndarray, what: str) -> None:
        """Fill the 1-D array ``out`` with the next ``out.size`` numbers.

        Raises :class:`InputFormatError` naming the line of the first bad token, or the
        line where the file ended too early.
        """
        need, done = out.size, 0
        while done < need:
            if len(self.pending) < _CHUNK // 2:
                self._more()
            buf = self.pending
            if not buf:
                raise InputFormatError(self.path, self.line, f"file ended after {done} of {need} values of {what}",
                                       field=what)
            if not self.eof:
                cut = max(buf.rfind(b" "), buf.rfind(b"\n"))
                if cut < 0:
                    if not self._more():
                        cut = len(buf)
                    else:
                        continue
                usable = buf[:cut + 1] if cut < len(buf) else buf
            else:
                usable = buf
            arr = np.frombuffer(usable, dtype=np.uint8)
            fast = self._fast(usable, arr, need - done)
            if fast is not None:
                vals, end_byte = fast
                take = vals.size
            else:
                nonws = np.frombuffer(usable.translate(_CLASS), dtype=bool)
                edges = np.flatnonzero(np.diff(nonws, prepend=False, append=False))
                starts, ends = edges[0::2], edges[1::2]
                take = min(starts.size, need - done)
                if take == 0:
                    if self.eof:
                        raise InputFormatError(self.path, self.line + usable.count(b"\n"),
                                               f"file ended after {done} of {need} values of {what}", field=what)
                    self.line += usable.count(b"\n")
                    self.pending = buf[len(usable):]
                    continue
                s, e = starts[:take], ends[:take]
                end_byte = int(e[-1])
                vals = self._decode(s, e, usable, end_byte, what)
            if not np.isfinite(vals).all():
                k = int(np.flatnonzero(~np.isfinite(vals))[0])
                raise InputFormatError(self.path, self.line + _line_of_token(usable, k),
                                       f"{what} contains NaN or inf", field=what)
            out[done:done + take] = vals
            done += take
            self.line += usable.count(b"\n", 0, end_byte)
            self.pending = buf[end_byte:]

    def _fast(self, usable: bytes, arr: np.ndarray, need: int):
        """Dot-anchored decoding of a block in one fixed layout, or None."""
        if self.layout is None:
            head = usable[:80].split()
            self.layout = (_Layout.detect(head[0]) if head else None) or False
        if not self.layout:
            return None
        dots = np.flatnonzero(arr == 46)[:need]
        if dots.size == 0:
            return None
        return self.layout.decode(arr, dots)

    def _decode(self, s, e, usable, end_byte, what):
        text = usable[int(s[0]):end_byte]
        with warnings.catch_warnings():
            warnings.simplefilter("error")
            try:
                vals = np.fromstring(text, dtype=np.float64, sep=" ")
            except (DeprecationWarning, ValueError):
                vals = None
        if vals is None or vals.size != s.size:
            for i in range(s.size):
                tok = usable[int(s[i]):int(e[i])]
                try:
                    float(tok)
                except ValueError:
                    line = self.line + usable.count(b"\n", 0, int(s[i]))
                    shown = tok[:30].decode("latin-1")
                    raise InputFormatError(self.path, line, f"expected a number in {what}, found {shown!r}",
                                           field=what) from None
            raise InputFormatError(self.path, self.line, f"could not read the numbers of {what}", field=what)
        return vals

    def rest_lines(self, max_bytes: int = 1 << 16) -> list[str]:
        """Up to ``max_bytes`` of what follows, as text lines (for what comes after a block)."""
        while len(self.pending) < max_bytes and self._more():
            pass
        return self.pending[:max_bytes].decode("latin-1").splitlines()

    def at_end(self) -> bool:
        """True if only whitespace remains."""
        while True:
            stripped = self.pending.lstrip()
            if stripped:
                self.line += self.pending[:len(self.pending) - len(stripped)].count(b"\n")
                return False
            self.pending = b""
            if not self._more():
                return True


def _line_of_token(block: bytes, k: int) -> int:
    """0-based line offset of the k-th whitespace-separated token of ``block``."""
    seen = 0
    for i, ln in enumerate(block.split(b"\n")):
        seen += len(ln.split())
        if seen > k:
            return i
    return block.count(b"\n")


class HeaderReader:
    """Reads header lines from a binary stream one at a time, keeping what was read
    beyond them so a :class:`ValueReader` can continue exactly where the header ended."""

    def __init__(self, stream, path):
        self.stream, self.path = stream, path
        self.pending = b""
        self.line = 0  # number of the last line returned
        self.eof = False

    def next(self, what: str) -> str:
        """The next line as text (without the newline); raises if the file ended."""
        while True:
            i = self.pending.find(b"\n")
            if i >= 0 or self.eof:
                break
            data = self.stream.read(1 << 16)
            if not data:
                self.eof = True
            self.pending += data
        if i < 0:
            if not self.pending:
                raise InputFormatError(self.path, self.line + 1, f"file ended where {what} was expected", field=what)
            i = len(self.pending)
        raw, self.pending = self.pending[:i], self.pending[i + 1:]
        self.line += 1
        if b"\x00" in raw:
            raise InputFormatError(self.path, self.line, f"binary content where {what} was expected", field=what)
        return raw.decode("latin-1").rstrip("\r")

    def values(self, bar=None) -> ValueReader:
        """A :class:`ValueReader` continuing after the last header line."""
        return ValueReader(self.stream, self.path, self.line + 1, self.pending, bar)


def check_declared_size(path, count: int, what: str, line: int | None, compressed: bool) -> None:
    """Refuse a declared number of values the file cannot possibly hold, before allocating.

    Every value needs at least two bytes of text (a digit and a separator); compressed files
    are allowed the largest deflate/bzip2/xz expansion ratios seen in practice (~1:1500).
    """
    import os
    size = os.stat(path).st_size
    limit = size * (1500 if compressed else 1) // 2 + 1
    if count > limit:
        raise InputFormatError(path, line, f"{what} declares {count:,d} values but the file ({size:,d} bytes) "
                               f"can hold at most {limit:,d}", field=what)


def progress_bar(path, enabled: bool, compressed: bool):
    """A tqdm.auto bar over bytes read that appears only after one second, or None."""
    if not enabled:
        return None
    import os

    from tqdm.auto import tqdm
    total = None if compressed else os.stat(path).st_size
    return tqdm(total=total, unit="B", unit_scale=True, delay=1.0, leave=False,
                desc=f"reading {os.path.basename(str(path))}")


def next_line(reader: ValueReader) -> str | None:
    """The next text line after a value block (None at the end of the file); advances ``reader``."""
    while True:
        i = reader.pending.find(b"\n")
        if i >= 0 or not reader._more():
            break
    if i < 0:
        if not reader.pending:
            return None
        i = len(reader.pending)
    raw, reader.pending = reader.pending[:i], reader.pending[i + 1:]
    reader.line += 1
    if b"\x00" in raw:
        raise InputFormatError(reader.path, reader.line - 1, "binary content in a text file")
    return raw.decode("latin-1").rstrip("\r")
