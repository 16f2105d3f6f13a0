"""Text of ``family.toml`` and ``README.md`` for the generated demo family."""

from __future__ import annotations

from . import scenario as sc
from . import tbmodel

__all__ = ["atom_energy", "family_toml", "readme_text", "transition_levels"]


def atom_energy(symbol: str) -> float:
    """Free-atom energy in the model: 2 eps_s + (valence - 2) eps_p (eV), ground configuration s2 p^n."""
    es, ep = tbmodel.TERM_VALUES_1980[symbol]
    return 2 * es + (sc.VALENCE[symbol] - 2) * ep


def _host_spec(name):
    return next(h for h in sc.HOSTS if h.name == name)


def _defect_label(c: dict) -> str:
    """Groups the charge states of one defect; fixed-geometry variants get their own group."""
    base = f"{c['host']}_{c['defect']}"
    return base if c["variant"] == "relaxed" else f"{base}_{c['variant']}"


def transition_levels(summary: dict) -> list[tuple[str, int, int, float]]:
    """Model transition levels ε(q/q') above the host VBM (eV) from the E0 values.

    ε(q/q') = [E_f(q; E_F=0) - E_f(q'; E_F=0)] / (q' - q) with E_f(q) = E0[q] - E0[host] + μ + q E_VBM
    (C. Freysoldt et al., Rev. Mod. Phys. 86, 253 (2014)); μ and E0[host] cancel.
    """
    hosts = {h["name"]: h for h in summary["hosts"]}
    groups: dict = {}
    for c in summary["cases"]:
        groups.setdefault(_defect_label(c), []).append(c)
    out = []
    for label, cs in groups.items():
        if len(cs) != 2:
            continue
        a, b = sorted(cs, key=lambda c: -c["charge"])
        vbm = hosts[a["host"]]["vbm"]
        ef = lambda c: c["energies"]["E0"] + c["charge"] * vbm
        out.append((label, a["charge"], b["charge"], (ef(a) - ef(b)) / (b["charge"] - a["charge"])))
    return out


def family_toml(summary: dict) -> str:
    elements = sorted({e for h in sc.HOSTS for e in (h.cation, h.anion)})
    mu = ", ".join(f"{e} = {atom_energy(e):.4f}" for e in elements)
    dh = ", ".join(f'"{h["name"]}" = {h["energies"]["E0"] / 32 - atom_energy(_host_spec(h["name"]).cation) - atom_energy(_host_spec(h["name"]).anion):.4f}'  # noqa: E501
                   for h in summary["hosts"])
    edges = ", ".join(f'"{h["name"]}" = {{ vbm = {h["vbm"]:.4f}, cbm = {h["cbm"]:.4f} }}' for h in summary["hosts"])
    lines = [
        "# MODEL DATA: supercell sp3 tight-binding calculation (not DFT), invented phases.",
        "# Written by `python -m orbtool.demo.generate`; see README.md in this folder.",
        "",
        "[family]",
        'name = "demo: IV-VI sulfide vacancies (model)"',
        'description = "MODEL DATA from an sp3 tight-binding supercell calculation (Harrison couplings), '
        'not DFT. Invented phases: rocksalt SnS, rocksalt GeS (cation swap), zinc-blende SnS (second motif); '
        'anion and cation vacancies in two charge states, breathing variants of rocksalt SnS V_S."',
        "",
        "[references]",
        "# chemical potentials: free-atom energies of the model (eV/atom); the formation enthalpies below",
        "# are per formula unit from the same model (E0 of the host / 32 minus the free atoms).",
        f"mu = {{ {mu} }}",
        f"dH = {{ {dh} }}",
        f"band_edges = {{ {edges} }}",
        'note = "model energetics (band + pair repulsion); no long-range electrostatics, so no charged-cell '
        'correction applies"',
        "",
    ]
    for h in summary["hosts"]:
        spec = _host_spec(h["name"])
        lines += ["[[host]]", f'name = "{h["name"]}"', f'path = "{h["path"]}"',
                  f'description = "MODEL DATA: {spec.note}, perfect 64-atom cell, a = {spec.a:.2f} A"', ""]
    for c in summary["cases"]:
        spec = _host_spec(c["host"])
        how = "relaxed breathing" if c["relaxed"] else "fixed breathing"
        lines += ["[[case]]", f'name = "{c["name"]}"', f'path = "{c["path"]}"', f'host = "{c["host"]}"',
                  f'charge = {c["charge"]}',
                  f'description = "MODEL DATA: {c["defect"]} in {spec.note}; {how} {c["breathing"]:+.4f}"',
                  f'motif = "{spec.motif}"', f'cation = "{spec.cation}"', f'anion = "{spec.anion}"',
                  f'vacancy = "{c["kind"]}"', f'defect = "{_defect_label(c)}"', f'variant = "{c["variant"]}"',
                  ""]
    return "\n".join(lines)


