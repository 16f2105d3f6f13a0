"""Public reading/writing functions of :mod:`orbtool.io`: format dispatch,
cache and the checks common to every format."""

from __future__ import annotations

from pathlib import Path

from ..errors import InputFormatError
from ..grid import Grid
from ..spectra import BandProjections, ProjectedDOS
from . import cache as _cache
from ._files import as_path
from .registry import get_format, guess_format, reader_of, writer_of

__all__ = ["read_grid", "read_grids", "read_pdos", "read_projections", "write_grid", "write_pdos",
           "write_projections"]

_QUANTITIES = ("auto", "density", "state", "orbital", "potential", "raw")


def _format(path, format, kind):
    p = as_path(path)
    fmt = guess_format(p, kind) if format is None else get_format(format, kind)
    if not fmt.folder and p.is_dir():
        raise InputFormatError(p, None, f"format {fmt.name!r} reads a file, got a folder")
    if not p.exists():
        raise InputFormatError(p, None, "file does not exist")
    return p, fmt


def _format_reason(p, fmt, given) -> str:
    """How the format was chosen, for the result's ``meta['format_reason']`` (a guess is a guess)."""
    if given is not None:
        return f"format {fmt.name!r} given by the caller"
    if p.is_dir():
        return f"format {fmt.name!r} guessed from the files in the folder (pass format= to override)"
    from .registry import _head_lines
    by = "content" if fmt.sniff is not None and fmt.sniff(p.name, _head_lines(p)) else "file name"
    if fmt.name == "npz":
        by = "NPZ archive"
    return f"format {fmt.name!r} guessed from the file's {by} (pass format= to override)"


def _note_format(obj, p, fmt, given):
    if isinstance(getattr(obj, "meta", None), dict):
        obj.meta["format_reason"] = _format_reason(p, fmt, given)
    return obj


def read_grids(path, format: str | None = None, *, cache: bool = True, quantity: str = "auto",
               progress: bool = True, units: str = "auto", expected=None) -> list[Grid]:
    """Every grid in a volumetric file (total and spin density of a spin-polarised
    charge-density file; each orbital of a multi-orbital cube).

    Parameters
    ----------
    path : str or Path
        A cube, XSF, CHGCAR-family (CHGCAR, PARCHG, CHG, LOCPOT, ...) or orbtool NPZ file,
        optionally gzip/bz2/xz compressed.
    format : str, optional
        Registry name (``"cube"``, ``"xsf"``, ``"chgcar"``, ``"npz"``); guessed from content if omitted.
    cache : bool
        Use and fill the binary cache (see :mod:`orbtool.io.cache`); text formats only.
    quantity : {"auto", "density", "state", "orbital", "potential", "raw"}
        What the values are, which fixes the unit conversion: densities become e/Å³, orbitals
        Å^-3/2, potentials eV; ``"state"`` is the density of one state or multiplet (1/Å³);
        ``"raw"`` keeps the file's numbers (unit ``"arb"``). ``"auto"`` decides from the format
        and file name and records the guess in ``Grid.meta``.
    progress : bool
        Show a progress bar (terminal or notebook) when a read takes longer than about a second.
    units : {"auto", "bohr", "angstrom"}
        Cube files only: whether the values are in the format's atomic units or already Å-based
        (ASE's writer). ``"auto"`` decides from the integral (a total density integrates to an
        electron count of the atoms, a state's density to its number of bands) and falls back on
        the writer; ``Grid.meta["unit_convention"]`` and ``["unit_convention_reason"]`` say which
        and why. See :mod:`orbtool.io.conventions`.
    expected : float or sequence, optional
        Cube files, ``units="auto"``: what the integral must be, when the caller knows it.

    Returns
    -------
    list of Grid
    """
    if quantity not in _QUANTITIES:
        raise InputFormatError(path, None, f"quantity must be one of {_QUANTITIES}, got {quantity!r}",
                               field="quantity")
    p, fmt = _format(path, format, "grid")
    if fmt.name == "npz":
        return [_note_format(reader_of(fmt)(p, kind="grid"), p, fmt, format)]
    options = {"format": fmt.name, "quantity": quantity}
    kwargs = {"quantity": quantity, "progress": progress}
    if fmt.name == "cube":
        options.update(units=units, expected=None if expected is None else list(map(float, _seq(expected))))
        kwargs.update(units=units, expected=expected)
    elif quantity == "state":
        kwargs["quantity"] = "density"
    if cache:
        hit = _cache.load_cached(p, options)
        if hit is not None:
            return [_note_format(g, p, fmt, format) for g in hit]
    grids = reader_of(fmt)(p, **kwargs)
    if cache:
        _cache.store_cached(p, options, grids)
    return [_note_format(g, p, fmt, format) for g in grids]


