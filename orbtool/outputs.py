"""Output folders that never eat the user's files.

orbtool writes results only into folders it was pointed at. A folder is
used when it is new, empty, or already marked as an orbtool output folder
(``.orbtool-output`` lists the files orbtool wrote there). Any other
non-empty folder is refused unless ``force=True``; even then only the
files orbtool writes are replaced, nothing is deleted.

Safety rules (issue 18):

* the marker is trusted only when it is a regular file (not a symbolic link)
  holding orbtool's JSON (``"written_by": "orbtool"`` and a list of files);
  an empty, foreign or linked marker counts as "not an orbtool folder";
* in a marked folder, an existing file that the marker does not list is never
  replaced without ``force``;
* orbtool never writes through a symbolic link: a linked sub-folder (such as
  ``figures/``) or a linked output file is refused;
* every file is written atomically (temporary file ``.<name>.<random>.orbtool-tmp``
  in the same folder, then ``os.replace``); leftovers of a killed run are removed
  when the folder is next opened;
* a lock file ``.orbtool-lock`` (holding the pid) keeps a second run out of the
  folder while the first is writing. The lock is an ``fcntl`` lock where
  available, released by the operating system when the process ends, so a
  killed run leaves no stale lock; elsewhere the pid in the file is checked.
"""

from __future__ import annotations

import json
import os
import re
import tempfile
from pathlib import Path

from .errors import OrbtoolError

__all__ = ["OutputFolder", "MARKER", "LOCK", "TMP_SUFFIX", "atomic_write", "clean_temporaries", "display_path",
           "display_paths"]

MARKER = ".orbtool-output"
LOCK = ".orbtool-lock"
#: suffix of orbtool's temporary files (removed when an output folder is opened)
TMP_SUFFIX = ".orbtool-tmp"


def _umask() -> int:
    old = os.umask(0)
    os.umask(old)
    return old


def atomic_write(path, data, mode: int | None = None) -> Path:
    """Write ``data`` (bytes or str, or a callable taking a binary file handle) to ``path``
    atomically: temporary file in the same folder, flush, ``os.replace``. The file gets ``mode``,
    or the mode of the file it replaces, or the usual 0666 & ~umask."""
    path = Path(path)
    if mode is None:
        try:
            st = os.stat(path)
            mode = st.st_mode & 0o7777
        except OSError:
            mode = 0o666 & ~_umask()
    fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.", suffix=TMP_SUFFIX)
    try:
        with os.fdopen(fd, "wb") as fh:
            if callable(data):
                data(fh)
            else:
                fh.write(data.encode("utf-8") if isinstance(data, str) else data)
            fh.flush()
        os.chmod(tmp, mode)  # mkstemp makes 0600
        os.replace(tmp, path)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise
    return path


def clean_temporaries(root) -> list[Path]:
    """Remove orbtool's leftover temporary files (``*.orbtool-tmp``) under ``root``; returns them."""
    gone = []
    for dirpath, dirnames, filenames in os.walk(root, followlinks=False):
        for f in filenames:
            if f.startswith(".") and f.endswith(TMP_SUFFIX):
                p = Path(dirpath) / f
                try:
                    p.unlink()
                    gone.append(p)
                except OSError:
                    pass
    return gone


