"""From an engine's draws (standardised scale) to the fit stage's files (original units).

Back-transformation, with ``s`` the phenotypic SDs and ``c`` the trait means used to standardise
(:class:`~ped2g.fit.data.FitData`)::

    G = diag(s) G_std diag(s)   (likewise R and each extra covariance)
    P = G + R + sum_c C_c       (phenotypic covariance: the sum of all variance components)
    h2_j = G_jj / P_jj,   rg_jl = G_jl / sqrt(G_jj G_ll)
    intercept_j = c_j + s_j beta_std[0, j]         (reference levels, numeric covariates at their means)
    beta_j[x]   = s_j beta_std[x, j] / x_scale[x]  (other fixed effects, per unit of the covariate)
    mean_j      = c_j + s_j mean_r(X beta_std)_rj  (population mean: fitted values averaged over records)

Files written (docs/design.md, "Fit stage"): ``posterior.nc``, ``parameters.csv``,
``breeding_values.csv`` (posterior mean and SD per animal and trait), ``breeding_values.nc``
(every draw; only with ``model.save_breeding_values``), ``pedigree_used.csv`` (with a
``phenotyped`` 0/1 column) and ``diagnostics.json``.

Convergence (Vehtari et al. 2021, *Bayesian Analysis* 16:667-718; docs/methods.md §4.2):
rank-normalised split R-hat and bulk/tail ESS from ArviZ, checked for every element of G and R
and every heritability (quantities held fixed are not checked).
"""

from __future__ import annotations

import platform
from pathlib import Path
from typing import Any

import numpy as np
import xarray as xr

from ..config import with_defaults
from ..intervals import hpd
from ..contracts.fit_folder import MATRIX_DIMS, posterior_dataset
from .data import FitData

#: Stated in diagnostics.json and meant for the report: what the numbers rest on.
ASSUMPTIONS = [
    "Additive genetic effects only: dominance, epistasis and any common environment that is not "
    "fitted as an extra random effect end up in G or R and can bias G.",
    "Breeding values, residuals and extra random effects are multivariate normal; residuals are "
    "independent between records with one covariance matrix R for the whole population.",
    "Founders (animals with unknown parents) are unrelated, non-inbred and drawn from one base "
    "population; G refers to that base population.",
    "Phenotyped animals missing from the pedigree are added as unrelated founders.",
    "Missing trait values are missing at random (their absence does not depend on their value "
    "given the observed data).",
    "Selection is assumed to be on recorded traits only; selection on unrecorded correlated traits "
    "can bias G.",
    "The priors (half-normal or half-t SDs scaled by each trait's phenotypic SD, LKJ correlations) "
    "matter when data are few: compare with a run under other model.priors before relying on a "
    "small population's G.",
]


def _draws(idata, name: str) -> np.ndarray:
    """Posterior draws of ``name`` as floats, keeping the (chain, draw) axes."""
    return np.asarray(idata.posterior[name].values, dtype=float)


def original_units(data: FitData, idata) -> tuple[dict[str, np.ndarray], dict[str, xr.DataArray]]:
    """Draws in original units: (core arrays G, R, P, mean; extra labelled variables).

    All arrays keep the leading (chain, draw) axes.
    """
    s = data.y_scale
    ss = np.outer(s, s)
    G = _draws(idata, "G") * ss
    R = _draws(idata, "R") * ss
    P = G + R
    extra: dict[str, xr.DataArray] = {}
    for eff in data.random:
        C = _draws(idata, f"cov_{eff.name}") * ss
        P = P + C
        extra[f"cov_{eff.name}"] = xr.DataArray(C, dims=("chain", "draw", *MATRIX_DIMS))
    beta = _draws(idata, "beta")                       # (chain, draw, p, t)
    x_scale = data.x_scale if data.x_scale is not None else np.ones(len(data.x_names))
    fixed = beta * s / x_scale[:, None]
    fixed[..., 0, :] = data.y_center + s * beta[..., 0, :]
    xbar = data.X.mean(axis=0)
    mean = data.y_center + s * np.einsum("p,cdpt->cdt", xbar, beta)
    extra["fixed"] = xr.DataArray(fixed, dims=("chain", "draw", "effect", "trait"),
                                  coords={"effect": list(data.x_names)})
    return {"G": G, "R": R, "P": P, "mean": mean}, extra


