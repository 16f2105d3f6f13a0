"""Fast lookup of a figure's named data sources (internal).

``Model.select_one`` walks the whole model graph (~0.1 s for a figure with a
few renderers); interactive updates must not pay that per event, so the
sources are looked up once per figure and remembered by figure id.
"""

from __future__ import annotations

_CACHE: dict[str, dict] = {}


def named_sources(fig, names) -> dict:
    """``{name: ColumnDataSource}`` for ``names`` inside ``fig`` (cached)."""
    found = _CACHE.get(fig.id)
    if found is None or any(n not in found for n in names):
        found = dict(found or {})
        for n in names:
            if n not in found:
                found[n] = fig.select_one({"name": n})
        _CACHE[fig.id] = found
    return found


def remember(fig, sources: dict) -> None:
    """Register sources created by a builder (saves the first lookup)."""
    _CACHE[fig.id] = dict(sources)
