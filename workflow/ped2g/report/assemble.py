"""Assemble the report: read the stage outputs, make tables and figures, render one HTML page.

The page has these sections, in this order (their ``id`` in the HTML in brackets): what was run
(``run``), the data (``data``), fit diagnostics (``diagnostics``), estimates (``estimates``),
comparisons (``comparisons``), methods (``methods``), provenance (``provenance``) and cautions
(``cautions``). Every figure is written as PNG and PDF under ``figures/`` and embedded in the
page as a ``data:`` URI; every table is written as CSV under ``tables/``.
"""

from __future__ import annotations

import json
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
from markupsafe import Markup

from ..io import get_logger, output_dir, write_json
from . import html, tables
from .differences import build_context, correlation_figure, difference_blocks, findings_section
from .figures import (MAX_RANK_PANELS, FigureStore, comparison_figure, covariance_unit,
                      eigentensor_figure, heritability_figure, loadings_figure, null_density_figure,
                      rank_plots_figure, refit_band, slug)
from .pdf import PdfResult, write_pdf
from .truth import find_truth, read_truth
from .loaders import (ResultInputs, read_compare_as_written, read_compare_draws, read_phenotypes,
                      read_results)
from .methods_text import CAUTION_REFERENCES, REFERENCES, cautions, methods_paragraph, shared_G_text
from .provenance import checksums, package_versions, run_context, stage_records

SECTION_ORDER = [
    ("findings", "Findings at a glance"),
    ("run", "What was run"),
    ("data", "The data"),
    ("diagnostics", "Fit diagnostics"),
    ("estimates", "Estimates"),
    ("comparisons", "Comparisons, observed against the null"),
    ("methods", "Methods"),
    ("provenance", "Provenance"),
    ("cautions", "Cautions: assumptions and how to read the results"),
]
#: Short labels for the navigation bar.
NAV_LABELS = {"findings": "Findings", "comparisons": "Comparisons", "cautions": "Cautions"}
METHOD_TITLES = {
    "skewers": "Random skewers",
    "subspace": "Krzanowski common subspace (eigenvalues of H)",
    "tensor": "Genetic covariance tensor (eigentensors, loadings, coordinates)",
    "gmax": "g_max and its angle to divergence",
    "evolvability": "Evolvability measures",
    "dimensions": "Effective number of dimensions",
    "distance": "Riemannian distance between G matrices",
}
METHOD_NOTES = {
    "skewers": "Mean correlation between two populations' responses to the same random selection "
               "gradients: 1 means the same direction of response, 0 unrelated directions.",
    "subspace": "Eigenvalues of H range from 0 to the number of populations; an eigenvalue equal to the "
                "number of populations means that direction lies in every population's leading subspace.",
    "tensor": "Variance among populations along each eigentensor: the first eigentensor is the pattern of "
              "(co)variance that differs most among populations.",
    "gmax": "g_max is the direction of most genetic variance. Its angle (degrees) to the main axis of "
            "divergence among the population means is 0 when populations diverged along it and 90 when "
            "perpendicular to it; a small eigengap means g_max is poorly determined.",
    "evolvability": "Average response along random unit selection gradients (Hansen & Houle 2008).",
    "dimensions": "How many trait combinations carry appreciable genetic variance: 1 when G has one "
                  "dominant axis, the number of traits when variance is spread evenly.",
    "distance": "Zero for equal matrices; larger values mean more different matrices.",
}
MAX_FOREST_ROWS = 60
COLLAPSE_AFTER = 12  # longer tables are folded (one click opens them)


