"""Journal-ready static figures (matplotlib): SVG, PDF and 600-dpi PNG at
single- and double-column widths, fonts embedded, in orbtool's visual language
(:mod:`orbtool.style`).

* :func:`mechanism_figure` — dangling orbitals → couplings → levels vs the band edges, knobs annotated
* :func:`pdos_figure` — first-shell PDOS, host vs defect, gap and in-gap states marked
* :func:`state_slice_figure` — the in-gap state density in a plane through the vacancy
* :func:`trend_figure` — level depth across the family against a descriptor
* :func:`save_figure` — write the formats
"""

from .export import COLUMN_WIDTH_IN, DOUBLE_WIDTH_IN, save_figure
from .mechanism import mechanism_figure
from .pdos import pdos_figure
from .slice import state_slice_figure
from .trends import trend_figure

__all__ = ["COLUMN_WIDTH_IN", "DOUBLE_WIDTH_IN", "save_figure", "mechanism_figure", "pdos_figure",
           "state_slice_figure", "trend_figure"]
