"""The compare stage without its command line: from a fit set (and a null) to tables and draws.

:func:`compare` standardises the draws, checks them, fixes the references, runs every method on
the observed and the null draws and summarises them; :func:`write_outputs` writes the result
through :func:`ped2g.io.output_dir`, so a failed run leaves nothing that looks finished.
"""

from __future__ import annotations

import logging
import os
import warnings
from contextlib import contextmanager
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import xarray as xr

from .. import __version__
from ..errors import UserError
from ..contracts.breeding_value_null import BreedingValueNull
from ..contracts.fit_folder import FitSet
from ..contracts.refit_null import RefitNull
from ..rng import generator
from . import gmax, scale, skewers, subspace, tensor
from .matrices import positive_definite, symmetrise
from .statistics import DrawSet, References, build_references, draw_statistics
from .calibrated import READING_RULE, calibrated_columns, required_replicates
from .summarise import method_draws, summarise_method


@dataclass
class CompareResult:
    """Everything the compare stage writes."""

    tables: dict[str, pd.DataFrame]
    references: pd.DataFrame
    loadings: pd.DataFrame
    checks: pd.DataFrame
    draws: xr.Dataset
    summary: dict[str, Any]
    warnings: list[str] = field(default_factory=list)


@contextmanager
def warnings_off():
    """Silence numpy's warnings about all-NaN slices (draws left out are NaN by design)."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        yield


NullInput = BreedingValueNull


def _check_finite(name: str, values: np.ndarray, populations: list[str]) -> None:
    axes = tuple(range(2, values.ndim))
    bad = ~np.isfinite(values).all(axis=axes) if axes else ~np.isfinite(values)
    if bad.any():
        j = int(np.argwhere(bad.any(axis=0))[0][0])
        raise UserError(f"{name} of population '{populations[j]}' has non-finite values in "
                        f"{int(bad[:, j].sum())} of {bad.shape[0]} draws; the file is damaged - rerun the stage that wrote it")


def _align_null(null: NullInput, fits: FitSet, null_path: Path | None) -> tuple[np.ndarray, np.ndarray, dict]:
    """Null G in the fit set's population order and, per null draw, its observed draw position."""
    G0, pops0, traits0, index0, attrs0 = null
    where = f"null file {null_path}" if null_path else "null file"
    if traits0 != fits.traits:
        if sorted(traits0) == sorted(fits.traits):
            raise UserError(f"{where} has the traits in another order ({', '.join(traits0)}) than the "
                            f"fits ({', '.join(fits.traits)}); rerun 'ped2g null' on these fits")
        raise UserError(f"{where} has traits ({', '.join(traits0)}) that differ from the fits' "
                        f"({', '.join(fits.traits)}); rerun 'ped2g null' on these fits")
    if sorted(pops0) != sorted(fits.populations):
        raise UserError(f"{where} has populations ({', '.join(pops0)}) that differ from the fits' "
                        f"({', '.join(fits.populations)}); rerun 'ped2g null' on these fits")
    G0 = G0[:, [pops0.index(p) for p in fits.populations]]
    lookup = {int(d): i for i, d in enumerate(fits.draw_index)}
    missing = [int(d) for d in index0 if int(d) not in lookup]
    if missing:
        raise UserError(f"{where}: {len(missing)} of its {len(index0)} draws come from posterior draws "
                        f"not used here (e.g. draw {missing[0]}); the fits or compare.max_draws changed "
                        "since the null was built - rerun 'ped2g null' with this config and these fits")
    _check_finite("null G", G0, fits.populations)
    return symmetrise(G0), np.array([lookup[int(d)] for d in index0], dtype=np.int64), attrs0


