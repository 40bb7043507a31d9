"""The report's findings section and the figures that show how the G matrices differ.

:func:`findings_section` writes the section at the top of the page: the reading rule (verbatim
from :data:`ped2g.compare.calibrated.READING_RULE`), the findings in words
(:mod:`ped2g.report.findings`), the findings table and the figure of each population's genetic
variance along the fixed axes. :func:`difference_blocks` adds the other difference figures to the
comparisons section (see :mod:`ped2g.report.difference_figures`).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from . import difference_figures as dfig
from ..intervals import hpd
from . import html, tables
from .findings import Findings, findings
from .loaders import ResultInputs, read_compare_as_written, read_refit_null
from .truth import G_KEY_BY_SCALE, true_matrices

#: Columns of the findings table shown on the page (the CSV has them all).
FINDINGS_SHOWN = ["method", "statistic", "population", "population2", "in_words", "mean", "test_value",
                  "null_refit_median", "null_refit_lower", "null_refit_upper", "p_value", "p_adjusted",
                  "supported"]
#: Pairwise statistics of draws.nc drawn as population x population matrices: (variable, method,
#: statistic in the compare tables, x label of the density).
PAIRWISE = [("skewers_correlation", "skewers", "correlation", "mean response correlation"),
            ("skewers_angle", "skewers", "angle", "angle between responses (degrees)"),
            ("skewers_magnitude_ratio", "skewers", "magnitude_ratio", "|ln(response ratio)|"),
            ("gmax_angle_between", "gmax", "angle_between", "angle between g_max (degrees)"),
            ("distance_riemannian", "distance", "riemannian", "Riemannian distance")]


@dataclass
class Context:
    """What the difference figures share: scaled draws, axes, null and truth."""

    populations: list[str]
    traits: list[str]
    scale: str
    mass: float
    G: dict[str, np.ndarray]            # scaled draws (S, t, t)
    mean_G: dict[str, np.ndarray]
    axes: list[dfig.Axis]
    axes_table: pd.DataFrame
    truth_G: dict[str, np.ndarray] | None
    refit_present: bool


def scale_note(scale: str) -> str:
    return {"variance": "units of phenotypic SD²", "mean": "mean-standardised",
            "original": "original units"}.get(scale, scale)


def sd_note(scale: str) -> str:
    return {"variance": "in phenotypic SDs", "mean": "mean-standardised",
            "original": "original units"}.get(scale, scale)


def build_context(inputs: ResultInputs, config: dict[str, Any], draws, truth: dict | None,
                  log=None) -> Context | None:
    """Scaled G draws of every population, the fixed axes, the null's band and the truth."""
    pops = inputs.populations
    traits = next(iter(inputs.fits.values())).traits
    scale = config["compare"]["scale"]
    mass = config["compare"]["interval_mass"]
    G = {}
    for pop, fit in inputs.fits.items():
        G[pop] = dfig.scaled_draws(tables.draws_of(fit, "G"), tables.draws_of(fit, "P"),
                                   tables.draws_of(fit, "mean"), scale, pop, traits)
    mean_G = {p: np.nanmean(g, axis=0) for p, g in G.items()}
    grand = np.mean(np.stack(list(mean_G.values())), axis=0)
    vectors = None
    if draws is not None and "reference_tensor_vectors" in draws:
        ref = draws["reference_tensor_vectors"].transpose("eigentensor", "trait", "tensor_vector")
        order = [list(map(str, ref["trait"].values)).index(t) for t in traits]
        vectors = ref.values[0][order]
    axes = dfig.fixed_axes(grand, vectors, traits)
    obs = {p: dfig.variance_along(g, axes) for p, g in G.items()}
    null = None
    refits = None
    try:
        refits = read_refit_null(inputs.root, pops, traits)
    except Exception as err:  # a stale or partial null must not stop the report
        if log is not None:
            log.warning("the refitting null's replicates could not be read for the figures: %s", err)
    if refits is not None:
        null = {}
        for k, pop in enumerate(pops):
            per_rep = []
            for r in range(len(refits.replicates)):
                g = dfig.scaled_draws(refits.G[r][:, k], refits.P[r][:, k], refits.mean[r][:, k], scale, pop,
                                      traits)
                per_rep.append(np.nanmean(dfig.variance_along(g, axes), axis=0))
            null[pop] = np.array(per_rep)
    truth_G = true_matrices(truth, G_KEY_BY_SCALE.get(scale, "G"), pops, traits)
    truth_axes = ({p: dfig.variance_along(m, axes) for p, m in truth_G.items()} if truth_G else None)
    table = dfig.axes_table(obs, null, truth_axes, axes, mass)
    return Context(pops, traits, scale, mass, G, mean_G, axes, table, truth_G, refits is not None)


