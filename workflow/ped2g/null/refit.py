"""The refitting null: replicate studies simulated under one shared G and refitted like the data.

"Do the populations' G matrices differ by more than estimation alone would give?" is answered by
a parametric bootstrap under the hypothesis that every population shares one G (the approach
recommended by Morrissey, Hangartner & Monro 2019, *Evolution* 73:2512-2517, recalled from
memory; see docs/methods.md §5.6):

1. **The shared G** is the mean over populations of their posterior-mean G (original units): a
   matrix every population's data are compatible with when the hypothesis holds, weighting the
   populations equally.
2. **Replicate r, population p**: records are simulated on p's own design -- its pruned pedigree,
   its records and their missing cells, its fixed-effect rows, its extra random-effect levels --
   as ``y = X b_p + a + sum_c Z_c u_c + e`` with ``a ~ MVN(0, G_shared (x) A_p)``,
   ``u_c ~ MVN(0, C_pc (x) I)`` and ``e ~ MVN(0, R_p)``, where ``b_p``, ``C_pc`` and ``R_p`` are
   p's posterior means. Only G is shared; everything else stays each population's own.
3. **The refit** standardises the simulated records as the fit does
   (:func:`ped2g.fit.prepare.standardise`) and fits them with the same engine, model and priors
   as the observed fit, with shorter chains (``compare.null_model.refit``). Where the engine
   allows, the model is compiled once and each replicate only swaps its records in
   (``compiled.with_data``); the marginal engine's eigendecomposition is computed once.
4. The replicate's G, P and mean draws (original units) are kept; the compare stage computes
   every statistic on replicate r's populations exactly as on the observed fits, and its
   posterior mean is one draw from the null distribution of that statistic's estimate.

Random streams: replicate r of population p draws its records from
``rng.generator(seed, "null_refit", p, r)`` and seeds its sampler from the name
``null_refit:p:r``, so a replicate's numbers do not depend on how replicates are split into jobs.
Pilot refits (the bias correction of the shared G, :func:`bias_corrected_G`) use the stream
``"null_pilot"`` the same way, so they never share random numbers with the replicates.
"""

from __future__ import annotations

import logging
import time
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import xarray as xr

from ..errors import UserError
from ..fit.data import FitData
from ..fit.engine import get as get_engine
from ..fit.prepare import standardise


def shared_G(posterior_mean_G: list[np.ndarray]) -> np.ndarray:
    """The G every population shares under the null: the mean of the posterior-mean G matrices."""
    G = np.mean(np.asarray(posterior_mean_G, dtype=float), axis=0)
    return 0.5 * (G + G.T)


def bias_corrected_G(G_bar: np.ndarray, pilot_means: list[np.ndarray]) -> np.ndarray:
    """The shared G with the estimator's shrinkage at ``G_bar`` taken out (docs/methods.md §5.6).

    ``pilot_means`` are posterior-mean G matrices of pilot refits of data simulated under
    ``G_bar`` (every population, a few replicates each). Their mean ``M`` estimates what the fit
    returns on average when the truth is ``G_bar``; posterior means are pulled toward the prior
    (smaller, rounder), and ``G_bar`` itself is a mean of such estimates. The corrected matrix is

        G* = G_bar M^-1 G_bar

    which equals ``G_bar - (M - G_bar)`` to first order in the bias, is exact when the fit shrinks
    by a scalar factor (``M = k G_bar`` gives ``G_bar / k``), and is positive definite whenever
    ``G_bar`` and ``M`` are (the additive ``2 G_bar - M`` need not be).
    """
    G_bar = 0.5 * (np.asarray(G_bar, dtype=float) + np.asarray(G_bar, dtype=float).T)
    M = np.mean(np.asarray(pilot_means, dtype=float), axis=0)
    M = 0.5 * (M + M.T)
    G = G_bar @ np.linalg.solve(M, G_bar)
    return 0.5 * (G + G.T)


def _factor(C: np.ndarray) -> np.ndarray:
    """A square root L with L L' = C (Cholesky, or the eigen square root if C is singular)."""
    C = 0.5 * (np.asarray(C, dtype=float) + np.asarray(C, dtype=float).T)
    try:
        return np.linalg.cholesky(C)
    except np.linalg.LinAlgError:
        w, v = np.linalg.eigh(C)
        return v * np.sqrt(np.clip(w, 0.0, None))


@dataclass
class DesignParameters:
    """What a population keeps of its own fit when its records are simulated under the null.

    Attributes
    ----------
    mu : numpy.ndarray, shape (n_records, t)
        Fixed part of each record (posterior-mean fixed effects), original units.
    R : numpy.ndarray, shape (t, t)
        Posterior-mean residual covariance, original units.
    covariances : list of numpy.ndarray
        Posterior-mean covariance of each extra random effect (order of ``FitData.random``).
    """

    mu: np.ndarray
    R: np.ndarray
    covariances: list[np.ndarray] = field(default_factory=list)


