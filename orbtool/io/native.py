"""orbtool's own formats: NPZ for every data object, plain text for PDOS and
band projections. The layouts are documented in ``docs/formats.md``."""

from __future__ import annotations

import json
import re
import tokenize
import zipfile
from pathlib import Path

import numpy as np

from ..errors import InputFormatError
from ..grid import Grid
from ..spectra import ORBITAL_L, BandProjections, Channel, ProjectedDOS
from ._checks import check_dos_signs, show_array, structure_for_channels
from ._files import check_memory, check_regular_file, read_text
from ._numbers import table, to_float, to_int

__all__ = ["read_npz", "write_npz", "read_pdos_text", "write_pdos_text", "read_projections_text",
           "write_projections_text", "atoms_to_arrays", "atoms_from_arrays", "NPZ_VERSION"]

NPZ_VERSION = 1
_SPIN = {"up": 0, "down": 1}
_SPIN_NAME = ("up", "down")


# ------------------------------------------------------------------ atoms
def atoms_to_arrays(atoms, prefix: str = "atoms_") -> dict:
    if atoms is None:
        return {}
    return {prefix + "numbers": np.asarray(atoms.get_atomic_numbers(), dtype=np.int64),
            prefix + "positions": np.asarray(atoms.get_positions(), dtype=float),
            prefix + "cell": np.asarray(atoms.cell.array, dtype=float),
            prefix + "pbc": np.asarray(atoms.pbc, dtype=bool)}


def atoms_from_arrays(data, prefix: str = "atoms_"):
    if prefix + "numbers" not in data:
        return None
    from ase import Atoms
    return Atoms(numbers=data[prefix + "numbers"], positions=data[prefix + "positions"],
                 cell=data[prefix + "cell"], pbc=data[prefix + "pbc"])


def _meta_json(meta: dict) -> np.ndarray:
    return np.array(json.dumps(meta, default=str))


# ------------------------------------------------------------------ NPZ
def grid_arrays(grid: Grid, prefix: str = "") -> dict:
    out = {prefix + "values": np.asarray(grid.values), prefix + "cell": grid.cell, prefix + "origin": grid.origin,
           prefix + "unit": np.array(grid.unit), prefix + "name": np.array(grid.name),
           prefix + "pbc": np.array(grid.pbc), prefix + "meta": _meta_json(grid.meta),
           prefix + "source": np.array(grid.source or "")}
    out.update(atoms_to_arrays(grid.atoms, prefix + "atoms_"))
    return out


def grid_from_arrays(data, prefix: str = "", source=None) -> Grid:
    return Grid(values=data[prefix + "values"], cell=data[prefix + "cell"], origin=data[prefix + "origin"],
                atoms=atoms_from_arrays(data, prefix + "atoms_"), unit=str(data[prefix + "unit"]),
                source=str(data[prefix + "source"]) or source, name=str(data[prefix + "name"]),
                pbc=bool(data[prefix + "pbc"]), meta=json.loads(str(data[prefix + "meta"])))


def _pdos_arrays(p: ProjectedDOS) -> dict:
    out = {"energies": p.energies, "values": p.values,
           "channel_atom": np.array([c.atom for c in p.channels], dtype=np.int64),
           "channel_element": np.array([c.element for c in p.channels], dtype=str),
           "channel_orbital": np.array([c.orbital for c in p.channels], dtype=str),
           "channel_spin": np.array([c.spin for c in p.channels], dtype=np.int64),
           "nspin": np.array(p.nspin), "meta": _meta_json(p.meta)}
    if p.total is not None:
        out["total"] = p.total
    if p.fermi is not None:
        out["fermi"] = np.array(p.fermi)
    out.update(atoms_to_arrays(p.atoms))
    return out


def _pdos_from(data, source) -> ProjectedDOS:
    chans = tuple(Channel(int(a), str(e), str(o), int(s)) for a, e, o, s in
                  zip(data["channel_atom"], data["channel_element"], data["channel_orbital"], data["channel_spin"]))
    return ProjectedDOS(energies=data["energies"], values=data["values"], channels=chans,
                        total=data["total"] if "total" in data else None,
                        fermi=float(data["fermi"]) if "fermi" in data else None, nspin=int(data["nspin"]),
                        atoms=atoms_from_arrays(data), source=source, meta=json.loads(str(data["meta"])))


