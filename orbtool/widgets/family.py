"""Family board: sortable table + level-depth scatter; picking a case (a point,
a table row or the dropdown) calls ``on_select(case_name)``."""

from __future__ import annotations

import ipywidgets as w

from ..views._sources import named_sources
from ..views.family import AXIS_KEYS, FAMILY_SOURCE, column_label, family_board, family_columns, numeric_keys, set_axes
from ._common import attempt, bokeh_pane, message_html

__all__ = ["FamilyBoard", "board_rows"]


def board_rows(analysis, fit=None) -> list[dict]:
    """Rows for the board from a :class:`orbtool.family.FamilyAnalysis`
    (its ``table()``), with ``name`` and ``above_vbm`` named as the views expect.

    With a (shared) ``fit``, each fitted case also gets ``model_above_vbm``
    (the model's level, eV), ``model_minus_dft`` (eV) and its per-case
    parameters (``<name>@<case>`` → ``fit_<name>``), so fitted quantities
    can be plotted against the descriptors.
    """
    rows = []
    for r in analysis.table():
        row = {"name": r.get("name", r.get("case"))}
        for k, v in r.items():
            if k in ("case", "name", "error", "transition_levels"):
                continue
            row[k] = v
        row["above_vbm"] = r.get("above_vbm", r.get("level_above_vbm"))
        if fit is not None:
            row.update(_fitted(fit, row["name"], row["above_vbm"]))
        rows.append(row)
    return rows


def _fitted(fit, name, dft_level) -> dict:
    out = {"model_above_vbm": None, "model_minus_dft": None}
    params = getattr(fit, "params", {}) or {}
    for k, v in params.items():
        if k.endswith(f"@{name}"):
            out[f"fit_{k.split('@')[0]}"] = float(v)
    p, err = attempt(fit.predict, case=name)
    if err is None:
        out["model_above_vbm"] = float(p.above_vbm)
        if dft_level is not None:
            out["model_minus_dft"] = float(p.above_vbm) - float(dft_level)
    return out


class FamilyBoard:
    """Table and scatter of a family.

    Parameters
    ----------
    rows : list of dict
        One per case (see :func:`board_rows`); needs ``name``, ``above_vbm``;
        ``motif`` and ``vacancy`` give colour and glyph.
    on_select : callable(str), optional
        Called with the case name when a case is picked.
    errors : dict name → message, optional
        Cases that could not be analysed (listed under the board).
    """

    def __init__(self, rows, on_select=None, errors=None):
        self.on_select = on_select
        self.cols = family_columns(rows)
        keys = numeric_keys(self.cols)
        keys = [k for k in AXIS_KEYS if k in keys] + [k for k in keys if k not in AXIS_KEYS]
        axes = [k for k in keys if k != "above_vbm"] or ["above_vbm"]
        first = next((k for k in ("site_distance_mean", "breathing_fraction", "gap") if k in axes), axes[0])
        # options show plain names with units; the value stays the column key (sessions, code)
        wide = {"description_width": "50px"}
        self.x = w.Dropdown(options=[(column_label(k), k) for k in axes], value=first, description="x axis",
                            style=wide, layout=w.Layout(width="340px"))
        self.y = w.Dropdown(options=[(column_label(k), k) for k in keys], value="above_vbm" if "above_vbm" in
                            self.cols else keys[0], description="y axis", style=wide, layout=w.Layout(width="340px"))
        self.figure, self.table = family_board(self.cols, x=self.x.value, y=self.y.value)
        self.pick = w.Dropdown(options=["(pick a case)"] + list(self.cols["name"]), description="case",
                               style=wide, layout=w.Layout(width="300px"))
        self.x.observe(self._axes, names="value")
        self.y.observe(self._axes, names="value")
        self.pick.observe(self._picked, names="value")
        self.source = named_sources(self.figure, (FAMILY_SOURCE,))[FAMILY_SOURCE]
        self.source.selected.on_change("indices", self._selected)
        err = "\n".join(f"{k}: {v}" for k, v in (errors or {}).items())
        self.errors = w.HTML(message_html("not analysed:\n" + err, "warn") if err else "")
        from bokeh.layouts import column

        pane = w.Box([bokeh_pane(column(self.figure, self.table))], layout=w.Layout(overflow="auto", width="100%"))
        self.widget = w.VBox([w.HBox([self.x, self.y, self.pick], layout=w.Layout(flex_flow="row wrap")), pane,
                              self.errors])
        self.widget.add_class("orbtool-board")

    def _axes(self, change):
        set_axes(self.figure, self.x.value, self.y.value)

    def _selected(self, attr, old, new):
        if new:
            self.select(self.cols["name"][new[0]])

    def _picked(self, change):
        if change["new"] != "(pick a case)":
            self.select(change["new"])

    def select(self, name: str):
        """Pick case ``name`` (as a click would)."""
        if name not in self.cols["name"]:
            raise KeyError(f"no case named {name!r}; cases are {self.cols['name']}")
        if getattr(self, "current", None) == name:
            return
        self.current = name
        i = self.cols["name"].index(name)
        if list(self.source.selected.indices) != [i]:
            self.source.selected.indices = [i]
        if self.pick.value != name:
            self.pick.value = name
        if self.on_select is not None:
            self.on_select(name)

    def _ipython_display_(self):  # pragma: no cover - notebook only
        from IPython.display import display

        display(self.widget)
