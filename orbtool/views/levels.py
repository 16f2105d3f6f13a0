"""Orbital-interaction diagram of the fitted cluster model (pure bokeh).

Three columns on one energy axis (eV above the host VBM):

* left, "dangling orbitals": the on-site energy of the orbitals pointing
  into the vacancy before they couple (the model's level with couplings
  switched off);
* right, "cluster levels": the eigenvalues of the coupled model inside the
  window, degenerate ones merged and labelled with their symmetry and
  multiplicity; the defect level is drawn heavy with its ±1σ band;
* connectors between the two show where the dangling orbitals went;
  the text beside them gives the coupling scale.

The valence band (below 0) and the conduction band (above the gap) are
tinted as in every orbtool figure. Interactive code only reassigns the data
of the named sources (:func:`update_level_diagram`).
"""

from __future__ import annotations

from typing import Mapping

import numpy as np

from .. import style
from ._sources import named_sources, remember

__all__ = ["level_diagram_data", "level_diagram", "update_level_diagram", "LEVEL_SOURCES", "group_levels"]

LEVEL_SOURCES = ("orbtool.levels.onsite", "orbtool.levels.coupled", "orbtool.levels.links",
                 "orbtool.levels.sigma", "orbtool.levels.conduction")

_X_ONSITE = (0.15, 0.85)
_X_LEVELS = (2.15, 2.85)


def group_levels(energies, labels=None, tol: float = 1e-3) -> list[tuple[float, int, str]]:
    """Merge levels closer than ``tol`` (eV): list of (energy, multiplicity, label)."""
    e = np.asarray(energies, dtype=float)
    lab = list(labels) if labels is not None else ["" for _ in e]
    order = np.argsort(e)
    out: list[tuple[float, int, str]] = []
    for i in order:
        if out and abs(e[i] - out[-1][0]) <= tol:
            en, m, lb = out[-1]
            out[-1] = (en, m + 1, lb)
        else:
            out.append((float(e[i]), 1, str(lab[i]) if i < len(lab) else ""))
    return out


def level_diagram_data(prediction, dangling: float | None = None, *, window: float = 2.0,
                       coupling_scale: float = 1.0, label_gap: float = 0.035) -> dict[str, dict]:
    """Column data of every source of :func:`level_diagram`.

    Parameters
    ----------
    prediction : Prediction-like
        ``level``, ``sigma``, ``levels``, ``labels``, ``vbm``, ``cbm`` (eV, VBM = 0).
    dangling : float, optional
        Energy of the uncoupled dangling orbitals, eV above the VBM.
    window : float
        Levels within ``window`` eV below the VBM or above the CBM are kept.
    coupling_scale : float
        Shown beside the connectors.
    label_gap : float
        Smallest distance between two symmetry labels as a fraction of the
        plotted energy span (0.035 of the 440 px default figure ≈ one 9 pt
        text line); labels are spread with :func:`orbtool.style.spread_labels`.
    """
    vbm = float(prediction.vbm)
    cbm = float(prediction.cbm) if np.isfinite(prediction.cbm) else vbm + 2.0
    lo, hi = vbm - window, cbm + window
    lv = np.asarray(prediction.levels, dtype=float)
    keep = (lv >= lo) & (lv <= hi)
    groups = group_levels(lv[keep], [l for l, k in zip(prediction.labels, keep) if k])
    level = float(prediction.level)
    coupled = {"x0": [], "x1": [], "y": [], "ty": [], "tx": [], "text": [], "colour": [], "width": []}
    # symmetry labels nudged apart (never overlapping) within the fixed y range; a leader shows the level
    gap = label_gap * (hi - lo) if label_gap else 0.0
    label_y = style.spread_labels([g[0] for g in groups], gap, lo=lo, hi=hi)
    for (e, m, lab), ty in zip(groups, label_y):
        is_defect = abs(e - level) <= 1e-3
        coupled["x0"].append(_X_LEVELS[0])
        coupled["x1"].append(_X_LEVELS[1])
        coupled["y"].append(e)
        coupled["ty"].append(ty)
        coupled["tx"].append(_X_LEVELS[1] + 0.12)
        lab = "" if lab.strip() in ("?", "") else lab  # "?": a distortion lowered the symmetry, no label applies
        coupled["text"].append((f"{lab} ×{m}" if lab else f"×{m}") if m > 1 else lab)
        coupled["colour"].append(style.LEVEL if is_defect else style.INK)
        coupled["width"].append(4.0 if is_defect else 1.5)
    onsite = {"x0": [], "x1": [], "y": [], "text": []}
    links = {"x0": [], "y0": [], "x1": [], "y1": [], "text": []}
    if dangling is not None and np.isfinite(dangling):
        onsite = {"x0": [_X_ONSITE[0]], "x1": [_X_ONSITE[1]], "y": [float(dangling)], "text": ["dangling orbitals"]}
        links = {"x0": [_X_ONSITE[1]], "y0": [float(dangling)], "x1": [_X_LEVELS[0]], "y1": [level],
                 "text": [f"coupling × {coupling_scale:.2f}"]}
    s = float(prediction.sigma) if np.isfinite(prediction.sigma) else 0.0
    sigma = {"left": [_X_LEVELS[0] - 0.05], "right": [_X_LEVELS[1] + 0.05], "bottom": [level - s],
             "top": [level + s]}
    conduction = {"left": [-0.5], "right": [3.9], "bottom": [cbm], "top": [cbm + 50.0]}
    return {LEVEL_SOURCES[0]: onsite, LEVEL_SOURCES[1]: coupled, LEVEL_SOURCES[2]: links,
            LEVEL_SOURCES[3]: sigma, LEVEL_SOURCES[4]: conduction}


