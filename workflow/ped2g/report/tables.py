"""The report's tables, built as pandas DataFrames (written as CSV and shown as HTML).

Every table here is computed from the stage outputs read by :mod:`ped2g.report.loaders`; none is
typed in. Posterior summaries use the HPD interval of :func:`ped2g.intervals.hpd` (the shortest
interval holding ``ceil(mass * S)`` sorted draws; Chen & Shao 1999).
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd

from ..intervals import hpd
from .loaders import FitInputs, ResultInputs

MATRIX_QUANTITIES = ("G", "R", "P")


# ---------------------------------------------------------------------------------------------
# What was run
# ---------------------------------------------------------------------------------------------
def run_settings(config: dict[str, Any], inputs: ResultInputs) -> pd.DataFrame:
    """One row per setting: the job, populations, traits, model, priors and sampler."""
    model, sampling, priors = config["model"], config["sampling"], config["model"]["priors"]
    engines = sorted({str(f.diagnostics.get("engine")) for f in inputs.fits.values()
                      if f.diagnostics and f.diagnostics.get("engine")})
    fixed = ", ".join(f"{k} ({v})" for k, v in config["fixed"].items()) or "none"
    random = ", ".join(f"{r['name']} (grouped by {r['column']})" for r in config["random"]) or "none"
    rows = [
        ("job", "Bayesian multivariate animal model per population; comparison of the additive "
                "genetic (co)variance matrices G across populations"),
        ("populations", ", ".join(inputs.populations)),
        ("traits", ", ".join(_trait_label(t, config) for t in next(iter(inputs.fits.values())).traits)),
        ("fixed effects", f"intercept per trait; {fixed}"),
        ("random effects", f"additive genetic (pedigree); {random}; residual"),
        ("model engine (config)", model["engine"]),
        ("model engine (ran)", ", ".join(engines) if engines else "not recorded by the fit stage"),
        ("prior on each standard deviation",
         f"{priors['sd_family'].replace('_', '-')} with scale {priors['sd_scale']} "
         "× the trait's phenotypic SD"),
        ("prior on each correlation matrix", f"LKJ with eta = {priors['lkj_eta']}"),
        ("fixed covariances", "none (G and R estimated)" if model["fixed_covariances"] is None
         else "G and R held fixed at the config's matrices"),
        ("sampler", f"{sampling['sampler']} (NUTS)"),
        ("chains × (warm-up + kept draws)",
         f"{sampling['chains']} × ({sampling['warmup']} + {sampling['draws']})"),
        ("target acceptance", sampling["target_accept"]),
        ("seed", sampling["seed"]),
        ("convergence checks", f"R-hat <= {config['checks']['max_rhat']}, bulk and tail ESS >= "
                               f"{config['checks']['min_ess']}, divergences <= "
                               f"{config['checks']['max_divergences']} (on failure: "
                               f"{config['checks']['on_failure']})"),
        ("comparison scale", config["compare"]["scale"]),
        ("interval", f"{config['compare']['interval_mass']:.0%} HPD"),
    ]
    return pd.DataFrame(rows, columns=["setting", "value"])


def _trait_label(trait: str, config: dict[str, Any]) -> str:
    unit = config["report"]["units"].get(trait)
    return f"{trait} ({unit})" if unit else trait


# ---------------------------------------------------------------------------------------------
# The data
# ---------------------------------------------------------------------------------------------
#: How the report counts generations, said once wherever a count is shown.
GENERATIONS_NOTE = ("generations: the number of generations, founders being the first (a pedigree of "
                    "founders only has 1)")


def generation_count(max_generation_index: int | None) -> int:
    """The number of generations from the largest generation index (founders index 0, every other
    animal 1 + the larger index of its known parents; docs/methods.md §1.2): index + 1."""
    return 0 if max_generation_index is None else int(max_generation_index) + 1


def _generation_depth(frame: pd.DataFrame) -> np.ndarray:
    """Generation index of each animal (founders 0) when the table does not carry it."""
    index = {name: i for i, name in enumerate(frame["id"])}
    depth = np.zeros(len(frame), dtype=int)
    for i, (sire, dam) in enumerate(zip(frame.get("sire", [""] * len(frame)),
                                        frame.get("dam", [""] * len(frame)))):
        parents = [index[p] for p in (sire, dam) if p in index and index[p] < i]
        depth[i] = 1 + max(depth[p] for p in parents) if parents else 0
    return depth


def _known(ped: pd.DataFrame, column: str) -> pd.Series:
    """Whether each animal's parent in ``column`` is known (a non-empty cell)."""
    if column not in ped:
        return pd.Series(False, index=ped.index)
    return ped[column].fillna("").astype(str).str.len().gt(0)