@dataclass
class Section:
    """One section of the page: an ``id`` (the HTML anchor), a title and blocks in order.

    Each block is ``(kind, value)`` with kind ``text``, ``note``, ``heading``, ``html`` (a rendered
    table), ``figure`` (a :class:`~ped2g.report.figures.StoredFigure`), ``list``, ``row`` (tables
    side by side) or ``pre``; the template renders each kind.
    """

    id: str
    title: str
    blocks: list[tuple[str, Any]] = field(default_factory=list)

    def text(self, text: str) -> None:
        self.blocks.append(("text", text))

    def note(self, text: str) -> None:
        self.blocks.append(("note", text))

    def heading(self, text: str) -> None:
        self.blocks.append(("heading", text))

    def table(self, markup: Markup) -> None:
        self.blocks.append(("html", markup))

    def figure(self, fig) -> None:
        self.blocks.append(("figure", fig))

    def items(self, items: list[str]) -> None:
        self.blocks.append(("list", items))

    def row(self, markups: list[Markup]) -> None:
        self.blocks.append(("row", markups))

    def pre(self, text: str) -> None:
        self.blocks.append(("pre", text))


@dataclass
class ReportResult:
    """What :func:`build_report` wrote and found."""

    out: Path
    figures: list[str]
    tables: list[str]
    failed_fits: list[str]
    seconds: float
    pdf: Path | None = None
    pdf_note: str = ""


class _Tables:
    """Writes each table as CSV under ``tables/`` and remembers its name."""

    def __init__(self, folder: Path):
        self.folder = folder
        self.names: list[str] = []

    def save(self, name: str, frame: pd.DataFrame) -> str:
        self.folder.mkdir(parents=True, exist_ok=True)
        name = slug(name)
        frame.to_csv(self.folder / f"{name}.csv", index=False)
        self.names.append(name)
        return f"tables/{name}.csv"


def _resolve_input(path: str, config_path: Path | None) -> Path:
    p = Path(path)
    if p.is_absolute() or p.exists() or config_path is None:
        return p
    beside = config_path.parent / p
    return beside if beside.exists() else p


