"""PDOS overlay: host and defect cells on one aligned energy axis (pure bokeh).

The figure is built once from plain column data; interactive code changes
what is shown only by assigning new ``data`` to the named
``ColumnDataSource`` objects (:func:`update_pdos_figure`).

Energy axis: every curve is drawn at ``E + shift − vbm`` where ``shift`` is
the alignment of that cell to the host scale (0 for the host) and ``vbm``
the host valence-band maximum, so the VBM sits at 0 eV and the CBM at the
gap.
"""

from __future__ import annotations

from typing import Mapping

import numpy as np

from .. import style
from ._sources import named_sources, remember

__all__ = ["channel_choices", "pdos_curves", "states_data", "pdos_figure", "update_pdos_figure",
           "PDOS_SOURCES"]

#: names of the data sources inside the figure (``fig.select_one({"name": ...})``)
PDOS_SOURCES = ("orbtool.pdos.lines", "orbtool.pdos.states")

_L_NAMES = {0: "s", 1: "p", 2: "d", 3: "f"}


def _shell_indices(site, shell: int, host: bool = False) -> list[int]:
    shells = getattr(site, "shells", None) or ()
    if len(shells) < shell:
        return []
    key = "host_index" if host else "index"
    out = [getattr(n, key, None) for n in shells[shell - 1]]
    return [int(i) for i in out if i is not None and int(i) >= 0]


def channel_choices(pdos, site=None) -> dict[str, dict]:
    """The channel groups a user can pick, label → selection criteria.

    Criteria are keyword arguments of :meth:`orbtool.spectra.ProjectedDOS.select`
    (``atoms``, ``elements``, ``l``), evaluated on the *defect* cell; a
    key ``"host_atoms"`` carries the matching host-cell atoms for shells.
    ``"total"`` (empty criteria) is the sum of every channel.

    Parameters
    ----------
    pdos : ProjectedDOS
        The defect cell's projected DOS.
    site : VacancySite-like, optional
        Supplies ``shells`` (tuples of neighbours with ``index`` and
        optional ``host_index``) for the per-shell and per-atom entries.
    """
    out: dict[str, dict] = {"total": {}}
    present_l = sorted({c.l for c in pdos.channels if c.orbital != "tot"})
    elements = sorted({c.element for c in pdos.channels})
    if site is not None:
        for k in (1, 2):
            idx = _shell_indices(site, k)
            if not idx:
                continue
            els = sorted({pdos.channels[i].element for i in range(len(pdos.channels))
                          if pdos.channels[i].atom in idx})
            base = {"atoms": idx, "host_atoms": _shell_indices(site, k, host=True)}
            out[f"shell {k} ({'/'.join(els)} ×{len(idx)})"] = base
            for l in present_l:
                out[f"shell {k} · {_L_NAMES.get(l, l)}"] = {**base, "l": l}
    for el in elements:
        out[f"{el} (all)"] = {"elements": el}
        for l in present_l:
            out[f"{el} · {_L_NAMES.get(l, l)}"] = {"elements": el, "l": l}
    shells = tuple(getattr(site, "shells", ()) or ()) if site is not None else ()
    for k, shell in enumerate(shells[:2], start=1):
        for n in shell:
            hi = getattr(n, "host_index", None)
            out[f"atom {n.index} {n.element} (shell {k})"] = {
                "atoms": int(n.index), **({"host_atoms": [int(hi)]} if hi is not None else {})}
    return out


def _select(pdos, criteria: Mapping, host: bool) -> np.ndarray | None:
    crit = {k: v for k, v in criteria.items() if k != "host_atoms"}
    if host and "atoms" in crit:
        if not criteria.get("host_atoms"):
            return None
        crit["atoms"] = criteria["host_atoms"]
    if not crit and pdos.total is not None:
        return pdos.total.sum(axis=0)
    try:
        return pdos.select(**crit)
    except KeyError:
        return None


def pdos_curves(picks: Mapping[str, Mapping], defect_pdos, host_pdos=None, *, defect_shift: float = 0.0,
                host_shift: float = 0.0, vbm: float = 0.0) -> dict[str, list]:
    """Column data for the line source of :func:`pdos_figure`.

    Parameters
    ----------
    picks : mapping label → criteria
        Usually a subset of :func:`channel_choices`.
    defect_pdos, host_pdos : ProjectedDOS
        Spin channels are summed (states/eV of both spins).
    defect_shift, host_shift : float
        eV added to each cell's energies to bring it to the host scale.
    vbm : float
        Host VBM on that scale, eV; subtracted from every energy.

    Returns
    -------
    dict of lists ``xs`` (eV), ``ys`` (states/eV), ``label``, ``cell``,
    ``colour``, ``dash``, ``width`` — one entry per drawn curve.
    """
    cols = {k: [] for k in ("xs", "ys", "label", "cell", "colour", "dash", "width")}
    palette = style.colour_cycle()
    for label, crit in picks.items():
        colour = style.DEFECT if label == "total" else next(palette)
        for cell, pd, shift in (("defect", defect_pdos, defect_shift), ("host", host_pdos, host_shift)):
            if pd is None:
                continue
            y = _select(pd, crit, host=cell == "host")
            if y is None:
                continue
            cols["xs"].append(np.asarray(pd.energies) + shift - vbm)
            cols["ys"].append(np.asarray(y, dtype=float))
            cols["label"].append(f"{label} · {cell}")
            cols["cell"].append(cell)
            cols["colour"].append(style.HOST if (cell == "host" and label == "total") else colour)
            cols["dash"].append(style.DASHES[cell])
            cols["width"].append(2.0 if cell == "defect" else 1.4)
    return cols


