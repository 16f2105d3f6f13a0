"""The demo family (model tight-binding data in orbtool/demo/data) and its generator.

External references: ASE's POSCAR reader, ASE's CHGCAR-layout reader (VaspChargeDensity) and DOSCAR
reader (VaspDos); pythtb as an independent tight-binding engine; Slater & Koster, Phys. Rev. 94, 1498
(1954), Table I; Harrison's couplings V = eta hbar^2/(m d^2) (eta: Harrison 1999, *Elementary
Electronic Structure*, as transcribed in the project references [2nd]) and term values (Harrison
1980 Solid State Table [2nd]).
"""

from __future__ import annotations

import functools
import gzip
import itertools
import json
import re
import tomllib
from pathlib import Path

import numpy as np
import pytest
from ase.calculators.vasp import VaspChargeDensity, VaspDos
from ase.io import read

from orbtool.demo import scenario as sc
from orbtool.demo import tbmodel

DATA = Path(sc.__file__).resolve().parent / "data"
needs_data = pytest.mark.skipif(not (DATA / "family.toml").exists(), reason="demo data not generated")

# valence electrons per atom = main-group column (periodic table; common practice)
VALENCE = {"Sn": 4, "Ge": 4, "S": 6}


def _manifest():
    return tomllib.loads((DATA / "family.toml").read_text())


def _summary():
    return json.loads((DATA / "model_summary.json").read_text())


def _gunzip(src: Path, dst: Path) -> Path:
    dst.write_bytes(gzip.decompress(src.read_bytes()))
    return dst


def _nelect(atoms, charge=0):
    return sum(VALENCE[s] for s in atoms.get_chemical_symbols()) - charge


# ---------------------------------------------------------------- files vs external readers
@needs_data
def test_every_run_folder_has_its_files_and_poscar_parses_with_ase():
    man = _manifest()
    hosts = {h["name"]: read(DATA / h["path"] / "POSCAR", format="vasp") for h in man["host"]}
    for at in hosts.values():
        assert len(at) == 64
    for c in man["case"]:
        folder = DATA / c["path"]
        for name in ("POSCAR", "DOSCAR.gz", "PROCAR.gz", "OSZICAR", "PARCHG.gz"):
            assert (folder / name).is_file(), folder / name
        at = read(folder / "POSCAR", format="vasp")
        host = hosts[c["host"]]
        removed = c["anion"] if c["vacancy"] == "V_anion" else c["cation"]
        assert len(at) == 63
        hs, ds = host.get_chemical_symbols(), at.get_chemical_symbols()
        assert ds.count(removed) == hs.count(removed) - 1
        assert np.allclose(at.cell.array, host.cell.array)
        assert "MODEL DATA" in (folder / "POSCAR").read_text().splitlines()[0]


@needs_data
def test_parchg_integrates_to_two_electrons_per_band(tmp_path):
    """ASE reads the CHGCAR layout (values = density × volume); the in-gap state holds 2 e per band
    (both spins of each spatial orbital), within 1 %."""
    summ = {c["name"]: c for c in _summary()["cases"]}
    for c in _manifest()["case"]:
        f = _gunzip(DATA / c["path"] / "PARCHG.gz", tmp_path / "PARCHG")
        chg = VaspChargeDensity(str(f))
        rho, at = chg.chg[-1], chg.atoms[-1]
        total = rho.sum() * at.get_volume() / rho.size
        nb = len(summ[c["name"]]["state_bands"])
        assert total == pytest.approx(2 * nb, rel=0.01), c["name"]
        assert rho.min() >= 0
        # the header names the same bands
        head = gzip.decompress((DATA / c["path"] / "PARCHG.gz").read_bytes()).split(b"\n", 1)[0].decode()
        listed = re.search(r"band\(s\) ([\d ]+),", head).group(1).split()
        assert [int(b) for b in listed] == summ[c["name"]]["state_bands"]


