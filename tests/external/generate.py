"""Generate the external-engine fixtures under ``tests/external/data/``.

The engine is pyscf (registry package, Kohn–Sham DFT on Gaussian basis sets);
orbtool never touches the numbers it produces except to store them in
orbtool's own file formats. Scenario: an anion vacancy (an F-centre-like
state) in a small rocksalt cluster.

* ``host``      Li14F13⁺, a 3×3×3 rocksalt cube centred on F (closed shell, RKS).
* ``vac``       Li14F12⁺: the central F removed; its charge leaves one electron
                in the vacancy (doublet, UKS).
* ``vac_out5``  ``vac`` with the six first-shell Li moved radially out by 5 %.
* ``vac_in5``   ``vac`` with the six first-shell Li moved radially in by 5 %.
* ``vac_na``    ``vac`` with the six first-shell Li swapped for Na (cation swap).
* ``host_na``   ``host`` with the same six Li swapped for Na (the pristine cluster of the swap).

The clusters sit in a cubic box (an ``ase.Atoms`` with a cell and
``pbc=False``) so that readers see a periodic-looking geometry; the cube
files span exactly that box, so grid cell = structure cell.

Every case folder gets:

* ``POSCAR``                structure (ASE's VASP writer, Cartesian Å),
* ``projections.proj.txt.gz``  orbtool BandProjections (plain text): every MO
                            (Γ only, weight 1), energies eV, occupations, Löwdin
                            weights per atom and real spherical harmonic (s, py, pz, px),
* ``pdos.pdos.txt.gz``      orbtool ProjectedDOS (plain text): Löwdin-projected,
                            l-resolved, Gaussian broadened (σ in ``engine.json``),
* ``engine.json``           engine version, basis, functional, charge, spin,
                            total energy, MO energies of interest, timing,
* ``state.cube``            the in-gap orbital (``vac`` only, to keep the fixtures small),
* ``total/density.cube.gz`` total electron density (``host`` and ``vac``; all
                            electrons, so its grid sum is NOT the electron count:
                            1s cores are far narrower than the 0.19 Å spacing).

Run ``python tests/external/generate.py`` (all cases: about one CPU-minute per
case on two idle cores, ``vac_na`` longer; several times that on a busy
machine) or ``--only host`` etc.; ``--out DIR`` writes elsewhere, ``--chk DIR``
keeps pyscf checkpoints to restart from.
"""

from __future__ import annotations

import argparse
import gzip
import json
import shutil
import sys
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
DATA = HERE / "data"

#: Li–F nearest-neighbour distance, Å: half the LiF lattice constant a = 4.03 Å
#: (room-temperature value, e.g. Wyckoff, *Crystal Structures* vol. 1 — from memory).
D_NN = 2.015
#: cubic box edge, Å (cluster centred; ≈ 4 Å of vacuum beyond the outer atoms)
BOX = 12.0
#: cube points per axis (0.1875 Å spacing: the in-gap orbital's |ψ|² sums to
#: 1.016 / 0.992 / 0.998 on 48 / 56 / 64 points, measured with this generator)
NGRID = 64
BASIS = "3-21g"
XC = "lda,vwn"
GRID_LEVEL = 1
CONV_TOL = 1e-9
#: PDOS energy grid (eV) and Gaussian broadening σ (eV)
#: (covers Li 1s ≈ −51 eV, F 2s, F 2p, the gap and the lowest empty states)
PDOS_WINDOW = (-60.0, 20.0)
PDOS_STEP = 0.1
PDOS_SIGMA = 0.15

