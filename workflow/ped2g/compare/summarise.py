"""Tidy per-method tables: posterior summaries of every statistic, observed beside null.

Each table (``compare/<method>.csv``) has one row per statistic and label combination, with
these columns:

================  ==========================================================================
method            one of :data:`ped2g.contracts.compare_tables.METHOD_ORDER`
statistic         the statistic's name within the method (e.g. ``correlation``)
population        population of the statistic (empty for statistics of the whole set)
population2       second population of a pairwise statistic (each unordered pair once)
axis, axis2       further index: a trait name, or a 1-based component number (eigenvector of
                  H, eigentensor, eigenvector within an eigentensor); empty when not used
axis_meaning      what ``axis`` and ``axis2`` index
scale             the scale of the compared matrices (original, variance or mean)
n_draws           observed draws used (draws whose G were not positive definite left out)
mean, median, sd  posterior mean, median and standard deviation of the observed statistic
hpd_lower/upper   HPD interval (shortest interval holding ``interval_mass`` of the draws)
et_lower/upper    equal-tailed interval (the (1-mass)/2 and (1+mass)/2 quantiles)
null_*            the same for the statistic computed on the null G draws
n_pairs           observed/null draw pairs (null draw and the observed draw it came from)
diff_mean         posterior mean of (observed - null) over the pairs
diff_hpd_lower/upper  HPD interval of (observed - null)
p_obs_gt_null     share of pairs with observed > null: the paired posterior probability that
                  the observed statistic exceeds the null one
hpd_overlap       whether the observed and null HPD intervals overlap (a strict criterion:
                  non-overlap of two 95% intervals is much stricter than a 5% test)
interval_mass     the probability mass of the intervals
description       what the statistic is
================  ==========================================================================

Without a null every ``null_*``, ``diff_*``, ``n_pairs``, ``p_obs_gt_null`` and ``hpd_overlap``
cell is empty. HPD intervals assume one mode; they are not invariant under transformation.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import xarray as xr

from ..contracts.compare_tables import COLUMNS
from ..intervals import equal_tailed, hpd
from .statistics import AXIS_MEANING



def _intervals(x: np.ndarray, mass: float) -> dict[str, np.ndarray]:
    """Summaries of draws ``x`` of shape (S, C), column by column, ignoring NaNs."""
    S, C = x.shape
    finite = np.isfinite(x)
    n = finite.sum(0)
    out = {k: np.full(C, np.nan) for k in ("mean", "median", "sd", "hpd_lower", "hpd_upper",
                                            "et_lower", "et_upper")}
    out["n"] = n
    full = n == S
    if S > 0 and full.any():
        xf = x[:, full]
        out["mean"][full] = xf.mean(0)
        out["median"][full] = np.median(xf, 0)
        out["sd"][full] = xf.std(0, ddof=1) if S > 1 else np.nan
        out["hpd_lower"][full], out["hpd_upper"][full] = hpd(xf, mass, axis=0)
        out["et_lower"][full], out["et_upper"][full] = equal_tailed(xf, mass, axis=0)
    for c in np.flatnonzero(~full & (n > 0)):        # columns with left-out draws, one by one
        xc = x[finite[:, c], c]
        out["mean"][c], out["median"][c] = xc.mean(), np.median(xc)
        out["sd"][c] = xc.std(ddof=1) if len(xc) > 1 else np.nan
        out["hpd_lower"][c], out["hpd_upper"][c] = hpd(xc, mass)
        out["et_lower"][c], out["et_upper"][c] = equal_tailed(xc, mass)
    return out


def paired_comparison(obs: np.ndarray, null: np.ndarray, pair: np.ndarray,
                      mass: float) -> dict[str, np.ndarray]:
    """Compare observed and null draws pair by pair.

    Parameters
    ----------
    obs
        Observed draws, shape (S, C).
    null
        Null draws, shape (S0, C).
    pair
        Shape (S0,): position in ``obs`` of the observed draw each null draw was simulated from.

    Returns
    -------
    dict
        ``n_pairs`` (pairs where both are finite), ``p_obs_gt_null`` = mean of
        ``[obs[pair] > null]``, and ``diff_mean``, ``diff_hpd_lower``, ``diff_hpd_upper`` of
        ``obs[pair] - null`` (Aguirre et al. 2014 compare the two posteriors; the paired
        probability uses that each null draw shares its G with one observed draw).
    """
    x = obs[pair]
    ok = np.isfinite(x) & np.isfinite(null)
    n = ok.sum(0)
    with np.errstate(invalid="ignore", divide="ignore"):
        p = np.where(ok, x > null, False).sum(0) / n
    d = _intervals(np.where(ok, x - null, np.nan), mass)
    return {"n_pairs": n, "p_obs_gt_null": np.where(n > 0, p, np.nan), "diff_mean": d["mean"],
            "diff_hpd_lower": d["hpd_lower"], "diff_hpd_upper": d["hpd_upper"]}


def summarise_statistic(obs: xr.DataArray, null: xr.DataArray | None, pair: np.ndarray | None,
                        mass: float, scale: str) -> pd.DataFrame:
    """Tidy rows for one statistic (see the module docstring for the columns).

    ``obs`` has dims ``(draw, ...)``; ``null`` (optional) the same dims, its first axis the null
    draws; ``pair`` gives, per null draw, the position of its observed draw (see
    :func:`paired_comparison`).
    """
    dims = list(obs.dims[1:])
    S = obs.sizes["draw"]
    x = obs.values.reshape(S, -1)
    grids = np.meshgrid(*[np.asarray(obs[d].values, dtype=object) for d in dims], indexing="ij")
    positions = {d: g.reshape(-1) for d, g in zip(dims, grids)}
    rows = pd.DataFrame(index=range(x.shape[1]))
    rows["method"] = obs.attrs["method"]
    rows["statistic"] = obs.attrs["statistic"]
    rows["population"] = positions.get("population", "")
    rows["population2"] = positions.get("population2", "")
    others = [d for d in dims if d not in ("population", "population2")]
    rows["axis"] = positions[others[0]] if others else ""
    rows["axis2"] = positions[others[1]] if len(others) > 1 else ""
    rows["axis_meaning"] = "; ".join(f"{'axis' if i == 0 else 'axis2'}: {AXIS_MEANING.get(d, d)}"
                                     for i, d in enumerate(others))
    rows["scale"] = scale
    s = _intervals(x, mass)
    rows["n_draws"] = s.pop("n")
    for k, v in s.items():
        rows[k] = v
    if null is not None:
        y = null.values.reshape(null.shape[0], -1)
        s0 = _intervals(y, mass)
        rows["null_n_draws"] = s0.pop("n")
        for k, v in s0.items():
            rows[f"null_{k}"] = v
        for k, v in paired_comparison(x, y, pair, mass).items():
            rows[k] = v
        rows["hpd_overlap"] = pd.array(
            ~((rows["hpd_upper"] < rows["null_hpd_lower"]) | (rows["null_hpd_upper"] < rows["hpd_lower"])),
            dtype="boolean")
        rows.loc[rows[["hpd_lower", "null_hpd_lower"]].isna().any(axis=1), "hpd_overlap"] = pd.NA
    rows["interval_mass"] = mass
    rows["description"] = obs.attrs.get("description", "")
    rows = rows[_kept(obs)]
    return rows.reindex(columns=list(COLUMNS)).reset_index(drop=True)


def _kept(obs: xr.DataArray) -> np.ndarray:
    """Which of the flattened cells of ``obs`` (after the draw axis) become rows: every cell, or
    for pairwise statistics each unordered pair once."""
    n = int(np.prod(obs.shape[1:]))
    if obs.attrs.get("pairs") != "upper":
        return np.ones(n, dtype=bool)
    dims = list(obs.dims[1:])
    i = np.arange(obs.sizes["population"])
    grids = np.meshgrid(*[i if d in ("population", "population2") else np.arange(obs.sizes[d])
                          for d in dims], indexing="ij")
    pos = {d: g.reshape(-1) for d, g in zip(dims, grids)}
    return pos["population"] < pos["population2"]


def statistic_draws(obs: xr.DataArray) -> np.ndarray:
    """The draws of one statistic as (S, rows), rows in the order of :func:`summarise_statistic`."""
    x = obs.values.reshape(obs.sizes["draw"], -1)
    return x[:, _kept(obs)]


def method_draws(obs: dict[str, xr.DataArray]) -> np.ndarray:
    """Every statistic of one method as (S, rows), rows in the order of :func:`summarise_method`."""
    return np.concatenate([statistic_draws(arr) for arr in obs.values()], axis=1)


def summarise_method(obs: dict[str, xr.DataArray], null: dict[str, xr.DataArray] | None,
                     pair: np.ndarray | None, mass: float, scale: str) -> pd.DataFrame:
    """All statistics of one method, stacked in the order given."""
    frames = [summarise_statistic(arr, None if null is None else null[name], pair, mass, scale)
              for name, arr in obs.items()]
    return pd.concat(frames, ignore_index=True)