def build_report(config: dict[str, Any], results: str | Path, out: str | Path,
                 config_path: str | Path | None = None, argv: list[str] | None = None,
                 truth: str | Path | None = None, pdf: bool = True) -> ReportResult:
    """Write ``report.html``, ``figures/``, ``tables/``, ``methods.txt`` and ``provenance.json``.

    Parameters
    ----------
    config
        The validated config (defaults filled in, see :func:`ped2g.config.load_config`).
    results
        The results folder (holding ``fits/`` and optionally ``pedigree/``, ``null/``,
        ``compare/``), or its parent.
    out
        The report folder; written through :func:`ped2g.io.output_dir`, so a failed build leaves
        nothing that looks finished.
    """
    from jinja2 import Environment, PackageLoader, select_autoescape

    start = time.perf_counter()
    config_path = Path(config_path) if config_path else None
    inputs = read_results(results, list(config["populations"]))
    traits = next(iter(inputs.fits.values())).traits
    pops = inputs.populations
    units = dict(config["report"]["units"])
    checks = config["checks"]
    mass = config["compare"]["interval_mass"]
    pheno_path = _resolve_input(config["data"]["phenotypes"], config_path)
    pedigree_path = _resolve_input(config["data"]["pedigree"], config_path)
    pheno = read_phenotypes(pheno_path, config["data"]["columns"]["population"], traits)
    versions = package_versions()
    truth_path = find_truth(pheno_path, truth)
    truth_data = read_truth(truth_path) if truth_path else None
    draws = read_compare_draws(inputs.root)

    with output_dir(out) as tmp:
        store = FigureStore(tmp / "figures")
        saved = _Tables(tmp / "tables")
        sections = {sid: Section(sid, title) for sid, title in SECTION_ORDER}

        # -- findings at a glance ---------------------------------------------------------------
        ctx = build_context(inputs, config, draws, truth_data, log=get_logger("report"))
        findings_section(sections["findings"], inputs, config, saved, store, ctx)
        if truth_path:
            sections["findings"].note(f"Truth markers come from {truth_path} (true parameters of a simulated study).")

        # -- what was run ---------------------------------------------------------------------
        settings = tables.run_settings(config, inputs)
        saved.save("run_settings", settings)
        sections["run"].table(html.key_values(list(settings.itertuples(index=False, name=None))))

        # -- the data --------------------------------------------------------------------------
        _data_section(sections["data"], inputs, pheno, pheno_path, traits, saved)

        # -- diagnostics -----------------------------------------------------------------------
        failed = _diagnostics_section(sections["diagnostics"], inputs, checks, saved, store)

        # -- estimates -------------------------------------------------------------------------
        _estimates_section(sections["estimates"], inputs, traits, units, mass, saved, store)

        # -- comparisons -----------------------------------------------------------------------
        has_null_cols = _comparisons_section(sections["comparisons"], inputs, pops, config, saved, store,
                                             ctx, draws)

        # -- methods ---------------------------------------------------------------------------
        engines = sorted({str(f.diagnostics["engine"]) for f in inputs.fits.values()
                          if f.diagnostics and f.diagnostics.get("engine")})
        sampling = [f.diagnostics.get("sampling") or {} for f in inputs.fits.values() if f.diagnostics]
        samplers = sorted({str(x["sampler"]) for x in sampling if x.get("sampler")})
        missing_by_gibbs = any(f.missing_values == "gibbs" for f in inputs.fits.values())
        n_changes = None if inputs.pedigree_changes is None else len(inputs.pedigree_changes)
        paragraph, refs = methods_paragraph(config, pops, traits, engines, n_changes,
                                            passed=len(pops) - len(failed),
                                            methods=list(inputs.compare), null_present=inputs.null_present,
                                            versions=versions,
                                            compare_record=inputs.compare_extras.get("summary"),
                                            samplers=samplers, missing_by_gibbs=missing_by_gibbs,
                                            sample_sizes=_sample_sizes(inputs, pheno, traits))
        refs = sorted(set(refs) | {REFERENCES[k] for k in CAUTION_REFERENCES})
        sec = sections["methods"]
        sec.note("Generated from the settings and outputs of this run; adapt it for a paper and keep "
                 "the versions. The same text is in methods.txt.")
        sec.text(paragraph)
        sec.heading("References")
        sec.items(refs)
        (tmp / "methods.txt").write_text(paragraph + "\n\nReferences\n\n" + "\n".join(refs) + "\n",
                                         encoding="utf-8")

        # -- provenance ------------------------------------------------------------------------
        prov = _provenance_section(sections["provenance"], config, config_path, inputs,
                                   [pedigree_path, pheno_path], versions, saved, argv)

        # -- cautions --------------------------------------------------------------------------
        sec = sections["cautions"]
        sec.items(cautions(config, failed, inputs.null_present, has_null_cols, n_changes,
                           refit=(inputs.compare_extras.get("summary") or {}).get("refit_null")))
        recorded = tables.stage_cautions(inputs)
        if recorded:
            sec.heading("Recorded by the stages")
            sec.note("The assumptions and cautions each stage wrote beside its results.")
            sec.items(recorded)

        env = Environment(loader=PackageLoader("ped2g.report", "templates"),
                          autoescape=select_autoescape(["html", "j2"]))
        page = env.get_template("report.html.j2").render(
            title=config["report"]["title"], populations=pops, traits=traits,
            sections=[sections[sid] for sid, _ in SECTION_ORDER], nav=NAV_LABELS,
            made=prov["context"]["report made (UTC)"], version=versions.get("ped2g", ""), failed=failed)
        (tmp / "report.html").write_text(page, encoding="utf-8")
        printed = write_pdf(tmp / "report.html", tmp / "report.pdf") if pdf else PdfResult(None, "not asked for")
        prov["context"]["report seconds"] = round(time.perf_counter() - start, 2)
        write_json(tmp / "provenance.json", prov)
    return ReportResult(out=Path(out), figures=[f.name for f in store.figures], tables=saved.names,
                        failed_fits=failed, seconds=time.perf_counter() - start,
                        pdf=Path(out) / "report.pdf" if printed.path else None, pdf_note=printed.reason)