def states_data(states, vbm_shift: float = 0.0, ymax: float = 1.0) -> dict[str, list]:
    """Markers for in-gap states: ``x`` (eV, host scale minus VBM), ``y``,
    ``text`` (occupation as "occ 1.00/2"; successive markers stepped down by
    10 % of ``ymax``), from DefectState-like objects
    (``energy_aligned`` or ``energy``, ``occupation``, ``max_occupation``)."""
    out = {"x": [], "y": [], "text": []}
    for i, s in enumerate(states or ()):
        e = getattr(s, "energy_aligned", None)
        if e is None:
            e = s.energy
        out["x"].append(float(e) - vbm_shift)
        out["y"].append(float(ymax) * (1.0 - 0.1 * (i % 5)))  # staggered so near-degenerate labels stay legible
        occ = getattr(s, "occupation", float("nan"))
        top = getattr(s, "max_occupation", None)
        out["text"].append(f"occ {occ:.2f}" + (f"/{top:g}" if top is not None else ""))
    return out


def pdos_figure(lines: Mapping, states: Mapping | None = None, *, gap: float | None = None,
                x_range: tuple[float, float] | None = None, title: str = "Projected DOS",
                width: int = 720, height: int = 380):
    """The PDOS overlay figure.

    Parameters
    ----------
    lines : column data from :func:`pdos_curves`
    states : column data from :func:`states_data`, optional
    gap : float, optional
        CBM on the aligned axis (eV); the valence band (E < 0) and the
        conduction band (E > gap) are tinted, the gap left light.
    x_range : (float, float), optional
        Initial energy window (eV); default: 3 eV either side of the gap.
    """
    from bokeh.models import BoxAnnotation, ColumnDataSource, HoverTool, Span
    from bokeh.plotting import figure

    g = 0.0 if gap is None or not np.isfinite(gap) else float(gap)
    if x_range is None:
        x_range = (-3.0, g + 3.0)
    fig = figure(width=width, height=height, title=title, x_range=x_range, tools="pan,xwheel_zoom,box_zoom,reset,save",
                 x_axis_label=style.ENERGY_LABEL, y_axis_label="PDOS (states/eV)", name="orbtool.pdos")
    fig.add_layout(BoxAnnotation(right=0.0, fill_color=style.VALENCE, fill_alpha=0.6, level="underlay"))
    if gap is not None and np.isfinite(gap):
        fig.add_layout(BoxAnnotation(left=g, fill_color=style.CONDUCTION, fill_alpha=0.6, level="underlay"))
        fig.add_layout(Span(location=g, dimension="height", line_color=style.INK, line_dash="dotted"))
    fig.add_layout(Span(location=0.0, dimension="height", line_color=style.INK, line_dash="dotted"))
    src = ColumnDataSource(dict(lines), name=PDOS_SOURCES[0])
    r = fig.multi_line("xs", "ys", source=src, line_color="colour", line_dash="dash", line_width="width",
                       legend_field="label")
    fig.add_tools(HoverTool(renderers=[r], tooltips=[("curve", "@label"), ("E", "$x{0.00} eV"),
                                                     ("PDOS", "$y{0.000} states/eV")], line_policy="nearest"))
    st = ColumnDataSource(dict(states or {"x": [], "y": [], "text": []}), name=PDOS_SOURCES[1])
    fig.scatter("x", "y", source=st, marker="inverted_triangle", size=13, fill_color=style.LEVEL,
                line_color=style.LEVEL)
    fig.text("x", "y", text="text", source=st, text_color=style.LEVEL, text_font_size="10pt", x_offset=8,
             y_offset=-4, text_baseline="middle")
    fig.legend.location = "top_left"
    fig.legend.click_policy = "hide"
    fig.y_range.start = 0
    remember(fig, {PDOS_SOURCES[0]: src, PDOS_SOURCES[1]: st})
    return style.style_figure(fig)


def update_pdos_figure(fig, lines: Mapping | None = None, states: Mapping | None = None) -> None:
    """Replace the data of the figure's sources (nothing else changes)."""
    sources = named_sources(fig, PDOS_SOURCES)
    if lines is not None:
        sources[PDOS_SOURCES[0]].data = dict(lines)
    if states is not None:
        sources[PDOS_SOURCES[1]].data = dict(states)
