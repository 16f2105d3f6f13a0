"""Save and restore what the app's user has set up, through :mod:`orbtool.session`.

Widgets stay thin: :func:`app_state` collects the state of an :class:`~orbtool.widgets.App`
into a plain dict and :func:`apply_state` sets it back, both testable without a
browser. :class:`SessionBar` is the small path box + "Save" / "Restore" panel
the app shows; every failure becomes a message in its status line and the
app keeps what it showed.

Layout of the saved dict (``content["app"]`` of the session file, version
:data:`STATE_VERSION`)::

    {"state_version": 1,
     "source": {"path": text of the loader's path box, "origin": the data's own source path,
                "host": text of the loader's host box, "sha256": content hash of the files read},
     "case": name of the case shown,
     "tab": index of the open tab,
     "levels": {"breathing", "mode", "amplitude", "coupling_scale", "onsite_shift", "swap"},
     "pdos": {"channels": [...], "window": (lo, hi)},
     "structure": {"isovalue", "only_near", "radius"},
     "board": {"x", "y"}}

``content["data"]`` is None when the data came from the user's files: the
session then stores only the reference (path, host) and a SHA-256 of the
files' content, and a restore reads them again (and says when they changed)
— everything else is recomputed, so sessions stay small. Only data with no
file behind it (built in memory, or an upload's temporary copy) is stored whole.
"""

from __future__ import annotations

import hashlib
import os
import tempfile
from pathlib import Path

import ipywidgets as w

from ..errors import SessionError
from ._common import attempt, message_html

__all__ = ["app_state", "apply_state", "check_state", "save_app", "restore_app", "SessionBar", "STATE_VERSION"]

STATE_VERSION = 1

_LEVEL_SLIDERS = (("breathing", "breathing"), ("amplitude", "amplitude"), ("coupling_scale", "coupling"),
                  ("onsite_shift", "onsite"))


def app_state(app) -> dict:
    """The state of ``app`` that matters to get an analysis back (plain values only).

    Returns
    -------
    dict
        See the module docstring; energies in eV, lengths in Å, the isovalue
        in the grid's unit. Views that are not shown are left out.
    """
    obj = app.loader.value
    out = {"state_version": STATE_VERSION,
           "source": {"path": app.loader.path.value, "origin": _origin(obj), "host": app.loader.host.value},
           "case": None if app.case is None else app.case.name,
           "tab": app.tabs.selected_index}
    le = app.levels
    if le is not None:
        out["levels"] = {k: float(getattr(le, attr).value) for k, attr in _LEVEL_SLIDERS}
        out["levels"].update(mode=le.mode.value, swap=le.swap.value)
    if app.pdos is not None:
        out["pdos"] = {"channels": list(app.pdos.picker.value),
                       "window": tuple(float(v) for v in app.pdos.window.value)}
    sv = app.structure
    if sv is not None:
        out["structure"] = {"isovalue": None if sv.isovalue is None else float(sv.isovalue.value),
                            "only_near": bool(sv.only_near.value), "radius": float(sv.radius.value)}
    if app.board is not None:
        out["board"] = {"x": app.board.x.value, "y": app.board.y.value}
    return out


def _origin(obj):
    src = getattr(obj, "source", None)
    return None if src is None else str(src)


def _files_of(obj, path=None) -> list[Path]:
    """The user's files behind a loaded object (a file, a run folder's files,
    or a family manifest plus its cases' folders)."""
    roots = [Path(p) for p in ([path] if path else []) + [_origin(obj)] if p]
    roots += [Path(c.source) for c in (obj if hasattr(obj, "cases") else []) if getattr(c, "source", None)]
    out: list[Path] = []
    for r in dict.fromkeys(roots):
        if r.is_file():
            out.append(r)
        elif r.is_dir():
            out += sorted(f for f in r.rglob("*") if f.is_file() and not f.name.startswith("."))
    return out


def content_hash(obj, host: str | None = None) -> str | None:
    """SHA-256 over the names and bytes of the files behind ``obj`` (and the
    host path), or None when nothing on disk stands behind it."""
    files = _files_of(obj) + (_files_of(None, host) if host else [])
    if not files:
        return None
    h = hashlib.sha256()
    for f in files:
        h.update(f.name.encode())
        with open(f, "rb") as fh:
            for block in iter(lambda: fh.read(1 << 20), b""):
                h.update(block)
    return h.hexdigest()