def findings_section(sec, inputs: ResultInputs, config: dict[str, Any], saved, store,
                     ctx: Context | None) -> Findings | None:
    """Fill the findings section; returns the findings (None without calibrated tests)."""
    from ..compare.calibrated import READING_RULE

    alpha = float(config["compare"]["alpha"])
    refit = ((inputs.compare_extras or {}).get("summary") or {}).get("refit_null")
    raw = read_compare_as_written(inputs.root)
    tested = any("p_adjusted" in f and f["p_adjusted"].notna().any() for f in raw.values())
    sec.heading("Findings: differences beyond estimation noise")
    if not raw:
        sec.note("No comparison tables were found (compare/*.csv), so there are no findings to state.")
        return None
    if not (refit and tested):
        sec.text("These comparisons have no calibrated test (the refitting null did not run), so the report "
                 "states no finding: the statistics and their intervals are in the Comparisons section, "
                 "and without a null that includes the error of estimating G they cannot say which "
                 "populations differ.")
        return None
    sec.text("How to read it: " + READING_RULE.format(alpha=alpha))
    found = findings(raw, inputs.compare_extras.get("loadings"), ctx.traits if ctx else
                     next(iter(inputs.fits.values())).traits, inputs.populations, alpha)
    sec.blocks.append(("headline", found.headline))
    if found.supported:
        sec.items(found.supported)
    sec.heading("Not supported")
    sec.items(found.not_supported)
    if found.leads:
        sec.text(f"Came close, but not supported: these differences have p at or below {alpha:g} on their "
                 "own, but not after Holm's adjustment within their family of tests. The reading rule does "
                 "not support them; they are leads for a larger or repeated study, not findings.")
        sec.items(found.leads)
    path = saved.save("findings", found.table)
    shown = found.table[[c for c in FINDINGS_SHOWN if c in found.table]]
    shown = shown.loc[:, shown.notna().any(axis=0)]
    yes = found.table["supported"].astype(bool).to_numpy() if len(found.table) else np.array([], bool)
    if yes.any():
        part = tables.drop_empty(shown[yes]).reset_index(drop=True)  # each table without empty columns
        sec.table(html.table(part, misses=_mark(part), caption="Supported differences"))
    rest = tables.drop_empty(shown[~yes]).reset_index(drop=True)
    if len(rest):
        sec.table(html.table(rest, caption="Tested but not supported", collapse_after=0,
                             summary=f"Show the {len(rest)} tested statistics that are not supported"))
    sec.note(f"Every tested statistic is in {path} with the compare tables' column names; in_words names "
             "the fixed axis a statistic is measured along. mean is the posterior mean, test_value what is "
             "tested (the mean, |ln ratio|, or a population's distance from the populations' mean), "
             "null_refit_* the median and 95% range of the test value over the refitting null's replicates.")
    if ctx is not None:
        axes_figure(sec, ctx, saved, store)
    return found


def _mark(frame: pd.DataFrame) -> pd.DataFrame:
    mask = pd.DataFrame(False, index=frame.index, columns=frame.columns)
    if "supported" in frame:
        mask["supported"] = frame["supported"].astype(bool)
    return mask


def axes_figure(sec, ctx: Context, saved, store) -> None:
    saved.save("variance_along_axes", ctx.axes_table)
    band = ("grey boxes: the range (2.5% to 97.5% over the refitting null's replicates) of the posterior "
            "mean when every population shares one G; " if ctx.refit_present else
            "no refitting null was found, so no noise band is drawn; ")
    truth = "red crosses: the true value from the truth file." if ctx.truth_G else "no truth file was given."
    sec.figure(store.add("variance_along_axes",
                         dfig.axes_variance_figure(ctx.axes_table, ctx.axes, ctx.populations, ctx.traits,
                                                   scale_note(ctx.scale)),
                         "Genetic variance along fixed axes",
                         f"Each population's genetic variance v'Gv along fixed trait combinations v (the "
                         f"leading eigenvectors of the mean over populations of the posterior-mean G, and "
                         f"of the leading eigentensor), with the axis's loadings in the panel title; dots "
                         f"and bars: posterior mean and {ctx.mass:.0%} HPD interval; {band}{truth} "
                         "Numbers in tables/variance_along_axes.csv."))


