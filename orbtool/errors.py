"""Exception hierarchy of orbtool.

Every error orbtool raises on purpose derives from :class:`OrbtoolError`, so a
caller (the command line, a widget) can catch one type and show the message
without a traceback.
"""

from __future__ import annotations

from pathlib import Path

__all__ = [
    "OrbtoolError",
    "InputFormatError",
    "GeometryError",
    "FitError",
    "ModelError",
    "SessionError",
    "OrbtoolWarning",
]


class OrbtoolError(Exception):
    """Base class of all deliberate orbtool errors."""


class InputFormatError(OrbtoolError, ValueError):
    """A file (or in-memory input) does not have the layout that was expected.

    Parameters
    ----------
    path
        The file that was being read (``None`` for in-memory data).
    line
        1-based line number where the problem was found, or ``None`` where a
        line number is not meaningful (binary files, whole-file checks).
    reason
        What was wrong and what was expected, in plain words.
    field
        Optional name of the field/block (e.g. ``"grid counts"``).
    """

    def __init__(self, path, line: int | None, reason: str, field: str | None = None):
        self.path = None if path is None else str(path)
        self.line = line
        self.reason = reason
        self.field = field
        where = "<input>" if path is None else str(Path(path))
        if line is not None:
            where += f", line {line}"
        if field:
            where += f" [{field}]"
        super().__init__(f"{where}: {reason}")


class GeometryError(OrbtoolError, ValueError):
    """Structures that cannot be matched or analysed as asked (no vacancy,
    ambiguous candidates, mismatched cells, ...)."""


class FitError(OrbtoolError, ValueError):
    """A model fit that cannot be set up or run (too few targets, non-finite
    residuals, unknown parameter names, ...)."""


class ModelError(OrbtoolError, ValueError):
    """A physical model that cannot be built (missing term values, empty
    shell, invalid parameters, inputs outside a validated range)."""


class SessionError(OrbtoolError):
    """A session file that cannot be written or read (newer schema, damage)."""


class OrbtoolWarning(UserWarning):
    """Input that is readable but suspicious (an element that disagrees with the structure, an
    all-zero density, occupations that do not fit the spin setting). Readers also record the text
    under ``meta["warnings"]`` of the object they return."""


def warn(message: str, meta: dict | None = None) -> None:
    """Issue an :class:`OrbtoolWarning` and append ``message`` to ``meta["warnings"]`` (if given)."""
    import warnings
    if meta is not None:
        meta.setdefault("warnings", []).append(message)
    warnings.warn(message, OrbtoolWarning, stacklevel=3)
