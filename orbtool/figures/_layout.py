"""Text layout of the static figures: measure text boxes with the renderer and
nudge labels apart so that no two pieces of text overlap (internal).

Boxes are the renderer's bounding boxes of the drawn text (display pixels,
``Text.get_window_extent``), i.e. what a reader sees, after the figure's
constrained layout has run.
"""

from __future__ import annotations

import numpy as np

__all__ = ["text_boxes", "overlapping_texts", "declutter"]


def _renderer(fig):
    fig.draw_without_rendering()  # runs the layout engine so boxes are final
    return fig.canvas.get_renderer()


def text_boxes(fig) -> list:
    """``[(Text, Bbox)]`` for every visible, non-empty text of ``fig``: figure
    and axes texts, annotations, titles, axis labels, tick labels, legend entries."""
    r = _renderer(fig)
    texts = list(fig.texts)
    for ax in fig.axes:
        texts += list(ax.texts) + [ax.title, ax._left_title, ax._right_title, ax.xaxis.label, ax.yaxis.label]
        # tick labels only for ticks inside the view (matplotlib keeps a few undrawn ones beyond it)
        (x0, x1), (y0, y1) = sorted(ax.get_xlim()), sorted(ax.get_ylim())
        texts += [t for t in ax.get_xticklabels() if x0 - 1e-9 <= t.get_position()[0] <= x1 + 1e-9]
        texts += [t for t in ax.get_yticklabels() if y0 - 1e-9 <= t.get_position()[1] <= y1 + 1e-9]
        leg = ax.get_legend()
        if leg is not None:
            texts += list(leg.get_texts())
    for leg in fig.legends:
        texts += list(leg.get_texts())
    out = []
    for t in texts:
        if not t.get_visible() or not t.get_text().strip():
            continue
        bb = t.get_window_extent(r)
        if bb.width > 0 and bb.height > 0:
            out.append((t, bb))
    return out


def overlapping_texts(fig, tol: float = 0.5) -> list[tuple[str, str]]:
    """Pairs of texts whose boxes overlap by more than ``tol`` pixels in both
    directions (an empty list for a clean figure)."""
    boxes = text_boxes(fig)
    bad = []
    for i in range(len(boxes)):
        ti, a = boxes[i]
        for tj, b in boxes[i + 1:]:
            dx = min(a.x1, b.x1) - max(a.x0, b.x0)
            dy = min(a.y1, b.y1) - max(a.y0, b.y0)
            if dx > tol and dy > tol:
                bad.append((ti.get_text(), tj.get_text()))
    return bad


def declutter(ax, movable, *, pad_px: float = 1.5, leader: bool = True, direction: int = 0,
              max_px: float = 400.0) -> None:
    """Move each text of ``movable`` vertically to the nearest position where
    its box overlaps no other text of the figure (and stays inside the axes).

    Texts are placed in order; each is tried at shifts 0, +1, −1, +2, −2 …
    pixels (``direction`` +1/−1 restricts to up/down). Positions are in data
    coordinates; with ``leader`` a thin line joins a moved label to where it
    was anchored.
    """
    fig = ax.figure
    r = _renderer(fig)
    movable = [t for t in movable if t.get_text().strip()]
    ids = {id(t) for t in movable}
    fixed = [bb for t, bb in text_boxes(fig) if id(t) not in ids]
    axbox = ax.get_window_extent(r)
    inv = ax.transData.inverted()
    placed: list = []
    for t in movable:
        x0, y0 = t.get_position()
        base = t.get_window_extent(r)
        steps = np.arange(0.0, max_px, 1.0)
        if direction == 0:
            shifts = [s * sign for s in steps for sign in ((1,) if s == 0 else (1, -1))]
        else:
            shifts = [s * direction for s in steps]
        best = 0.0
        for s in shifts:
            bb = base.translated(0, s)
            if bb.y0 < axbox.y0 or bb.y1 > axbox.y1:
                continue
            if not any(min(bb.x1, o.x1) - max(bb.x0, o.x0) > -pad_px and min(bb.y1, o.y1) - max(bb.y0, o.y0) > -pad_px
                       for o in fixed + placed):
                best = s
                break
        if best:
            px, py = ax.transData.transform((x0, y0))
            _, y1 = inv.transform((px, py + best))
            t.set_y(y1)
            if leader:
                ax.plot([x0, x0], [y0, y1], color=t.get_color(), lw=0.4, zorder=1)
        placed.append(base.translated(0, best))