def _seq(x):
    return [x] if isinstance(x, (int, float)) else list(x)


def read_grid(path, format: str | None = None, *, cache: bool = True, index: int | None = None,
              quantity: str = "auto", progress: bool = True, units: str = "auto", expected=None) -> Grid:
    """One grid from a volumetric file (see :func:`read_grids` for formats and options).

    ``index`` picks a grid of a multi-grid file (0 = total density of a charge-density
    file, 1 = its spin density; n = n-th orbital of a multi-orbital cube); by default the
    first grid is returned.
    """
    grids = read_grids(path, format, cache=cache, quantity=quantity, progress=progress, units=units,
                       expected=expected)
    i = 0 if index is None else index
    if not -len(grids) <= i < len(grids):
        raise InputFormatError(path, None, f"grid index {index} out of range: the file holds {len(grids)} grid(s)",
                               field="index")
    return grids[i]


def read_pdos(path_or_folder, format: str | None = None, **options) -> ProjectedDOS:
    """Projected DOS from a DOSCAR, a folder of projwfc ``*.pdos_atm#..`` files, CP2K-style
    ``*-k<N>-1.pdos`` files (a folder or one file), orbtool text or NPZ.

    Energies are in eV on the code's absolute scale; DOS in states/eV per spin channel.
    """
    p = as_path(path_or_folder)
    if format is None and p.is_dir():
        from .registry import folder_members
        doscar = [f for f in folder_members(p, get_format("doscar"))]
        if doscar:
            pdos = reader_of(get_format("doscar"))(doscar[0], **options)
            pdos.meta["format_reason"] = f"folder read through its DOSCAR-like file {doscar[0].name!r}"
            return pdos
        fmt = guess_format(p, "pdos")
    else:
        p, fmt = _format(p, format, "pdos")
    if fmt.name == "npz":
        return _note_format(reader_of(fmt)(p, kind="pdos"), p, fmt, format)
    return _note_format(reader_of(fmt)(p, **options), p, fmt, format)


def read_projections(path, format: str | None = None, **options) -> BandProjections:
    """Band-resolved projections from a PROCAR, orbtool text or NPZ file."""
    p, fmt = _format(path, format, "projections")
    if fmt.name == "npz":
        return _note_format(reader_of(fmt)(p, kind="projections"), p, fmt, format)
    return _note_format(reader_of(fmt)(p, **options), p, fmt, format)


def _out_format(path, format, allowed, default):
    if format is None:
        suffix = Path(path).suffix.lower()
        format = {".npz": "npz", ".cube": "cube", ".cub": "cube"}.get(suffix, default)
    if format not in allowed:
        raise InputFormatError(path, None, f"cannot write format {format!r}; choose one of {allowed}", field="format")
    return format


def write_grid(path, grid: Grid, format: str | None = None) -> Path:
    """Write ``grid`` as a Gaussian cube file (Bohr, atomic units) or orbtool NPZ.

    The format follows the suffix (``.cube``/``.npz``) unless given.
    """
    fmt = _out_format(path, format, ("cube", "npz"), "cube")
    return writer_of(get_format(fmt))(path, grid)


def write_pdos(path, pdos: ProjectedDOS, format: str | None = None) -> Path:
    """Write ``pdos`` in orbtool's plain-text layout (``"orbtool-text"``) or NPZ."""
    fmt = _out_format(path, format, ("orbtool-text", "npz"), "orbtool-text")
    return writer_of(get_format("orbtool-pdos" if fmt == "orbtool-text" else "npz"))(path, pdos)


def write_projections(path, proj: BandProjections, format: str | None = None) -> Path:
    """Write ``proj`` as orbtool NPZ (default) or plain text (``"orbtool-text"``)."""
    fmt = _out_format(path, format, ("npz", "orbtool-text"), "npz")
    return writer_of(get_format("orbtool-projections" if fmt == "orbtool-text" else "npz"))(path, proj)
