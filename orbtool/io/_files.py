"""Opening input files: transparent gzip/bz2/xz, head sniffing, chunked text.

Compression is recognised by the file's magic bytes, not its name, so a
``CHGCAR.gz`` renamed to ``CHGCAR`` still opens.

Hostile inputs (issue 18): only regular files are opened (a FIFO would block
forever, ``/dev/zero`` never ends), so every opener first checks the file type
with ``os.stat`` (which follows symbolic links). Text is read in bounded chunks
up to :data:`MAX_TEXT_BYTES` of decompressed content, and a UTF-8 byte-order
mark is dropped. :func:`check_memory` refuses an allocation that the declared
sizes of a file ask for when it exceeds the memory budget
(:data:`DEFAULT_MAX_BYTES`, or the environment variable ``ORBTOOL_MAX_BYTES``,
or an explicit ``max_bytes`` argument), before anything is decompressed.
"""

from __future__ import annotations

import bz2
import gzip
import io
import lzma
import os
import stat
import zlib
from pathlib import Path

from ..errors import InputFormatError

__all__ = ["open_binary", "read_head", "read_text", "strip_compression", "compression_of", "file_size",
           "check_regular_file", "check_memory", "memory_budget", "read_bounded", "DEFAULT_MAX_BYTES",
           "MAX_TEXT_BYTES"]

#: default memory budget for one array built from a file's declared sizes (bytes): 1 GiB admits a
#: 512³ grid of float64 (exactly 2**30 bytes); override with ``ORBTOOL_MAX_BYTES`` or ``max_bytes=``
DEFAULT_MAX_BYTES = 2 ** 30
#: the most decompressed text read from one text input (DOS, projections, structures, manifests)
MAX_TEXT_BYTES = 2 ** 30
_CHUNK = 1 << 20


def memory_budget(max_bytes: int | None = None) -> int:
    """The memory budget in bytes: ``max_bytes`` if given, else ``$ORBTOOL_MAX_BYTES``, else
    :data:`DEFAULT_MAX_BYTES`."""
    if max_bytes is not None:
        return int(max_bytes)
    env = os.environ.get("ORBTOOL_MAX_BYTES", "").strip().replace("_", "")
    if env:
        try:
            return int(float(env))
        except ValueError:
            raise InputFormatError(None, None, f"ORBTOOL_MAX_BYTES must be a number of bytes, got {env!r}",
                                   field="ORBTOOL_MAX_BYTES") from None
    return DEFAULT_MAX_BYTES


def check_memory(path, nbytes: int, what: str, line: int | None = None, max_bytes: int | None = None) -> None:
    """Refuse reading ``what`` from ``path`` when its declared size ``nbytes`` exceeds the memory
    budget (see :func:`memory_budget`). Called before allocating or decompressing."""
    budget = memory_budget(max_bytes)
    if int(nbytes) > budget:
        raise InputFormatError(path, line, f"{what} declares {int(nbytes):,d} bytes of data, more than the memory "
                               f"budget of {budget:,d} bytes; if the file is genuine, raise the budget with "
                               "the environment variable ORBTOOL_MAX_BYTES (or max_bytes=)", field=what)


def check_regular_file(path) -> None:
    """Refuse anything but a regular file (FIFO, device, socket) before opening it: opening a FIFO
    blocks, a device such as /dev/zero never ends. Symbolic links are followed."""
    try:
        st = os.stat(path)
    except FileNotFoundError:
        raise InputFormatError(path, None, "no such file") from None
    except OSError as exc:
        raise InputFormatError(path, None, f"cannot open file ({exc.strerror or exc})") from None
    mode = st.st_mode
    if stat.S_ISREG(mode):
        return
    if stat.S_ISDIR(mode):
        raise InputFormatError(path, None, "expected a file, got a folder")
    kind = ("a FIFO (named pipe)" if stat.S_ISFIFO(mode) else "a character device" if stat.S_ISCHR(mode)
            else "a block device" if stat.S_ISBLK(mode) else "a socket" if stat.S_ISSOCK(mode) else "not a file")
    raise InputFormatError(path, None, f"is {kind}, not a regular file; orbtool reads only regular files")

_MAGIC = ((b"\x1f\x8b", "gzip"), (b"BZh", "bz2"), (b"\xfd7zXZ\x00", "xz"))
_COMPRESSED_SUFFIXES = (".gz", ".bz2", ".xz")


