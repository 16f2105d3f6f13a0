"""The Slater–Koster cluster model of a vacancy: the "defect molecule" and the valence cluster.

Two levels of description (``orbitals=``):

``"hybrid"`` — the reduced defect molecule of C. A. Coulson & M. J. Kearsley, Proc. R. Soc. A 241, 433
    (1957): one directed hybrid per first-shell atom i, h_i = √f |s_i⟩ + √(1−f) (−û_i)·|p_i⟩, pointing
    from the atom at the vacant site (û_i = unit vector site→atom, f = ``s_fraction``). On-site
    ε_h = f ε_s + (1−f) ε_p + shift; coupling β_ij = ⟨h_i|H|h_j⟩ from Slater–Koster × distance law.
``"s"``, ``"sp"``, ``"spd"`` — the valence orbitals of the first and second shells, every pair closer
    than ``pair_cutoff`` coupled by Slater–Koster × distance law (no overlap, orthogonal orbitals).

Hamiltonian conventions: orbitals per atom in the order of :mod:`orbtool.tb.slater_koster`; the
block H[i, j] = ⟨μ_i|H|ν_j⟩ uses the direction cosines of r_j − r_i; on-site H_ii = ε_l(element) +
shift_element (term values, eV, negative = bound); no intra-atomic off-diagonal terms; H is real
symmetric. "The defect level" is chosen by ``level``: ``"auto"`` = the highest level holding electrons
by formal counting (hybrid model: each neighbour gives valence/N₁ electrons, minus the charge; after
G. D. Watkins' vacancy one-electron model) or the level with the largest weight on the dangling
hybrids (full clusters); an integer picks a level by rank (0 = lowest).
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace

import numpy as np

from ..errors import ModelError
from ._compiled import Compiled
from ._evaluate import CompiledCluster
from ._levels import Levels
from .elements import common_source, term_values, valence_electrons
from .scaling import DistanceLaw, make_law
from .slater_koster import ORBITAL_NAMES, n_orbitals

__all__ = ["ClusterModel", "Parameter", "Levels"]

_LMAX = {"hybrid": 1, "s": 0, "sp": 1, "spd": 2}


@dataclass(frozen=True)
class Parameter:
    """A named, bounded model parameter (value in ``unit``)."""

    name: str
    value: float
    lower: float
    upper: float
    unit: str
    doc: str


def _mic_vectors(atoms, indices, origin):
    from ase.geometry import find_mic

    d = atoms.positions[np.asarray(indices)] - np.asarray(origin)[None]
    vec, _ = find_mic(d, atoms.cell, atoms.pbc)
    return vec


@dataclass(frozen=True, eq=False)
class ClusterModel:
    """A Slater–Koster model of the dangling orbitals around one vacancy (build with :meth:`around`).

    Attributes
    ----------
    orbitals : str  "hybrid", "s", "sp" or "spd".
    law : DistanceLaw  how couplings fall with distance.
    site_position : ndarray (3,)  vacancy position, Å.
    indices : ndarray (natom,)  cluster atoms (defect-cell indices); first shell first.
    elements : tuple[str]  their elements.
    shell : ndarray (natom,)  1 or 2.
    vectors : ndarray (natom, 3)  site→atom vectors of the reference geometry (Å).
    pairs : ndarray (npair, 2)  coupled atom pairs.
    onsite : dict element -> (ε_s, ε_p, ε_d or nan) eV.
    term_source : str  where the on-site energies came from.
    s_fraction : float  default s character of the dangling hybrids.
    level : "auto" | int  which level is the defect level.
    electrons : float | None  electrons in the defect molecule (hybrid); None = formal counting.
    point_group : str; operations : ndarray (nop, 3, 3)  site symmetry (for labels).
    cell, pbc : cell (Å) and periodicity of the defect supercell (for minimum-image vectors).
    notes : tuple[str]  what was assumed.
    """

    orbitals: str
    law: DistanceLaw
    site_position: np.ndarray
    indices: np.ndarray
    elements: tuple
    shell: np.ndarray
    vectors: np.ndarray
    pairs: np.ndarray
    onsite: dict
    term_source: str
    s_fraction: float = 0.25
    level: object = "auto"
    electrons: float | None = None
    point_group: str = "C1"
    operations: np.ndarray = field(default_factory=lambda: np.eye(3)[None])
    cell: np.ndarray | None = None
    pbc: object = False
    r_d: dict = field(default_factory=dict)
    modes: dict = field(default_factory=dict)
    notes: tuple = ()
    options: dict = field(default_factory=dict)
    host_bands: object = None
    swap_map: dict = field(default_factory=dict)

    # ------------------------------------------------------------------ construction
    @classmethod
    def around(cls, site, orbitals: str = "hybrid", scaling="harrison", *, term_values: str = "auto",
               onsite: dict | None = None, s_fraction: float = 0.25, level="auto", charge: int = 0,
               electrons: float | None = None, shells: int | None = None, pair_cutoff: float | None = None,
               r_d: dict | None = None, edges: str = "constant", **law_options) -> "ClusterModel":
        """Build the model around a vacancy site.

        Parameters
        ----------
        site : VacancySite-like
            Needs ``position`` (Å), ``defect`` (ase.Atoms), ``first_shell``/``second_shell`` (Neighbours
            with ``index``, ``element``, ``vector`` Å), ``point_group`` and ``operations``.
        orbitals : {"hybrid", "s", "sp", "spd"}
        scaling : {"harrison", "power", "exp"} or DistanceLaw
            Distance law; ``law_options`` (``n``, ``q``, ``r_cut``, ``cut_width``, ``eta_set``, ``v0``,
            ``d0``) are passed on. d0 defaults to the mean first-shell distance.
        term_values : {"auto", "lda-sr", "lda-nr", "harrison1980"}
            On-site energy source (see :mod:`orbtool.tb.elements`); ``onsite`` overrides per element.
        s_fraction : float
            s character f of the dangling hybrids (0.25 = sp³).
        level, charge, electrons
            Defect-level choice; formal electron count is Σ valence/N₁ − charge unless ``electrons``.
        shells : int
            Shells included (1 or 2); default 1 for "hybrid", 2 otherwise.
        pair_cutoff : float
            Couple atom pairs closer than this (Å). Default: all pairs (hybrid), 1.25 × mean
            first-shell distance (full clusters: nearest-neighbour bonds).
        r_d : dict
            d-state radii (Å) per element for Harrison's d couplings.
        edges : {"constant", "model"}
            How levels are referred to the VBM. "constant": the fit's ``vbm`` parameter is the
            model-scale VBM, the same for every case and knob. "model": the VBM of the pristine host
            (``site.host``) from the same Slater–Koster parameters (:mod:`orbtool.tb.host_bands`), so a
            swap or a strain moves the edge too; ``vbm`` is then a documented alignment offset between
            the model's and the DFT's band edge, fitted once.
        """
        if orbitals not in _LMAX:
            raise ModelError(f"orbitals must be 'hybrid', 's', 'sp' or 'spd', got {orbitals!r}")
        first = tuple(getattr(site, "first_shell", ()) or ())
        if not first:
            raise ModelError("the vacancy site has no first shell of neighbours: cannot build dangling orbitals")
        shells = (1 if orbitals == "hybrid" else 2) if shells is None else int(shells)
        atoms = list(first)
        if shells >= 2:
            second = tuple(getattr(site, "second_shell", ()) or ())
            if not second:
                raise ModelError("the vacancy site has no second shell; use shells=1")
            atoms += list(second)
        idx = np.array([a.index for a in atoms], dtype=int)
        els = tuple(str(a.element) for a in atoms)
        shell = np.array([1] * len(first) + [2] * (len(atoms) - len(first)))
        position = np.asarray(site.position, dtype=float)
        defect = getattr(site, "defect", None)
        if defect is not None:
            vec = _mic_vectors(defect, idx, position)
        else:
            vec = np.array([a.vector for a in atoms], dtype=float)
        d1 = float(np.mean(np.linalg.norm(vec[: len(first)], axis=1)))
        law = make_law(scaling, d1, **law_options)
        if edges not in ("constant", "model"):
            raise ModelError(f"edges must be 'constant' or 'model', got {edges!r}")
        host = getattr(site, "host", None) if edges == "model" else None
        if edges == "model" and host is None:
            raise ModelError("edges='model' needs the pristine host structure (site.host)")
        host_els = set(host.get_chemical_symbols()) if host is not None else set()
        source = common_source((set(els) | host_els) - set(onsite or {}), term_values)
        table, notes = {}, [f"term values: {source}", f"couplings: {law.describe()}"]
        for el in sorted(set(els) | host_els):
            if onsite and el in onsite:
                vals = tuple(float(x) for x in onsite[el]) + (np.nan,) * (3 - len(onsite[el]))
                notes.append(f"on-site energies of {el} given by the user")
            else:
                tv = term_values_for(el, source)
                vals = (tv.s, np.nan if tv.p is None else tv.p, np.nan if tv.d is None else tv.d)
            table[el] = vals
        lmax = _LMAX[orbitals]
        for el, vals in table.items():
            for ll in range(lmax + 1):
                if not np.isfinite(vals[ll]):
                    raise ModelError(f"no {'spd'[ll]} on-site energy for {el} in {source!r}; "
                                     f"pass onsite={{'{el}': (eps_s, eps_p, eps_d)}} or use fewer orbitals")
        n = len(atoms)
        ii, jj = np.triu_indices(n, 1)
        dist = np.linalg.norm(vec[jj] - vec[ii], axis=1)
        cut = (np.inf if orbitals == "hybrid" else 1.25 * d1) if pair_cutoff is None else float(pair_cutoff)
        keep = dist < cut
        if not keep.any():
            raise ModelError(f"no atom pairs closer than the pair cutoff {cut:.3f} Å")
        pairs = np.stack([ii[keep], jj[keep]], axis=1)
        probe = cls(orbitals, law, position, idx, els, shell, vec, pairs, table, source, r_d=dict(r_d or {}))
        probe._prefactors(*pairs[0])  # raises ModelError now, not at the first evaluation
        ops = np.asarray(getattr(site, "operations", np.eye(3)[None]), dtype=float).reshape(-1, 3, 3)
        cell = None if defect is None else np.array(defect.cell[:])
        pbc = False if defect is None else np.array(defect.pbc)
        bands = None
        if host is not None:
            from .host_bands import HostBands

            bands = HostBands.of(host, table, law)
            notes.append(f"band edges: Γ-point sp model of the host ({len(host)} atoms) with the same parameters")
        return cls(orbitals=orbitals, law=law, site_position=position, indices=idx, elements=els, shell=shell,
                   vectors=vec, pairs=pairs, onsite=table, term_source=source,
                   s_fraction=float(s_fraction), level=level,
                   electrons=electrons if electrons is not None else _formal_electrons(els[: len(first)], charge),
                   point_group=str(getattr(site, "point_group", "C1")), operations=ops, cell=cell, pbc=pbc,
                   r_d=dict(r_d or {}), modes=_modes(site, vec[: len(first)]), notes=tuple(notes),
                   host_bands=bands,
                   options={"onsite": dict(onsite or {}), "charge": charge, "electrons": electrons,
                            "pair_cutoff": pair_cutoff, "shells": shells, "edges": edges,
                            "vacant": getattr(site, "element", None), "term_values": term_values})

    def with_site(self, site, charge: int | None = None) -> "ClusterModel":
        """The same settings (distance law with the same d0, term-value source, user on-site energies,
        hybrid s fraction, level rule, shells, cutoff) around another site, e.g. another case of a family."""
        o = self.options
        m = ClusterModel.around(site, self.orbitals, self.law, term_values=self.term_source,
                                   onsite=o.get("onsite") or None, s_fraction=self.s_fraction, level=self.level,
                                   charge=o.get("charge", 0) if charge is None else charge,
                                   electrons=o.get("electrons"), shells=o.get("shells"),
                                   pair_cutoff=o.get("pair_cutoff"), r_d=self.r_d, edges=o.get("edges", "constant"))
        return replace(m, options={**m.options, "term_values": o.get("term_values", "auto")})

    # ------------------------------------------------------------------ parameters
    @property
    def lmax(self) -> int:
        return _LMAX[self.orbitals]

    @property
    def species(self) -> tuple:
        return tuple(sorted(set(self.elements)))

    def parameters(self) -> list[Parameter]:
        """Default values and bounds of every parameter this model understands (for fits and sliders)."""
        out = [Parameter("coupling_scale", 1.0, 0.02, 10.0, "", "multiplies every two-centre integral")]
        if self.law.kind == "exp":
            out.append(Parameter("q", self.law.q, 0.0, 8.0, "1/Å", "exponential decay constant"))
        else:
            out.append(Parameter("n", self.law.n, 0.5, 10.0, "", "power-law exponent (2 = Harrison)"))
        if self.orbitals == "hybrid":
            out.append(Parameter("s_fraction", self.s_fraction, 0.0, 1.0, "", "s character of the dangling hybrid"))
        for el in self.species:
            out.append(Parameter(f"shift_{el}", 0.0, -15.0, 15.0, "eV", f"rigid shift of {el}'s on-site energies"))
        return out

    def defaults(self) -> dict:
        return {p.name: p.value for p in self.parameters()}

    # ------------------------------------------------------------------ geometry
    def vectors_from(self, geometry) -> np.ndarray:
        """Site→atom vectors (Å) of the cluster atoms in new Atoms (minimum image) or an array (natom,3).

        For Atoms the vacancy is carried over in fractional coordinates of the new cell and checked
        (empty, first shell nearest); ModelError when the vacancy is not there (see ``_locate``)."""
        if geometry is None:
            return self.vectors
        if hasattr(geometry, "get_positions"):
            from ._locate import site_in

            return _mic_vectors(geometry, self.indices, site_in(self, geometry))
        v = np.asarray(geometry, dtype=float)
        if v.shape[-2:] != self.vectors.shape:
            raise ModelError(f"cluster vectors must have shape (..., {len(self.indices)}, 3), got {v.shape}")
        return v

    def _prefactors(self, i, j):
        """Channel prefactors V(d0) (eV) for the pair (i, j): (lower-l on i, lower-l on j)."""
        if self.law.kind == "overlap":
            from .overlaps import wolfsberg_helmholz

            if self.lmax > 1:
                raise ModelError("the overlap (Wolfsberg–Helmholz) couplings cover s and p orbitals only")
            d = float(np.linalg.norm(self.vectors[j] - self.vectors[i]))
            ei, ej = (self.swap_map.get(self.elements[k], self.elements[k]) for k in (i, j))
            fwd, rev = wolfsberg_helmholz(ei, ej, d, self.onsite[self.elements[i]], self.onsite[self.elements[j]])
            fac = (d / self.law.d0) ** self.law.n  # the radial factor (d0/d)^n then gives V_WH at d_ij
            return {c: v * fac for c, v in fwd.items()}, {c: v * fac for c, v in rev.items()}
        rd_i, rd_j = self.r_d.get(self.elements[i]), self.r_d.get(self.elements[j])
        fwd, rev = {}, {}
        for ch in _channels(self.lmax):
            if "d" in ch.split("_")[0]:
                fwd[ch] = _d_prefactor(self.law, ch, rd_i, rd_j)
                rev[ch] = _d_prefactor(self.law, ch, rd_j, rd_i)
            else:
                fwd[ch] = rev[ch] = self.law.prefactor(ch)
        return fwd, rev

    def compile(self, geometry=None):
        """Cache the geometry-dependent parts for fast evaluation (one or a batch of geometries)."""
        vec = self.vectors_from(geometry)
        lmax = 1 if self.orbitals == "hybrid" else self.lmax
        return CompiledCluster(self, Compiled(vec.reshape(-1, *self.vectors.shape), lmax, self.pairs,
                                              self._prefactors), vec.reshape(-1, *self.vectors.shape))

    def solve(self, params: dict | None = None, geometry=None) -> Levels:
        """Levels of the cluster for one parameter set (defaults where not given)."""
        p = self.defaults()
        p.update(params or {})
        return self.compile(geometry).solve(p)

    def hamiltonian(self, params: dict | None = None, geometry=None) -> np.ndarray:
        """The Hamiltonian matrix (nbasis, nbasis) in eV, basis as :meth:`basis_labels`."""
        p = self.defaults()
        p.update(params or {})
        return self.compile(geometry).hamiltonian(p)[0]

    def basis_labels(self) -> list[str]:
        """"<element><index>:<orbital>" for every basis function."""
        if self.orbitals == "hybrid":
            return [f"{el}{i}:h" for el, i in zip(self.elements, self.indices)]
        names = ORBITAL_NAMES[: n_orbitals(self.lmax)]
        return [f"{el}{i}:{o}" for el, i in zip(self.elements, self.indices) for o in names]

    def summary(self) -> str:
        lines = [f"ClusterModel ({self.orbitals}) around a vacancy, point group {self.point_group}",
                 f"  atoms: {len(self.indices)} ({int((self.shell == 1).sum())} first shell), "
                 f"{len(self.pairs)} coupled pairs",
                 f"  electrons in the defect molecule (formal): {self.electrons:g}" if self.electrons is not None
                 else "  electrons: not counted"]
        lines += [f"  {n}" for n in self.notes]
        return "\n".join(lines)


def _modes(site, first_vectors):
    """Distortion patterns (n_first, 3), unit norm, from the site; breathing computed if absent."""
    modes = {}
    get = getattr(site, "distortion_modes", None)
    if callable(get):
        try:
            modes = {k: np.asarray(v, dtype=float) for k, v in get().items()}
        except (AttributeError, TypeError, ValueError, ModelError):  # breathing is still computed below
            modes = {}
    modes = {k: v / np.linalg.norm(v) for k, v in modes.items()
             if v.shape == first_vectors.shape and np.linalg.norm(v) > 0}
    if "breathing" not in modes:
        u = first_vectors / np.linalg.norm(first_vectors, axis=1, keepdims=True)
        modes["breathing"] = u / np.sqrt(len(u))
    return modes


def term_values_for(element, source):
    return term_values(element, source)


def _formal_electrons(first_elements, charge):
    try:
        z = len(first_elements)
        return float(sum(valence_electrons(e) for e in first_elements) / z - charge)
    except ModelError:
        return None


def _channels(lmax):
    names = ["ss_sigma", "sp_sigma", "pp_sigma", "pp_pi", "sd_sigma", "pd_sigma", "pd_pi",
             "dd_sigma", "dd_pi", "dd_delta"]
    need = {0: 1, 1: 4, 2: 10}[lmax]
    return names[:need]


def _d_prefactor(law, ch, rd_left, rd_right):
    if ch in law.v0:
        return float(law.v0[ch])
    if rd_right is None or (ch.startswith("dd") and rd_left is None):
        raise ModelError(f"the {ch} coupling needs d-state radii r_d (Harrison & Froyen 1980) for the "
                         f"atoms involved, or an explicit value: scaling=..., v0={{'{ch}': ...}}")
    if ch.startswith("dd"):
        return law.prefactor(ch, rd_left, rd_right)
    # sd/pd: the d orbital sits on the right atom of the pair
    return law.prefactor(ch, None, rd_right)
