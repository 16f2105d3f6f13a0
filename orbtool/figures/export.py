"""Writing figures: formats, widths, embedded fonts."""

from __future__ import annotations

from pathlib import Path

#: single-column width (85 mm) and double-column width (178 mm) of most journals, inches (common practice)
COLUMN_WIDTH_IN = 85 / 25.4
DOUBLE_WIDTH_IN = 178 / 25.4

#: rcParams that embed fonts: TrueType (type 42) in PDF, real text in SVG (searchable, editable)
FONT_EMBEDDING = {"pdf.fonttype": 42, "ps.fonttype": 42, "svg.fonttype": "none"}


def new_figure(width: str = "single", aspect: float = 0.8):
    """A matplotlib figure in orbtool's style at a journal width (``"single"`` or ``"double"``)."""
    import matplotlib

    matplotlib.use("Agg", force=False)
    import matplotlib.pyplot as plt

    from ..style import matplotlib_rc
    w = COLUMN_WIDTH_IN if width == "single" else DOUBLE_WIDTH_IN
    with plt.rc_context({**matplotlib_rc(), **FONT_EMBEDDING, "font.size": 7.5, "axes.titlesize": 8,
                         "axes.labelsize": 7.5, "legend.fontsize": 6.5, "xtick.labelsize": 6.5,
                         "ytick.labelsize": 6.5}):
        fig = plt.figure(figsize=(w, w * aspect), layout="constrained")
    return fig


def save_figure(fig, base, formats=("svg", "pdf", "png"), dpi: int = 600) -> list[Path]:
    """Save ``fig`` as ``base.<fmt>`` for each format; returns the paths.

    PNG is written at ``dpi`` (600 by default, the usual journal minimum
    for line art — common practice); PDF embeds TrueType fonts; SVG keeps
    text as text.
    """
    import matplotlib.pyplot as plt

    base = Path(base)
    base.parent.mkdir(parents=True, exist_ok=True)
    out = []
    with plt.rc_context(FONT_EMBEDDING):
        for fmt in formats:
            p = base.with_suffix(f".{fmt}")
            fig.savefig(p, dpi=dpi if fmt == "png" else None, metadata={"Creator": "orbtool"} if fmt != "png"
                        else None)
            out.append(p)
    return out
