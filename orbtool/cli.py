"""The ``orbtool`` command line.

Verbs: ``inspect`` (what a file holds), ``analyze`` (a family manifest →
table, fit, figures, report), ``fit`` (the shared model fit only), ``demo``
(the bundled demo family). Exit codes: 0 success, 1 an orbtool error in the
input or analysis (message without traceback unless ``--debug``), 2 usage.
"""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path

from .errors import OrbtoolError

__all__ = ["main", "build_parser"]


def _what(path: Path):
    """(kind, format name) of a file, trying orbtool's registry and then ASE."""
    from .io.assemble import _classify
    from .io.registry import guess_format
    if path.is_dir():
        for kind in ("pdos",):
            try:
                return kind, guess_format(path, kind).name
            except OrbtoolError:
                pass
        return None
    label = _classify(path)
    if label is None:
        return None
    if label.startswith("npz:"):
        return label[4:], "npz"
    if label.startswith("ase:"):
        return "structure", label
    if label == "band-edges":
        return "band-edges", "band-structure JSON"
    if label in ("poscar", "vasprun"):
        return "structure", label
    for kind in ("grid", "projections", "pdos", "energy"):
        try:
            return kind, guess_format(path, kind).name
        except OrbtoolError:
            continue
    return None


_WHAT = {"grid": "volumetric data (grid)", "projections": "band-resolved projections (energies, occupations, "
         "weights per atom and orbital)", "pdos": "projected density of states", "structure": "a structure",
         "energy": "a total energy", "band-edges": "the host's true band edges (band-structure file)"}


def _inspect(args) -> int:
    path = Path(args.file)
    if not path.exists():
        raise OrbtoolError(f"{path}: no such file or folder")
    if not path.is_dir():  # a FIFO or a device (/dev/zero) is refused before anything opens it
        from .io._files import check_regular_file
        check_regular_file(path)
    info: dict = {"file": str(path)}
    found = _what(path)
    if found is None:
        raise OrbtoolError(f"{path}: not a file format orbtool recognises "
                           "(grids: cube, XSF, CHGCAR family, NPZ; PDOS: DOSCAR, projwfc-style, per-kind pdos, "
                           "orbtool text, NPZ; projections: PROCAR, orbtool text, NPZ; structures: anything ASE "
                           "reads; band edges: band-structure JSON)")
    kind, fmt = found
    info.update(kind=kind, format=fmt, holds=_WHAT[kind])
    import orbtool
    if kind == "grid":
        grids = orbtool.read_grids(path, format=None if fmt == "npz" else fmt, units=args.units)
        info["grids"] = [{"name": g.name, "shape": list(g.shape), "unit": g.unit, "volume_A3": g.volume,
                          "integral": g.integrate(square=g.unit == "Å^-3/2"), "min": float(g.values.min()),
                          "max": float(g.values.max()),
                          "quantity": g.meta.get("quantity"), "unit_convention": g.meta.get("unit_convention"),
                          "unit_convention_reason": g.meta.get("unit_convention_reason"),
                          "atoms": None if g.atoms is None else g.atoms.get_chemical_formula()} for g in grids]
    elif kind == "pdos":
        p = orbtool.read_pdos(path, format=None if fmt == "npz" else fmt)
        info.update(energy_range_eV=[float(p.energies[0]), float(p.energies[-1])], points=int(p.energies.size),
                    nspin=p.nspin, channels=len(p.channels), resolution=p.orbital_resolution(),
                    atoms=len(p.atom_indices), fermi_eV=p.fermi)
    elif kind == "projections":
        b = orbtool.read_projections(path, format=None if fmt == "npz" else fmt)
        info.update(nspin=b.nspin, kpoints=b.nkpoints, bands=b.nbands, atoms=b.natoms, orbitals=list(b.orbitals),
                    has_occupations=b.occupations is not None, fermi_eV=b.fermi,
                    energy_range_eV=[float(b.energies.min()), float(b.energies.max())])
    elif kind == "structure":
        a = orbtool.read_structure(path)
        info.update(atoms=len(a), formula=a.get_chemical_formula(), volume_A3=float(a.get_volume()))
        calc = getattr(a, "calc", None)
        from .io.calculator import offers_eigenvalues, projections_from_calculator
        if calc is not None and offers_eigenvalues(calc):
            try:
                b = projections_from_calculator(calc, a, source=str(path))
                info.update(engine_output=True, kpoints=b.nkpoints, bands=b.nbands, nspin=b.nspin, fermi_eV=b.fermi,
                            has_occupations=b.occupations is not None)
            except OrbtoolError:
                pass
    elif kind == "band-edges":
        from .io.edges import read_band_edges
        e = read_band_edges(path)
        info.update({k: e[k] for k in ("vbm", "cbm", "gap", "gamma_vbm", "gamma_cbm") if k in e})
    else:
        from .io import read_energy
        info.update(total_energy_eV=read_energy(path))
    if args.json:
        print(json.dumps(info, indent=1))
    else:
        print(f"{info.pop('file')}: {info.pop('kind')} data, format {info.pop('format')} — {info.pop('holds')}")
        for k, v in info.items():
            if k == "grids":
                for g in v:
                    shape = "x".join(map(str, g["shape"]))
                    print(f"  grid {g['name'] or '(unnamed)'}: {shape} points, unit {g['unit']}, "
                          f"cell {g['volume_A3']:.3f} Å^3, integral {g['integral']:.6g}, "
                          f"range [{g['min']:.4g}, {g['max']:.4g}]" + (f", atoms {g['atoms']}" if g["atoms"] else ""))
                    if g.get("unit_convention_reason"):
                        print(f"    units: {g['unit_convention']} — {g['unit_convention_reason']}")
            else:
                print(f"  {k:<16} {v}")
    return 0