def _count_invalid(valid: np.ndarray, source: str, populations: list[str],
                   log: logging.Logger) -> list[dict[str, Any]]:
    rows = []
    for j, pop in enumerate(populations):
        n_bad = int((~valid[:, j]).sum())
        rows.append({"source": source, "population": pop, "n_draws": int(valid.shape[0]),
                     "n_not_positive_definite": n_bad})
        if n_bad == valid.shape[0]:
            raise UserError(f"{source} G of population '{pop}': none of its {n_bad} draws is positive "
                            "definite, so no comparison can use it; check that fit (or rerun 'ped2g null')")
    total = [r for r in rows if r["n_not_positive_definite"]]
    if total:
        log.warning("%s G draws that are not positive definite, left out of every statistic they "
                    "enter (not repaired): %s", source,
                    ", ".join(f"{r['population']}: {r['n_not_positive_definite']} of {r['n_draws']}" for r in total))
    return rows


def prepare_draws(G: np.ndarray, P: np.ndarray, mean: np.ndarray, scale_name: str, pops: list[str],
                  traits: list[str]) -> tuple[DrawSet, np.ndarray, np.ndarray]:
    """Draws (S, m, ...) of G, P and means ready for the methods: on the comparison scale, on the
    pooled scale, the divergence of means and which G are positive definite.

    The observed fits and every replicate of the refitting null go through this one function.
    Returns the draw set, the pooled scale factors (S, t) and the means on the pooled scale.
    """
    factors = scale.scale_factors(P, mean, scale_name, pops, traits)
    pooled = scale.pooled_factors(P, mean, scale_name)
    means_common = mean / pooled[:, None, :]
    draws = DrawSet(G=scale.standardise(G, factors), G_common=scale.standardise(G, pooled[:, None, :]),
                    divergence=gmax.divergence_axis(means_common), valid=positive_definite(G))
    return draws, pooled, means_common


def _references(draws: DrawSet, config: dict[str, Any], k: int) -> References:
    """The skewers (one fixed set from the run seed) and the reference axes of ``draws``."""
    return build_references(draws, int(config["compare"]["skewers"]), k,
                            generator(int(config["sampling"]["seed"]), "compare", "skewers"))


def _row_estimates(stats: dict[str, xr.DataArray], methods: list[str]) -> tuple[np.ndarray, np.ndarray]:
    """Posterior mean of every row of the tables (methods in ``methods`` order) and its Monte Carlo
    standard error by batch means (10 batches of consecutive draws)."""
    x = np.concatenate([method_draws({n: a for n, a in stats.items() if a.attrs["method"] == meth})
                        for meth in methods], axis=1)
    with np.errstate(invalid="ignore"), warnings_off():
        est = np.nanmean(x, axis=0)
        batches = np.array_split(x, min(10, x.shape[0]), axis=0)
        bm = np.stack([np.nanmean(b, axis=0) for b in batches])
        mcse = np.nanstd(bm, axis=0, ddof=1) / np.sqrt(len(batches))
    return est, mcse


