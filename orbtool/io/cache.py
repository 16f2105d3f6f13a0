"""Binary cache of parsed grids.

Parsing a 100 MB text grid takes a second or more; the parsed values are
kept as ``.npy`` files (plus a small ``.npz`` index holding cell, atoms and
metadata) in a cache folder, and the next read memory-maps them. The key is
a hash of the resolved path, size and modification time of the source plus
the reader options, so an edited or replaced source
is re-read. The folder is ``$ORBTOOL_CACHE_DIR`` when set, else the user's
cache directory (``platformdirs.user_cache_dir("orbtool")``/grids); it is
never next to the inputs unless the user points the variable there.
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

__all__ = ["cache_dir", "cache_key", "load_cached", "store_cached", "clear_cache"]

_LAYOUT = 1  # bump when the stored layout or a reader's output changes


def cache_dir() -> Path:
    """Folder holding cached grids (created on demand)."""
    env = os.environ.get("ORBTOOL_CACHE_DIR")
    if env:
        return Path(env).expanduser()
    import platformdirs
    return Path(platformdirs.user_cache_dir("orbtool")) / "grids"


def cache_key(path, options: dict) -> str:
    """Hash of the resolved path, size, mtime and reader options."""
    p = Path(path).resolve()
    st = p.stat()
    blob = json.dumps({"path": str(p), "size": st.st_size, "mtime": st.st_mtime_ns, "layout": _LAYOUT,
                       "options": options}, sort_keys=True, default=str)
    return hashlib.sha256(blob.encode()).hexdigest()[:32]


def load_cached(path, options: dict):
    """The cached list of grids for ``path`` or None (missing or unreadable entries are ignored)."""
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
