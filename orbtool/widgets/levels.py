"""Live level explorer: the level diagram next to structure and chemistry knobs.

Thin by design: the knobs form one :class:`Knobs` state; every view (readout,
diagram, notes) is drawn from it by :meth:`LevelExplorer.update`, which calls
``fit.predict(...)`` once, turns the prediction into column data
(:func:`orbtool.views.level_diagram_data`) and reassigns the figure's
sources; nothing else is recomputed. Widgets and :meth:`LevelExplorer.set`
only change the state, so a knob set by code before the panel is displayed
shows in the readout and in the diagram alike.
"""

from __future__ import annotations

from dataclasses import dataclass

import ipywidgets as w
import numpy as np

from ..errors import ModelError
from ..views.levels import level_diagram, level_diagram_data, update_level_diagram
from ._common import attempt, batched, bokeh_pane, esc, message_html

__all__ = ["LevelExplorer", "Knobs", "knob_ranges", "srh_factor", "odd_mode_note", "toxic_swap_note"]

AS_FITTED = "(as fitted)"


@dataclass(frozen=True)
class Knobs:
    """The state of the level explorer: everything its views are drawn from.

    breathing : fraction of the first-shell distance (−0.05 = 5 % inward)
    mode : distortion-mode name (``VacancySite.distortion_modes`` key) or None
    amplitude : mode amplitude, Å
    coupling_scale : factor on the fitted couplings
    onsite_shift : offset of the first-shell on-site energies, eV
    swap : "(as fitted)" or "Old → New"
    """

    breathing: float = 0.0
    mode: str | None = None
    amplitude: float = 0.0
    coupling_scale: float = 1.0
    onsite_shift: float = 0.0
    swap: str = AS_FITTED


def odd_mode_note(mode: str | None) -> str:
    """Note for a distortion mode odd under inversion (a ``u`` irrep, e.g. T1u).

    Under inversion such a mode changes sign while the cluster energy does
    not, so the level shift is even in the amplitude: it starts at second
    order (∝ amplitude²) and looks flat near zero on the slider (group-theory
    selection rule; e.g. Dresselhaus, Dresselhaus & Jorio, *Group Theory*,
    Springer 2008, ch. 7 on Jahn–Teller active modes). Empty for even modes.
    """
    irrep = (mode or "").split(".")[0]
    if not irrep or not irrep.lower().endswith("u"):
        return ""
    return (f"{irrep} is odd under inversion: it moves the level only at second order (∝ amplitude²), "
            "so small amplitudes barely shift it.")


def toxic_swap_note(swap: str) -> str:
    """Caution for a swap that brings in a toxic element (the report's wording)."""
    if not swap or swap == AS_FITTED or "→" not in swap:
        return ""
    from ..family import TOXIC_ELEMENTS
    from ..pipeline import MODEL_CAUTION, toxic_caution

    new = swap.split("→")[1].strip()
    if new not in TOXIC_ELEMENTS:
        return ""
    return toxic_caution([new]).replace("This family contains", "This swap brings in") + " " + MODEL_CAUTION

#: knob ranges offered when the fit gives none, chosen for usable sliders
_DEFAULT_RANGES = {"breathing": (-0.15, 0.15), "distortion": (-0.3, 0.3), "coupling_scale": (0.5, 2.0),
                   "onsite_shift": (-2.0, 2.0)}


def knob_ranges(fit, case=None) -> dict[str, tuple[float, float, str]]:
    """Slider ranges bounded by the fit's validated parameter range.

    ``coupling_scale`` multiplies the fitted couplings: its range is the
    fitted parameter's bounds divided by its value; ``onsite_shift`` adds
    to the first-shell on-site energies: its range is the span left inside
    the bounds of the fitted shift parameters. Each range is intersected
    with a usable slider span; the returned note says which limit acts.

    Returns
    -------
    dict knob → (low, high, note)
    """
    out = {k: (lo, hi, "slider span") for k, (lo, hi) in _DEFAULT_RANGES.items()}
    bounds = getattr(fit, "parameter_bounds", None) or {}
    cs = bounds.get("coupling_scale")
    if cs is not None and cs[2] > 0:
        lo, hi = cs[0] / cs[2], cs[1] / cs[2]
        dlo, dhi = _DEFAULT_RANGES["coupling_scale"]
        out["coupling_scale"] = (max(lo, dlo), min(hi, dhi),
                                 f"fit bounds [{lo:.3g}, {hi:.3g}] ∩ slider span [{dlo:g}, {dhi:g}]")
    shifts = [b for n, b in bounds.items() if n.startswith("shift_") and (case is None or "@" not in n
                                                                         or n.endswith(f"@{case}"))]
    if shifts:
        lo = max(b[0] - b[2] for b in shifts)
        hi = min(b[1] - b[2] for b in shifts)
        dlo, dhi = _DEFAULT_RANGES["onsite_shift"]
        out["onsite_shift"] = (max(lo, dlo), min(hi, dhi),
                               f"fit bounds [{lo:.3g}, {hi:.3g}] eV ∩ slider span [{dlo:g}, {dhi:g}] eV")
    return out