def _read_marker(marker: Path) -> list[str] | None:
    """Files listed in a genuine orbtool marker, or None (missing, linked, empty or foreign)."""
    if marker.is_symlink() or not marker.is_file():
        return None
    try:
        if marker.stat().st_size > 10_000_000:
            return None
        doc = json.loads(marker.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
    if not isinstance(doc, dict) or doc.get("written_by") != "orbtool":
        return None
    files = doc.get("files", [])
    if not isinstance(files, list) or not all(isinstance(f, str) for f in files):
        return None
    return list(files)


#: locks this process holds: real path of the folder → [fd, number of OutputFolder objects using it]
_HELD: dict[str, list] = {}


def _pid_alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    except OSError:
        return False
    return True


class OutputFolder:
    """A folder orbtool may write results into (locked against a second run while open).

    Parameters
    ----------
    path : str or Path
        The folder (created if missing).
    force : bool
        Allow writing into a non-empty folder that orbtool did not create.
    """

    def __init__(self, path, force: bool = False):
        self.root = Path(path)
        self.force = force
        self._lock_fd = None
        if self.root.exists() and not self.root.is_dir():
            raise OrbtoolError(f"{self.root}: exists and is not a folder")
        marker = self.root / MARKER
        listed = _read_marker(marker)
        others = [p for p in self.root.iterdir() if p.name not in (MARKER, LOCK)] if self.root.exists() else []
        if listed is None and marker.is_symlink():
            raise OrbtoolError(f"{marker}: the orbtool marker is a symbolic link; orbtool does not trust or write "
                               "through it. Remove it or choose another --out")
        if listed is None and (others or marker.exists()) and not force:
            what = ("its .orbtool-output marker is empty or not orbtool's" if marker.exists()
                    else "folder is not empty and was not written by orbtool")
            raise OrbtoolError(f"{self.root}: {what}; choose another --out or pass --force (orbtool then only "
                               "adds/replaces its own files and deletes nothing)")
        self.root.mkdir(parents=True, exist_ok=True)
        self._lock()
        clean_temporaries(self.root)
        self._trusted = set(listed or [])
        self.written: list[str] = list(listed or [])

    # ---------------------------------------------------------------- lock
    def _lock(self):
        lock = self.root / LOCK
        key = os.path.realpath(self.root)
        if key in _HELD:  # this process already holds the folder (a second object in the same run)
            _HELD[key][1] += 1
            self._lock_fd = key
            return
        if lock.is_symlink():
            raise OrbtoolError(f"{lock}: is a symbolic link; orbtool does not write through links")
        try:
            import fcntl
        except ImportError:  # pragma: no cover - not POSIX
            fcntl = None
        if fcntl is not None:
            fd = os.open(lock, os.O_RDWR | os.O_CREAT, 0o644)
            try:
                fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
            except OSError:
                try:
                    other = os.read(fd, 64).decode("ascii", "replace").strip() or "?"
                finally:
                    os.close(fd)
                raise OrbtoolError(f"{self.root}: another orbtool run (pid {other}) is writing into this folder; "
                                   "wait for it to finish or choose another --out") from None
            os.ftruncate(fd, 0)
            os.write(fd, f"{os.getpid()}\n".encode())
            _HELD[key] = [fd, 1]
            self._lock_fd = key
            return
        for _ in range(2):  # pragma: no cover - not POSIX
            try:
                fd = os.open(lock, os.O_RDWR | os.O_CREAT | os.O_EXCL, 0o644)
            except FileExistsError:
                try:
                    pid = int(lock.read_text().split()[0])
                except (OSError, ValueError, IndexError):
                    pid = -1
                if pid > 0 and _pid_alive(pid):
                    raise OrbtoolError(f"{self.root}: another orbtool run (pid {pid}) is writing into this "
                                       "folder; wait for it to finish or choose another --out") from None
                lock.unlink(missing_ok=True)  # stale lock of a run that died
                continue
            os.write(fd, f"{os.getpid()}\n".encode())
            _HELD[key] = [fd, 1]
            self._lock_fd = key
            return
        raise OrbtoolError(f"{lock}: cannot take the output-folder lock")  # pragma: no cover

    def close(self):
        """Release the folder lock (also done when the object is collected or the process ends)."""
        key, self._lock_fd = self._lock_fd, None
        if key is None or key not in _HELD:
            return
        _HELD[key][1] -= 1
        if _HELD[key][1] > 0:
            return
        fd = _HELD.pop(key)[0]
        try:
            import fcntl
        except ImportError:  # pragma: no cover
            fcntl = None
        try:
            if fcntl is None:  # pragma: no cover
                (self.root / LOCK).unlink(missing_ok=True)
            else:
                os.ftruncate(fd, 0)
        except OSError:
            pass
        os.close(fd)

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()

    def __del__(self):
        try:
            self.close()
        except Exception:  # noqa: BLE001 - never raise from a finaliser
            pass

    # ---------------------------------------------------------------- files
    def path(self, name: str) -> Path:
        """Path of an output file inside the folder (sub-folders created), recorded in the marker.

        Refuses names that leave the folder, a symbolic link on the way (e.g. ``figures/`` linked
        elsewhere) or at the file itself, and (without ``force``) an existing file the marker does
        not list as orbtool's.
        """
        rel = Path(name)
        if rel.is_absolute() or ".." in rel.parts:
            raise OrbtoolError(f"{name!r}: output names must stay inside {self.root}")
        cur = self.root
        for part in rel.parts[:-1]:
            cur = cur / part
            if cur.is_symlink():
                raise OrbtoolError(f"{cur}: is a symbolic link; orbtool does not write through links "
                                   "(remove the link or choose another --out)")
            if cur.exists() and not cur.is_dir():
                raise OrbtoolError(f"{cur}: exists and is not a folder")
            cur.mkdir(exist_ok=True)
        p = self.root / rel
        if p.is_symlink():
            raise OrbtoolError(f"{p}: is a symbolic link; orbtool does not write through links")
        if p.exists() and name not in self._trusted and name not in self.written and not self.force:
            raise OrbtoolError(f"{p}: exists and orbtool's marker does not list it as orbtool's; orbtool does not "
                               "replace it (move it away or pass --force)")
        if name not in self.written:
            self.written.append(name)
        self._save_marker()
        return p

    def write_text(self, name: str, text: str) -> Path:
        """Write a text file atomically (temporary file + rename)."""
        p = self.path(name)
        atomic_write(p, text, mode=0o666 & ~_umask())
        return p

    def write_bytes(self, name: str, data: bytes) -> Path:
        """Write a binary file atomically (temporary file + rename)."""
        p = self.path(name)
        atomic_write(p, data, mode=0o666 & ~_umask())
        return p

    def _save_marker(self):
        atomic_write(self.root / MARKER, json.dumps({"written_by": "orbtool", "files": sorted(self.written)},
                                                    indent=1), mode=0o666 & ~_umask())


# ---------------------------------------------------------------- display paths
#: a path more than this many folders above the base is shown by its last parts only
MAX_UP = 2
_TRAIL = ".,:;)]}'\""
_ABSOLUTE = re.compile(r"(?<![\w.~+\-/…])/(?:[^\s/'\"<>]+/)+[^\s'\"<>]*")


def display_path(path, base=None) -> str:
    """``path`` as shown in outputs that travel (reports, tables, notes): relative to ``base``
    (default: the working folder), e.g. ``defects/V_S/q0/PROCAR`` or ``../hosts/ZnS/DOSCAR``; a
    file more than :data:`MAX_UP` folders above ``base`` (or on another drive) is shown as
    ``…/`` and its last three parts. Never the machine's absolute path."""
    if path is None or path == "":
        return ""
    p = os.path.abspath(os.fspath(path))
    b = os.path.abspath(os.fspath(base)) if base not in (None, "") else os.getcwd()
    try:
        rel = os.path.relpath(p, b)
    except ValueError:  # another drive (Windows)
        rel = None
    if rel is not None:
        parts = Path(rel).parts
        ups = next((i for i, x in enumerate(parts) if x != ".."), len(parts))
        if ups <= MAX_UP:
            return Path(rel).as_posix()
    tail = Path(p).parts[1:][-3:]
    return "…/" + "/".join(tail)


def display_paths(text: str, base=None) -> str:
    """Every file path inside ``text`` (an error message, a note, a summary) shown with
    :func:`display_path` relative to ``base``. Paths are recognised by the folders they start
    with (``base`` as given and resolved, the working folder) and, for any other place, as absolute
    paths of two or more parts."""
    if not text:
        return text
    b = os.fspath(base) if base not in (None, "") else "."
    roots = {os.path.abspath(b), os.path.realpath(b), os.getcwd(), os.path.realpath(os.getcwd())}
    if b not in (".", "") and not os.path.isabs(b):
        roots.add(os.path.normpath(b))
    roots.discard(os.sep)

    def show(m):
        s = m.group(0)
        kept = s.rstrip(_TRAIL)
        return display_path(kept, b) + s[len(kept):]

    for root in sorted(roots, key=len, reverse=True):
        pat = r"(?<![\w.~+\-/…])" + re.escape(root + os.sep) + r"[^\s'\"<>]*"
        text = re.sub(pat, show, text)
    return _ABSOLUTE.sub(show, text)
