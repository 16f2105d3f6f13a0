"""PDOS explorer: host and defect PDOS overlaid, channels picked from a list,
moments of the picked curves in an energy window."""

from __future__ import annotations

import html

import ipywidgets as w
import numpy as np

from ..views.pdos import channel_choices, pdos_curves, pdos_figure, states_data, update_pdos_figure
from ._common import attempt, bokeh_pane, message_html

__all__ = ["PDOSExplorer", "case_context"]


def case_context(case, site=None) -> dict:
    """Band edges, alignment, vacancy site and in-gap states of a case, each
    computed by :mod:`orbtool.analysis`; whatever cannot be computed is
    replaced by a neutral default and a note (shown in the widgets).

    Returns
    -------
    dict with ``site``, ``edges`` (BandEdges or None), ``vbm`` and ``gap``
    (eV, host scale; 0 and NaN when unknown), ``shift`` (eV added to defect
    energies), ``states`` (list of DefectState) and ``notes`` (list of str).
    """
    from .. import analysis

    notes: list[str] = []
    if site is None and getattr(case, "host", None) is not None:
        site, err = attempt(analysis.locate_vacancy, case.host, case.defect)
        if err:
            notes.append(f"vacancy not located: {err}")
    edges = None
    src = case.host_projections if case.host_projections is not None else case.host_pdos
    if src is not None:
        edges, err = attempt(analysis.band_edges, src)
        if err:
            notes.append(f"band edges unknown: {err}")
    shift = 0.0
    if case.host_pdos is not None or case.host_grids:
        al, err = attempt(analysis.align, case, site)
        if err:
            notes.append(f"no alignment (defect energies used as they are): {err}")
        else:
            shift = float(al.shift)
    states = []
    if case.projections is not None:
        states, err = attempt(analysis.in_gap_states, case, site, edges=edges)
        if err:
            notes.append(f"in-gap states not found: {err}")
            states = []
    vbm = float(edges.vbm) if edges is not None else 0.0
    gap = float(edges.gap) if edges is not None else float("nan")
    return {"site": site, "edges": edges, "vbm": vbm, "gap": gap, "shift": shift, "states": states or [],
            "notes": notes}


class PDOSExplorer:
    """Overlay of host and defect PDOS with channel picking and moments.

    Parameters
    ----------
    case : DefectCase, optional
        Supplies ``defect_pdos``/``host_pdos`` and, through
        :func:`case_context`, band edges, alignment and in-gap states.
    defect_pdos, host_pdos : ProjectedDOS, optional
        Used instead of (or without) a case.
    site : VacancySite-like, optional
        For the per-shell and per-atom channels.
    context : dict, optional
        A :func:`case_context` result already computed (shared with other views).
    """

    def __init__(self, case=None, *, defect_pdos=None, host_pdos=None, site=None, context=None):
        if case is not None:
            defect_pdos = defect_pdos or case.defect_pdos
            host_pdos = host_pdos or case.host_pdos
        if defect_pdos is None and host_pdos is None:
            raise ValueError("PDOSExplorer needs a PDOS: the case has neither defect_pdos nor host_pdos")
        if context is None:
            context = case_context(case, site) if case is not None else {
                "site": site, "vbm": 0.0, "gap": float("nan"), "shift": 0.0, "states": [], "notes": []}
        self.context = context
        self.site = site if site is not None else context.get("site")
        self.defect_pdos = defect_pdos if defect_pdos is not None else host_pdos
        self.host_pdos = host_pdos if defect_pdos is not None else None
        self.choices = channel_choices(self.defect_pdos, self.site)
        default = ["total"] + [k for k in self.choices if k.startswith("shell 1 (")][:1]
        # a scrolling list (rows shown, the rest by scrolling); ctrl/shift-click picks several
        self.picker = w.SelectMultiple(options=list(self.choices), value=tuple(default), rows=10,
                                       description="channels", style={"description_width": "70px"},
                                       layout=w.Layout(width="400px", overflow="auto"))
        self.picker.add_class("orbtool-channels")
        gap = context["gap"]
        top = gap if np.isfinite(gap) else 0.0
        self.window = w.FloatRangeSlider(value=(-1.0, top + 1.0), min=-8.0, max=top + 8.0, step=0.05,
                                         description="moment window (eV)", readout_format=".2f",
                                         style={"description_width": "140px"}, layout=w.Layout(width="400px"))
        self.moments = w.HTML()
        self.notes = w.HTML(message_html("\n".join(context["notes"]), "warn") if context["notes"] else "")
        lines = self._lines()
        ymax = max([float(np.max(y)) for y in lines["ys"]] + [1.0])
        self._states = states_data(context["states"], context["vbm"], 0.9 * ymax)
        self.figure = pdos_figure(lines, self._states, gap=gap if np.isfinite(gap) else None)
        self.picker.observe(self._on_change, names="value")
        self.window.observe(self._on_change, names="value")
        self._show_moments(lines)
        controls = w.VBox([self.picker, self.window, self.moments, self.notes],
                          layout=w.Layout(width="410px", min_width="410px"))
        self.widget = w.HBox([bokeh_pane(self.figure), controls], layout=w.Layout(flex_flow="row wrap"))
        self.widget.add_class("orbtool-pdos")

    def _lines(self):
        picks = {k: self.choices[k] for k in self.picker.value}
        c = self.context
        return pdos_curves(picks, self.defect_pdos, self.host_pdos, defect_shift=c["shift"], vbm=c["vbm"])

    def _on_change(self, change):
        lines = self._lines()
        update_pdos_figure(self.figure, lines)
        self._show_moments(lines)

    def _show_moments(self, lines):
        from ..analysis.moments import dos_moments

        lo, hi = self.window.value
        rows = []
        for x, y, label in zip(lines["xs"], lines["ys"], lines["label"]):
            lo_, hi_ = max(lo, float(x[0])), min(hi, float(x[-1]))
            m, err = attempt(dos_moments, x, y, (lo_, hi_), label)
            if err:
                rows.append(f"<tr><td>{html.escape(label)}</td><td colspan=3>{html.escape(err)}</td></tr>")
            else:
                rows.append(f"<tr><td>{html.escape(label)}</td><td>{m.weight:.3f}</td><td>{m.centre:.3f}</td>"
                            f"<td>{m.width:.3f}</td></tr>")
        self.moments.value = ('<table style="font-size:12px"><tr><th>curve</th><th>states</th><th>centre (eV)</th>'
                              '<th>width (eV)</th></tr>' + "".join(rows) + "</table>")

    def _ipython_display_(self):  # pragma: no cover - notebook only
        from IPython.display import display

        display(self.widget)
