"""Leave-one-host-out harness: do orbtool's two knobs move the level the way real DFT does?

Run from the repository root::

    python tests/external/periodic/harness.py            # print the tables
    python tests/external/periodic/harness.py --write    # and write them into periodic/README.md

Data: the committed GPAW family in ``tests/external/periodic/data/<host>/<case>/`` (see
``generate.py`` beside this file) and the pyscf clusters in ``tests/external/data/``. Everything is
read with orbtool's public API (``orbtool.load_case``, ``orbtool.analysis.locate_vacancy``,
``align``, ``in_gap_states``, ``orbtool.tb``), as a user would.

What is measured
----------------
* **Chemistry knob** (cation swap A → B): the model is fitted on host A's cases only (the ideal anion
  vacancy, plus its breathing series when present); the level of B's anion vacancy is predicted with
  ``fit.predict(geometry=<B's defect cell>, swap={cation_A: cation_B}, host_gap=<B's gap>)`` — B's bond
  lengths, B's cation and the band gap of B's *pristine* host (the in-solid route of
  :mod:`orbtool.tb.whatif`; the gap is the pristine 54-site supercell's Γ gap, on the same footing as
  A's target gap), nothing of B's defect cell. Variants without ``host_gap`` take free-atom term values.
  Each level is referred to its own host's VBM. Engine shift = level(B) − level(A); predicted shift =
  prediction(B) − model level(A). Both hosts' states are the same kind: A's engine-chosen multiplet
  sets the size, and B's state is its multiplet of that size with the largest share of |ψ̃|² near the
  vacant site (:func:`same_kind`; GaP's engine-chosen state is the a₁ resonance in the valence band,
  AlP's the t₂).
* **Structure knob** (breathing, first shell at 0.95 d and 1.05 d): leave-one-out — fit on two of the
  three cases, predict the third (``FitResult.cross_validate``). Engine shift = level(case) −
  level(ideal); predicted shift = engine shift + leave-one-out error. The same state along the series
  (the ideal case's multiplet size, as for swaps).

Energies: the defect state is the multiplet the engine's own analysis names (``engine.json``
``defect_state`` bands; pyscf: ``state_index``); its level is the multiplet mean on the host scale
(defect cell aligned by orbtool's far-atom PDOS centroid route, the same route for every case),
minus the VBM of the pristine supercell at Γ (``band_edges`` of the host projections). Where
``<host>/bands/bands.json`` exists, the true (k-resolved) VBM is listed beside it: the Γ-only
54-site supercells fold the zinc-blende Γ point but not the rocksalt/CsCl X/M/R points.
"""

from __future__ import annotations

import argparse
import json
import sys
import time
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
DATA = HERE / "data"
PYSCF = HERE.parent / "data"
README = HERE / "README.md"
KNOBS = HERE.parents[2] / "orbtool" / "data" / "knob_validation.json"

HOSTS = {"ZnS": ("Zn", "S"), "CdS": ("Cd", "S"), "AlP": ("Al", "P"), "GaP": ("Ga", "P"), "CaO": ("Ca", "O"),
         "SrO": ("Sr", "O"), "NaCl": ("Na", "Cl"), "KCl": ("K", "Cl"), "CsCl": ("Cs", "Cl")}
PAIRS = (("ZnS", "CdS"), ("AlP", "GaP"), ("CaO", "SrO"), ("NaCl", "KCl"))
BREATHING = ("ZnS", "AlP", "CaO", "NaCl", "CsCl")