CASES = {
    "host": dict(vacancy=False, breathe=0.0, swap=None, charge=1, spin=0, cubes=("density",)),
    "vac": dict(vacancy=True, breathe=0.0, swap=None, charge=1, spin=1, cubes=("state", "density")),
    "vac_out5": dict(vacancy=True, breathe=+0.05, swap=None, charge=1, spin=1, cubes=()),
    "vac_in5": dict(vacancy=True, breathe=-0.05, swap=None, charge=1, spin=1, cubes=()),
    "vac_na": dict(vacancy=True, breathe=0.0, swap="Na", charge=1, spin=1, cubes=()),
    # the pristine cluster the swap makes (its gap is what a swap prediction is given: host_gap)
    "host_na": dict(vacancy=False, breathe=0.0, swap="Na", charge=1, spin=0, cubes=()),
    # a covalent, tetrahedral site: Si(SiH3)4 and the Si vacancy left in it (four SiH3 groups
    # whose dangling hybrids point at the empty site, the defect molecule of Coulson & Kearsley);
    # charge +2 leaves the a1 combination doubly occupied and the t2 set empty (closed shell)
    "si_host": dict(family="si", vacancy=False, breathe=0.0, swap=None, charge=0, spin=0, cubes=()),
    "si_vac": dict(family="si", vacancy=True, breathe=0.0, swap=None, charge=2, spin=0, cubes=(), state="lumo"),
    "si_vac_out5": dict(family="si", vacancy=True, breathe=+0.05, swap=None, charge=2, spin=0, cubes=(),
                        state="lumo"),
    "si_vac_in5": dict(family="si", vacancy=True, breathe=-0.05, swap=None, charge=2, spin=0, cubes=(),
                       state="lumo"),
}
#: host run of each defect case
HOST_OF = {c: ("si_host" if c.startswith("si_") else "host") for c in CASES}
#: Si–Si bond of diamond Si (a = 5.431 Å, d = a√3/4) and a typical Si–H bond, Å (from memory)
D_SISI = 2.3517
D_SIH = 1.48
#: the cases CI regenerates: the smallest of each family (closed shells)
SMALLEST = ("si_vac", "host")
#: orbital columns written, in orbtool's order (m = -l..l)
ORBITALS = ("s", "py", "pz", "px")


def build_cluster(case: str):
    """The cluster of ``case`` as ``ase.Atoms`` in its box.

    Returns
    -------
    atoms : ase.Atoms
        Positions Å, cubic cell of edge :data:`BOX`, ``pbc=False``.
    removed : int or None
        Index in the ``host`` cluster of the atom removed (None for the host).
    """
    from ase import Atoms

    spec = CASES[case]
    if spec.get("family") == "si":
        return _silicon_cluster(spec)
    idx = np.array([(i, j, k) for i in range(3) for j in range(3) for k in range(3)])
    rel = (idx - 1) * D_NN
    # sites with odd i+j+k carry F, so the centre (1,1,1) is an anion site
    symbols = np.where(idx.sum(axis=1) % 2 == 1, "F", "Li")
    centre = int(np.flatnonzero((idx == 1).all(axis=1))[0])
    first = np.flatnonzero(np.isclose(np.linalg.norm(rel, axis=1), D_NN))
    rel = rel.copy()
    rel[first] *= 1.0 + spec["breathe"]
    if spec["swap"]:
        symbols = symbols.astype(object)
        symbols[first] = spec["swap"]
    keep = np.ones(len(rel), bool)
    removed = None
    if spec["vacancy"]:
        keep[centre] = False
        removed = centre
    atoms = Atoms(symbols=list(symbols[keep]), positions=rel[keep] + BOX / 2, cell=np.eye(3) * BOX, pbc=False)
    return atoms, removed


def _silicon_cluster(spec):
    """Si(SiH3)4 on diamond-lattice bond directions; the vacancy removes the central Si (index 0)
    and the breathing moves the four SiH3 groups rigidly along their bonds."""
    from ase import Atoms
    t = np.array([[1, 1, 1], [1, -1, -1], [-1, 1, -1], [-1, -1, 1]]) / np.sqrt(3.0)
    symbols, pos = ["Si"], [np.zeros(3)]
    for i in range(4):
        si = t[i] * D_SISI * (1.0 + spec["breathe"])
        symbols.append("Si")
        pos.append(si)
        for j in range(4):
            if j != i:  # the Si's other three diamond bonds, capped with H
                symbols.append("H")
                pos.append(si - t[j] * D_SIH)
    pos = np.array(pos) + BOX / 2
    keep = slice(1, None) if spec["vacancy"] else slice(None)
    atoms = Atoms(symbols=symbols[keep], positions=pos[keep], cell=np.eye(3) * BOX, pbc=False)
    return atoms, (0 if spec["vacancy"] else None)


def _mol(atoms, charge, spin):
    from pyscf import gto
    return gto.M(atom=[(s, tuple(p)) for s, p in zip(atoms.get_chemical_symbols(), atoms.get_positions())],
                 unit="Angstrom", basis=BASIS, charge=charge, spin=spin, verbose=0)


