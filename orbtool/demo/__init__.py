"""The demo scenario: a small family of invented compounds computed with
orbtool's own supercell tight-binding generator (MODEL DATA, not DFT)."""

from .generate import DEFAULT_OUT as DATA_DIR
from .generate import generate

__all__ = ["generate", "DATA_DIR"]
