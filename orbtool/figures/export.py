"""Writing figures: formats, widths, embedded fonts."""

from __future__ import annotations

from pathlib import Path

#: single-column width (85 mm) and double-column width (178 mm) of most journals, inches (common practice)
COLUMN_WIDTH_IN = 85 / 25.4
DOUBLE_WIDTH_IN = 178 / 25.4

#: zlib level of PNG files (lossless at every level: 1 is the fastest, 9 the smallest)
PNG_COMPRESS_LEVEL = 1

#: rcParams that embed fonts: TrueType (type 42) in PDF, real text in SVG (searchable, editable)
FONT_EMBEDDING = {"pdf.fonttype": 42, "ps.fonttype": 42, "svg.fonttype": "none"}


def style_context():
    """``with style_context(): ...`` — draw in orbtool's print style (fonts sized for a
    journal column, embedded fonts, the palette of :mod:`orbtool.style`)."""
    import matplotlib.pyplot as plt

    from ..style import matplotlib_rc
    return plt.rc_context({**matplotlib_rc(), **FONT_EMBEDDING, "font.size": 7, "axes.titlesize": 7,
                           "axes.labelsize": 7, "legend.fontsize": 6, "xtick.labelsize": 6.5,
                           "ytick.labelsize": 6.5})


def styled(func):
    """Decorator: run a figure builder inside :func:`style_context`."""
    import functools

    @functools.wraps(func)
    def wrapper(*args, **kwargs):
        with style_context():
            return func(*args, **kwargs)
    return wrapper


def new_figure(width: str = "single", aspect: float = 0.8):
    """A matplotlib figure at a journal width (``"single"`` or ``"double"``); call
    inside :func:`style_context` (the figure builders are decorated with :func:`styled`)."""
    import matplotlib

    matplotlib.use("Agg", force=False)
    import matplotlib.pyplot as plt

    w = COLUMN_WIDTH_IN if width == "single" else DOUBLE_WIDTH_IN
    return plt.figure(figsize=(w, w * aspect), layout="constrained")


def save_figure(fig, base, formats=("svg", "pdf", "png"), dpi: int = 600) -> list[Path]:
    """Save ``fig`` as ``base.<fmt>`` for each format; returns the paths.

    PNG is written at ``dpi`` (600 by default, the usual journal minimum
    for line art — common practice); PDF embeds TrueType fonts; SVG keeps
    text as text. Each file is written atomically (temporary file in the same
    folder, then renamed), so a killed run never leaves a truncated figure
    where a good one was.
    """
    import matplotlib.pyplot as plt

    from ..outputs import atomic_write

    base = Path(base)
    base.parent.mkdir(parents=True, exist_ok=True)
    out = []
    # reproducible files: no creation dates, fixed SVG element ids (same input → same bytes)
    meta = {"pdf": {"Creator": "orbtool", "CreationDate": None}, "svg": {"Creator": "orbtool", "Date": None}}
    # PNG: the same pixels, zlib level 1 instead of 6 (lossless either way; ~25 % less time, ~20 % larger file)
    extra = {"png": {"pil_kwargs": {"compress_level": PNG_COMPRESS_LEVEL}}}
    with plt.rc_context({**FONT_EMBEDDING, "svg.hashsalt": "orbtool"}):
        for fmt in formats:
            p = base.with_suffix(f".{fmt}")
            atomic_write(p, lambda fh, fmt=fmt: fig.savefig(fh, format=fmt, dpi=dpi if fmt == "png" else None,
                                                            metadata=meta.get(fmt), **extra.get(fmt, {})))
            out.append(p)
    return out