def run_scf(atoms, charge: int, spin: int, chkfile: Path | None = None, guess: Path | None = None):
    """Kohn–Sham SCF of the cluster (RKS for closed shells, UKS otherwise).

    ``chkfile``: a pyscf checkpoint to start from (if it exists) and to
    update; ``guess``: another case's checkpoint to start from otherwise
    (pyscf projects its density onto this molecule). Restart aids only: the
    converged result does not depend on them.
    """
    from pyscf import dft
    mol = _mol(atoms, charge, spin)
    mf = dft.UKS(mol) if spin else dft.RKS(mol)
    mf.xc = XC
    mf.grids.level = GRID_LEVEL
    mf.conv_tol = CONV_TOL
    dm0 = None
    if chkfile is not None:
        start = chkfile if Path(chkfile).exists() else guess if guess is not None and Path(guess).exists() else None
        if start is not None:
            dm0 = mf.from_chk(str(start))
        mf.chkfile = str(chkfile)
    mf.kernel(dm0)
    if not mf.converged:
        raise RuntimeError("SCF did not converge")
    return mf


def _spin_arrays(mf):
    """MO energies (Ha), occupations and coefficients as (nspin, ...) arrays."""
    e, o, c = np.asarray(mf.mo_energy), np.asarray(mf.mo_occ), np.asarray(mf.mo_coeff)
    if e.ndim == 1:
        e, o, c = e[None], o[None], c[None]
    return e, o, c


def lowdin_weights(mf) -> np.ndarray:
    """Löwdin weights |(S^½ C)_μi|² summed per atom and orbital column.

    P.-O. Löwdin, J. Chem. Phys. 18, 365 (1950): symmetric orthogonalisation;
    the weights of each MO are non-negative and sum to 1.

    Returns
    -------
    ndarray, shape (nspin, 1, nmo, natom, len(ORBITALS))
    """
    mol = mf.mol
    s = mol.intor_symmetric("int1e_ovlp")
    val, vec = np.linalg.eigh(s)
    s_half = (vec * np.sqrt(val)) @ vec.T
    _, _, c = _spin_arrays(mf)
    w = np.einsum("mn,sni->smi", s_half, c) ** 2  # (nspin, nao, nmo)
    labels = mol.ao_labels(fmt=False)
    col = np.empty(len(labels), int)
    for mu, (atom, _sym, nl, m) in enumerate(labels):
        name = "s" if nl.endswith("s") else "p" + m if nl.endswith("p") else None
        if name not in ORBITALS:
            raise ValueError(f"AO {nl}{m} on atom {atom} has no orbtool column; extend ORBITALS")
        col[mu] = atom * len(ORBITALS) + ORBITALS.index(name)
    onehot = np.zeros((len(labels), mol.natm * len(ORBITALS)))
    onehot[np.arange(len(labels)), col] = 1.0
    out = np.einsum("smi,mc->sic", w, onehot).reshape(w.shape[0], w.shape[2], mol.natm, len(ORBITALS))
    return out[:, None]


def make_projections(mf, atoms, weights, meta):
    from pyscf.data.nist import HARTREE2EV as HARTREE_TO_EV

    from orbtool.spectra import BandProjections
    e, o, _ = _spin_arrays(mf)
    ev = e * HARTREE_TO_EV
    return BandProjections(kpoints=np.zeros((1, 3)), kweights=np.ones(1), energies=ev[:, None, :],
                           occupations=o[:, None, :], weights=weights, orbitals=ORBITALS, atoms=atoms,
                           fermi=float(ev[o > 0].max()), meta=meta)


def make_pdos(proj, meta):
    """Gaussian-broadened Löwdin PDOS, l-resolved (s, p) per atom and spin.

    A spin-restricted run gives nspin = 1 channels that hold both spins
    (factor 2), as :class:`orbtool.spectra.ProjectedDOS` documents.
    """
    from orbtool.spectra import ProjectedDOS
    grid = np.round(np.arange(PDOS_WINDOW[0], PDOS_WINDOW[1] + PDOS_STEP / 2, PDOS_STEP), 9)
    nspin = proj.nspin
    degeneracy = 2.0 if nspin == 1 else 1.0
    g = np.exp(-0.5 * ((grid[None, None, :] - proj.energies[:, 0, :, None]) / PDOS_SIGMA) ** 2)
    g *= degeneracy / (PDOS_SIGMA * np.sqrt(2 * np.pi))  # (nspin, nmo, nE), states/eV
    ls = proj.orbital_ls()
    w = proj.weights[:, 0]
    wl = np.stack([w[..., ls == lv].sum(axis=-1) for lv in (0, 1)], axis=-1)  # (s, i, a, l)
    vals = np.einsum("sie,sial->sale", g, wl)  # (nspin, natom, 2, nE)
    symbols = proj.atoms.get_chemical_symbols()
    channels, rows = [], []
    for s in range(nspin):
        for a, el in enumerate(symbols):
            for li, name in enumerate("sp"):
                channels.append((a, el, name, s))
                rows.append(vals[s, a, li])
    total = g.sum(axis=1)
    return ProjectedDOS(energies=grid, values=np.array(rows), channels=tuple(channels), total=total,
                        fermi=proj.fermi, nspin=nspin, atoms=proj.atoms,
                        meta=dict(meta, broadening_sigma_eV=PDOS_SIGMA, projection="Löwdin"))