@needs_data
def test_anion_vacancy_state_is_localised_at_the_vacancy(tmp_path):
    """Most of the V_S in-gap density lies within 5 Å of the vacancy site, i.e. on the first shell and the
    bonds behind it (common practice for a localised state in a 64-atom cell; threshold our choice)."""
    summ = {c["name"]: c for c in _summary()["cases"]}
    for c in _manifest()["case"]:
        if c["vacancy"] != "V_anion":
            continue
        f = _gunzip(DATA / c["path"] / "PARCHG.gz", tmp_path / "PARCHG")
        chg = VaspChargeDensity(str(f))
        rho, at = chg.chg[-1], chg.atoms[-1]
        n = np.array(rho.shape)
        frac = np.stack(np.meshgrid(*[np.arange(k) / k for k in n], indexing="ij"), -1)
        site = np.linalg.solve(at.cell.array.T, np.array(summ[c["name"]]["site"]))
        d = frac - site
        d -= np.round(d)
        r = np.linalg.norm(d @ at.cell.array, axis=-1)
        assert rho[r < 5.0].sum() / rho.sum() > 0.5, c["name"]


@needs_data
def test_doscar_reads_with_ase_and_counts_electrons(tmp_path):
    """ASE's DOSCAR reader: lm-decomposed blocks sum to the total DOS (to the written precision), and
    for the perfect hosts the integrated DOS at the (mid-gap) Fermi level equals the electron count."""
    man = _manifest()
    for h in man["host"]:
        f = _gunzip(DATA / h["path"] / "DOSCAR.gz", tmp_path / "DOSCAR")
        dos = VaspDos(str(f))
        at = read(DATA / h["path"] / "POSCAR", format="vasp")
        assert dos._site_dos.shape[:2] == (len(at), 10)                 # energy + s py pz px + 5 d
        parts = sum(dos.site_dos(a, o) for a in range(len(at)) for o in ("s", "py", "pz", "px"))
        assert np.allclose(parts, dos.dos, atol=1e-3 * dos.dos.max())
        fermi = float(gzip.decompress((DATA / h["path"] / "DOSCAR.gz").read_bytes()).decode()
                      .splitlines()[5].split()[3])
        i = np.searchsorted(dos.energy, fermi)
        assert dos.integrated_dos[i] == pytest.approx(_nelect(at), rel=2e-3)


def _parse_procar(text):
    lines = text.splitlines()
    assert lines[0].startswith("PROCAR lm decomposed")
    nk, nb, nion = (int(x) for x in re.findall(r":\s*(\d+)", lines[1]))
    weights = [float(m) for m in re.findall(r"weight = +([\d.]+)", text)]
    bands = re.findall(r"band +\d+ # energy +(\S+) # occ\. +(\S+)", text)
    tots = [float(line.split()[-1]) for line in lines if line.startswith("tot ")]
    return nk, nb, nion, np.array(weights), np.array(bands, float).reshape(nk, nb, 2), np.array(tots)


@needs_data
def test_procar_layout_weights_and_occupations():
    """Header counts match the structure, k weights sum to 1, every band's projections sum to 1
    (orthonormal basis; 3-decimal rounding of 63 entries), and occupations add up to NELECT - q."""
    for c in _manifest()["case"][:4]:
        folder = DATA / c["path"]
        at = read(folder / "POSCAR", format="vasp")
        nk, nb, nion, w, eo, tots = _parse_procar(gzip.decompress((folder / "PROCAR.gz").read_bytes()).decode())
        assert nion == len(at) and len(w) == nk and eo.shape == (nk, nb, 2)
        assert w.sum() == pytest.approx(1.0, abs=1e-6)
        assert np.all(np.abs(tots - 1.0) < 0.04)
        assert np.sum(w[:, None] * eo[:, :, 1]) == pytest.approx(_nelect(at, c["charge"]), abs=1e-3)
        assert np.all(np.diff(eo[:, :, 0], axis=1) >= -1e-8)


@needs_data
def test_oszicar_final_line_energies_match_summary():
    summ = {c["name"]: c for c in _summary()["cases"]}
    for c in _manifest()["case"]:
        last = (DATA / c["path"] / "OSZICAR").read_text().strip().splitlines()[-1]
        m = re.search(r"F=\s*(\S+)\s+E0=\s*(\S+)", last)
        assert m, last
        assert float(m.group(2)) == pytest.approx(summ[c["name"]]["energies"]["E0"], abs=1e-3)   # 8 digits written


