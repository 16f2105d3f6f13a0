"""Session files: save an analysis and get it back exactly.

Format ``orbtool-session`` (our own; documented in docs/formats.md):
a ZIP archive holding

* ``session.json`` — ``{"format": "orbtool-session", "schema": N, "orbtool": version,
  "created": ISO time, "content": tree}`` where ``tree`` is JSON in which
  special values are tagged objects ``{"__kind__": ...}`` (arrays, tuples,
  structures, orbtool data objects, dicts with non-string keys);
* ``arrays/<n>.npy`` — every numpy array in ``.npy`` form (bit-exact).

No pickle is used, so loading a session never runs code. Writing is atomic
(temporary file in the same folder, ``fsync``, then ``os.replace``): a crash
in the middle leaves the previous file untouched. A file of a newer schema is
refused with a clear message; older schemas are migrated on load.
"""

from __future__ import annotations

import dataclasses
import datetime as _dt
import io
import json
import os
import tempfile
import tokenize
import zipfile
import zlib
from pathlib import Path
from typing import Any

import numpy as np

from .errors import SessionError

__all__ = ["save_session", "load_session", "SCHEMA_VERSION", "FORMAT_NAME"]

FORMAT_NAME = "orbtool-session"
SCHEMA_VERSION = 1


def _registry() -> dict[str, type]:
    from .case import DefectCase, Family
    from .grid import Grid
    from .spectra import BandProjections, ProjectedDOS
    return {c.__name__: c for c in (Grid, ProjectedDOS, BandProjections, DefectCase, Family)}


class _Encoder:
    def __init__(self):
        self.arrays: list[np.ndarray] = []

    def array(self, a: np.ndarray) -> dict:
        self.arrays.append(np.asarray(a))
        return {"__kind__": "ndarray", "ref": len(self.arrays) - 1}

    def encode(self, obj: Any, where: str = "content") -> Any:
        if obj is None or isinstance(obj, (bool, str)):
            return obj
        if isinstance(obj, (int, np.integer)) and not isinstance(obj, bool):
            return int(obj)
        if isinstance(obj, (float, np.floating)):
            f = float(obj)
            if np.isfinite(f):
                return f
            return {"__kind__": "float", "repr": repr(f)}
        if isinstance(obj, np.ndarray):
            if obj.dtype == object:
                raise SessionError(f"{where}: arrays of Python objects cannot be saved")
            return self.array(obj)
        if hasattr(obj, "get_positions") and hasattr(obj, "get_chemical_symbols"):
            return {"__kind__": "atoms", "numbers": self.array(obj.numbers),
                    "positions": self.array(obj.positions), "cell": self.array(np.asarray(obj.cell)),
                    "pbc": self.array(obj.pbc)}
        if dataclasses.is_dataclass(obj) and type(obj).__name__ in _registry():
            fields = {f.name: self.encode(getattr(obj, f.name), f"{where}.{f.name}")
                      for f in dataclasses.fields(obj)}
            return {"__kind__": type(obj).__name__, "fields": fields}
        if hasattr(obj, "to_dict") and callable(obj.to_dict):
            return {"__kind__": "record", "type": type(obj).__name__,
                    "data": self.encode(obj.to_dict(), f"{where}.to_dict()")}
        if isinstance(obj, tuple):
            return {"__kind__": "tuple", "items": [self.encode(v, f"{where}[{i}]") for i, v in enumerate(obj)]}
        if isinstance(obj, list):
            return [self.encode(v, f"{where}[{i}]") for i, v in enumerate(obj)]
        if isinstance(obj, dict):
            if all(isinstance(k, str) and k != "__kind__" for k in obj):
                return {k: self.encode(v, f"{where}.{k}") for k, v in obj.items()}
            return {"__kind__": "dict", "items": [[self.encode(k, where), self.encode(v, f"{where}[{k!r}]")]
                                                  for k, v in obj.items()]}
        raise SessionError(f"{where}: cannot save an object of type {type(obj).__name__}; "
                           "sessions hold numbers, strings, arrays, structures, orbtool data objects "
                           "and objects with a to_dict() method")


