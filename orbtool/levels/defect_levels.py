"""One defect's levels side by side: the Kohn–Sham in-gap state, the
thermodynamic transition levels, and what each would do as an SRH trap.

"Deep" means two different things: where the single-particle (Kohn–Sham)
state sits in the gap, and where the charge-transition level ε(q/q') sits.
Only the second is a thermodynamic quantity (C. Freysoldt et al., Rev. Mod.
Phys. 86, 253 (2014), sec. V); the SRH factor (Shockley & Read, Phys. Rev.
87, 835 (1952)) turns a position into a consequence for carrier lifetime.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from ..errors import ModelError
from .formation import FormationDiagram
from .srh import TrapRecombination

__all__ = ["LevelEntry", "DefectLevels"]

#: KS gap and diagram gap are compared to this tolerance, eV, before a note is written.
GAP_TOLERANCE = 0.05


@dataclass(frozen=True)
class LevelEntry:
    """One level of a defect, in host band-edge terms.

    Attributes
    ----------
    label : str
        ``"Kohn–Sham state"`` or ``"ε(q/q')"``.
    kind : str
        ``"single-particle"``, ``"thermodynamic"`` or ``"one-electron"`` (a one-electron step of a
        two-electron transition level).
    above_vbm, below_cbm : float
        Position, eV.
    in_gap : bool
    depth : float
        Distance to the nearer band edge, eV (negative outside the gap).
    srh_ratio : float or None
        Recombination rate relative to a trap at the intrinsic level
        (1 = as harmful as mid-gap); ``None`` if not computed (see ``note``).
    lifetime : float or None
        SRH lifetime if this level were the only trap, s.
    note : str
    """

    label: str
    kind: str
    above_vbm: float
    below_cbm: float
    in_gap: bool
    depth: float
    srh_ratio: float | None = None
    lifetime: float | None = None
    note: str = ""


def _state_position(state):
    missing = [a for a in ("above_vbm", "below_cbm", "occupation") if not hasattr(state, a)]
    if missing:
        raise ModelError(f"the Kohn–Sham state must provide above_vbm, below_cbm and occupation; "
                         f"{type(state).__name__} lacks {missing}")
    vals = []
    for a in ("above_vbm", "below_cbm", "occupation"):
        v = float(getattr(state, a))
        if not math.isfinite(v):
            raise ModelError(f"Kohn–Sham state {a} must be finite, got {v}")
        vals.append(v)
    return tuple(vals)


@dataclass(frozen=True)
class DefectLevels:
    """The Kohn–Sham state, the transition levels and their SRH factors of one defect.

    Build with :meth:`build`.

    Attributes
    ----------
    name : str
    gap : float
        Band gap the positions refer to, eV.
    entries : tuple of LevelEntry
        Kohn–Sham state first (if given), then the transition levels.
    occupation : float or None
        Electrons in the Kohn–Sham state.
    diagram : FormationDiagram or None
    recombination : TrapRecombination or None
    notes : tuple[str, ...]
    """

    name: str
    gap: float
    entries: tuple
    occupation: float | None
    diagram: FormationDiagram | None
    recombination: TrapRecombination | None
    notes: tuple = ()

    @classmethod
    def build(cls, name: str | None = None, *, state=None, diagram: FormationDiagram | None = None,
              recombination: TrapRecombination | None = None, gap: float | None = None) -> "DefectLevels":
        """Join what is known about one defect.

        Parameters
        ----------
        name : str, optional
            Defect label (default: the diagram's name).
        state : object with ``above_vbm``, ``below_cbm``, ``occupation``
            The Kohn–Sham in-gap state (e.g. an ``analysis.states.DefectState``), eV and electrons.
        diagram : FormationDiagram, optional
        recombination : TrapRecombination, optional
            SRH conditions; every in-gap level gets a rate ratio and lifetime.
        gap : float, optional
            Band gap, eV; default the diagram's, else the state's above + below.
        """
        if state is None and diagram is None:
            raise ModelError("DefectLevels needs a Kohn–Sham state, a formation diagram, or both")
        notes = []
        pos = _state_position(state) if state is not None else None
        if gap is None:
            gap = diagram.gap if diagram is not None else pos[0] + pos[1]
        gap = float(gap)
        if not gap > 0:
            raise ModelError(f"band gap must be positive, got {gap} eV")
        if pos is not None and abs(pos[0] + pos[1] - gap) > GAP_TOLERANCE:
            notes.append(f"the Kohn–Sham state's gap ({pos[0] + pos[1]:.3f} eV) differs from the gap used "
                         f"here ({gap:.3f} eV); its position is quoted from the VBM")
        if recombination is not None and abs(recombination.material.gap - gap) > 1e-6:
            notes.append(f"SRH uses a gap of {recombination.material.gap:.3f} eV, the levels refer to {gap:.3f} eV; "
                         "levels are placed by their distance from the VBM")
        raw = []
        if pos is not None:
            raw.append(("Kohn–Sham state", "single-particle", pos[0], ""))
        if diagram is not None:
            for t in diagram.transitions:
                n_el = int(getattr(t, "electrons", 1))
                if n_el < 2:
                    raw.append((t.label, "thermodynamic", t.above_vbm, ""))
                    continue
                # SRH (Shockley & Read 1952; Hall 1952) is a one-electron capture/emission formula: it is not
                # applied to a level that exchanges two electrons at once
                u = getattr(t, "u", None)
                what = (f"negative U (U = {u:+.3f} eV): " if u is not None and u < 0 else
                        (f"U = {u:+.3f} eV: " if u is not None else ""))
                raw.append((t.label, "thermodynamic", t.above_vbm,
                            f"{what}{n_el}-electron level: SRH not computed (the one-level formula does not apply)"))
                for lab, e1 in getattr(t, "one_electron", ()):
                    raw.append((lab, "one-electron", e1,
                                "one-electron level of a negative-U centre (its middle charge state is never "
                                "stable): SRH not computed (correlated two-electron capture)" if u is not None
                                and u < 0 else ""))
                if not getattr(t, "one_electron", ()):
                    notes.append(f"{t.label}: the one-electron levels need the intermediate charge state(s); "
                                 "recombination through this defect is not computed")
            if not diagram.transitions:
                notes.append(f"one charge state only ({int(diagram.charges[0]):+d}): no transition level")
            notes += [n for n in getattr(diagram, "notes", ()) if n.startswith("negative U")]
        entries = []
        for label, kind, e, fixed in raw:
            inside = 0.0 <= e <= gap
            ratio = life = None
            note = fixed or ("" if inside else "outside the gap: no SRH factor")
            if inside and recombination is not None and not fixed:
                if 0.0 <= e <= recombination.material.gap:
                    ratio = float(recombination.midgap_ratio(e))
                    life = float(recombination.lifetime(e))
                else:
                    note = "outside the SRH gap: no SRH factor"
            entries.append(LevelEntry(label, kind, e, gap - e, inside, min(e, gap - e), ratio, life, note))
        if recombination is None:
            notes.append("no SRH conditions given: rate ratios not computed")
        thermo = [x for x in entries if x.kind == "thermodynamic"]
        if pos is not None and thermo:
            near = min(thermo, key=lambda x: abs(x.above_vbm - pos[0]))
            notes.append(f"Kohn–Sham state lies {pos[0] - near.above_vbm:+.3f} eV from {near.label}; "
                         "the transition level is the thermodynamic one")
        return cls(name=name or (diagram.name if diagram is not None else "defect"), gap=gap,
                   entries=tuple(entries), occupation=None if pos is None else pos[2], diagram=diagram,
                   recombination=recombination, notes=tuple(notes))

    @property
    def deepest(self) -> LevelEntry | None:
        """The in-gap transition level farthest from both band edges (or ``None``)."""
        cands = [e for e in self.entries if e.kind == "thermodynamic" and e.in_gap]
        return max(cands, key=lambda e: e.depth) if cands else None

    def summary(self) -> str:
        """A table: each level's position, depth and SRH factor."""
        lines = [f"Levels of {self.name} (gap {self.gap:.3f} eV)",
                 f"  {'level':<16} {'above VBM':>9} {'below CBM':>9} {'depth':>7} {'U/U_mid':>9} {'τ (s)':>9}"]
        for e in self.entries:
            ratio = "—" if e.srh_ratio is None else f"{e.srh_ratio:.2e}"
            life = "—" if e.lifetime is None else f"{e.lifetime:.2e}"
            extra = f"  {e.note}" if e.note else ""
            if e.kind == "single-particle" and self.occupation is not None:
                extra += f"  (occupation {self.occupation:.2f} e)"
            lines.append(f"  {e.label:<16} {e.above_vbm:9.3f} {e.below_cbm:9.3f} {e.depth:7.3f} "
                         f"{ratio:>9} {life:>9}{extra}")
        lines += [f"  note: {n}" for n in self.notes]
        return "\n".join(lines)

    def to_dict(self) -> dict:
        """Plain-Python form (JSON-serialisable) for views and reports."""
        return {
            "name": self.name, "gap_eV": self.gap, "occupation": self.occupation,
            "levels": [{"label": e.label, "kind": e.kind, "above_vbm_eV": e.above_vbm, "below_cbm_eV": e.below_cbm,
                        "in_gap": e.in_gap, "depth_eV": e.depth, "srh_ratio_to_midgap": e.srh_ratio,
                        "srh_lifetime_s": e.lifetime, "note": e.note} for e in self.entries],
            "formation": None if self.diagram is None else self.diagram.to_dict(),
            "notes": list(self.notes),
        }
