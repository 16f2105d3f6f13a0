"""Binary cache of parsed grids.

Parsing a 100 MB text grid takes a second or more; the parsed values are
kept as ``.npy`` files (plus a small ``.npz`` index holding cell, atoms and
metadata) in a cache folder, and the next read memory-maps them. The key is
a hash of the resolved path, device and inode, size, modification and
status-change times (ns) of the source, a SHA-256 of its first and last
64 KiB, and the reader options: a source edited in place, or replaced by
another file of the same size and modification time, is re-read.

Location (common practice, the XDG base-directory convention and its
platform equivalents via ``platformdirs``): ``$ORBTOOL_CACHE_DIR`` when set,
else ``platformdirs.user_cache_dir("orbtool")``/grids; never next to the
inputs unless the user points the variable there. ``ORBTOOL_NO_CACHE=1``
(any value but ``""``/``0``/``false``/``no``) switches the cache off: nothing
is read from or written to it.
"""

from __future__ import annotations

import hashlib
import json
import os
import tempfile
import zipfile
from pathlib import Path

import numpy as np

from ..errors import InputFormatError
from .native import grid_arrays, grid_from_arrays

__all__ = ["cache_dir", "cache_enabled", "cache_key", "load_cached", "store_cached", "clear_cache"]

_LAYOUT = 2  # bump when the stored layout, the key or a reader's output changes
_EDGE = 65536  # bytes hashed at the head and at the tail of the source


def cache_enabled() -> bool:
    """False when ``$ORBTOOL_NO_CACHE`` is set to anything but ``""``, ``0``, ``false``, ``no``."""
    return os.environ.get("ORBTOOL_NO_CACHE", "").strip().lower() in ("", "0", "false", "no")


def cache_dir() -> Path:
    """Folder holding cached grids (created on demand)."""
    env = os.environ.get("ORBTOOL_CACHE_DIR")
    if env:
        return Path(env).expanduser()
    import platformdirs
    return Path(platformdirs.user_cache_dir("orbtool")) / "grids"


def cache_key(path, options: dict) -> str:
    """Hash of the resolved path, device/inode, size, mtime/ctime (ns), the first and last
    64 KiB of the content, and the reader options."""
    p = Path(path).resolve()
    edges = hashlib.sha256()
    with open(p, "rb") as fh:
        st = os.fstat(fh.fileno())  # the file actually hashed, not a name that may change meanwhile
        edges.update(fh.read(_EDGE))
        if st.st_size > _EDGE:
            fh.seek(max(_EDGE, st.st_size - _EDGE))
            edges.update(fh.read(_EDGE))
    blob = json.dumps({"path": str(p), "dev": st.st_dev, "ino": st.st_ino, "size": st.st_size,
                       "mtime": st.st_mtime_ns, "ctime": st.st_ctime_ns, "edges": edges.hexdigest(),
                       "layout": _LAYOUT, "options": options}, sort_keys=True, default=str)
    return hashlib.sha256(blob.encode()).hexdigest()[:32]


def load_cached(path, options: dict):
    """The cached list of grids for ``path`` or None (missing or unreadable entries are ignored)."""
    if not cache_enabled():
        return None
    try:
        f = cache_dir() / (cache_key(path, options) + ".npz")
        if not f.is_file():
            return None
        with np.load(f, allow_pickle=False) as npz:
            data = {k: npz[k] for k in npz.files}
        n = int(data["ngrids"])
        for i in range(n):
            # values as a separate .npy, memory-mapped: no copy until the pages are touched
            data[f"g{i}_values"] = np.load(f.with_suffix(f".{i}.npy"), mmap_mode="r", allow_pickle=False)
        return [grid_from_arrays(data, prefix=f"g{i}_", source=str(path)) for i in range(n)]
    except (OSError, ValueError, KeyError, zipfile.BadZipFile, EOFError, InputFormatError):
        return None


def store_cached(path, options: dict, grids) -> Path | None:
    """Store ``grids`` for ``path``; failures to write are silent (the cache is an optimisation)."""
    if not cache_enabled():
        return None
    try:
        d = cache_dir()
        d.mkdir(parents=True, exist_ok=True)
        target = d / (cache_key(path, options) + ".npz")
        arrays = {"ngrids": np.array(len(grids))}
        for i, g in enumerate(grids):
            meta = grid_arrays(g, prefix=f"g{i}_")
            values = meta.pop(f"g{i}_values")
            _atomic(d, target.with_suffix(f".{i}.npy"), lambda fh, v=values: np.save(fh, v, allow_pickle=False))
            arrays.update(meta)
        # the small index file is written last: its presence means the entry is complete
        _atomic(d, target, lambda fh: np.savez(fh, **arrays))
        return target
    except OSError:
        return None


def _atomic(folder: Path, target: Path, write) -> None:
    fd, tmp = tempfile.mkstemp(dir=folder, suffix=".tmp")
    try:
        with os.fdopen(fd, "wb") as fh:
            write(fh)
        os.replace(tmp, target)  # atomic: a concurrent reader never sees half a file
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise


def clear_cache() -> int:
    """Delete every cached grid; returns the number of files removed."""
    d = cache_dir()
    n = 0
    if d.is_dir():
        for f in [*d.glob("*.npz"), *d.glob("*.npy")]:
            try:
                f.unlink(missing_ok=True)
                n += 1
            except OSError:  # e.g. still memory-mapped on a platform that forbids deleting it
                pass
    return n
