"""The whole job in one call: manifest in → table, fit, levels, figures, report out.

Used by ``orbtool analyze``, ``orbtool fit`` and ``orbtool demo``.
"""

from __future__ import annotations

import json
import time
from pathlib import Path

from .errors import OrbtoolError
from .outputs import OutputFolder
from .story import MODEL_CAUTION, representative, toxic_caution

__all__ = ["run_analysis", "run_fit", "demo_manifest", "MODEL_CAUTION", "toxic_caution"]  # cautions: orbtool.story

def demo_manifest() -> Path:
    """Path of the bundled demo family's manifest."""
    p = Path(__file__).parent / "demo" / "data" / "family.toml"
    if not p.exists():
        raise OrbtoolError(f"{p}: the demo data are missing; run `make demo-data` to compute them")
    return p


def _say(quiet, msg):
    if not quiet:
        print(msg, flush=True)


def check_manifest_file(manifest) -> Path:
    """Read and validate ``manifest`` (every schema problem at once, each with its line) without
    reading any case; raises :class:`~orbtool.errors.InputFormatError`. Done before an output folder
    is created, so a bad manifest leaves nothing behind."""
    from .io.manifest import check_manifest, raise_manifest_problems
    path = Path(manifest)
    _, problems, _ = check_manifest(path)
    raise_manifest_problems(path, problems)
    return path


def _analyse(manifest, workers, scheduler, quiet):
    """Read and analyse every case in the workers (:func:`orbtool.batch.analyze_family` on the
    manifest): a case that cannot be read or analysed is a row with its reason, never an aborted
    family. Returns ``(family, FamilyAnalysis)``; the family holds the cases that could be read,
    summaries without their PDOS/projection/grid arrays (:func:`orbtool.batch.full_case` re-reads one)."""
    from .batch import analyze_family
    res = analyze_family(manifest, workers=workers, client=scheduler, progress=not quiet)
    fam = res.family
    n_bad = len(res.errors)
    _say(quiet, f"family {fam.name!r}: {len(res.results)} cases from {manifest}"
         + (f" ({n_bad} could not be analysed)" if n_bad else ""))
    for name, err in res.errors.items():
        _say(quiet, f"  case {name}: skipped — {err}")
    return fam, res


def run_fit(manifest, workers=None, quiet=False):
    """Analyse the family and return the shared fit (FitResult); unless ``quiet``, first print the
    representative case's story (the account every surface shows)."""
    _, res = _analyse(manifest, workers, None, quiet)
    fit = res.shared_fit()
    rep = representative(res, fit)
    if rep is not None:
        _say(quiet, res.story(rep.name).summary() + "\n")
    return fit


def run_analysis(manifest, out, *, force=False, workers=None, scheduler=None, figures=True, quiet=False,
                 demo=False) -> Path:
    """Run the whole pipeline on ``manifest`` and write results into ``out``.

    Writes: ``family_table.csv``, ``family.json`` (table, fit, levels,
    trends), ``fit_summary.txt`` (fit summary + explanation + inverse
    question), ``figures/`` (mechanism, PDOS, state slice, trend; SVG, PDF,
    PNG) and ``report.html`` (standalone, opens offline).

    The manifest is checked before ``out`` is created (a bad manifest leaves nothing behind). Cases are
    read and analysed in the workers (``workers`` local processes, or the dask ``scheduler``, a Client);
    a case that cannot be read or analysed is a row with its reason in every output, and the others'
    outputs are complete. Paths in the outputs are shown relative to the manifest's folder.
    """
    t0 = time.perf_counter()
    manifest = check_manifest_file(manifest)  # a bad manifest must not leave an output folder behind
    folder = OutputFolder(out, force=force)
    try:
        _run(folder, manifest, workers, scheduler, figures, quiet, demo)
    finally:
        folder.close()
    _say(quiet, f"wrote {len(folder.written)} files to {folder.root} in {time.perf_counter() - t0:.1f} s")
    return folder.root