# ---------------------------------------------------------------------------------------------
# Sections
# ---------------------------------------------------------------------------------------------
def _data_section(sec: Section, inputs: ResultInputs, pheno, pheno_path: Path, traits: list[str],
                  saved: _Tables) -> None:
    sec.heading("Pedigree per population")
    ped = tables.pedigree_by_population(inputs)
    if ped is None:
        sec.note("No fit folder has pedigree_used.csv, so the pedigree per population cannot be shown.")
    else:
        saved.save("pedigree_by_population", ped)
        sec.note("From each fit's pedigree_used.csv: the phenotyped animals and their ancestors that the "
                 f"model used. Founders have neither parent known; {tables.GENERATIONS_NOTE}.")
        sec.table(html.table(ped))
    if inputs.pedigree_summary:
        sec.heading("Pedigree stage summary")
        sec.table(html.key_values(tables.record_items(inputs.pedigree_summary)))
    sec.heading("Phenotype records and missingness")
    counts = tables.phenotype_counts(pheno, inputs.populations, traits)
    if counts is None:
        sec.note(f"The phenotype table ({pheno_path}) was not found, so record counts are not shown.")
    else:
        saved.save("phenotype_counts", counts)
        sec.note("Counted from the phenotype table named in the config; a cell that is not a number "
                 "counts as missing.")
        sec.table(html.table(counts))
    notes = [f"{pop}: {note}" for pop, fit in inputs.fits.items()
             for note in ((fit.diagnostics or {}).get("preparation_notes") or [])]
    if notes:
        sec.heading("How the fit stage prepared the data")
        sec.items(notes)
    sec.heading("Changes the pedigree stage made")
    changes = inputs.pedigree_changes
    if changes is None:
        sec.note("No pedigree/changes.csv was found, so the changes made to the raw pedigree are unknown.")
    elif changes.empty:
        sec.text("The pedigree stage made no changes: the raw pedigree passed every check.")
    else:
        path = saved.save("pedigree_changes", changes)
        by = tables.changes_by_problem(changes)
        sec.text(f"{len(changes)} change{'s' if len(changes) != 1 else ''} to the raw pedigree "
                 f"(all listed in {path}).")
        if by is not None:
            saved.save("pedigree_changes_by_problem", by)
            sec.table(html.table(by))
        sec.table(html.table(changes, collapse_after=COLLAPSE_AFTER,
                             summary=f"Show all {len(changes)} changes"))


def _diagnostics_section(sec: Section, inputs: ResultInputs, checks: dict[str, Any], saved: _Tables,
                         store: FigureStore) -> list[str]:
    summary, detail, sources = tables.diagnostics(inputs, checks)
    saved.save("diagnostics_summary", summary)
    saved.save("diagnostics_parameters", detail)
    failed = summary.loc[~summary["passed"].astype(bool), "population"].tolist()
    sec.text(f"Checks: R-hat ≤ {checks['max_rhat']}, bulk and tail ESS ≥ {checks['min_ess']}, "
             f"divergences ≤ {checks['max_divergences']}. Highlighted cells miss a check.")
    if failed:
        sec.note("Fits that miss a check: " + ", ".join(failed) + ". Their estimates are not reliable.")
    else:
        sec.text("Every fit met every check.")
    sec.table(html.table(summary, misses=tables.summary_misses(summary, checks), digits={"max_r_hat": 4}))
    no_div = summary.loc[summary["divergences"].isna(), "population"].tolist()
    if no_div:
        sec.note("Divergences were not recorded for " + ", ".join(no_div) + ", so those fits cannot pass.")
    sec.heading("Per parameter")
    for pop, src in sources.items():
        sec.note(f"{pop}: R-hat and ESS {src}.")
    missed = detail[detail["miss"] != ""].reset_index(drop=True)
    if len(missed):
        sec.text(f"{len(missed)} parameter value{'s' if len(missed) != 1 else ''} miss a check:")
        sec.table(html.table(missed, misses=tables.detail_misses(missed, checks), digits={"r_hat": 4}))
    else:
        sec.text("Every parameter meets the R-hat and ESS checks.")
    # every parameter, those that miss a check first (nothing left out)
    order = np.argsort((detail["miss"] == "").to_numpy(), kind="stable")
    shown = detail.iloc[order].reset_index(drop=True)
    sec.table(html.table(shown, misses=tables.detail_misses(shown, checks), digits={"r_hat": 4},
                         collapse_after=COLLAPSE_AFTER,
                         summary=f"Show all {len(shown)} parameters ({len(missed)} missing a check, listed first)"))
    sec.heading("Rank plots of the elements of G")
    sec.note("Each chain's draws ranked among all chains: with good mixing every line is flat at the "
             f"dashed level. Elements are shown worst R-hat first, at most {MAX_RANK_PANELS} per population.")
    for pop, fit in inputs.fits.items():
        elements = tables.element_draws(fit, "G")
        rhat = detail[detail["population"] == pop].set_index("parameter")["r_hat"]
        order = sorted(elements, key=lambda k: -float(rhat.get(k, 0.0)) if np.isfinite(rhat.get(k, 0.0)) else -np.inf)
        chosen = {k: elements[k] for k in order[:MAX_RANK_PANELS]}
        sec.figure(store.add(f"rank_{pop}", rank_plots_figure(chosen, pop),
                             f"Rank plots, {pop}",
                             f"Rank plots of the G elements of population {pop}, one line per chain."))
    return failed