def level_diagram(data: Mapping[str, Mapping], *, y_range: tuple[float, float], title: str = "Defect level",
                  width: int = 480, height: int = 440):
    """The interaction diagram figure, from :func:`level_diagram_data` output.

    ``y_range`` (eV) is fixed at construction so moving a knob does not
    rescale the picture.
    """
    from bokeh.core.properties import value
    from bokeh.models import BoxAnnotation, ColumnDataSource, FixedTicker, Label
    from bokeh.plotting import figure

    fig = figure(width=width, height=height, title=title, x_range=(-0.5, 3.9), y_range=y_range,
                 tools="pan,ywheel_zoom,reset,save", y_axis_label=style.ENERGY_LABEL, name="orbtool.levels")
    fig.xaxis.ticker = FixedTicker(ticks=[0.5, 2.5])
    fig.xaxis.major_label_overrides = {0.5: "dangling orbitals", 2.5: "cluster levels"}
    fig.xgrid.visible = False
    fig.add_layout(BoxAnnotation(top=0.0, fill_color=style.VALENCE, fill_alpha=0.8, level="underlay"))
    fig.add_layout(Label(x=-0.45, y=0.0, text="VBM", text_color=style.INK, text_font_size="9pt", y_offset=-14))
    src = {n: ColumnDataSource(dict(data[n]), name=n) for n in LEVEL_SOURCES}
    fig.quad(left="left", right="right", bottom="bottom", top="top", source=src[LEVEL_SOURCES[4]],
             fill_color=style.CONDUCTION, fill_alpha=0.8, line_color=None, level="underlay")
    fig.text(x=-0.45, y="bottom", text=value("CBM"), source=src[LEVEL_SOURCES[4]], text_font_size="9pt",
             text_color=style.INK, y_offset=-4, text_baseline="bottom")
    fig.quad(left="left", right="right", bottom="bottom", top="top", source=src[LEVEL_SOURCES[3]],
             fill_color=style.LEVEL_BAND, fill_alpha=0.45, line_color=None)
    fig.segment(x0="x0", y0="y", x1="x1", y1="y", source=src[LEVEL_SOURCES[0]], line_color=style.CATEGORICAL[0],
                line_width=4)
    fig.text(x="x0", y="y", text="text", source=src[LEVEL_SOURCES[0]], text_font_size="9pt", y_offset=-6,
             text_color=style.CATEGORICAL[0])
    fig.segment(x0="x0", y0="y0", x1="x1", y1="y1", source=src[LEVEL_SOURCES[2]], line_color=style.MUTED,
                line_dash=style.DASHES["model"], line_width=1.5)
    fig.text(x=1.5, y="y1", text="text", source=src[LEVEL_SOURCES[2]], text_font_size="9pt", text_align="center",
             text_color=style.MUTED, y_offset=-6)
    fig.segment(x0="x0", y0="y", x1="x1", y1="y", source=src[LEVEL_SOURCES[1]], line_color="colour",
                line_width="width")
    fig.segment(x0="x1", y0="y", x1="tx", y1="ty", source=src[LEVEL_SOURCES[1]], line_color="colour",
                line_width=0.8)
    fig.text(x="tx", y="ty", text="text", source=src[LEVEL_SOURCES[1]], text_font_size="9pt", x_offset=3,
             text_baseline="middle", text_color="colour")
    remember(fig, src)
    return style.style_figure(fig)


def update_level_diagram(fig, data: Mapping[str, Mapping]) -> None:
    """Reassign the data of the named sources of ``fig`` whose columns changed.

    Sources left as they were send nothing to the browser (each reassignment
    is one message through the notebook's comm, which is what a knob event
    waits on)."""
    sources = named_sources(fig, LEVEL_SOURCES)
    for n in LEVEL_SOURCES:
        if n in data:
            new = {k: list(v) for k, v in data[n].items()}
            old = sources[n].data
            if set(old) != set(new) or any(list(old[k]) != new[k] for k in new):
                sources[n].data = new
