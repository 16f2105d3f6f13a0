"""Loader: a case folder, a family manifest or single files, by path or upload,
with an optional host (pristine cell) run by path or upload.

What is read is decided by :func:`load_any`; errors are shown in the widget
(the orbtool message, never a traceback) and the previous result is kept.
Uploaded files are written to a fresh temporary folder, never next to any
user file, under their own names; a case read from uploads is named after
the uploaded files, not after the temporary folder.
"""

from __future__ import annotations

import os
import tempfile
from pathlib import Path

import ipywidgets as w

from ._common import attempt, message_html

__all__ = ["Loader", "load_any", "describe"]


def _host_arg(host):
    """A host path as :func:`orbtool.load_case` takes it: a folder as is, a
    structure file read with :func:`orbtool.read_structure`."""
    from .. import io
    from ..errors import InputFormatError

    if host is None or str(host).strip() == "":
        return None
    h = Path(host).expanduser()
    if not h.exists():
        raise InputFormatError(h, None, "host: no such file or folder (give the pristine cell's run folder "
                                        "or its structure file)")
    return h if h.is_dir() else io.read_structure(h)


def load_any(path, host=None, *, name: str | None = None):
    """Read whatever ``path`` is, through :mod:`orbtool.io`.

    * a folder → :func:`orbtool.load_case` (with ``host``: the pristine
      cell's run folder or structure file, needed to locate the vacancy);
    * a ``.toml`` file → :func:`orbtool.load_family`;
    * any other file → :func:`orbtool.read_pdos`, :func:`orbtool.read_grid`,
      then :func:`orbtool.read_structure` (each reader sniffs the content);
      if none accepts it, the errors of all readers are raised together.

    ``name`` names a case read from a folder (default: the folder's name).
    """
    from .. import io
    from ..errors import InputFormatError

    p = Path(path).expanduser()
    if not p.exists():
        raise InputFormatError(p, None, "no such file or folder")
    if p.is_dir():
        return io.load_case(p, host=_host_arg(host), name=name)
    if p.suffix.lower() == ".toml":
        return io.load_family(p)
    errors = []
    for reader in (io.read_pdos, io.read_grid, io.read_structure):
        obj, err = attempt(reader, p)
        if err is None:
            return obj
        errors.append(f"{reader.__name__}: {err}")
    raise InputFormatError(p, None, "not a readable PDOS, grid or structure file:\n  " + "\n  ".join(errors))


def describe(obj) -> str:
    """Short description of a loaded object for status lines and the header
    (the file's own name, not a temporary folder)."""
    if obj is None:
        return "nothing"
    kind = type(obj).__name__
    if kind == "Atoms":
        return f"structure {obj.get_chemical_formula()} ({len(obj)} atoms)"
    src = getattr(obj, "source", None)
    name = getattr(obj, "name", None)
    if src and (not name or name in ("value", "values")):
        name = Path(str(src)).name
    return f"{kind} {name or ''}".strip()


class Loader:
    """Path box + upload + progress + status; calls ``on_load(obj)`` on success.

    Attributes
    ----------
    value : the last object read successfully (DefectCase, Family, ProjectedDOS or Grid), or None.
    """

    def __init__(self, on_load=None, path: str = ""):
        self.on_load = on_load
        self.value = None
        #: where ``value`` was read from ({"path", "host", "name"}), None for an object handed over in memory
        self.read_from = None
        self._upload_names: list[str] = []
        wide = {"description_width": "120px"}
        self.path = w.Text(value=str(path), placeholder="defect run folder, family.toml or one file",
                           description="defect / family", style=wide,
                           layout=w.Layout(width="auto", flex="1 1 auto", max_width="560px"))
        self.host = w.Text(value="", placeholder="optional: pristine host run folder or its POSCAR/structure file",
                           description="host", style=wide, layout=w.Layout(width="auto", max_width="560px"))
        self.button = w.Button(description="Load", button_style="primary", icon="folder-open")
        self.upload = w.FileUpload(multiple=True, description="upload defect files", layout=w.Layout(width="200px"))
        self.host_upload = w.FileUpload(multiple=True, description="upload host files",
                                        layout=w.Layout(width="200px"))
        self.progress = w.IntProgress(value=0, min=0, max=3, description="", layout=w.Layout(width="200px"))
        self.status = w.HTML()
        self.button.on_click(lambda _: self.load(self.path.value, self.host.value))
        self.upload.observe(self._on_upload, names="value")
        self.host_upload.observe(self._on_host_upload, names="value")
        self.widget = w.VBox([w.HBox([self.path, self.button], layout=w.Layout(width="100%", max_width="680px")),
                              self.host,
                              w.HBox([self.upload, self.host_upload, self.progress],
                                     layout=w.Layout(flex_flow="row wrap")), self.status])
        self.widget.add_class("orbtool-loader")

    def load(self, path, host=None, *, name: str | None = None):
        """Read ``path`` (with the optional ``host``); returns the object or
        None (message shown, previous state kept)."""
        if not str(path or "").strip():  # an empty box would read the kernel's working folder
            self.status.value = message_html("give a path first (a defect run folder, a family .toml or one file)",
                                             "error")
            return None
        self.progress.value = 1
        self.progress.bar_style = "info"
        shown = name or Path(str(path)).name
        self.status.value = message_html(f"reading {shown} …")
        obj, err = attempt(load_any, path, host, name=name)
        if err:
            self.progress.value = 3
            self.progress.bar_style = "danger"
            kept = f"\n(kept: {describe(self.value)})" if self.value is not None else ""
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
        self.read_from = {"path": str(path), "host": str(host or ""), "name": name}
        self.progress.value = 3
        self.progress.bar_style = "success"
        self.status.value = message_html(f"loaded {describe(obj)}")
        return obj

    @staticmethod
    def _describe(obj) -> str:
        return describe(obj)

    @staticmethod
    def _write(files, prefix) -> tuple[str, list[str]]:
        folder = tempfile.mkdtemp(prefix=prefix)
        names = []
        for f in files:
            name = os.path.basename(f["name"])
            names.append(name)
            with open(os.path.join(folder, name), "wb") as fh:
                fh.write(bytes(f["content"]))
        return folder, names

    def _on_host_upload(self, change):
        files = change["new"]
        if not files:
            return
        folder, names = self._write(files, "orbtool-upload-host-")
        self.host.value = folder if len(names) > 1 else os.path.join(folder, names[0])
        self.status.value = message_html(f"host files ready: {', '.join(names)} (now upload or give the defect "
                                         "files)")

    def _on_upload(self, change):
        files = change["new"]
        if not files:
            return
        folder, names = self._write(files, "orbtool-upload-")
        self._upload_names = names
        if len(names) > 1:  # a case named after the files the user chose, e.g. "POSCAR + state.cube"
            stems = sorted({Path(n).stem for n in names})
            name = " + ".join(stems[:3]) + (" …" if len(stems) > 3 else "")
            self.load(folder, self.host.value or None, name=name)
        else:
            self.load(os.path.join(folder, names[0]), self.host.value or None)

    def _ipython_display_(self):  # pragma: no cover - notebook only
        from IPython.display import display

        display(self.widget)