def _proj_arrays(p: BandProjections) -> dict:
    out = {"kpoints": p.kpoints, "kweights": p.kweights, "energies": p.energies, "weights": p.weights,
           "orbitals": np.array(p.orbitals, dtype=str), "meta": _meta_json(p.meta)}
    if p.occupations is not None:
        out["occupations"] = p.occupations
    if p.fermi is not None:
        out["fermi"] = np.array(p.fermi)
    out.update(atoms_to_arrays(p.atoms))
    return out


def _proj_from(data, source) -> BandProjections:
    return BandProjections(kpoints=data["kpoints"], kweights=data["kweights"], energies=data["energies"],
                           occupations=data["occupations"] if "occupations" in data else None,
                           weights=data["weights"], orbitals=tuple(str(o) for o in data["orbitals"]),
                           atoms=atoms_from_arrays(data), fermi=float(data["fermi"]) if "fermi" in data else None,
                           source=source, meta=json.loads(str(data["meta"])))


def write_npz(path, obj) -> Path:
    """Write a :class:`Grid`, :class:`ProjectedDOS` or :class:`BandProjections` as orbtool NPZ
    (uncompressed, no pickles). Returns the path written."""
    if isinstance(obj, Grid):
        kind, arrays = "grid", grid_arrays(obj)
    elif isinstance(obj, ProjectedDOS):
        kind, arrays = "pdos", _pdos_arrays(obj)
    elif isinstance(obj, BandProjections):
        kind, arrays = "projections", _proj_arrays(obj)
    else:
        raise TypeError(f"cannot write {type(obj).__name__} as orbtool NPZ")
    path = Path(path)
    with open(path, "wb") as fh:  # a file handle keeps numpy from appending '.npz'
        np.savez(fh, orbtool_kind=np.array(kind), orbtool_version=np.array(NPZ_VERSION), **arrays)
    return path


def _check_npy_sizes(path, max_bytes=None) -> None:
    """Refuse archive members whose ``.npy`` header declares more data than the member (or the whole
    archive, allowing deflate's largest expansion) can hold, and archives whose declared content
    exceeds the memory budget, before numpy allocates or decompresses anything."""
    import math
    import os
    limit = os.stat(path).st_size * 1500
    with zipfile.ZipFile(path) as z:
        check_memory(path, sum(i.file_size for i in z.infolist()), "NPZ content", max_bytes=max_bytes)
        for info in z.infolist():
            if not info.filename.endswith(".npy"):
                continue
            with z.open(info) as fh:
                try:
                    version = np.lib.format.read_magic(fh)
                    read = np.lib.format.read_array_header_1_0 if version == (1, 0) else \
                        np.lib.format.read_array_header_2_0
                    shape, _, dtype = read(fh)
                except (ValueError, SyntaxError, tokenize.TokenError) as exc:  # numpy parses the header as Python
                    raise InputFormatError(path, None, f"NPZ entry {info.filename!r} has a damaged .npy header "
                                           f"({type(exc).__name__}: {exc})", field=info.filename) from None
            need = math.prod(int(n) for n in shape) * dtype.itemsize
            if need > min(info.file_size, limit):
                raise InputFormatError(path, None, f"NPZ entry {info.filename!r} declares shape {shape} "
                                       f"({need:,d} bytes) but holds {info.file_size:,d} bytes", field=info.filename)


