"""Calibration of the sparse engine's 90% HPD intervals of G and of every extra covariance.

A validation script, not collected by pytest (it took 241 s for 8 replicates, too long for CI's
budget; CI checks the sparse engine by its exact likelihood identities and its agreement with the
marginal engine, tests/fit/test_sparse_mme.py and test_sparse_engine.py). Run it as

    PYTHONPATH=workflow:tests/fit python tests/fit/sparse_recovery.py --replicates 8

It prints the coverage per scalar and pooled, and exits non-zero when a check below fails.

Design (tests/fit/field_study.py): about 160 animals with 2 records each, a maternal effect on
the dam column (some dams unknown) and a permanent-environment effect on the id column, 12% of
cells missing. Each replicate draws G, R, both extra covariances and beta from the model's own
prior (standardised scale) and records from exactly the model's generative process
(ped2g.null.refit.simulate_records); the model is compiled once and each replicate swaps its
records in (``compiled.with_data``, as the refitting null does).

Oracle: when the posterior is computed correctly, a 90% interval covers a truth drawn from the
prior with probability exactly 0.9, and the posterior rank of the truth is uniform on (0, 1)
(Cook, Gelman & Rubin 2006 [M]; Talts et al. 2018 [M]) -- a statistical identity, whatever the
amount of data (so no allowance for prior-dominated intervals is needed, unlike a fixed truth).

Tolerances: replicates are independent, so for each scalar (18: the lower triangles of G,
cov_maternal and cov_permanent) the number of replicates whose interval covers it is exactly
Binomial(R, 0.9). The test fails when some scalar is covered in no more replicates than the
largest k with P(X <= k) <= 0.01 / 18 (Bonferroni over the 18 scalars: a correct engine fails
with probability at most 1%; scipy.stats.binom). Pooled over scalars the rate must lie in
[0.75, 0.99] as in test_recovery.py. The mean rank of each scalar over R replicates has SD
sqrt(1 / (12 R)) under uniform ranks; |mean rank - 0.5| < 3.5 SD for every scalar.
"""

import numpy as np
from scipy import stats

import field_study
from ped2g.fit import sample, sparse
from ped2g.intervals import hpd
from ped2g.null.refit import DesignParameters, simulate_records

REPLICATES = 8
RANDOM = field_study.RANDOM[:2]      # maternal (dam column) and permanent (id column)


def sparse_intervals_cover_truths_from_the_prior_at_the_nominal_rate(replicates: int = REPLICATES):
    import pymc as pm

    data, cfg, _ = field_study.design(seed=11, random=RANDOM, animals=220, founders=30, phenotyped=160)
    assert [e.name for e in data.random] == ["maternal", "permanent"]
    engine = sparse.SparseEngine()
    built = engine.build(data, cfg["model"])
    compiled = sample.compile_nutpie(built.model)
    names = ["G", "cov_maternal", "cov_permanent"]
    truth = pm.draw([built.model[n] for n in ["R", "beta", *names]], draws=replicates, random_seed=21)
    t = data.n_traits
    lower = np.tril_indices(t)
    rng = np.random.default_rng(22)
    hits, ranks = [], []
    for r in range(replicates):
        R, beta, G, M, E = (truth[k][r] for k in range(5))
        params = DesignParameters(mu=data.X @ beta, R=R, covariances=[M, E])
        rep = data.with_records(simulate_records(data, G, params, rng), data.y_center, data.y_scale)
        run = sample.run(built.model, {"chains": 2, "warmup": 200, "draws": 250, "seed": 30 + r},
                         f"rep{r}", progress=False,
                         compiled=compiled.with_data(**engine.data_values(rep, cfg["model"])))
        post = run.idata.posterior
        h, k = [], []
        for name, true in zip(names, (G, M, E)):
            d = post[name].values.reshape(-1, t, t)[:, lower[0], lower[1]]
            lo, hi = hpd(d, 0.9, axis=0)
            h.append((lo <= true[lower]) & (true[lower] <= hi))
            k.append((d < true[lower]).mean(axis=0))
        hits.append(np.concatenate(h))
        ranks.append(np.concatenate(k))
    hits, ranks = np.array(hits), np.array(ranks)
    q = hits.shape[1]
    k_fail = int(stats.binom.ppf(0.01 / q, replicates, 0.9))
    if stats.binom.cdf(k_fail, replicates, 0.9) > 0.01 / q:
        k_fail -= 1
    counts = hits.sum(axis=0)
    assert counts.min() > k_fail, (counts, k_fail)
    assert 0.75 <= hits.mean() <= 0.99, hits.mean()
    sd = np.sqrt(1 / (12 * replicates))
    assert np.abs(ranks.mean(axis=0) - 0.5).max() < 3.5 * sd, ranks.mean(axis=0)
    return hits, ranks


if __name__ == "__main__":
    import argparse
    import time

    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--replicates", type=int, default=REPLICATES)
    args = parser.parse_args()
    start = time.perf_counter()
    hits, ranks = sparse_intervals_cover_truths_from_the_prior_at_the_nominal_rate(args.replicates)
    print(f"{args.replicates} replicates, {hits.shape[1]} scalars (G, cov_maternal, cov_permanent lower "
          f"triangles), {time.perf_counter() - start:.0f} s")
    print("coverage of 90% HPD intervals per scalar:", np.round(hits.mean(axis=0), 2).tolist())
    print(f"pooled coverage {hits.mean():.3f}; mean rank per scalar in "
          f"[{ranks.mean(axis=0).min():.2f}, {ranks.mean(axis=0).max():.2f}]; every check passed")
