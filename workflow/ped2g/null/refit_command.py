"""``ped2g null-refit``: simulate one population's records under the shared G and refit them."""

from __future__ import annotations

import argparse
import time
from pathlib import Path

from ..cli_options import add_config_and_fits

HELP = "refitting null: simulate a population's records under one shared G and refit them (a chunk of replicates)"

DESCRIPTION = """\
Under the hypothesis that every population shares one G (the mean of the fits' posterior-mean G
matrices), simulate replicate data sets on the design of --population (its pedigree, records,
missing cells, fixed effects, residual and extra random-effect covariances from its own fit) and
refit each with the engine, model and priors of its observed fit and the shorter chains of
compare.null_model.refit. Replicates --first to --first + --count - 1; replicate r of every
population makes one simulated study, so run the same replicates for every population. Writes one
netCDF file (--out) with the refits' G, P and mean draws and their convergence figures; the
compare stage reads these files (--refits) to give each statistic a calibrated p-value.

The shared G is corrected for the fit's pull toward the prior: first run --pilot for every
population (compare.null_model.pilot_replicates refits each under the uncorrected mean, written to
--out), then pass those files to every replicate job with --pilots. With pilot_replicates 0 the
uncorrected mean is used and --pilots is not needed."""


def add_arguments(parser: argparse.ArgumentParser) -> None:
    add_config_and_fits(parser)
    parser.add_argument("--population", required=True, help="the population whose design is simulated")
    parser.add_argument("--pedigree", default=None,
                        help="clean pedigree: the pedigree stage's folder or its pedigree.csv "
                             "(default: clean the config's data.pedigree here)")
    parser.add_argument("--first", type=int, default=0, help="first replicate number (default 0)")
    parser.add_argument("--count", type=int, default=None,
                        help="number of replicates (default: compare.null_model.replicates, or with null "
                             "the fewest the reading rule needs)")
    parser.add_argument("--pilot", action="store_true",
                        help="run this population's pilot refits for the shared G's bias correction "
                             "(--count defaults to compare.null_model.pilot_replicates)")
    parser.add_argument("--pilots", nargs="+", default=None, metavar="FILE",
                        help="every population's pilot files (or their folder), from --pilot")
    parser.add_argument("--out", required=True, metavar="FILE", help="netCDF file to write")


def fit_engine(fit_dir: Path, population: str, on_failure: str = "stop", log=None) -> str:
    """The engine the observed fit ran, after checking that the fit passed its checks (a fit kept
    under ``checks.on_failure: flag`` is used with a warning)."""
    from ..contracts.fit_folder import DIAGNOSTICS_FILE, read_diagnostics
    from ..errors import UserError

    path = Path(fit_dir) / DIAGNOSTICS_FILE
    diag = read_diagnostics(fit_dir)
    if diag is None:
        raise UserError(f"fit of population '{population}': {path} is missing or unreadable; rerun 'ped2g fit'")
    if not diag.get("checks", {}).get("passed", False):
        if on_failure == "flag":
            if log is not None:
                log.warning("population %s missed its fit checks (kept under checks.on_failure: flag); "
                            "its refits and p-values are only as sound as that fit", population)
            return str(diag["engine"])
        raise UserError(f"population '{population}' missed its fit checks ({path}); the refitting null "
                        "needs fits that pass them: rerun that fit with longer chains (sampling.draws), "
                        "or set compare.null_model.kind: breeding_values (descriptive only)")
    return str(diag["engine"])


