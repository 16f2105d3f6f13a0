"""``orbtool analyze`` on a family with one broken case (issue 18): the broken case is a row with
its reason in every output, the other cases' outputs are complete, and no output carries the
machine's absolute paths. A bad manifest leaves no output folder behind.

External references: Python's standard-library ``csv`` and ``json`` readers (the outputs are
re-read with them), and the reference analysis of the intact case read on its own with
``orbtool.load_case`` (the worker route must give the same numbers as the single-case route).
The case data are the bundled demo family (MODEL DATA); the half-written PROCAR is the demo's
PROCAR cut inside a line, as a run that is still writing leaves it.
"""

from __future__ import annotations

import csv
import gzip
import io
import json
import shutil
from pathlib import Path

import pytest

from orbtool.cli import main
from orbtool.pipeline import demo_manifest

DEMO = demo_manifest().parent
GOOD = "defects/SnS-zincblende/V_S/q0"


@pytest.fixture(scope="module")
def family(tmp_path_factory):
    root = tmp_path_factory.mktemp("hostile")
    data = root / "data"
    shutil.copytree(DEMO / "hosts/SnS-zincblende", data / "host")
    shutil.copytree(DEMO / GOOD, data / "good")
    shutil.copytree(DEMO / GOOD, data / "broken")
    text = gzip.open(data / "broken/PROCAR.gz", "rt").read()
    (data / "broken/PROCAR.gz").unlink()
    cut = len(text) * 3 // 5
    while text[cut - 1] == "\n":  # the file must end inside a line
        cut -= 1
    (data / "broken/PROCAR").write_text(text[:cut])
    fam = root / "fam"
    fam.mkdir()
    lines = ['[family]', 'name = "zb"', "", "[[host]]", 'name = "zb"', 'path = "../data/host"', ""]
    for name in ("broken", "good"):
        lines += ["[[case]]", f'name = "{name}"', f'path = "../data/{name}"', 'host = "zb"', "charge = 0",
                  'motif = "zincblende"', 'cation = "Sn"', 'anion = "S"', ""]
    (fam / "family.toml").write_text("\n".join(lines))
    return root


@pytest.fixture(scope="module")
def outputs(family, tmp_path_factory):
    elsewhere = tmp_path_factory.mktemp("cwd")  # run from another folder: the data lie outside it
    out = elsewhere / "out"
    with pytest.MonkeyPatch.context() as mp:
        mp.chdir(elsewhere)
        code = main(["analyze", str(family / "fam" / "family.toml"), "--out", "out", "--workers", "1",
                     "--no-figures", "--quiet"])
    return code, out


def test_broken_case_is_a_row_with_its_reason_everywhere(outputs):
    code, out = outputs
    assert code == 0
    rows = {r["name"]: r for r in csv.DictReader(io.StringIO((out / "family_table.csv").read_text()))}
    assert list(rows) == ["broken", "good"]
    bad = rows["broken"]
    assert bad["status"] == "error"
    # the reason names the file, the line and what was wrong (the PROCAR reader's message)
    assert "PROCAR, line" in bad["error"] and "ends inside a line" in bad["error"]
    doc = json.loads((out / "family.json").read_text())
    assert doc["errors"]["broken"] == bad["error"]
    summary = (out / "fit_summary.txt").read_text()
    assert "Cases not analysed" in summary and f"broken: {bad['error']}" in summary
    report = (out / "report.html").read_text()
    assert "1 not analysed" in report and "ends inside a line" in report


@pytest.fixture(scope="module")
def alone(family):
    """The intact case read and analysed on its own (the single-case route)."""
    from orbtool import load_case
    from orbtool.family import analyze_case
    case = load_case(family / "data/good", host=family / "data/host", name="good",
                     labels={"motif": "zincblende", "cation": "Sn", "anion": "S"})
    return case, analyze_case(case)


