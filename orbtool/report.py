"""Standalone HTML reports (bokeh with inline resources: they open offline).

:func:`family_report` — the family table, the level-depth board, the fit and
its explanation, transition levels with SRH factors, a level diagram and a
PDOS overlay of the representative case, and the cautions.
:func:`case_report` — one case: the vacancy and its shells, the in-gap
states and their character, the fitted levels, the PDOS, its levels and SRH
factor, the cautions.
"""

from __future__ import annotations

import html
import math
from pathlib import Path

__all__ = ["family_report", "case_report"]

_CSS = """
body{font-family:'DejaVu Sans',sans-serif;color:#202033;background:#fbfaf7;margin:2em auto;max-width:1100px;
line-height:1.45}
h1{font-size:1.6em;margin-bottom:.2em} h2{font-size:1.2em;border-bottom:1px solid #e4e1d8;padding-bottom:.2em;
margin-top:1.6em} pre{background:#f3f1ea;padding:.8em;overflow-x:auto;font-size:.85em;white-space:pre-wrap}
table.t{border-collapse:collapse;font-size:.8em} table.t td,table.t th{border:1px solid #e4e1d8;padding:2px 6px;
text-align:right} table.t th{background:#efece3} .caution{border-left:5px solid #7a2614;background:#f7ece8;
padding:.6em 1em;margin:1em 0} .note{border-left:5px solid #1b5e8a;background:#eaf1f6;padding:.6em 1em}
"""

_TABLE_KEYS = ("name", "charge", "motif", "cation", "anion", "vacancy", "variant", "removed", "point_group",
               "n_first_shell", "site_distance_mean", "pair_distance_mean", "above_vbm", "below_cbm", "gap",
               "occupation", "shell1_fraction", "s_weight", "p_weight", "srh_vs_midgap", "transition_levels",
               "status", "error")


def _fmt(v, base=None):
    if v is None:
        return ""
    if isinstance(v, float):
        if not math.isfinite(v):
            return ""
        return f"{v:.3g}" if abs(v) >= 1e3 or (abs(v) < 1e-2 and v != 0) else f"{v:.3f}"
    return _text(v, base)


def _base(fam):
    """Folder the report's file paths are shown relative to: the manifest's (else the working folder)."""
    from pathlib import Path
    src = getattr(fam, "source", None)
    return Path(src).parent if src else None


def _text(value, base) -> str:
    """A text slot of a report: file paths relative to ``base`` (reports travel; machine paths
    should not), then HTML-escaped."""
    from .outputs import display_paths
    return html.escape(display_paths(str(value), base))


def _table(rows, base=None):
    keys = [k for k in _TABLE_KEYS if any(k in r for r in rows)]
    head = "".join(f"<th>{html.escape(k.replace('_', ' '))}</th>" for k in keys)
    body = "".join("<tr>" + "".join(f"<td>{_fmt(r.get(k), base)}</td>" for k in keys) + "</tr>" for r in rows)
    return f"<div style='overflow-x:auto'><table class='t'><tr>{head}</tr>{body}</table></div>"


def _bokeh_parts(fam, res, fit, rep, case=None):
    """(script, divs) of the interactive figures, or ('', {}) if bokeh cannot build them."""
    from bokeh.embed import components

    from . import views
    figs = {}
    rows = res.table()
    cols = views.family_columns(rows)
    xs = ["pair_distance_mean"] if "pair_distance_mean" in cols else views.family.numeric_keys(cols)
    if xs and "above_vbm" in cols:  # a board of levels needs a case with a level (and a descriptor)
        board = views.family_board(cols, x=xs[0], y="above_vbm")
        figs["board"] = board[0] if isinstance(board, tuple) else board
    story = res.story(rep.name) if rep is not None else None
    if story is not None and story.model is not None:
        m = story.model
        pred = m.fit.predict(case=rep.name)
        data = views.level_diagram_data(pred, dangling=m.dangling_energy)
        cbm = pred.cbm if math.isfinite(pred.cbm) else pred.level + 1
        figs["levels"] = views.level_diagram(data, y_range=(-2.0, cbm + 1.5),
                                             title=f"{rep.name}: fitted levels")
    if rep is not None and case is not None:
        if case.defect_pdos is not None and rep.site is not None:
            from .analysis import align
            picks = views.channel_choices(case.defect_pdos, rep.site)
            first = {k: v for k, v in picks.items() if k == "total" or k in ("shell 1 · s", "shell 1 · p")}
            first = first or dict(list(picks.items())[:3])
            edges = rep.state.edges if rep.state is not None else None
            shift = align(case, rep.site).shift
            vbm = edges.vbm if edges is not None else 0.0
            lines = views.pdos_curves(first, case.defect_pdos, case.host_pdos, defect_shift=shift, vbm=vbm)
            ymax = max((max(y) for y in lines["ys"]), default=1.0)
            st = views.states_data(rep.states, vbm_shift=vbm, ymax=0.9 * ymax)
            figs["pdos"] = views.pdos_figure(lines, st, gap=edges.gap if edges is not None else None,
                                             title=f"{rep.name}: PDOS, host (dashed) vs defect (solid)")
    if not figs:
        return "", {}
    script, divs = components(figs)
    return script, divs