def _estimates_section(sec: Section, inputs: ResultInputs, traits: list[str], units: dict[str, str],
                       mass: float, saved: _Tables, store: FigureStore) -> None:
    est = tables.estimates(inputs, mass)
    saved.save("estimates", est)
    pops = inputs.populations
    unit = covariance_unit(traits, units)
    sec.text(f"Posterior median with its {mass:.0%} HPD interval in brackets. G, R and P are in original "
             f"units ({unit}); h2 and r_G are unitless. All values, with means and SDs, are in "
             "tables/estimates.csv.")
    if all("rg" in f.idata.posterior and "h2" in f.idata.posterior for f in inputs.fits.values()):
        correlation_figure(sec, inputs, traits, store)
    if {"h2", "rg"} & set(est["quantity"]):
        sec.figure(store.add("heritability_correlation", heritability_figure(est, pops, traits),
                             "Heritabilities and genetic correlations",
                             f"Posterior median and {mass:.0%} HPD interval of each heritability and "
                             "genetic correlation, per population."))
    for pop in pops:
        sec.heading(f"{pop}")
        row = []
        for quantity, label in (("G", "G, additive genetic (co)variances"), ("R", "R, residual (co)variances"),
                                ("P", "P, phenotypic (co)variances"), ("h2", "heritabilities"),
                                ("rg", "genetic correlations")):
            if not ((est["population"] == pop) & (est["quantity"] == quantity)).any():
                continue
            frame = tables.estimate_matrix(est, pop, quantity, traits)
            frame.index.name = ""
            row.append(html.table(frame, index=True, caption=label))
        sec.row(row)


