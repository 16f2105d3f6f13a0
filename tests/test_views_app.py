"""The widgets on an in-memory case: loader errors, level-explorer knobs and
clamping, PDOS explorer channels, structure view isosurface fraction, App.

The case is built here from textbook pieces (ASE diamond silicon, Gaussian
bands) so these tests do not depend on the demo data.
"""

from __future__ import annotations

import sys
from pathlib import Path
from types import SimpleNamespace

import numpy as np
import pytest
from ase.build import bulk
from ase.geometry import find_mic

from orbtool.case import DefectCase
from orbtool.grid import Grid
from orbtool.spectra import BandProjections, ProjectedDOS

ORBS = ("s", "py", "pz", "px")
HOST_BANDS = np.array([-4.0, -3.0, -2.0, -1.0, -0.2, 1.3, 2.0, 3.0])  # eV; VBM -0.2, CBM 1.3
IN_GAP = 0.5  # eV, absolute scale of both cells


def _site(defect, position):
    vec, dist = find_mic(defect.positions - position, defect.cell, defect.pbc)
    order = np.argsort(dist)
    d1 = dist[order[0]]
    first = [i for i in order if dist[i] < d1 + 0.1]
    d2 = min(dist[i] for i in order if dist[i] > d1 + 0.1)
    second = [i for i in order if abs(dist[i] - d2) < 0.1]
    nb = lambda i, k: SimpleNamespace(index=int(i), host_index=int(i) + 1, element="Si", shell=k,
                                      vector=vec[i].copy(), distance=float(dist[i]))
    shells = (tuple(nb(i, 1) for i in first), tuple(nb(i, 2) for i in second))
    return SimpleNamespace(position=np.asarray(position, float), element="Si", shells=shells, first_shell=shells[0],
                           second_shell=shells[1], point_group="Td")


def _pdos(atoms, bands, weights, e):
    # Gaussian-broadened PDOS, 0.15 eV width, per atom and l; 2 electrons per band (nspin = 1)
    g = np.exp(-((e[None] - bands[:, None]) / 0.15) ** 2) / (0.15 * np.sqrt(np.pi))  # (nb, nE)
    chans, vals = [], []
    for a in range(len(atoms)):
        for l, cols in (("s", [0]), ("p", [1, 2, 3])):
            chans.append((a, "Si", l, 0))
            vals.append(2 * (weights[:, a, cols].sum(axis=1) @ g))
    return ProjectedDOS(e, np.array(vals), chans, fermi=0.0, atoms=atoms)


def make_case():
    """Si 64-atom host, one vacancy, an in-gap band on the first shell's p orbitals."""
    host = bulk("Si", "diamond", a=5.431, cubic=True).repeat(2)
    pos = host.positions[0].copy()
    defect = host.copy()
    del defect[0]
    site = _site(defect, pos)
    first = [n.index for n in site.first_shell]
    e = np.linspace(-6, 5, 881)
    nb_h, na_h = len(HOST_BANDS), len(host)
    wh = np.full((nb_h, na_h, 4), 1.0 / (na_h * 4))
    occ_h = np.where(HOST_BANDS < 0.5, 2.0, 0.0)
    hp = BandProjections(np.zeros((1, 3)), [1.0], HOST_BANDS[None, None], occ_h[None, None], wh[None, None],
                         ORBS, atoms=host, fermi=0.0)
    bands_d = np.sort(np.append(HOST_BANDS, IN_GAP))
    wd = np.full((bands_d.size, len(defect), 4), 1.0 / (len(defect) * 4))
    k = int(np.searchsorted(bands_d, IN_GAP))
    wd[k] = 0.0
    wd[k][first, 1:] = 0.8 / (len(first) * 3)
    wd[k] += 0.2 / wd[k].size
    occ_d = np.where(bands_d < 0.0, 2.0, 0.0)
    occ_d[k] = 1.0
    dp = BandProjections(np.zeros((1, 3)), [1.0], bands_d[None, None], occ_d[None, None], wd[None, None], ORBS,
                         atoms=defect, fermi=IN_GAP)
    # signed state: p-like lobes on the first shell, ψ ∝ (r - R_i)·u_i exp(-|r - R_i|²/σ²), normalised
    n = 24
    gr = Grid(np.zeros((n, n, n)), defect.cell[:], unit="Å^-3/2", atoms=defect)
    psi = np.zeros((n, n, n))
    for nbr in site.first_shell:
        r_i = pos + nbr.vector
        d = gr.points - r_i
        u = nbr.vector / np.linalg.norm(nbr.vector)
        psi += -(d @ u) * np.exp(-(d ** 2).sum(-1) / 1.2)
    psi /= np.sqrt((psi ** 2).sum() * gr.voxel_volume)
    grid = gr.with_values(psi, name="in-gap state")
    case = DefectCase("Si_vac", defect, host=host, defect_pdos=_pdos(defect, bands_d, wd, e),
                      host_pdos=_pdos(host, HOST_BANDS, wh, e), projections=dp, host_projections=hp,
                      grids={"state": grid}, labels={"motif": "diamond", "vacancy": "V_Si"})
    return case, site


