"""The demo family (invented phases, model data) and the model calculation of one run.

Hosts, vacancies, charge states and breathing variants are declared here; :func:`compute_run`
builds the cell, relaxes the first shell along the breathing coordinate (optional) and returns
everything the file writers need.  All numbers are *model* numbers from the supercell sp3
tight-binding engine in :mod:`orbtool.demo.tbmodel`, not DFT results.

Model energetics
----------------
E_tot = E_band + E_rep, E_band = sum_k w_k sum_n f_nk eps_nk (f in 0..2, Fermi–Dirac with
``KT``), E_rep = sum over first-neighbour pairs C (d0/d)^n with n = ``REPULSION_POWER`` = 8 (a model
choice: stiffer than the d^-4 overlap repulsion of Harrison's book, so that vacancy relaxations stay
at a few per cent), C fitted per host so that the perfect host is at equilibrium under uniform
scaling: with all hoppings ∝ d^-2 the Hellmann–Feynman derivative gives dE_band/dλ = -2 E_hop,
hence C = -2 E_hop / (n N_bonds).
The free energy F = E_tot - KT·S is written as ``F=`` and (E_tot + F)/2 as ``E0=``.

Vacancy potential
-----------------
Removing an ion of formal charge Q (e) changes the potential energy of an electron on the
first-shell atoms by +Q e^2/(4πε0 ε r) (point ion screened by ``EPS_MODEL``; r = distance from the
vacancy site, fixed at the host first-neighbour distance).  It is added to every orbital of the
first-shell atoms (a short-range central-cell potential in the spirit of H. P. Hjalmarson et al.,
Phys. Rev. Lett. 44, 810 (1980) [citation from memory]).  There is no other electrostatics: charged
cells need no correction within this model.
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass, field

import numpy as np
from ase.build import bulk
from scipy.optimize import minimize_scalar

from . import tbmodel

__all__ = ["HostSpec", "CaseSpec", "HOSTS", "CASES", "KGRID", "KT", "EPS_MODEL", "SECOND_SCALE",
           "build_host", "vacancy_index", "breathe", "kpoint_sets", "Model", "RunResult", "compute_host",
           "compute_defect", "vacancy_shifts", "fermi_occupations"]

COULOMB = 14.399645          # e^2/(4π ε0) in eV Å (CODATA)
KGRID = (2, 2, 2)            # Γ-centred Monkhorst–Pack grid of the 64-atom cell
KT = 0.025                   # Fermi–Dirac smearing, eV
EPS_MODEL = 12.0             # screening of the vacancy point-ion potential (model choice)
SECOND_SCALE = 0.3           # second-neighbour hoppings: Harrison value times this (model choice)
REPULSION_POWER = 8          # first-neighbour pair repulsion C (d0/d)^n (model choice, see notes)
FORMAL_CHARGE = {"Sn": 2, "Ge": 2, "Pb": 2, "Zn": 2, "S": -2, "Se": -2}
VALENCE = {"Sn": 4, "Ge": 4, "Pb": 4, "Zn": 2, "S": 6, "Se": 6}


@dataclass(frozen=True)
class HostSpec:
    """A host phase: ``name`` (folder name), ``cation``, ``anion``, ``motif``
    (``"rocksalt"`` or ``"zincblende"``), cubic lattice constant ``a`` (Å), ``note``."""

    name: str
    cation: str
    anion: str
    motif: str
    a: float
    note: str = ""

    @property
    def formula(self) -> str:
        return self.cation + self.anion

    @property
    def bond(self) -> float:
        """First-neighbour distance of the perfect host, Å."""
        return self.a / 2 if self.motif == "rocksalt" else self.a * np.sqrt(3) / 4

    @property
    def cutoff(self) -> float:
        """Pair cutoff between the second and third shells, Å."""
        return self.bond * (1.58 if self.motif == "rocksalt" else 1.77)


@dataclass(frozen=True)
class CaseSpec:
    """One defect run: host, removed element, charge, variant, and either relax (``breathing=None``)
    or a fixed first-shell breathing fraction."""

    host: HostSpec
    removed: str
    charge: int
    variant: str = "relaxed"
    breathing: float | None = None

    @property
    def kind(self) -> str:
        return "V_anion" if self.removed == self.host.anion else "V_cation"

    @property
    def defect(self) -> str:
        return f"V_{self.removed}"

    @property
    def name(self) -> str:
        base = f"{self.host.name}_{self.defect}_q{self.charge:+d}".replace("+0", "0")
        return base if self.variant == "relaxed" else f"{base}_{self.variant}"

    @property
    def folder(self) -> str:
        q = f"q{self.charge:+d}".replace("+0", "0")
        sub = q if self.variant == "relaxed" else f"{q}_{self.variant}"
        return f"{self.host.name}/{self.defect}/{sub}"


HOSTS = (
    HostSpec("SnS-rocksalt", "Sn", "S", "rocksalt", 5.80, "hypothetical rocksalt SnS (invented phase)"),
    HostSpec("GeS-rocksalt", "Ge", "S", "rocksalt", 5.60, "hypothetical rocksalt GeS (cation swap; invented)"),
    HostSpec("SnS-zincblende", "Sn", "S", "zincblende", 6.20, "hypothetical zinc-blende SnS (second motif; invented)"),
)


def _cases() -> tuple:
    out = []
    for h in HOSTS:
        out += [CaseSpec(h, h.anion, 0), CaseSpec(h, h.anion, 2), CaseSpec(h, h.cation, 0), CaseSpec(h, h.cation, -2)]
    h = HOSTS[0]
    out += [CaseSpec(h, h.anion, 0, "breathe-5", -0.05), CaseSpec(h, h.anion, 0, "breathe+5", 0.05)]
    return tuple(out)


CASES = _cases()


def build_host(spec: HostSpec):
    """64-atom cell (2x2x2 conventional), cations first then anions, positions Å."""
    at = bulk(spec.formula, spec.motif, a=spec.a, cubic=True).repeat(2)
    order = np.argsort([0 if s == spec.cation else 1 for s in at.get_chemical_symbols()], kind="stable")
    return at[order]


def vacancy_index(host, element: str) -> int:
    """Index of the ``element`` atom closest to the cell centre (lowest index on ties)."""
    centre = host.cell.array.sum(axis=0) / 2
    idx = np.flatnonzero(np.array(host.get_chemical_symbols()) == element)
    d = np.linalg.norm(host.positions[idx] - centre, axis=1)
    return int(idx[np.argmin(np.round(d, 6))])


def _mic(vectors, cell):
    frac = np.linalg.solve(cell.T, np.asarray(vectors, float).T).T
    frac -= np.round(frac)
    return frac @ cell


def breathe(host, site_index: int, fraction: float, first_shell_radius: float):
    """Defect cell: remove atom ``site_index`` and move its first shell radially by ``fraction``.

    Returns (defect atoms, site position Å, indices of the first shell in the defect cell).
    """
    site = host.positions[site_index].copy()
    d = host.copy()
    del d[site_index]
    vec = _mic(d.positions - site, d.cell.array)
    r = np.linalg.norm(vec, axis=1)
    shell = np.flatnonzero(r < first_shell_radius)
    pos = d.positions.copy()
    pos[shell] = site + vec[shell] * (1.0 + fraction)
    d.positions = pos
    d.wrap()
    return d, site, shell


def kpoint_sets(grid=KGRID):
    """Full Γ-centred grid (nk, 3) and its cubic-irreducible subset with weights.

    For the 2x2x2 grid the stars are {Γ}, {X}×3, {M}×3, {R} (weights 1, 3, 3, 1 / 8).
    """
    full = np.array(list(itertools.product(*[np.arange(n) / n for n in grid])))
    full = np.where(full > 0.5 + 1e-9, full - 1, full)
    key = [tuple(sorted(np.round(np.abs(k), 8))) for k in full]
    reps, weights = [], []
    for k, kk in zip(full, key):
        match = [n for n, r in enumerate(reps) if tuple(sorted(np.round(np.abs(r), 8))) == kk]
        if match:
            weights[match[0]] += 1
        else:
            reps.append(k)
            weights.append(1)
    return full, np.array(reps), np.array(weights, float) / len(full)


def fermi_occupations(eps, weights, n_electrons: float, kT: float = KT):
    """Fermi–Dirac occupations f (0..2 per band, spin-degenerate) for a given electron count.

    Returns (f with the shape of ``eps`` (nk, nb), chemical potential mu eV, entropy S in k_B units).
    """
    w = np.asarray(weights)[:, None]

    def count(mu):
        x = np.clip((eps - mu) / kT, -200, 200)
        return float(np.sum(w * 2.0 / (1.0 + np.exp(x))))

    lo, hi = eps.min() - 10 * kT - 1.0, eps.max() + 10 * kT + 1.0
    for _ in range(200):
        mid = 0.5 * (lo + hi)
        lo, hi = (mid, hi) if count(mid) < n_electrons else (lo, mid)
    mu = 0.5 * (lo + hi)
    p = 1.0 / (1.0 + np.exp(np.clip((eps - mu) / kT, -200, 200)))
    with np.errstate(divide="ignore", invalid="ignore"):
        s = -(np.where(p > 0, p * np.log(p), 0) + np.where(p < 1, (1 - p) * np.log(1 - p), 0))
    return 2 * p, mu, float(2 * np.sum(w * s))


@dataclass
class Model:
    """The model of one host: bonds, repulsion constant, electron count."""

    spec: HostSpec
    repulsion: float = 0.0          # C, eV per first-neighbour pair at d0

    def bonds(self, atoms):
        return tbmodel.find_bonds(atoms, self.spec.cutoff, (self.spec.cation,), SECOND_SCALE)

    def electrons(self, atoms, charge: int = 0) -> int:
        return int(sum(VALENCE[s] for s in atoms.get_chemical_symbols())) - int(charge)

    def solve(self, atoms, kpts, weights, charge=0, shifts=None, vectors=True):
        """Eigen-solve and occupy; returns a dict with eps, vec, f, mu, E_band, E_rep, TS, E, F, E0."""
        b = self.bonds(atoms)
        H = tbmodel.hamiltonians(atoms, b, kpts, onsite_shifts=shifts)
        if vectors:
            eps, vec = tbmodel.solve(H)
        else:
            eps, vec = np.linalg.eigvalsh(H), None
        f, mu, S = fermi_occupations(eps, weights, self.electrons(atoms, charge))
        e_band = float(np.sum(np.asarray(weights)[:, None] * f * eps))
        L = b.lengths[b.first]
        e_rep = 0.5 * float(np.sum(self.repulsion * (self.spec.bond / L) ** REPULSION_POWER))   # pairs listed twice
        E = e_band + e_rep
        F = E - KT * S
        out = dict(eps=eps, vec=vec, f=f, mu=mu, e_band=e_band, e_rep=e_rep, TS=KT * S, E=E, F=F,
                   E0=0.5 * (E + F), bonds=b, H=H)
        return out

    def calibrate(self, host, kpts, weights):
        """Fit the repulsion constant so the host is at equilibrium under uniform scaling."""
        r = self.solve(host, kpts, weights)
        b = r["bonds"]
        onsite = np.einsum("kii->ki", r["H"]).real                       # (nk, N)
        occ_onsite = np.einsum("kn,kin,ki->", np.asarray(weights)[:, None] * r["f"], np.abs(r["vec"]) ** 2, onsite)
        e_hop = r["e_band"] - occ_onsite
        n_bonds = int(np.count_nonzero(b.first)) // 2
        self.repulsion = -2 * e_hop / (REPULSION_POWER * n_bonds)
        return self.repulsion


@dataclass
class RunResult:
    """Everything the writers need for one run (host or defect)."""

    name: str
    atoms: object
    charge: int
    kpoints: np.ndarray              # irreducible k (reduced coordinates)
    kweights: np.ndarray
    eps: np.ndarray                  # (nk_irr, nb) eV
    occ: np.ndarray                  # (nk_irr, nb) 0..2
    proj: np.ndarray                 # (nk_irr, nb, natom, 4) |c|^2, orbitals s, px, py, pz
    full_eps: np.ndarray             # (nk_full, nb) for the DOS
    full_proj: np.ndarray            # (nk_full, nb, natom, 4)
    fermi: float
    nelect: int
    nbands: int
    energies: dict                   # E, F, E0, e_band, e_rep, TS
    history: list = field(default_factory=list)     # (breathing, F, E0) accepted ionic steps
    site: np.ndarray | None = None
    shell: np.ndarray | None = None
    breathing: float | None = None
    gamma_vectors: np.ndarray | None = None         # (4N, nb) Γ eigenvectors (real)
    notes: list = field(default_factory=list)


def _nbands(nelect: int, natoms: int) -> int:
    """Band count written to the files (the usual plane-wave default NELECT/2 + NIONS/2)."""
    return int(np.ceil(nelect / 2 + natoms / 2))


def _pack(name, atoms, charge, model, kfull, kirr, wirr, shifts):
    """Solve on the irreducible and on the full grid and collect what the writers need."""
    nat = len(atoms)
    rf = model.solve(atoms, kfull, np.full(len(kfull), 1 / len(kfull)), charge, shifts)
    # the irreducible points are members of the full grid: take them from there
    pick = [int(np.flatnonzero(np.all(np.abs(kfull - k) < 1e-9, axis=1))[0]) for k in kirr]
    r = dict(rf, eps=rf["eps"][pick], vec=rf["vec"][pick], f=rf["f"][pick])
    nel = model.electrons(atoms, charge)
    nb = _nbands(nel, nat)

    def proj(vec):
        p = np.abs(vec[:, :, :nb]) ** 2                     # (nk, 4N, nb)
        return p.reshape(len(vec), nat, 4, nb).transpose(0, 3, 1, 2)

    ig = int(np.flatnonzero(np.all(np.abs(kirr) < 1e-12, axis=1))[0])
    energies = {k: r[k] for k in ("E", "F", "E0", "e_band", "e_rep", "TS")}
    return RunResult(name=name, atoms=atoms, charge=charge, kpoints=kirr, kweights=wirr,
                     eps=r["eps"][:, :nb], occ=r["f"][:, :nb], proj=proj(r["vec"]),
                     full_eps=rf["eps"][:, :nb], full_proj=proj(rf["vec"]), fermi=r["mu"], nelect=nel,
                     nbands=nb, energies=energies, gamma_vectors=np.real(r["vec"][ig][:, :nb]))


def compute_host(spec: HostSpec):
    """Perfect 64-atom host: calibrate the repulsion, solve, return (Model, RunResult)."""
    kfull, kirr, wirr = kpoint_sets()
    atoms = build_host(spec)
    model = Model(spec)
    model.calibrate(atoms, kirr, wirr)
    res = _pack(spec.name, atoms, 0, model, kfull, kirr, wirr, None)
    res.history = [(0.0, res.energies["F"], res.energies["E0"])]
    return model, res


def vacancy_shifts(spec: HostSpec, removed: str, natoms: int, shell):
    """On-site shifts (eV) of the first-shell atoms from the removed point ion (see module notes).

    Evaluated at the host first-neighbour distance, so the shift is the same for every breathing
    amplitude and exerts no force (the ion–ion partner of this term is not part of the model).
    """
    shifts = np.zeros(natoms)
    shifts[shell] = FORMAL_CHARGE[removed] * COULOMB / (EPS_MODEL * spec.bond)
    return shifts


def compute_defect(case: CaseSpec, model: Model, host, xatol: float = 1e-3):
    """Vacancy run: relax the breathing coordinate (or use the fixed one) and solve."""
    kfull, kirr, wirr = kpoint_sets()
    spec = case.host
    idx = vacancy_index(host, case.removed)
    radius = 1.2 * spec.bond

    def cell(x):
        d, site, shell = breathe(host, idx, x, radius)
        return d, site, shell, vacancy_shifts(spec, case.removed, len(d), shell)

    history = []
    if case.breathing is None:
        def energy(x):
            d, site, shell, sh = cell(x)
            r = model.solve(d, kirr, wirr, case.charge, sh, vectors=False)
            history.append((float(x), r["F"], r["E0"]))
            return r["F"]
        energy(0.0)
        opt = minimize_scalar(energy, bounds=(-0.15, 0.15), method="bounded", options={"xatol": xatol})
        x = float(opt.x)
    else:
        x = float(case.breathing)
    d, site, shell, sh = cell(x)
    res = _pack(case.name, d, case.charge, model, kfull, kirr, wirr, sh)
    best, steps = np.inf, []
    for h in history:                                  # accepted steps: the running minimum
        if h[1] < best - 1e-9:
            best = h[1]
            steps.append(h)
    steps.append((x, res.energies["F"], res.energies["E0"]))
    res.history = steps
    res.site, res.shell, res.breathing = site, shell, x
    return res