def _comparisons_section(sec: Section, inputs: ResultInputs, pops: list[str], config: dict[str, Any],
                         saved: _Tables, store: FigureStore, ctx=None, draws=None) -> bool:
    mass = config["compare"]["interval_mass"]
    scale = config["compare"]["scale"]
    extras = inputs.compare_extras
    traits = next(iter(inputs.fits.values())).traits
    refit = (extras.get("summary") or {}).get("refit_null")
    if inputs.null_summary is not None:
        sec.heading("Breeding-value null (descriptive)")
        sec.table(html.key_values(tables.record_items(inputs.null_summary)))
    elif not inputs.null_present and not refit:
        sec.note("No null was found (null/refits/ or null/null_G.nc): the comparisons below have no "
                 "reference for estimation noise. Run 'ped2g null-refit' for every population and "
                 "'ped2g compare --refits' to add one.")
    if not inputs.compare:
        sec.note("No comparison tables were found (compare/*.csv): run 'ped2g compare' to add them.")
        return False
    if refit:
        _refit_note(sec, refit)
    if ctx is not None:
        difference_blocks(sec, inputs, ctx, draws, saved, store)
    if extras.get("summary"):
        sec.heading("Comparison settings")
        sec.table(html.key_values(tables.record_items(extras["summary"])))
    checks = extras.get("draw_checks")
    if checks is not None and not checks.empty:
        saved.save("compare_draw_checks", checks)
        sec.note("Draws whose G is not positive definite are left out of the statistics they enter "
                 "(never repaired):")
        bad = pd.DataFrame(False, index=checks.index, columns=checks.columns)
        for col in checks.columns:
            if col.startswith("n_not"):
                bad[col] = pd.to_numeric(checks[col], errors="coerce").fillna(0) > 0
        sec.table(html.table(checks, misses=bad))
    if refit:
        sec.text(f"Each statistic's posterior median and {mass:.0%} HPD interval (G matrices on the {scale} "
                 "scale); the tested value (the posterior mean, or for one population its distance from the "
                 "mean over populations), what estimation noise alone gives for it under a shared G, its "
                 "p-value and Holm-adjusted p-value; highlighted rows are the differences the reading rule "
                 "supports.")
    else:
        sec.text(f"Observed statistics (blue) against the same statistics on the null G's (grey), each as "
                 f"posterior median and {mass:.0%} HPD interval; G matrices on the {scale} scale. "
                 "P(observed > null) is the paired posterior probability that the observed value exceeds "
                 "the null; highlighted rows are those whose intervals do not overlap (a strict criterion, "
                 "see Cautions). This breeding-value null is descriptive: it has no error of estimating G, "
                 "so it is not a test.")
    loadings = extras.get("loadings")
    raw = read_compare_as_written(inputs.root)
    has_null_cols = False
    for method, frame in inputs.compare.items():
        sec.heading(METHOD_TITLES.get(method, method))
        if method in METHOD_NOTES:
            sec.text(METHOD_NOTES[method])
        display = tables.compare_display(frame)
        method_null = bool("null_estimate" in display and display["null_estimate"].notna().any())
        has_null_cols |= method_null
        as_written = raw.get(method, frame)
        saved.save(f"compare_{method}", tables.drop_empty(as_written))
        if "description" in frame:
            described = frame.drop_duplicates("statistic")[["statistic", "description"]].dropna()
            if len(described):
                sec.items([f"{r.statistic}: {r.description}" for r in described.itertuples()])
        if "axis_meaning" in as_written and as_written["axis_meaning"].notna().any():
            meanings = as_written["axis_meaning"].dropna().unique()
            sec.note("axis and axis2: " + "; ".join(map(str, meanings)) + ".")
        shown = tables.compare_shown(as_written)
        marks = pd.DataFrame(False, index=shown.index, columns=shown.columns)
        if "supported" in shown:
            marks["supported"] = shown["supported"].astype(str).str.lower().isin(["true", "1", "1.0"])
        elif "hpd_overlap" in shown:
            marks["hpd_overlap"] = shown["hpd_overlap"].astype(str).str.lower().isin(["false", "0", "0.0"])
        sec.table(html.table(shown, misses=marks, collapse_after=COLLAPSE_AFTER,
                             summary=f"Show the {len(shown)} rows of compare/{method}.csv"))
        forest, matrices, too_long = {}, {}, []
        for statistic, part in frame.groupby("statistic", sort=False):
            part = part.reset_index(drop=True)
            no_axis = "axis" not in part or part["axis"].isna().all()
            if "population2" in part and part["population2"].notna().all() and no_axis and len(pops) > 2:
                matrices[str(statistic)] = part
            if len(part) <= MAX_FOREST_ROWS:
                forest[str(statistic)] = part
            else:
                too_long.append(str(statistic))
        title = METHOD_TITLES.get(method, method)
        if forest:
            banded = any(np.isfinite(refit_band(part)[0]).any() for part in forest.values())
            caption = (f"Observed statistics (blue), posterior median and {mass:.0%} HPD interval"
                       + ("; grey points: the breeding-value null's" if method_null else "")
                       + ("; grey bands: the range (2.5% to 97.5% of the replicates) of the posterior mean "
                          "when every population shares one G (the refitting null), drawn for the "
                          "statistics tested on their own scale" if banded else "") + ".")
            sec.figure(store.add(f"compare_{method}", comparison_figure(forest, title, f"G on the {scale} scale"),
                                 title, caption))
        for statistic in too_long:
            sec.note(f"{statistic} has too many rows to plot; see tables/compare_{method}.csv.")
        _density_figure(sec, method, draws, store)
        _loadings_figures(sec, method, loadings, traits, store)
    references = extras.get("references")
    if references is not None and not references.empty:
        saved.save("compare_references", references)
        sec.heading("Reference values")
        sec.note("Fixed settings and random-direction reference values the comparisons used.")
        sec.table(html.table(tables.drop_empty(references), collapse_after=COLLAPSE_AFTER,
                             summary=f"Show the {len(references)} reference values"))
    if loadings is not None and not loadings.empty:
        saved.save("compare_loadings", loadings)
    return bool(has_null_cols)