def pedigree_by_population(inputs: ResultInputs) -> pd.DataFrame | None:
    """Per population: animals, phenotyped animals, founders, generations and inbreeding.

    Read from each fit's ``pedigree_used.csv`` (the pruned pedigree the model used). A founder has
    neither parent known; ``generations`` is the number of generations with the founders as the
    first (:data:`GENERATIONS_NOTE`; a pedigree of founders only has 1).
    """
    rows = []
    for pop, fit in inputs.fits.items():
        ped = fit.pedigree_used
        if ped is None:
            continue
        founders = int((~_known(ped, "sire") & ~_known(ped, "dam")).sum())
        gen = ped["generation"].to_numpy(int) if "generation" in ped else _generation_depth(ped)
        f = pd.to_numeric(ped["inbreeding"], errors="coerce").to_numpy() if "inbreeding" in ped else None
        phen = (int(ped["phenotyped"].astype(str).isin(["1", "True", "true"]).sum())
                if "phenotyped" in ped else None)
        rows.append({
            "population": pop, "animals": len(ped), "phenotyped": phen, "founders": founders,
            "generations": generation_count(int(gen.max())) if len(gen) else 0,
            "mean_inbreeding": float(np.nanmean(f)) if f is not None and len(f) else None,
            "max_inbreeding": float(np.nanmax(f)) if f is not None and len(f) else None,
            "inbred_animals": int(np.sum(f > 0)) if f is not None else None,
        })
    return pd.DataFrame(rows) if rows else None


def phenotype_counts(pheno: pd.DataFrame | None, populations: list[str],
                     traits: list[str]) -> pd.DataFrame | None:
    """Per population: records, and per trait the number of values (``<trait>_n``) and the percent
    missing (``<trait>_missing_percent``); ``complete_records`` have every trait."""
    if pheno is None:
        return None
    rows = []
    for pop in populations:
        part = pheno[pheno["population"] == pop]
        row: dict[str, Any] = {"population": pop, "records": len(part)}
        for trait in traits:
            n = int(part[trait].notna().sum())
            row[f"{trait}_n"] = n
            row[f"{trait}_missing_percent"] = 100.0 * (1 - n / len(part)) if len(part) else float("nan")
        row["complete_records"] = int(part[traits].notna().all(axis=1).sum())
        rows.append(row)
    return pd.DataFrame(rows)


def changes_by_problem(changes: pd.DataFrame | None) -> pd.DataFrame | None:
    """Number of pedigree changes per problem, with the action taken.

    An action that names its row (``stripped (the sire of '7' on this line)``, ``dropped (same as
    line 5)``) is shown by its first words, so each problem is one row; the full list has them all.
    """
    if changes is None or changes.empty or "problem" not in changes.columns:
        return None
    frame = changes.copy()
    if "action" in frame.columns:
        frame["action"] = frame["action"].fillna("").astype(str).str.split(" (", n=1, regex=False).str[0]
        keys = ["problem", "action"]
    else:
        keys = ["problem"]
    return frame.groupby(keys, sort=True).size().reset_index(name="rows")


# ---------------------------------------------------------------------------------------------
# Fit diagnostics
# ---------------------------------------------------------------------------------------------
def _matrix_labels(name: str, traits: list[str], strict_upper: bool = False) -> list[tuple[str, int, int]]:
    """(label, i, j) for the distinct elements i <= j of a symmetric matrix variable.

    Labels name the row trait first with the row at or below the diagonal (``G[mass,wing]`` for
    G[wing, mass] when wing comes first), as the fit stage's parameters.csv does, so the two
    tables can be matched by label.
    """
    t = len(traits)
    return [(f"{name}[{traits[j]},{traits[i]}]", i, j)
            for i in range(t) for j in range(i + (1 if strict_upper else 0), t)]

#: Quantities whose R-hat and ESS are checked (as the fit stage checks them).
CHECKED_QUANTITIES = ("G", "R", "h2")