def _kept_as_reference(loader) -> bool:
    """True when the loader read the data itself from the user's files, so
    the same call reads it again (not an object handed over in memory, not
    an upload's temporary copy)."""
    rf = getattr(loader, "read_from", None)
    if not rf or loader.value is None or not Path(rf["path"]).exists():
        return False
    tmp = os.path.realpath(tempfile.gettempdir())
    return not any(os.path.realpath(p).startswith(tmp) and "orbtool-upload-" in p
                   for p in (rf["path"], rf.get("host") or "") if p)


def _clamp(name, value, lo, hi, unit="") -> tuple[float, str | None]:
    v = float(value)
    c = min(max(v, lo), hi)
    if c == v:
        return v, None
    return c, f"{name} = {v:.6g}{unit} is outside the range [{lo:.6g}, {hi:.6g}]{unit}; clamped to {c:.6g}{unit}"


def _choose(name, dropdown, value, notes):
    if value is None or dropdown.value == value:
        return
    offered = [o[1] if isinstance(o, tuple) else o for o in dropdown.options]  # (label, value) pairs too
    if value in offered:
        dropdown.value = value
    else:
        notes.append(f"{name} {value!r} is not offered here; kept {dropdown.value!r}")


_FIELDS = {"case": str, "tab": int, "source.path": str, "source.origin": str, "source.host": str,
           "source.sha256": str, "source.name": str,
           "levels.breathing": float, "levels.amplitude": float, "levels.coupling_scale": float,
           "levels.onsite_shift": float, "levels.mode": str, "levels.swap": str,
           "pdos.channels": list, "pdos.window": tuple, "structure.isovalue": float, "structure.only_near": bool,
           "structure.radius": float, "board.x": str, "board.y": str}


def check_state(state) -> None:
    """Raise :class:`SessionError` naming the first field of a saved app state
    that has the wrong type (checked before anything in the app is touched)."""
    if not isinstance(state, dict) or not isinstance(state.get("state_version"), int):
        raise SessionError("the session holds no app state (no integer 'state_version' field)")
    if state["state_version"] > STATE_VERSION:
        raise SessionError(f"the app state has layout version {state['state_version']}; this orbtool reads "
                           f"≤ {STATE_VERSION}. Upgrade orbtool to restore it.")
    for key, kind in _FIELDS.items():
        node = state
        for part in key.split("."):
            node = node.get(part) if isinstance(node, dict) else None
        if node is None:
            continue
        ok = {float: isinstance(node, (int, float)) and not isinstance(node, bool) and node == node,
              int: isinstance(node, int) and not isinstance(node, bool),
              bool: isinstance(node, bool), str: isinstance(node, str),
              list: isinstance(node, (list, tuple)) and all(isinstance(c, str) for c in node),
              tuple: isinstance(node, (list, tuple)) and len(node) == 2
              and all(isinstance(v, (int, float)) and not isinstance(v, bool) and v == v for v in node)}[kind]
        if not ok:
            expected = {float: "a number", int: "an integer", bool: "true/false", str: "text",
                        list: "a list of channel names", tuple: "a pair of numbers (eV)"}[kind]
            raise SessionError(f"app state field '{key}' is {node!r}; expected {expected}")