def _calibrate(tables: dict[str, pd.DataFrame], stats_obs: dict[str, xr.DataArray], refits: RefitNull,
               fits: FitSet, config: dict[str, Any], k: int, budget_bytes: float,
               log: logging.Logger, check_replicates: bool = True) -> tuple[dict[str, pd.DataFrame], dict[str, Any]]:
    """Every statistic's estimate on every replicate of the refitting null, and the calibrated
    test of every row (:mod:`ped2g.compare.calibrated`)."""
    import time

    cfg = config["compare"]
    pops, traits = fits.populations, fits.traits
    if refits.populations != pops or refits.traits != traits:
        raise UserError(f"the refitting null has populations {refits.populations} and traits {refits.traits}; "
                        f"the fits have {pops} and {traits}; rerun 'ped2g null-refit'")
    methods = list(tables)
    stacked = pd.concat([tables[m] for m in methods], ignore_index=True)
    n_rows = len(stacked)
    Rn = len(refits.replicates)
    alpha = float(cfg["alpha"])
    n_eig = int(stats_obs["tensor_variance"].sizes["eigentensor"])
    need = required_replicates(len(pops), len(traits), n_eig, alpha)
    if check_replicates and Rn < need:
        raise UserError(f"the refitting null has {Rn} replicates, but with {len(pops)} populations the "
                        f"largest family of tests needs at least {need} for a Holm-adjusted p-value to "
                        f"reach compare.alpha = {alpha:g}; set compare.null_model.replicates to {need} or "
                        "more (or leave it null)")
    estimates = np.full((Rn, n_rows), np.nan)
    mcse = np.full((Rn, n_rows), np.nan)
    failed = 0
    start = last = time.perf_counter()
    for r in range(Rn):
        draws, _, _ = prepare_draws(refits.G[r], refits.P[r], refits.mean[r], cfg["scale"], pops, traits)
        if not draws.valid.all(axis=1).any():
            failed += 1
            continue
        refs = _references(draws, config, k)
        stats = draw_statistics(draws, refs, pops, traits, budget_bytes)
        est, se = _row_estimates(stats, methods)
        if est.shape[0] != n_rows:
            raise RuntimeError("replicate rows do not match the observed rows")
        estimates[r], mcse[r] = est, se
        now = time.perf_counter()
        if now - last >= 20:
            log.info("statistics of %d of %d null replicates computed", r + 1, Rn)
            last = now
    log.info("statistics of %d null replicates in %.1f s", Rn, time.perf_counter() - start)
    out = calibrated_columns(stacked, estimates, alpha, float(cfg["interval_mass"]))
    # Monte Carlo error of the estimator against the spread of the null (per tested row).
    tested = out["p_value"].notna().to_numpy()
    with np.errstate(invalid="ignore", divide="ignore"), warnings_off():
        ratio = np.nanmean(mcse, axis=0) / np.nanstd(estimates, axis=0, ddof=1)
    ratio = ratio[tested & np.isfinite(ratio)]
    diag = refits.diagnostics
    rhat_limit = float(config["checks"]["max_rhat"])
    summary = {
        "replicates": Rn, "replicates_needed": need, "replicates_without_statistics": failed,
        "shared_G": refits.shared_G.tolist(),
        "pilot_replicates": int(refits.attrs.get("pilot_replicates") or 0),
        "shared_G_uncorrected": (np.asarray(refits.attrs["shared_G_uncorrected"]).tolist()
                                 if "shared_G_uncorrected" in refits.attrs else refits.shared_G.tolist()),
        "chains": refits.attrs.get("chains"), "warmup": refits.attrs.get("warmup"),
        "draws": refits.attrs.get("draws"), "engine": refits.attrs.get("engine"),
        "mcse_over_null_sd_median": float(np.median(ratio)) if len(ratio) else None,
        "mcse_over_null_sd_max": float(np.max(ratio)) if len(ratio) else None,
        # Short refit chains rarely meet the fits' R-hat limit; what matters for the test is the
        # estimator's Monte Carlo error above. Both are reported.
        "refit_rhat_max_median": float(diag["rhat_max"].median()),
        "refits_over_max_rhat": int((diag["rhat_max"] > rhat_limit).sum()),
        "refits_over_rhat_1.05": int((diag["rhat_max"] > 1.05).sum()),
        "refits": int(len(diag)),
        "refit_ess_bulk_min_median": float(diag["ess_bulk_min"].median()),
        "refit_divergences": int(diag["divergences"].sum()),
        "refit_seconds_median": float(diag["seconds"].median()),
        "adjustment": "Holm within each family of tests",
        "reading_rule": READING_RULE.format(alpha=alpha),
    }
    if failed:
        log.warning("%d of %d null replicates had no draw with every G positive definite; left out", failed, Rn)
    sizes = [len(tables[m]) for m in methods]
    bounds = np.cumsum([0, *sizes])
    return ({m: out.iloc[bounds[i]:bounds[i + 1]].reset_index(drop=True) for i, m in enumerate(methods)},
            summary)


