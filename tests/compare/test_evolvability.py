"""Evolvability family: exact two-trait values (docs/methods.md §7.5) and identities."""

import numpy as np
import pytest
from scipy import special, stats

from ped2g.compare import evolvability
from ped2g.compare.skewers import unit_skewers

from conftest import circle_skewers, random_spd


def means(G, B):
    return {k: v[0, 0] for k, v in evolvability.evolvability_means(np.asarray(G)[None, None], B).items()}


def test_diag_4_1_exact_values():
    # docs/methods.md §7.5 (derived values): diag(4, 1): e = 2.5, c = 2, a = 0.8, r = 2.730596, with
    # r = (2/pi) lambda_1 E(1 - lambda_2^2/lambda_1^2) from scipy.special.ellipe.
    out = means(np.diag([4.0, 1.0]), circle_skewers(4096))
    r_exact = 2 / np.pi * 4 * special.ellipe(1 - 1 / 16)
    assert round(r_exact, 6) == 2.730596
    assert out["evolvability"] == pytest.approx(2.5, abs=1e-14)
    assert out["conditional_evolvability"] == pytest.approx(2.0, abs=1e-12)
    assert out["autonomy"] == pytest.approx(0.8, abs=1e-12)
    assert out["integration"] == pytest.approx(0.2, abs=1e-12)
    assert out["respondability"] == pytest.approx(r_exact, abs=1e-12)


@pytest.mark.parametrize("l1, l2", [(9.0, 0.5), (2.0, 1.5), (1.0, 1.0)])
def test_two_trait_closed_forms(l1, l2):
    # c = sqrt(l1 l2), a = 2 sqrt(l1 l2)/(l1 + l2) for G = diag(l1, l2) (docs/methods.md §7.5), and the
    # same after rotating G and the skewers together.
    Q = stats.special_ortho_group.rvs(2, random_state=3)
    B = circle_skewers(4096)
    for G, BB in [(np.diag([l1, l2]), B), (Q @ np.diag([l1, l2]) @ Q.T, B @ Q.T)]:
        out = means(G, BB)
        assert out["conditional_evolvability"] == pytest.approx(np.sqrt(l1 * l2), abs=1e-12)
        assert out["autonomy"] == pytest.approx(2 * np.sqrt(l1 * l2) / (l1 + l2), abs=1e-12)


def test_isotropic_matrix():
    # sigma^2 I: e = c = r = sigma^2 for every gradient, autonomy 1 (docs/methods.md §7.5).
    out = means(3.0 * np.eye(5), unit_skewers(100, 5, np.random.default_rng(0)))
    for name in ("evolvability", "conditional_evolvability", "respondability"):
        assert out[name] == pytest.approx(3.0, abs=1e-12)
    assert out["autonomy"] == pytest.approx(1.0, abs=1e-12)


def test_against_direct_formulas_and_bounds():
    # Direct per-skewer formulas with numpy.linalg.inv, averaged; autonomy in (0, 1]
    # (Cauchy-Schwarz) and conditional evolvability <= evolvability.
    rng = np.random.default_rng(1)
    G = random_spd(rng, 4, (3, 2))
    B = unit_skewers(500, 4, rng)
    out = evolvability.evolvability_means(G, B)
    Ginv = np.linalg.inv(G)
    e = np.einsum("ni,smij,nj->smn", B, G, B)
    c = 1 / np.einsum("ni,smij,nj->smn", B, Ginv, B)
    r = np.linalg.norm(np.einsum("smij,nj->smni", G, B), axis=-1)
    np.testing.assert_allclose(out["conditional_evolvability"], c.mean(-1), rtol=1e-11)
    np.testing.assert_allclose(out["respondability"], r.mean(-1), rtol=1e-11)
    np.testing.assert_allclose(out["autonomy"], (c / e).mean(-1), rtol=1e-11)
    np.testing.assert_allclose(out["evolvability"], np.trace(G, axis1=-2, axis2=-1) / 4, rtol=1e-14)
    assert ((out["autonomy"] > 0) & (out["autonomy"] <= 1)).all()
    assert (out["conditional_evolvability"] <= out["evolvability"]).all()


def test_scaling_G_scales_evolvabilities_and_keeps_autonomy():
    rng = np.random.default_rng(2)
    G = random_spd(rng, 3, (2, 2))
    B = unit_skewers(200, 3, rng)
    base = evolvability.evolvability_means(G, B)
    scaled = evolvability.evolvability_means(5.0 * G, B, budget_bytes=1e3)
    for name in ("evolvability", "conditional_evolvability", "respondability"):
        np.testing.assert_allclose(scaled[name], 5 * base[name], rtol=1e-12)
    np.testing.assert_allclose(scaled["autonomy"], base["autonomy"], rtol=1e-12)