def _decode(node: Any, arrays: dict[int, np.ndarray]) -> Any:
    if isinstance(node, list):
        return [_decode(v, arrays) for v in node]
    if not isinstance(node, dict):
        return node
    kind = node.get("__kind__")
    if kind is None:
        return {k: _decode(v, arrays) for k, v in node.items()}
    if kind == "ndarray":
        return arrays[node["ref"]]
    if kind == "float":
        return float(node["repr"])
    if kind == "tuple":
        return tuple(_decode(v, arrays) for v in node["items"])
    if kind == "dict":
        return {_decode(k, arrays): _decode(v, arrays) for k, v in node["items"]}
    if kind == "atoms":
        from ase import Atoms
        return Atoms(numbers=arrays[node["numbers"]["ref"]], positions=arrays[node["positions"]["ref"]],
                     cell=arrays[node["cell"]["ref"]], pbc=arrays[node["pbc"]["ref"]])
    if kind == "record":
        # saved through to_dict(); restored as that dict, tagged with its type name
        data = _decode(node["data"], arrays)
        if isinstance(data, dict):
            data = {"__type__": node["type"], **data}
        return data
    reg = _registry()
    if kind in reg:
        fields = {k: _decode(v, arrays) for k, v in node["fields"].items()}
        return reg[kind](**fields)
    raise SessionError(f"unknown entry kind {kind!r} in the session file")


# ------------------------------------------------------------------ migrations
def _migrate_0_to_1(doc: dict) -> dict:
    """Schema 0 (pre-release) kept the tree under ``payload``; 1 calls it ``content``."""
    doc = dict(doc)
    doc["content"] = doc.pop("payload")
    doc["schema"] = 1
    return doc


_MIGRATIONS = {0: _migrate_0_to_1}


# ------------------------------------------------------------------ public API
def _is_session_file(path: Path) -> bool:
    try:
        with zipfile.ZipFile(path) as z:
            doc = json.loads(z.read("session.json"))
        return doc.get("format") == FORMAT_NAME
    except Exception:  # anything unreadable is "not ours"
        return False


def save_session(path, content: Any = None, *, overwrite: bool = False, **items) -> Path:
    """Save an analysis to ``path`` (atomically).

    Parameters
    ----------
    path : str or Path
        Target file (``.orbsession`` suggested).
    content : any
        What to save: usually a dict such as ``{"cases": [...], "fits": {...},
        "widgets": {...}}``; keyword ``items`` are merged into a dict.
    overwrite : bool
        Replace an existing file that is *not* an orbtool session. An existing
        orbtool session is replaced without asking (orbtool wrote it).

    Returns
    -------
    Path
        The file written.
    """
    path = Path(path)
    if items:
        content = {**(content or {}), **items}
    if path.exists() and not overwrite and not _is_session_file(path):
        raise SessionError(f"{path}: exists and is not an orbtool session; pass overwrite=True to replace it")
    enc = _Encoder()
    tree = enc.encode(content)
    from . import __version__
    doc = {"format": FORMAT_NAME, "schema": SCHEMA_VERSION, "orbtool": __version__,
           "created": _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds"), "content": tree}
    folder = path.parent if str(path.parent) else Path(".")
    folder.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=folder)
    try:
        with os.fdopen(fd, "wb") as fh:
            with zipfile.ZipFile(fh, "w", compression=zipfile.ZIP_DEFLATED) as z:
                z.writestr("session.json", json.dumps(doc, indent=1, allow_nan=False))
                for i, a in enumerate(enc.arrays):
                    buf = io.BytesIO()
                    np.save(buf, a, allow_pickle=False)
                    z.writestr(f"arrays/{i}.npy", buf.getvalue())
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, path)
        try:  # make the rename itself durable
            dfd = os.open(folder, os.O_RDONLY)
            try:
                os.fsync(dfd)
            finally:
                os.close(dfd)
        except OSError:
            pass
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise
    return path