#: Every case the committed family must hold (the test fails when one is missing). One place.
EXPECTED_CASES = (
    "ZnS/host", "ZnS/V_S", "ZnS/V_S_r0.95", "ZnS/V_S_r1.05", "CdS/host", "CdS/V_S",
    "AlP/host", "AlP/V_P", "AlP/V_P_r0.95", "AlP/V_P_r1.05", "GaP/host", "GaP/V_P",
    "CaO/host", "CaO/V_O", "CaO/V_O_r0.95", "CaO/V_O_r1.05", "SrO/host", "SrO/V_O",
    "NaCl/host", "NaCl/V_Cl", "NaCl/V_Cl_r0.95", "NaCl/V_Cl_r1.05", "KCl/host", "KCl/V_Cl",
    "CsCl/host", "CsCl/V_Cl", "CsCl/V_Cl_r0.95", "CsCl/V_Cl_r1.05",
    "ZnS/V_Zn", "NaCl/V_Na", "CsCl/V_Cs",
    "ZnS/bands", "CdS/bands", "AlP/bands", "GaP/bands", "CaO/bands", "SrO/bands", "NaCl/bands", "KCl/bands",
    "CsCl/bands",
)

START, END = "<!-- harness-table:start -->", "<!-- harness-table:end -->"


def ideal(host: str) -> str:
    return f"{host}/V_{HOSTS[host][1]}"


def breathing_cases(host: str) -> tuple:
    v = ideal(host)
    return (v, f"{v}_r0.95", f"{v}_r1.05")


def present(case: str, root: Path = DATA) -> bool:
    """True when the case's engine output is committed (``engine.json`` / ``bands.json``)."""
    return (root / case / ("bands.json" if case.endswith("/bands") else "engine.json")).exists()


def record(case: str, root: Path = DATA) -> dict:
    return json.loads((root / case / "engine.json").read_text())


def bands_record(host: str, root: Path = DATA):
    p = root / host / "bands" / "bands.json"
    return json.loads(p.read_text()) if p.exists() else None


# ---------------------------------------------------------------- one case as orbtool reads it
@dataclass
class Observed:
    """The engine's defect state of one case as orbtool measures it (a whole multiplet)."""

    name: str
    case: object
    site: object
    states: list
    above_vbm: float          # eV, multiplet mean, host scale, above the supercell Γ VBM
    energy: float             # eV, defect-cell scale (what the engine printed)
    occupation: float         # electrons in the multiplet
    s_first: float            # s/(s+p) on the first shell (summed over the multiplet)
    first_share: float        # weight on the first shell (sum over the multiplet / its size)
    vbm: float                # Γ VBM of the host supercell (host scale), eV
    charge: int = 0
    engine: dict = field(default_factory=dict)

    @property
    def degeneracy(self) -> int:
        return int(sum(getattr(s, "degeneracy", 1) for s in self.states))


def observe(name: str, folder: Path, host_folder: Path, bands: list, *, charge: int = 0, spin: int = 0,
            engine: dict | None = None, window: float | None = None) -> Observed:
    """Load one defect case with orbtool and pick the engine's state (``bands``: projection indices).
    ``window`` (eV): how far outside the gap the state may lie (default orbtool.story.RESONANT_WINDOW)."""
    import orbtool
    from orbtool.analysis import align, in_gap_states, locate_vacancy

    case = orbtool.load_case(folder, host=host_folder, charge=charge, name=name, grids=False)
    site = locate_vacancy(case.host, case.defect)
    shift = align(case, site=site, method="pdos")
    def by_band(tol):
        # one DefectState is a whole degenerate multiplet: index it by every band it holds
        return {(st.spin, b): st for st in in_gap_states(case, site=site, alignment=shift, tol=tol)
                for b in getattr(st, "bands", (st.band,))}
    found = by_band(0.05)
    missing = [b for b in bands if (spin, b) not in found]
    if missing:   # a level just outside the gap (resonant, e.g. below the VBM after inward breathing)
        from orbtool.story import RESONANT_WINDOW
        found = by_band(-(RESONANT_WINDOW if window is None else window))
        missing = [b for b in bands if (spin, b) not in found]
    if missing:
        raise AssertionError(f"{name}: engine state bands {missing} are not among orbtool's in-gap states "
                             f"{sorted(found)}")
    states = list({id(found[(spin, b)]): found[(spin, b)] for b in bands}.values())
    first = [nb.index for nb in site.first_shell]
    ao = sum(s.atom_orbital[first] for s in states)
    ls = states[0].orbital_names
    s_w = float(sum(ao[:, k].sum() for k, o in enumerate(ls) if o == "s"))
    p_w = float(sum(ao[:, k].sum() for k, o in enumerate(ls) if o in ("px", "py", "pz", "p")))
    return Observed(name=name, case=case, site=site, states=states,
                    above_vbm=float(np.mean([s.above_vbm for s in states])),
                    energy=float(np.mean([s.energy for s in states])),
                    occupation=float(sum(s.occupation for s in states)),
                    s_first=s_w / (s_w + p_w) if s_w + p_w > 0 else float("nan"),
                    first_share=float(np.mean([s.shell_fractions[1] for s in states])),
                    vbm=float(states[0].edges.vbm), charge=charge, engine=dict(engine or {}))