def design_parameters(data: FitData, means: dict[str, Any]) -> DesignParameters:
    """Posterior means of a fit (:func:`ped2g.contracts.fit_folder.posterior_means`) on ``data``'s design.

    The fit reports fixed effects in original units, ``fixed[x, j] = s_j beta[x, j] / x_scale[x]``
    and the intercept ``c_j + s_j beta[0, j]`` (:mod:`ped2g.fit.outputs`), so the fixed part of
    record r is ``sum_x X[r, x] x_scale[x] fixed[x, j]`` (x_scale[0] = 1, X[:, 0] = 1).
    """
    fixed = means["fixed"]
    effects = [str(e) for e in fixed["effect"].values]
    if effects != list(data.x_names):
        raise UserError(f"population '{data.population}': its fit has fixed effects {effects}, but the "
                        f"config and phenotype table now give {list(data.x_names)}; rerun 'ped2g fit'")
    x_scale = data.x_scale if data.x_scale is not None else np.ones(len(data.x_names))
    mu = data.X @ (np.asarray(fixed.values, dtype=float) * x_scale[:, None])
    covs = []
    for eff in data.random:
        name = f"cov_{eff.name}"
        if name not in means:
            raise UserError(f"population '{data.population}': its fit has no covariance of random effect "
                            f"'{eff.name}'; rerun 'ped2g fit' with this config")
        covs.append(np.asarray(means[name].values, dtype=float))
    return DesignParameters(mu=mu, R=np.asarray(means["R"].values, dtype=float), covariances=covs)


def simulate_records(data: FitData, G: np.ndarray, params: DesignParameters,
                     rng: np.random.Generator) -> np.ndarray:
    """Records on ``data``'s design with genetic covariance ``G`` (original units).

    Returns an array (n_records, t) with NaN exactly where ``data`` has missing cells. Breeding
    values are simulated down the pruned pedigree (:func:`ped2g.simulate.breeding_values.
    simulate_breeding_values`), so their covariance is ``G (x) A``.
    """
    from ..simulate.breeding_values import simulate_breeding_values

    n, t = data.n_records, data.n_traits
    a = simulate_breeding_values(data.pedigree, G, rng)[0]
    Y = params.mu + a[data.record_animal]
    for eff, C in zip(data.random, params.covariances):
        u = rng.standard_normal((eff.n_levels, t)) @ _factor(C).T
        Y = Y + eff.take(u)     # nothing for records of an unknown level
    Y = Y + rng.standard_normal((n, t)) @ _factor(params.R).T
    Y[data.missing] = np.nan
    return Y


@dataclass
class Replicate:
    """One refitted replicate of one population (original units, draws pooled chain-major)."""

    G: np.ndarray        # (S, t, t)
    P: np.ndarray        # (S, t, t)
    mean: np.ndarray     # (S, t)
    rhat_max: float      # largest split R-hat over the elements of G
    ess_bulk_min: float  # smallest bulk ESS over the elements of G
    ess_tail_min: float
    divergences: int
    seconds: float
    means: dict[str, Any] = field(default_factory=dict)   # posterior means, as posterior_means gives