#: Statistics of the whole set whose full posterior is drawn against the null (from
#: compare/draws.nc): method -> (statistic, what it is).
DENSITY_PLOTS = {"subspace": ("eigenvalue", "eigenvalue of H"),
                 "tensor": ("variance", "variance along the eigentensor")}
MAX_DENSITY_PANELS = 8


def _density_figure(sec: Section, method: str, draws, store: FigureStore) -> None:
    if draws is None or method not in DENSITY_PLOTS:
        return
    statistic, label = DENSITY_PLOTS[method]
    name = f"{method}_{statistic}"
    if name not in draws or f"null_{name}" not in draws:
        return
    obs, nul = draws[name], draws[f"null_{name}"]
    others = [d for d in obs.dims if d != "draw"]
    if len(others) != 1 or obs.ndim != 2:
        return
    dim = others[0]
    panels_obs, panels_null = {}, {}
    for k in range(min(obs.sizes[dim], MAX_DENSITY_PANELS)):
        key = f"{label} #{k + 1}"
        panels_obs[key] = obs.isel({dim: k}).values
        panels_null[key] = nul.isel({dim: k}).values
    title = f"{METHOD_TITLES.get(method, method)}: posterior draws against the null"
    sec.figure(store.add(f"compare_{method}_draws", null_density_figure(panels_obs, panels_null, title, label),
                         title, "Histograms of every posterior draw of the statistic (blue) and of its "
                         "randomisation-null draws (grey), from compare/draws.nc."))


#: Which loadings (compare/loadings.csv ``reference``) go with which method, and how to plot them.
LOADING_PLOTS = {
    "subspace": [("subspace_axis", "axis", "Reference axes of H: trait loadings")],
    "tensor": [("eigentensor_vector", "axis2", "Eigenvectors of the leading eigentensor: trait loadings")],
    "gmax": [("gmax_posterior_mean", "population", "g_max of the posterior-mean G: trait loadings"),
             ("divergence_posterior_mean", None, "Divergence axis of the population means: trait loadings")],
}


def _loadings_figures(sec: Section, method: str, loadings: pd.DataFrame | None, traits: list[str],
                      store: FigureStore) -> None:
    if loadings is None or loadings.empty or "reference" not in loadings:
        return
    if method == "tensor":
        part = loadings[loadings["reference"] == "eigentensor"]
        if len(part):
            sec.figure(store.add("loadings_eigentensors", eigentensor_figure(part, traits),
                                 "Eigentensors", "The leading eigentensors of the posterior-mean covariance "
                                 "tensor as trait x trait matrices: the pattern of (co)variances that "
                                 "differs most among populations."))
    for reference, group, title in LOADING_PLOTS.get(method, []):
        part = loadings[loadings["reference"] == reference].copy()
        if part.empty:
            continue
        if reference == "eigentensor_vector":
            first = sorted(part["axis"].dropna().unique(), key=float)[:1]
            part = part[part["axis"].isin(first)]
        if group is None:
            part["component"] = "divergence"
            group = "component"
        sec.figure(store.add(f"loadings_{reference}", loadings_figure(part, traits, group, title),
                             title, f"{title} (compare/loadings.csv, reference {reference})."))


