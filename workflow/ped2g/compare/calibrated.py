"""Calibrated tests: each comparison statistic's estimate against the refitting null.

The estimate of a statistic is its posterior mean, for the observed fits and for every replicate
of the refitting null alike (:mod:`ped2g.null.refit`): replicate r's estimate is one draw from
the distribution the estimate has when every population shares one G and only estimation noise
separates them. A row's p-value is the share of replicates at least as extreme as the observed
estimate, with the usual +1 correction so that it is never 0 and a test that rejects when
p <= alpha keeps its level (Davison & Hinkley 1997, *Bootstrap Methods and their Application*,
section 4.2, recalled from memory)::

    larger means more different:   p = (1 + #{r: T_r >= T_obs}) / (R + 1)
    smaller means more different:  p = (1 + #{r: T_r <= T_obs}) / (R + 1)

with R the replicates whose estimate is finite. Under the null the observed estimate's rank among
the replicates is uniform, so P(p <= k / (R + 1)) = k / (R + 1) exactly: the rule is "p at or
below alpha", and a rule "p below alpha" would hold a level of only (ceil(alpha (R + 1)) - 1) /
(R + 1) -- 0.025 instead of 0.05 with 39 replicates. What is tested (:data:`TESTS`):

* a statistic of a pair of populations (distance, angles, skewer correlation) or of the whole
  set (eigenvalues of Krzanowski's H, variance along eigentensors) is tested on its own value;
  the magnitude ratio on the size of its logarithm, |ln ratio|, since a ratio and its inverse
  are equally far from 1;
* a statistic of one population (evolvability, a variance along an axis, ...) is tested on the
  size of its **deviation** from the mean of that statistic over the populations,
  |x_p - mean_q x_q|: under a shared G no population stands out beyond what its own design's
  noise gives;
* quantities that do not compare G matrices (eigengaps, g_max loadings, the angle to the
  divergence of means) get no test.

Families and adjustment: the rows of one statistic on one axis that differ only in the
populations compared form a family (for example the three pairwise distances of three
populations); a statistic of the whole set forms one family over its axes. P-values are adjusted
within each family by Holm's step-down method (Holm 1979, *Scand. J. Statist.* 6:65-70), which
controls the family-wise error rate under any dependence. The reading rule is :data:`READING_RULE`.

With R replicates the smallest p-value is 1/(R + 1) and Holm multiplies the smallest by the
family size, so a family of f rows can reach alpha only when ``R + 1 >= f / alpha``
(:func:`required_replicates`).
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd

#: The one reading rule, stated in the same words in the README, the report and the methods text.
READING_RULE = (
    "A difference is supported when its p-value against the refitting null (simulated studies in "
    "which every population shares one G, refitted like the data), adjusted by Holm's method "
    "within its family of tests, is at or below alpha = {alpha:g}. A difference that is not supported "
    "is one the data cannot tell from estimation noise; it is not evidence that the G matrices "
    "are equal.")

#: How each statistic is tested: greater or less (its own value), log-ratio (|ln value|, greater)
#: or deviation (|per-population value - mean over populations|, greater). Absent: not tested.
TESTS: dict[tuple[str, str], str] = {
    ("skewers", "correlation"): "less",
    ("skewers", "angle"): "greater",
    ("skewers", "magnitude_ratio"): "log-ratio",
    ("skewers", "response_magnitude"): "deviation",
    ("subspace", "eigenvalue"): "less",
    ("subspace", "projection"): "less",
    ("subspace", "angle"): "deviation",
    ("tensor", "variance"): "greater",
    ("tensor", "coordinate"): "deviation",
    ("tensor", "vector_variance"): "deviation",
    ("gmax", "share"): "deviation",
    ("gmax", "angle_between"): "greater",
    ("evolvability", "evolvability"): "deviation",
    ("evolvability", "conditional_evolvability"): "deviation",
    ("evolvability", "respondability"): "deviation",
    ("evolvability", "autonomy"): "deviation",
    ("evolvability", "integration"): "deviation",
    ("dimensions", "effective_dimensions"): "deviation",
    ("dimensions", "participation_ratio"): "deviation",
    ("distance", "riemannian"): "greater",
}

#: Words for the ``test`` column.
TEST_WORDS = {
    "greater": "larger than under a shared G",
    "less": "smaller than under a shared G",
    "log-ratio": "|ln ratio| larger than under a shared G",
    "deviation": "|deviation from the mean over populations| larger than under a shared G",
}


def required_replicates(n_populations: int, n_traits: int, n_eigentensors: int, alpha: float) -> int:
    """Fewest replicates R with which every family of tests can reach ``alpha`` after Holm.

    Families: pairwise statistics (m(m-1)/2 rows), per-population deviations (m rows), the
    eigenvalues and projections of H (t rows) and the eigentensor variances (``n_eigentensors``
    rows). Needs ``R + 1 >= f / alpha`` for the largest family f.
    """
    m = n_populations
    needs = [m * (m - 1) / 2, m, n_traits, n_eigentensors]
    # Holm's smallest adjusted p is f / (R + 1), which must be at most alpha: R + 1 >= f / alpha.
    return max(1, int(math.ceil(max(needs) / alpha - 1e-9)) - 1)


def planned_replicates(n_populations: int, n_traits: int, alpha: float, asked: int | None) -> int:
    """Replicates of the refitting null: ``asked``, or with None the fewest the reading rule needs
    (:func:`required_replicates` with every eigentensor kept), and at least 99.

    Raises
    ------
    UserError
        ``asked`` is below what the largest family of tests needs.
    """
    from ..errors import UserError

    t = n_traits
    need = required_replicates(n_populations, t, min(n_populations - 1, t * (t + 1) // 2), alpha)
    if asked is None:
        return max(99, need)
    if int(asked) < need:
        raise UserError(f"key 'compare.null_model.replicates' is {asked}, but with {n_populations} "
                        f"populations and {t} traits the largest family of tests needs at least {need} "
                        f"replicates for a Holm-adjusted p-value to reach compare.alpha = {alpha:g}; "
                        "raise it or leave it null")
    return int(asked)


def families(table: pd.DataFrame) -> pd.Series:
    """The family of each row (see the module docstring) as a label."""
    per_pop = table["population"].fillna("").astype(str) != ""
    base = table["method"].astype(str) + "/" + table["statistic"].astype(str)
    axes = "/" + table["axis"].fillna("").astype(str) + "/" + table["axis2"].fillna("").astype(str)
    return base.where(~per_pop, base + axes)


def tested_values(values: np.ndarray, kinds: np.ndarray, family: np.ndarray) -> np.ndarray:
    """The tested value of every row: the estimate; |ln estimate| for ``log-ratio`` rows; for
    ``deviation`` rows |estimate - mean of its family|. ``values`` has the rows on its last axis."""
    values = np.asarray(values, dtype=float)
    out = values.copy()
    ratio = kinds == "log-ratio"
    with np.errstate(divide="ignore", invalid="ignore"):
        out[..., ratio] = np.abs(np.log(values[..., ratio]))
    dev = kinds == "deviation"
    for fam in np.unique(family[dev]):
        cols = np.flatnonzero(dev & (family == fam))
        out[..., cols] = np.abs(values[..., cols] - np.nanmean(values[..., cols], axis=-1, keepdims=True))
    return out


def p_values(observed: np.ndarray, null: np.ndarray, kinds: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """P-values of ``observed`` (C,) against replicate values ``null`` (R, C), per ``kinds``.

    Returns ``(p, n)``: p (NaN where untested or not finite) and the finite replicates per row.
    """
    finite = np.isfinite(null)
    n = finite.sum(axis=0)
    with np.errstate(invalid="ignore"):
        ge = (np.where(finite, null >= observed, False)).sum(axis=0)
        le = (np.where(finite, null <= observed, False)).sum(axis=0)
    p = np.full(observed.shape, np.nan)
    ok = np.isfinite(observed) & (n > 0)
    g = ok & np.isin(kinds, ("greater", "log-ratio", "deviation"))
    p[g] = (1 + ge[g]) / (n[g] + 1)
    s = ok & (kinds == "less")
    p[s] = (1 + le[s]) / (n[s] + 1)
    return p, n


def holm(p: np.ndarray, family: np.ndarray) -> np.ndarray:
    """Holm's step-down adjustment of ``p`` within each family (NaN rows are left out)."""
    adjusted = np.full(p.shape, np.nan)
    for fam in np.unique(family):
        idx = np.flatnonzero((family == fam) & np.isfinite(p))
        if not len(idx):
            continue
        order = idx[np.argsort(p[idx], kind="stable")]
        k = len(order)
        steps = (k - np.arange(k)) * p[order]
        adjusted[order] = np.minimum(1.0, np.maximum.accumulate(steps))
    return adjusted


