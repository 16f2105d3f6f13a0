"""Generate the demo family (MODEL DATA from a supercell sp3 tight-binding calculation).

Run ``python -m orbtool.demo.generate [--out DIR] [--workers N]`` (``make demo-data``).  Writes,
per run folder, POSCAR, DOSCAR.gz, PROCAR.gz, OSZICAR and (defects) PARCHG.gz, then
``family.toml``, ``model_summary.json`` and ``README.md``.  Deterministic: no random numbers,
gzip headers without time stamps.  Only files this script names are written or replaced.
"""

from __future__ import annotations

import argparse
import json
import os
import sys
import time
from concurrent.futures import ProcessPoolExecutor
from multiprocessing import get_context
from pathlib import Path

import numpy as np

from . import scenario as sc
from .report_text import family_toml, readme_text
from .writers import write_chgcar, write_doscar, write_oszicar, write_poscar, write_procar

__all__ = ["main", "generate", "DEFAULT_OUT", "ENERGY_GRID", "SIGMA", "GRID_SHAPE", "select_state_bands"]

DEFAULT_OUT = Path(__file__).resolve().parent / "data"
ENERGY_GRID = np.round(np.arange(-30.0, 0.0 + 1e-9, 0.05), 3)   # common DOS grid, eV
SIGMA = 0.10                                                      # Gaussian broadening, eV
GRID_SHAPE = (40, 40, 40)                                         # PARCHG grid
TAG = "MODEL DATA (orbtool sp3 tight binding, not DFT)"


def select_state_bands(gamma_eps, vbm, cbm, margin=0.02, degeneracy=1e-3):
    """0-based bands of the lowest in-gap level at Γ and its degenerate partners.

    Returns (bands, in_gap) — when no level lies in (vbm + margin, cbm - margin) the band closest to
    mid-gap is returned with ``in_gap=False``.
    """
    e = np.asarray(gamma_eps)
    inside = np.flatnonzero((e > vbm + margin) & (e < cbm - margin))
    if len(inside):
        lo = e[inside[0]]
        return [int(b) for b in np.flatnonzero(np.abs(e - lo) < degeneracy)], True
    b = int(np.argmin(np.abs(e - 0.5 * (vbm + cbm))))
    return [b], False


def _edges(res):
    nocc = res.nelect // 2
    return float(res.full_eps[:, nocc - 1].max()), float(res.full_eps[:, nocc].min())


def _write_common(folder: Path, res, label: str):
    folder.mkdir(parents=True, exist_ok=True)
    write_poscar(folder / "POSCAR", res.atoms, f"{TAG} | {label}")
    write_doscar(folder / "DOSCAR.gz", res.atoms, res.full_eps,
                 np.full(len(res.full_eps), 1 / len(res.full_eps)), res.full_proj, ENERGY_GRID, SIGMA,
                 res.fermi, f"{TAG} {label}")
    write_procar(folder / "PROCAR.gz", res.kpoints, res.kweights, res.eps, res.occ, res.proj)
    write_oszicar(folder / "OSZICAR", res.history)


def run_host(i: int, out: str) -> dict:
    """Worker: compute and write host ``HOSTS[i]``; return its summary."""
    spec = sc.HOSTS[i]
    model, res = sc.compute_host(spec)
    vbm, cbm = _edges(res)
    _write_common(Path(out) / "hosts" / spec.name, res, f"{spec.note}, perfect 64-atom cell")
    return dict(name=spec.name, repulsion=model.repulsion, vbm=vbm, cbm=cbm, fermi=res.fermi,
                energies=res.energies, nelect=res.nelect, nbands=res.nbands, path=f"hosts/{spec.name}")