def same_kind(rec: dict, size: int) -> list:
    """Engine bands (1-based) of the multiplet of ``size`` bands (within 1 meV, the engine's own rule) with
    the largest share of |ψ̃|² within the first-shell distance, among the engine's bands near E_F.

    A swap compares the same state in both hosts: when the second host's engine-chosen state is another
    kind (e.g. GaP V_P: the a₁ resonant below the VBM has the largest share, where AlP's is the t₂), the
    second host's state is its multiplet of the first host's size with the largest share."""
    bands = sorted(rec["bands_near_fermi"], key=lambda b: b["energy"])
    groups, cur = [], [bands[0]]
    for b in bands[1:]:
        if b["energy"] - cur[-1]["energy"] <= 1e-3:
            cur.append(b)
        else:
            groups.append(cur)
            cur = [b]
    groups.append(cur)
    fit = [g for g in groups if len(g) == size]
    if not fit:
        raise AssertionError(f"{rec['case']}: no {size}-fold multiplet among the engine's bands near E_F")
    best = max(fit, key=lambda g: np.mean([b["vacancy_sphere_fraction"] for b in g]))
    return [b["band"] for b in best]


def observe_periodic(case: str, root: Path = DATA, size: int | None = None, window: float | None = None) -> Observed:
    """One periodic case with the engine's defect state (``size``: the multiplet size a swap partner's
    state has — the state of that size is taken, see :func:`same_kind`)."""
    rec = record(case, root)
    first = rec["bands_written"][0]            # 1-based engine band of projection band 0
    engine_bands = rec["defect_state"]["bands"]  # 1-based
    if size is not None and len(engine_bands) != size:
        engine_bands = same_kind(rec, size)
    bands = [n - first for n in engine_bands]
    return observe(case, root / case, root / case.split("/")[0] / "host", bands, engine=rec, window=window)


def observe_pyscf(case: str, root: Path = PYSCF) -> Observed:
    rec = json.loads((root / case / "engine.json").read_text())
    host = "si_host" if case.startswith("si_") else "host"
    return observe(case, root / case, root / host, [rec["state_index"]], charge=rec["charge"],
                   spin=rec["state_spin"], engine=rec)


