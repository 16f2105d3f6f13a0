"""Fast, strict, memory-light parsing of the long value blocks of grid files.

Grid files hold tens of millions of numbers. They are read in chunks of a
few MB and parsed straight into the preallocated output array, so peak
memory stays close to the size of the result. Inside a chunk, numbers
written with a fixed layout (``[-]d.dddddE±dd`` as cube and CHGCAR writers
do) are decoded with array arithmetic on the bytes (digit columns times
powers of ten, within 1.5 ulp of the correctly rounded value); any chunk not
in that layout (varying widths, ``nan``, junk) falls back to numpy's text
parser, which is slower but still vectorised and refuses non-numeric tokens.
"""

from __future__ import annotations

import os
import re
import warnings
from collections import deque

import numpy as np

from ..errors import InputFormatError

__all__ = ["ValueReader", "parse_workers"]

_CHUNK = 1 << 20
_PARALLEL_MIN = 1 << 20  # values; smaller blocks are parsed in the calling thread


def parse_workers() -> int:
    """Threads used to decode a large value block: ``ORBTOOL_PARSE_THREADS`` if set, else 1.

    Serial by default: on an idle 2-core machine 2 threads read a 180³ cube in the same wall time
    (0.67 vs 0.70 s signed, 0.47 vs 0.46 s density) for ~45 % more CPU, because the decoder's many
    short numpy passes per segment hold the GIL too often; the threaded path stays for measurement.
    """
    env = os.environ.get("ORBTOOL_PARSE_THREADS", "").strip()
    try:
        return max(1, int(env)) if env else 1
    except ValueError:
        return 1


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

    @classmethod
    def detect(cls, tok: bytes):
        t = tok.lstrip(b"+-")
        m = re.fullmatch(rb"(\d+)\.(\d+)(?:([eEdD])[-+](\d+))?", t)
        if m is None:
            return None
        a, b = len(m.group(1)), len(m.group(2))
        if a > 8 or b > 16 or a + b > 17 or (m.group(3) is not None and len(m.group(4)) > 3):
            return None
        if m.group(3) is None:
            return cls(a, b, 0, False)
        return cls(a, b, len(m.group(4)), True)

    def decode(self, buf: np.ndarray, dots: np.ndarray):
        """Values of the tokens anchored at ``dots`` and the end byte of the last one,
        or None if the block is not tiled by tokens of this layout and whitespace.

        Each token is read with a few unaligned 8-byte loads at fixed offsets from its dot;
        the digits inside a word are checked and combined with SWAR arithmetic.
        """
        a, b, c = self.a, self.b, self.c
        stop = int(dots[-1]) + self.tail + 1
        if stop > buf.size or int(dots[0]) < a:
            return None
        ext = np.empty(stop + 2 * _PAD, dtype=np.uint8)
        ext[:_PAD] = 32
        ext[_PAD:_PAD + stop] = buf[:stop]
        ext[_PAD + stop:] = 32
        words = np.ndarray(shape=(ext.size - 7,), dtype="<u8", buffer=ext, strides=(1,))

        def word(k):  # the 8 bytes starting k bytes after each dot
            return words[_PAD + k:][dots]

        def byte(k, where=dots):  # the byte k bytes after each dot
            return ext[_PAD + k:][where]

        if a == 1:
            # the usual case ('%e', Fortran E): the integer digit and the dot share a word with
            # up to six fraction digits; the dot is read as a '0' and corrected for
            lo_n = 0 if b <= 6 else min(b, 8)
            r = b - lo_n  # fraction digits in the word holding the dot
            if r > 6:
                return None
            w = word(r - 7)
            w &= np.uint64(~(0xFF << (8 * (7 - r))) & 0xFFFFFFFFFFFFFFFF)
            w |= np.uint64(0x30 << (8 * (7 - r)))
            v, ok = _digit_word(w, r + 2)
            idig = (w >> np.uint64(8 * (6 - r))) & _BYTE
            mant = v - (idig - np.uint64(48)) * np.uint64(9 * 10 ** r)
            if lo_n:
                lo, ok_lo = _digit_word(word(b - 7), lo_n)
                mant = mant * np.uint64(10 ** lo_n) + lo
                ok &= ok_lo
        else:
            if b <= 8:
                frac, ok = _digit_word(word(1 + b - 8), b)
            else:
                lo, ok = _digit_word(word(1 + b - 8), 8)
                hi, ok_hi = _digit_word(word(1 + b - 16), b - 8)
                frac = hi * np.uint64(100_000_000) + lo
                ok &= ok_hi
            ipart, ok_i = _digit_word(word(-8), a)
            ok &= ok_i
            mant = ipart * np.uint64(10 ** b) + frac
        if not ok.all():
            return None
        p = byte(-a - 1)  # sign or separator before the number
        sign = (p == 45) | (p == 43)
        nsign = int(np.count_nonzero(sign))
        if not np.all((p <= 32) | sign):
            return None
        if nsign and byte(-a - 2, dots[sign]).max() > 32:
            return None
        if self.echar:
            ec = byte(b + 1) | np.uint8(0x20)
            es = byte(b + 2)
            if not (np.all((ec == 101) | (ec == 100)) and np.all((es == 45) | (es == 43))):
                return None
            e = np.zeros(dots.size, dtype=np.int16)
            for k in range(c):
                dk = byte(b + 3 + k) - np.uint8(48)
                if dk.max() > 9:
                    return None
                e = e * 10 + dk
            if byte(b + 3 + c).max() > 32:
                return None
            scale = np.where(es == 45, -e, e) - b
        else:
            if byte(b + 1).max() > 32:
                return None
            scale = np.full(dots.size, -b, dtype=np.int16)
        if np.count_nonzero(buf[:stop] > 32) != dots.size * self.length + nsign:
            return None  # something other than these tokens and whitespace is in the block
        # mantissa (exact integer) times a correctly rounded power of ten: within 1.5 ulp
        val = mant.astype(np.float64)
        val *= _POW10S[np.clip(scale.astype(np.int32) + _POW_OFFSET, 0, _POW10S.size - 1)]
        if nsign:
            np.negative(val, out=val, where=sign & (p == 45))
        return val, stop