def compression_of(path) -> str | None:
    """``"gzip"``, ``"bz2"``, ``"xz"`` or ``None`` from the first bytes of ``path``."""
    check_regular_file(path)
    try:
        with open(path, "rb") as fh:
            magic = fh.read(6)
    except IsADirectoryError:
        raise InputFormatError(path, None, "expected a file, got a folder") from None
    except OSError as exc:
        raise InputFormatError(path, None, f"cannot open file ({exc.strerror or exc})") from None
    for sig, name in _MAGIC:
        if magic.startswith(sig):
            return name
    return None


def strip_compression(name: str) -> str:
    """File name without a trailing ``.gz``/``.bz2``/``.xz``."""
    low = name.lower()
    for suf in _COMPRESSED_SUFFIXES:
        if low.endswith(suf):
            return name[: -len(suf)]
    return name


class _Stream:
    """A binary file whose read errors (damaged compressed data) become InputFormatError."""

    def __init__(self, fh, path, kind):
        self.fh, self.path, self.kind = fh, path, kind

    def read(self, n: int = -1) -> bytes:
        try:
            return self.fh.read(n)
        except (OSError, EOFError, lzma.LZMAError, zlib.error, ValueError) as exc:
            what = f"damaged {self.kind} data" if self.kind else "read error"
            raise InputFormatError(self.path, None, f"{what} ({exc})") from None

    def close(self):
        self.fh.close()

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()


def open_binary(path):
    """Open ``path`` for binary reading, decompressing on the fly (errors → InputFormatError)."""
    kind = compression_of(path)
    try:
        if kind == "gzip":
            fh = gzip.open(path, "rb")
        elif kind == "bz2":
            fh = bz2.open(path, "rb")
        elif kind == "xz":
            fh = lzma.open(path, "rb")
        else:
            fh = open(path, "rb")
    except OSError as exc:
        raise InputFormatError(path, None, f"cannot open file ({exc})") from None
    return _Stream(fh, path, kind)


def file_size(path) -> int:
    """Size on disk in bytes (compressed size for compressed files)."""
    return os.stat(path).st_size


def read_head(path, nbytes: int = 8192) -> bytes:
    """The first ``nbytes`` of the (decompressed) content; b"" if unreadable. A FIFO or a device
    raises :class:`InputFormatError` (reading its head would block or never mean anything)."""
    if os.path.exists(path) and not os.path.isdir(path):
        check_regular_file(path)
    try:
        with open_binary(path) as fh:
            return fh.read(nbytes)
    except InputFormatError:
        return b""


def read_bounded(path, limit: int, what: str = "file") -> bytes:
    """The whole decompressed content of ``path``, read in 1 MiB chunks and refused as soon as it
    passes ``limit`` bytes (a decompression bomb or an endless stream never fills memory)."""
    parts, total = [], 0
    with open_binary(path) as fh:
        while True:
            chunk = fh.read(_CHUNK)
            if not chunk:
                break
            total += len(chunk)
            if total > limit:
                raise InputFormatError(path, None, f"{what} holds more than {limit:,d} bytes (decompressed), the "
                                       "limit for this kind of file", field="size")
            parts.append(chunk)
    return b"".join(parts)


def read_text(path, limit: int | None = None) -> str:
    """Whole decompressed content as text (for small files: DOS, projections,
    structures), at most ``limit`` bytes (default :data:`MAX_TEXT_BYTES`); a UTF-8
    byte-order mark is dropped. Undecodable bytes raise :class:`InputFormatError`."""
    raw = read_bounded(path, MAX_TEXT_BYTES if limit is None else limit, "text file")
    if raw.startswith(b"\xef\xbb\xbf"):
        raw = raw[3:]
    if b"\x00" in raw:
        raise InputFormatError(path, None, "binary content (NUL bytes) where a text file was expected")
    try:
        return raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        # the line of the offending byte helps the user find it
        line = raw[: exc.start].count(b"\n") + 1
        raise InputFormatError(path, line, "non-text bytes where a text file was expected") from None


def as_path(path) -> Path:
    """``path`` as a :class:`Path`, refusing objects that are not paths."""
    if isinstance(path, (str, os.PathLike)):
        return Path(path)
    if isinstance(path, io.IOBase):
        raise InputFormatError(None, None, "pass a file path, not an open file object")
    raise InputFormatError(None, None, f"expected a file path, got {type(path).__name__}")