def draws_of(fit: FitInputs, name: str) -> np.ndarray:
    """Draws of a posterior variable with chains pooled: shape (S, ...)."""
    arr = fit.idata.posterior[name]
    return arr.stack(sample=("chain", "draw")).transpose("sample", ...).values


def element_draws(fit: FitInputs, name: str) -> dict[str, np.ndarray]:
    """Each distinct element of a matrix variable (upper triangle) as (chain, draw) draws."""
    values = fit.idata.posterior[name].transpose("chain", "draw", ...).values
    return {label: values[:, :, i, j] for label, i, j in _matrix_labels(name, fit.traits)}


def _computed_parameter_diagnostics(fit: FitInputs) -> pd.DataFrame:
    """Rank-normalised split R-hat and bulk/tail ESS (Vehtari et al. 2021, via ArviZ) of every
    sampled element of G and R; elements whose draws are all equal are left out."""
    import arviz as az

    rows = []
    for name in ("G", "R"):  # h2 is a function of G and R and adds no chain information here
        for label, chains in element_draws(fit, name).items():
            if np.ptp(chains) == 0:
                continue  # held fixed (e.g. model.fixed_covariances): not a sampled parameter
            rows.append({"parameter": label,
                         "r_hat": float(az.rhat(chains)), "ess_bulk": float(az.ess(chains, method="bulk")),
                         "ess_tail": float(az.ess(chains, method="tail"))})
    return pd.DataFrame(rows, columns=["parameter", "r_hat", "ess_bulk", "ess_tail"])


def parameter_diagnostics(fit: FitInputs) -> tuple[pd.DataFrame, str]:
    """R-hat and ESS per scalar: the fit's ``parameters.csv``, else computed here with ArviZ.

    Returns the table (parameter, r_hat, ess_bulk, ess_tail) and where it came from.
    """
    table = fit.parameters
    if table is not None and {"parameter", "r_hat", "ess_bulk", "ess_tail"} <= set(table.columns):
        if "quantity" in table.columns:
            table = table[table["quantity"].isin(CHECKED_QUANTITIES)]
        if "fixed" in table.columns:
            table = table[~table["fixed"].astype(str).str.lower().isin(["true", "1"])]
        return table[["parameter", "r_hat", "ess_bulk", "ess_tail"]].copy(), "read from parameters.csv"
    return _computed_parameter_diagnostics(fit), "computed by the report from posterior.nc with ArviZ"


def diagnostics(inputs: ResultInputs, checks: dict[str, Any]) -> tuple[pd.DataFrame, pd.DataFrame, dict[str, str]]:
    """Per-population summary and per-parameter detail of the convergence checks.

    Returns
    -------
    summary
        population, chains, draws, max_r_hat, min_ess_bulk, min_ess_tail, divergences, misses,
        passed (the fit's verdict from diagnostics.json when it recorded one).
    detail
        population, parameter, r_hat, ess_bulk, ess_tail, miss (which checks it misses).
    sources
        Where each population's R-hat and ESS came from.
    """
    max_rhat, min_ess, max_div = checks["max_rhat"], checks["min_ess"], checks["max_divergences"]
    summaries, details, sources = [], [], {}
    for pop, fit in inputs.fits.items():
        table, source = parameter_diagnostics(fit)
        sources[pop] = source
        table = table.copy()
        table.insert(0, "population", pop)
        miss = []
        for r, b, t in zip(table["r_hat"], table["ess_bulk"], table["ess_tail"]):
            m = []
            if not np.isfinite(r) or r > max_rhat:
                m.append("R-hat")
            if not np.isfinite(b) or b < min_ess:
                m.append("bulk ESS")
            if not np.isfinite(t) or t < min_ess:
                m.append("tail ESS")
            miss.append(", ".join(m))
        table["miss"] = miss
        details.append(table)
        div = fit.divergences()
        post = fit.idata.posterior
        misses = int((table["miss"] != "").sum()) + int(div is not None and div > max_div)
        summaries.append({
            "population": pop, "chains": int(post.sizes["chain"]), "draws": int(post.sizes["draw"]),
            "max_r_hat": float(np.nanmax(table["r_hat"])) if len(table) else float("nan"),
            "min_ess_bulk": float(np.nanmin(table["ess_bulk"])) if len(table) else float("nan"),
            "min_ess_tail": float(np.nanmin(table["ess_tail"])) if len(table) else float("nan"),
            "divergences": div, "misses": misses,
            # the fit's own verdict (diagnostics.json); worked out here only for a fit without one
            "passed": fit.checks_passed if fit.checks_passed is not None else (misses == 0 and div is not None),
        })
    return pd.DataFrame(summaries), pd.concat(details, ignore_index=True), sources


