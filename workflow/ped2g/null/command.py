"""``ped2g null``: the randomisation null of G matrices that share one G by construction."""

from __future__ import annotations

import argparse
import time
from pathlib import Path

from ..cli_options import add_config_and_fits

HELP = "build the randomisation null: G of dummy populations made by shuffling simulated animals"

DESCRIPTION = """\
For every retained posterior draw, simulate breeding values down each population's own pedigree
(pedigree_used.csv of its fit) with that draw's G, pool the phenotyped animals of all
populations, shuffle them into dummy populations of the original sizes, and estimate a null G
for each dummy population. The estimator is the config key compare.null_model.estimator:
'mendelian' (default; unbiased, from the Mendelian-sampling deviations) or 'sample' (sample
covariance of the breeding values, shrunk by relatedness). Writes null_G.nc (draw, population,
trait, trait2; original units) and summary.json to --out.

Assumptions and cautions: the simulated breeding values follow the infinitesimal model
(multivariate normal, additive, no selection) on the given pedigree; they carry no error from
predicting breeding values from phenotypes, which the observed posterior does carry, so the null
can be too narrow and flag differences too readily; under the null every dummy population
shares one G (a mixture of the observed ones)."""

CAUTIONS = [
    "Breeding values are simulated under the infinitesimal model (multivariate normal, purely "
    "additive, no selection or assortative mating) on the pedigrees as given; errors in the "
    "pedigree carry over into the null.",
    "The null G's contain no error from predicting breeding values from phenotypes, which the "
    "observed posterior G's do contain; the null can therefore be too narrow, so observed-versus-"
    "null differences may be flagged too readily (anti-conservative). Treat a flagged difference "
    "as a signal to examine, not as proof.",
    "In checks on simulated studies whose populations share one G (real fits, null and "
    "compare; benchmarks/null_calibration_fits.py), non-overlap of the observed and null HPD "
    "intervals flagged fewer than the nominal 5 % of statistics, but the paired criterion (the "
    "interval of observed - null excluding 0, or p_obs_gt_null near 0 or 1) flagged more, the "
    "Riemannian distances most often: read the paired figures as descriptive, not as a test.",
    "Under the null every dummy population shares one G (a mixture of the observed ones): the "
    "null says how different G's estimated from these pedigree structures and sample sizes look "
    "when there is no real difference.",
    "With the 'mendelian' estimator the relatedness of the animals affects neither the mean nor "
    "the spread of a null G: a dummy population of n animals varies like G estimated from n "
    "unrelated animals with known breeding values, which is less than real estimates vary - "
    "one more reason the null can be too narrow.",
    "With the 'sample' estimator the null G's are shrunk by relatedness by the factor c "
    "(c_pooled in this summary), so scale-sensitive statistics differ from the observed ones for "
    "that reason alone; use scale-free statistics with it.",
]

DEFAULT_CHUNK_MB = 1000


def add_arguments(parser: argparse.ArgumentParser) -> None:
    add_config_and_fits(parser)
    parser.add_argument("--out", required=True, metavar="DIR",
                        help="folder to write null_G.nc and summary.json into")
    parser.add_argument("--memory", type=float, default=DEFAULT_CHUNK_MB, metavar="MB",
                        help="memory budget for one chunk of draws, in megabytes")