def run(args: argparse.Namespace) -> int:
    import numpy as np

    from .. import __version__
    from ..compare.calibrated import planned_replicates
    from ..config import load_config
    from ..errors import UserError
    from ..fit.command import load_pedigree
    from ..fit.prepare import prepare
    from ..io import get_logger, read_table
    from ..contracts.fit_folder import load_fit, posterior_means
    from .refit import bias_corrected_G, design_parameters, run_replicates, shared_G
    from ..contracts.refit_null import PILOT_KIND, REFIT_KIND, read_pilots, write_chunk

    log = get_logger("null_refit")
    start = time.perf_counter()
    config = load_config(args.config)
    null_cfg = config["compare"]["null_model"]
    pilots = int(null_cfg["pilot_replicates"])
    if args.pilot and args.pilots:
        raise UserError("--pilot runs the pilot refits and --pilots reads them: give one of the two")
    if args.pilot and pilots == 0 and args.count is None:
        raise UserError("compare.null_model.pilot_replicates is 0, so there are no pilot refits to run "
                        "(give --count, or set pilot_replicates above 0)")
    if not args.pilot and pilots > 0 and not args.pilots:
        raise UserError(f"compare.null_model.pilot_replicates is {pilots}: run 'ped2g null-refit --pilot' for "
                        "every population first and pass their files with --pilots (or set it to 0)")
    fits = {}
    for d in args.fits:
        fit = load_fit(d)
        fits[fit.population] = fit
    count = args.count
    if count is None:
        count = pilots if args.pilot else planned_replicates(
            len(fits), len(config["traits"]), float(config["compare"]["alpha"]), null_cfg["replicates"])
    if args.first < 0 or count < 1:
        raise UserError(f"--first must be 0 or more and --count 1 or more, got {args.first} and {count}")
    population = str(args.population)
    if population not in fits:
        raise UserError(f"population '{population}' has no fit among --fits ({', '.join(fits)})")
    engines = {p: fit_engine(f.path, p, config["checks"]["on_failure"], log) for p, f in fits.items()}
    G_bar = shared_G([f.G.mean(axis=0) for f in fits.values()])
    G, n_pilot = G_bar, 0
    if args.pilots:
        means = read_pilots(args.pilots, list(fits), list(config["traits"]), G_bar)
        G, n_pilot = bias_corrected_G(G_bar, means), len(means) // len(fits)
        log.info("shared G under the null: the mean of the posterior-mean G of %s, corrected for the fit's "
                 "pull toward the prior measured by %d pilot refits (trace %.4g before, %.4g after)",
                 ", ".join(fits), len(means), np.trace(G_bar), np.trace(G))
    else:
        log.info("shared G under the null: the mean of the posterior-mean G of %s%s", ", ".join(fits),
                 " (the pilots simulate under it)" if args.pilot else "")

    phen_path = config["data"]["phenotypes"]
    phenotypes = read_table(phen_path, "phenotype table")
    pedigree = load_pedigree(args.pedigree, config)
    data = prepare(config, phenotypes, pedigree, population, source=str(phen_path), logger=log)
    params = design_parameters(data, posterior_means(fits[population].path))
    replicates = list(range(args.first, args.first + count))
    log.info("population %s: refitting %s %d-%d (%d records, %d missing cells, engine %s, "
             "%d chain(s) x (%d + %d))", population, "pilot refits" if args.pilot else "replicates",
             replicates[0], replicates[-1], data.n_records,
             int(data.missing.sum()), engines[population], null_cfg["refit"]["chains"],
             null_cfg["refit"]["warmup"], null_cfg["refit"]["draws"])
    results = run_replicates(data, engines[population], config, G, params, replicates, log,
                             stream="null_pilot" if args.pilot else "null_refit")
    attrs = {"engine": engines[population], "shared_G": G.ravel().tolist(),
             "shared_G_uncorrected": G_bar.ravel().tolist(),
             "pilot_replicates": n_pilot,
             "seed": int(config["sampling"]["seed"]), "chains": int(null_cfg["refit"]["chains"]),
             "warmup": int(null_cfg["refit"]["warmup"]), "draws": int(null_cfg["refit"]["draws"]),
             "ped2g_version": __version__}
    write_chunk(args.out, population, data.traits, replicates, results, attrs,
                kind=PILOT_KIND if args.pilot else REFIT_KIND)
    log.info("wrote %s (%d %s) in %.1f s", args.out, len(results), "pilot refits" if args.pilot else "replicates",
             time.perf_counter() - start)
    return 0