def read_npz(path, kind: str | None = None, max_bytes: int | None = None):
    """Read an orbtool NPZ file; ``kind`` (``"grid"``, ``"pdos"``, ``"projections"``) is checked if given.

    ``max_bytes`` is the memory budget for the archive's declared (uncompressed) content, bytes
    (default ``$ORBTOOL_MAX_BYTES`` or 1 GiB); checked before anything is decompressed."""
    check_regular_file(path)
    try:
        _check_npy_sizes(path, max_bytes)
        with np.load(path, allow_pickle=False) as npz:
            data = {k: npz[k] for k in npz.files}
    except InputFormatError:
        raise
    except (OSError, ValueError, zipfile.BadZipFile, EOFError, KeyError) as exc:
        raise InputFormatError(path, None, f"not a readable NPZ archive ({exc})") from None
    if "orbtool_kind" not in data:
        raise InputFormatError(path, None, "NPZ archive was not written by orbtool (no 'orbtool_kind' entry)")
    found = data["orbtool_kind"]
    if found.ndim != 0 or found.dtype.kind not in "US":
        raise InputFormatError(path, None, f"'orbtool_kind' must be a single string, got {found.dtype} shape "
                               f"{found.shape}", field="orbtool_kind")
    found = str(found)
    version = data.get("orbtool_version", np.array(0))
    if version.ndim != 0 or version.dtype.kind not in "iu":
        raise InputFormatError(path, None, f"'orbtool_version' must be a single integer, got "
                               f"{show_array(version)}", field="orbtool_version")
    version = int(version)
    if version < 0:
        raise InputFormatError(path, None, f"'orbtool_version' must be ≥ 0, got {version}", field="orbtool_version")
    if version > NPZ_VERSION:
        raise InputFormatError(path, None, f"NPZ layout version {version} is newer than this orbtool "
                               f"understands ({NPZ_VERSION})")
    if kind is not None and found != kind:
        raise InputFormatError(path, None, f"this NPZ holds a {found}, not a {kind}", field="orbtool_kind")
    try:
        if found == "grid":
            return grid_from_arrays(data, source=str(path))
        if found == "pdos":
            return _pdos_from(data, str(path))
        if found == "projections":
            return _proj_from(data, str(path))
    except KeyError as exc:
        raise InputFormatError(path, None, f"NPZ entry {exc} missing") from None
    except (TypeError, ValueError, json.JSONDecodeError) as exc:
        if isinstance(exc, InputFormatError):
            raise
        raise InputFormatError(path, None, f"damaged NPZ content ({exc})") from None
    raise InputFormatError(path, None, f"unknown orbtool NPZ kind {found!r}", field="orbtool_kind")


# ------------------------------------------------------------------ text headers
def _header(lines, path, magic: str):
    """Parse ``# key: value`` lines after the magic line; returns (dict, first data line index)."""
    if not lines or not lines[0].startswith(magic):
        raise InputFormatError(path, 1, f"expected the first line to start with {magic!r}")
    parts = lines[0].split()
    if len(parts) > 2 and parts[2].isdigit() and int(parts[2]) > 1:
        raise InputFormatError(path, 1, f"layout version {parts[2]} is newer than this orbtool understands (1)")
    head: dict[str, tuple[str, int]] = {}
    kpts = []
    i = 1
    while i < len(lines) and lines[i].startswith("#"):
        body = lines[i][1:].strip()
        if body.startswith("kpoint "):
            kpts.append((body, i + 1))
        elif ":" in body:
            key, _, val = body.partition(":")
            head[key.strip().lower()] = (val.strip(), i + 1)
        i += 1
    return head, kpts, i


def _need(head, key, path):
    if key not in head:
        raise InputFormatError(path, None, f"header line '# {key}: ...' is missing", field=key)
    return head[key]


_LABEL = re.compile(r"^([A-Z][a-z]?|X)(\d*):([^:\s]+):(up|down)$")


def _fmt(x: float) -> str:
    return repr(float(x))


def write_pdos_text(path, pdos: ProjectedDOS) -> Path:
    """Write a :class:`ProjectedDOS` in orbtool's plain-text PDOS layout (docs/formats.md)."""
    labels = ["energy"]
    cols = [pdos.energies]
    if pdos.total is not None:
        for s in range(pdos.nspin):
            labels.append(f"total:{_SPIN_NAME[s]}")
            cols.append(pdos.total[s])
    for c, v in zip(pdos.channels, pdos.values):
        at = f"{c.element}{c.atom}" if c.atom >= 0 else c.element
        labels.append(f"{at}:{c.orbital}:{_SPIN_NAME[c.spin]}")
        cols.append(v)
    path = Path(path)
    with open(path, "w", encoding="utf-8") as fh:
        fh.write("# orbtool-pdos 1\n")
        fh.write(f"# nspin: {pdos.nspin}\n")
        fh.write(f"# fermi: {'none' if pdos.fermi is None else _fmt(pdos.fermi)}\n")
        fh.write("# units: energy eV, dos states/eV per spin channel\n")
        if pdos.source:
            fh.write(f"# source: {pdos.source}\n")
        fh.write("# columns: " + " ".join(labels) + "\n")
        np.savetxt(fh, np.column_stack(cols), fmt="%.17g")
    return path