@pytest.fixture(scope="module")
def case_and_site():
    return make_case()


@pytest.fixture(scope="module")
def standin_fit():
    sys.path.insert(0, str(Path(__file__).parent))
    from tb_standin import make_site

    from orbtool.tb.cluster import ClusterModel
    from orbtool.tb.fit import fit
    from orbtool.tb.targets import Target

    site = make_site("Si", "diamond", a=5.431, repeat=2)
    return fit(ClusterModel.around(site, orbitals="sp"), [Target("Si", above_vbm=0.6, gap=1.1, site=site)]), site


# ------------------------------------------------------------------------------------------------ structure view
def test_enclosed_fraction_of_a_gaussian_matches_chi2():
    # ρ ∝ exp(−r²/2s²): the region ρ ≥ ρ(R) is the ball r ≤ R, holding P(χ²₃ ≤ R²/s²) of the charge
    # (Maxwell distribution; scipy.stats.chi2 as reference)
    from scipy.stats import chi2

    from orbtool.widgets import EnclosedFraction

    n, L, s = 64, 12.0, 0.9
    g = Grid(np.zeros((n, n, n)), np.eye(3) * L, unit="e/Å^3")
    r2 = ((g.points - L / 2) ** 2).sum(-1)
    g = g.with_values(np.exp(-r2 / (2 * s * s)))
    frac = EnclosedFraction(g)
    for R in (0.8, 1.5, 2.5):
        iso = np.exp(-R * R / (2 * s * s))
        assert frac(iso) == pytest.approx(chi2.cdf(R * R / (s * s), df=3), abs=0.01)
    assert frac.isovalue_for(0.5) == pytest.approx(np.exp(-chi2.ppf(0.5, 3) / 2), rel=0.05)


def test_cube_and_structure_share_one_frame_for_a_skewed_cell(tmp_path):
    # ASE's PDB writer (what nglview draws) rotates a non-standard cell into standard form; the cube we
    # write must then carry the same positions (ase.io is the reference reader for both files)
    import io as _io

    import ase.io

    from orbtool.widgets import standard_frame

    atoms = bulk("Si", "diamond", a=5.431)  # primitive fcc cell, not in standard form
    atoms.rotate(33, "z", rotate_cell=True)
    std, Q = standard_frame(atoms)
    buf = _io.StringIO()
    ase.io.write(buf, atoms, format="proteindatabank")
    pdb = ase.io.read(_io.StringIO(buf.getvalue()), format="proteindatabank")
    assert np.allclose(pdb.positions, std.positions, atol=2e-3)  # PDB keeps 3 decimals
    assert np.allclose(pdb.cell.cellpar(), std.cell.cellpar(), atol=1e-3)
    # distances are unchanged by the rotation
    assert np.allclose(std.get_all_distances(mic=True), atoms.get_all_distances(mic=True))


