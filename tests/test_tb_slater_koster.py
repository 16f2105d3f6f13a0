"""Slater–Koster blocks: closed forms of Slater & Koster, Phys. Rev. 94, 1498 (1954), Table I, and an
independent construction by rotating bond-frame integrals with real-harmonic rotation matrices."""

import numpy as np
import pytest

from orbtool.tb.slater_koster import CHANNELS, sk_block

V = {"ss_sigma": -1.1, "sp_sigma": 1.3, "sd_sigma": -0.7, "pp_sigma": 2.1, "pp_pi": -0.6, "pd_sigma": -1.7,
     "pd_pi": 0.9, "dd_sigma": -1.9, "dd_pi": 1.2, "dd_delta": -0.3}
S3 = np.sqrt(3.0)


def _orbitals(r):
    """Real s, p, d functions with equal angular norms, orbtool order."""
    x, y, z = r.T
    return np.stack([np.ones_like(x), x, y, z, S3 * x * y, S3 * y * z, S3 * z * x, S3 / 2 * (x * x - y * y),
                     z * z - 0.5 * (x * x + y * y)], axis=1)


def _rotated_reference(u, lmax=2):
    """E = D M Dᵀ with M the bond-frame integrals (diagonal in m), independent of Table I."""
    u = np.asarray(u, float) / np.linalg.norm(u)
    a = np.array([1.0, 0, 0]) if abs(u[0]) < 0.9 else np.array([0, 1.0, 0])
    e1 = np.cross(a, u)
    e1 /= np.linalg.norm(e1)
    e2 = np.cross(u, e1)
    Q = np.stack([e1, e2, u], axis=1)  # bond frame columns; z' = u
    r = np.random.default_rng(1).normal(size=(60, 3))
    lab, bond = _orbitals(r), _orbitals(r @ Q)
    D = np.zeros((9, 9))
    for sl in (slice(0, 1), slice(1, 4), slice(4, 9)):
        D[sl, sl] = np.linalg.lstsq(bond[:, sl], lab[:, sl], rcond=None)[0].T
    # bond-frame matrix: p order (x', y', z'); d order (xy, yz, zx, x2-y2, z2)
    M = np.zeros((9, 9))
    M[0, 0] = V["ss_sigma"]
    M[0, 3] = V["sp_sigma"]
    M[0, 8] = V["sd_sigma"]
    M[1, 1] = M[2, 2] = V["pp_pi"]
    M[3, 3] = V["pp_sigma"]
    M[1, 6] = M[2, 5] = V["pd_pi"]
    M[3, 8] = V["pd_sigma"]
    M[4, 4] = M[7, 7] = V["dd_delta"]
    M[5, 5] = M[6, 6] = V["dd_pi"]
    M[8, 8] = V["dd_sigma"]
    ls = np.array([0, 1, 1, 1, 2, 2, 2, 2, 2])
    # lower triangle by parity: <higher-l on A | lower-l on B> = (-1)^(l+l') <lower on A|higher on B>
    for i in range(9):
        for j in range(9):
            if ls[i] > ls[j]:
                M[i, j] = (-1) ** (ls[i] + ls[j]) * M[j, i]
    return D @ M @ D.T


@pytest.mark.parametrize("u", [(1, 0, 0), (0, 1, 0), (0, 0, 1), (1, 1, 0), (1, 0, 1), (0, 1, 1), (1, 1, 1),
                               (-1, 1, 1), (1, -1, -1), (0.3, -0.5, 0.81), (-0.9, 0.2, -0.4)])
def test_blocks_match_rotated_bond_frame_integrals(u):
    # Independent route: rotation of the bond-frame two-centre integrals (Slater & Koster 1954, Sec. III).
    c = np.asarray(u, float) / np.linalg.norm(u)
    E = sk_block(c[None], V, 2, 2)[0]
    np.testing.assert_allclose(E, _rotated_reference(c), atol=1e-10)


def test_table_entries_along_100_110_111():
    # Slater & Koster (1954) Table I closed forms evaluated by hand for the three directions.
    for u in [(1, 0, 0), (1, 1, 0), (1, 1, 1)]:
        l, m, n = np.asarray(u, float) / np.linalg.norm(u)
        E = sk_block(np.array([[l, m, n]]), V, 2, 2)[0]
        assert E[0, 0] == pytest.approx(V["ss_sigma"])
        assert E[0, 1] == pytest.approx(l * V["sp_sigma"])           # E_s,x = l Vspσ
        assert E[1, 0] == pytest.approx(-l * V["sp_sigma"])          # E_x,s = −l Vspσ (REFERENCES warning)
        assert E[1, 1] == pytest.approx(l * l * V["pp_sigma"] + (1 - l * l) * V["pp_pi"])
        assert E[1, 2] == pytest.approx(l * m * (V["pp_sigma"] - V["pp_pi"]))
        assert E[1, 3] == pytest.approx(l * n * (V["pp_sigma"] - V["pp_pi"]))
        assert E[0, 4] == pytest.approx(S3 * l * m * V["sd_sigma"])
        assert E[0, 8] == pytest.approx((n * n - 0.5 * (l * l + m * m)) * V["sd_sigma"])
        assert E[1, 4] == pytest.approx(S3 * l * l * m * V["pd_sigma"] + m * (1 - 2 * l * l) * V["pd_pi"])
        assert E[4, 4] == pytest.approx(3 * l * l * m * m * V["dd_sigma"] + (l * l + m * m - 4 * l * l * m * m)
                                        * V["dd_pi"] + (n * n + l * l * m * m) * V["dd_delta"])
        assert E[8, 8] == pytest.approx((n * n - 0.5 * (l * l + m * m)) ** 2 * V["dd_sigma"]
                                        + 3 * n * n * (l * l + m * m) * V["dd_pi"]
                                        + 0.75 * (l * l + m * m) ** 2 * V["dd_delta"])
    # [111]: E_x,y = (Vppσ − Vppπ)/3 — Harrison (1980) writes the same for the diamond structure.
    E = sk_block(np.array([[1, 1, 1]]) / S3, V, 1, 1)[0]
    assert E[1, 2] == pytest.approx((V["pp_sigma"] - V["pp_pi"]) / 3)


def test_parity_and_reverse_integrals():
    # Hermiticity of the two-centre integrals: <ν_B|H|μ_A> = <μ_A|H|ν_B>, with R reversed.
    rng = np.random.default_rng(0)
    c = rng.normal(size=(20, 3))
    c /= np.linalg.norm(c, axis=1, keepdims=True)
    Vr = dict(V, sp_sigma=0.4, sd_sigma=-0.2, pd_sigma=-0.8, pd_pi=0.3)
    E_ab = sk_block(c, V, 2, 2, V_reverse=Vr)
    E_ba = sk_block(-c, Vr, 2, 2, V_reverse=V)
    np.testing.assert_allclose(E_ab, np.swapaxes(E_ba, 1, 2), atol=1e-12)
    assert set(CHANNELS) == set(V)
