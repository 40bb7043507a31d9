"""Calibration of the randomisation null on populations that truly share one G.

Each replicate study: m populations with their own random pedigrees, one common G0. Breeding
values are simulated down each pedigree with G0 (ped2g's simulator), and each population's
"observed" posterior of G is drawn from the exact conjugate posterior given those breeding values,

    G_j | U_j ~ InverseWishart(nu0 + n_j, Psi0 + U_j' A_j^-1 U_j)

(the posterior of an animal model whose records are the breeding values themselves, i.e.
heritability 1; draws by scipy.stats.invwishart; U' A^-1 U computed as Phi' D^-1 Phi). This
stand-in replaces MCMC fits so that enough replicate studies fit in a test's time. It is a fair
test of the null's machinery (simulation, shuffle, estimator, comparison) because the observed
posteriors are exact posteriors of populations that share G. It is the favourable case: real
posteriors also carry error from predicting breeding values from phenotypes, which the null does
not contain (docs/methods.md §5.3), so with real data the flag rate can be higher than here. The
check on real fits (benchmarks/null_calibration_fits.py, minutes per study) measured it: there the
HPD non-overlap criterion stayed under 5 % but the paired criterion did not.

The null is built with ``ped2g.null.breeding_value_null.build_null`` and the statistics with the
compare stage's own functions (genetic covariance tensor projected on the eigentensors of the observed
posterior-mean tensor, random-skewers mean vector correlations, Krzanowski's H). A statistic is
flagged as in the report: its observed and null 95% HPD intervals do not overlap (Aguirre et al.
2014); the paired criterion (95% HPD of observed - null excludes 0) is measured too.

Run as a script to print the rates for more replicates:
``python tests/null/calibration.py --replicates 200``.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

import numpy as np
from scipy import stats

sys.path.insert(0, str(Path(__file__).resolve().parent))

from null_helpers import random_pedigree  # noqa: E402
from ped2g.compare.skewers import skewer_statistics, unit_skewers  # noqa: E402
from ped2g.compare.subspace import common_subspace  # noqa: E402
from ped2g.compare.tensor import covariance_tensor, eigentensors, project  # noqa: E402
from ped2g.intervals import hpd  # noqa: E402
from ped2g.null.breeding_value_null import build_null  # noqa: E402
from ped2g.simulate.breeding_values import simulate_breeding_values  # noqa: E402

G0 = np.array([[1.0, 0.5, 0.2], [0.5, 1.5, -0.3], [0.2, -0.3, 0.8]])


def statistics(G: np.ndarray, vectors: np.ndarray, skewers: np.ndarray) -> np.ndarray:
    """Per draw: tensor variances alpha_k, skewer correlations of each pair, H's first eigenvalue."""
    m = G.shape[1]
    alpha = project(covariance_tensor(G), vectors)                    # (S, m-1)
    r = skewer_statistics(G, skewers)["correlation"]                  # (S, m, m)
    iu = np.triu_indices(m, 1)
    h1 = common_subspace(G, 1)["eigenvalues"][:, :1]                  # (S, 1)
    return np.concatenate([alpha, r[:, iu[0], iu[1]], h1], axis=1)


def one_study(rng: np.random.Generator, seed: int, m: int = 3, n: int = 300, draws: int = 400,
              estimator: str = "mendelian", last_g: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Flags of every statistic of one replicate study: (HPD non-overlap, paired HPD excludes 0).

    ``last_g`` gives the last population another true G (a power check); by default all share G0.
    """
    t = len(G0)
    nu0, psi0 = t + 1, 0.01 * np.eye(t)
    peds, obs = [], []
    for j in range(m):
        ped = random_pedigree(rng, n, founders=30, generations=4, prefix=f"p{j}_", breeders=20)
        G_true = last_g if (last_g is not None and j == m - 1) else G0
        _, phi = simulate_breeding_values(ped, G_true, rng, return_mendelian=True)
        quad = np.einsum("ia,ib->ab", phi[0] / ped.mendelian[:, None], phi[0])  # U'A^-1 U
        post = stats.invwishart(df=nu0 + n, scale=psi0 + quad)
        obs.append(post.rvs(size=draws, random_state=rng))
        peds.append(ped)
    G_obs = np.stack(obs, axis=1)
    members = [np.arange(p.n) for p in peds]
    G_null = build_null(G_obs, peds, members, estimator, seed, [f"p{j}" for j in range(m)],
                        chunk=draws)
    vectors = eigentensors(covariance_tensor(G_obs).mean(axis=0), t, n_keep=m - 1)["vectors"]
    skewers = unit_skewers(500, t, rng)
    x, y = statistics(G_obs, vectors, skewers), statistics(G_null, vectors, skewers)
    lo_x, hi_x = hpd(x, 0.95, axis=0)
    lo_y, hi_y = hpd(y, 0.95, axis=0)
    no_overlap = (hi_x < lo_y) | (hi_y < lo_x)
    lo_d, hi_d = hpd(x - y, 0.95, axis=0)  # null draw s belongs to observed draw s
    paired = (lo_d > 0) | (hi_d < 0)
    return no_overlap, paired


def flag_rates(replicates: int, seed: int = 1, **kwargs) -> dict[str, np.ndarray]:
    """Flags of every statistic in every replicate: arrays of shape (replicates, statistics)."""
    rng = np.random.default_rng(seed)
    runs = [one_study(rng, seed * 1000 + r, **kwargs) for r in range(replicates)]
    return {"hpd_no_overlap": np.array([a for a, _ in runs]),
            "paired": np.array([b for _, b in runs])}


def main() -> None:
    parser = argparse.ArgumentParser(description="flag rates of the null on populations sharing one G")
    parser.add_argument("--replicates", type=int, default=100)
    parser.add_argument("--estimator", choices=["mendelian", "sample"], default="mendelian")
    parser.add_argument("--n", type=int, default=300)
    parser.add_argument("--seed", type=int, default=1)
    parser.add_argument("--differ", type=float, default=None,
                        help="power check: multiply the last population's G by this factor")
    args = parser.parse_args()
    last = None if args.differ is None else args.differ * G0
    flags = flag_rates(args.replicates, seed=args.seed, estimator=args.estimator, n=args.n, last_g=last)
    names = ["tensor alpha_1", "tensor alpha_2", "skewers r 1-2", "skewers r 1-3", "skewers r 2-3",
             "Krzanowski H eigenvalue 1"]
    for key, f in flags.items():
        print(f"{key}: overall {f.mean():.3f} ({f.sum()}/{f.size}); per statistic: "
              + ", ".join(f"{nm} {v:.3f}" for nm, v in zip(names, f.mean(axis=0))))


if __name__ == "__main__":
    main()
