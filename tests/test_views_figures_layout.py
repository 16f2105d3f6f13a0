"""Text in the static figures never overlaps: every text box (titles, labels,
tick labels, legend entries, symmetry and state labels) is measured with
matplotlib's renderer (``Text.get_window_extent``, display pixels) after the
constrained layout has run, and no two boxes may intersect; no text may leave
the figure.

Figures are drawn from the in-memory silicon vacancy of ``test_views_app``
(ASE diamond Si, Gaussian bands) and the Slater–Koster stand-in fit.
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import pytest

sys.path.insert(0, str(Path(__file__).parent))

matplotlib = pytest.importorskip("matplotlib")
matplotlib.use("Agg")


@pytest.fixture(scope="module")
def si():
    from test_views_app import make_case

    return make_case()


@pytest.fixture(scope="module")
def si_fit():
    from tb_standin import make_site

    from orbtool.tb.cluster import ClusterModel
    from orbtool.tb.fit import fit
    from orbtool.tb.targets import Target

    site = make_site("Si", "diamond", a=5.431, repeat=2)
    return fit(ClusterModel.around(site, orbitals="sp"), [Target("Si", above_vbm=0.6, gap=1.1, site=site)])


def _inside(fig):
    from orbtool.figures._layout import text_boxes

    w, h = fig.canvas.get_width_height()
    return [t.get_text() for t, bb in text_boxes(fig) if bb.x0 < -0.5 or bb.y0 < -0.5 or bb.x1 > w + 0.5
            or bb.y1 > h + 0.5]


def test_the_overlap_measure_sees_two_labels_on_top_of_each_other():
    # the check itself can fail: two labels at one spot overlap, after declutter they do not
    import matplotlib.pyplot as plt

    from orbtool.figures._layout import declutter, overlapping_texts

    fig, ax = plt.subplots(figsize=(3, 3))
    ax.set_ylim(0, 1)
    a = ax.text(0.5, 0.5, "t1u ×3")
    b = ax.text(0.5, 0.5, "breathe −5 %")
    assert overlapping_texts(fig) == [("t1u ×3", "breathe −5 %")]
    declutter(ax, [a, b])
    assert overlapping_texts(fig) == []
    plt.close(fig)


def test_spread_labels_keeps_order_gap_and_bounds():
    from orbtool.style import spread_labels

    ys = [1.0, 1.01, 0.99, 3.0, 2.98]
    out = spread_labels(ys, 0.1, lo=0.0, hi=3.0)
    order = np.argsort(ys, kind="stable")
    s = np.asarray(out)[order]
    assert np.all(np.diff(s) >= 0.1 - 1e-12) and s.max() <= 3.0 and s.min() >= 0.0
    assert abs(out[0] - 1.0) <= 0.1 + 1e-12  # stays next to its level


def test_mechanism_figure_labels_and_knobs_do_not_overlap(si_fit):
    import matplotlib.pyplot as plt

    from orbtool.figures import mechanism_figure
    from orbtool.figures._layout import overlapping_texts
    from orbtool.mechanism import mechanism

    # knob names as the pipeline writes them, shifts chosen to land the arrows beside the level labels
    mech = mechanism(si_fit, knobs={"breathe −5 %": -0.12, "coupling ×1.1": 0.2, "Si→Ge": 0.02})
    fig = mechanism_figure(mech)
    assert overlapping_texts(fig) == [] and _inside(fig) == []
    plt.close(fig)


def test_first_shell_pdos_figure_state_labels_do_not_overlap(si):
    import matplotlib.pyplot as plt

    from orbtool.figures import pdos_figure
    from orbtool.figures._layout import overlapping_texts
    from orbtool.widgets.pdos import case_context

    case, site = si
    states = case_context(case, site)["states"]
    assert states
    # three states 0.06 eV apart (a split multiplet): their labels would print over each other
    from dataclasses import replace

    three = [replace(states[0], above_vbm=states[0].above_vbm + d) for d in (0.0, 0.06, 0.12)]
    fig = pdos_figure(case, site, three)
    assert overlapping_texts(fig) == [] and _inside(fig) == []
    plt.close(fig)


def test_state_slice_and_trend_figures_have_no_overlapping_text(si):
    from types import SimpleNamespace

    import matplotlib.pyplot as plt

    from orbtool.figures import state_slice_figure, trend_figure
    from orbtool.figures._layout import overlapping_texts

    case, site = si
    fig = state_slice_figure(case.grids["state"], SimpleNamespace(**vars(site), defect=case.defect))
    assert overlapping_texts(fig) == [] and _inside(fig) == []
    plt.close(fig)
    rows = [dict(name=f"c{i}", motif=m, vacancy=v, above_vbm=0.2 + 0.3 * i, gap=1.5, site_distance_mean=2.3 + 0.1 * i)
            for i, (m, v) in enumerate([("rocksalt", "V_anion"), ("zincblende", "V_cation"), ("rocksalt", "V_cation")])]
    fig = trend_figure(rows, "site_distance_mean")
    assert overlapping_texts(fig) == [] and _inside(fig) == []
    plt.close(fig)
