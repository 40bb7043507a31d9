"""The refitting null's simulation step reproduces each population's design.

Checks:
* the simulated records have NaN exactly in the design's missing cells, the design's fixed-effect
  rows, and -- over many replicates -- the covariance ``G (x) A + C (x) Z Z' + R (x) I``
  (trait-major), with A from the tabular method on Mrode's (2014) Table 2.1 pedigree
  (tests/textbook.py; an outside oracle) -- an exact identity of the model, checked within
  Monte Carlo error;
* the fixed part rebuilt from the fit's reported fixed effects gives back the population mean the
  fit reports (an exact identity of the back-transformation in ped2g.fit.outputs);
* the shared G is the mean of the posterior means, and its bias correction G_bar M^-1 G_bar
  undoes a scalar shrinkage exactly, equals G_bar - (M - G_bar) to first order and stays
  positive definite (exact algebra).
"""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr

from ped2g.errors import UserError
from ped2g.fit.data import FitData, RandomEffect
from ped2g.fit.outputs import original_units
from ped2g.null.refit import (DesignParameters, bias_corrected_G, design_parameters, shared_G,
                              simulate_records)
from ped2g.pedigree.core import Pedigree
from textbook import P1_DAM, P1_F, P1_SIRE, tabular_relationship

TRAITS = ["mass", "wing"]
G = np.array([[2.0, 0.6], [0.6, 1.0]])
R = np.array([[1.0, -0.3], [-0.3, 0.5]])
C = np.array([[0.4, 0.1], [0.1, 0.3]])


def _mrode_data(missing: np.ndarray | None = None) -> FitData:
    ped = Pedigree(ids=np.array([f"a{i + 1}" for i in range(6)], dtype=object), sire=P1_SIRE.copy(),
                   dam=P1_DAM.copy(), generation=np.array([0, 0, 1, 1, 2, 3]), inbreeding=P1_F.copy())
    # records: animals 3..6 once, animal 5 twice (repeated records), a sex column, one random
    # effect with two levels
    record_animal = np.array([2, 3, 4, 4, 5], dtype=np.int64)
    n = len(record_animal)
    X = np.column_stack([np.ones(n), [0.0, 1.0, 1.0, 0.0, 1.0]])
    y = np.zeros((n, 2))
    if missing is not None:
        y[missing] = np.nan
    eff = RandomEffect(name="pen", column="pen", level=np.array([0, 0, 1, 1, 0]), levels=["p1", "p2"])
    return FitData(population="p", traits=TRAITS, pedigree=ped, phenotyped=np.isin(np.arange(6), record_animal),
                   record_animal=record_animal, y=y, y_center=np.zeros(2), y_scale=np.ones(2), X=X,
                   x_names=["intercept", "sex[M]"], random=[eff], x_scale=np.ones(2))


def test_missing_cells_and_fixed_rows_are_the_designs():
    missing = np.zeros((5, 2), dtype=bool)
    missing[1, 0] = missing[4, 1] = True
    data = _mrode_data(missing)
    mu = data.X @ np.array([[10.0, 5.0], [2.0, -1.0]])
    params = DesignParameters(mu=mu, R=np.zeros((2, 2)), covariances=[np.zeros((2, 2))])
    Y = simulate_records(data, np.zeros((2, 2)), params, np.random.default_rng(1))
    assert np.array_equal(np.isnan(Y), missing)
    np.testing.assert_allclose(Y[~missing], mu[~missing], rtol=0, atol=0)


def test_records_have_the_model_covariance():
    data = _mrode_data()
    A = tabular_relationship(P1_SIRE, P1_DAM)   # Mrode (2014) section 2.2, outside oracle
    K = A[np.ix_(data.record_animal, data.record_animal)]
    Zc = np.eye(2)[data.random[0].level]
    n = data.n_records
    # trait-major vec(Y): cov = G (x) K + C (x) Zc Zc' + R (x) I
    expected = np.kron(G, K) + np.kron(C, Zc @ Zc.T) + np.kron(R, np.eye(n))
    params = DesignParameters(mu=np.zeros((n, 2)), R=R, covariances=[C])
    rng = np.random.default_rng(7)
    N = 20000
    vecs = np.stack([simulate_records(data, G, params, rng).ravel(order="F") for _ in range(N)])
    emp = np.cov(vecs.T)
    # standard error of a sample covariance of normals: sqrt((s_ii s_jj + s_ij^2) / N)
    d = np.diag(expected)
    se = np.sqrt((np.outer(d, d) + expected ** 2) / N)
    z = (emp - expected) / se
    assert np.abs(z).max() < 5, np.abs(z).max()
    assert np.abs(vecs.mean(0)).max() < 5 * np.sqrt(d.max() / N)