def family_report(fam, res, fit=None, trends=None, *, demo: bool = False, full=None) -> str:
    """The HTML text of a family report (inline bokeh; no network needed).

    ``full`` is the representative case with its arrays (for the PDOS figure); by default it is
    re-read with :func:`orbtool.batch.full_case` (a family from the worker route holds summaries).
    File paths are shown relative to the manifest's folder, never as the machine's absolute path."""
    from bokeh.resources import INLINE

    from .story import MODEL_CAUTION, representative, toxic_caution
    rep = representative(res, fit)
    base = _base(fam)
    if rep is not None and full is None:
        full = _full(fam, rep.name, res)
    parts = [f"<!DOCTYPE html><html lang='en'><head><meta charset='utf-8'><title>orbtool report: "
             f"{html.escape(fam.name)}</title><style>{_CSS}</style>{INLINE.render()}"]
    try:
        script, divs = _bokeh_parts(fam, res, fit, rep, full)
    except Exception as exc:  # a figure must never cost the user the report
        script, divs = "", {}
        res.notes.append(f"interactive figures skipped: {type(exc).__name__}: {exc}")
    parts.append(script + "</head><body>")
    parts.append(f"<h1>orbtool report — {html.escape(fam.name)}</h1>")
    n_bad = len(res.errors)
    parts.append(f"<p>{len(res.results)} cases" + (f" ({n_bad} not analysed: see <i>Problems and notes</i>)"
                                                   if n_bad else "")
                 + f"; manifest <code>{_text(Path(fam.source).name if fam.source else '', None)}</code>; file "
                 "paths are shown relative to the manifest's folder.</p>")
    if demo:
        parts.append("<div class='note'><b>Demo data.</b> This family is <b>model data</b> computed with orbtool's own "
                     "supercell tight-binding generator for <b>invented compounds</b>; it demonstrates the workflow "
                     "and says nothing about real materials.</div>")
    parts.append(f"<div class='caution'><b>Caution.</b> {html.escape(MODEL_CAUTION)}</div>")
    tox = toxic_caution(res.toxic_elements())
    if tox:
        parts.append(f"<div class='caution'><b>Toxic elements.</b> {html.escape(tox)}</div>")
    parts.append("<h2>Family table</h2>" + _table(res.table(), base))
    if "board" in divs:
        parts.append("<h2>Level depth across the family</h2>" + divs["board"])
    elif not any(r.ok and r.state is not None for r in res.results):
        parts.append("<p>No case has an in-gap defect state, so there is no level board.</p>")
    if trends and trends.get("correlation"):
        top = sorted(trends["correlation"].items(), key=lambda kv: -abs(kv[1]))[:6]
        parts.append("<p>Strongest correlations of the level (eV above VBM) with descriptors (Pearson r, "
                     f"n = {trends['n']}): " + ", ".join(f"{html.escape(k)} {v:+.2f}" for k, v in top) + ".</p>")
    if rep is not None:
        parts.append("<h2>Defect state and model of the representative case</h2><pre class='story'>"
                     + _text(res.story(rep.name).summary(), base) + "</pre>")
    if fit is not None:
        parts.append("<h2>Shared tight-binding fit</h2><pre>" + html.escape(fit.summary()) + "</pre>")
        explained = fit.explain(case=rep.name if rep is not None and rep.name in res.fit_cases else None)
        parts.append("<h2>Mechanism</h2><pre>" + html.escape(explained) + "</pre>")
    if "levels" in divs:
        parts.append(divs["levels"])
    if "pdos" in divs:
        parts.append("<h2>Projected DOS of the representative case</h2>" + divs["pdos"])
    if res.levels:
        parts.append("<h2>Kohn–Sham state, transition levels and SRH factor</h2>")
        for dl in res.levels.values():
            parts.append("<pre>" + _text(dl.summary(), base) + "</pre>")
    parts.append(_conventions_section(fam, res, base))
    if res.errors or res.notes:
        parts.append("<h2>Problems and notes</h2><ul>" +
                     "".join(f"<li>{html.escape(k)}: {_text(v, base)}</li>" for k, v in res.errors.items()) +
                     "".join(f"<li>{_text(n, base)}</li>" for n in res.notes) + "</ul>")
    parts.append("<p style='font-size:.8em;color:#8a8a80'>Written by orbtool. Figures for print are in "
                 "<code>figures/</code> beside this file.</p></body></html>")
    return "\n".join(parts)


