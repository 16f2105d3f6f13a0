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

Limits (issue 18): values nest at most :data:`MAX_DEPTH` levels and may not
contain themselves (both refused on save and on load, never a RecursionError);
the archive's declared uncompressed sizes must fit the memory budget
(``max_bytes``, ``$ORBTOOL_MAX_BYTES`` or 1 GiB, see
:func:`orbtool.io._files.memory_budget`) before anything is decompressed.
Replacing a session keeps the old file's permission bits; a temporary file
left by a killed save (``.<name>.<pid>.<random>.orbtool-tmp``) is removed by
the next save to that file once its process is gone.
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
from .outputs import _pid_alive

__all__ = ["save_session", "load_session", "SCHEMA_VERSION", "FORMAT_NAME", "MAX_DEPTH"]

FORMAT_NAME = "orbtool-session"
SCHEMA_VERSION = 1
#: deepest nesting of lists/dicts/tuples a session may hold (an analysis needs fewer than 20)
MAX_DEPTH = 100


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

    def encode(self, obj: Any, where: str = "content", _path: tuple = ()) -> Any:
        if obj is None or isinstance(obj, (bool, str)):
            return obj
        if len(_path) > MAX_DEPTH:
            short = where if len(where) < 80 else where[:40] + "…" + where[-30:]
            raise SessionError(f"{short}: values nested more than {MAX_DEPTH} levels deep cannot be saved")
        if isinstance(obj, (list, tuple, dict)) or dataclasses.is_dataclass(obj):
            if id(obj) in _path:
                raise SessionError(f"{where}: the value contains itself (a reference cycle); sessions hold trees")
            _path = _path + (id(obj),)
        return self._encode(obj, where, _path)

    def _encode(self, obj: Any, where: str, _path: tuple) -> Any:
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
            fields = {f.name: self.encode(getattr(obj, f.name), f"{where}.{f.name}", _path)
                      for f in dataclasses.fields(obj)}
            return {"__kind__": type(obj).__name__, "fields": fields}
        if hasattr(obj, "to_dict") and callable(obj.to_dict):
            return {"__kind__": "record", "type": type(obj).__name__,
                    "data": self.encode(obj.to_dict(), f"{where}.to_dict()", _path)}
        if isinstance(obj, tuple):
            return {"__kind__": "tuple", "items": [self.encode(v, f"{where}[{i}]", _path) for i, v in enumerate(obj)]}
        if isinstance(obj, list):
            return [self.encode(v, f"{where}[{i}]", _path) for i, v in enumerate(obj)]
        if isinstance(obj, dict):
            if all(isinstance(k, str) and k != "__kind__" for k in obj):
                return {k: self.encode(v, f"{where}.{k}", _path) for k, v in obj.items()}
            return {"__kind__": "dict", "items": [[self.encode(k, where), self.encode(v, f"{where}[{k!r}]", _path)]
                                                  for k, v in obj.items()]}
        raise SessionError(f"{where}: cannot save an object of type {type(obj).__name__}; "
                           "sessions hold numbers, strings, arrays, structures, orbtool data objects "
                           "and objects with a to_dict() method")


def _decode(node: Any, arrays: dict[int, np.ndarray], depth: int = 0) -> Any:
    if depth > 2 * MAX_DEPTH + 2:  # a tagged value uses two JSON levels per Python level
        raise SessionError(f"values nested more than {MAX_DEPTH} levels deep")
    if isinstance(node, list):
        return [_decode(v, arrays, depth + 1) for v in node]
    if not isinstance(node, dict):
        return node
    kind = node.get("__kind__")
    if kind is None:
        return {k: _decode(v, arrays, depth + 1) for k, v in node.items()}
    if kind == "ndarray":
        return arrays[node["ref"]]
    if kind == "float":
        return float(node["repr"])
    if kind == "tuple":
        return tuple(_decode(v, arrays, depth + 1) for v in node["items"])
    if kind == "dict":
        return {_decode(k, arrays, depth + 1): _decode(v, arrays, depth + 1) for k, v in node["items"]}
    if kind == "atoms":
        from ase import Atoms
        return Atoms(numbers=arrays[node["numbers"]["ref"]], positions=arrays[node["positions"]["ref"]],
                     cell=arrays[node["cell"]["ref"]], pbc=arrays[node["pbc"]["ref"]])
    if kind == "record":
        # saved through to_dict(); restored as that dict, tagged with its type name
        data = _decode(node["data"], arrays, depth + 1)
        if isinstance(data, dict):
            data = {"__type__": node["type"], **data}
        return data
    reg = _registry()
    if kind in reg:
        fields = {k: _decode(v, arrays, depth + 1) for k, v in node["fields"].items()}
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