def read_pdos_text(path) -> ProjectedDOS:
    """Read orbtool's plain-text PDOS layout (see docs/formats.md)."""
    lines = read_text(path).splitlines()
    head, _, first = _header(lines, path, "# orbtool-pdos")
    nspin_s, ln = _need(head, "nspin", path)
    nspin = to_int(nspin_s, path, ln, "nspin")
    if nspin not in (1, 2):
        raise InputFormatError(path, ln, f"nspin must be 1 or 2, got {nspin}", field="nspin")
    fermi = None
    if "fermi" in head and head["fermi"][0].lower() != "none":
        fermi = to_float(head["fermi"][0], path, head["fermi"][1], "fermi")
    labels_s, ln = _need(head, "columns", path)
    labels = labels_s.split()
    if not labels or labels[0] != "energy":
        raise InputFormatError(path, ln, "the first column must be 'energy'", field="columns")
    seen: dict[str, int] = {}
    for j, lab in enumerate(labels):
        if lab in seen:
            raise InputFormatError(path, ln, f"column {j + 1} {lab!r} repeats column {seen[lab] + 1}; each "
                                   "channel may appear once", field="columns")
        seen[lab] = j
    total = {}
    chans, rows = [], []
    for j, lab in enumerate(labels[1:], start=1):
        if lab.startswith("total:"):
            sp = lab.split(":", 1)[1]
            if sp not in _SPIN:
                raise InputFormatError(path, ln, f"column {j + 1} {lab!r}: spin must be up or down", field="columns")
            total[_SPIN[sp]] = j
            continue
        m = _LABEL.match(lab)
        if m is None:
            raise InputFormatError(path, ln, f"column {j + 1} {lab!r}: expected <Element><atom>:<orbital>:<up|down>",
                                   field="columns")
        el, idx, orb, sp = m.groups()
        if orb != "tot" and orb not in ORBITAL_L:
            raise InputFormatError(path, ln, f"column {j + 1} {lab!r}: unknown orbital {orb!r}", field="columns")
        chans.append(Channel(int(idx) if idx else -1, el, orb, _SPIN[sp]))
        rows.append(j)
    body = [x for x in lines[first:]]
    while body and not body[-1].strip():
        body.pop()
    data = table(body, path, first + 1, len(labels), "PDOS table")
    tot = None
    if total:
        if sorted(total) != list(range(nspin)):
            raise InputFormatError(path, ln, f"total columns {sorted(total)} do not match nspin={nspin}",
                                   field="columns")
        tot = data[:, [total[s] for s in range(nspin)]].T
    check_dos_signs(data, labels, path, first + 1)
    meta = {"format": "orbtool-pdos"}
    atoms = structure_for_channels(path, labels, chans, rows, ln, meta)
    return ProjectedDOS(energies=data[:, 0], values=data[:, rows].T, channels=tuple(chans), total=tot,
                        fermi=fermi, nspin=nspin, atoms=atoms, source=str(path), meta=meta)


def write_projections_text(path, proj: BandProjections) -> Path:
    """Write :class:`BandProjections` in orbtool's plain-text projection layout (docs/formats.md)."""
    ns, nk, nb, na, no = proj.weights.shape
    path = Path(path)
    with open(path, "w", encoding="utf-8") as fh:
        fh.write("# orbtool-projections 1\n")
        for key, val in (("nspin", ns), ("nkpoints", nk), ("nbands", nb), ("natoms", na)):
            fh.write(f"# {key}: {val}\n")
        fh.write(f"# fermi: {'none' if proj.fermi is None else _fmt(proj.fermi)}\n")
        fh.write("# orbitals: " + " ".join(proj.orbitals) + "\n")
        if proj.atoms is not None:
            fh.write("# elements: " + " ".join(proj.atoms.get_chemical_symbols()) + "\n")
        fh.write("# units: energy eV, occupation electrons, weights dimensionless\n")
        for k in range(nk):
            fh.write(f"# kpoint {k + 1}: " + " ".join(_fmt(x) for x in proj.kpoints[k])
                     + f" weight {_fmt(proj.kweights[k])}\n")
        occ = proj.occupations
        fh.write("# columns: spin kpoint band atom energy " + ("occupation " if occ is not None else "")
                 + " ".join(proj.orbitals) + "\n")
        s, k, b, a = np.meshgrid(np.arange(ns), np.arange(nk), np.arange(nb), np.arange(na), indexing="ij")
        cols = [s.ravel(), k.ravel() + 1, b.ravel() + 1, a.ravel(),
                np.broadcast_to(proj.energies[..., None], (ns, nk, nb, na)).ravel()]
        if occ is not None:
            cols.append(np.broadcast_to(occ[..., None], (ns, nk, nb, na)).ravel())
        data = np.column_stack(cols + [proj.weights.reshape(-1, no)])
        fmt = ["%d"] * 4 + ["%.17g"] * (data.shape[1] - 4)
        np.savetxt(fh, data, fmt=fmt)
    return path