def run(args: argparse.Namespace) -> int:

    from .. import __version__
    from ..config import load_config
    from ..errors import UserError
    from ..contracts.breeding_value_null import NULL_FILE, SUMMARY_FILE, write_null
    from ..contracts.fit_folder import load_fit_set
    from ..io import get_logger, output_dir, write_json
    from .estimators import (DEFAULT_ESTIMATOR, DEFAULT_REASON, ESTIMATOR_DESCRIPTION,
                             pooled_deflation, relatedness_deflation)
    from .pooled_breeding_values import check_draws
    from .breeding_value_null import build_null, chunk_size, pooled_members, read_pedigrees

    log = get_logger("null")
    start = time.perf_counter()
    if not args.memory > 0:
        raise UserError(f"--memory must be a positive number of megabytes, got {args.memory}")
    config = load_config(args.config)
    estimator = config["compare"]["null_model"]["estimator"]
    seed = int(config["sampling"]["seed"])
    fits = load_fit_set(args.fits, max_draws=config["compare"]["max_draws"])
    S, m, t = fits.G.shape[:3]
    log.info("read %d fits (%s), %d draws each, traits %s", m, ", ".join(fits.populations), S,
             ", ".join(fits.traits))

    check = check_draws(fits.G)
    if check.invalid.any():
        bad = [f"{p}: {int(n)}" for p, n in zip(fits.populations, check.invalid.sum(axis=0)) if n]
        raise UserError(f"G draws that are not covariance matrices (a clearly negative eigenvalue or "
                        f"non-finite entries) in {'; '.join(bad)} of {S} draws; the fits are damaged "
                        "or not from 'ped2g fit' - refit those populations")
    n_singular = check.singular.sum(axis=0)
    if n_singular.any():
        log.warning("positive semi-definite but singular G draws (simulated with the eigen square "
                    "root, not repaired): %s", ", ".join(f"{p}: {int(n)}" for p, n in
                                                        zip(fits.populations, n_singular)))

    peds = read_pedigrees(fits)
    members, shared = pooled_members(fits, peds, estimator)
    if shared:
        log.warning("%d phenotyped animals appear in more than one population's fit; each copy is "
                    "simulated and pooled separately", shared)
    sizes = [len(mem) for mem in members]
    few = [f"{p} ({n})" for p, n in zip(fits.populations, sizes) if n < t]
    if few:
        log.warning("fewer phenotyped animals than traits (%d) in %s: dummy populations of those "
                    "sizes get singular null G draws", t, ", ".join(few))
    chunk = chunk_size(peds, sizes, t, args.memory)
    log.info("simulating %d draws x %d populations (%s phenotyped animals pooled, %s in the "
             "pedigrees) in chunks of %d draws; estimator %s", S, m, "+".join(map(str, sizes)),
             "+".join(str(p.n) for p in peds), chunk, estimator)

    G_null = build_null(fits.G, peds, members, estimator, seed, fits.populations, chunk, progress=log)

    c_pop = {p: relatedness_deflation(ped, mem) for p, ped, mem in zip(fits.populations, peds, members)}
    c_pool = pooled_deflation(peds, members)
    seconds = time.perf_counter() - start
    attrs = {
        "estimator": estimator,
        "estimator_description": ESTIMATOR_DESCRIPTION[estimator],
        "default_estimator": DEFAULT_ESTIMATOR,
        "default_reason": DEFAULT_REASON,
        "seed": seed,
        "singular_draws": [int(n) for n in n_singular],
        "animals_pooled": sizes,
        "cautions": CAUTIONS,
    }
    summary = {
        "estimator": estimator,
        "estimator_description": ESTIMATOR_DESCRIPTION[estimator],
        "default_estimator": DEFAULT_ESTIMATOR,
        "default_reason": DEFAULT_REASON,
        "draws": S,
        "populations": fits.populations,
        "traits": fits.traits,
        "animals_pooled": dict(zip(fits.populations, sizes)),
        "animals_simulated": {p: int(ped.n) for p, ped in zip(fits.populations, peds)},
        "animals_in_several_fits": shared,
        "singular_draws": {p: int(n) for p, n in zip(fits.populations, n_singular)},
        "c_population": c_pop,
        "c_pooled": c_pool,
        "c_note": ("c = 1 + mean F - mean off-diagonal relationship: the expected ratio of the "
                   "sample covariance of breeding values to G. c_population is for each "
                   "population's own phenotyped animals, c_pooled for a dummy population drawn "
                   "at random from all of them (what the 'sample' estimator is shrunk by; the "
                   "'mendelian' estimator is not shrunk)"),
        "cautions": CAUTIONS,
        "seed": seed,
        "chunk_draws": chunk,
        "fits": [str(Path(f.path)) for f in fits.fits],
        "run_seconds": round(seconds, 3),
        "ped2g_version": __version__,
    }
    with output_dir(args.out) as tmp:
        write_null(tmp / NULL_FILE, G_null, fits.populations, fits.traits, fits.draw_index, attrs)
        write_json(tmp / SUMMARY_FILE, summary)
    log.info("wrote %s and summary.json to %s in %.1f s", NULL_FILE, args.out,
             time.perf_counter() - start)
    return 0