_TMP_SUFFIX = ".orbtool-tmp"


def _umask() -> int:
    old = os.umask(0)
    os.umask(old)
    return old


def _clean_stale_temporaries(path: Path) -> None:
    """Remove temporary files of earlier saves to ``path`` whose process is gone (a killed save)."""
    folder = path.parent if str(path.parent) else Path(".")
    prefix = f".{path.name}."
    try:
        names = os.listdir(folder)
    except OSError:
        return
    for name in names:
        if not (name.startswith(prefix) and name.endswith(_TMP_SUFFIX)):
            continue
        pid = name[len(prefix):].split(".", 1)[0]
        if pid.isdigit() and int(pid) != os.getpid() and _pid_alive(int(pid)):
            continue  # another process is saving right now
        try:
            (folder / name).unlink()
        except OSError:
            pass


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
    _clean_stale_temporaries(path)
    try:
        mode = os.stat(path).st_mode & 0o7777  # replacing keeps the file's permissions
    except OSError:
        mode = 0o666 & ~_umask()
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.{os.getpid()}.", suffix=_TMP_SUFFIX, dir=folder)
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
        os.chmod(tmp, mode)
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


def load_session(path, *, max_bytes: int | None = None) -> Any:
    """Read a session written by :func:`save_session` and return its content.

    Parameters
    ----------
    path : str or Path
    max_bytes : int, optional
        Memory budget for the archive's declared uncompressed content, bytes (default
        ``$ORBTOOL_MAX_BYTES`` or 1 GiB); checked before anything is decompressed.

    Raises :class:`~orbtool.errors.SessionError` for files that are not
    sessions, are damaged, exceed the budget, or come from a newer orbtool
    (schema above :data:`SCHEMA_VERSION`).
    """
    from .errors import InputFormatError
    from .io._files import check_regular_file, memory_budget
    path = Path(path)
    try:
        check_regular_file(path)
    except InputFormatError as exc:
        if not path.exists():
            raise SessionError(f"{path}: no such session file") from None
        raise SessionError(f"{path}: {exc.reason}") from None
    budget = memory_budget(max_bytes)
    try:
        with zipfile.ZipFile(path) as z:
            declared = sum(i.file_size for i in z.infolist())
            if declared > budget:
                raise SessionError(f"{path}: the archive declares {declared:,d} bytes of content, more than the "
                                   f"memory budget of {budget:,d} bytes; if the file is genuine, pass max_bytes= "
                                   "(or set ORBTOOL_MAX_BYTES)")
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
    except RecursionError:
        raise SessionError(f"{path}: values nested more than {MAX_DEPTH} levels deep") from None
    except (zipfile.BadZipFile, KeyError, ValueError, json.JSONDecodeError, OSError, EOFError, zlib.error,
            NotImplementedError, RuntimeError) as exc:
        # OSError: offsets pointing outside the file; NotImplementedError/RuntimeError: unknown
        # compression or an encrypted member; zlib.error/EOFError: damaged deflate data
        raise SessionError(f"{path}: damaged or not a session file ({type(exc).__name__}: {exc})") from None
    try:
        return _decode(doc["content"], arrays)
    except SessionError as exc:
        raise SessionError(f"{path}: {exc}") from None
    except RecursionError:
        raise SessionError(f"{path}: values nested more than {MAX_DEPTH} levels deep") from None
    except (KeyError, IndexError, TypeError, AttributeError, ValueError) as exc:
        # a tree that names an array or field the archive lacks (or of the wrong shape)
        raise SessionError(f"{path}: damaged session content ({type(exc).__name__}: {exc}); "
                           "the file was cut or edited") from None