def srh_factor(above_vbm: float, gap: float, recombination=None) -> float | None:
    """SRH rate of a trap at ``above_vbm`` relative to a trap at the intrinsic
    level (mid-gap), via :class:`orbtool.levels.TrapRecombination`.

    Default conditions (when ``recombination`` is None): equal electron and
    hole DOS masses (1 mₑ), equal capture times (1 µs), intrinsic material,
    300 K. Returns None when the level is outside the gap.
    """
    if not (np.isfinite(gap) and gap > 0 and 0.0 <= above_vbm <= gap):
        return None
    from ..levels import Semiconductor, TrapRecombination

    rec = recombination
    if rec is None:
        rec = TrapRecombination(Semiconductor.from_masses(gap, 1.0, 1.0), tau_n=1e-6, tau_p=1e-6)
    val, err = attempt(rec.midgap_ratio, above_vbm)
    return None if err else float(val)


def _swap_candidates(elements) -> list[str]:
    try:
        from ..tb.elements import available_elements, valence_electrons
    except ImportError:  # pragma: no cover - tb ships with orbtool
        return []
    out: list[str] = []
    avail, err = attempt(available_elements)
    if err:
        avail, err = attempt(available_elements, "harrison1980")
    avail = avail or ()
    for el in elements:
        ve, err = attempt(valence_electrons, el)
        if err:
            continue
        out += [x for x in avail if x != el and x not in out and attempt(valence_electrons, x)[0] == ve]
    return out


def validated_ranges_html(fit) -> str:
    """The "validated ranges" panel: what the fitted data cover and what the DFT harness measured
    (:func:`orbtool.story.validated_ranges`), formatted; not the optimiser's bounds."""
    from ..story import validated_ranges

    rows = "<br>".join(f"<b>{esc(k)}</b>: {esc(v)}" for k, v in validated_ranges(fit).lines())
    return f'<details><summary>validated ranges</summary><small>{rows}</small></details>'