def case_report(fam, res, name: str, fit=None, *, demo: bool = False, full=None) -> str:
    """The HTML text of a one-case report (inline bokeh; no network needed).

    ``full`` is the case with its arrays (by default re-read with :func:`orbtool.batch.full_case`).
    File paths are shown relative to the manifest's folder, never as the machine's absolute path."""
    from bokeh.embed import components
    from bokeh.resources import INLINE

    from .story import MODEL_CAUTION, toxic_caution
    r = res[name]
    base = _base(fam)
    parts = [f"<!DOCTYPE html><html lang='en'><head><meta charset='utf-8'><title>orbtool report: "
             f"{html.escape(name)}</title><style>{_CSS}</style>{INLINE.render()}"]
    divs = {}
    if r.ok:
        try:
            from . import views
            figs = {}
            story = res.story(name)
            if story.model is not None:
                pred = story.model.fit.predict(case=name)
                data = views.level_diagram_data(pred, dangling=story.model.dangling_energy)
                figs["levels"] = views.level_diagram(data, y_range=(-2.0, pred.cbm + 1.5
                                                     if math.isfinite(pred.cbm) else pred.level + 2),
                                                     title=f"{name}: fitted levels")
            script, divs = components(figs) if figs else ("", {})
        except Exception as exc:  # a figure must never cost the user the report
            script, divs = "", {}
            r.notes.append(f"interactive figures skipped: {type(exc).__name__}: {exc}")
    else:
        script = ""
    parts.append(script + "</head><body>")
    parts.append(f"<h1>orbtool report — {html.escape(name)}</h1>")
    if demo:
        parts.append("<div class='note'><b>Demo data.</b> Model data for an invented compound (orbtool's own "
                     "tight-binding generator); it demonstrates the workflow only.</div>")
    parts.append(f"<div class='caution'><b>Caution.</b> {html.escape(MODEL_CAUTION)}</div>")
    case = full if full is not None else _full(fam, name, r)
    from .family import TOXIC_ELEMENTS
    present = set(case.defect.get_chemical_symbols()) if case is not None else set(map(str, r.labels.values()))
    tox = toxic_caution([e for e in sorted(present) if e in TOXIC_ELEMENTS])
    if tox:
        parts.append(f"<div class='caution'><b>Toxic elements.</b> {html.escape(tox)}</div>")
    parts.append("<h2>Result</h2><pre>" + _text(r.summary(), base) + "</pre>")
    if r.ok:
        parts.append("<h2>Defect state and model</h2><pre class='story'>" + _text(res.story(name).summary(), base)
                     + "</pre>")
    if r.site is not None:
        parts.append("<h2>Vacancy and neighbour shells</h2><pre>" + html.escape(r.site.summary()) + "</pre>")
    for k, st in enumerate(r.states):
        parts.append(f"<h2>In-gap state {k + 1}</h2><pre>" + _text(st.summary(), base) + "</pre>")
    if "levels" in divs:
        parts.append("<h2>Fitted cluster levels</h2>" + divs["levels"])
    key = r.labels.get("defect") or name
    if key in res.levels:
        parts.append("<h2>Levels and SRH factor</h2><pre>" + _text(res.levels[key].summary(), base) + "</pre>")
    if case is not None:
        parts.append("<h2>What was read</h2><pre>" + _text(case.summary(), base) + "</pre>")
    parts.append("</body></html>")
    return "\n".join(parts)