def compare(fits: FitSet, null: NullInput | None, config: dict[str, Any], budget_bytes: float = 512e6,
            log: logging.Logger | None = None, null_path: Path | None = None,
            refits: RefitNull | None = None, check_replicates: bool = True) -> CompareResult:
    """Run every comparison on the observed draws of ``fits`` and on the ``null`` draws.

    Parameters
    ----------
    fits
        From :func:`ped2g.contracts.fit_folder.load_fit_set`.
    null
        From :func:`ped2g.contracts.breeding_value_null.read_null`, or None.
    config
        The validated config (keys ``compare.*`` and ``sampling.seed`` are used).
    budget_bytes
        Rough memory limit of one chunk of draws.
    """
    log = log or logging.getLogger("ped2g.compare")
    cfg = config["compare"]
    mass = float(cfg["interval_mass"])
    scale_name = cfg["scale"]
    pops, traits = fits.populations, fits.traits
    S, m, t, _ = fits.G.shape
    warnings: list[str] = []
    if t < 2:
        raise UserError(f"key 'traits': comparisons of G need at least two traits, got {t} ({', '.join(traits)})")
    for name in ("G", "P", "mean"):
        _check_finite(f"fit {name}", getattr(fits, name), pops)

    obs, pooled, means_common = prepare_draws(fits.G, fits.P, fits.mean, scale_name, pops, traits)
    n_no_div = int(np.isnan(obs.divergence).any(axis=-1).sum())
    if n_no_div:
        warnings.append(f"{n_no_div} of {S} draws have identical population means; the angle to "
                        "divergence is left out on them")
    valid = obs.valid
    checks = _count_invalid(valid, "observed", pops, log)
    if not valid.all(axis=1).any():
        raise UserError("no posterior draw has a positive-definite G in every population, so the "
                        "statistics of the whole set cannot be computed; check the fits")

    k, warn = subspace.check_dims(cfg["subspace_dims"], t)
    if warn:
        warnings.append(warn)
    for w in warnings:
        log.warning(w)
    refs = _references(obs, config, k)
    stats_obs = draw_statistics(obs, refs, pops, traits, budget_bytes)

    stats_null = pair = None
    null_attrs: dict[str, Any] = {}
    if null is not None:
        G0, pair, null_attrs = _align_null(null, fits, null_path)
        valid0 = positive_definite(G0)
        checks += _count_invalid(valid0, "null_model", pops, log)
        G0s = scale.standardise(G0, pooled[pair][:, None, :])
        null_set = DrawSet(G=G0s, G_common=G0s, divergence=obs.divergence[pair], valid=valid0)
        stats_null = draw_statistics(null_set, refs, pops, traits, budget_bytes)

    tables = {}
    for method in dict.fromkeys(a.attrs["method"] for a in stats_obs.values()):   # in run order
        names = [n for n, a in stats_obs.items() if a.attrs["method"] == method]
        tables[method] = summarise_method({n: stats_obs[n] for n in names},
                                          None if stats_null is None else {n: stats_null[n] for n in names},
                                          pair, mass, scale_name)
    refit_summary: dict[str, Any] = {}
    if refits is not None:
        tables, refit_summary = _calibrate(tables, stats_obs, refits, fits, config, k, budget_bytes, log,
                                           check_replicates)
    refs_table = reference_table(refs, m, t, S, mass)
    loadings = loadings_table(refs, pops, traits, means_common)
    draws = draws_dataset(stats_obs, stats_null, fits, pair, refs, traits, pops)
    checks_df = pd.DataFrame(checks)
    summary = {
        "ped2g_version": __version__,
        "populations": pops, "traits": traits, "scale": scale_name, "interval_mass": mass,
        "draws": S, "null_draws": None if null is None else int(len(pair)),
        "skewers": int(cfg["skewers"]), "subspace_dims": k,
        "eigentensors_kept": int(refs.tensor["E"].shape[0]),
        "seed": int(config["sampling"]["seed"]),
        "not_positive_definite": {f"{r['source']}:{r['population']}": r["n_not_positive_definite"] for r in checks},
        "null_estimator": null_attrs.get("estimator"),
        "null_kind": "refit" if refits is not None else ("breeding_values" if null is not None else None),
        "alpha": float(cfg["alpha"]),
        "refit_null": refit_summary or None,
        "null_cautions": [str(c) for c in np.atleast_1d(null_attrs.get("cautions", []))],
        "warnings": warnings,
        "fits": [{"path": str(f.path), "sha256": _sha256(Path(f.path) / "posterior.nc")} for f in fits.fits],
        "null": None if null_path is None else {"path": str(null_path), "sha256": _sha256(null_path)},
    }
    draws.attrs.update(ped2g_kind="compare", ped2g_version=__version__, scale=scale_name,
                       interval_mass=mass, skewers=int(cfg["skewers"]), subspace_dims=k,
                       seed=int(config["sampling"]["seed"]),
                       not_positive_definite=[f"{r['source']}:{r['population']}={r['n_not_positive_definite']}"
                                              for r in checks],
                       warnings=warnings or ["none"])
    return CompareResult(tables=tables, references=refs_table, loadings=loadings, checks=checks_df,
                         draws=draws, summary=summary, warnings=warnings)