def in_gap_orbital(mf, which: str = "homo"):
    """(spin, index) of the vacancy orbital: the highest occupied MO (the singly
    occupied F-centre orbital, majority spin) or, with ``which="lumo"``, the
    lowest empty one (the first of the Si vacancy's empty t2 set; the a1
    combination below it falls among the host's occupied states)."""
    e, o, _ = _spin_arrays(mf)
    s = 0
    if which == "lumo":
        return s, int(np.flatnonzero(o[s] == 0).min())
    return s, int(np.flatnonzero(o[s] > 0).max())


def _cube(mol):
    from pyscf.lib.parameters import BOHR
    from pyscf.tools import cubegen
    # the box is the structure's cell: n points spaced BOX/n; pyscf's mesh
    # includes both end points, so its extent is BOX (n-1)/n
    extent = np.full(3, BOX * (NGRID - 1) / NGRID / BOHR)
    return cubegen.Cube(mol, NGRID, NGRID, NGRID, origin=np.zeros(3), extent=extent)


def write_cubes(mf, folder: Path, which, state: str = "homo") -> dict:
    """Write the in-gap orbital and/or total density with pyscf.tools.cubegen."""
    from pyscf.dft import numint
    mol = mf.mol
    cc = _cube(mol)
    coords = cc.get_coords()
    info = {}
    voxel = np.prod(np.diag(cc.box)) / np.prod([cc.nx - 1, cc.ny - 1, cc.nz - 1])  # Bohr³
    if "state" in which:
        s, i = in_gap_orbital(mf, state)
        _, _, c = _spin_arrays(mf)
        coeff = c[s][:, i].copy()
        ao = numint.eval_ao(mol, coords)
        psi = ao @ coeff
        if psi[np.argmax(np.abs(psi))] < 0:  # fix the arbitrary sign so reruns compare
            psi = -psi
        cc.write(psi.reshape(cc.nx, cc.ny, cc.nz), str(folder / "state.cube"),
                 comment=f"in-gap orbital spin {s} index {i} (pyscf {XC}/{BASIS})")
        info["state_norm_on_grid"] = float((psi ** 2).sum() * voxel)
    if "density" in which:
        dm = mf.make_rdm1()
        if np.asarray(dm).ndim == 3:
            dm = dm[0] + dm[1]
        # kept in a subfolder: a case folder holds the in-gap state grid only, so
        # that the folder scan cannot mistake the total density for the state
        (folder / "total").mkdir(exist_ok=True)
        path = folder / "total" / "density.cube"
        rho = numint.eval_rho(mol, numint.eval_ao(mol, coords), dm)
        cc.write(rho.reshape(cc.nx, cc.ny, cc.nz), str(path), comment=f"total density (pyscf {XC}/{BASIS})")
        info["density_on_grid"] = float(rho.sum() * voxel)
        _gzip(path)
    return info