def _digit_word(w: np.ndarray, n: int):
    """Value of the last ``n`` bytes of each 8-byte word as decimal digits, and whether they all are digits."""
    if n < 8:
        keep = np.uint64(((1 << (8 * n)) - 1) << (8 * (8 - n)))
        w = (w & keep) | (_THREES & ~keep)  # leading bytes -> '0'
    ok = ((w & _HIGH) == _THREES) & (((w + _SIXES) & _HIGH) == _THREES)
    return _eight_digits(w), ok


_PAD = 8
_BYTE = np.uint64(0xFF)
_HIGH, _THREES, _SIXES = np.uint64(0xF0F0F0F0F0F0F0F0), np.uint64(0x3030303030303030), np.uint64(0x0606060606060606)
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


_POW_OFFSET = 400
# 10**k for k = -400..400, each correctly rounded (0 below 1e-324, inf above 1e308)
_POW10S = np.array([float(f"1e{k}") for k in range(-_POW_OFFSET, _POW_OFFSET + 1)])


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

    def _segment(self) -> bytes | None:
        """The next segment: the bytes up to the last line end (else whitespace) within the next
        ``_CHUNK`` bytes, or everything that is left at the end of the file; None when nothing is left.

        Segment boundaries depend only on the bytes from where a :meth:`fill` starts, not on how
        far the stream has been read, so the serial and the threaded fill cut a block identically.
        """
        while len(self.pending) < _CHUNK and self._more():
            pass
        buf = self.pending
        if not buf:
            return None
        if self.eof and len(buf) <= _CHUNK:
            self.pending = b""
            return buf
        window = buf[:_CHUNK]
        cut = window.rfind(b"\n")
        if cut < 0:
            cut = max(window.rfind(b" "), window.rfind(b"\t"), window.rfind(b"\r"))
        while cut < 0:  # one token longer than a chunk: up to the next whitespace
            m = re.search(rb"\s", buf)
            if m is not None:
                cut = m.start()
            elif not self._more():
                cut = len(buf) - 1
            buf = self.pending
        self.pending = buf[cut + 1:]
        return buf[:cut + 1]

    def fill(self, out: np.ndarray, what: str, workers: int | None = None) -> None:
        """Fill the 1-D array ``out`` with the next ``out.size`` numbers.

        The block is cut into segments at line ends (:meth:`_segment`) and each segment is
        decoded on its own; a token's value depends only on its own bytes and its segment's
        decoder, so the result is bit-identical whatever the number of threads. With
        ``workers > 1`` (default: :func:`parse_workers`) segments of the fixed layout are
        decoded in that many threads (numpy releases the GIL in the array passes) while this
        thread reads ahead; any segment the fast decoder does not fully take, and the segment
        where the block ends, are decoded here by the serial rule, with its error messages.

        Raises :class:`InputFormatError` naming the line of the first bad token, or the
        line where the file ended too early.
        """
        need, done = out.size, 0
        workers = parse_workers() if workers is None else max(1, int(workers))
        if self.layout is None:
            head = self.pending.lstrip()[:80]
            if len(head) < 80 and self._more():
                head = self.pending.lstrip()[:80]
            toks = head.split()
            self.layout = (_Layout.detect(toks[0]) if toks else None) or False
        pool = None
        if workers > 1 and self.layout and need >= _PARALLEL_MIN:
            from concurrent.futures import ThreadPoolExecutor
            pool = ThreadPoolExecutor(max_workers=workers, thread_name_prefix="orbtool-parse")
        ahead: deque = deque()  # (segment, future or None, dots in it)
        ahead_dots = 0
        try:
            while done < need:
                while pool is not None and len(ahead) < 2 * workers and done + ahead_dots < need:
                    seg = self._segment()
                    if seg is None:
                        break
                    n_dots = seg.count(b".")
                    ahead.append((seg, pool.submit(self._whole_fast, seg), n_dots))
                    ahead_dots += n_dots
                if ahead:
                    seg, fut, n_dots = ahead.popleft()
                    ahead_dots -= n_dots
                    res = fut.result()
                else:
                    seg, res = self._segment(), None
                    if seg is None:
                        raise InputFormatError(self.path, self.line, f"file ended after {done} of {need} values "
                                               f"of {what}", field=what)
                if res is None or res[0].size > need - done:
                    res = self._segment_values(seg, need - done, what)
                vals, stop = res
                take = vals.size
                out[done:done + take] = vals
                done += take
                end = stop if done == need else len(seg)  # the rest of the last line stays unread
                self.line += seg.count(b"\n", 0, end)
                if done == need:
                    rest = seg[end:] + b"".join(a[0] for a in ahead)
                    ahead.clear()
                    self.pending = rest + self.pending
                else:
                    self.line += seg.count(b"\n", end)
        finally:
            if pool is not None:
                for _, fut, _ in ahead:
                    fut.cancel()
                pool.shutdown(wait=True)

    def _whole_fast(self, seg: bytes):
        """(values, len(seg)) if the fixed-layout decoder takes every token of ``seg`` and all
        are finite, else None. Runs in a worker thread: touches nothing but its arguments."""
        arr = np.frombuffer(seg, dtype=np.uint8)
        dots = np.flatnonzero(arr == 46)
        if dots.size == 0:
            return None
        res = self.layout.decode(arr, dots)
        if res is None or seg[res[1]:].strip() or not np.isfinite(res[0]).all():
            return None
        return res

    def _segment_values(self, seg: bytes, limit: int, what: str):
        """(values, end byte of the last token) of at most ``limit`` tokens of ``seg``: the
        fixed-layout decoder if it takes them all (and, below the limit, nothing but whitespace
        follows), else numpy's text parser."""
        arr = np.frombuffer(seg, dtype=np.uint8)
        if self.layout:
            dots = np.flatnonzero(arr == 46)[:limit]
            res = self.layout.decode(arr, dots) if dots.size else None
            if res is not None:
                vals, stop = res
                if np.isfinite(vals).all() and (vals.size == limit or not seg[stop:].strip()):
                    return vals, stop
        nonws = np.frombuffer(seg.translate(_CLASS), dtype=bool)
        edges = np.flatnonzero(np.diff(nonws, prepend=False, append=False))
        starts, ends = edges[0::2], edges[1::2]
        take = min(starts.size, limit)
        if take == 0:
            return np.empty(0), 0
        s, e = starts[:take], ends[:take]
        end_byte = int(e[-1])
        vals = self._decode(s, e, seg, end_byte, what)
        if not np.isfinite(vals).all():
            k = int(np.flatnonzero(~np.isfinite(vals))[0])
            raise InputFormatError(self.path, self.line + _line_of_token(seg, k),
                                   f"{what} contains NaN or inf", field=what)
        return vals, end_byte

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