def test_other_cases_outputs_complete_and_equal_to_reading_alone(outputs, alone):
    _, out = outputs
    rows = {r["name"]: r for r in csv.DictReader(io.StringIO((out / "family_table.csv").read_text()))}
    good = rows["good"]
    assert good["status"] == "ok" and good["error"] == ""
    ref = alone[1].state
    assert float(good["above_vbm"]) == pytest.approx(ref.above_vbm, abs=1e-9)
    assert float(good["shell1_fraction"]) == pytest.approx(ref.shell_fractions[1], abs=1e-9)
    assert (out / "report_good.html").exists()
    report = (out / "report_good.html").read_text()
    assert "What was read" in report and "../data/good/PROCAR.gz" in report  # the full case, re-read


def test_no_absolute_machine_paths_in_any_output(family, outputs):
    _, out = outputs
    roots = {str(family), str(family.resolve()), str(out.parent), str(out.parent.resolve())}
    for f in out.rglob("*"):
        if f.is_file() and f.suffix in (".csv", ".json", ".txt", ".html"):
            text = f.read_text()
            for root in roots:
                assert root not in text, (f.name, root)


def test_bad_manifest_leaves_no_output_folder(tmp_path, capsys):
    bad = tmp_path / "family.toml"
    bad.write_text('[family]\nname = "x"\n\n[[case]]\nname = "a"\npath = "nowhere"\ncharge = "plus one"\n')
    out = tmp_path / "out"
    assert main(["analyze", str(bad), "--out", str(out), "--quiet"]) == 1
    err = capsys.readouterr().err
    assert "family.toml" in err and "line" in err
    assert not out.exists()


def test_display_paths_never_absolute(tmp_path):
    from orbtool.outputs import display_path, display_paths
    base = tmp_path / "a" / "fam"
    assert display_path(tmp_path / "a" / "data" / "x" / "PROCAR", base) == "../data/x/PROCAR"
    far = Path("/") / "elsewhere" / "deep" / "tree" / "case" / "PROCAR"
    assert display_path(far, base) == "…/tree/case/PROCAR"
    text = f"{base}/../data/x/PROCAR, line 3: bad; {far}: too; ε(+/0) in e/Å^3 and 1 / 2"
    shown = display_paths(text, base)
    assert shown == "../data/x/PROCAR, line 3: bad; …/tree/case/PROCAR: too; ε(+/0) in e/Å^3 and 1 / 2"


def _family(alone, with_motif: bool):
    """Three copies of the analysed case (names and labels changed) and one broken case."""
    from dataclasses import replace

    from orbtool.case import Family
    from orbtool.family import CaseAnalysis, FamilyAnalysis
    case, res = alone
    cases, results = [], []
    for name in ("a", "b", "c"):
        labels = {"cation": "Sn", "vacancy": "V_S"} | ({"motif": "zincblende"} if with_motif else {})
        cases.append(case.replace(name=name, labels=labels))
        results.append(replace(res, name=name, labels=labels, notes=[]))
    results.append(CaseAnalysis("broken", {"cation": "Sn"}, 0, error="x/PROCAR, line 3: cut"))
    return FamilyAnalysis(Family(cases=tuple(cases), name="no motifs"), results)


@pytest.mark.parametrize("with_motif", [False, True])
def test_family_without_motif_labels_keeps_its_interactive_board(alone, with_motif):
    """docs/manifest.md: ``motif`` is optional. A family without it must still get the level-depth
    board in report.html (bokeh raised "legend_field value must be a string" and the report dropped
    every interactive figure); the bokeh document must serialise (bokeh.embed.components)."""
    from bokeh.embed import components

    from orbtool import views
    from orbtool.report import family_report
    res = _family(alone, with_motif)
    cols = views.family_columns(res.table())
    fig = views.family_board(cols, x="pair_distance_mean", y="above_vbm")
    script, divs = components({"board": fig[0] if isinstance(fig, tuple) else fig})
    assert "board" in divs and "pair_distance_mean" in script
    page = family_report(res.family, res)
    assert "interactive figures skipped" not in page, res.notes
    assert "<h2>Level depth across the family</h2>" in page
    assert "broken" in page and "x/PROCAR, line 3: cut" in page