def test_view_is_centred_on_the_site_and_the_state_moves_with_the_atoms(case_and_site):
    from orbtool.widgets.structure import centre_on_site

    case, site = case_and_site
    grid = case.grids["state"]
    atoms, moved, pos = centre_on_site(case.defect, grid, site)
    frac = np.linalg.solve(atoms.cell[:].T, pos)
    assert np.allclose(frac, 0.5, atol=0.5 / grid.shape[0] + 1e-9)
    # the largest |ψ| sits at the same place relative to its nearest atom before and after
    def nearest(g, at):
        i = np.unravel_index(np.argmax(np.abs(g.values)), g.shape)
        p = g.points[i]
        d = at.positions - p
        d -= np.round(d @ np.linalg.inv(at.cell[:])) @ at.cell[:]
        return np.sort(np.linalg.norm(d, axis=1))[:4]
    assert np.allclose(nearest(grid, case.defect), nearest(moved, atoms), atol=1e-6)


# ------------------------------------------------------------------------------------------------------ loader
def test_loader_shows_the_orbtool_error_and_keeps_the_previous_state(case_and_site, tmp_path):
    from orbtool.io import write_pdos
    from orbtool.widgets import Loader

    case, _ = case_and_site
    good = write_pdos(tmp_path / "good.npz", case.host_pdos)
    loader = Loader()
    obj = loader.load(good)
    assert obj is not None and loader.value is obj
    missing = tmp_path / "nowhere" / "DOSCAR"
    assert loader.load(missing) is None
    assert "InputFormatError" in loader.status.value and "nowhere" in loader.status.value
    assert loader.value is obj and loader.progress.bar_style == "danger"
    garbage = tmp_path / "garbage.txt"
    garbage.write_text("this is not a DFT output\n1 2 three\n")
    assert loader.load(garbage) is None
    assert "garbage.txt" in loader.status.value and loader.value is obj
    assert "Traceback" not in loader.status.value


# --------------------------------------------------------------------------------------------- level explorer
def test_level_explorer_moves_the_level_and_reports(standin_fit):
    from orbtool.widgets import LevelExplorer

    fit, site = standin_fit
    le = LevelExplorer(fit, site)
    src = le.figure.select_one({"name": "orbtool.levels.sigma"})
    before, level0 = dict(src.data), le.prediction.level
    assert level0 == pytest.approx(0.6, abs=1e-6)  # the target it was fitted to
    le.coupling.value = min(1.2, le.coupling.max)
    assert le.prediction.level != pytest.approx(level0, abs=1e-4)
    assert src.data["bottom"][0] != before["bottom"][0]
    assert f"{le.prediction.above_vbm:.3f}" in le.readout.value
    assert "deep" in le.readout.value or "shallow" in le.readout.value


def test_level_explorer_clamps_to_the_validated_range(standin_fit):
    from orbtool.widgets import LevelExplorer, knob_ranges

    fit, site = standin_fit
    lo, hi, note = knob_ranges(fit)["coupling_scale"]
    b = fit.parameter_bounds["coupling_scale"]
    assert lo >= b[0] / b[2] - 1e-12 and hi <= b[1] / b[2] + 1e-12 and "fit bounds" in note
    le = LevelExplorer(fit, site)
    notes = le.set(coupling_scale=50.0)
    assert le.coupling.value == pytest.approx(hi)
    assert notes and "clamped" in notes[0] and "clamped" in le.notes.value


def test_srh_readout_matches_the_shockley_read_hall_formula():
    # Shockley & Read, Phys. Rev. 87, 835 (1952); Hall, Phys. Rev. 87, 387 (1952): for τn = τp and
    # n = p (intrinsic, injected), U ∝ 1 / (n + p + 2 n_i cosh((E_t − E_i)/kT)); ratio to E_t = E_i
    from orbtool.levels import Semiconductor, TrapRecombination
    from orbtool.units import KB
    from orbtool.widgets import srh_factor

    gap = 1.12
    mat = Semiconductor.from_masses(gap, 1.0, 1.0)
    rec = TrapRecombination(mat, tau_n=1e-6, tau_p=1e-6, injection=1e12)
    n = p = mat.ni + 1e12
    for e_t in (0.3, 0.45, mat.intrinsic_level):
        x = (e_t - mat.intrinsic_level) / (KB * 300.0)
        expected = (n + p + 2 * mat.ni) / (n + p + 2 * mat.ni * np.cosh(x))
        assert srh_factor(e_t, gap, rec) == pytest.approx(expected, rel=1e-6)
    assert srh_factor(-0.1, gap) is None and srh_factor(gap + 0.1, gap) is None


