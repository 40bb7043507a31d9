"""Coverage of the true G by the marginal engine's HPD intervals over replicate data sets.

Design: one invented study from the simulator (ped2g.simulate.study) fixes the pedigree, the
phenotyped animals, their sex and the pattern of missing trait values; each replicate draws new
breeding values down that pedigree (ped2g.simulate.breeding_values) and new residuals, with the
simulator's true G and R. Because only the records change, the eigendecomposition is computed
once and shared by the replicates. Both ways of handling the missing cells can be checked
(``missing_values``): ``gibbs`` (the route ``auto`` takes for large data; a model per
replicate, sampled by PyMC with the Gibbs step) and ``nuts`` (compiled once by nutpie, each
replicate swaps in its rotated records with ``with_data``). The tests run ``gibbs``; the script
runs either.

Expected: a well-calibrated 90% HPD interval covers the true value in about 90% of replicates
(exact when the truth is drawn from the prior; approximately so for a fixed truth and moderate
data -- a property of Bayesian intervals, common practice to check this way).

:func:`prior_calibration` checks the engine itself: with truths drawn from the model's prior the
coverage is exact in expectation.

Run as a script for a fuller calibration than the tests (more replicates):
    python tests/fit/recovery.py --replicates 40
"""

from __future__ import annotations

import argparse

import numpy as np

from ped2g.config import validate
from ped2g.fit import marginal, sample
from ped2g.fit.prepare import prepare
from ped2g.intervals import hpd
from ped2g.pedigree.clean import clean_pedigree
from ped2g.simulate.breeding_values import simulate_breeding_values
from ped2g.simulate.study import StudySettings, simulate_study

TRAITS = ("mass", "wing", "tail")


def design(seed: int = 11, animals: int = 260, phenotyped: int = 200):
    s = StudySettings(populations=("north",), traits=TRAITS, animals=animals, founders=30,
                      phenotyped=phenotyped, duplicate_rows=0, absent_parents=0, stray_whitespace=0,
                      missing_value_fraction=0.1)
    st = simulate_study(s, seed=seed)
    raw = st.pedigree.fillna("").astype(str)
    raw.index = range(2, 2 + len(raw))
    ped, _ = clean_pedigree(raw, missing=("NA", ""))
    phen = st.phenotypes.fillna("").astype(str)
    phen.index = range(2, 2 + len(phen))
    cfg = validate({"traits": list(TRAITS), "fixed": {"sex": "categorical"}})
    data = prepare(cfg, phen, ped, "north")
    truth = st.truth["populations"]["north"]
    return data, np.array(truth["G"]), np.array(truth["R"]), cfg


def with_records(data, y, center=None, scale=None):
    """A copy of ``data`` with standardised records ``y`` (same missing pattern)."""
    if center is None:
        center, scale = data.y_center, data.y_scale
    return data.with_records(y, center, scale)


def replicate(data, G, R, rng):
    """A copy of ``data`` with new records (same animals, design and missing pattern)."""
    U = simulate_breeding_values(data.pedigree, G, rng)[0]
    n, t = data.n_records, data.n_traits
    Y = 10.0 + U[data.record_animal] + rng.standard_normal((n, t)) @ np.linalg.cholesky(R).T
    Y[data.missing] = np.nan
    c, s = np.nanmean(Y, 0), np.nanstd(Y, 0, ddof=1)
    return with_records(data, (Y - c) / s, c, s)


class Fitter:
    """Fits replicate data sets of one design by either route for the missing cells."""

    def __init__(self, data, cfg, missing_values: str):
        self.model_config = {**cfg["model"], "missing_values": missing_values}
        self.missing_values = missing_values
        self.engine = marginal.MarginalEngine()   # one eigendecomposition for every replicate
        if missing_values == "nuts":
            import nutpie

            self.model = self.engine.build(data, self.model_config).model
            self.compiled = nutpie.compile_pymc_model(self.model, backend="numba")

    def posterior(self, rep, settings: dict, name: str):
        if self.missing_values == "nuts":
            compiled = self.compiled.with_data(**self.engine.data_values(rep, self.model_config))
            run = sample.run(self.model, settings, name, progress=False, compiled=compiled)
        else:
            built = self.engine.build(rep, self.model_config)
            run = sample.run(built.model, settings, name, progress=False, extra_steps=built.extra_steps)
        return run.idata.posterior