def apply_state(app, state: dict, data=None, progress=None) -> list[str]:
    """Set ``app`` to a saved :func:`app_state`.

    Parameters
    ----------
    app : App
    state : dict
        From :func:`app_state` (possibly read back from a session file).
    data : DefectCase, Family, ProjectedDOS or Grid, optional
        The saved data object; when None the data is read again from the
        saved path (``state["source"]``). When it is the object already
        shown, nothing is reloaded.
    progress : callable(str, int), optional
        Told each step (text, step 1–3) so a long restore shows where it is.

    Returns
    -------
    list of str
        Notes for the user: slider values clamped to the (fit's) validated
        range, channels or options not available, where the data came from.

    Raises
    ------
    SessionError
        The state is of a newer layout, has a field of the wrong type, or
        its data cannot be obtained.
    """
    check_state(state)
    progress = progress or (lambda text, step: None)
    from ..case import DefectCase, Family
    from ..grid import Grid
    from ..spectra import ProjectedDOS

    if data is not None and not isinstance(data, (DefectCase, Family, ProjectedDOS, Grid)):
        raise SessionError(f"the session's data is a {type(data).__name__}; expected a DefectCase, Family, "
                           "ProjectedDOS or Grid")
    notes: list[str] = []
    src = state.get("source") or {}
    read_from = None
    if data is None:
        # a reference session (with a content hash) names what the loader read; older ones the data's origin
        where = (src.get("path") or src.get("origin")) if src.get("sha256") else (src.get("origin") or src.get("path"))
        if not where:
            raise SessionError("the session holds neither the data nor a path to read it from")
        from .loader import load_any

        progress("reading the files again", 1)
        data, err = attempt(load_any, where, src.get("host") or None, name=src.get("name"))
        read_from = {"path": where, "host": src.get("host") or "", "name": src.get("name")}
        if err:
            raise SessionError(f"the session's data could not be read again from {where}: {err}")
        notes.append(f"data read again from {where}")
        saved_hash = src.get("sha256")
        if saved_hash and content_hash(data, src.get("host") or None) != saved_hash:
            notes.append(f"the files under {where} changed since the session was saved (content hash differs); "
                         "the analysis shown is of the files as they are now")
    if data is not app.loader.value:
        progress("analysing and drawing", 2)
        app._loaded(data)
        app.loader.value, app.loader.read_from = data, read_from
        app.loader.path.value = src.get("path") or ""
        app.loader.host.value = src.get("host") or ""
        origin = src.get("origin")
        moved = "" if origin is None or Path(origin).exists() else " (that path no longer exists)"
        app.loader.status.value = message_html(f"restored {type(data).__name__} "
                                               f"{getattr(data, 'name', '') or ''} from the session; "
                                               f"originally read from {origin or 'memory'}{moved}")
    progress("setting the knobs", 3)
    _set_case(app, state.get("case"), notes)
    _set_levels(app.levels, state.get("levels"), notes)
    _set_pdos(app.pdos, state.get("pdos"), notes)
    _set_structure(app.structure, state.get("structure"), notes)
    if app.board is not None and state.get("board"):
        _choose("board x axis", app.board.x, state["board"].get("x"), notes)
        _choose("board y axis", app.board.y, state["board"].get("y"), notes)
    if isinstance(state.get("tab"), int) and 0 <= state["tab"] < len(app.tabs.children):
        app.tabs.selected_index = state["tab"]
    return notes


def _set_case(app, name, notes):
    if name is None or (app.case is not None and app.case.name == name):
        return
    if app.family is None:
        notes.append(f"case {name!r} is not the one loaded; showing {app.case.name if app.case else 'nothing'}")
        return
    names = [c.name for c in app.family]
    if name not in names:
        notes.append(f"case {name!r} is not in family {app.family.name!r}; showing {app.case.name}")
    else:
        if app.board is not None and name in app.board.cols["name"]:
            app.board.select(name)  # keeps the board's pick in step; shows the case
        if app.case is None or app.case.name != name:
            app.show_case(app.family[name])


def _set_levels(le, saved, notes):
    if not saved:
        return
    if le is None:
        notes.append("level explorer settings not applied: no model for this case")
        return
    _choose("distortion mode", le.mode, saved.get("mode"), notes)
    _choose("cation swap", le.swap, saved.get("swap"), notes)
    knobs = {k: saved[k] for k, _ in _LEVEL_SLIDERS if saved.get(k) is not None}
    clamp = le.set(**knobs)  # clamps to the fit's validated range and shows the notes in the explorer
    notes += [f"level explorer: {c}" for c in clamp]


def _set_pdos(ex, saved, notes):
    if not saved:
        return
    if ex is None:
        notes.append("PDOS settings not applied: no PDOS for this case")
        return
    chans = [c for c in saved.get("channels", []) if c in ex.choices]
    lost = [c for c in saved.get("channels", []) if c not in ex.choices]
    if lost:
        notes.append(f"PDOS channels not available here: {', '.join(lost)}")
    if chans and tuple(chans) != tuple(ex.picker.value):
        ex.picker.value = tuple(chans)
    win = saved.get("window")
    if win is not None:
        lo, n1 = _clamp("moment window low", win[0], ex.window.min, ex.window.max, " eV")
        hi, n2 = _clamp("moment window high", win[1], ex.window.min, ex.window.max, " eV")
        notes += [n for n in (n1, n2) if n]
        if (lo, hi) != tuple(ex.window.value):
            ex.window.value = (lo, hi)


def _set_structure(sv, saved, notes):
    if not saved:
        return
    if sv is None:
        notes.append("structure settings not applied: no structure view")
        return
    knobs = {}
    if saved.get("radius") is not None:
        r, n = _clamp("R", saved["radius"], sv.radius.min, sv.radius.max, " Å")
        notes += [n] if n else []
        knobs["radius"] = r
    if saved.get("only_near") is not None and not sv.only_near.disabled:
        knobs["only_near"] = bool(saved["only_near"])
    iso = saved.get("isovalue")
    if iso is not None:
        s = sv.isovalue
        if s is None:
            notes.append("isovalue not applied: this case has no state grid")
        else:
            v, n = _clamp("isovalue", iso, s.base ** s.min, s.base ** s.max)
            notes += [n] if n else []
            knobs["isovalue"] = v
    sv.set(**knobs)  # a view not yet loaded in the browser is rebuilt at these values (no stale isosurface)