# ------------------------------------------------------------------------------------------------- PDOS, App
def test_pdos_explorer_moments_of_the_in_gap_peak(case_and_site):
    # the in-gap band is a Gaussian e^{−(E−E0)²/σ²}, σ = 0.15 eV: centre E0, standard deviation σ/√2
    # (standard Gaussian moments), within ±2.8 sd truncation (≈1.5 % low)
    from orbtool.widgets import PDOSExplorer

    case, site = case_and_site
    ex = PDOSExplorer(case, site=site)
    key = next(k for k in ex.choices if k.startswith("shell 1 ("))
    ex.picker.value = (key,)
    vbm = ex.context["vbm"]
    ex.window.value = (IN_GAP - vbm - 0.3, IN_GAP - vbm + 0.3)
    row = next(r for r in ex.moments.value.split("<tr>") if "shell 1" in r and "defect" in r)
    cells = [c.split("</td>")[0] for c in row.split("<td>")[1:]]
    centre, width = float(cells[2]), float(cells[3])
    assert centre == pytest.approx(IN_GAP - vbm, abs=0.005)
    assert width == pytest.approx(0.15 / np.sqrt(2), rel=0.03)
    lines = ex.figure.select_one({"name": "orbtool.pdos.lines"}).data
    assert all(key in label for label in lines["label"])


def test_app_on_a_case_fills_every_tab(case_and_site):
    from orbtool.widgets import App

    case, site = case_and_site
    app = App(case)
    assert app.case is case and app.analysis.site is not None
    assert app.structure is not None and app.structure.isovalue is not None
    assert app.pdos is not None
    assert app.levels is not None or "no model" in str(app.panes["Level explorer"].children[0].value)


def test_app_keeps_its_case_when_a_bad_path_is_loaded(case_and_site, tmp_path):
    from orbtool.widgets import App

    case, _ = case_and_site
    app = App(case)
    assert app.loader.load(tmp_path / "missing.toml") is None
    assert app.case is case and "missing.toml" in app.loader.status.value


def test_impossible_swap_is_reported_and_the_level_kept(standin_fit):
    from orbtool.widgets import LevelExplorer

    fit, site = standin_fit
    le = LevelExplorer(fit, site, swaps=["Og"])  # no term values for oganesson in any table
    level = le.prediction.level
    le.swap.value = "Si → Og"
    assert le.prediction.level == level
    assert "previous result kept" in le.notes.value and "Og" in le.notes.value


def test_upload_is_read_from_a_fresh_temporary_folder(case_and_site, tmp_path):
    from orbtool.io import write_pdos
    from orbtool.widgets import Loader

    case, _ = case_and_site
    data = write_pdos(tmp_path / "pdos.npz", case.defect_pdos).read_bytes()
    loader = Loader()
    loader._on_upload({"new": [{"name": "pdos.npz", "content": memoryview(data)}]})
    assert loader.value is not None and "loaded" in loader.status.value
    src = Path(loader.value.source)
    assert src.parent != tmp_path and src.parent.name.startswith("orbtool-upload-")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["pdos.npz"]  # nothing written next to the input


def test_family_board_picking_a_point_selects_the_case():
    from orbtool.widgets import FamilyBoard

    rows = [dict(name="a", motif="rocksalt", vacancy="V_anion", above_vbm=0.5, d1=2.3),
            dict(name="b", motif="zincblende", vacancy="V_cation", above_vbm=0.1, d1=2.9)]
    picked = []
    board = FamilyBoard(rows, on_select=picked.append)
    board.source.selected.indices = [1]  # as a tap on the second point would
    assert picked == ["b"] and board.pick.value == "b"
    board.select("a")
    assert picked == ["b", "a"] and list(board.source.selected.indices) == [0]
    with pytest.raises(KeyError):
        board.select("zz")
