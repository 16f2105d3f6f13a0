"""The family trend panel: level depth against a descriptor."""

from __future__ import annotations

import numpy as np

from .. import style
from .export import new_figure, styled

#: axis labels of the family-table columns (units in parentheses)
AXIS_LABELS = {
    "pair_distance_mean": "mean first-shell pair distance (Å)",
    "site_distance_mean": "mean neighbour–site distance (Å)",
    "breathing_fraction": "breathing (fraction of host distance)",
    "breathing_amplitude": "breathing amplitude (Å)",
    "angle_mean": "mean neighbour–site–neighbour angle (°)",
    "shell1_fraction": "state weight on the first shell",
    "s_weight": "s character of the state",
}


@styled
def trend_figure(rows, x: str, *, y: str = "above_vbm", colour_by: str = "motif",
                 shape_by: str = "vacancy", width: str = "single"):
    """Scatter of ``y`` against ``x`` over the family table ``rows``
    (:meth:`orbtool.family.FamilyAnalysis.table`), coloured by ``colour_by``,
    glyph by ``shape_by``, with each case's gap drawn as a bar so "deep" reads
    at a glance."""
    pts = [r for r in rows if isinstance(r.get(x), float) and isinstance(r.get(y), float)]
    fig = new_figure(width, aspect=0.75)
    ax = fig.add_subplot(111)
    cats = []
    for r in pts:
        if r.get(colour_by) not in cats:
            cats.append(r.get(colour_by))
    for r in pts:
        col = style.CATEGORICAL[cats.index(r.get(colour_by)) % len(style.CATEGORICAL)]
        mk = style.glyph_for(str(r.get(shape_by, "")), library="matplotlib")
        gap = r.get("gap")
        if isinstance(gap, float):
            ax.plot([r[x], r[x]], [0, gap], color=style.GRID_LINE, lw=3, zorder=1, solid_capstyle="butt")
        ax.scatter(r[x], r[y], color=col, marker=mk, s=28, edgecolor=style.INK, linewidth=0.4, zorder=3)
        if len(pts) <= 6:
            ax.annotate(r["name"], (r[x], r[y]), xytext=(3, 3), textcoords="offset points", fontsize=5)
    for c in cats:  # legend entries: colours
        ax.scatter([], [], color=style.CATEGORICAL[cats.index(c) % len(style.CATEGORICAL)], marker="o",
                   label=f"{colour_by}: {c}")
    shapes = sorted({str(r.get(shape_by, "")) for r in pts})
    for sname in shapes:
        ax.scatter([], [], color=style.MUTED, marker=style.glyph_for(sname, library="matplotlib"),
                   label=f"{shape_by}: {sname}")
    ax.axhline(0, color=style.INK, lw=0.6)
    ax.set_xlabel(AXIS_LABELS.get(x, x.replace("_", " ")))
    ax.set_ylabel("defect level above VBM (eV)" if y == "above_vbm" else y.replace("_", " "))
    if pts:
        xs = np.array([r[x] for r in pts])
        ys = np.array([r[y] for r in pts])
        if len(pts) >= 3 and np.ptp(xs) > 0 and np.ptp(ys) > 0:
            r_ = float(np.corrcoef(xs, ys)[0, 1])
            ax.set_title(f"Pearson r = {r_:+.2f} over {len(pts)} defect states\n(bars: each host's gap)",
                         loc="left", fontsize=6.5)
    fig.legend(loc="outside lower center", ncols=3, fontsize=5.5)
    return fig