def run_defect(i: int, out: str, repulsion: float, vbm: float, cbm: float) -> dict:
    """Worker: compute and write defect ``CASES[i]``; return its summary."""
    from .density import slater_exponent, state_density
    case = sc.CASES[i]
    model = sc.Model(case.host, repulsion)
    host = sc.build_host(case.host)
    res = sc.compute_defect(case, model, host)
    folder = Path(out) / "defects" / case.folder
    label = f"{case.host.note}, {case.defect} q={case.charge:+d}, {case.variant} (breathing {res.breathing:+.4f})"
    _write_common(folder, res, label)
    ig = int(np.flatnonzero(np.all(np.abs(res.kpoints) < 1e-12, axis=1))[0])
    bands, in_gap = select_state_bands(res.eps[ig], vbm, cbm)
    nat = len(res.atoms)
    coeffs = res.gamma_vectors[:, bands].reshape(nat, 4, len(bands))
    rho, raw = state_density(res.atoms, coeffs, GRID_SHAPE)
    zs = ", ".join(f"{el} n*={slater_exponent(el)[0]:.1f} zeta={slater_exponent(el)[1]:.4f}/A"
                   for el in sorted(set(res.atoms.get_chemical_symbols())))
    write_chgcar(folder / "PARCHG.gz", res.atoms, rho,
                 f"{TAG} | in-gap state, Gamma, band(s) {' '.join(str(b + 1) for b in bands)}, "
                 f"2 e per band | Slater orbitals {zs}")
    shell = res.shell
    return dict(name=case.name, path=f"defects/{case.folder}", host=case.host.name, charge=case.charge,
                removed=case.removed, kind=case.kind, defect=case.defect, variant=case.variant,
                breathing=res.breathing, relaxed=case.breathing is None, energies=res.energies,
                nelect=res.nelect, nbands=res.nbands, fermi=res.fermi,
                state_bands=[b + 1 for b in bands], state_energy_gamma=float(res.eps[ig, bands[0]]),
                state_occupation_gamma=float(res.occ[ig, bands[0]]), state_in_gap=in_gap,
                state_raw_integral=raw, site=[float(v) for v in res.site],
                first_shell=[int(s) for s in shell], ionic_steps=len(res.history))


def generate(out=DEFAULT_OUT, workers: int = 2, log=print) -> dict:
    """Compute every run and write the family into ``out``; returns the summary dict."""
    out = Path(out)
    out.mkdir(parents=True, exist_ok=True)
    t0 = time.perf_counter()
    # single-threaded BLAS in the workers: small matrices, shared cores (set before they import numpy)
    for var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
        os.environ.setdefault(var, "1")
    with ProcessPoolExecutor(max_workers=max(1, workers), mp_context=get_context("spawn")) as pool:
        hosts = list(pool.map(run_host, range(len(sc.HOSTS)), [str(out)] * len(sc.HOSTS)))
        log(f"hosts done ({time.perf_counter() - t0:.1f} s)")
        by_name = {h["name"]: h for h in hosts}
        futs = [pool.submit(run_defect, i, str(out), by_name[c.host.name]["repulsion"],
                            by_name[c.host.name]["vbm"], by_name[c.host.name]["cbm"])
                for i, c in enumerate(sc.CASES)]
        cases = [f.result() for f in futs]
    log(f"defects done ({time.perf_counter() - t0:.1f} s)")
    summary = dict(tag=TAG, hosts=hosts, cases=cases, energy_grid=[float(ENERGY_GRID[0]), float(ENERGY_GRID[-1]),
                                                                    len(ENERGY_GRID)],
                   sigma=SIGMA, grid_shape=list(GRID_SHAPE), kgrid=list(sc.KGRID), kT=sc.KT,
                   eps_model=sc.EPS_MODEL, second_scale=sc.SECOND_SCALE, repulsion_power=sc.REPULSION_POWER)
    (out / "model_summary.json").write_text(json.dumps(summary, indent=1, sort_keys=True) + "\n")
    (out / "family.toml").write_text(family_toml(summary))
    (out / "README.md").write_text(readme_text(summary))
    log(f"wrote {out} ({time.perf_counter() - t0:.1f} s)")
    return summary


def main(argv=None) -> int:
    p = argparse.ArgumentParser(prog="python -m orbtool.demo.generate",
                                description="Compute the demo family (model tight-binding data) and write it.")
    p.add_argument("--out", default=str(DEFAULT_OUT), help="output folder (default: the package's demo/data)")
    p.add_argument("--workers", type=int, default=2, help="worker processes (default 2)")
    a = p.parse_args(argv)
    out = Path(a.out)
    if out.exists() and not out.is_dir():
        print(f"error: --out {out} exists and is not a folder; expected a folder to write the demo family into",
              file=sys.stderr)
        return 2
    if a.workers < 1:
        print(f"error: --workers {a.workers}: expected a positive number of worker processes", file=sys.stderr)
        return 2
    generate(out, a.workers)
    return 0


if __name__ == "__main__":
    sys.exit(main())