def _sha256(path: Path) -> str | None:
    from ..io import file_sha256

    path = path / "null_G.nc" if path.is_dir() else path
    return file_sha256(path) if path.is_file() else None


def reference_table(refs: References, m: int, t: int, S: int, mass: float) -> pd.DataFrame:
    """Fixed reference values: random-direction references, reference eigenvalues, settings."""
    rows: list[dict[str, Any]] = []

    def add(method: str, quantity: str, value: float, description: str, axis: Any = "", axis2: Any = "") -> None:
        rows.append({"method": method, "quantity": quantity, "axis": axis, "axis2": axis2,
                     "value": float(value), "description": description})

    n = refs.skewers.shape[0]
    rv = skewers.random_reference(t, n, mass)
    add("skewers", "skewers", n, "number of random unit selection gradients (one set for every draw)")
    add("skewers", "random_mean_abs_correlation", rv["mean_abs_correlation"],
        "E|r| of two random directions, Gamma(t/2) / (sqrt(pi) Gamma((t+1)/2))")
    add("skewers", "random_correlation_upper", rv["correlation_upper"],
        f"one-sided upper {mass:g} point of the correlation of two random directions")
    add("skewers", "random_mean_correlation_upper", rv["mean_correlation_upper"],
        f"one-sided upper {mass:g} point of the mean correlation over the skewers for random "
        "directions (normal approximation)")
    add("skewers", "random_mean_angle", rv["mean_angle"], "mean angle between random directions (degrees)")
    ga = gmax.random_angle_reference(t, mass)
    add("gmax", "random_angle_mean", ga["mean"], "mean angle between a random direction and a fixed axis (degrees)")
    add("gmax", "random_angle_lower", ga["lower"],
        f"angle a random direction falls below with probability {1 - mass:.3g} (degrees)")
    add("subspace", "subspace_dims", refs.subspace_dims, "leading eigenvectors per population (k)")
    add("subspace", "max_eigenvalue", m, "largest possible eigenvalue of H (the number of populations)")
    for j, w in enumerate(refs.subspace_eigenvalues, 1):
        add("subspace", "reference_eigenvalue", w, "eigenvalue of H from the posterior-mean G matrices", j)
    for k, w in enumerate(refs.tensor["eigenvalues"], 1):
        add("tensor", "reference_eigenvalue", w, "eigenvalue of the posterior-mean covariance tensor S", k)
        for j, e in enumerate(refs.tensor["epsilon"][k - 1], 1):
            add("tensor", "eigentensor_eigenvalue", e,
                "eigenvalue of the eigentensor (sum of squares over an eigentensor is 1)", k, j)
    add("dimensions", "traits", t, "upper bound of both effective-dimension measures")
    add("draws", "observed_draws", S, "posterior draws per population")
    return pd.DataFrame(rows)