def difference_blocks(sec, inputs: ResultInputs, ctx: Context, draws, saved, store) -> None:
    """Spectrum, ellipses, correlation heatmap, pairwise matrices and densities."""
    note = scale_note(ctx.scale)
    sec.heading("How the G matrices differ")
    eigen = {p: np.linalg.eigvalsh(g)[:, ::-1] for p, g in ctx.G.items()}
    truth_eig = ({p: np.linalg.eigvalsh(m)[::-1] for p, m in ctx.truth_G.items()} if ctx.truth_G else None)
    rows = []
    for p, e in eigen.items():
        for i in range(e.shape[1]):
            lo, hi = hpd(e[:, i], ctx.mass)
            rows.append({"population": p, "axis": i + 1, "mean": float(e[:, i].mean()), "hpd_lower": lo,
                         "hpd_upper": hi, **({"true_value": float(truth_eig[p][i])}
                                             if truth_eig and p in truth_eig else {})})
    saved.save("eigenvalues", pd.DataFrame(rows))
    sec.figure(store.add("eigenvalue_spectrum", dfig.spectrum_figure(eigen, truth_eig, ctx.mass, note),
                         "Eigenvalue spectrum of each G",
                         f"Eigenvalues of each population's G on the comparison scale ({ctx.scale}), sorted "
                         "within each draw; how evenly genetic variance is spread over trait combinations. "
                         "Numbers in tables/eigenvalues.csv."))
    divergence = None
    loadings = inputs.compare_extras.get("loadings")
    if loadings is not None and "reference" in loadings:
        part = loadings[loadings["reference"] == "divergence_posterior_mean"].set_index("trait")["value"]
        if set(ctx.traits) <= set(part.index):
            divergence = part.loc[ctx.traits].to_numpy(dtype=float)
    sec.figure(store.add("g_ellipses", dfig.ellipses_figure(ctx.mean_G, ctx.G, ctx.traits, divergence,
                                                            ctx.truth_G, sd_note(ctx.scale)),
                         "G in the planes of trait pairs",
                         "One-genetic-SD ellipse of each population's posterior-mean G (thick), of "
                         f"{dfig.ELLIPSE_DRAWS} posterior draws (thin), g_max of the posterior-mean G "
                         "(dashed, length its genetic SD), the true G (dotted, when a truth file is "
                         "given) and the direction of divergence of the population means (arrow)."))
    pairwise_blocks(sec, inputs, ctx, draws, saved, store)


def correlation_figure(sec, inputs: ResultInputs, traits: list[str], store) -> None:
    """The genetic-correlation heatmap (estimates section)."""
    rg, h2 = {}, {}
    for pop, fit in inputs.fits.items():
        rg[pop] = np.mean(tables.draws_of(fit, "rg"), axis=0)
        h2[pop] = np.mean(tables.draws_of(fit, "h2"), axis=0)
    sec.figure(store.add("genetic_correlations", dfig.correlation_heatmap_figure(rg, h2, traits),
                         "Genetic correlations",
                         "Posterior-mean genetic correlation of every trait pair, on the fixed scale -1 "
                         "(blue) to 1 (red), white at 0; the diagonal shows the heritability."))


def pairwise_blocks(sec, inputs: ResultInputs, ctx: Context, draws, saved, store) -> None:
    if draws is None:
        return
    matrices = {}
    for name, *_ in PAIRWISE:
        frame = dfig.pairwise_matrix(draws, name, ctx.populations)
        if frame is not None:
            matrices[name] = frame
            saved.save(f"{name}_matrix", frame.reset_index())
    if matrices:
        sec.figure(store.add("pairwise_matrices", dfig.pairwise_matrix_figure(matrices),
                             "Pairwise statistics, row population against column population",
                             "Posterior median of each statistic for the ordered pair (row, column), read "
                             "from compare/draws.nc; the magnitude ratio is the row's response over the "
                             "column's, so the two cells of a pair are reciprocal. Tables "
                             "*_matrix.csv hold the same numbers."))
    raw = read_compare_as_written(inputs.root)
    panels = []
    for name, method, statistic, xlabel in PAIRWISE:
        frame = raw.get(method)
        if name not in draws or frame is None:
            continue
        rows = frame[(frame["statistic"] == statistic) & frame["population2"].notna()]
        arr = draws[name]
        for _, r in rows.iterrows():
            x = arr.sel(population=r["population"], population2=r["population2"]).values
            if statistic == "magnitude_ratio":
                with np.errstate(divide="ignore", invalid="ignore"):
                    x = np.abs(np.log(x))
            null = None
            if "null_refit_median" in r and np.isfinite(r.get("null_refit_median", np.nan)):
                null = (r["null_refit_median"], r["null_refit_lower"], r["null_refit_upper"])
            panels.append({"title": f"{statistic}: {r['population']} and {r['population2']}",
                           "draws": x, "xlabel": xlabel, "null": null})
    if panels:
        sec.figure(store.add("pairwise_densities", dfig.pairwise_density_figure(panels),
                             "Pairwise statistics against estimation noise",
                             "Posterior draws of each pairwise statistic (blue; dashed: their mean, the "
                             "value tested) against what a shared G gives (grey band: 95% of the refitting "
                             "null's replicates, line: their median)."))


__all__ = ["Context", "build_context", "difference_blocks", "findings_section"]