# ---------------------------------------------------------------- model under test
@dataclass(frozen=True)
class Spec:
    """Model settings under test (``ClusterModel.around`` keywords and ``fit`` options)."""

    name: str = "hybrid-harrison"
    around: dict = field(default_factory=lambda: {"orbitals": "hybrid", "scaling": "harrison"})
    use: tuple = ("level", "character")
    identity: bool = False    # tell the model the DFT multiplet's size and occupation
    host_gap: bool = False    # swaps by the in-solid route: the new host's (supercell Γ) gap is given

    def targets(self, obs: list):
        from orbtool.tb import Target

        return [Target(case=o.name, above_vbm=o.above_vbm, s_fraction=o.s_first, site=o.site, charge=o.charge,
                       gap=float(o.states[0].edges.gap), degeneracy=o.degeneracy if self.identity else None,
                       occupation=o.occupation if self.identity else None)
                for o in obs]

    def fit(self, obs: list):
        from orbtool.tb import ClusterModel, fit

        model = ClusterModel.around(obs[0].site, charge=obs[0].charge, **self.around)
        return fit(model, self.targets(obs), use=self.use)

    def for_clusters(self) -> "Spec":
        """The same model for the pyscf clusters: level targets only (as their own tests fit), and the
        constant VBM (a cluster host has no bulk band edges; it does not change in those variants)."""
        around = {k: v for k, v in self.around.items() if k != "edges"}
        return Spec(self.name, around, ("level",), self.identity, host_gap=self.host_gap)


#: the variants compared on the harness (step by step, each kept only if the harness improves)
VARIANTS = {
    "baseline": Spec("hybrid defect molecule, Harrison couplings, constant VBM, valence counting"),
    "identity": Spec("hybrid defect molecule, Harrison couplings, constant VBM, DFT state identity", identity=True),
    "identity+gap": Spec("hybrid, Harrison couplings, constant VBM, DFT state identity, swapped cation anchored to "
                         "the new host's conduction-band edge (host_gap)", identity=True, host_gap=True),
    "identity+overlap+gap": Spec("hybrid, Wolfsberg–Helmholz ANO-overlap couplings, constant VBM, DFT state "
                                 "identity, in-solid swap route (host_gap)", identity=True, host_gap=True,
                                 around={"orbitals": "hybrid", "scaling": "overlap"}),
    "sp+gap": Spec("sp cluster of two shells (dangling and back bonds), Harrison couplings, constant VBM, DFT "
                   "state identity, in-solid swap route (host_gap)", identity=True, host_gap=True,
                   around={"orbitals": "sp", "scaling": "harrison"}),
    "identity+edges": Spec("hybrid, Harrison couplings, VBM from the model's host bands, DFT state identity",
                           identity=True, around={"orbitals": "hybrid", "scaling": "harrison", "edges": "model"}),
    "identity+overlap": Spec("hybrid, Wolfsberg–Helmholz ANO-overlap couplings, constant VBM, DFT state identity",
                             identity=True, around={"orbitals": "hybrid", "scaling": "overlap"}),
    "identity+overlap+edges": Spec("hybrid, Wolfsberg–Helmholz couplings, VBM from the model's host bands, DFT "
                                   "state identity", identity=True,
                                   around={"orbitals": "hybrid", "scaling": "overlap", "edges": "model"}),
}
#: orbtool's defaults at this commit (targets_from_case passes the multiplet size; edges="constant"; a swap
#: given the new host's gap takes the in-solid route)
DEFAULT = "identity+gap"
BASELINE = VARIANTS[DEFAULT]


# ---------------------------------------------------------------- rows
@dataclass
class Row:
    kind: str                 # "swap" or "breathing"
    case: str
    engine: float             # eV
    predicted: float          # eV
    note: str = ""
    aic: float = float("nan")
    bic: float = float("nan")

    @property
    def error(self) -> float:
        return self.predicted - self.engine

    @property
    def sign_right(self):
        if abs(self.engine) < 1e-9:
            return None
        return bool(np.sign(self.predicted) == np.sign(self.engine))


