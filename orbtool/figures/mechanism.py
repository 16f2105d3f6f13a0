"""The mechanism diagram: dangling orbitals, their couplings, the resulting
levels (with symmetry labels) against the band edges, and the knobs."""

from __future__ import annotations

import numpy as np

from .. import style
from ._layout import declutter
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
    lo = min(-1.5, mech.level - 2.0)
    hi = cbm + 0.9
    span = hi - lo
    ax.axhspan(lo, 0.0, color=style.VALENCE, zorder=0, lw=0)
    ax.axhspan(cbm, hi, color=style.CONDUCTION, zorder=0, lw=0)
    ax.text(-1.25, 0.0, "VBM", va="bottom", ha="left", fontsize=6, color=style.INK)
    ax.text(-1.25, cbm, "CBM", va="bottom", ha="left", fontsize=6, color=style.INK)
    xs_on, xs_lv = (0.0, 0.9), (1.9, 2.8)
    # orbital energies grouped by element and l ("Sn p ×18"), not by m
    kinds = [_orbital_kind(b, mech.orbitals) for b in mech.basis]
    on_groups, below = [], []
    for kind in dict.fromkeys(kinds):
        idx = [i for i, k in enumerate(kinds) if k == kind]
        e = float(np.mean(mech.onsite[idx]))
        (on_groups if lo <= e <= hi else below).append((e, len(idx), kind))
    for e, n, kind in on_groups:
        ax.plot(xs_on, [e, e], color=style.shell_colour(1), lw=2.0, solid_capstyle="butt")
        ax.text(np.mean(xs_on), e + 0.015 * span, f"{kind} ×{n}", ha="center", va="bottom", fontsize=5.5)
    if below:
        ax.text(np.mean(xs_on), lo + 0.01 * span, "\n".join(f"{k} ×{n} at {e:+.1f} eV" for e, n, k in
                                                          sorted(below, reverse=True)[:3]) + "\n(off scale)",
                ha="center", va="bottom", fontsize=5, color=style.MUTED)
    # cluster levels in the window; labels nudged apart so they never overlap
    lv_groups = [g for g in _cluster_levels(np.asarray(mech.levels)) if lo <= g[0] <= hi]
    placed = []
    for e, n, idx in lv_groups:
        is_defect = mech.defect_index in idx
        col = style.LEVEL if is_defect else style.INK
        ax.plot(xs_lv, [e, e], color=col, lw=2.4 if is_defect else 1.0, solid_capstyle="butt", zorder=3 if is_defect
                else 2)
        lab = mech.labels[idx[0]] if mech.labels else "?"
        if len(lab) > 8:
            lab = lab.split("+")[0] + "+…"
        placed.append([e, f"{lab}" + (f" ×{n}" if n > 1 else ""), col, is_defect])
    # spread within the axes (never pushed above the top, where the title is)
    ys = style.spread_labels([p[0] for p in placed], 0.045 * span, lo=lo + 0.02 * span, hi=hi - 0.03 * span)
    for p, y in zip(placed, ys):
        p[0] = y
    level_texts = []
    for (y, text, col, is_defect), (e, _, _) in zip(placed, lv_groups):
        level_texts.append(ax.text(xs_lv[1] + 0.08, y, text, ha="left", va="center", fontsize=5.5, color=col,
                                   fontweight="bold" if is_defect else "normal"))
        if abs(y - e) > 1e-9:
            ax.plot([xs_lv[1], xs_lv[1] + 0.07], [e, y], color=col, lw=0.4)
    for e, n, kind in on_groups:  # correlation lines: the orbitals the defect level is built from
        ax.plot([xs_on[1], xs_lv[0]], [e, mech.level], color=style.MUTED, lw=0.6, ls=style.mpl_dash("model"))
    if mech.sigma > 0:
        ax.fill_between(xs_lv, mech.level - mech.sigma, mech.level + mech.sigma, color=style.LEVEL_BAND,
                        alpha=0.45, lw=0)
    x0 = 4.3 + max([0.09 * len(t.get_text()) for t in level_texts] + [0.0]) - 0.8  # clear of the labels
    x0 = max(x0, 4.3)
    x = x0
    shown = [(k, dv) for k, dv in mech.knobs.items() if dv is not None and np.isfinite(dv)][:3]
    knob_texts = []
    for k, dv in shown:
        ax.annotate("", xy=(x, mech.level + dv), xytext=(x, mech.level),
                    arrowprops=dict(arrowstyle="-|>", color=style.CATEGORICAL[0], lw=1.2, shrinkA=0, shrinkB=0))
        ax.plot([x - 0.25, x + 0.25], [mech.level, mech.level], color=style.LEVEL, lw=0.8)
        knob_texts.append(ax.text(x, mech.level + dv + (0.03 if dv >= 0 else -0.03) * span, f"{k}\n{dv:+.2f} eV",
                                  fontsize=5, va="bottom" if dv >= 0 else "top", ha="center"))
        x += 1.1
    ax.set_xlim(-1.3, max(x, x0) + 0.1)
    ax.set_ylim(lo, hi)
    ticks = [np.mean(xs_on), np.mean(xs_lv)] + ([x0 + 0.55 * (len(shown) - 1)] if shown else [])
    names = ["orbital\nenergies", "cluster\nlevels"] + (["knobs"] if shown else [])
    ax.set_xticks(ticks, names)
    ax.tick_params(axis="x", length=0)
    ax.set_ylabel(style.ENERGY_LABEL)
    ax.grid(False)
    strongest = ""
    if mech.couplings:
        i, j, v = mech.couplings[0]
        strongest = f"; strongest coupling {v:+.2f} eV"
    ax.set_title(title or f"{mech.case}\nlevel {mech.level:+.2f} ± {mech.sigma:.2f} eV, {mech.verdict}{strongest}",
                 loc="left")
    declutter(ax, level_texts, leader=False)  # measured with the renderer: no label on another
    declutter(ax, knob_texts)
    return fig


def _orbital_kind(basis_label: str, orbitals: str) -> str:
    """"Sn12:px" → "Sn p"; hybrid basis → "Sn hybrid"."""
    atom, orb = basis_label.split(":")
    el = atom.rstrip("0123456789")
    if orbitals == "hybrid":
        return f"{el} hybrid"
    return f"{el} {orb[0]}"