def at_or_below(p: np.ndarray, alpha: float) -> np.ndarray:
    """``p <= alpha``, with p computed as counts over (R + 1) and Holm's products (3 x 1/60 must
    count as 0.05): a relative slack of 1e-9, far below the spacing 1/(R + 1) of p-values."""
    with np.errstate(invalid="ignore"):
        return np.asarray(p, dtype=float) <= alpha * (1 + 1e-9)


def calibrated_columns(table: pd.DataFrame, null_estimates: np.ndarray, alpha: float,
                       mass: float) -> pd.DataFrame:
    """Add the calibrated test to the rows of ``table`` (the tidy tables of every method, stacked).

    Parameters
    ----------
    table
        Rows with ``method``, ``statistic``, ``population``, ``axis``, ``axis2`` and ``mean``
        (the observed posterior mean).
    null_estimates
        Shape (R, len(table)): each replicate's posterior mean of every row.
    alpha, mass
        The reading rule's level and the mass of the null replicates' interval.

    Adds ``test``, ``test_value`` (what is tested: the estimate, |ln ratio|, or the size of the
    deviation from the mean over populations), ``null_refit_median``, ``null_refit_lower``, ``null_refit_upper`` (the
    replicates' tested values: what noise alone gives), ``n_replicates``, ``p_value``, ``family``,
    ``family_size``, ``p_adjusted`` (Holm) and ``supported`` (p_adjusted <= alpha).
    """
    out = table.copy()
    kinds = np.array([TESTS.get((m, s), "") for m, s in zip(out["method"], out["statistic"])], dtype=object)
    family = families(out).to_numpy()
    tested = kinds != ""
    obs = tested_values(out["mean"].to_numpy(dtype=float), kinds, family)
    null = tested_values(np.asarray(null_estimates, dtype=float), kinds, family)
    p, n = p_values(obs, null, kinds)
    p[~tested] = np.nan
    lo, med, hi = (np.full(len(out), np.nan) for _ in range(3))
    for c in np.flatnonzero(tested & (n > 0)):
        x = null[:, c][np.isfinite(null[:, c])]
        lo[c], med[c], hi[c] = np.quantile(x, [(1 - mass) / 2, 0.5, (1 + mass) / 2])
    fam = np.where(tested, family, "")
    size = pd.Series(fam).map(pd.Series(fam[tested]).value_counts()).to_numpy()
    adj = holm(np.where(tested, p, np.nan), fam)
    out["test"] = [TEST_WORDS.get(k, "") for k in kinds]
    out["test_value"] = np.where(tested, obs, np.nan)
    out["null_refit_median"], out["null_refit_lower"], out["null_refit_upper"] = med, lo, hi
    out["n_replicates"] = pd.array(np.where(tested, n, 0), dtype="Int64").astype("Int64")
    out.loc[~tested, "n_replicates"] = pd.NA
    out["p_value"] = p
    out["family"] = fam
    out["family_size"] = pd.array(np.where(tested, size, 0), dtype="Int64")
    out.loc[~tested, "family_size"] = pd.NA
    out["p_adjusted"] = adj
    out["supported"] = pd.array(np.where(tested, at_or_below(adj, alpha), False), dtype="boolean")
    out.loc[~tested | ~np.isfinite(adj), "supported"] = pd.NA
    return out
