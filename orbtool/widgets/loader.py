"""Loader: a case folder, a family manifest or single files, by path or upload.

What is read is decided by :func:`load_any`; errors are shown in the widget
(the orbtool message, never a traceback) and the previous result is kept.
Uploaded files are written to a fresh temporary folder, never next to any
user file.
"""

from __future__ import annotations

import os
import tempfile
from pathlib import Path

import ipywidgets as w

from ._common import attempt, message_html

__all__ = ["Loader", "load_any"]


def load_any(path):
    """Read whatever ``path`` is, through :mod:`orbtool.io`.

    * a folder → :func:`orbtool.load_case`;
    * a ``.toml`` file → :func:`orbtool.load_family`;
    * any other file → :func:`orbtool.read_pdos`, then :func:`orbtool.read_grid`
      (each reader sniffs the content); if neither accepts it, the error of
      both readers is raised together.
    """
    from .. import io
    from ..errors import InputFormatError

    p = Path(path).expanduser()
    if not p.exists():
        raise InputFormatError(p, None, "no such file or folder")
    if p.is_dir():
        return io.load_case(p)
    if p.suffix.lower() == ".toml":
        return io.load_family(p)
    errors = []
    for reader in (io.read_pdos, io.read_grid):
        obj, err = attempt(reader, p)
        if err is None:
            return obj
        errors.append(f"{reader.__name__}: {err}")
    raise InputFormatError(p, None, "not a readable PDOS or grid file:\n  " + "\n  ".join(errors))


class Loader:
    """Path box + upload + progress + status; calls ``on_load(obj)`` on success.

    Attributes
    ----------
    value : the last object read successfully (DefectCase, Family, ProjectedDOS or Grid), or None.
    """

    def __init__(self, on_load=None, path: str = ""):
        self.on_load = on_load
        self.value = None
        self.path = w.Text(value=str(path), placeholder="case folder, family.toml or a file",
                           description="path", layout=w.Layout(width="520px"))
        self.button = w.Button(description="Load", button_style="primary", icon="folder-open")
        self.upload = w.FileUpload(multiple=True, description="or upload files")
        self.progress = w.IntProgress(value=0, min=0, max=3, description="", layout=w.Layout(width="200px"))
        self.status = w.HTML()
        self.button.on_click(lambda _: self.load(self.path.value))
        self.upload.observe(self._on_upload, names="value")
        self.widget = w.VBox([w.HBox([self.path, self.button]), w.HBox([self.upload, self.progress]), self.status])

    def load(self, path):
        """Read ``path``; returns the object or None (message shown, previous state kept)."""
        self.progress.value = 1
        self.progress.bar_style = "info"
        self.status.value = message_html(f"reading {path} …")
        obj, err = attempt(load_any, path)
        if err:
            self.progress.value = 3
            self.progress.bar_style = "danger"
            kept = f"\n(kept: {self._describe(self.value)})" if self.value is not None else ""
            self.status.value = message_html(err + kept, "error")
            return None
        self.progress.value = 2
        if self.on_load is not None:
            _, err = attempt(self.on_load, obj)
            if err:
                self.progress.bar_style = "danger"
                self.status.value = message_html(f"read, but could not be shown: {err}", "error")
                return None
        self.value = obj
        self.progress.value = 3
        self.progress.bar_style = "success"
        self.status.value = message_html(f"loaded {self._describe(obj)}")
        return obj

    @staticmethod
    def _describe(obj) -> str:
        name = getattr(obj, "name", None) or getattr(obj, "source", None) or ""
        return f"{type(obj).__name__} {name}".strip()

    def _on_upload(self, change):
        files = change["new"]
        if not files:
            return
        folder = tempfile.mkdtemp(prefix="orbtool-upload-")
        for f in files:
            name = os.path.basename(f["name"])
            with open(os.path.join(folder, name), "wb") as fh:
                fh.write(bytes(f["content"]))
        target = folder if len(files) > 1 else os.path.join(folder, os.path.basename(files[0]["name"]))
        self.load(target)

    def _ipython_display_(self):  # pragma: no cover - notebook only
        from IPython.display import display

        display(self.widget)
