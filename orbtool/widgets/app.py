"""``orbtool.widgets.App``: loader, 3-D structure, PDOS, level explorer and
(for a family) the family board, as tabs of one panel.

The app only composes the views: analysis comes from
:func:`orbtool.family.analyze_case` / :func:`orbtool.family.analyze_family`,
the model from :mod:`orbtool.tb`; every failure becomes a message in the
tab it concerns.
"""

from __future__ import annotations

from pathlib import Path

import ipywidgets as w

from .. import style
from ._common import attempt, ensure_bokeh, esc, message_html
from .loader import Loader, describe

__all__ = ["App", "fit_case"]

_TABS = ("Load", "Structure", "PDOS", "Level explorer", "Family")


def fit_case(case, site=None, state=None):
    """The per-case model of one case, chosen and fitted exactly as the
    pipeline does (:func:`orbtool.family.case_story`); ``site`` and ``state``
    are accepted for compatibility and must be the case's own (the story
    finds them by its one rule)."""
    from ..family import case_story

    story = case_story(case)
    if story.model is None:
        raise ValueError(f"{case.name}: no model: " + "; ".join(story.notes))
    return story.model.fit


def _story(app, case, a):
    """The case's :class:`orbtool.story.CaseStory`, computed once (the app formats it, never refits)."""
    from ..case import Family
    from ..family import FamilyAnalysis

    if app.family_analysis is not None:
        return app.family_analysis.story(case.name)
    if getattr(app, "_single", None) is None or app._single.results[0] is not a:
        app._single = FamilyAnalysis(Family((case,), name=case.name), [a])
    return app._single.story(case.name)


def _fallback_analysis(case, err):
    """Site and states straight from :func:`case_context` when the case
    summary step fails; ``error`` keeps what went wrong."""
    from types import SimpleNamespace

    from .pdos import case_context

    ctx, err2 = attempt(case_context, case)
    site = ctx["site"] if ctx else None
    states = ctx["states"] if ctx else []
    from ..story import choose_defect_state

    state = choose_defect_state(states)
    return SimpleNamespace(name=case.name, site=site, states=states, state=state,
                           error=f"case summary incomplete: {err}", ok=site is not None)


def _note(text, kind="warn"):
    return w.HTML(message_html(text, kind))