# ---------------------------------------------------------------- the generator's physics
@functools.lru_cache(maxsize=None)
def _edges(spec):
    """Host band edges over the 2x2x2 grid (the irreducible points carry every eigenvalue), and the
    mean |c|² over the whole degenerate multiplet at each edge (never one eigenvector of it)."""
    host = sc.build_host(spec)
    _, kirr, _ = sc.kpoint_sets()
    b = tbmodel.find_bonds(host, spec.cutoff, (spec.cation,), sc.SECOND_SCALE)
    H = tbmodel.hamiltonians(host, b, kirr)
    eps = np.linalg.eigvalsh(H)
    nocc = _nelect(host) // 2
    kv = int(np.argmax(eps[:, nocc - 1]))
    kc = int(np.argmin(eps[:, nocc]))
    ev, vv = np.linalg.eigh(H[kv])
    ec, vc = np.linalg.eigh(H[kc])
    top = np.abs(ev - ev[nocc - 1]) < 1e-6
    bot = np.abs(ec - ec[nocc]) < 1e-6
    w_top = (np.abs(vv[:, top]) ** 2).mean(axis=1)
    w_bot = (np.abs(vc[:, bot]) ** 2).mean(axis=1)
    return host, eps[kv, nocc - 1], eps[kc, nocc], w_top, w_bot


@pytest.mark.parametrize("spec", sc.HOSTS, ids=[h.name for h in sc.HOSTS])
def test_host_gap_ordering(spec):
    """A gap opens; the valence-band top is anion-p (+ cation-s) and the conduction-band bottom is
    cation-p, as the term-value ordering eps_p(S) < eps_p(Sn, Ge) of Harrison's 1980 table implies."""
    host, vbm, cbm, v_top, v_bot = _edges(spec)
    assert cbm - vbm > 0.5
    sym = np.array(host.get_chemical_symbols())
    anion_p = np.zeros((len(host), 4), bool)
    anion_p[sym == spec.anion, 1:] = True
    cation_p = np.zeros((len(host), 4), bool)
    cation_p[sym == spec.cation, 1:] = True
    assert np.sum(v_top[anion_p.ravel()]) > 0.5
    assert np.sum(v_bot[cation_p.ravel()]) > 0.5
    es_a, ep_a = tbmodel.TERM_VALUES_1980[spec.anion]
    es_c, ep_c = tbmodel.TERM_VALUES_1980[spec.cation]
    assert ep_a < vbm < cbm and cbm > ep_a


@pytest.mark.parametrize("spec", sc.HOSTS, ids=[h.name for h in sc.HOSTS])
def test_anion_vacancy_level_in_gap(spec):
    """Unrelaxed V_S: a Γ level inside the host gap with most weight on the first shell.

    The level is a whole multiplet (sum of its projectors) taken at least 20 meV inside the gap (the
    generator's own margin, ``select_state_bands``): states of the defect cell that the vacancy leaves
    untouched sit at the host VBM itself, where a bare ``eps > vbm`` is decided by rounding, and one
    eigenvector of their degenerate multiplet depends on the LAPACK kernel."""
    host, vbm, cbm, _, _ = _edges(spec)
    idx = sc.vacancy_index(host, spec.anion)
    d, site, shell = sc.breathe(host, idx, 0.0, 1.2 * spec.bond)
    b = tbmodel.find_bonds(d, spec.cutoff, (spec.cation,), sc.SECOND_SCALE)
    H = tbmodel.hamiltonians(d, b, [[0, 0, 0]], onsite_shifts=sc.vacancy_shifts(spec, spec.anion, len(d), shell))
    eps, vec = np.linalg.eigh(H[0])
    inside = np.flatnonzero((eps > vbm + 0.02) & (eps < cbm - 0.02))
    assert len(inside) >= 1
    multiplet = np.flatnonzero(np.abs(eps - eps[inside[0]]) < 1e-3)
    w = (np.abs(vec[:, multiplet]) ** 2).sum(axis=1).reshape(len(d), 4) / len(multiplet)
    assert w[shell].sum() > 0.5


def test_sk_sign_convention_matrix_elements():
    """Slater & Koster Table I: E_s,x = l V_spσ, E_x,s = -l V_spσ, E_x,y = l m (V_ppσ - V_ppπ);
    eigenvalues cannot see the s-p sign, so the elements are checked directly (project references)."""
    d = 2.9
    u = np.array([1.0, 2.0, -2.0]) / 3.0
    B = tbmodel.sk_blocks([u * d])[0]
    s = 7.619964 / d ** 2                       # hbar^2/m_e in eV Å^2 (CODATA)
    vss, vsp, vpps, vppp = -1.32 * s, 1.42 * s, 2.22 * s, -0.63 * s   # Harrison 1999 eta [2nd]
    l, m, n = u
    assert B[0, 0] == pytest.approx(vss, abs=1e-12)
    assert B[0, 1] == pytest.approx(l * vsp, abs=1e-12) and B[0, 1] > 0
    assert B[1, 0] == pytest.approx(-l * vsp, abs=1e-12)
    assert B[1, 2] == pytest.approx(l * m * (vpps - vppp), abs=1e-12)
    assert B[3, 3] == pytest.approx(n * n * vpps + (1 - n * n) * vppp, abs=1e-12)