def generate(case: str, out: Path = DATA, cubes: bool = True, chkdir: Path | None = None) -> dict:
    """Run one case and write its folder under ``out``; returns the JSON record."""
    import ase.io
    import pyscf
    from pyscf.data.nist import HARTREE2EV as HARTREE_TO_EV

    spec = CASES[case]
    atoms, removed = build_cluster(case)
    folder = out / case
    folder.mkdir(parents=True, exist_ok=True)
    t0 = time.perf_counter()
    chk = guess = None
    if chkdir is not None:
        chk = Path(chkdir) / f"{case}.chk"
        guess = Path(chkdir) / ((("si_" if spec.get("family") == "si" else "") + "vac.chk") if spec["vacancy"]
                                else HOST_OF.get(case, case) + ".chk")
    mf = run_scf(atoms, spec["charge"], spec["spin"], chk, guess)
    t_scf = time.perf_counter() - t0
    e, o, _ = _spin_arrays(mf)
    meta = dict(engine="pyscf", engine_version=pyscf.__version__, basis=BASIS, xc=XC, case=case)
    weights = lowdin_weights(mf)
    proj = make_projections(mf, atoms, weights, meta)
    pdos = make_pdos(proj, meta)
    ase.io.write(folder / "POSCAR", atoms, format="vasp", direct=False, sort=False)
    write_spectra(folder, proj, pdos)
    t1 = time.perf_counter()
    info = write_cubes(mf, folder, spec["cubes"] if cubes else (), spec.get("state", "homo"))
    t_cube = time.perf_counter() - t1
    homo = [float(e[s][o[s] > 0].max() * HARTREE_TO_EV) for s in range(e.shape[0])]
    lumo = [float(e[s][o[s] == 0].min() * HARTREE_TO_EV) for s in range(e.shape[0])]
    record = dict(meta, charge=spec["charge"], spin_2S=spec["spin"], breathe=spec["breathe"],
                  swap=spec["swap"], box_A=BOX, ngrid=NGRID, grid_level=GRID_LEVEL, conv_tol=CONV_TOL,
                  d_nn_A=D_NN, pdos_sigma_eV=PDOS_SIGMA, pdos_window_eV=PDOS_WINDOW, pdos_step_eV=PDOS_STEP,
                  projection="Löwdin (symmetric orthogonalisation of the AO basis)",
                  n_electrons=int(mf.mol.nelectron), natoms=len(atoms),
                  formula=atoms.get_chemical_formula(), removed_host_index=removed,
                  total_energy_eV=float(mf.e_tot * HARTREE_TO_EV), homo_eV=homo, lumo_eV=lumo,
                  timing_scf_s=round(t_scf, 1), timing_cubes_s=round(t_cube, 1), **info)
    if spec["vacancy"]:
        s, i = in_gap_orbital(mf, spec.get("state", "homo"))
        record.update(state_spin=s, state_index=i, state_energy_eV=float(e[s][i] * HARTREE_TO_EV),
                      state_occupation=float(o[s][i]),
                      state_lowdin_atoms=weights[s, 0, i].sum(axis=1).round(5).tolist())
    (folder / "engine.json").write_text(json.dumps(record, indent=1) + "\n")
    return record


def _gzip(path: Path) -> Path:
    """Compress ``path`` to ``path.gz`` (the readers open it transparently) and remove it."""
    out = path.with_name(path.name + ".gz")
    with open(path, "rb") as src, gzip.open(out, "wb", compresslevel=9) as dst:
        shutil.copyfileobj(src, dst)
    path.unlink()
    return out


def write_spectra(folder: Path, proj, pdos) -> None:
    """Projections and PDOS in orbtool's plain-text layouts (``orbtool.io`` writers), gzipped.

    Numbers are rounded first (energies to 1 µeV, Löwdin weights to 1e-6,
    PDOS to 1e-5 states/eV) so the committed text stays small; the exact
    engine values of the quantities the tests compare are in ``engine.json``.
    """
    from dataclasses import replace

    from orbtool.io import write_pdos, write_projections
    proj = replace(proj, energies=np.round(proj.energies, 6), weights=np.round(proj.weights, 6))
    pdos = replace(pdos, values=np.round(pdos.values, 5), total=np.round(pdos.total, 5))
    _gzip(write_projections(folder / "projections.proj.txt", proj, format="orbtool-text"))
    _gzip(write_pdos(folder / "pdos.pdos.txt", pdos, format="orbtool-text"))


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--only", nargs="*", choices=sorted(CASES), help="cases to run (default: all)")
    ap.add_argument("--out", type=Path, default=DATA, help="output folder (default: tests/external/data)")
    ap.add_argument("--threads", type=int, default=2)
    ap.add_argument("--chk", type=Path, default=None, help="folder for pyscf checkpoints (restart aid)")
    args = ap.parse_args(argv)
    from pyscf import lib
    lib.num_threads(args.threads)
    for case in args.only or list(CASES):
        t = time.perf_counter()
        rec = generate(case, args.out, chkdir=args.chk)
        print(f"{case:10s} {rec['formula']:14s} E = {rec['total_energy_eV']:.4f} eV  "
              f"state = {rec.get('state_energy_eV', float('nan')):.4f} eV  "
              f"({time.perf_counter() - t:.0f} s)", flush=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())