def build_posterior(data: FitData, idata) -> xr.Dataset:
    """The ``posterior`` group of posterior.nc (see :func:`ped2g.contracts.fit_folder.posterior_dataset`)."""
    core, extra = original_units(data, idata)
    return posterior_dataset(data.population, data.traits, core["G"], core["R"], core["P"],
                             core["mean"], extra=extra)


def _scalars(post: xr.Dataset) -> list[tuple[str, str, np.ndarray]]:
    """(name, variable, draws (chain, draw)) for every reported scalar."""
    traits = [str(t) for t in post["trait"].values]
    out = []
    for var in post.data_vars:
        arr = post[var]
        dims = arr.dims[2:]
        vals = arr.values
        if dims == MATRIX_DIMS:
            for j in range(len(traits)):
                for l in range(j + 1):
                    if var == "rg" and j == l:
                        continue
                    out.append((f"{var}[{traits[j]},{traits[l]}]", var, vals[:, :, j, l]))
        elif dims == ("trait",):
            for j, t in enumerate(traits):
                out.append((f"{var}[{t}]", var, vals[:, :, j]))
        elif dims == ("effect", "trait"):
            for x, effect in enumerate(arr["effect"].values):
                for j, t in enumerate(traits):
                    out.append((f"{var}[{effect},{t}]", var, vals[:, :, x, j]))
        elif dims == ():
            out.append((var, var, vals))
    return out


def parameter_table(post: xr.Dataset, mass: float = 0.95):
    """One row per scalar: parameter, quantity, mean, sd, hpd_lower, hpd_upper, ess_bulk, ess_tail, r_hat."""
    import arviz as az
    import pandas as pd

    rows = []
    for name, var, draws in _scalars(post):
        flat = draws.ravel()
        lo, hi = hpd(flat, mass)
        constant = bool(np.ptp(flat) <= 1e-12 * max(1.0, float(np.abs(flat).max())))
        if constant or draws.shape[1] < 4:
            ess_b = ess_t = r_hat = np.nan
        else:
            ess_b = float(az.ess(draws, method="bulk"))
            ess_t = float(az.ess(draws, method="tail"))
            r_hat = float(az.rhat(draws)) if draws.shape[0] > 1 else np.nan
        rows.append(dict(parameter=name, quantity=var, mean=float(flat.mean()), sd=float(flat.std(ddof=1)),
                         hpd_lower=float(lo), hpd_upper=float(hi), ess_bulk=ess_b, ess_tail=ess_t,
                         r_hat=r_hat, fixed=constant))
    return pd.DataFrame(rows)


def check_convergence(table, checks: dict[str, Any], divergences: int, chains: int) -> dict[str, Any]:
    """Apply ``config["checks"]`` to G, R and h2; return what was checked and what missed.

    Quantities held fixed (constant draws) are not checked. With one chain R-hat cannot be
    computed; that is reported as a miss (run at least 4 chains).
    """
    checked = table[table["quantity"].isin(["G", "R", "h2"]) & ~table["fixed"]]
    checks = with_defaults(checks, "checks")
    max_rhat = float(checks["max_rhat"])
    min_ess = float(checks["min_ess"])
    max_div = int(checks["max_divergences"])
    missed = []
    for _, row in checked.iterrows():
        why = []
        if not (row["r_hat"] <= max_rhat):
            why.append(f"R-hat {row['r_hat']:.3f} > {max_rhat}")
        if not (row["ess_bulk"] >= min_ess):
            why.append(f"bulk ESS {row['ess_bulk']:.0f} < {min_ess:g}")
        if not (row["ess_tail"] >= min_ess):
            why.append(f"tail ESS {row['ess_tail']:.0f} < {min_ess:g}")
        if why:
            missed.append({"parameter": row["parameter"], "problems": why})
    div_ok = divergences <= max_div
    return {
        "thresholds": {"max_rhat": max_rhat, "min_ess": min_ess, "max_divergences": max_div},
        "checked": {row["parameter"]: {"r_hat": row["r_hat"], "ess_bulk": row["ess_bulk"],
                                       "ess_tail": row["ess_tail"]} for _, row in checked.iterrows()},
        "missed": missed,
        "divergences": divergences,
        "divergences_ok": div_ok,
        "passed": (not missed) and div_ok,
    }


