"""PDOS of the first-shell atoms, host vs defect, on the host's energy scale."""

from __future__ import annotations

import numpy as np

from .. import style
from ._layout import declutter
from .export import new_figure, styled


@styled
def pdos_figure(case, site, states=(), *, edges=None, alignment=None, window=None, width: str = "single",
                broadening_note: bool = True):
    """First-shell projected DOS of host (dashed) and defect cell (solid), per l.

    Energies are referred to the host VBM; the defect cell's energies are
    shifted by the alignment (``orbtool.analysis.align``); the gap is left
    white between the shaded band regions and every in-gap state is marked
    with its occupation.
    """
    from ..analysis import align, band_edges
    if case.defect_pdos is None:
        raise ValueError(f"case {case.name!r} has no defect PDOS")
    if edges is None:
        edges = states[0].edges if states else band_edges(case.host_projections or case.host_pdos)
    if alignment is None:
        alignment = align(case, site)
    shift = float(alignment.shift)
    vbm, cbm = float(edges.vbm), float(edges.cbm)
    window = window or (-4.0, (cbm - vbm) + 2.0)
    fig = new_figure(width, aspect=0.75)
    ax = fig.add_subplot(111)
    first_def = [n.index for n in site.first_shell]
    first_host = [n.host_index for n in site.first_shell]
    ymax = 0.0
    for l, name in ((0, "s"), (1, "p"), (2, "d")):
        col = style.CATEGORICAL[l]
        for pd, idx, role, sh in ((case.host_pdos, first_host, "host", 0.0), (case.defect_pdos, first_def, "defect",
                                                                                shift)):
            if pd is None:
                continue
            try:
                y = pd.select(atoms=idx, l=l)
            except KeyError:
                continue
            e = pd.energies + sh - vbm
            m = (e >= window[0]) & (e <= window[1])
            if not m.any() or y[m].max() <= 0:
                continue
            ymax = max(ymax, float(y[m].max()))
            ax.plot(e[m], y[m], color=col, ls=style.mpl_dash(role), lw=1.0 if role == "host" else 1.4,
                    label=f"{name} ({role})")
    ymax = ymax or 1.0
    ax.axvspan(window[0], 0.0, color=style.VALENCE, lw=0, zorder=0)
    ax.axvspan(cbm - vbm, window[1], color=style.CONDUCTION, lw=0, zorder=0)
    groups: list[list] = []  # nearly degenerate states (a multiplet, both spins) share one marker
    for st in sorted(states, key=lambda s_: s_.above_vbm):
        if groups and abs(st.above_vbm - groups[-1][-1].above_vbm) < 0.05:
            groups[-1].append(st)
        else:
            groups.append([st])
    labels = []
    for g in groups:
        x = float(np.mean([st.above_vbm for st in g]))
        ax.axvline(x, color=style.LEVEL, lw=1.2)
        occ = sum(st.occupation for st in g)
        labels.append(ax.text(x, ymax * 1.03, f"{len(g)} state{'s' if len(g) > 1 else ''}, {occ:.2f} e",
                              color=style.LEVEL, ha="center", va="bottom", fontsize=5.5,
                              bbox=dict(boxstyle="square,pad=0.15", fc=style.PAPER, ec="none", alpha=0.85)))
    ax.set_xlim(*window)
    # head room for the in-gap labels (stacked when close in energy), the legend below the axes
    ax.set_ylim(0, ymax * (1.15 + 0.09 * max(len(groups) - 1, 0)))
    ax.set_xlabel(style.ENERGY_LABEL)
    ax.set_ylabel("first-shell PDOS (states/eV)")
    ax.legend(loc="upper center", bbox_to_anchor=(0.5, -0.2), ncols=3, fontsize=5.5)
    ax.set_title(f"{case.name}: {len(first_def)} first-shell atoms\nhost dashed, defect solid "
                 f"(aligned by {shift:+.3f} eV)", loc="left", fontsize=6.5)
    declutter(ax, labels, direction=1, leader=False)  # stacked upwards along their (coloured) state lines
    return fig


