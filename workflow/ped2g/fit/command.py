"""``ped2g fit``: fit the multivariate animal model of one population and write its draws."""

from __future__ import annotations

import argparse
import time
from pathlib import Path

HELP = "fit the Bayesian multivariate animal model of one population (posterior draws of G)"
DESCRIPTION = """\
Fit y = Xb + Za + (extra random effects) + e on all traits jointly for one population, with
a ~ MVN(0, G (x) A) from the pedigree and e ~ MVN(0, R) per record, by NUTS in PyMC. Reads the
config, the clean pedigree (--pedigree: the pedigree stage's folder or its pedigree.csv; without
it the raw data.pedigree table is cleaned here) and the phenotype table (data.phenotypes); keeps
the population's records and the animals informative about them; samples on a standardised
scale and writes, in original units, posterior.nc (G, R, P, h2, rg, mean, fixed effects, extra
covariances), parameters.csv, breeding_values.csv, pedigree_used.csv and diagnostics.json to
--out. Exit status 1 when the fit misses the convergence checks (config key checks)."""

def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--config", required=True, help="the study's YAML config file")
    parser.add_argument("--population", required=True, help="the population to fit (a value of the population column)")
    parser.add_argument("--pedigree", default=None,
                        help="clean pedigree: the pedigree stage's output folder or its pedigree.csv "
                             "(default: clean the config's data.pedigree here)")
    parser.add_argument("--out", required=True, help="output folder, e.g. results/fits/POPULATION")
    parser.add_argument("--no-progress", action="store_true", help="hide the sampler's progress bar")


def load_pedigree(path: str | None, config: dict):
    """The clean pedigree from --pedigree, or the config's raw table cleaned here."""
    from ..errors import UserError
    from ..pedigree.core import Pedigree

    if path is None:
        from ..pedigree.clean import read_raw_pedigree

        cols = config["data"]["columns"]
        ped, _ = read_raw_pedigree(config["data"]["pedigree"], id_col=cols["id"], sire_col=cols["sire"],
                                   dam_col=cols["dam"], missing=config["data"]["missing_parent"],
                                   hermaphrodite=config["data"]["hermaphrodite"])
        return ped
    p = Path(path)
    if p.is_dir():
        p = p / "pedigree.csv"
    if not p.is_file():
        raise UserError(f"clean pedigree not found: {p}; run 'ped2g pedigree' first or leave out --pedigree")
    try:
        return Pedigree.read_csv(p)
    except (KeyError, ValueError) as err:
        raise UserError(f"clean pedigree {p} is not a pedigree.csv written by 'ped2g pedigree' ({err}); "
                        f"rerun 'ped2g pedigree'") from None


def run(args: argparse.Namespace) -> int:
    from ..config import load_config
    from ..errors import UserError
    from ..io import file_sha256, get_logger, read_table
    from .pipeline import fit, write_outputs

    start = time.perf_counter()
    log = get_logger("fit")
    config = load_config(args.config)
    population = str(args.population)
    if config["populations"] and population not in config["populations"]:
        raise UserError(f"population '{population}' is not in config key 'populations' "
                        f"({', '.join(config['populations'])}); add it there or pick one of those")
    phen_path = config["data"]["phenotypes"]
    phenotypes = read_table(phen_path, "phenotype table")
    log.info("read %d records from %s", len(phenotypes), phen_path)
    pedigree = load_pedigree(args.pedigree, config)
    inputs = {"config": str(args.config), "phenotypes": str(phen_path),
              "pedigree": str(args.pedigree or config["data"]["pedigree"])}
    hashes = {}
    for key, path in inputs.items():
        p = Path(path)
        p = p / "pedigree.csv" if p.is_dir() else p
        hashes[key] = file_sha256(p) if p.is_file() else None
    result = fit(config, phenotypes, pedigree, population, str(phen_path),
                 {"inputs": inputs, "input_sha256": hashes}, log=log, progress=not args.no_progress,
                 started=start)
    write_outputs(result, args.out, log)
    log.info("wrote %s", args.out)
    return 0
