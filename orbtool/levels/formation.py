"""Formation energies, the lowest-energy envelope and charge-transition levels.

For a defect X in charge state q,

.. math::

   E_f(q, E_F) = E_{def}(q) - E_{host} - \\sum_i n_i \\mu_i + q\\,(E_F + E_{VBM}) + E_{corr}(q),

with ``n_i`` atoms of element ``i`` added (negative when removed), ``E_F``
measured from the valence-band maximum ``E_VBM``, and the thermodynamic
transition level between charge states ``q > q'``

.. math::  \\varepsilon(q/q') = \\frac{E_f(q; E_F=0) - E_f(q'; E_F=0)}{q' - q}

(S. B. Zhang and J. E. Northrup, Phys. Rev. Lett. 67, 2339 (1991);
C. Freysoldt et al., Rev. Mod. Phys. 86, 253 (2014), eqs. 1 and 4). Below
``ε(q/q')`` the more positive state ``q`` is lower in energy.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from ..errors import InputFormatError, ModelError
from .charge_state import ChargeState, _finite, _qstr
from .chempot import ChemicalPotentials

__all__ = ["ChargeState", "TransitionLevel", "FormationDiagram", "formation_energies"]  # ChargeState re-exported


@dataclass(frozen=True)
class TransitionLevel:
    """A thermodynamic charge-transition level ε(q/q').

    Attributes
    ----------
    charge_from, charge_to : int
        ``q`` (stable below the level) and ``q' < q`` (stable above it).
    above_vbm : float
        Position above the VBM, eV.
    below_cbm : float
        Position below the CBM, eV (``gap − above_vbm``).
    in_gap : bool
        Whether ``0 ≤ above_vbm ≤ gap``.
    one_electron : tuple of (str, float)
        For a transition over more than one electron (``q − q' ≥ 2``): the one-electron levels
        ε(q/q−1), ε(q−1/q−2), … (label, eV above the VBM) when every intermediate charge state
        was computed; empty otherwise.
    u : float or None
        For ``q − q' = 2`` with the intermediate state computed: the effective correlation energy
        ``U = ε(q−1/q−2) − ε(q/q−1)`` (eV); negative when the intermediate state is never the most
        stable (negative U; Freysoldt et al., Rev. Mod. Phys. 86, 253 (2014), sec. II.C).
    """

    charge_from: int
    charge_to: int
    above_vbm: float
    below_cbm: float
    in_gap: bool
    one_electron: tuple = ()
    u: float | None = None

    @property
    def electrons(self) -> int:
        """Electrons exchanged at the level (``q − q'``)."""
        return int(self.charge_from) - int(self.charge_to)

    @property
    def negative_u(self) -> bool:
        return self.u is not None and self.u < 0

    @property
    def label(self) -> str:
        """``"ε(+1/0)"`` style name."""
        return f"ε({_qstr(self.charge_from)}/{_qstr(self.charge_to)})"


@dataclass(frozen=True)
class FormationDiagram:
    """Formation energies of all charge states of one defect and what follows.

    Attributes
    ----------
    name : str
        Defect label.
    charges : ndarray of int
        Charge states, most positive first.
    offsets : ndarray
        ``E_f(q; E_F = 0)`` (Fermi level at the VBM), eV, same order.
    vbm : float
        Host valence-band maximum ``E_VBM`` on the host total-energy scale, eV.
    gap : float
        Band gap used for "in gap" and "below CBM", eV.
    terms : dict[int, dict[str, float]]
        Per charge state, each part of ``E_f(q; 0)`` in eV: ``"E_def"``,
        ``"-E_host"``, ``"-sum n mu"``, ``"q E_VBM"``, ``"E_corr"``.
    envelope : tuple of (int, float, float)
        ``(q, lo, hi)``: the Fermi-level interval (eV above the VBM, over the
        whole real line, ``±inf`` at the ends) where ``q`` is lowest.
    transitions : tuple of TransitionLevel
        Breakpoints of the envelope, increasing in energy (inside or outside the gap).
    chemical_potentials : dict[str, float]
        The ``μ_i`` used, eV/atom.
    notes : tuple[str, ...]
        Assumptions and anything outside the gap.
    corrections : dict[int, ChargeCorrection]
        The correction objects given with the states (terms used, notes).
    """

    name: str
    charges: np.ndarray
    offsets: np.ndarray
    vbm: float
    gap: float
    terms: dict
    envelope: tuple
    transitions: tuple
    chemical_potentials: dict
    notes: tuple = ()
    corrections: dict = field(default_factory=dict)

    @property
    def cbm(self) -> float:
        """CBM on the host total-energy scale, eV."""
        return self.vbm + self.gap

    def formation_energy(self, charge: int, fermi_level=0.0):
        """``E_f(q, E_F)`` in eV; ``fermi_level`` (eV above the VBM) may be an array."""
        idx = np.flatnonzero(self.charges == charge)
        if idx.size == 0:
            raise ModelError(f"{self.name}: no charge state {charge:+d}; have {self.charges.tolist()}")
        return self.offsets[idx[0]] + charge * np.asarray(fermi_level, dtype=float)

    def lowest(self, fermi_level):
        """Lowest formation energy and its charge at each Fermi level.

        Returns
        -------
        energy : ndarray, eV
        charge : ndarray of int
        """
        ef = np.asarray(fermi_level, dtype=float)
        all_e = self.offsets.reshape((-1,) + (1,) * ef.ndim) + self.charges.reshape((-1,) + (1,) * ef.ndim) * ef
        k = np.argmin(all_e, axis=0)
        return np.take_along_axis(all_e, k[None], axis=0)[0], self.charges[k]

    def level(self, charge_from: int, charge_to: int) -> float:
        """ε(q/q') for any pair (also metastable ones), eV above the VBM."""
        if charge_from == charge_to:
            raise ModelError("a transition level needs two different charge states")
        a = self.formation_energy(charge_from)
        b = self.formation_energy(charge_to)
        return float((a - b) / (charge_to - charge_from))

    def stable_ranges(self) -> dict:
        """Fermi-level range inside the gap (eV above VBM) where each charge state is lowest.

        Returns ``{q: (lo, hi)}``, or ``{q: None}`` for states never lowest in
        the gap. The envelope's open ends are cut at 0 and the gap; that cut
        is the only clipping done and it is stated in :attr:`notes`.
        """
        out = {int(q): None for q in self.charges}
        for q, lo, hi in self.envelope:
            a, b = max(lo, 0.0), min(hi, self.gap)
            if a < b:
                out[q] = (a, b)
        return out

    def summary(self) -> str:
        """Charge states, transition levels and stable ranges as a table."""
        lines = [f"Formation energies of {self.name} (gap {self.gap:.3f} eV, E_VBM = {self.vbm:.4f} eV)",
                 "  chemical potentials: " + ", ".join(f"μ_{e} = {v:.4f}" for e, v in self.chemical_potentials.items()),
                 f"  {'q':>4} {'E_f(E_F=VBM)':>13} {'E_f(E_F=CBM)':>13} {'E_corr':>8}  stable for E_F in gap"]
        ranges = self.stable_ranges()
        for q, e0 in zip(self.charges, self.offsets):
            r = ranges[int(q)]
            where = "never" if r is None else f"{r[0]:.3f} – {r[1]:.3f} eV"
            lines.append(f"  {_qstr(q):>4} {e0:13.4f} {e0 + q * self.gap:13.4f} "
                         f"{self.terms[int(q)]['E_corr']:8.4f}  {where}")
        lines.append(f"  {'level':<10} {'above VBM':>10} {'below CBM':>10}")
        for t in self.transitions:
            flag = "" if t.in_gap else "   (outside the gap)"
            lines.append(f"  {t.label:<10} {t.above_vbm:10.4f} {t.below_cbm:10.4f}{flag}")
        if not self.transitions:
            lines.append("  (one charge state: no transition level)")
        lines += [f"  note: {n}" for n in self.notes]
        return "\n".join(lines)

    def to_dict(self) -> dict:
        """Plain-Python form (JSON-serialisable)."""
        inf = lambda x: None if not math.isfinite(x) else float(x)
        return {
            "name": self.name, "vbm_eV": self.vbm, "gap_eV": self.gap,
            "charges": [int(q) for q in self.charges],
            "formation_energy_at_vbm_eV": {int(q): float(e) for q, e in zip(self.charges, self.offsets)},
            "terms_eV": {int(q): dict(t) for q, t in self.terms.items()},
            "transition_levels": [{"label": t.label, "from": t.charge_from, "to": t.charge_to,
                                   "above_vbm_eV": t.above_vbm, "below_cbm_eV": t.below_cbm, "in_gap": t.in_gap}
                                  for t in self.transitions],
            "envelope": [{"charge": q, "from_eV": inf(lo), "to_eV": inf(hi)} for q, lo, hi in self.envelope],
            "stable_in_gap": {int(q): (None if r is None else list(r)) for q, r in self.stable_ranges().items()},
            "chemical_potentials_eV": dict(self.chemical_potentials), "notes": list(self.notes),
        }


def _as_state(item, dielectric=None, defect_position=None) -> ChargeState:
    if isinstance(item, ChargeState):
        return item
    if hasattr(item, "total_energy") and hasattr(item, "charge"):
        return ChargeState.from_case(item, dielectric=dielectric, defect_position=defect_position)
    if isinstance(item, (tuple, list)) and len(item) in (2, 3):
        return ChargeState(*item) if len(item) == 2 else ChargeState(item[0], item[1], correction=item[2])
    raise InputFormatError(None, None, f"cannot read a charge state from {item!r}; expected a ChargeState, a "
                           "DefectCase or (charge, total energy[, correction])", field="states")


def _lower_envelope(charges: np.ndarray, offsets: np.ndarray) -> list[tuple[int, float, float]]:
    """Lower envelope of the lines ``offset + q E_F`` over the real line.

    Starts from the steepest line (largest q, lowest at E_F → −∞) and walks
    to the earliest crossing with a smaller-q line; at a crossing shared by
    several lines the smallest q is taken (the others are lowest at a single
    point only).
    """
    order = np.argsort(-charges)
    q_sorted, e_sorted = charges[order], offsets[order]
    cur, pos, out = 0, -math.inf, []
    while cur < len(q_sorted) - 1:
        rest = np.arange(cur + 1, len(q_sorted))
        x = (e_sorted[rest] - e_sorted[cur]) / (q_sorted[cur] - q_sorted[rest])
        xmin = x.min()
        tie = rest[np.abs(x - xmin) <= 1e-12 * max(1.0, abs(xmin))]
        nxt = int(tie.max())  # smallest charge among simultaneous crossings
        out.append((int(q_sorted[cur]), pos, float(xmin)))
        cur, pos = nxt, float(xmin)
    out.append((int(q_sorted[cur]), pos, math.inf))
    return out


def formation_energies(states, chemical_potentials, *, vbm: float, gap: float, exchanged: dict | None = None,
                       host_total_energy: float | None = None, name: str = "defect", dielectric=None,
                       defect_position=None) -> FormationDiagram:
    """Formation energies of a defect's charge states and its transition levels.

    Parameters
    ----------
    states : iterable of ChargeState, DefectCase or (q, E_def[, E_corr]) tuples, or dict {q: E_def}
        One entry per charge state (each charge once); energies in eV.
    chemical_potentials : ChemicalPotentials or dict[str, float]
        ``μ_i`` in eV/atom: a point checked by
        :meth:`~orbtool.levels.chempot.StabilityRegion.at` (its absolute
        values are used), or plain absolute values (used as given; a note
        says they were not checked against a stability region).
    vbm : float
        Host VBM on the host total-energy scale (Kohn–Sham eigenvalue), eV.
    gap : float
        Band gap, eV (> 0).
    exchanged : dict[str, int], optional
        Atoms added (negative: removed); overrides what the states carry.
    host_total_energy : float, optional
        Pristine supercell energy (eV) for states that lack one.
    name : str
        Defect label.
    dielectric : float or array_like (3, 3), optional
        For states given as DefectCase: compute each finite-size correction
        (see :meth:`ChargeState.from_case`); ``defect_position`` (Å) adds
        potential alignment when the cases hold potential grids.

    Raises
    ------
    InputFormatError
        Duplicate charge states, a missing host energy, inconsistent host
        energies or atom counts.
    ModelError
        A missing chemical potential, a non-positive gap.
    """
    states = [_as_state(s, dielectric, defect_position)
              for s in (states.items() if isinstance(states, dict) else states)]
    if not states:
        raise InputFormatError(None, None, f"{name}: no charge states given", field="states")
    charges = [s.charge for s in states]
    dup = sorted({q for q in charges if charges.count(q) > 1})
    if dup:
        srcs = [s.source for s in states if s.charge in dup]
        raise InputFormatError(None, None, f"{name}: charge state(s) {dup} given more than once "
                               f"(sources: {srcs}); give one energy per charge state", field="charge")
    vbm = _finite(vbm, "vbm", None, "vbm")
    gap = _finite(gap, "gap", None, "gap")
    if not gap > 0:
        raise ModelError(f"{name}: band gap must be positive, got {gap} eV")
    hosts = []
    for s in states:
        h = s.host_total_energy if s.host_total_energy is not None else host_total_energy
        if h is None:
            raise InputFormatError(s.source, None, f"{name}: charge state {s.charge:+d} has no host total energy; "
                                   "pass host_total_energy=... (eV)", field="host_total_energy")
        hosts.append(_finite(h, "host_total_energy", s.source, "host_total_energy"))
    if max(hosts) - min(hosts) > 1e-6:
        raise InputFormatError(None, None, f"{name}: the charge states were given different host energies "
                               f"{sorted(set(hosts))} eV; all must refer to the same pristine cell",
                               field="host_total_energy")
    if exchanged is None:
        found = [s.exchanged for s in states if s.exchanged is not None]
        if not found:
            raise InputFormatError(None, None, f"{name}: atoms exchanged with the reservoirs unknown; pass "
                                   "exchanged={'element': added (negative if removed)}", field="exchanged")
        if any(f != found[0] for f in found):
            raise InputFormatError(None, None, f"{name}: charge states differ in composition: {found}",
                                   field="exchanged")
        exchanged = found[0]
    exchanged = {str(k): int(v) for k, v in dict(exchanged).items() if v}
    notes = []
    if isinstance(chemical_potentials, ChemicalPotentials):
        if chemical_potentials.absolute is None:
            raise ModelError(f"{name}: the chemical potentials carry no absolute values; call "
                             "region.at(delta, references) with elemental reference energies")
        mu = dict(chemical_potentials.absolute)
        where = chemical_potentials.label or "given point"
        notes.append(f"chemical potentials checked against the stability region ({where})")
    else:
        mu = {str(k): float(v) for k, v in dict(chemical_potentials).items()}
        notes.append("chemical potentials used as given (not checked against a stability region)")
    missing = sorted(set(exchanged) - set(mu))
    if missing:
        raise ModelError(f"{name}: chemical potential missing for {missing} (eV/atom)")
    mu_term = -sum(n * mu[e] for e, n in exchanged.items())
    terms, offsets = {}, []
    for s, h in zip(states, hosts):
        t = {"E_def": s.total_energy, "-E_host": -h, "-sum n mu": mu_term, "q E_VBM": s.charge * vbm,
             "E_corr": s.correction}
        terms[s.charge] = t
        offsets.append(math.fsum(t.values()))
        if s.charge != 0 and s.correction == 0.0:
            notes.append(f"q = {s.charge:+d}: no finite-size correction applied")
    order = np.argsort([-q for q in charges])
    q_arr = np.array(charges, dtype=int)[order]
    e_arr = np.array(offsets)[order]
    env = _lower_envelope(q_arr, e_arr)
    transitions = []
    by_q = {int(q): float(e) for q, e in zip(q_arr, e_arr)}
    for (q1, _, x), (q2, _, _) in zip(env[:-1], env[1:]):
        inside = -1e-12 <= x <= gap + 1e-12
        q1, q2 = int(q1), int(q2)
        steps, u = (), None
        if q1 - q2 >= 2:
            chain = list(range(q1, q2 - 1, -1))
            if all(q in by_q for q in chain):
                # ε(q/q−1) where E_f(q) = E_f(q−1): E(q) + q E_F = E(q−1) + (q−1) E_F
                steps = tuple((f"ε({_qstr(a)}/{_qstr(a - 1)})", by_q[a - 1] - by_q[a]) for a in chain[:-1])
                if len(steps) == 2:
                    u = steps[1][1] - steps[0][1]
                    notes.append(f"negative U: ε({_qstr(q1)}/{_qstr(q2)}) is a two-electron level because "
                                 f"q = {_qstr(q1 - 1)} is never the most stable; U = {steps[1][0]} − {steps[0][0]} "
                                 f"= {u:+.3f} eV")
            else:
                missing = [q for q in chain[1:-1] if q not in by_q]
                notes.append(f"ε({_qstr(q1)}/{_qstr(q2)}) exchanges {q1 - q2} electrons; intermediate charge "
                             f"state(s) {missing} were not computed, so its one-electron levels (and U) are unknown")
        transitions.append(TransitionLevel(q1, q2, x, gap - x, inside, steps, u))
        if not inside:
            side, lost = ("below the VBM", q1) if x < 0 else ("above the CBM", q2)
            notes.append(f"{transitions[-1].label} lies {side} ({x:+.4f} eV from the VBM): "
                         f"q = {_qstr(lost)} is not stable in the gap")
    never = [int(q) for q in q_arr if int(q) not in {e[0] for e in env}]
    if never:
        notes.append(f"charge state(s) {never} are never the lowest (at any Fermi level)")
    notes.append("stable ranges are the envelope cut to the gap [0, gap]")
    corrections = {s.charge: s.correction_detail for s in states if s.correction_detail is not None}
    return FormationDiagram(name=name, charges=q_arr, offsets=e_arr, vbm=vbm, gap=gap, terms=terms,
                            envelope=tuple(env), transitions=tuple(transitions), chemical_potentials=mu,
                            notes=tuple(notes), corrections=corrections)
