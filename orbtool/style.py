"""orbtool's visual language: one palette, one set of glyphs and line styles.

Every picture orbtool draws — the interactive bokeh views, the ipywidgets
apps, the nglview structure panel and the static matplotlib figures — takes
its colours, markers and dashes from this module, so a reader who has seen
one orbtool figure can read the next one without a legend.

Design rules
------------
* **Colour-blind safe.** The six categorical colours were chosen so that
  every pair stays at least 15 units apart in the CAM02-UCS colour space
  for normal vision and for full-severity deuteranomaly, protanomaly and
  tritanomaly (simulated after Machado, Oliveira & Fernandes, IEEE TVCG 15,
  1291 (2009)); ``tests/test_views_style.py`` checks this with the
  ``colorspacious`` library. Categories are *also* told apart by glyph, so
  nothing depends on colour alone.
* **Meaning is fixed.** The valence band is always the cool pale tint below,
  the conduction band the warm pale tint above, the defect level always
  ``LEVEL`` (a dark brick red), the host always dashed, the defect cell
  always solid.
* **Lightness carries order.** Shell 1 is dark, shell 2 mid, the rest pale,
  so shells read correctly in greyscale print.

Public names
------------
``INK, PAPER, GRID_LINE, MUTED`` — neutrals; ``VALENCE, CONDUCTION, GAP`` —
band regions; ``LEVEL, LEVEL_BAND`` — the defect level and its uncertainty;
``HOST, DEFECT`` — the two cells; ``SHELL_COLOURS`` — neighbour shells;
``LOBE_POSITIVE, LOBE_NEGATIVE, VACANCY_GHOST`` — 3-D view;
``CATEGORICAL`` — six colours for motifs/channels; ``VACANCY_GLYPHS`` and
``glyph_for`` — marker per vacancy type; ``DASHES`` — line style per role;
``colour_cycle``, ``bokeh_theme``, ``matplotlib_rc`` and ``use_matplotlib``.
"""

from __future__ import annotations

import contextlib
from itertools import cycle
from typing import Iterator

__all__ = [
    "INK", "PAPER", "GRID_LINE", "MUTED", "VALENCE", "CONDUCTION", "GAP", "LEVEL", "LEVEL_BAND",
    "HOST", "DEFECT", "SHELL_COLOURS", "LOBE_POSITIVE", "LOBE_NEGATIVE", "VACANCY_GHOST",
    "CATEGORICAL", "CATEGORICAL_NAMES", "VACANCY_GLYPHS", "DASHES", "FONT", "ENERGY_LABEL",
    "colour_cycle", "glyph_for", "shell_colour", "mpl_dash", "bokeh_theme", "style_figure", "matplotlib_rc",
    "use_matplotlib", "spread_labels", "ELEMENT_COLOURS", "element_colour",
]

# ----------------------------------------------------------------- neutrals
#: text, axes, the defect cell's total DOS
INK = "#202033"
#: background of every figure
PAPER = "#fbfaf7"
#: faint grid lines
GRID_LINE = "#e4e1d8"
#: secondary text and the host cell's curves
MUTED = "#8a8a80"

# ------------------------------------------------------------- band regions
#: fill of the valence band (below the VBM): a pale cool tint
VALENCE = "#d3e2ee"
#: fill of the conduction band (above the CBM): a pale warm tint
CONDUCTION = "#f4e4c1"
#: fill of the gap (where deep levels live); nearly the paper colour
GAP = "#fffefb"

# ------------------------------------------------------------ defect levels
#: the defect level (dark brick red; distinct from every categorical colour)
LEVEL = "#7a2614"
#: its ±σ band (same hue, drawn with alpha)
LEVEL_BAND = "#c9826f"

# --------------------------------------------------------------- categories
#: six categorical colours (motifs, PDOS channels); order = order of use
CATEGORICAL = ("#1b5e8a", "#e8b32e", "#48b07e", "#cf6fa8", "#9fd0f2", "#7a2614")
#: our names for them, in the same order (used in docs and legends of this module)
CATEGORICAL_NAMES = ("harbour", "ochre", "fern", "orchid", "sky", "brick")

#: the two cells: host dashed grey, defect solid ink
HOST = MUTED
DEFECT = INK

#: neighbour shells: dark → mid → pale (readable in greyscale)
SHELL_COLOURS = {1: "#1b5e8a", 2: "#48b07e", "rest": "#b9c4cc"}