def swap_row(first: list, second: Observed, cation_a: str, cation_b: str, spec: Spec, label: str,
             gap: float | None = None) -> Row:
    """Fit on ``first`` (host A's cases, ideal first), predict B's level by the chemistry knob alone
    (``gap``: B's pristine-host gap for the in-solid route; default B's supercell Γ gap)."""
    result = spec.fit(first)
    a = first[0]
    base = result.predict(case=a.name, labels=False).level
    # the in-solid route is given B's gap on the same footing as A's target gap (supercell Γ edges)
    if spec.host_gap and gap is None and second.states[0].edges is not None:
        gap = float(second.states[0].edges.gap)
    gap = gap if spec.host_gap else None
    pred = result.predict(geometry=second.case.defect, swap={cation_a: cation_b}, case=a.name, labels=False,
                          host_gap=gap).level
    return Row("swap", label, second.above_vbm - a.above_vbm, pred - base,
               note=f"fit on {', '.join(o.name for o in first)}" + (f"; {second.name} host gap {gap:.3f} eV"
                                                                    if gap is not None else ""),
               aic=result.aic, bic=result.bic)


def breathing_rows(series: list, spec: Spec, label: str) -> list:
    """Leave-one-out over an (ideal, 0.95, 1.05) series."""
    result = spec.fit(series)
    cv = result.cross_validate()
    ideal_level = series[0].above_vbm
    rows = []
    for o in series:
        err = cv["errors"][o.name]
        d = o.above_vbm - ideal_level
        rows.append(Row("breathing", f"{label}{o.name.split('_')[-1] if o is not series[0] else 'ideal'}",
                        d, d + err, note="ideal level predicted from the two others" if o is series[0] else "",
                        aic=result.aic, bic=result.bic))
    return rows


def periodic_rows(spec: Spec = BASELINE, root: Path = DATA, cache: dict | None = None,
                  everything: bool = False) -> list:
    """Every row the expected cases support (``everything``: every case present in ``root``)."""
    cache = {} if cache is None else cache

    def have(case, root):
        return present(case, root) and (everything or case in EXPECTED_CASES)

    def get(case, size=None):
        if (case, size) not in cache:
            cache[(case, size)] = observe_periodic(case, root, size)
        return cache[(case, size)]

    rows = []
    for a, b in PAIRS:
        need = [f"{a}/host", ideal(a), f"{b}/host", ideal(b)]
        if not all(have(c, root) for c in need):
            continue
        size = len(record(ideal(a), root)["defect_state"]["bands"])   # the same state in every case of the pair
        first = [get(c, size) for c in breathing_cases(a) if have(c, root)]
        rows.append(swap_row(first, get(ideal(b), size), HOSTS[a][0], HOSTS[b][0], spec, f"{a}→{b} V_{HOSTS[a][1]}"))
    for h in BREATHING:
        cs = breathing_cases(h)
        if all(have(c, root) for c in cs) and have(f"{h}/host", root):
            size = len(record(cs[0], root)["defect_state"]["bands"])   # the same state along the series
            rows += breathing_rows([get(c, size) for c in cs], spec, f"{h} V_{HOSTS[h][1]} ")
    return rows


def cluster_gap(case: str, root: Path = PYSCF) -> float | None:
    """HOMO–LUMO gap (eV) of a pristine pyscf cluster as orbtool measures edges (``band_edges`` of its
    projections, the same route as the defect cases' target gaps); None when not committed."""
    if not (root / case / "engine.json").exists():
        return None
    import orbtool
    from orbtool.analysis import band_edges

    host = orbtool.load_case(root / case, host=root / case, grids=False)
    return float(band_edges(host.host_projections).gap)


def pyscf_rows(spec: Spec = BASELINE, root: Path = PYSCF, cache: dict | None = None) -> list:
    spec = spec.for_clusters()
    cache = {} if cache is None else cache

    def get(case):
        if case not in cache:
            cache[case] = observe_pyscf(case, root)
        return cache[case]

    series = [get(c) for c in ("vac", "vac_in5", "vac_out5")]
    gap = cluster_gap("host_na", root) if spec.host_gap else None
    if gap is None:   # without the pristine Na cluster there is no new host's gap: free-atom route
        spec = Spec(spec.name, spec.around, spec.use, spec.identity, host_gap=False)
    rows = [swap_row(series, get("vac_na"), "Li", "Na", spec, "pyscf Li→Na (Li14F12⁺ cluster)", gap=gap)]
    rows += breathing_rows(series, spec, "pyscf F-centre ")
    return rows