def read_projections_text(path) -> BandProjections:
    """Read orbtool's plain-text projection layout (see docs/formats.md)."""
    lines = read_text(path).splitlines()
    head, kpt_lines, first = _header(lines, path, "# orbtool-projections")
    dims = {}
    for key in ("nspin", "nkpoints", "nbands", "natoms"):
        val, ln = _need(head, key, path)
        dims[key] = to_int(val, path, ln, key)
        if dims[key] < 1:
            raise InputFormatError(path, ln, f"{key} must be positive, got {dims[key]}", field=key)
    ns, nk, nb, na = dims["nspin"], dims["nkpoints"], dims["nbands"], dims["natoms"]
    orbitals = tuple(_need(head, "orbitals", path)[0].split())
    cols_s, cln = _need(head, "columns", path)
    cols = cols_s.split()
    want = ["spin", "kpoint", "band", "atom", "energy"]
    has_occ = len(cols) > 5 and cols[5] == "occupation"
    want += (["occupation"] if has_occ else []) + list(orbitals)
    if cols != want:
        raise InputFormatError(path, cln, f"columns must be {' '.join(want)}", field="columns")
    if len(kpt_lines) != nk:
        raise InputFormatError(path, None, f"expected {nk} '# kpoint' lines, found {len(kpt_lines)}", field="kpoint")
    kp = np.empty((nk, 3))
    kw = np.empty(nk)
    for i, (body, ln) in enumerate(kpt_lines):
        m = re.fullmatch(r"kpoint\s+(\d+):\s+(\S+)\s+(\S+)\s+(\S+)\s+weight\s+(\S+)", body)
        if m is None or int(m.group(1)) != i + 1:
            raise InputFormatError(path, ln, f"expected '# kpoint {i + 1}: k1 k2 k3 weight w'", field="kpoint")
        kp[i] = [to_float(m.group(j), path, ln, "k-point") for j in (2, 3, 4)]
        kw[i] = to_float(m.group(5), path, ln, "k-point weight")
    fermi = None
    if "fermi" in head and head["fermi"][0].lower() != "none":
        fermi = to_float(head["fermi"][0], path, head["fermi"][1], "fermi")
    body = lines[first:]
    while body and not body[-1].strip():
        body.pop()
    nrow = ns * nk * nb * na
    if len(body) != nrow:
        raise InputFormatError(path, first + 1, f"expected {nrow} data rows (nspin×nkpoints×nbands×natoms), "
                               f"found {len(body)}", field="rows")
    data = table(body, path, first + 1, len(cols), "projection table")
    idx = data[:, :4].astype(np.int64)
    s, k, b, a = np.meshgrid(np.arange(ns), np.arange(nk) + 1, np.arange(nb) + 1, np.arange(na), indexing="ij")
    expect = np.column_stack([s.ravel(), k.ravel(), b.ravel(), a.ravel()])
    bad = np.flatnonzero((idx != expect).any(axis=1) | (data[:, :4] != idx).any(axis=1))
    if bad.size:
        r = int(bad[0])
        raise InputFormatError(path, first + 1 + r, f"row indices must run spin, kpoint, band, atom in order; "
                               f"expected {' '.join(map(str, expect[r]))}", field="rows")
    shape = (ns, nk, nb, na)
    e = data[:, 4].reshape(shape)
    if not np.all(e == e[..., :1]):
        raise InputFormatError(path, None, "energy must be the same on every atom row of a band", field="energy")
    occ = data[:, 5].reshape(shape)[..., 0] if has_occ else None
    w = data[:, 6 if has_occ else 5:].reshape(shape + (len(orbitals),))
    meta = {"format": "orbtool-projections"}
    if not np.any(w):
        raise InputFormatError(path, first + 1, "every projection weight is zero: the file holds no projections, "
                               "so no state character can be read", field="weights")
    from .._validate import occupation_warning
    occupation_warning(occ, ns, path, meta)
    if "elements" in head:
        meta["elements"] = head["elements"][0].split()
    return BandProjections(kpoints=kp, kweights=kw, energies=e[..., 0], occupations=occ, weights=w,
                           orbitals=orbitals, fermi=fermi, source=str(path), meta=meta)