# ----------------------------------------------------------------- 3-D view
#: lobe of a signed orbital where ψ > 0 / ψ < 0 (a blue–yellow pair survives red–green deficiency)
LOBE_POSITIVE = "#e8b32e"
LOBE_NEGATIVE = "#1b5e8a"
#: the empty lattice site
VACANCY_GHOST = "#cf6fa8"

# ------------------------------------------------------------------ glyphs
#: marker per vacancy type (bokeh marker names; matplotlib equivalents in ``_MPL_MARKERS``)
VACANCY_GLYPHS = {"anion": "triangle", "cation": "square", "neutral": "circle", "other": "diamond"}
_MPL_MARKERS = {"triangle": "^", "square": "s", "circle": "o", "diamond": "D", "hex": "h"}

#: line dash per role (bokeh dash names, also understood by :func:`matplotlib_rc` users via ``mpl_dash``)
DASHES = {"defect": "solid", "host": "dashed", "model": "dotdash", "edge": "dotted"}
_MPL_DASHES = {"solid": "-", "dashed": "--", "dotdash": "-.", "dotted": ":"}

#: font family used everywhere
FONT = "DejaVu Sans"
#: the energy axis label used by every energy-resolved figure
ENERGY_LABEL = "E − E_VBM (eV)"


def colour_cycle() -> Iterator[str]:
    """An endless iterator over :data:`CATEGORICAL`."""
    return cycle(CATEGORICAL)


def shell_colour(shell) -> str:
    """Colour of neighbour shell ``shell`` (1, 2; anything else → ``"rest"``)."""
    return SHELL_COLOURS.get(shell, SHELL_COLOURS["rest"])


def glyph_for(vacancy_type: str | None, *, library: str = "bokeh") -> str:
    """Marker for a vacancy type label.

    Parameters
    ----------
    vacancy_type : str or None
        A label such as ``"V_anion"``, ``"anion"``, ``"V_cation"``; matched
        by substring, case-insensitively. Unknown → the "other" glyph.
    library : {"bokeh", "matplotlib"}
        Which marker vocabulary to return.
    """
    key = "other"
    text = (vacancy_type or "").lower()
    for k in ("anion", "cation", "neutral"):
        if k in text:
            key = k
            break
    name = VACANCY_GLYPHS[key]
    return _MPL_MARKERS[name] if library == "matplotlib" else name


def mpl_dash(role: str) -> str:
    """matplotlib linestyle for a role of :data:`DASHES`."""
    return _MPL_DASHES[DASHES[role]]


def bokeh_theme():
    """A :class:`bokeh.themes.Theme` with orbtool's paper, ink and fonts."""
    from bokeh.themes import Theme

    return Theme(json={"attrs": {
        "Plot": {"background_fill_color": PAPER, "border_fill_color": PAPER, "outline_line_color": None,
                 "min_border_left": 50},
        "Axis": {"axis_line_color": INK, "major_tick_line_color": INK, "minor_tick_line_color": None,
                 "axis_label_text_color": INK, "axis_label_text_font": FONT, "axis_label_text_font_style": "normal",
                 "major_label_text_color": INK, "major_label_text_font": FONT},
        "Grid": {"grid_line_color": GRID_LINE},
        "Title": {"text_color": INK, "text_font": FONT, "text_font_style": "bold"},
        "Legend": {"background_fill_alpha": 0.85, "background_fill_color": PAPER, "border_line_color": None,
                   "label_text_font": FONT, "label_text_color": INK},
    }})


def style_figure(fig):
    """Apply the theme attributes directly to one bokeh figure (themes only act
    on documents; figures shown through ``jupyter_bokeh`` or saved standalone
    need the attributes on the models). Returns ``fig``."""
    fig.background_fill_color = PAPER
    fig.border_fill_color = PAPER
    fig.outline_line_color = None
    for ax in list(fig.xaxis) + list(fig.yaxis):
        ax.axis_line_color = INK
        ax.major_tick_line_color = INK
        ax.minor_tick_line_color = None
        ax.axis_label_text_color = INK
        ax.axis_label_text_font_style = "normal"
        ax.major_label_text_color = INK
    for g in list(fig.xgrid) + list(fig.ygrid):
        g.grid_line_color = GRID_LINE
    if fig.title is not None:
        fig.title.text_color = INK
    return fig