# ---------------------------------------------------------------- output
def table(rows: list) -> str:
    out = ["| case | engine shift (eV) | predicted (eV) | error (eV) | sign right |", "|---|---|---|---|---|"]
    for r in rows:
        sign = "—" if r.sign_right is None else ("yes" if r.sign_right else "**no**")
        out.append(f"| {r.case} | {r.engine:+.3f} | {r.predicted:+.3f} | {r.error:+.3f} | {sign} |")
    return "\n".join(out)


def rms(rows: list, kind: str) -> tuple:
    e = np.array([r.error for r in rows if r.kind == kind and r.sign_right is not None])
    return len(e), float(np.sqrt(np.mean(e ** 2))) if len(e) else float("nan")


def cautions(hosts) -> list:
    from orbtool.family import TOXIC_ELEMENTS
    from orbtool.pipeline import MODEL_CAUTION, toxic_caution

    toxic = sorted({el for h in hosts for el in HOSTS.get(h, ()) if el in TOXIC_ELEMENTS})
    return [MODEL_CAUTION] + ([toxic_caution(toxic)] if toxic else [])


def inventory(root: Path = DATA) -> str:
    """Cases present, engine versions and timings, from each ``engine.json`` / ``bands.json``."""
    out = ["| case | engine (ASE) | atoms | SCF wall time (s) | engine's defect state: E (eV), occupation, "
           "share of \\|ψ̃\\|² within the first-shell distance |", "|---|---|---|---|---|"]
    for f in sorted(root.glob("*/*/engine.json")) + sorted(root.glob("*/bands/bands.json")):
        rec = json.loads(f.read_text())
        case = f"{f.parent.parent.name}/{f.parent.name}"
        if f.name == "bands.json":
            host = f.parent.parent / "host" / "engine.json"
            gamma = json.loads(host.read_text())["homo_lumo_spin_paired"][0] if host.exists() else float("nan")
            out.append(f"| {case} | GPAW {rec['engine_version']} (ASE {rec['ase_version']}) | 2 | "
                       f"{rec['wall_time_s']} | true gap {rec['gap']:.3f} eV; true VBM − supercell Γ VBM = "
                       f"{rec['vbm'] - gamma:+.3f} eV |")
            continue
        st = rec.get("defect_state")
        state = (f"{st['energy']:.3f}, {st['occupation']:.2f}, {st.get('sphere_fraction', float('nan')):.2f} "
                 f"({len(st['bands'])} band{'s' if len(st['bands']) > 1 else ''})" if st else "—")
        out.append(f"| {case} | GPAW {rec['engine_version']} (ASE {rec['ase_version']}) | {rec['natoms']} | "
                   f"{rec['wall_time_s']['scf']} | {state} |")
    return "\n".join(out)


def evaluate(spec: Spec, cache: dict, pcache: dict, everything: bool = False) -> list:
    return periodic_rows(spec, cache=cache, everything=everything) + pyscf_rows(spec, cache=pcache)


def comparison(results: dict) -> str:
    """One line per model variant: the numbers the selection is made on (prediction), AIC/BIC beside."""
    out = ["| model variant | swaps: n, sign right, RMS error (eV) | breathing leave-one-out: n, sign right, RMS "
           "(eV) | mean AIC / BIC of the fits |", "|---|---|---|---|"]
    for key, rows in results.items():
        cells = []
        for kind in ("swap", "breathing"):
            n, r = rms(rows, kind)
            ok = sum(1 for x in rows if x.kind == kind and x.sign_right)
            cells.append(f"{n}, {ok}/{n}, {r:.3f}")
        aic = np.nanmean([x.aic for x in rows]) if rows else float("nan")
        bic = np.nanmean([x.bic for x in rows]) if rows else float("nan")
        out.append(f"| {key}: {VARIANTS[key].name} | {cells[0]} | {cells[1]} | {aic:.1f} / {bic:.1f} |")
    return "\n".join(out)