class App:
    """The orbtool Jupyter app.

    Parameters
    ----------
    case_or_family : DefectCase, Family, str or Path, optional
        What to show first; a path is read with the loader's rules
        (folder → case, ``.toml`` → family). Nothing → an empty app with the loader.
    fit : FitResult, optional
        Model for the level explorer (default: fitted per case, or shared
        across the family).
    analysis : FamilyAnalysis, optional
        An :func:`orbtool.family.analyze_family` result for the family given
        (saves analysing it again).

    Attributes
    ----------
    widget : ipywidgets.Tab  the app (displaying the App displays it).
    case, analysis : the case shown and its :class:`orbtool.family.CaseAnalysis`.
    structure, pdos, levels, board : the component views (None when not available).
    session : :class:`orbtool.widgets.state.SessionBar`  save / restore of the analysis.
    """

    def __init__(self, case_or_family=None, *, fit=None, analysis=None):
        ensure_bokeh()
        self.fit = fit
        self._given_analysis = analysis
        self.family = self.family_analysis = None
        self.case = self.analysis = self.story = None
        self.structure = self.pdos = self.levels = self.board = None
        self.loader = Loader(on_load=self._loaded)
        self.header = w.HTML()
        self.panes = {t: w.VBox([_note("nothing loaded yet", "info")]) for t in _TABS}
        self.panes["Load"].children = [self.loader.widget]
        self.tabs = w.Tab(children=[self.panes[t] for t in _TABS])
        for i, t in enumerate(_TABS):
            self.tabs.set_title(i, t)
        self.tabs.observe(self._tab_shown, names="selected_index")
        from .state import SessionBar

        self.session = SessionBar(self)
        self.widget = w.VBox([self.header, self.tabs, self.session.widget])
        self.widget.add_class("orbtool-app")
        if case_or_family is not None:
            if isinstance(case_or_family, (str, Path)):
                self.loader.path.value = str(case_or_family)
                self.loader.load(case_or_family)
            else:
                self._loaded(case_or_family)
                self.loader.value, self.loader.read_from = case_or_family, None

    # -------------------------------------------------------------- loading
    def _loaded(self, obj):
        from ..case import DefectCase, Family

        if isinstance(obj, Family):
            self.show_family(obj)
        elif isinstance(obj, DefectCase):
            self.family = self.family_analysis = None
            self.panes["Family"].children = [_note("a single case is loaded (load a family manifest for the board)",
                                                   "info")]
            self.show_case(obj)
        else:
            self.show_data(obj)

    def show_family(self, family):
        """Analyse every case, fit one shared model, fill the board; show the first case."""
        from ..batch import analyze_family
        from .family import FamilyBoard, board_rows

        fa = self._given_analysis
        if fa is None or getattr(fa, "family", None) is not family:
            fa = analyze_family(family, workers=1, progress=False)
        self.family, self.family_analysis = family, fa
        if self.fit is None:
            fit = fa.fit_result
            if fit is None:
                fit, err = attempt(fa.shared_fit)
                self._fit_note = None if err is None else f"no shared fit: {err}"
            self._family_fit = fit
        else:
            self._family_fit = self.fit
        self.board = FamilyBoard(board_rows(fa, self._family_fit), on_select=lambda name: self.show_case(family[name]),
                                 errors=fa.errors)
        self.panes["Family"].children = [self.board.widget]
        ok = [r.name for r in fa.results if r.ok]
        self.show_case(family[ok[0]] if ok else family[0])

    def show_case(self, case):
        """Fill the structure, PDOS and level tabs for one case."""
        from ..family import analyze_case

        self.case = case
        if self.family_analysis is not None:
            self.analysis = self.family_analysis[case.name]
        else:
            self.analysis, err = attempt(analyze_case, case)
            if err:
                self.analysis = _fallback_analysis(case, err)
        a = self.analysis
        where = f" — family {self.family.name}" if self.family is not None else ""
        site = f" · {a.site.element} vacancy, {a.site.point_group}" if a.site is not None else ""
        self._header(case.name, where + site)
        self._structure_tab(case, a)
        self._pdos_tab(case, a)
        self._levels_tab(case, a)
        self.tabs.selected_index = _TABS.index("Structure")

    def _header(self, title, rest="", missing=""):
        """The line above the tabs: every user-given name is escaped (case,
        family and file names are text, never markup)."""
        extra = (f'<br><small style="color:{style.MUTED}">{esc(missing)}</small>' if missing else "")
        self.header.value = (f'<div class="orbtool-header" style="font-family:{style.FONT};color:{style.INK}">'
                             f"<b>{esc(title)}</b>{esc(rest)}{extra}</div>")

    def show_data(self, obj):
        """A single file: a PDOS goes to the PDOS tab, a grid or a structure to
        the structure tab; every other tab and the header say what is missing."""
        from .pdos import PDOSExplorer
        from .structure import StructureView

        self.family = self.family_analysis = self.case = self.analysis = None
        self.structure = self.pdos = self.levels = self.board = None
        name = describe(obj)
        is_pdos = hasattr(obj, "channels")
        is_grid = hasattr(obj, "values") and hasattr(obj, "cell")
        atoms = obj if hasattr(obj, "get_chemical_symbols") else getattr(obj, "atoms", None)
        if not (is_pdos or is_grid or atoms is not None):
            raise ValueError(f"nothing to show for a {type(obj).__name__}")
        need_case = "load the defect run folder with its host (path or upload) for the vacancy, states and model"
        if is_pdos:
            self.pdos = PDOSExplorer(defect_pdos=obj)
            self.panes["PDOS"].children = [self.pdos.widget, _note("one PDOS file: no band edges or in-gap states "
                                                                   "(" + need_case + ")", "info")]
        else:
            self.panes["PDOS"].children = [_note(f"no PDOS in {name}; {need_case}", "info")]
        if atoms is not None:
            grid = obj if is_grid else None
            self.structure = StructureView(atoms, grid=grid)
            what = "the grid and its atoms" if grid is not None else "the atoms"
            self.panes["Structure"].children = [self.structure.widget, _note(
                f"showing {what} only: no vacancy site (needs the host structure), so no shells or R toggle",
                "info")]
        elif is_grid:
            self.panes["Structure"].children = [_note(f"{name} holds a grid without atoms: nothing to place it on; "
                                                      "load it with its structure", "warn")]
        else:
            self.panes["Structure"].children = [_note(f"no structure in {name}", "info")]
        self.panes["Level explorer"].children = [_note(f"no model to explore from one file; {need_case}", "info")]
        self.panes["Family"].children = [_note("a single file is loaded (load a family manifest for the board)",
                                               "info")]
        missing = ("missing for a full analysis: host structure, defect PDOS/projections"
                   + ("" if is_grid else ", state grid"))
        self._header(name, " · one file", missing)
        self.tabs.selected_index = _TABS.index("PDOS" if is_pdos else "Structure")

    def _tab_shown(self, change):
        # nglview measures its canvas when shown; a view built in a hidden tab needs a resize to draw
        if change["new"] == _TABS.index("Structure") and self.structure is not None:
            attempt(self.structure.resize)

    # ----------------------------------------------------------------- tabs
    def _state_grid(self, case):
        for role in ("state", "orbital", "density"):
            if role in case.grids:
                return case.grids[role]
        return None

    def _structure_tab(self, case, a):
        from .structure import StructureView

        view, err = attempt(StructureView, case.defect, a.site, self._state_grid(case))
        self.structure = view
        notes = [] if a.error is None else [_note(a.error)]
        self.panes["Structure"].children = ([view.widget] if view else [_note(err, "error")]) + notes

    def _pdos_tab(self, case, a):
        from .pdos import PDOSExplorer, case_context

        if case.defect_pdos is None and case.host_pdos is None:
            self.panes["PDOS"].children = [_note("this case has no PDOS")]
            return
        ctx, err = attempt(case_context, case, a.site)
        view, err2 = (None, err) if err else attempt(PDOSExplorer, case, site=a.site, context=ctx)
        self.pdos = view
        self.panes["PDOS"].children = [view.widget] if view else [_note(err2, "error")]

    def _levels_tab(self, case, a):
        from .levels import LevelExplorer

        fit, err, which, story = self.fit, None, None, None
        if fit is not None and self.family_analysis is not None:
            which = case.name if case.name in self.family_analysis.fit_cases else None
        if fit is None:
            if a.site is None or a.state is None or not getattr(a, "ok", True):
                err = a.error or "no in-gap state to fit"
            else:
                story, err = attempt(_story, self, case, a)
                if story is not None:
                    self.story = story
                    if story.model is None:
                        err = "; ".join(story.notes) or getattr(self, "_fit_note", None) or "no model"
                    else:
                        fit, which = story.model.fit, case.name
        if fit is None:
            self.levels = None
            self.panes["Level explorer"].children = [_note(f"no model to explore: {err}")]
            return
        view, err = attempt(LevelExplorer, fit, a.site, which, story=story)
        self.levels = view
        self.panes["Level explorer"].children = [view.widget] if view else [_note(err, "error")]

    def _ipython_display_(self):  # pragma: no cover - notebook only
        from IPython.display import display

        display(self.widget)

