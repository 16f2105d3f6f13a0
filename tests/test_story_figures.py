"""The figures tell the story the app and the report tell (issue: one account per case): for the demo's
representative case the mechanism figure — drawn the way the pipeline draws it, written as SVG with text kept
as text and read back with the standard-library XML parser (W3C SVG 1.1: ``<text>`` elements) — shows the
story's level, label, dangling-orbital groups and knob values. The app/report/summary side of the same check is
tests/test_family_pipeline.py::test_app_report_and_summary_tell_one_story.
"""

from __future__ import annotations

import xml.etree.ElementTree as ET

import pytest

pytestmark = pytest.mark.slow


@pytest.fixture(scope="module")
def story_and_mechanism():
    from orbtool.batch import analyze_family
    from orbtool.io import load_family
    from orbtool.mechanism import mechanism
    from orbtool.pipeline import demo_manifest
    from orbtool.story import representative

    fam = load_family(demo_manifest())
    res = analyze_family(fam, workers=2, progress=False)
    res.shared_fit()
    rep = representative(res, res.fit_result)
    story = res.story(rep.name)
    m = story.model
    knobs = {k: v for k, v in m.knobs.items() if v is not None}   # as orbtool.pipeline draws it
    return story, mechanism(m.fit, rep.name, knobs=knobs)


def _svg_texts(fig, path):
    import matplotlib

    from orbtool.figures.export import FONT_EMBEDDING

    with matplotlib.rc_context(FONT_EMBEDDING):
        fig.savefig(path, format="svg")
    ns = "{http://www.w3.org/2000/svg}"
    out = []
    for el in ET.parse(path).iter(ns + "text"):
        out.append("".join(el.itertext()).strip())
    return out


def test_mechanism_figure_shows_the_story(story_and_mechanism, tmp_path):
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    from orbtool.figures import mechanism_figure

    story, mech = story_and_mechanism
    m = story.model
    # the numbers the figure draws are the story's
    assert mech.level == pytest.approx(m.level, abs=1e-12) and mech.sigma == pytest.approx(m.sigma, abs=1e-12)
    assert mech.labels[mech.defect_index] == m.label
    groups = mech.orbital_groups()
    assert list(groups) == list(m.dangling)
    for k, (e, n) in groups.items():
        assert n == m.dangling[k][1] and e == pytest.approx(m.dangling[k][0], abs=1e-12)
    # and the figure prints them
    fig = mechanism_figure(mech)
    texts = _svg_texts(fig, tmp_path / "mechanism.svg")
    plt.close(fig)
    joined = "\n".join(texts)
    assert f"level {m.level:+.2f} ± {m.sigma:.2f} eV" in joined
    size = next(n for _, n, idx, _ in mech.multiplets() if mech.defect_index in idx)
    assert (m.label + (f" ×{size}" if size > 1 else "")) in texts
    nearest = min(m.dangling, key=lambda k: abs(m.dangling[k][0] - m.level))   # the story's dangling energy
    assert m.dangling[nearest][0] == pytest.approx(m.dangling_energy, abs=1e-12)
    assert any(t.startswith(f"{nearest} ×{m.dangling[nearest][1]}") for t in texts)
    shown = [(k, v) for k, v in m.knobs.items() if v is not None][:3]   # the figure draws the first three knobs
    assert shown
    for k, v in shown:
        assert k in joined and f"{v:+.2f} eV" in joined