def failure_message(population: str, checks: dict[str, Any], stopped: bool = True) -> str:
    """One line: which parameters missed which threshold and what to try (``stopped``: the fit
    stopped the workflow, so also say how to keep it instead)."""
    parts = []
    if checks["missed"]:
        shown = "; ".join(f"{m['parameter']} ({', '.join(m['problems'])})" for m in checks["missed"][:4])
        more = f" and {len(checks['missed']) - 4} more" if len(checks["missed"]) > 4 else ""
        parts.append(f"{shown}{more}")
    if not checks["divergences_ok"]:
        parts.append(f"{checks['divergences']} divergent transitions (allowed "
                     f"{checks['thresholds']['max_divergences']})")
    tips = ("try more sampling.warmup and sampling.draws" +
            (", a higher sampling.target_accept (e.g. 0.95) or stronger priors (smaller "
             "model.priors.sd_scale, larger model.priors.lkj_eta)" if not checks["divergences_ok"]
             else ", or stronger priors (smaller model.priors.sd_scale, larger model.priors.lkj_eta)"))
    keep = "; or set checks.on_failure: flag to keep the fit and mark it in the report" if stopped else ""
    return f"population '{population}': {'; '.join(parts)}; {tips}{keep}"


def breeding_value_summary(data: FitData, bv: np.ndarray):
    """Per animal: id, phenotyped, and for each trait the posterior mean and SD (original units)."""
    import pandas as pd

    bv = bv * data.y_scale
    frame = pd.DataFrame({"id": np.asarray(data.pedigree.ids, dtype=str),
                          "phenotyped": data.phenotyped.astype(int)})
    mean = bv.mean(axis=0)
    sd = bv.std(axis=0, ddof=1) if bv.shape[0] > 1 else np.full_like(mean, np.nan)
    for j, t in enumerate(data.traits):
        frame[f"{t}_mean"] = mean[:, j]
        frame[f"{t}_sd"] = sd[:, j]
    return frame


def pedigree_used(data: FitData):
    """The pruned pedigree with a ``phenotyped`` 0/1 column."""
    frame = data.pedigree.to_frame()
    frame["phenotyped"] = data.phenotyped.astype(int)
    return frame


def versions() -> dict[str, str]:
    """Versions of the software a fit depends on."""
    import importlib.metadata as md

    out = {"python": platform.python_version()}
    for pkg in ("ped2g", "pymc", "pytensor", "nutpie", "numba", "numpy", "scipy", "arviz", "xarray"):
        try:
            out[pkg] = md.version(pkg)
        except md.PackageNotFoundError:
            out[pkg] = "not installed"
    return out


def write_posterior(path: Path, post: xr.Dataset, idata) -> None:
    """posterior.nc: the posterior group and the sampler statistics."""
    import arviz as az

    groups = {"posterior": post}
    if "sample_stats" in idata.groups():
        groups["sample_stats"] = idata.sample_stats
    az.InferenceData(**groups).to_netcdf(str(path), engine="h5netcdf")


def write_breeding_value_draws(path: Path, data: FitData, bv: np.ndarray) -> None:
    """breeding_values.nc: every draw (original units), dims (sample, animal, trait)."""
    da = xr.DataArray(bv * data.y_scale, dims=("sample", "animal", "trait"),
                      coords={"animal": np.asarray(data.pedigree.ids, dtype=str), "trait": data.traits},
                      name="breeding_value")
    da.to_dataset().to_netcdf(path, engine="h5netcdf")