class Refitter:
    """Refits simulated records on one population's design with its observed fit's engine.

    Parameters
    ----------
    data
        The population's prepared data (:func:`ped2g.fit.prepare.prepare`).
    engine_name
        ``marginal``, ``latent`` or ``sparse``: the engine the observed fit ran (its diagnostics.json).
    config
        The validated config (``model``, ``sampling.seed``, ``compare.null_model.refit``).
    """

    def __init__(self, data: FitData, engine_name: str, config: dict[str, Any],
                 log: logging.Logger | None = None):
        self.log = log or logging.getLogger("ped2g.null_refit")
        self.data = data
        self.engine = get_engine(engine_name)
        self.model_config = config["model"]
        refit = config["compare"]["null_model"]["refit"]
        self.sampling = {"sampler": "nutpie", "chains": int(refit["chains"]), "warmup": int(refit["warmup"]),
                         "draws": int(refit["draws"]), "seed": int(config["sampling"]["seed"]),
                         "target_accept": float(config["sampling"]["target_accept"])}
        self.model = None
        self.built = None
        self.compiled = None
        self.compile_seconds = 0.0
        if self.engine.data_values(data, self.model_config):
            from ..fit import sample

            start = time.perf_counter()
            self.built = self.engine.build(data, self.model_config)
            self.model = self.built.model
            self.compiled = sample.compile_nutpie(self.model, self.built.numba_opt_level)
            self.compile_seconds = time.perf_counter() - start
            self.log.info("compiled the %s engine's model once for every replicate in %.1f s",
                          engine_name, self.compile_seconds)
        else:
            self.log.info("the %s engine builds a model per replicate here (Gibbs step for missing "
                          "values or fixed covariances)", engine_name)

    def refit(self, Y: np.ndarray, name: str) -> Replicate:
        """Fit records ``Y`` (original units, NaN where missing) and return the replicate's draws."""
        import arviz as az

        from ..fit import outputs, sample

        start = time.perf_counter()
        # progress lines of a long refit (every sample.PROGRESS_INTERVAL seconds) name the replicate
        progress = dict(log=self.log, progress_label=f"population {self.data.population}, replicate {name.rsplit(':', 1)[-1]}")
        y, center, scale = standardise(Y)
        new = self.data.with_records(y, center, scale)
        if self.compiled is not None:
            compiled = self.compiled.with_data(**self.engine.data_values(new, self.model_config))
            run = sample.run(self.model, self.sampling, name, progress=False, compiled=compiled,
                             nutpie_options=self.built.nutpie_options, numba_opt_level=self.built.numba_opt_level,
                             **progress)
        else:
            built = self.engine.build(new, self.model_config)
            run = sample.run(built.model, self.sampling, name, progress=False, nutpie_options=built.nutpie_options,
                             extra_steps=built.extra_steps, numba_opt_level=built.numba_opt_level, **progress)
        core, extra = outputs.original_units(new, run.idata)
        t = self.data.n_traits
        lower = np.tril_indices(t)
        g = run.idata.posterior[["G"]]
        if g.sizes["chain"] == 1:   # split one chain in halves, so that split R-hat is defined
            half = g.sizes["draw"] // 2
            g = g.isel(draw=slice(0, 2 * half)).coarsen(draw=half).construct(draw=("chain_half", "draw_half"))
            g = g.isel(chain=0).rename(chain_half="chain", draw_half="draw")
        rhat = np.asarray(az.rhat(g)["G"].values)[lower]
        ess_b = np.asarray(az.ess(g, method="bulk")["G"].values)[lower]
        ess_t = np.asarray(az.ess(g, method="tail")["G"].values)[lower]

        def pooled(a: np.ndarray) -> np.ndarray:
            return a.reshape(-1, *a.shape[2:])

        return Replicate(G=pooled(core["G"]), P=pooled(core["P"]), mean=pooled(core["mean"]),
                         rhat_max=float(np.nanmax(rhat)), ess_bulk_min=float(np.nanmin(ess_b)),
                         ess_tail_min=float(np.nanmin(ess_t)), divergences=int(run.info["divergences"]),
                         seconds=time.perf_counter() - start,
                         means={"R": xr.DataArray(core["R"].mean(axis=(0, 1))),
                                **{k: v.mean(("chain", "draw")) for k, v in extra.items()}})


#: The random streams of the replicates and of the pilot refits (module docstring).
STREAMS = ("null_refit", "null_pilot")


def replicate_name(population: str, replicate: int, stream: str = "null_refit") -> str:
    """The name a replicate's sampler seed is derived from (see the module docstring)."""
    return f"{stream}:{population}:{int(replicate)}"


def run_replicates(data: FitData, engine_name: str, config: dict[str, Any], G: np.ndarray,
                   params: DesignParameters, replicates: list[int],
                   log: logging.Logger | None = None, stream: str = "null_refit",
                   refitter: Refitter | None = None) -> list[Replicate]:
    """Simulate and refit the given replicate numbers of one population; progress to ``log``.

    ``stream`` is ``"null_refit"`` for the null's replicates and ``"null_pilot"`` for the pilot
    refits of the bias correction; ``refitter`` reuses a compiled model."""
    from ..rng import generator

    if stream not in STREAMS:
        raise ValueError(f"stream must be one of {STREAMS}, got {stream!r}")
    log = log or logging.getLogger("ped2g.null_refit")
    seed = int(config["sampling"]["seed"])
    refitter = refitter or Refitter(data, engine_name, config, log)
    what = "pilot refits" if stream == "null_pilot" else "replicates refitted"
    out = []
    start = time.perf_counter()
    last = start
    for i, r in enumerate(replicates, 1):
        Y = simulate_records(data, G, params, generator(seed, stream, data.population, int(r)))
        out.append(refitter.refit(Y, replicate_name(data.population, r, stream)))
        now = time.perf_counter()
        if now - last >= 20 or i == len(replicates):
            left = (now - start) / i * (len(replicates) - i)
            log.info("population %s: %d of %d %s (%.1f s each, about %.0f s left)",
                     data.population, i, len(replicates), what, (now - start) / i, left)
            last = now
    return out
