"""Small helpers shared by the widgets (internal)."""

from __future__ import annotations

import html
import json
import weakref
from contextlib import contextmanager

from .. import style

_BOKEH_READY = False


def ensure_bokeh() -> None:
    """Load BokehJS into the notebook page from the installed package
    (``INLINE`` resources: no CDN, works offline). Once per kernel."""
    global _BOKEH_READY
    if _BOKEH_READY:
        return
    try:
        from IPython import get_ipython

        if get_ipython() is None:
            return
    except ImportError:  # pragma: no cover - IPython comes with ipywidgets
        return
    from bokeh.io import output_notebook
    from bokeh.resources import INLINE

    output_notebook(resources=INLINE, hide_banner=True)
    _BOKEH_READY = True


_PANE_CLASS = None
#: bokeh model id → its pane (weakly: a pane closed or dropped is forgotten)
_PANES: "weakref.WeakValueDictionary" = weakref.WeakValueDictionary()


def _pane_class():
    """``jupyter_bokeh.BokehModel`` that never loses a change made before it
    is shown and sends a batch of changes as one document patch.

    * The browser side of ``BokehModel`` applies document patches only in a
      rendered view and renders a new view from the ``render_bundle`` taken
      when the widget was created: a source changed in between (e.g.
      ``explorer.set(...)`` before the cell displaying the app) was lost, so
      the diagram lagged the readout. This subclass counts the browser views
      (``_view_count``) and, while none is shown, also refreshes the
      ``render_bundle`` after each change, so the first view renders the
      current state. Once shown, changes go out as patches only.
    * ``BokehModel`` sends every changed property as its own document patch
      (three comm messages each: header, metadata, content); inside
      :func:`batched` the changes are collected and sent as one patch of
      several events (bokeh's PATCH-DOC message holds a list of events),
      which the browser applies and draws once.
    """
    global _PANE_CLASS
    if _PANE_CLASS is None:
        from bokeh.protocol import Protocol
        from jupyter_bokeh import BokehModel

        class BokehPane(BokehModel):
            _held = None

            def _document_patched(self, event):
                if event.setter is self:  # a change that came from the browser: nothing to send back
                    return
                if self._held is not None:
                    self._held.append(event)
                    return
                self._send_patch([event])

            def _send_patch(self, events):
                if not events:
                    return
                if not self._view_count:  # nothing shown yet: the first view must start from the current state
                    self.render_bundle = self._model_to_traits(self._model)
                    # (the patch still goes out: a view being drawn now has not been counted yet)
                msg = Protocol().create("PATCH-DOC", events)
                # the message layout jupyter_bokeh's browser side reads (as BokehModel._document_patched sends it)
                self.send({"msg": "patch", "payload": msg.header_json})
                self.send({"msg": "patch", "payload": msg.metadata_json})
                self.send({"msg": "patch", "payload": msg.content_json})
                for buffer in msg.buffers:
                    self.send({"msg": "patch", "payload": json.dumps(buffer.ref)})
                    self.send({"msg": "patch"}, [buffer.to_bytes()])

        _PANE_CLASS = BokehPane
    return _PANE_CLASS


def bokeh_pane(model):
    """A bokeh model wrapped as an ipywidget (a ``jupyter_bokeh.BokehModel``
    that keeps changes made before display and can batch changes, see
    :func:`_pane_class` and :func:`batched`)."""
    ensure_bokeh()
    pane = _pane_class()(model, combine_events=True, _view_count=0)
    _PANES[model.id] = pane
    return pane


@contextmanager
def batched(model):
    """Within this block, changes to the document of ``model`` (shown by
    :func:`bokeh_pane`) are collected and sent to the browser as one patch
    when the block ends; without a pane it does nothing."""
    pane = _PANES.get(getattr(model, "id", None))
    if pane is None or pane._held is not None:
        yield
        return
    pane._held = []
    try:
        yield
    finally:
        events, pane._held = pane._held, None
        pane._send_patch(events)


def esc(value) -> str:
    """Any user text (case, family, file or element names) made safe for an
    HTML widget or a bokeh HTML string."""
    return html.escape("" if value is None else str(value), quote=True)


def message_html(text: str, kind: str = "info") -> str:
    """HTML for a status line: ``kind`` is "info", "warn" or "error"."""
    colour = {"info": style.INK, "warn": "#8a5a00", "error": style.LEVEL}[kind]
    icon = {"info": "", "warn": "⚠ ", "error": "✖ "}[kind]
    return (f'<div class="orbtool-msg orbtool-{kind}" style="color:{colour};font-family:{style.FONT},sans-serif;'
            f'white-space:pre-wrap">{icon}{html.escape(text)}</div>')


def attempt(fn, *args, **kwargs):
    """``(result, None)`` or ``(None, message)`` — orbtool errors and the
    usual input errors become a message, anything else propagates."""
    from ..errors import OrbtoolError

    try:
        return fn(*args, **kwargs), None
    except (OrbtoolError, OSError, ValueError, KeyError, TypeError, IndexError, NotImplementedError) as exc:
        return None, f"{type(exc).__name__}: {exc}"