def _sample_sizes(inputs: ResultInputs, pheno, traits: list[str]) -> list[dict[str, Any]]:
    """Records, complete records, missing values and pedigree animals per population."""
    counts = tables.phenotype_counts(pheno, inputs.populations, traits)
    ped = tables.pedigree_by_population(inputs)
    out = []
    for pop in inputs.populations:
        row: dict[str, Any] = {"population": pop}
        if counts is not None:
            c = counts[counts["population"] == pop].iloc[0]
            row["records"] = int(c["records"])
            row["complete"] = int(c["complete_records"])
            row["missing"] = int(sum(c["records"] - c[f"{t}_n"] for t in traits))
        if ped is not None and (ped["population"] == pop).any():
            row["animals"] = int(ped.loc[ped["population"] == pop, "animals"].iloc[0])
        out.append(row)
    return out


def _refit_note(sec: Section, refit: dict[str, Any]) -> None:
    """How the refitting null was made and how well its short refits estimate (the findings
    themselves are at the top of the page)."""
    sec.note(f"The refitting null: {refit['replicates']} simulated studies in which every population "
             f"shares one G ({shared_G_text(refit)}), each refitted like the data "
             f"({refit['chains']} chain(s) of {refit['warmup']} + {refit['draws']} iterations). The "
             f"estimate compared is each statistic's posterior mean; its Monte Carlo error is "
             f"{_share(refit.get('mcse_over_null_sd_median'))} of the null's spread (median over "
             f"statistics). Short refit chains are judged by that error, not by the fits' checks: the "
             f"largest split R-hat over G had median {refit.get('refit_rhat_max_median', float('nan')):.3f} "
             f"and exceeded 1.05 in {refit.get('refits_over_rhat_1.05', 'an unknown number of')} of "
             f"{refit['refits']} refits.")


def _share(x: Any) -> str:
    return "unknown" if x is None else f"{100 * float(x):.0f}%"


def _provenance_section(sec: Section, config: dict[str, Any], config_path: Path | None,
                        inputs: ResultInputs, input_files: list[Path], versions: dict[str, str],
                        saved: _Tables, argv: list[str] | None) -> dict[str, Any]:
    context = run_context(argv)
    sec.heading("This report")
    sec.table(html.key_values(context))
    sec.heading("Config")
    sec.note("The config as used, with every default filled in, one setting per row (the same "
             "config is in provenance.json).")
    items = tables.config_items(config)
    saved.save("config_settings", pd.DataFrame(items, columns=["setting", "value"]))
    sec.table(html.key_values(items))
    sec.heading("Input files")
    files = [p for p in [config_path, *input_files] if p is not None]
    in_sums = checksums(files)
    saved.save("checksums_inputs", pd.DataFrame(in_sums))
    sec.table(html.table(pd.DataFrame(in_sums), collapse_after=COLLAPSE_AFTER))
    sec.heading("Stage outputs read")
    out_sums = checksums(inputs.files_read, relative_to=inputs.root)
    saved.save("checksums_results", pd.DataFrame(out_sums))
    sec.table(html.table(pd.DataFrame(out_sums), collapse_after=COLLAPSE_AFTER))
    sec.heading("Package versions")
    vt = pd.DataFrame(list(versions.items()), columns=["package", "version"])
    saved.save("package_versions", vt)
    sec.table(html.table(vt, collapse_after=COLLAPSE_AFTER))
    records: dict[str, dict[str, Any] | None] = {"pedigree": inputs.pedigree_summary,
                                                "null": inputs.null_summary,
                                                "compare": inputs.compare_extras.get("summary")}
    for pop, fit in inputs.fits.items():
        records[f"fit {pop}"] = fit.diagnostics
    times, seeds = stage_records(records)
    sec.heading("Seeds")
    seed_rows = [{"stage": "config", "record": "sampling.seed", "value": config["sampling"]["seed"]}] + seeds
    sec.note("Every random stream of the run is derived from the config's one seed (named streams per "
             "stage and population), so the same config and seed give the same numbers.")
    sec.table(html.table(pd.DataFrame(seed_rows)))
    sec.heading("Run times")
    if times:
        sec.table(html.table(pd.DataFrame(times)))
    else:
        sec.note("The stages recorded no run times.")
    return {"context": context, "inputs": in_sums, "results": out_sums, "versions": versions,
            "seeds": seed_rows, "run_times": times, "config": json.loads(json.dumps(config, default=str))}


__all__ = ["build_report", "ReportResult", "SECTION_ORDER"]