class LevelExplorer:
    """Level diagram + knobs for one fitted case.

    Parameters
    ----------
    fit : FitResult-like
        Needs ``predict(geometry=None, swap=None, coupling_scale=1.0,
        onsite_shift=0.0, case=None)`` returning a Prediction and, for
        bounded sliders, ``parameter_bounds``.
    site : VacancySite-like, optional
        Enables the breathing slider (``site.breathe(fraction)``) and the
        distortion-mode slider (``site.distortion_modes()``,
        ``site.distort(mode, amplitude)``).
    case : str, optional
        Which fitted case to explore (default: the fit's first).
    recombination : TrapRecombination, optional
        Conditions for the SRH readout (see :func:`srh_factor`).
    swaps : list of str, optional
        Elements offered for the cation swap (default: same valence count
        as the first-shell element(s), with term values available).
    story : orbtool.story.CaseStory, optional
        The case's one account (what the pipeline and the reports show):
        when given, the swaps offered are the story's and the uncoupled
        dangling-orbital energy is the story's (the explorer only moves it
        by what a knob changes).

    Attributes
    ----------
    widget : ipywidgets.Widget   the whole panel, to display.
    figure : bokeh figure        the level diagram.
    prediction : Prediction      the latest successful prediction.
    """

    def __init__(self, fit, site=None, case=None, *, recombination=None, swaps=None, window: float = 2.0,
                 story=None):
        self.fit, self.site, self.case = fit, site, case
        self.story = story
        account = getattr(story, "model", None)
        if account is not None and swaps is None:
            swaps = [pair.split("→")[1] for pair in account.swaps]
        self.recombination = recombination
        self.window = window
        self._dangling: dict = {}
        self.ranges = knob_ranges(fit, case)
        first = [n.element for n in getattr(site, "first_shell", ()) or ()] if site is not None else []
        self.first_elements = sorted(set(first))
        pred, err = attempt(self._predict, None, None, 1.0, 0.0)
        if err:
            raise ModelError(f"the fit cannot predict its own case: {err}")
        self.prediction = pred
        gap = float(pred.cbm) if np.isfinite(pred.cbm) else 2.0
        data = level_diagram_data(pred, self._dangling_energy(None, 0.0), window=window)
        self.figure = level_diagram(data, y_range=(-window, gap + window), width=430)
        self._build_controls(swaps)
        self.update()

    # ------------------------------------------------------------- controls
    def _slider(self, key, description, step, fmt=".3f"):
        lo, hi, note = self.ranges[key]
        value = 1.0 if key == "coupling_scale" else 0.0
        value = min(max(value, lo), hi)
        # continuous_update: the readout and diagram follow the drag (a predict costs a few ms)
        s = w.FloatSlider(value=value, min=lo, max=hi, step=step, description=description, readout_format=fmt,
                          continuous_update=True, style={"description_width": "150px"},
                          layout=w.Layout(width="400px"))
        s.tooltip = f"range: {note}"
        return s

    def _build_controls(self, swaps):
        self.breathing = self._slider("breathing", "breathing (fraction)", 0.01)
        self.breathing.disabled = not hasattr(self.site, "breathe")
        modes = {}
        if self.site is not None and hasattr(self.site, "distortion_modes") and hasattr(self.site, "distort"):
            modes, _ = attempt(self.site.distortion_modes)
            modes = {k: v for k, v in (modes or {}).items() if k != "breathing"}
        self.mode = w.Dropdown(options=list(modes) or ["(none)"], description="distortion mode",
                               style={"description_width": "150px"}, layout=w.Layout(width="400px"))
        self.amplitude = self._slider("distortion", "mode amplitude (Å)", 0.01)
        self.amplitude.disabled = not modes
        self.coupling = self._slider("coupling_scale", "coupling scale (×)", 0.01)
        self.onsite = self._slider("onsite_shift", "on-site offset (eV)", 0.02)
        options = [AS_FITTED]
        cands = _swap_candidates(self.first_elements) if swaps is None else list(swaps)
        pairs = [(old, new) for old in self.first_elements for new in cands]
        if swaps is None:  # offer only swaps the fitted model can evaluate (term values in its source)
            pairs = [(o, n) for o, n in pairs if attempt(self._predict, None, {o: n}, 1.0, 0.0)[1] is None]
        options += [f"{old} → {new}" for old, new in pairs]
        self.swap = w.Dropdown(options=options, description="swap cation", style={"description_width": "150px"},
                               layout=w.Layout(width="400px"))
        self.readout = w.HTML()
        self.notes = w.HTML()
        self.mode_note = w.HTML()
        self.caution = w.HTML()
        self.limits = w.HTML(validated_ranges_html(self.fit))
        self._holding = False
        for c in (self.breathing, self.mode, self.amplitude, self.coupling, self.onsite, self.swap):
            c.observe(self._on_change, names="value")
        controls = w.VBox([self.breathing, self.mode, self.amplitude, self.mode_note, self.coupling, self.onsite,
                           self.swap, self.readout, self.caution, self.notes, self.limits],
                          layout=w.Layout(width="410px", min_width="410px"))
        self.widget = w.HBox([bokeh_pane(self.figure), controls], layout=w.Layout(flex_flow="row wrap"))
        self.widget.add_class("orbtool-levels")

    # --------------------------------------------------------------- state
    @property
    def state(self) -> Knobs:
        """The current :class:`Knobs` (what every view of the panel shows)."""
        mode = self.mode.value if not self.amplitude.disabled else None
        return Knobs(breathing=float(self.breathing.value), mode=mode, amplitude=float(self.amplitude.value),
                     coupling_scale=float(self.coupling.value), onsite_shift=float(self.onsite.value),
                     swap=self.swap.value)

    # --------------------------------------------------------------- model
    def _geometry(self):
        """New defect cell for the geometry knobs, or None. Breathing and a
        distortion mode are displacements of the first shell; together they
        are added (both are small, linear patterns about the relaxed cell)."""
        if self.site is None:
            return None
        k = self.state
        parts = []
        if not self.breathing.disabled and abs(k.breathing) > 0:
            parts.append(self.site.breathe(k.breathing))
        if k.mode is not None and abs(k.amplitude) > 0:
            parts.append(self.site.distort(k.mode, k.amplitude))
        if len(parts) < 2:
            return parts[0] if parts else None
        base = self.site.defect
        geo = base.copy()
        geo.positions = base.positions + sum(p.positions - base.positions for p in parts)
        return geo

    def _swap(self, v=None):
        v = self.swap.value if v is None else v
        if v == AS_FITTED:
            return None
        old, new = (s.strip() for s in v.split("→"))
        return {old: new}

    def _predict(self, geometry, swap, coupling_scale, onsite_shift):
        return self.fit.predict(geometry=geometry, swap=swap, coupling_scale=coupling_scale,
                                onsite_shift=onsite_shift, case=self.case)

    def _dangling_energy(self, swap, onsite_shift):
        """On-site energy of the dangling orbitals (couplings off), eV above the
        VBM. On-site energies do not depend on geometry or coupling, and the
        offset adds to them exactly, so one prediction per swap is cached."""
        key = None if swap is None else tuple(sorted(swap.items()))
        if key not in self._dangling:
            p, err = attempt(self._predict, None, swap, 1e-9, 0.0)
            self._dangling[key] = float(p.level) if p is not None else None
        e = self._dangling[key]
        account = getattr(self.story, "model", None)
        if account is not None and e is not None:  # the story's value, moved by what the swap changes
            if None not in self._dangling:
                self._dangling_energy(None, 0.0)
            base = self._dangling[None]
            e = account.dangling_energy + (e - base if base is not None else 0.0)
        return None if e is None else e + onsite_shift

    def set(self, **knobs) -> list[str]:
        """Set knobs programmatically, before or after the panel is shown.

        Keys are the fields of :class:`Knobs` (``breathing``, ``mode``,
        ``amplitude``, ``coupling_scale``, ``onsite_shift``, ``swap``).
        Values outside the validated range are clamped and the clamping is
        reported in the widget; all knobs are applied first and the views
        are redrawn once. Returns the clamp notes.
        """
        sliders = {"breathing": self.breathing, "amplitude": self.amplitude, "coupling_scale": self.coupling,
                   "onsite_shift": self.onsite}
        choices = {"mode": self.mode, "swap": self.swap}
        for k in knobs:
            if k not in sliders and k not in choices:
                raise KeyError(f"unknown knob {k!r}; expected one of {sorted(sliders) + sorted(choices)}")
        for k, v in knobs.items():
            if k in choices and v not in choices[k].options:
                raise ValueError(f"{k} {v!r} is not offered; choose one of {list(choices[k].options)}")
        notes = []
        self._holding = True
        try:
            for k, v in knobs.items():
                if k in choices:
                    choices[k].value = v
                    continue
                s = sliders[k]
                c = min(max(float(v), s.min), s.max)
                if c != float(v):
                    notes.append(f"{k} = {v:g} is outside the validated range [{s.min:.3g}, {s.max:.3g}]; "
                                 f"clamped to {c:.3g}")
                s.value = c
        finally:
            self._holding = False
        self._clamp_notes = notes
        self.update()
        return notes

    def update(self):
        """Redraw every view from :attr:`state`; returns the Prediction (or None on error)."""
        k = self.state
        swap = self._swap(k.swap)
        geo, err = attempt(self._geometry)
        pred = None
        if err is None:
            pred, err = attempt(self._predict, geo, swap, k.coupling_scale, k.onsite_shift)
        self.mode_note.value = message_html(odd_mode_note(k.mode), "info") if odd_mode_note(k.mode) else ""
        tox = toxic_swap_note(k.swap)
        self.caution.value = message_html(tox, "warn") if tox else ""
        if err:
            self.notes.value = message_html(f"knobs not applied (previous result kept): {err}", "error")
            return None
        self.prediction = pred
        data = level_diagram_data(pred, self._dangling_energy(swap, k.onsite_shift), window=self.window,
                                  coupling_scale=k.coupling_scale)
        with batched(self.figure):  # one document patch for every source that changed
            update_level_diagram(self.figure, data)
        self._show(pred)
        notes = getattr(self, "_clamp_notes", [])
        self._clamp_notes = []
        self.notes.value = message_html("\n".join(notes), "warn") if notes else ""
        return pred

    def _on_change(self, change):
        if not self._holding:
            self.update()

    def _show(self, p):
        gap = float(p.cbm) - float(p.vbm)
        f = srh_factor(float(p.above_vbm), gap, self.recombination)
        srh = "n/a (level outside the gap)" if f is None else f"{f:.3g} × mid-gap trap"
        self.readout.value = (
            '<table class="orbtool-readout" style="font-size:13px">'
            f'<tr><td>level above VBM</td><td class="orbtool-level"><b>{p.above_vbm:.3f} ± {p.sigma:.3f} eV</b>'
            f'</td></tr><tr><td>level below CBM</td><td>{p.below_cbm:.3f} eV</td></tr>'
            f'<tr><td>verdict</td><td>{esc(p.verdict)}</td></tr>'
            f'<tr><td>SRH rate</td><td>{srh}</td></tr></table>')

    def _ipython_display_(self):  # pragma: no cover - notebook only
        from IPython.display import display

        display(self.widget)