# ---------------------------------------------------------------- against pythtb
def _pythtb_model(atoms, spec):
    """Independent construction in pythtb: brute-force pairs over neighbouring cells, SK elements
    written out from Slater & Koster Table I, Harrison 1999 eta, Harrison 1980 term values."""
    pythtb = pytest.importorskip("pythtb")
    eta = {"ss": -1.32, "sp": 1.42, "pps": 2.22, "ppp": -0.63}
    terms = {"Sn": (-12.50, -5.94), "Ge": (-14.38, -6.36), "S": (-20.80, -10.27)}
    cell = atoms.cell.array
    frac = atoms.get_scaled_positions()
    sym = atoms.get_chemical_symbols()
    n = len(atoms)
    orb = [frac[i] for i in range(n) for _ in range(4)]
    model = pythtb.tb_model(3, 3, cell.tolist(), [list(o) for o in orb])
    model.set_onsite([terms[s][0] if a == 0 else terms[s][1] for s in sym for a in range(4)])
    for i, j in itertools.product(range(n), range(n)):
        for R in itertools.product((-1, 0, 1), repeat=3):
            R = np.array(R)
            if i > j or (i == j and tuple(R) <= (0, 0, 0)):
                continue                       # each pair once; pythtb adds the conjugate
            v = (frac[j] + R - frac[i]) @ cell
            dist = np.linalg.norm(v)
            if dist > spec.cutoff:
                continue
            f = 1.0 if (sym[i] == spec.cation) != (sym[j] == spec.cation) else sc.SECOND_SCALE
            c = 7.619964 / dist ** 2 * f
            l3 = v / dist
            E = np.empty((4, 4))
            E[0, 0] = eta["ss"] * c
            E[0, 1:] = l3 * eta["sp"] * c
            E[1:, 0] = -l3 * eta["sp"] * c
            for a in range(3):
                for b in range(3):
                    E[1 + a, 1 + b] = l3[a] * l3[b] * (eta["pps"] - eta["ppp"]) * c + (a == b) * eta["ppp"] * c
            for a in range(4):
                for b in range(4):
                    if E[a, b] != 0.0:
                        model.set_hop(E[a, b], 4 * i + a, 4 * j + b, [int(x) for x in R])
    return model


@pytest.mark.parametrize("spec", sc.HOSTS, ids=[h.name for h in sc.HOSTS])
def test_bulk_bands_match_pythtb(spec):
    """Conventional 8-atom cell: generator vs pythtb at Γ and three zone-boundary points (1e-8 eV),
    and the 64-atom cell's Γ spectrum equals the conventional cell's spectrum folded from k in {0,1/2}^3."""
    from ase.build import bulk
    conv = bulk(spec.formula, spec.motif, a=spec.a, cubic=True)
    model = _pythtb_model(conv, spec)
    b = tbmodel.find_bonds(conv, spec.cutoff, (spec.cation,), sc.SECOND_SCALE)
    ks = np.array(list(itertools.product((0.0, 0.5), repeat=3)))
    ours = np.linalg.eigvalsh(tbmodel.hamiltonians(conv, b, ks))
    ref = np.array([model.solve_one(list(k)) for k in ks])
    assert np.max(np.abs(ours - ref)) < 1e-8
    k_gen = np.array([[0.1, 0.2, 0.3]])
    assert np.max(np.abs(np.linalg.eigvalsh(tbmodel.hamiltonians(conv, b, k_gen))[0]
                         - model.solve_one(list(k_gen[0])))) < 1e-8
    host = sc.build_host(spec)
    bh = tbmodel.find_bonds(host, spec.cutoff, (spec.cation,), sc.SECOND_SCALE)
    gamma = np.linalg.eigvalsh(tbmodel.hamiltonians(host, bh, [[0, 0, 0]]))[0]
    assert np.max(np.abs(gamma - np.sort(ref.ravel()))) < 1e-8