def summary_misses(summary: pd.DataFrame, checks: dict[str, Any]) -> pd.DataFrame:
    """Boolean mask of the cells of the diagnostics summary that miss a check."""
    mask = pd.DataFrame(False, index=summary.index, columns=summary.columns)
    # NaN here means no sampled parameter (every element held fixed): nothing to miss.
    mask["max_r_hat"] = summary["max_r_hat"].notna() & (summary["max_r_hat"] > checks["max_rhat"])
    mask["min_ess_bulk"] = summary["min_ess_bulk"].notna() & (summary["min_ess_bulk"] < checks["min_ess"])
    mask["min_ess_tail"] = summary["min_ess_tail"].notna() & (summary["min_ess_tail"] < checks["min_ess"])
    div = pd.to_numeric(summary["divergences"], errors="coerce")
    mask["divergences"] = ~(div <= checks["max_divergences"])
    mask["passed"] = ~summary["passed"].astype(bool)
    mask["misses"] = summary["misses"] > 0
    return mask


def detail_misses(detail: pd.DataFrame, checks: dict[str, Any]) -> pd.DataFrame:
    """Boolean mask of the cells of the per-parameter diagnostics that miss a check."""
    mask = pd.DataFrame(False, index=detail.index, columns=detail.columns)
    mask["r_hat"] = ~(detail["r_hat"] <= checks["max_rhat"])
    mask["ess_bulk"] = ~(detail["ess_bulk"] >= checks["min_ess"])
    mask["ess_tail"] = ~(detail["ess_tail"] >= checks["min_ess"])
    mask["miss"] = detail["miss"] != ""
    return mask


# ---------------------------------------------------------------------------------------------
# Estimates
# ---------------------------------------------------------------------------------------------
def estimates(inputs: ResultInputs, mass: float) -> pd.DataFrame:
    """Posterior mean, median, SD and HPD interval of G, R, P (distinct elements), h2 and rg.

    Columns: population, quantity, trait, trait2, mean, median, sd, hpd_lower, hpd_upper.
    ``trait2`` is empty for heritabilities; rg has only the pairs i < j.
    """
    rows = []
    for pop, fit in inputs.fits.items():
        traits = fit.traits
        post = fit.idata.posterior
        for name in (*MATRIX_QUANTITIES, "rg"):
            if name not in post:
                continue
            d = draws_of(fit, name)
            for _, i, j in _matrix_labels(name, traits, strict_upper=(name == "rg")):
                rows.append(_summary_row(pop, name, traits[i], traits[j], d[:, i, j], mass))
        if "h2" in post:
            d = draws_of(fit, "h2")
            for i, trait in enumerate(traits):
                rows.append(_summary_row(pop, "h2", trait, "", d[:, i], mass))
    return pd.DataFrame(rows)


def _summary_row(pop: str, name: str, trait: str, trait2: str, x: np.ndarray, mass: float) -> dict[str, Any]:
    x = np.asarray(x, dtype=float)
    x = x[np.isfinite(x)]
    if len(x) == 0:
        lo = hi = mean = med = sd = float("nan")
    else:
        lo, hi = hpd(x, mass)
        mean, med, sd = float(x.mean()), float(np.median(x)), float(x.std(ddof=1)) if len(x) > 1 else 0.0
    return {"population": pop, "quantity": name, "trait": trait, "trait2": trait2, "mean": mean,
            "median": med, "sd": sd, "hpd_lower": float(lo), "hpd_upper": float(hi)}