def coverage(replicates: int, seed: int = 1, mass: float = 0.9, chains: int = 4, warmup: int = 300,
             draws: int = 300, animals: int = 260, phenotyped: int = 200, missing_values: str = "gibbs"):
    """Whether each replicate's HPD interval of each lower-triangle G element covers the truth.

    Returns a boolean array (replicates, t(t+1)/2).
    """
    data, G, R, cfg = design(animals=animals, phenotyped=phenotyped)
    rng = np.random.default_rng(seed)
    fitter = Fitter(data, cfg, missing_values)
    hits, errors = [], []
    iu = np.tril_indices(data.n_traits)
    for r in range(replicates):
        rep = replicate(data, G, R, rng)
        post = fitter.posterior(rep, {"chains": chains, "warmup": warmup, "draws": draws, "seed": seed + r},
                                f"rep{r}")
        Gd = post["G"].values.reshape(-1, *G.shape) * np.outer(rep.y_scale, rep.y_scale)
        lo, hi = hpd(Gd[:, iu[0], iu[1]], mass, axis=0)
        hits.append((lo <= G[iu]) & (G[iu] <= hi))
        errors.append((Gd.mean(0)[iu] - G[iu]) / Gd.std(0)[iu])
    coverage.last_errors = np.array(errors)  # standardised errors (mean - truth) / sd, for the script
    return np.array(hits)


def prior_calibration(replicates: int, seed: int = 5, mass: float = 0.9, chains: int = 4, warmup: int = 300,
                      draws: int = 300, animals: int = 600, phenotyped: int = 500,
                      missing_values: str = "gibbs"):
    """Simulation-based calibration: truths drawn from the model's own prior.

    Each replicate draws (G, R, beta) from the prior (standardised scale), simulates records on
    the design with exactly the model's generative process, fits, and records whether the HPD
    interval covers the drawn truth and the posterior rank of the truth. When the engine computes
    the posterior correctly, coverage equals ``mass`` and ranks are uniform on (0, 1) in
    expectation over the prior (Cook, Gelman & Rubin 2006, *J. Comput. Graph. Stat.* 15:675 [M];
    Talts et al. 2018, arXiv:1804.06788 [M]) -- an exact identity, unlike the fixed-truth check.

    Returns
    -------
    hits, ranks : numpy.ndarray, shape (replicates, t(t+1)/2)
    """
    import pymc as pm

    data, _, _, cfg = design(animals=animals, phenotyped=phenotyped)
    model = marginal.build_model(data, cfg["model"])
    fitter = Fitter(data, cfg, missing_values)
    rng = np.random.default_rng(seed)
    truth = pm.draw([model["G"], model["R"], model["beta"]], draws=replicates, random_seed=seed)
    t = data.n_traits
    iu = np.tril_indices(t)
    hits, ranks = [], []
    for r in range(replicates):
        G, R, beta = truth[0][r], truth[1][r], truth[2][r]
        U = simulate_breeding_values(data.pedigree, G, rng)[0]
        Y = (data.X @ beta + U[data.record_animal]
             + rng.standard_normal((data.n_records, t)) @ np.linalg.cholesky(R).T)
        post = fitter.posterior(with_records(data, Y),
                                {"chains": chains, "warmup": warmup, "draws": draws, "seed": seed + r},
                                f"prior{r}")
        Gd = post["G"].values.reshape(-1, t, t)[:, iu[0], iu[1]]
        lo, hi = hpd(Gd, mass, axis=0)
        hits.append((lo <= G[iu]) & (G[iu] <= hi))
        ranks.append((Gd < G[iu]).mean(axis=0))
    return np.array(hits), np.array(ranks)


if __name__ == "__main__":
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--replicates", type=int, default=40)
    parser.add_argument("--seed", type=int, default=1)
    parser.add_argument("--animals", type=int, default=600)
    parser.add_argument("--phenotyped", type=int, default=500)
    parser.add_argument("--missing-values", choices=("gibbs", "nuts"), default="gibbs",
                        help="how the marginal engine handles missing cells (default: gibbs)")
    args = parser.parse_args()
    hits = coverage(args.replicates, args.seed, animals=args.animals, phenotyped=args.phenotyped,
                    missing_values=args.missing_values)
    z = coverage.last_errors
    print(f"replicates {len(hits)}, G elements {hits.shape[1]}, 90% HPD coverage "
          f"{hits.mean():.3f} (per element: {np.round(hits.mean(0), 3).tolist()}); "
          f"mean of (posterior mean - truth) / posterior SD per element: {np.round(z.mean(0), 2).tolist()}")
    hits, ranks = prior_calibration(args.replicates, args.seed, animals=args.animals, phenotyped=args.phenotyped,
                                    missing_values=args.missing_values)
    print(f"truths drawn from the prior: replicates {len(hits)}, 90% HPD coverage {hits.mean():.3f} "
          f"(per element: {np.round(hits.mean(0), 3).tolist()}); mean posterior rank of the truth "
          f"{np.round(ranks.mean(0), 2).tolist()} (0.5 expected)")