def _load_npy(z: zipfile.ZipFile, name: str, path: Path) -> np.ndarray:
    """One ``.npy`` member, refusing sizes the archive cannot hold before anything is allocated
    (numpy allocates the declared shape before reading the data)."""
    info = z.getinfo(name)
    if info.file_size > 1500 * max(info.compress_size, 1) + 4096:  # beyond deflate's ~1000:1
        raise SessionError(f"{path}: array {name} claims {info.file_size:,d} bytes from "
                           f"{info.compress_size:,d} compressed (damaged or hostile file)")
    fh = io.BytesIO(z.read(name))
    try:
        version = np.lib.format.read_magic(fh)
        read = np.lib.format.read_array_header_1_0 if version == (1, 0) else np.lib.format.read_array_header_2_0
        shape, _, dtype = read(fh)
    except (ValueError, SyntaxError, tokenize.TokenError) as exc:  # numpy parses the header as Python
        raise SessionError(f"{path}: array {name} has a damaged .npy header ({type(exc).__name__}: {exc})") from None
    need = int(np.prod([int(n) for n in shape], dtype=object)) * dtype.itemsize
    if need > len(fh.getvalue()):
        raise SessionError(f"{path}: array {name} declares shape {shape} ({need:,d} bytes) but holds "
                           f"{len(fh.getvalue()):,d} bytes (damaged file)")
    fh.seek(0)
    return np.load(fh, allow_pickle=False)


def load_session(path) -> Any:
    """Read a session written by :func:`save_session` and return its content.

    Raises :class:`~orbtool.errors.SessionError` for files that are not
    sessions, are damaged, or come from a newer orbtool (schema above
    :data:`SCHEMA_VERSION`).
    """
    path = Path(path)
    try:
        with zipfile.ZipFile(path) as z:
            doc = json.loads(z.read("session.json"))
            if not isinstance(doc, dict) or doc.get("format") != FORMAT_NAME:
                raise SessionError(f"{path}: not an orbtool session (no '{FORMAT_NAME}' header)")
            schema = doc.get("schema")
            if not isinstance(schema, int):
                raise SessionError(f"{path}: session header has no integer 'schema' field")
            if schema > SCHEMA_VERSION:
                raise SessionError(f"{path}: written with session schema {schema} by orbtool "
                                   f"{doc.get('orbtool', '?')}; this orbtool reads schema ≤ {SCHEMA_VERSION}. "
                                   "Upgrade orbtool to open it.")
            while schema < SCHEMA_VERSION:
                doc = _MIGRATIONS[schema](doc)
                schema = doc["schema"]
            arrays = {}
            for name in z.namelist():
                if name.startswith("arrays/") and name.endswith(".npy"):
                    arrays[int(name[7:-4])] = _load_npy(z, name, path)
    except FileNotFoundError:
        raise SessionError(f"{path}: no such session file") from None
    except (zipfile.BadZipFile, KeyError, ValueError, json.JSONDecodeError, OSError, EOFError, zlib.error,
            NotImplementedError, RuntimeError) as exc:
        # OSError: offsets pointing outside the file; NotImplementedError/RuntimeError: unknown
        # compression or an encrypted member; zlib.error/EOFError: damaged deflate data
        raise SessionError(f"{path}: damaged or not a session file ({type(exc).__name__}: {exc})") from None
    try:
        return _decode(doc["content"], arrays)
    except (KeyError, IndexError, TypeError, AttributeError, ValueError) as exc:
        # a tree that names an array or field the archive lacks (or of the wrong shape)
        raise SessionError(f"{path}: damaged session content ({type(exc).__name__}: {exc}); "
                           "the file was cut or edited") from None
