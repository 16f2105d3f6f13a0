"""Small helpers shared by the widgets (internal)."""

from __future__ import annotations

import html

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


def bokeh_pane(model):
    """A bokeh model wrapped as an ipywidget (``jupyter_bokeh.BokehModel``)."""
    from jupyter_bokeh import BokehModel

    ensure_bokeh()
    return BokehModel(model, combine_events=True)


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