#: seconds to wait for a dask scheduler named by --scheduler before giving up
SCHEDULER_TIMEOUT = 10


def _connect(address: str):
    """A dask Client for ``address``, or a clear OrbtoolError within SCHEDULER_TIMEOUT seconds."""
    try:
        from dask.distributed import Client
    except ImportError:
        raise OrbtoolError("--scheduler needs dask.distributed (pip install 'dask[distributed]')") from None
    try:
        return Client(address, timeout=SCHEDULER_TIMEOUT)
    except (OSError, TimeoutError, ValueError, TypeError) as exc:
        raise OrbtoolError(f"--scheduler {address!r}: cannot reach a dask scheduler within {SCHEDULER_TIMEOUT} s "
                           f"({type(exc).__name__}: {exc}); check the address (tcp://host:port) and that the "
                           "scheduler runs") from None


def _analyze(args) -> int:
    from .pipeline import run_analysis
    client = _connect(args.scheduler) if args.scheduler else None
    try:
        run_analysis(args.manifest, args.out, force=args.force, workers=args.workers, scheduler=client,
                     figures=not args.no_figures, quiet=args.quiet)
    finally:
        if client is not None:
            client.close()
    return 0


def _fit(args) -> int:
    from .pipeline import run_fit
    target = Path(args.json) if args.json else None
    if target is not None and (target.is_dir() or not target.parent.is_dir()):  # before the slow part
        what = "is a folder" if target.is_dir() else "is in a folder that does not exist"
        raise OrbtoolError(f"--json {target}: {what}; give a file name such as fit.json")
    result = run_fit(args.manifest, workers=args.workers, quiet=args.quiet)
    print(result.summary())
    if target is not None:
        from .outputs import atomic_write
        atomic_write(target, json.dumps(result.to_dict(), indent=1, default=float))
    return 0


def _demo(args) -> int:
    from .pipeline import demo_manifest, run_analysis
    out = args.out or "orbtool-demo-output"
    run_analysis(demo_manifest(), out, force=args.force, workers=args.workers, figures=True, quiet=args.quiet,
                 demo=True)
    return 0


def build_parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(prog="orbtool", description="Why is this vacancy level deep? Read DFT outputs, "
                                "characterise the in-gap state, fit a dangling-orbital tight-binding model.")
    p.add_argument("--debug", action="store_true", help="show full tracebacks on errors")
    from . import __version__
    p.add_argument("--version", action="version", version=f"orbtool {__version__}")
    sub = p.add_subparsers(dest="verb", metavar="VERB")
    sub.required = True

    s = sub.add_parser("inspect", help="say what a grid / DOS / projection / structure file holds")
    s.add_argument("file", help="file (or folder for per-atom PDOS files)")
    s.add_argument("--json", action="store_true", help="print machine-readable JSON")
    s.add_argument("--units", choices=("auto", "bohr", "angstrom"), default="auto",
                   help="value convention of cube files: atomic units (the format's), per-Å³ values (ASE's "
                        "writer), or decide from the data (default)")
    s.set_defaults(func=_inspect)

    def common(sp):
        sp.add_argument("--workers", type=int, default=None, help="parallel processes (default: number of cores)")
        sp.add_argument("--quiet", action="store_true", help="no progress bars")

    s = sub.add_parser("analyze", help="analyse a family manifest: table, shared fit, figures, HTML report")
    s.add_argument("manifest", help="family manifest (TOML, see docs/manifest.md)")
    s.add_argument("--out", required=True, help="output folder (created; never emptied)")
    s.add_argument("--force", action="store_true", help="write into a non-empty folder orbtool did not create")
    s.add_argument("--scheduler", default=None, help="dask.distributed scheduler address (optional)")
    s.add_argument("--no-figures", action="store_true", help="skip static figures (faster)")
    common(s)
    s.set_defaults(func=_analyze)

    s = sub.add_parser("fit", help="fit the shared dangling-orbital model across a family and print it")
    s.add_argument("manifest", help="family manifest (TOML)")
    s.add_argument("--json", default=None, metavar="FILE", help="also write the fit as JSON to FILE")
    common(s)
    s.set_defaults(func=_fit)

    s = sub.add_parser("demo", help="run the whole pipeline on the bundled demo family (model data)")
    s.add_argument("--out", default=None, help="output folder (default: ./orbtool-demo-output)")
    s.add_argument("--force", action="store_true", help="write into a non-empty folder orbtool did not create")
    common(s)
    s.set_defaults(func=_demo)
    return p


def main(argv=None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    try:
        return args.func(args)
    except OrbtoolError as exc:
        if args.debug:
            raise
        print(f"orbtool: error: {exc}", file=sys.stderr)
        return 1
    except KeyboardInterrupt:
        print("orbtool: interrupted", file=sys.stderr)
        return 1


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