def estimate_matrix(table: pd.DataFrame, population: str, quantity: str, traits: list[str]) -> pd.DataFrame:
    """A t x t display table of ``median [lower, upper]`` for one population and quantity, rounded
    to what the interval supports (:func:`ped2g.report.html.interval_text`).

    Symmetric matrices fill the upper triangle and diagonal; rg fills the upper triangle with 1
    on the diagonal; h2 gives one row.
    """
    from .html import interval_text

    part = table[(table["population"] == population) & (table["quantity"] == quantity)]
    cell = {(r.trait, r.trait2): interval_text(r.median, r.hpd_lower, r.hpd_upper)
            for r in part.itertuples()}
    if quantity == "h2":
        return pd.DataFrame([[cell.get((t, ""), "") for t in traits]], columns=traits, index=["h2"])
    out = pd.DataFrame("", index=traits, columns=traits)
    for i, ti in enumerate(traits):
        for j, tj in enumerate(traits):
            if j < i:
                continue
            out.loc[ti, tj] = "1" if (quantity == "rg" and i == j) else cell.get((ti, tj), "")
    return out


# ---------------------------------------------------------------------------------------------
# Comparisons
# ---------------------------------------------------------------------------------------------
LABEL_COLUMNS = ("population", "population2", "axis", "axis2")
DISPLAY_COLUMNS = ("statistic", *LABEL_COLUMNS, "estimate", "lower", "upper", "null_estimate",
                   "null_lower", "null_upper", "p_obs_gt_null", "intervals_overlap")


def _axis_text(value: Any) -> str:
    """``#3`` for a component number, the name itself for a trait."""
    try:
        number = float(value)
    except (TypeError, ValueError):
        return str(value)
    return f"#{int(number)}" if number.is_integer() else f"#{number}"


#: What ``axis`` and ``axis2`` count, per method, in labels ("eigentensor 1, eigenvector 2").
AXIS_WORDS = {"tensor": ("eigentensor", "eigenvector"), "subspace": ("H axis", "")}


def row_labels(frame: pd.DataFrame) -> list[str]:
    """A short label per row in words from the population (or pair) and axis columns present.

    ``north and south``; ``north, eigentensor 1, eigenvector 2``; ``H axis 2``; a trait name
    as itself.
    """
    labels = []
    for _, row in frame.iterrows():
        parts = []
        if "population" in frame and _present(row.get("population")):
            pair = _present(row.get("population2")) if "population2" in frame else False
            parts.append(f"{row['population']} and {row['population2']}" if pair else str(row["population"]))
        words = AXIS_WORDS.get(str(row.get("method", "")), ("component", "component"))
        for col, word in zip(("axis", "axis2"), words):
            if col in frame and _present(row.get(col)):
                text = _axis_text(row[col])
                parts.append(f"{word or 'component'} {text[1:]}" if text.startswith("#") else text)
        labels.append(", ".join(parts) if parts else str(row.get("statistic", "")))
    return labels


def _present(value: Any) -> bool:
    return value is not None and not (isinstance(value, float) and np.isnan(value)) and str(value) != ""


def compare_display(frame: pd.DataFrame) -> pd.DataFrame:
    """The comparison table with an ``intervals_overlap`` column where null intervals exist.

    Two intervals overlap when ``lower <= null_upper`` and ``null_lower <= upper``.
    """
    out = frame.copy()
    if "overlap" in out.columns:
        text = out["overlap"].astype(str).str.lower()
        out["intervals_overlap"] = np.where(text.isin(["true", "1", "1.0", "yes"]), "yes",
                                            np.where(text.isin(["false", "0", "0.0", "no"]), "no", ""))
    elif {"lower", "upper", "null_lower", "null_upper"} <= set(out.columns):
        have = out[["lower", "upper", "null_lower", "null_upper"]].notna().all(axis=1)
        overlap = (out["lower"] <= out["null_upper"]) & (out["null_lower"] <= out["upper"])
        out["intervals_overlap"] = np.where(have, np.where(overlap, "yes", "no"), "")
    cols = [c for c in DISPLAY_COLUMNS if c in out.columns]
    cols += [c for c in out.columns if c not in cols and c not in ("method", "overlap")]
    return out[cols]


#: Columns of a compare table shown on the page, in order (names as in compare/<method>.csv).
COMPARE_SHOWN = ["statistic", "population", "population2", "axis", "axis2", "mean", "hpd_lower",
                 "hpd_upper", "null_median", "null_hpd_lower", "null_hpd_upper", "p_obs_gt_null",
                 "hpd_overlap", "test_value", "null_refit_median", "null_refit_lower", "null_refit_upper",
                 "p_value", "p_adjusted", "supported"]