_README_HEAD = """# Demo family — MODEL DATA (tight binding, not DFT)

**Everything in this folder is model data** computed by `python -m orbtool.demo.generate`
(`make demo-data`) with a small supercell tight-binding calculation written for this purpose
(`orbtool/demo/tbmodel.py`, `scenario.py`). It is *not* a DFT calculation and the phases are
**invented** (real element symbols, hypothetical structures): use it to learn and test orbtool, never
as measured or first-principles numbers. Model predictions are not measurements.

## Scenario
| host | motif | a (Å) | role |
|---|---|---|---|
| `SnS-rocksalt` | rocksalt | 5.80 | reference host (hypothetical phase) |
| `GeS-rocksalt` | rocksalt | 5.60 | cation swap Sn → Ge (hypothetical) |
| `SnS-zincblende` | zinc blende | 6.20 | second structural motif (hypothetical) |

Each host has an anion vacancy V_S (q = 0, +2) and a cation vacancy V_Sn / V_Ge (q = 0, −2), with the
first shell relaxed along the breathing coordinate; `SnS-rocksalt` V_S q = 0 also comes with two
unrelaxed breathing variants, first shell at 0.95 and 1.05 of the host distance (`breathe-5`, `breathe+5`).

## Model
* 64-atom cells (2×2×2 conventional), orthogonal sp3 basis (s, px, py, pz on every atom).
* On-site energies: term values of Harrison's 1980 Solid State Table (W. A. Harrison, *Electronic
  Structure and the Properties of Solids*, 1980): S −20.80/−10.27, Ge −14.38/−6.36, Sn −12.50/−5.94 eV (s/p).
* Hoppings V = η ħ²/(m d²) with Harrison's revised η (*Elementary Electronic Structure*, 1999:
  ssσ −1.32, spσ 1.42, ppσ 2.22, ppπ −0.63) and Slater–Koster angular factors (Phys. Rev. 94, 1498
  (1954)). The 1980 η set makes the rocksalt hosts gapless in this model, hence the revised set.
  First neighbours (cation–anion) at full strength; second neighbours (same species) × {second_scale}
  (model choice); nothing beyond a cutoff between the second and third shells.
* Vacancy potential: the removed ion's formal charge (±2 e) as a point ion screened by ε = {eps_model},
  evaluated at the host first-neighbour distance, added to all orbitals of the first-shell atoms.
* Γ-centred {kgrid} k grid (4 irreducible points by cubic symmetry; the vacancy keeps the full cubic
  point group of its site), Fermi–Dirac occupations with kT = {kT} eV.
* Model energetics: E = band energy + pair repulsion C (d0/d)^{repulsion_power} on first-neighbour
  pairs, C fitted per host so that the perfect host is at equilibrium (Hellmann–Feynman). `F=` in
  OSZICAR is E − TS, `E0=` is (E + F)/2. The first shell is relaxed along the breathing coordinate
  only (bounded Brent minimisation of F); other atoms stay at host positions.

## Files per run folder
* `POSCAR` — structure, direct coordinates (first line says MODEL DATA).
* `DOSCAR.gz` — total DOS and per-atom lm-decomposed DOS (s, py, pz, px; d columns zero), both spins,
  Gaussian σ = {sigma} eV on a common grid {e0} … {e1} eV ({ne} points), full k grid.
* `PROCAR.gz` — "lm decomposed" band projections at the irreducible k points (occupations 0…2).
* `OSZICAR` — one line per accepted relaxation step, the last one final (`F=`, `E0=` in eV).
* `PARCHG.gz` (defects) — CHGCAR-layout density of the lowest in-gap level at Γ (with its degenerate
  partners), from Slater-type orbitals (Slater's rules exponents) on a {grid} grid, scaled to 2 electrons
  per band (both spins). Values are density × cell volume, 5 per line.

`family.toml` (manifest, see docs/manifest.md) lists hosts and cases; `model_summary.json` holds
the numbers below and more.

## What the model gives (read before interpreting)
* Anion vacancies (V_S) have a deep a1-like level well inside the gap, built from the dangling
  orbitals of the first-shell cations; its position moves with the first-shell breathing (compare the
  `breathe-5` / relaxed / `breathe+5` rows), with the cation (Sn → Ge) and with the motif.
* Cation vacancies are shallow in this model: their anion-p levels sit 0.05–0.15 eV above the VBM at Γ
  and disperse into the valence band at other k points, so analyses that average over k may report no
  in-gap state for them. That contrast (deep anion vs shallow cation vacancy) is part of the demo.
* 64-atom cells: the defect bands disperse by a few tenths of an eV across the k grid; the levels
  below are Γ values, k-averaged values are higher.
* No spin polarisation, no long-range electrostatics, first-shell breathing as the only relaxation.

## Results (Γ-point in-gap level; host band edges over the k grid)
| case | breathing | q | level at Γ (eV) | above VBM (eV) | PARCHG bands | in gap | E0 (eV) |
|---|---|---|---|---|---|---|---|
"""


