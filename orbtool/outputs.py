"""Output folders that never eat the user's files.

orbtool writes results only into folders it was pointed at. A folder is
used when it is new, empty, or already marked as an orbtool output folder
(``.orbtool-output`` lists the files orbtool wrote there). Any other
non-empty folder is refused unless ``force=True``; even then only the
files orbtool writes are replaced, nothing is deleted.
"""

from __future__ import annotations

import json
import os
import tempfile
from pathlib import Path

from .errors import OrbtoolError

__all__ = ["OutputFolder", "MARKER"]

MARKER = ".orbtool-output"


def _umask() -> int:
    old = os.umask(0)
    os.umask(old)
    return old


class OutputFolder:
    """A folder orbtool may write results into.

    Parameters
    ----------
    path : str or Path
        The folder (created if missing).
    force : bool
        Allow writing into a non-empty folder that orbtool did not create.
    """

    def __init__(self, path, force: bool = False):
        self.root = Path(path)
        if self.root.exists() and not self.root.is_dir():
            raise OrbtoolError(f"{self.root}: exists and is not a folder")
        marker = self.root / MARKER
        if self.root.exists() and any(self.root.iterdir()) and not marker.exists() and not force:
            raise OrbtoolError(f"{self.root}: folder is not empty and was not written by orbtool; "
                               "choose another --out or pass --force (orbtool then only adds/replaces "
                               "its own files and deletes nothing)")
        self.root.mkdir(parents=True, exist_ok=True)
        self.written: list[str] = []
        if marker.exists():
            try:
                self.written = list(json.loads(marker.read_text()).get("files", []))
            except (ValueError, OSError):
                self.written = []

    def path(self, name: str) -> Path:
        """Path of an output file inside the folder (sub-folders created), recorded in the marker."""
        p = self.root / name
        p.parent.mkdir(parents=True, exist_ok=True)
        if name not in self.written:
            self.written.append(name)
        self._save_marker()
        return p

    def write_text(self, name: str, text: str) -> Path:
        """Write a text file atomically (temporary file + rename)."""
        p = self.path(name)
        fd, tmp = tempfile.mkstemp(dir=p.parent, prefix=f".{p.name}.", suffix=".tmp")
        try:
            with os.fdopen(fd, "w", encoding="utf-8") as fh:
                fh.write(text)
            os.chmod(tmp, 0o666 & ~_umask())  # mkstemp makes 0600; give outputs the usual permissions
            os.replace(tmp, p)
        except BaseException:
            if os.path.exists(tmp):
                os.unlink(tmp)
            raise
        return p

    def _save_marker(self):
        (self.root / MARKER).write_text(json.dumps({"written_by": "orbtool", "files": sorted(self.written)},
                                                   indent=1))