BREEDING_NULL_SHOWN = ("null_median", "null_hpd_lower", "null_hpd_upper", "p_obs_gt_null", "hpd_overlap")


def drop_empty(frame: pd.DataFrame) -> pd.DataFrame:
    """``frame`` without its entirely empty columns (names unchanged)."""
    keep = [c for c in frame.columns
            if frame[c].notna().any() and not frame[c].astype(str).str.strip().isin(["", "nan"]).all()]
    return frame[keep]


def compare_shown(raw: pd.DataFrame) -> pd.DataFrame:
    """The columns of a compare table worth reading on the page, under their CSV names, empty
    columns left out; rows the reading rule supports first."""
    cols = [c for c in COMPARE_SHOWN if c in raw.columns]
    if "p_adjusted" in raw and raw["p_adjusted"].notna().any():
        # the calibrated test is the reading; the descriptive null's columns stay in the CSV
        cols = [c for c in cols if c not in BREEDING_NULL_SHOWN]
    out = drop_empty(raw[cols])
    if "supported" in out:
        yes = out["supported"].astype(str).str.lower().isin(["true", "1", "1.0"])
        out = pd.concat([out[yes], out[~yes]])
    return out.reset_index(drop=True)


def supported_words(column: pd.Series) -> list[str]:
    """The ``supported`` column as yes / no / blank (untested), whatever its stored spelling."""
    text = column.astype(str).str.lower()
    return ["yes" if v in ("true", "1", "1.0") else "no" if v in ("false", "0", "0.0") else "" for v in text]


def compare_compact(display: pd.DataFrame, mass: float) -> pd.DataFrame:
    """A narrow version of :func:`compare_display` for the HTML page: one label column and the
    intervals written as ``[lower, upper]``."""
    from .html import fmt

    def interval(lo: str, hi: str) -> list[str]:
        if lo not in display or hi not in display:
            return [""] * len(display)
        return [f"[{fmt(a)}, {fmt(b)}]" if _present(a) and _present(b) else ""
                for a, b in zip(display[lo], display[hi])]

    out = pd.DataFrame({"statistic": display["statistic"].astype(str).to_numpy(),
                        "compared": row_labels(display),
                        "observed": display["estimate"].to_numpy(),
                        f"{mass:.0%} HPD": interval("lower", "upper")})
    if "p_adjusted" in display and display["p_adjusted"].notna().any():
        # the calibrated test against the refitting null (the reading rule's columns)
        out["tested value"] = display["test_value"].to_numpy()
        out[f"noise alone: median [{mass:.0%}]"] = [
            f"{fmt(m)} [{fmt(a)}, {fmt(b)}]" if _present(m) else ""
            for m, a, b in zip(display["null_refit_median"], display["null_refit_lower"],
                               display["null_refit_upper"])]
        out["p"] = display["p_value"].to_numpy()
        out["p (Holm)"] = display["p_adjusted"].to_numpy()
        out["supported"] = supported_words(display["supported"])
        return out
    if "null_estimate" in display and display["null_estimate"].notna().any():
        out["null"] = display["null_estimate"].to_numpy()
        out[f"null {mass:.0%} HPD"] = interval("null_lower", "null_upper")
    if {"diff_hpd_lower", "diff_hpd_upper"} <= set(display.columns) and display["diff_hpd_lower"].notna().any():
        out[f"observed − null, {mass:.0%} HPD"] = interval("diff_hpd_lower", "diff_hpd_upper")
    if "p_obs_gt_null" in display:
        out["P(observed > null)"] = display["p_obs_gt_null"].to_numpy()
    if "intervals_overlap" in display:
        out["intervals overlap"] = display["intervals_overlap"].to_numpy()
    return out


#: Keys of the stages' JSON records that the report shows elsewhere (cautions, provenance) or
#: that are too long for a settings table.
RECORD_SKIP = {"cautions", "null_cautions", "assumptions", "definitions", "fits", "input", "c_note",
               "ped2g_version", "default_reason", "changes"}