def readme_text(summary: dict) -> str:
    head = _README_HEAD.format(second_scale=summary["second_scale"], eps_model=summary["eps_model"],
                               kgrid="×".join(map(str, summary["kgrid"])), kT=summary["kT"],
                               repulsion_power=summary["repulsion_power"], sigma=summary["sigma"],
                               e0=summary["energy_grid"][0], e1=summary["energy_grid"][1],
                               ne=summary["energy_grid"][2], grid="×".join(map(str, summary["grid_shape"])))
    hosts = {h["name"]: h for h in summary["hosts"]}
    rows = []
    for c in summary["cases"]:
        h = hosts[c["host"]]
        rows.append(f"| {c['name']} | {c['breathing']:+.4f} | {c['charge']:+d} | {c['state_energy_gamma']:.3f} | "
                    f"{c['state_energy_gamma'] - h['vbm']:.3f} | {' '.join(map(str, c['state_bands']))} | "
                    f"{'yes' if c['state_in_gap'] else 'no'} | {c['energies']['E0']:.4f} |")
    edges = "\n".join(f"* `{h['name']}`: VBM {h['vbm']:.3f} eV, CBM {h['cbm']:.3f} eV, "
                      f"gap {h['cbm'] - h['vbm']:.3f} eV, E0 {h['energies']['E0']:.4f} eV" for h in summary["hosts"])
    levels = "\n".join(f"* `{lab}`: ε({qa:+d}/{qb:+d}) = {e:.3f} eV above the VBM"
                       for lab, qa, qb, e in transition_levels(summary))
    tail = """

Hosts:
{edges}

Transition levels implied by the model energies (for cross-checking the pipeline):
{levels}

## Formation energies
Within the model, E_f(q) = E0[defect, q] − E0[host] + μ_removed + q (E_F + E_VBM), with μ the model's
free-atom energies (`[references] mu` in family.toml). The model has no long-range electrostatics: no
charged-cell correction applies.
"""
    return head + "\n".join(rows) + tail.format(edges=edges, levels=levels)