def _run(folder, manifest, workers, scheduler, figures, quiet, demo):
    from .batch import full_case
    from .outputs import display_paths
    fam, res = _analyse(manifest, workers, scheduler, quiet)
    base = manifest.parent
    for r in res.results:  # outputs travel: paths relative to the manifest's folder, never the machine's
        if r.error:
            r.error = display_paths(r.error, base)
    fit = None
    try:
        fit = res.shared_fit()
    except OrbtoolError as exc:
        res.notes.append(f"shared fit not possible: {exc}")
    res.transition_levels()
    trends = res.trends()
    rep = representative(res, fit)
    full = None
    if rep is not None:  # the representative case with its arrays (the workers kept summaries only)
        try:
            full = full_case(fam, rep.name)
        except OrbtoolError as exc:  # changed on disk since the workers read it: the figures go, the rest stays
            res.notes.append(f"{rep.name}: could not be re-read for figures ({exc})")
    res.notes[:] = [display_paths(n, base) for n in res.notes]
    folder.write_text("family_table.csv", res.to_csv())
    doc = json.loads(res.to_json())
    from .family import clean_for_json
    doc["trends"] = clean_for_json(trends)
    folder.write_text("family.json", json.dumps(doc, indent=1))
    n_bad = len(res.errors)
    texts = [f"orbtool analysis of {fam.name!r} ({len(res.results)} cases"
             + (f", {n_bad} not analysed: see below" if n_bad else "") + ")", ""]
    if demo:
        texts += ["NOTE: the demo family is MODEL DATA computed with orbtool's own supercell tight-binding "
                  "generator for invented compounds; it shows the workflow, not real materials.", ""]
    story = res.story(rep.name) if rep is not None else None
    if story is not None:  # the same account the app, the reports and the figures show
        texts += [story.summary(), ""]
    if fit is not None:
        texts += [fit.summary(), "", "Mechanism", "---------", fit.explain(case=rep.name if rep else None), ""]
        try:
            inv = fit.smallest_change_to_shallow(case=rep.name if rep else None, n_grid=81)
            texts += [f"What would make {rep.name if rep else 'it'} shallow? (smallest change per knob; "
                      "model prediction)",
                      "---------------------------", *_inverse_lines(inv), ""]
            from .family import TOXIC_ELEMENTS
            named = sorted({e for c in (inv if isinstance(inv, (list, tuple)) else [inv])
                            for e in TOXIC_ELEMENTS if c.knob.startswith("swap:") and c.knob.endswith(f">{e}")})
            if named:
                texts += [f"Caution: suggested swaps involve toxic elements ({', '.join(named)}). A model "
                          "suggestion is not a recommendation to make or handle such compounds; follow local "
                          "regulations and licensed laboratory practice.", ""]
        except OrbtoolError as exc:
            texts += [f"Inverse question not answered: {exc}", ""]
    for key, dl in res.levels.items():
        texts += [dl.summary(), ""]
    if n_bad:
        texts += ["Cases not analysed", "------------------",
                  *[f"  {name}: {err}" for name, err in res.errors.items()], ""]
    texts += ["Cautions", "--------", MODEL_CAUTION]
    tox = toxic_caution(res.toxic_elements())
    if tox:
        texts.append(tox)
    texts += [f"note: {n}" for n in res.notes]
    folder.write_text("fit_summary.txt", display_paths("\n".join(texts) + "\n", base))
    if figures:
        _figures(folder, fam, res, fit, quiet, full)
    from .report import case_report, family_report
    folder.write_text("report.html", family_report(fam, res, fit, trends, demo=demo, full=full))
    if rep is not None:  # one case report (each embeds bokeh, ~4 MB): the representative case
        folder.write_text(f"report_{_safe(rep.name)}.html",
                          case_report(fam, res, rep.name, fit, demo=demo, full=full or fam[rep.name]))


def _safe(name: str) -> str:
    """A case name usable as a file name."""
    return "".join(ch if ch.isalnum() or ch in "-_+." else "_" for ch in name)


def _inverse_lines(changes) -> list[str]:
    """One readable line per knob of ``fit.smallest_change_to_shallow()``."""
    changes = changes if isinstance(changes, (list, tuple)) else [changes]
    lines = []
    for c in changes:
        if c.reached:
            lines.append(f"  {c.knob:<16} change {c.change:+.3f} ± {c.sigma:.3f} {c.unit:<3} → level "
                         f"{c.level_after:+.3f} eV above the VBM  ({c.note})")
        else:
            lines.append(f"  {c.knob:<16} not reachable: {c.note}")
    return lines


def _figures(folder, fam, res, fit, quiet, case=None):
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    from . import figures as F
    from .mechanism import mechanism
    rep = representative(res, fit)
    made = []
    if rep is not None:
        story = res.story(rep.name)
        if story.model is not None:
            m = story.model
            knobs = {k: v for k, v in m.knobs.items() if v is not None}
            fig = F.mechanism_figure(mechanism(m.fit, rep.name, knobs=knobs))
            made += _save(F, folder, fig, "mechanism")
            plt.close(fig)
    if rep is not None and case is not None:
        if case.defect_pdos is not None:
            fig = F.pdos_figure(case, rep.site, rep.states)
            made += _save(F, folder, fig, "pdos_first_shell")
            plt.close(fig)
        if "state" in case.grids:
            fig = F.state_slice_figure(case.grids["state"], rep.site)
            made += _save(F, folder, fig, "state_slice")
            plt.close(fig)
    rows = res.table()
    ok = [r for r in rows if r.get("status") == "ok"]  # a broken case is a row without numbers
    x = "pair_distance_mean"
    keys = [k for k in ok[0] if k.startswith("first_shell") or "distance" in k] if ok else []
    if ok and x not in ok[0] and keys:
        x = keys[0]
    if ok:
        fig = F.trend_figure(rows, x)
        made += _save(F, folder, fig, "family_trend")
        plt.close(fig)
    _say(quiet, f"  figures: {len(made)} files")


def _save(F, folder, fig, stem):
    for fmt in ("svg", "pdf", "png"):
        folder.path(f"figures/{stem}.{fmt}")
    return F.save_figure(fig, folder.root / "figures" / stem)
