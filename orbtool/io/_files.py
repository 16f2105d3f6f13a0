"""Opening input files: transparent gzip/bz2/xz, head sniffing, chunked text.

Compression is recognised by the file's magic bytes, not its name, so a
``CHGCAR.gz`` renamed to ``CHGCAR`` still opens.
"""

from __future__ import annotations

import bz2
import gzip
import io
import lzma
import os
import zlib
from pathlib import Path

from ..errors import InputFormatError

__all__ = ["open_binary", "read_head", "read_text", "strip_compression", "compression_of", "file_size"]

_MAGIC = ((b"\x1f\x8b", "gzip"), (b"BZh", "bz2"), (b"\xfd7zXZ\x00", "xz"))
_COMPRESSED_SUFFIXES = (".gz", ".bz2", ".xz")


def compression_of(path) -> str | None:
    """``"gzip"``, ``"bz2"``, ``"xz"`` or ``None`` from the first bytes of ``path``."""
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
    """The first ``nbytes`` of the (decompressed) content; b"" if unreadable."""
    try:
        with open_binary(path) as fh:
            return fh.read(nbytes)
    except InputFormatError:
        return b""


def read_text(path) -> str:
    """Whole decompressed content as text (for small files: DOS, projections,
    structures). Undecodable bytes raise :class:`InputFormatError`."""
    with open_binary(path) as fh:
        raw = fh.read()
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