#: Readable names of the keys of the stages' JSON records (others: underscores as spaces).
RECORD_LABELS = {
    "max_generation": "generations",
    "mean_inbreeding": "mean inbreeding coefficient F",
    "max_inbreeding": "largest inbreeding coefficient F",
    "inbred_animals": "inbred animals (F > 0)",
    "changes_total": "changes to the raw pedigree",
    "estimator_description": "estimator, in words",
    "animals_pooled": "phenotyped animals pooled",
    "animals_simulated": "animals simulated",
    "animals_in_several_fits": "animals in more than one population's pedigree",
    "singular_draws": "draws with a singular null G",
    "c_population": "relatedness factor c = 1 + mean F - mean relationship",
    "c_pooled": "relatedness factor c, pooled",
    "chunk_draws": "draws per chunk",
    "interval_mass": "interval probability mass",
    "null_draws": "null draws",
    "subspace_dims": "subspace dimensions (leading eigenvectors)",
    "eigentensors_kept": "eigentensors kept",
    "not_positive_definite": "draws not positive definite",
    "null_estimator": "null estimator",
    "null_kind": "null",
    "refit_null": "refitting null",
    "null": "null folder read",
    "run_seconds": "run time (seconds)",
    "seconds": "run time (seconds)",
    "mcse_over_null_sd_median": "Monte Carlo error over the null's SD (median)",
    "refit_rhat_max_median": "largest split R-hat of a refit (median)",
    "pilot_replicates": "pilot refits per population",
}


def _label(key: str) -> str:
    return RECORD_LABELS.get(key, str(key).replace("_", " "))


def record_items(record: dict[str, Any]) -> list[tuple[str, str]]:
    """A stage's JSON record as readable rows: (label, value in words).

    Long entries (:data:`RECORD_SKIP`) are left out; nested records become one row per entry
    (``refitting null: replicates``); ``max_generation`` (the largest generation index, founders
    0) is shown as the number of generations (:func:`generation_count`).
    """
    from .html import plain_value

    rows: list[tuple[str, str]] = []
    for key, value in record.items():
        if key in RECORD_SKIP:
            continue
        if key == "max_generation":
            rows.append(("generations (founders are the first; a pedigree of founders only has 1)",
                         str(generation_count(value))))
        elif isinstance(value, dict) and value:
            for sub, inner in value.items():
                if sub not in RECORD_SKIP:
                    rows.append((f"{_label(key)}: {_label(sub).replace(':', ' ')}", plain_value(inner)))
        else:
            rows.append((_label(key), plain_value(value)))
    return rows


#: What a config setting left empty (null) means, in words (the schema's descriptions).
CONFIG_NONE = {
    "model.fixed_covariances": "none (G and R are estimated)",
    "compare.subspace_dims": "default (half the number of traits, rounded down, at least 1)",
    "compare.max_draws": "default (every posterior draw)",
    "compare.null_model.replicates": "default (the fewest with which every family of tests can reach "
                                     "compare.alpha after the Holm adjustment, and at least 99)",
}


def config_items(config: dict[str, Any], prefix: str = "") -> list[tuple[str, str]]:
    """The config as rows of (dotted key, value in words): ``compare.null_model.refit.chains`` and
    ``1``; lists joined with commas, a blank entry as "blank", null as what it means
    (:data:`CONFIG_NONE`) or "none"."""
    from .html import plain_value

    rows: list[tuple[str, str]] = []
    for key, value in config.items():
        name = f"{prefix}{key}"
        if isinstance(value, dict) and value:
            rows += config_items(value, prefix=f"{name}.")
        elif value is None:
            rows.append((name, CONFIG_NONE.get(name, "none")))
        else:
            rows.append((name, plain_value(value, exact=True)))
    return rows


def stage_cautions(inputs: ResultInputs) -> list[str]:
    """Assumptions and cautions the stages recorded (pedigree, null, compare), each once."""
    found: list[str] = []
    fit_records = [("fit", f.diagnostics, ("assumptions", "cautions")) for f in inputs.fits.values()]
    sources = [("pedigree", inputs.pedigree_summary, ("assumptions", "cautions")),
               *fit_records,
               ("null", inputs.null_summary, ("cautions",)),
               ("compare", inputs.compare_extras.get("summary") if inputs.compare_extras else None,
                ("cautions",))]
    seen: set[str] = set()
    for stage, record, keys in sources:
        for key in keys:
            items = (record or {}).get(key) or []
            for item in items if isinstance(items, list) else [items]:
                text = str(item).strip()
                if text and text not in seen:
                    seen.add(text)
                    found.append(f"{stage}: {text}")
    return found