def matplotlib_rc() -> dict:
    """rcParams for static figures in the same language (pass to
    ``matplotlib.rc_context`` or use :func:`use_matplotlib`)."""
    return {
        "axes.prop_cycle": __import__("cycler").cycler(color=list(CATEGORICAL)),
        "axes.facecolor": PAPER, "figure.facecolor": "white", "savefig.facecolor": "white",
        "axes.edgecolor": INK, "axes.labelcolor": INK, "text.color": INK,
        "xtick.color": INK, "ytick.color": INK, "axes.grid": True, "grid.color": GRID_LINE,
        "grid.linewidth": 0.6, "font.family": "sans-serif", "font.sans-serif": [FONT],
        "axes.spines.top": False, "axes.spines.right": False, "lines.linewidth": 1.6,
        "legend.frameon": False,
    }


@contextlib.contextmanager
def use_matplotlib():
    """Context manager: draw matplotlib figures in orbtool's language."""
    import matplotlib

    with matplotlib.rc_context(matplotlib_rc()):
        yield


def spread_labels(ys, gap: float, lo: float | None = None, hi: float | None = None) -> list[float]:
    """Label positions at least ``gap`` apart, as close as possible to ``ys``.

    Used for symmetry labels beside nearly degenerate levels: labels are
    pushed apart in order (upwards, then back down from ``hi`` if the top
    one left the axis), so their text boxes never overlap while each stays
    next to its level (a leader line shows where it came from). Same units
    as ``ys``; the returned list follows the input order.
    """
    order = sorted(range(len(ys)), key=lambda i: ys[i])
    out = [float(ys[i]) for i in order]
    for k in range(1, len(out)):
        out[k] = max(out[k], out[k - 1] + gap)
    if hi is not None and out and out[-1] > hi:
        out[-1] = hi
        for k in range(len(out) - 2, -1, -1):
            out[k] = min(out[k], out[k + 1] - gap)
    if lo is not None and out and out[0] < lo:  # too many labels for the span: keep order, start at lo
        out[0] = lo
        for k in range(1, len(out)):
            out[k] = max(out[k], out[k - 1] + gap)
    res = [0.0] * len(out)
    for rank, i in enumerate(order):
        res[i] = out[rank]
    return res


# ----------------------------------------------------------- element colours
#: orbtool's own element palette for the 3-D view (grouped by chemistry, not copied from any viewer):
#: chalcogens and halogens warm, group-14/15 hosts cool, alkali/alkaline earth pale greens,
#: transition and post-transition metals in the categorical hues; unknown elements fall back by
#: a stable hash into :data:`CATEGORICAL`.
ELEMENT_COLOURS = {
    "H": "#f2f0ea", "Li": "#b5d9a8", "Na": "#a3cf93", "K": "#8fc27d", "Rb": "#7cb56b", "Cs": "#69a85a",
    "Be": "#d7e8b0", "Mg": "#c4dc96", "Ca": "#b0cf80", "Sr": "#9cc26b", "Ba": "#88b556",
    "B": "#e9b7a0", "Al": "#a9a9c9", "Ga": "#8d8db8", "In": "#7272a6", "Tl": "#585894",
    "C": "#4d4d4d", "Si": "#6f8faf", "Ge": "#56789b", "Sn": "#3e6287", "Pb": "#2a4c72",
    "N": "#5a7fd6", "P": "#e08a3c", "As": "#b9794a", "Sb": "#9a6a4d", "Bi": "#7c5a4f",
    "O": "#d9452b", "S": "#e8c530", "Se": "#d69a2d", "Te": "#b87a2c",
    "F": "#8ccf5e", "Cl": "#5cb85c", "Br": "#a0522d", "I": "#7b3f8c",
    "Ti": "#9aa3ad", "V": "#8a8fa0", "Cr": "#7f8fa6", "Mn": "#9c6fa8", "Fe": "#c0603a", "Co": "#b0708f",
    "Ni": "#70a090", "Cu": "#c88a4a", "Zn": "#8c90b8", "Cd": "#e0c060", "Hg": "#b8b8d0", "Ag": "#c0c0c8",
    "Au": "#d4af37", "Zr": "#94b0b0", "Hf": "#7fa0a0", "Nb": "#80a8b8", "Mo": "#70a0a8", "W": "#6090a0",
}


def element_colour(symbol: str) -> str:
    """Colour of element ``symbol`` in the 3-D view (:data:`ELEMENT_COLOURS`,
    else a stable pick from :data:`CATEGORICAL`)."""
    if symbol in ELEMENT_COLOURS:
        return ELEMENT_COLOURS[symbol]
    return CATEGORICAL[sum(map(ord, symbol)) % len(CATEGORICAL)]
