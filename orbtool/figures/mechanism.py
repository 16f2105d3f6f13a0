"""The mechanism diagram: dangling orbitals, their couplings, the resulting
levels (with symmetry labels) against the band edges, and the knobs."""

from __future__ import annotations

import numpy as np

from .. import style
from .export import new_figure, styled


def _cluster_levels(values, tol=0.01):
    """Group nearly equal energies: list of (mean energy, count, indices)."""
    order = np.argsort(values)
    groups = []
    for i in order:
        if groups and abs(values[i] - groups[-1][0]) < tol:
            e, n, idx = groups[-1]
            idx = idx + [int(i)]
            groups[-1] = (float(np.mean(values[idx])), n + 1, idx)
        else:
            groups.append((float(values[i]), 1, [int(i)]))
    return groups


@styled
def mechanism_figure(mech, *, width: str = "single", title: str | None = None):
    """Draw a :class:`~orbtool.mechanism.Mechanism`.

    Left column: the dangling-orbital (on-site) energies; centre: the levels
    of the coupled cluster with their symmetry labels, the defect level
    highlighted with its ±σ band; shaded valence band below 0 and conduction
    band above the gap; right: arrows for how far each knob moves the level.
    """
    fig = new_figure(width, aspect=1.0)
    ax = fig.add_subplot(111)
    cbm = mech.cbm if np.isfinite(mech.cbm) else max(1.0, mech.level + 0.5)
    lo = max(min(-1.0, float(np.min(mech.levels)) - 0.3, float(np.min(mech.onsite)) - 0.3), -6.0)
    hi = min(max(cbm + 0.8, float(np.max(mech.onsite)) + 0.3), cbm + 4.0)
    ax.axhspan(lo, 0.0, color=style.VALENCE, zorder=0, lw=0)
    ax.axhspan(cbm, hi, color=style.CONDUCTION, zorder=0, lw=0)
    ax.text(-1.25, 0.0, "VBM", va="bottom", ha="left", fontsize=6, color=style.INK)
    ax.text(-1.25, cbm, "CBM", va="bottom", ha="left", fontsize=6, color=style.INK)
    xs_on, xs_lv = (0.0, 0.9), (1.9, 2.8)
    on_groups = _cluster_levels(np.asarray(mech.onsite))
    for e, n, idx in on_groups:
        if lo <= e <= hi:
            ax.plot(xs_on, [e, e], color=style.shell_colour(1), lw=2.0, solid_capstyle="butt")
            el = mech.basis[idx[0]].split(":")[0].rstrip("0123456789")
            kind = "hybrid" if mech.orbitals == "hybrid" else mech.basis[idx[0]].split(":")[1]
            ax.text(np.mean(xs_on), e + 0.04 * (hi - lo), f"{el} {kind} ×{n}", ha="center", va="bottom",
                    fontsize=5.5)
    lv_groups = _cluster_levels(np.asarray(mech.levels))
    for e, n, idx in lv_groups:
        if not lo <= e <= hi:
            continue
        is_defect = mech.defect_index in idx
        col = style.LEVEL if is_defect else style.INK
        ax.plot(xs_lv, [e, e], color=col, lw=2.4 if is_defect else 1.2, solid_capstyle="butt")
        lab = mech.labels[idx[0]] if mech.labels else "?"
        ax.text(xs_lv[1] + 0.06, e, f"{lab}" + (f" ×{n}" if n > 1 else ""), ha="left", va="center",
                fontsize=6, color=col, fontweight="bold" if is_defect else "normal")
        if is_defect:  # correlation lines from the orbitals the level is built from
            for eo, _, _ in on_groups:
                if lo <= eo <= hi:
                    ax.plot([xs_on[1], xs_lv[0]], [eo, e], color=style.MUTED, lw=0.6, ls=style.mpl_dash("model"))
    if mech.sigma > 0:
        ax.fill_between(xs_lv, mech.level - mech.sigma, mech.level + mech.sigma, color=style.LEVEL_BAND,
                        alpha=0.45, lw=0)
    if mech.couplings:
        i, j, v = mech.couplings[0]
        ax.text(1.4, lo + 0.03 * (hi - lo), f"strongest coupling {v:+.2f} eV", ha="center", va="bottom",
                fontsize=5.5, color=style.INK)
    x = 4.0
    shown = [(k, dv) for k, dv in mech.knobs.items() if dv is not None and np.isfinite(dv)][:3]
    for k, dv in shown:
        ax.annotate("", xy=(x, mech.level + dv), xytext=(x, mech.level),
                    arrowprops=dict(arrowstyle="-|>", color=style.CATEGORICAL[0], lw=1.2, shrinkA=0, shrinkB=0))
        ax.text(x, mech.level + dv + (0.05 if dv >= 0 else -0.05) * (hi - lo), f"{k}\n{dv:+.2f} eV",
                fontsize=5, va="bottom" if dv >= 0 else "top", ha="center")
        x += 1.1
    ax.set_xlim(-1.3, max(x, 4.0) + 0.2)
    ax.set_ylim(lo, hi)
    ticks = [np.mean(xs_on), np.mean(xs_lv)] + ([4.0 + 0.55 * (len(shown) - 1)] if shown else [])
    names = ["dangling\norbitals", "cluster\nlevels"] + (["knobs"] if shown else [])
    ax.set_xticks(ticks, names)
    ax.tick_params(axis="x", length=0)
    ax.set_ylabel(style.ENERGY_LABEL)
    ax.grid(False)
    ax.set_title(title or f"{mech.case}\nlevel {mech.level:+.2f} ± {mech.sigma:.2f} eV: {mech.verdict}", loc="left")
    return fig