def knob_record(rows: list, spec: Spec) -> dict:
    """What ``orbtool/data/knob_validation.json`` holds (read by ``FitResult.summary``)."""
    n_s, r_s = rms(rows, "swap")
    n_b, r_b = rms(rows, "breathing")
    series = len({r.case.rsplit(" ", 1)[0] for r in rows if r.kind == "breathing"})
    gap_rows = [r for r in rows if r.kind == "swap" and "host gap" in r.note]
    free_rows = [r for r in rows if r.kind == "swap" and "host gap" not in r.note]
    routes = {name: {"n": rms(rs, "swap")[0], "rms": rms(rs, "swap")[1],
                     "sign_right": sum(1 for r in rs if r.sign_right)}
              for name, rs in (("host_gap", gap_rows), ("free_atom", free_rows))}
    return {"date": time.strftime("%Y-%m-%d"), "model": spec.name,
            "swap": {"n": n_s, "rms": r_s, "sign_right": sum(1 for r in rows if r.kind == "swap" and r.sign_right),
                     "routes": routes},
            "breathing": {"n": n_b, "rms": r_b, "series": series},
            "source": "tests/external/periodic/harness.py (GPAW periodic family + pyscf clusters)"}


def report(variants=None, everything: bool = False) -> tuple:
    t0 = time.time()
    cache, pcache = {}, {}
    results = {k: evaluate(VARIANTS[k], cache, pcache, everything) for k in (variants or VARIANTS)}
    rows = results.get(DEFAULT) or next(iter(results.values()))
    per = [r for r in rows if not r.case.startswith("pyscf")]
    pys = [r for r in rows if r.case.startswith("pyscf")]
    hosts = {c.split("/")[0] for c in EXPECTED_CASES if present(c)}
    lines = ["Cases committed:", "", inventory(), "",
             f"orbtool's default model ({DEFAULT}: {VARIANTS[DEFAULT].name}), periodic GPAW family:", "",
             table(per), "", "pyscf clusters (level targets only):", "", table(pys), ""]
    for kind in ("swap", "breathing"):
        n, r = rms(rows, kind)
        lines.append(f"- {kind}: {n} predictions, RMS error {r:.3f} eV")
    lines += ["", "Model variants on the same rows (selection by prediction error; AIC/BIC beside):", "",
              comparison(results), "", *[f"Caution: {c}" for c in cautions(hosts)], "",
              f"(harness wall time {time.time() - t0:.0f} s)"]
    return rows, results, "\n".join(lines)


def write_readme(text: str, path: Path = README) -> None:
    body = path.read_text()
    if START not in body or END not in body:
        raise SystemExit(f"{path}: markers {START} / {END} not found")
    head, rest = body.split(START, 1)
    _, tail = rest.split(END, 1)
    path.write_text(head + START + "\n" + text + "\n" + END + tail)


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--write", action="store_true", help="write the tables into periodic/README.md and the "
                    "knob-validation record into orbtool/data/knob_validation.json")
    ap.add_argument("--variants", nargs="*", help=f"model variants to compare (default all: {list(VARIANTS)})")
    ap.add_argument("--all", action="store_true", help="use every case present in data/, not only EXPECTED_CASES "
                    "(to measure new cases before adding them to EXPECTED_CASES)")
    args = ap.parse_args(argv)
    rows, _, text = report(args.variants, args.all)
    print(text)
    if args.write:
        write_readme(text)
        KNOBS.write_text(json.dumps(knob_record(rows, VARIANTS[DEFAULT]), indent=1) + "\n")
    return 0


if __name__ == "__main__":
    sys.exit(main())
