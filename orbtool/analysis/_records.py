"""``to_dict`` for the analysis result objects (internal).

Sessions and family tables store objects through ``to_dict()``; this mixin
gives every result dataclass one: fields by name, nested results as dicts,
numpy arrays kept as arrays (the session writer stores them separately).
"""

from __future__ import annotations

import dataclasses

import numpy as np


def _plain(value):
    if hasattr(value, "to_dict") and callable(value.to_dict):
        return value.to_dict()
    if isinstance(value, np.ndarray):
        return value
    if isinstance(value, np.generic):
        return value.item()
    if isinstance(value, dict):
        return {k: _plain(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_plain(v) for v in value]
    return value


class Record:
    """Mixin: ``to_dict()`` over the dataclass fields."""

    def to_dict(self) -> dict:
        return {f.name: _plain(getattr(self, f.name)) for f in dataclasses.fields(self)}
