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

__all__ = ["family_columns", "family_board", "numeric_keys", "set_axes", "FAMILY_SOURCE", "TABLE_KEYS",
           "column_label", "board_title", "AXIS_KEYS"]

FAMILY_SOURCE = "orbtool.family.rows"

#: plain names and units of the family table's columns (:meth:`orbtool.family.FamilyAnalysis.table`,
#: :meth:`orbtool.analysis.VacancySite.descriptors`, :func:`orbtool.widgets.board_rows`)
COLUMNS = {
    "name": ("case", ""), "motif": ("motif", ""), "vacancy": ("vacancy", ""), "charge": ("charge", "e"),
    "above_vbm": ("level above VBM", "eV"), "below_cbm": ("level below CBM", "eV"), "gap": ("band gap", "eV"),
    "occupation": ("occupation", "e"), "dispersion": ("level dispersion", "eV"),
    "shell1_fraction": ("state on shell 1", "fraction"), "shell2_fraction": ("state on shell 2", "fraction"),
    "s_weight": ("s character", "fraction"), "p_weight": ("p character", "fraction"),
    "d_weight": ("d character", "fraction"), "n_in_gap": ("in-gap states", "count"),
    "n_first_shell": ("first-shell atoms", "count"), "n_first": ("first-shell atoms", "count"),
    "n_vacancies": ("vacancies in cell", "count"),
    "site_distance_mean": ("neighbour–site distance", "Å"), "site_distance_min": ("min neighbour–site distance", "Å"),
    "site_distance_max": ("max neighbour–site distance", "Å"),
    "host_site_distance_mean": ("host neighbour–site distance", "Å"),
    "pair_distance_mean": ("neighbour–neighbour distance", "Å"),
    "pair_distance_min": ("min neighbour–neighbour distance", "Å"),
    "pair_distance_max": ("max neighbour–neighbour distance", "Å"),
    "host_pair_distance_mean": ("host neighbour–neighbour distance", "Å"),
    "pair_distance_spread": ("pairing spread (max−min)/mean", "fraction"),
    "angle_mean": ("neighbour–site–neighbour angle", "°"), "angle_min": ("min angle", "°"),
    "angle_max": ("max angle", "°"), "coordination_lost_mean": ("bonds lost per neighbour", "count"),
    "coordination_lost_max": ("max bonds lost per neighbour", "count"),
    "breathing_amplitude": ("breathing (radial shift)", "Å"), "breathing_fraction": ("breathing", "fraction"),
    "tangential_rms": ("tangential displacement (rms)", "Å"), "off_centre": ("off-centre shift", "Å"),
    "distortion_total": ("total distortion", "Å"), "point_group_order": ("point-group order", "count"),
    "shell1_centre_shift": ("shell-1 PDOS centre shift", "eV"),
    "shell1_variance_change": ("shell-1 PDOS variance change", "eV²"),
    "srh_vs_midgap": ("SRH rate vs mid-gap trap", "ratio"),
    "model_above_vbm": ("model level above VBM", "eV"), "model_minus_dft": ("model − DFT level", "eV"),
    "removed": ("removed atom", ""), "point_group": ("point group", ""), "status": ("status", ""),
}

#: columns offered as scatter axes first (the rest follow under their plain names)
AXIS_KEYS = ("above_vbm", "below_cbm", "gap", "model_above_vbm", "model_minus_dft", "site_distance_mean",
             "pair_distance_mean", "breathing_fraction", "breathing_amplitude", "distortion_total",
             "shell1_fraction", "p_weight", "s_weight", "occupation", "srh_vs_midgap", "shell1_centre_shift")


def column_label(key: str, *, unit: bool = True) -> str:
    """Plain name (with unit) of a table column: ``"site_distance_mean"`` →
    ``"neighbour–site distance (Å)"``; ``distortion_<block>`` → ``"<block> distortion (Å)"``;
    ``fit_<p>`` → ``"fitted <p>"``; unknown keys are shown with spaces."""
    if key in COLUMNS:
        name, u = COLUMNS[key]
    elif key.startswith("distortion_"):
        name, u = f"{key[len('distortion_'):]} distortion", "Å"
    elif key.startswith("fit_"):
        name, u = f"fitted {key[4:].replace('_', ' ')}", ""
    else:
        name, u = key.replace("_", " "), ""
    return f"{name} ({u})" if unit and u else name


def board_title(x: str, y: str) -> str:
    """Title of the scatter that follows the chosen axes."""
    return f"{column_label(y, unit=False)} vs {column_label(x, unit=False)} across the family"


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
    if "motif" in cols and not any(cols["motif"]):
        del cols["motif"]  # a family without motif labels: no colour legend, one colour
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

    # user labels (case names, motifs) reach bokeh only as data: tooltips ("@name") and StringFormatter
    # cells show them as text, and titles/legends are drawn on the canvas (no HTML anywhere)
    has_motif = "motif" in cols and any(cols["motif"])
    src = ColumnDataSource(dict(cols), name=FAMILY_SOURCE)
    fig = figure(width=width, height=height, title=board_title(x, y), name="orbtool.family",
                 tools="tap,box_select,pan,wheel_zoom,reset,save")
    extra = {"legend_field": "motif"} if has_motif else {}
    r = fig.scatter("_x", "_y", source=src, marker="marker", fill_color="colour", line_color=style.INK, size=13,
                    fill_alpha=0.9, selection_line_width=2.5, nonselection_fill_alpha=0.25, **extra)
    tips = [("case", "@name")] + [(k, f"@{k}") for k in ("motif", "vacancy") if k in cols]
    if "above_vbm" in cols:
        tips.append(("level", "@above_vbm{0.000} eV"))
    fig.add_tools(HoverTool(renderers=[r], tooltips=tips))
    if has_motif:
        fig.add_layout(fig.legend[0], "right")
    fig.x_range.range_padding = fig.y_range.range_padding = 0.2
    remember(fig, {FAMILY_SOURCE: src})
    set_axes(fig, x, y)
    shown = [k for k in table_keys if k in cols]
    if len(shown) < 3:
        shown = [k for k in cols if not k.startswith("_") and k not in ("colour", "marker")]
    table_cols = [TableColumn(field=k, title=column_label(k), width=200 if k == "name" else 120,
                              formatter=NumberFormatter(format="0.[000]")
                              if all(isinstance(v, float) for v in cols[k]) else _plain())
                  for k in shown]
    table = DataTable(source=src, columns=table_cols, width=max(width, 80 + 120 * len(shown)), autosize_mode="none",
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
    fig.xaxis.axis_label = column_label(x)
    fig.yaxis.axis_label = column_label(y)
    fig.title.text = board_title(x, y)
