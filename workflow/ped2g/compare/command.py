"""``ped2g compare``: every comparison method on every posterior draw, observed and null."""

from __future__ import annotations

import argparse
import time
from pathlib import Path

from ..cli_options import add_config_and_fits

HELP = "compare the populations' G matrices on every posterior draw (and on the null's draws)"

DESCRIPTION = """\
Runs random skewers, Krzanowski's common subspace, the genetic covariance tensor, g_max and its
angle to the divergence of population means, the evolvability family, the effective number of
dimensions and the Riemannian distance on every posterior draw of the populations' G matrices,
on the scale set by compare.scale (original, variance or mean). With --null the same statistics
are computed on the null's G draws, with the same skewers and reference axes. Writes one tidy CSV
per method (posterior mean, median, HPD and equal-tailed intervals at compare.interval_mass, the
same for the null, and the paired probability that the observed statistic exceeds the null one;
with --refits, each row's calibrated p-value against the refitting null, Holm-adjusted within its
family of tests, and the reading rule's verdict),
loadings.csv and references.csv (the fixed axes and random-direction reference values),
draw_checks.csv (draws left out because G was not positive definite), draws.nc (every per-draw
statistic) and summary.json.

Assumptions and cautions: each G is a posterior draw of an animal model whose assumptions (an
additive infinitesimal model, a correct pedigree, the fixed and random effects given) carry over
into every comparison. Draws whose G is not positive definite are left out, never repaired, and
counted. Random-direction references say only whether responses are more aligned than random
directions; whether populations differ is judged against the null."""

CAUTIONS = [
    "Every comparison inherits the animal model's assumptions: additive infinitesimal inheritance, "
    "a correct pedigree, and the fixed and random effects in the config; G of populations fitted "
    "with different designs or sample sizes differ in precision, which the intervals show but "
    "point estimates hide.",
    "Draws whose G is not positive definite are left out of every statistic they enter (counted in "
    "draw_checks.csv), never repaired.",
    "Random-direction references (references.csv) only say whether responses or axes are more "
    "aligned than random directions; almost any two biological G matrices pass them. Whether G "
    "matrices differ is judged against the randomisation null.",
    "Eigenvalues of H and of the covariance tensor are sorted draw by draw; variances along the "
    "fixed reference axes (subspace projection, tensor variance) are the ones matched across draws.",
    "Non-overlap of observed and null HPD intervals is a much stricter criterion than a test at "
    "level 1 - mass; the paired probability p_obs_gt_null is reported beside it.",
    "Mean-standardised comparisons treat trait means as known per draw and need ratio-scale traits; "
    "variance-standardised comparisons mix differences in G with differences in phenotypic variance.",
    "The null is standardised by the pooled scale of the observed draw it came from (the mean "
    "phenotypic variance or the mean of the means across populations), because its dummy "
    "populations mix animals of every population.",
]

DEFAULT_MEMORY_MB = 512.0


def add_arguments(parser: argparse.ArgumentParser) -> None:
    add_config_and_fits(parser)
    parser.add_argument("--null", metavar="FILE", default=None,
                        help="null_G.nc written by 'ped2g null' (or its folder); without it the null "
                             "columns stay empty")
    parser.add_argument("--refits", nargs="+", metavar="FILE", default=None,
                        help="the refitting null's files written by 'ped2g null-refit' (or folders holding "
                             "them): adds a calibrated p-value to every row that compares populations")
    parser.add_argument("--out", required=True, metavar="DIR", help="folder to write the tables into")
    parser.add_argument("--memory", type=float, default=DEFAULT_MEMORY_MB, metavar="MB",
                        help="memory budget for one chunk of draws, in megabytes")


def run(args: argparse.Namespace) -> int:
    from ..config import load_config
    from ..errors import UserError
    from ..io import get_logger
    from ..contracts.compare_tables import check_tables
    from ..contracts.fit_folder import load_fit_set
    from .pipeline import compare, write_outputs

    log = get_logger("compare")
    start = time.perf_counter()
    if not args.memory > 0:
        raise UserError(f"--memory must be a positive number of megabytes, got {args.memory}")
    config = load_config(args.config)
    fits = load_fit_set(args.fits, max_draws=config["compare"]["max_draws"])
    log.info("read %d fits (%s), %d draws each, traits %s", len(fits.populations),
             ", ".join(fits.populations), fits.G.shape[0], ", ".join(fits.traits))
    null = None
    if args.null is not None:
        from ..contracts.breeding_value_null import read_null

        null = read_null(args.null)
        log.info("read the null %s: %d draws (estimator %s)", args.null, null.G.shape[0],
                 null.attrs.get("estimator", "unknown"))
    refits = None
    if args.refits:
        from ..contracts.refit_null import read_refits

        refits = read_refits(args.refits, fits.populations, fits.traits)
        log.info("read the refitting null: %d replicates of %d populations, %d draws each",
                 len(refits.replicates), len(refits.populations), refits.G.shape[1])
    result = compare(fits, null, config, budget_bytes=args.memory * 1e6, log=log,
                     null_path=None if args.null is None else Path(args.null), refits=refits)
    check_tables(result.tables)
    write_outputs(result, args.out, CAUTIONS)
    log.info("wrote %s to %s in %.1f s", ", ".join(f"{m}.csv" for m in result.tables), args.out,
             time.perf_counter() - start)
    return 0
