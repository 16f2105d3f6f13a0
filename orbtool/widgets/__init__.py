"""Jupyter apps (ipywidgets + bokeh through ``jupyter_bokeh`` + nglview).

Thin by design: they call :mod:`orbtool.analysis`, :mod:`orbtool.tb` and
:mod:`orbtool.levels`, build figures with :mod:`orbtool.views` and, on a
user event, only reassign ``ColumnDataSource`` data. BokehJS is loaded from
the installed package (inline), never from a CDN.

* :class:`App` — everything in tabs: ``orbtool.widgets.App(case_or_family)``;
* :class:`SessionBar` (``App.session``) — save / restore of an analysis; the state itself
  through :func:`app_state` / :func:`apply_state` (plain functions, no browser needed);
* :class:`Loader`, :class:`StructureView`, :class:`PDOSExplorer`,
  :class:`LevelExplorer`, :class:`FamilyBoard` — each usable alone.
"""

from .app import App, fit_case
from .family import FamilyBoard, board_rows
from .levels import LevelExplorer, knob_ranges, srh_factor
from .loader import Loader, load_any
from .pdos import PDOSExplorer, case_context
from .state import SessionBar, app_state, apply_state, restore_app, save_app
from .structure import EnclosedFraction, StructureView, standard_frame

__all__ = ["App", "fit_case", "FamilyBoard", "board_rows", "LevelExplorer", "knob_ranges", "srh_factor", "Loader",
           "load_any", "PDOSExplorer", "case_context", "EnclosedFraction", "StructureView", "standard_frame",
           "SessionBar", "app_state", "apply_state", "save_app", "restore_app"]
