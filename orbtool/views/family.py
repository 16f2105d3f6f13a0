"""Family board: a sortable table of the cases and a scatter of level depth
against any descriptor (pure bokeh).

Colour encodes the motif (a family label), the glyph the vacancy type, so
the two stay readable without colour (see :mod:`orbtool.style`). Both
views share one ``ColumnDataSource``: selecting rows in the table selects
the points and vice versa.
"""

from __future__ import annotations

from typing import Mapping, Sequence

import numpy as np

from .. import style
from ._sources import named_sources, remember

__all__ = ["family_columns", "family_board", "numeric_keys", "set_axes", "FAMILY_SOURCE", "TABLE_KEYS"]

FAMILY_SOURCE = "orbtool.family.rows"


def family_columns(rows: Sequence[Mapping]) -> dict[str, list]:
    """Columns from a list of per-case dicts (missing values → NaN/"")
    plus the styling columns ``colour`` and ``marker``.

    Each row needs ``name``; ``motif`` and ``vacancy`` drive colour and glyph;
    every numeric key becomes a selectable axis.
    """
    keys: list[str] = []
    for r in rows:
        for k in r:
            if k not in keys:
                keys.append(k)
    cols: dict[str, list] = {}
    for k in keys:
        vals = [r.get(k) for r in rows]
        numeric = all(v is None or isinstance(v, (int, float, np.floating, np.integer)) for v in vals)
        cols[k] = [float("nan") if v is None else float(v) for v in vals] if numeric else \
            ["" if v is None else str(v) for v in vals]
    motifs = list(dict.fromkeys(cols.get("motif", [""] * len(rows))))
    cmap = {m: style.CATEGORICAL[i % len(style.CATEGORICAL)] for i, m in enumerate(motifs)}
    cols["colour"] = [cmap[m] for m in cols.get("motif", [""] * len(rows))]
    cols["marker"] = [style.glyph_for(v) for v in cols.get("vacancy", [""] * len(rows))]
    cols["_x"] = list(cols.get(numeric_keys(cols)[0], [0.0] * len(rows))) if numeric_keys(cols) else [0.0] * len(rows)
    cols["_y"] = list(cols.get("above_vbm", cols["_x"]))
    return cols


def numeric_keys(cols: Mapping[str, list]) -> list[str]:
    """Column names holding numbers (candidate axes)."""
    return [k for k, v in cols.items() if not k.startswith("_") and k not in ("colour", "marker")
            and v and all(isinstance(x, float) for x in v)]


#: columns shown in the table (when present), in this order; the scatter can use every numeric column
TABLE_KEYS = ("name", "motif", "vacancy", "charge", "above_vbm", "below_cbm", "gap", "occupation",
              "shell1_fraction", "site_distance_mean", "breathing_fraction", "model_above_vbm", "model_minus_dft")


def family_board(cols: Mapping[str, list], *, x: str, y: str = "above_vbm", width: int = 560, height: int = 380,
                 table_keys=TABLE_KEYS):
    """(scatter figure, data table) sharing one source named :data:`FAMILY_SOURCE`.

    The table shows ``table_keys`` that exist (all columns if fewer than
    three of them do); it is sortable by clicking a header."""
    from bokeh.models import ColumnDataSource, DataTable, HoverTool, NumberFormatter, TableColumn
    from bokeh.plotting import figure

    src = ColumnDataSource(dict(cols), name=FAMILY_SOURCE)
    fig = figure(width=width, height=height, title="Level depth across the family", name="orbtool.family",
                 tools="tap,box_select,pan,wheel_zoom,reset,save")
    r = fig.scatter("_x", "_y", source=src, marker="marker", fill_color="colour", line_color=style.INK, size=13,
                    fill_alpha=0.9, selection_line_width=2.5, nonselection_fill_alpha=0.25, legend_field="motif"
                    if "motif" in cols else None)
    fig.add_tools(HoverTool(renderers=[r], tooltips=[("case", "@name"), ("motif", "@motif"),
                                                     ("vacancy", "@vacancy"), ("level", "@above_vbm{0.000} eV")]))
    if "motif" in cols:
        fig.add_layout(fig.legend[0], "right")
    fig.x_range.range_padding = fig.y_range.range_padding = 0.2
    remember(fig, {FAMILY_SOURCE: src})
    set_axes(fig, x, y)
    shown = [k for k in table_keys if k in cols]
    if len(shown) < 3:
        shown = [k for k in cols if not k.startswith("_") and k not in ("colour", "marker")]
    table_cols = [TableColumn(field=k, title=k, width=220 if k == "name" else 90,
                              formatter=NumberFormatter(format="0.[000]")
                              if all(isinstance(v, float) for v in cols[k]) else _plain())
                  for k in shown]
    table = DataTable(source=src, columns=table_cols, width=max(width, 130 + 90 * len(shown)), autosize_mode="none",
                      height=min(40 + 28 * len(cols["name"]), 300),
                      sortable=True, selectable=True, index_position=None, name="orbtool.family.table")
    return style.style_figure(fig), table


def _plain():
    from bokeh.models import StringFormatter

    return StringFormatter()


def set_axes(fig, x: str, y: str) -> None:
    """Point the scatter at columns ``x`` and ``y`` (copies them into the
    plotting columns; the axis labels follow)."""
    src = named_sources(fig, (FAMILY_SOURCE,))[FAMILY_SOURCE]
    data = dict(src.data)
    data["_x"] = list(data[x])
    data["_y"] = list(data[y])
    src.data = data
    fig.xaxis.axis_label = _axis_label(x)
    fig.yaxis.axis_label = _axis_label(y)


def _axis_label(key: str) -> str:
    if key == "above_vbm":
        return "level above VBM (eV)"
    if key == "below_cbm":
        return "level below CBM (eV)"
    return key
