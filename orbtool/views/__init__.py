"""Pure bokeh figure builders (no ipywidgets, no kernel needed).

Every builder takes plain column data computed by a ``*_data`` / ``*_curves``
helper and returns a bokeh model whose data sources carry fixed names, so
interactive code (:mod:`orbtool.widgets`) updates a view by reassigning
``source.data`` and nothing else. Colours, glyphs and dashes come from
:mod:`orbtool.style`.

* :mod:`~orbtool.views.pdos` — host and defect PDOS on one aligned axis;
* :mod:`~orbtool.views.levels` — the orbital-interaction (level) diagram;
* :mod:`~orbtool.views.family` — family table and level-depth scatter.
"""

from .family import FAMILY_SOURCE, family_board, family_columns, set_axes
from .levels import LEVEL_SOURCES, group_levels, level_diagram, level_diagram_data, update_level_diagram
from .pdos import (
    PDOS_SOURCES,
    channel_choices,
    pdos_curves,
    pdos_figure,
    states_data,
    update_pdos_figure,
)

__all__ = [
    "FAMILY_SOURCE", "family_board", "family_columns", "set_axes",
    "LEVEL_SOURCES", "group_levels", "level_diagram", "level_diagram_data", "update_level_diagram",
    "PDOS_SOURCES", "channel_choices", "pdos_curves", "pdos_figure", "states_data", "update_pdos_figure",
]
