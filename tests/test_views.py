"""Pure bokeh views: the numbers they draw and the way they are updated.

References are named beside each check.
"""

from __future__ import annotations

import numpy as np
import pytest
from test_views_app import HOST_BANDS, IN_GAP, make_case

from orbtool import views


@pytest.fixture(scope="module")
def case_and_site():
    return make_case()


def test_total_curve_counts_every_state(case_and_site):
    # each band is a unit-area Gaussian (∫ e^{-x²/σ²} dx = σ√π, the Gaussian integral) times 2 electrons
    # and its projection weights, which sum to 1: the total PDOS integrates to 2 × (number of bands)
    case, site = case_and_site
    lines = views.pdos_curves({"total": {}}, case.defect_pdos, case.host_pdos)
    by = dict(zip(lines["label"], zip(lines["xs"], lines["ys"])))
    for label, nbands in (("total · defect", HOST_BANDS.size + 1), ("total · host", HOST_BANDS.size)):
        x, y = by[label]
        assert np.trapezoid(y, x) == pytest.approx(2 * nbands, rel=1e-3)


def test_aligned_axis_puts_vbm_at_zero(case_and_site):
    case, site = case_and_site
    lines = views.pdos_curves({"total": {}}, case.defect_pdos, case.host_pdos, defect_shift=0.3, vbm=-0.2)
    xd, xh = lines["xs"]
    assert xd[0] == pytest.approx(case.defect_pdos.energies[0] + 0.3 + 0.2)
    assert xh[0] == pytest.approx(case.host_pdos.energies[0] + 0.2)
    assert lines["dash"] == ["solid", "dashed"]


def test_shell_channels_use_host_indices_for_the_host(case_and_site):
    case, site = case_and_site
    choices = views.channel_choices(case.defect_pdos, site)
    key = next(k for k in choices if k.startswith("shell 1 ("))
    assert sorted(choices[key]["atoms"]) == sorted(n.index for n in site.first_shell)
    assert sorted(choices[key]["host_atoms"]) == sorted(n.host_index for n in site.first_shell)
    lines = views.pdos_curves({key: choices[key]}, case.defect_pdos, case.host_pdos)
    assert [c for c in lines["cell"]] == ["defect", "host"]
    # the in-gap peak lives on shell 1 in the defect cell and is absent in the host
    xd, yd = lines["xs"][0], lines["ys"][0]
    xh, yh = lines["xs"][1], lines["ys"][1]
    at = lambda x, y: float(np.interp(IN_GAP, x, y))
    assert at(xd, yd) > 10 * max(at(xh, yh), 1e-6)


def test_states_markers_show_occupation():
    class S:
        energy_aligned, energy, occupation, max_occupation = 0.7, 0.7, 1.0, 2.0

    d = views.states_data([S()], vbm_shift=-0.2, ymax=3.0)
    assert d["x"] == [pytest.approx(0.9)] and d["text"] == ["occ 1.00/2"]


def test_group_levels_on_the_tetrahedral_defect_molecule():
    # four equivalent dangling orbitals coupled by β: H = E·1 + β(J − 1) has a₁ = E + 3β (×1) and
    # t₂ = E − β (×3) — Coulson & Kearsley, Proc. R. Soc. A 241, 433 (1957); Lannoo & Bourgoin (1981)
    E, beta = -0.5, -0.8
    H = E * np.eye(4) + beta * (np.ones((4, 4)) - np.eye(4))
    ev = np.linalg.eigvalsh(H)
    groups = views.group_levels(ev, ["a1", "t2", "t2", "t2"])
    assert [(round(e, 9), m) for e, m, _ in groups] == [(round(E + 3 * beta, 9), 1), (round(E - beta, 9), 3)]


class _Pred:
    def __init__(self, level=0.6, sigma=0.05, gap=1.2):
        self.level, self.sigma, self.vbm, self.cbm = level, sigma, 0.0, gap
        self.levels = np.array([-3.0, -1.0, -1.0, level, level, level, 1.9, 9.0])
        self.labels = ["a1", "t2", "t2", "t2", "t2", "t2", "e", "a1"]


def test_level_diagram_data_marks_the_defect_level():
    data = views.level_diagram_data(_Pred(), dangling=-0.4, window=2.0, coupling_scale=1.25)
    coupled = data["orbtool.levels.coupled"]
    # -3 and 9 eV are outside [VBM − 2, CBM + 2]; the triple at the level is merged
    assert coupled["y"] == [pytest.approx(-1.0), pytest.approx(0.6), pytest.approx(1.9)]
    assert coupled["text"][1] == "t2 ×3"
    i = coupled["y"].index(pytest.approx(0.6))
    assert coupled["width"][i] > max(w for j, w in enumerate(coupled["width"]) if j != i)
    sig = data["orbtool.levels.sigma"]
    assert sig["top"][0] - sig["bottom"][0] == pytest.approx(0.1)
    assert data["orbtool.levels.links"]["text"] == ["coupling × 1.25"]


def test_level_figure_updates_through_its_sources_and_embeds_offline():
    from bokeh.embed import file_html
    from bokeh.resources import INLINE

    fig = views.level_diagram(views.level_diagram_data(_Pred()), y_range=(-2, 3))
    views.update_level_diagram(fig, views.level_diagram_data(_Pred(level=0.9)))
    src = fig.select_one({"name": "orbtool.levels.sigma"})
    assert src.data["bottom"][0] == pytest.approx(0.85)
    html = file_html(fig, INLINE, "levels")
    assert "cdn.bokeh.org" not in html and "Bokeh" in html


def test_pdos_figure_has_named_sources_and_gap_shading(case_and_site):
    from bokeh.models import BoxAnnotation

    case, site = case_and_site
    lines = views.pdos_curves({"total": {}}, case.defect_pdos, case.host_pdos)
    fig = views.pdos_figure(lines, None, gap=1.5)
    boxes = [b for b in fig.center if isinstance(b, BoxAnnotation)]
    edges = sorted(v for b in boxes for v in (b.left, b.right) if isinstance(v, float))
    assert edges == [0.0, 1.5]
    views.update_pdos_figure(fig, {k: v[:1] for k, v in lines.items()})
    assert len(fig.select_one({"name": "orbtool.pdos.lines"}).data["xs"]) == 1


def test_family_board_colours_by_motif_and_shapes_by_vacancy():
    rows = [dict(name="a", motif="rocksalt", vacancy="V_anion", above_vbm=0.5, d1=2.3),
            dict(name="b", motif="zincblende", vacancy="V_cation", above_vbm=0.1, d1=2.9),
            dict(name="c", motif="rocksalt", vacancy="V_cation", above_vbm=None, d1=3.1)]
    cols = views.family_columns(rows)
    assert cols["marker"] == ["triangle", "square", "square"]
    assert cols["colour"][0] == cols["colour"][2] != cols["colour"][1]
    assert np.isnan(cols["above_vbm"][2])
    fig, table = views.family_board(cols, x="d1")
    assert table.sortable and fig.xaxis[0].axis_label == "d1"
    views.set_axes(fig, "above_vbm", "d1")
    assert fig.select_one({"name": "orbtool.family.rows"}).data["_y"] == [2.3, 2.9, 3.1]