# ---------------------------------------------------------------- how the numbers were referred (owndata)
def data_conventions(case, analysis=None) -> dict:
    """How one case's numbers were put on a common footing: plain text lines for a report.

    Returns
    -------
    dict with ``alignment`` (the routes, each with its shift and spread over the far atoms, eV, the
    one used marked, and the disagreement warning of :func:`orbtool.analysis.alignment.align`:
    routes more than 0.1 eV apart), ``edges`` (the band edges the levels are referred to: the true
    edges of a k-resolved calculation or the user, or the supercell's own k-points, with the
    folding warning) and ``units`` (the unit convention of every grid read and the reason it was
    assumed; energies are in eV). Each value is a list of str; ``warnings`` collects the warnings.
    """
    from .analysis import align, band_edges
    from .errors import OrbtoolError
    out = {"alignment": [], "edges": [], "units": [], "warnings": []}
    site = getattr(analysis, "site", None)
    try:
        al = align(case, site) if site is not None else None
    except OrbtoolError as exc:
        al = None
        out["alignment"].append(f"not aligned: {exc}")
    if al is not None:
        out["alignment"].append(f"shift {al.shift:+.4f} eV (added to defect-cell energies), spread {al.spread:.4f} eV, "
                                f"by {al.method.split(' [WARNING')[0]}")
        for r in al.routes:
            window = (f", window {r['window'][0]:.2f} … {r['window'][1]:.2f} eV" if r.get("window") is not None
                      else "")
            atoms = f", {r['n_atoms']} far atoms" if r.get("n_atoms") else ""
            out["alignment"].append(f"route {r['route']:<18} {r['shift']:+.4f} eV  spread {r['spread']:.4f} eV"
                                    f"{atoms}{window}")
        if not al.routes:
            out["alignment"].append("one route only: no independent cross-check was possible")
        out["warnings"] += [f"alignment: {w}" for w in al.warnings]
    elif site is None and not out["alignment"]:
        out["alignment"].append("not aligned: no vacancy site")
    state = getattr(analysis, "state", None) or next(iter(getattr(analysis, "states", None) or ()), None)
    edges = getattr(state, "edges", None)
    if edges is None:
        try:
            data = case.host_projections if case.host_projections is not None else case.host_pdos
            edges = band_edges(data) if data is not None else None
        except OrbtoolError as exc:
            out["edges"].append(f"no band edges: {exc}")
    if edges is not None:
        out["edges"].append(f"VBM {edges.vbm:.4f} eV, CBM {edges.cbm:.4f} eV, gap {edges.gap:.4f} eV (host scale) "
                            f"from {edges.method}")
        if edges.sampled is not None:
            v, c = edges.sampled
            out["edges"].append(f"true band edges used; the supercell's own k-points give VBM {v:.4f}, CBM {c:.4f} "
                                f"eV, gap {c - v:.4f} eV")
        else:
            out["edges"].append("the supercell's own k-points (no true band edges given): a Γ-only supercell can "
                                "fold the band extrema away; give edges= (a band-structure file or the gap)")
        out["warnings"] += [f"band edges: {w}" for w in edges.warnings]
    for who, grids in (("defect", case.grids), ("host", case.host_grids)):
        for role, g in grids.items():
            conv = g.meta.get("unit_convention")
            why = g.meta.get("unit_convention_reason") or "the file's own units"
            out["units"].append(f"{who} grid '{role}' ({g.unit}): " + (f"{conv} convention — " if conv else "") + why)
    if not out["units"]:
        out["units"].append("no grids read: no unit convention to decide")
    out["units"].append("energies (band energies, PDOS, potentials) in eV as the files state them")
    return out


def _conventions_section(fam, res, base=None) -> str:
    """HTML: per case, the alignment routes, band edges and unit conventions (:func:`data_conventions`)."""
    from .batch import full_case

    blocks = []
    for r in res.results:
        try:
            # a family analysed in workers holds summaries: re-read the case, so the routes are the worker's
            d = data_conventions(full_case(fam, r.name), r)
        except Exception as exc:  # one case must never cost the user the report
            d = {"alignment": [f"not reported: {type(exc).__name__}: {exc}"], "edges": [], "units": [], "warnings": []}
        text = ["alignment:", *("  " + x for x in d["alignment"]), "band edges:", *("  " + x for x in d["edges"]),
                "units:", *("  " + x for x in d["units"])] + [f"WARNING: {w}" for w in d["warnings"]]
        blocks.append(f"<h3>{html.escape(r.name)}</h3><pre>" + _text("\n".join(text), base)
                      + "</pre>")
    return ("<h2>Alignment, band edges and units per case</h2>" + "".join(blocks)) if blocks else ""


def _full(fam, name, notes_of):
    """Case ``name`` with its arrays (re-read when the family holds summaries), or None with a note
    on ``notes_of`` (a FamilyAnalysis or CaseAnalysis) if it cannot be read (any more)."""
    from .batch import full_case
    from .errors import OrbtoolError
    try:
        return full_case(fam, name)
    except KeyError:  # not among the cases that could be read: its row says why
        return None
    except OrbtoolError as exc:
        notes_of.notes.append(f"{name}: could not be re-read for the report ({exc})")
        return None