def test_fixed_part_gives_back_the_population_mean_the_fit_reports():
    # A fit's posterior in the engines' form: beta on the standardised scale, one chain, 3 draws.
    data = _mrode_data()
    data.y_center = np.array([20.0, 7.0])
    data.y_scale = np.array([3.0, 0.5])
    data.x_scale = np.array([1.0, 1.0])
    rng = np.random.default_rng(3)
    beta = rng.normal(size=(1, 3, 2, 2))
    eye = np.broadcast_to(np.eye(2), (1, 3, 2, 2))
    post = xr.Dataset({"G": (("chain", "draw", "t", "t2"), eye), "R": (("chain", "draw", "t", "t2"), eye),
                       "beta": (("chain", "draw", "x", "t"), beta),
                       "cov_pen": (("chain", "draw", "t", "t2"), eye)})
    idata = type("I", (), {"posterior": post})()
    core, extra = original_units(data, idata)
    means = {"fixed": extra["fixed"].mean(("chain", "draw")),
             "R": xr.DataArray(core["R"].mean((0, 1))), "cov_pen": extra["cov_pen"].mean(("chain", "draw"))}
    params = design_parameters(data, means)
    np.testing.assert_allclose(params.mu.mean(axis=0), core["mean"].mean(axis=(0, 1)), rtol=1e-12)
    # and record by record: c + s * X beta_mean
    np.testing.assert_allclose(params.mu, data.y_center + data.y_scale * (data.X @ beta.mean(axis=(0, 1))),
                               rtol=1e-12)
    means["fixed"] = means["fixed"].assign_coords(effect=["intercept", "age"])
    with pytest.raises(UserError, match="rerun 'ped2g fit'"):
        design_parameters(data, means)


def test_shared_G_is_the_mean_of_the_posterior_means():
    a, b = np.array([[2.0, 0.5], [0.5, 1.0]]), np.array([[4.0, -0.5], [-0.5, 3.0]])
    np.testing.assert_allclose(shared_G([a, b]), [[3.0, 0.0], [0.0, 2.0]])


def _spd(rng, t):
    A = rng.normal(size=(t, t))
    return A @ A.T + t * np.eye(t)


def test_bias_correction_undoes_a_scalar_shrinkage_exactly():
    # exact identity: if the fit returns k G_bar on average, G_bar M^-1 G_bar = G_bar / k
    rng = np.random.default_rng(11)
    G_bar = _spd(rng, 4)
    for k in (0.6, 0.85, 1.3):
        np.testing.assert_allclose(bias_corrected_G(G_bar, [k * G_bar, k * G_bar]), G_bar / k, rtol=1e-12)


def test_bias_correction_is_minus_the_bias_to_first_order():
    # Taylor expansion (exact algebra): G (G + eB)^-1 G = G - eB + e^2 B G^-1 B + O(e^3), so the
    # error of G_bar - eB shrinks with e^2 and its ratio to e^2 tends to B G^-1 B.
    rng = np.random.default_rng(12)
    G_bar = _spd(rng, 3)
    B = rng.normal(size=(3, 3))
    B = B + B.T
    second = B @ np.linalg.solve(G_bar, B)
    for eps in (1e-2, 1e-3):
        got = bias_corrected_G(G_bar, [G_bar + eps * B])
        np.testing.assert_allclose((got - (G_bar - eps * B)) / eps ** 2, second, rtol=0.05, atol=0.05 * np.abs(second).max())


def test_bias_correction_stays_positive_definite_where_the_additive_one_does_not():
    # the pilots' mean is well above G_bar along one axis: 2 G_bar - M has a negative eigenvalue
    G_bar = np.diag([1.0, 0.2])
    M = np.diag([1.1, 0.5])
    assert np.linalg.eigvalsh(2 * G_bar - M).min() < 0
    got = bias_corrected_G(G_bar, [M])
    assert np.linalg.eigvalsh(got).min() > 0
    np.testing.assert_allclose(got, np.diag([1 / 1.1, 0.04 / 0.5]), rtol=1e-12)
    # the pilots' matrices are averaged first
    np.testing.assert_allclose(bias_corrected_G(G_bar, [np.diag([1.0, 0.4]), np.diag([1.2, 0.6])]), got, rtol=1e-12)