def loadings_table(refs: References, pops: list[str], traits: list[str],
                   means_common: np.ndarray) -> pd.DataFrame:
    """Fixed axes as tidy rows: reference, population, axis, axis2, trait, trait2, value."""
    rows: list[dict[str, Any]] = []

    def add(reference: str, value: float, trait: str, trait2: str = "", axis: Any = "",
            axis2: Any = "", population: str = "") -> None:
        rows.append({"reference": reference, "population": population, "axis": axis, "axis2": axis2,
                     "trait": trait, "trait2": trait2, "value": float(value)})

    t = len(traits)
    for j in range(t):
        for i, tr in enumerate(traits):
            add("subspace_axis", refs.subspace_axes[i, j], tr, axis=j + 1)
    ten = refs.tensor
    for k in range(ten["E"].shape[0]):
        for a, ta in enumerate(traits):
            for b, tb in enumerate(traits):
                add("eigentensor", ten["E"][k, a, b], ta, tb, axis=k + 1)
            for j in range(t):
                add("eigentensor_vector", ten["e"][k, a, j], ta, axis=k + 1, axis2=j + 1)
    labels = [f"{traits[a]}:{traits[b]}" for a, b in tensor.element_pairs(t)]
    for a, la in enumerate(labels):
        for b, lb in enumerate(labels):
            add("covariance_tensor_S", refs.tensor_S[a, b], la, lb)
    for p, pop in enumerate(pops):
        for i, tr in enumerate(traits):
            add("gmax_posterior_mean", refs.gmax[p, i], tr, population=pop)
    d = gmax.divergence_axis(means_common.mean(axis=0, keepdims=True))[0]
    for i, tr in enumerate(traits):
        add("divergence_posterior_mean", d[i], tr)
    return pd.DataFrame(rows)


def draws_dataset(stats_obs: dict[str, xr.DataArray], stats_null: dict[str, xr.DataArray] | None,
                  fits: FitSet, pair: np.ndarray | None, refs: References, traits: list[str],
                  pops: list[str]) -> xr.Dataset:
    """Every per-draw statistic (``<name>`` observed, ``null_<name>`` null) and the references."""
    data = dict(stats_obs)
    if stats_null is not None:
        for name, arr in stats_null.items():
            data[f"null_{name}"] = arr.rename(draw="null_draw")
    ds = xr.Dataset(data)
    ds = ds.assign_coords(draw=np.arange(ds.sizes["draw"]))
    ds["draw_index"] = ("draw", np.asarray(fits.draw_index, dtype=np.int64))
    ds["draw_index"].attrs["description"] = "pooled posterior draw of each fit used as this draw"
    if stats_null is not None:
        ds = ds.assign_coords(null_draw=np.arange(len(pair)))
        ds["null_pair"] = ("null_draw", pair)
        ds["null_pair"].attrs["description"] = "position on the draw axis of the observed draw this null draw came from"
    ds["reference_skewers"] = (("skewer", "trait"), refs.skewers)
    ds["reference_subspace_axes"] = (("trait", "subspace_axis"), refs.subspace_axes)
    ds["reference_eigentensors"] = (("eigentensor", "trait", "trait2"), refs.tensor["E"])
    ds["reference_tensor_vectors"] = (("eigentensor", "trait", "tensor_vector"), refs.tensor["e"])
    ds["reference_tensor_epsilon"] = (("eigentensor", "tensor_vector"), refs.tensor["epsilon"])
    ds["reference_gmax"] = (("population", "trait"), refs.gmax)
    return ds.assign_coords(trait2=traits)


def write_outputs(result: CompareResult, out: str | os.PathLike, cautions: list[str]) -> None:
    """Write the tables, ``draws.nc`` and ``summary.json`` into ``out`` (atomically)."""
    from ..io import output_dir, write_json

    with output_dir(out) as tmp:
        for method, frame in result.tables.items():
            frame.to_csv(tmp / f"{method}.csv", index=False)
        result.references.to_csv(tmp / "references.csv", index=False)
        result.loadings.to_csv(tmp / "loadings.csv", index=False)
        result.checks.to_csv(tmp / "draw_checks.csv", index=False)
        ds = result.draws.copy()
        ds.attrs["cautions"] = list(cautions)
        ds.to_netcdf(tmp / "draws.nc", engine="h5netcdf")
        write_json(tmp / "summary.json", {**result.summary, "cautions": list(cautions)})