# ---------------------------------------------------------------------------------------------- files
def save_app(app, path, *, overwrite: bool = False) -> Path:
    """Write the app's state and its loaded data to session file ``path``
    (:func:`orbtool.session.save_session`; refuses to replace a file that is
    not an orbtool session unless ``overwrite``)."""
    from ..session import save_session

    state, obj = app_state(app), app.loader.value
    if _kept_as_reference(app.loader):
        rf = app.loader.read_from
        state["source"].update(path=rf["path"], host=rf["host"])
        if rf.get("name"):
            state["source"]["name"] = rf["name"]
        state["source"]["sha256"] = content_hash(obj, rf["host"] or None)
        obj = None  # read again from the user's files on restore (small session)
    return save_session(path, {"app": state, "data": obj}, overwrite=overwrite)


def restore_app(app, path, progress=None) -> list[str]:
    """Read session file ``path`` and apply it to ``app``; returns the notes
    (``progress(text, step)`` is told each step, see :func:`apply_state`).

    On any error the app is put back as it was and the error re-raised
    (as :class:`~orbtool.errors.SessionError` where it concerns the file).
    """
    from ..session import load_session

    content = load_session(path)
    if not isinstance(content, dict) or "app" not in content:
        raise SessionError(f"{path}: an orbtool session, but not one saved by the app (no 'app' entry)")
    state = content["app"]
    try:
        check_state(state)
    except SessionError as exc:
        raise SessionError(f"{path}: {exc}") from None
    before, data_before = app_state(app), app.loader.value
    try:
        return apply_state(app, state, content.get("data"), progress)
    except Exception as exc:
        if data_before is not None:  # put back what was shown (reloads only if the data was replaced)
            attempt(apply_state, app, before, data_before)
        if isinstance(exc, SessionError):
            raise SessionError(f"{path}: {exc}") from None
        raise


class SessionBar:
    """Path box + "Save" and "Restore" buttons + status line for an App."""

    def __init__(self, app, path: str = ""):
        self.app = app
        self.path = w.Text(value=str(path), placeholder="file to save to / restore from (e.g. work.orbsession)",
                           description="session", layout=w.Layout(width="520px"))
        self.save_button = w.Button(description="Save", icon="save", tooltip="save the analysis to this file")
        self.restore_button = w.Button(description="Restore", icon="undo", tooltip="restore the analysis saved "
                                                                                   "in this file")
        self.status = w.HTML()
        self.progress = w.IntProgress(value=0, min=0, max=4, layout=w.Layout(width="160px", visibility="hidden"))
        self.save_button.on_click(lambda _: self.save())
        self.restore_button.on_click(lambda _: self.restore())
        self.widget = w.VBox([w.HBox([self.path, self.save_button, self.restore_button, self.progress]),
                              self.status])
        self.widget.add_class("orbtool-session")

    def _target(self):
        p = self.path.value.strip()
        if not p:
            self.status.value = message_html("give a session file path first", "error")
            return None
        return Path(p).expanduser()

    def save(self):
        """Save to the path in the box; returns the file written or None (message shown)."""
        target = self._target()
        if target is None:
            return None
        if self.app.loader.value is None:
            self.status.value = message_html("nothing loaded yet: nothing to save", "error")
            return None
        try:
            out, err = attempt(save_app, self.app, target)
        except Exception as exc:  # never a traceback in the widget
            out, err = None, f"{type(exc).__name__}: {exc}"
        if err:
            self.status.value = message_html(f"not saved: {err}", "error")
            return None
        self.status.value = message_html(f"saved to {out}")
        return out

    def restore(self):
        """Restore from the path in the box; returns the notes or None (message shown, state kept)."""
        target = self._target()
        if target is None:
            return None
        self.progress.layout.visibility = "visible"
        self.progress.bar_style = "info"

        def step(text, k):
            self.progress.value = k
            self.status.value = message_html(f"restoring from {target.name}: {text} …")

        step("reading the session file", 0)
        try:
            notes, err = attempt(restore_app, self.app, target, step)
        except Exception as exc:  # never a traceback in the widget: anything unforeseen becomes a message
            notes, err = None, f"{type(exc).__name__}: {exc}"
        self.progress.value = 4
        self.progress.bar_style = "danger" if err else "success"
        if err:
            self.status.value = message_html(f"not restored (current analysis kept): {err}", "error")
            return None
        text = f"restored from {target}" + "".join(f"\n• {n}" for n in notes)
        self.status.value = message_html(text, "warn" if any("clamped" in n for n in notes) else "info")
        return notes
