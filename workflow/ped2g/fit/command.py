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

# Breeding-value summaries use at most this many evenly thinned draws (all with
# model.save_breeding_values).
BREEDING_VALUE_DRAWS = 400


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
    import pandas as pd  # noqa: F401  (imported here to keep --help instant)

    from ..config import load_config
    from ..contracts.fit_folder import check_fit_folder
    from ..errors import ChecksFailed, UserError
    from ..io import file_sha256, get_logger, output_dir, read_table, write_json
    from ..rng import generator
    from . import outputs, sample
    from .engine import choose
    from .marginal import missing_mode as marginal_missing_mode
    from .prepare import prepare

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
    data = prepare(config, phenotypes, pedigree, population, source=str(phen_path), logger=log)
    log.info("population %s: %d records of %d animals, pedigree of %d animals after pruning, %d missing trait values",
             population, data.n_records, int(data.phenotyped.sum()), data.pedigree.n, int(data.missing.sum()))
    engine_name, engine, reason = choose(data, config["model"]["engine"], config["model"])
    log.info("engine: %s (%s)", engine_name, reason)
    model = engine.build_model(data, config["model"])
    extra = engine.extra_steps(model, data) if hasattr(engine, "extra_steps") else []
    sampled = sample.run(model, config["sampling"], population, progress=not args.no_progress,
                         nutpie_options=getattr(engine, "NUTPIE_OPTIONS", None), extra_steps=extra,
                         numba_opt_level=getattr(engine, "NUMBA_OPT_LEVEL", None))
    info = {k: v for k, v in sampled.info.items() if k != "compiled"}
    if engine_name == "marginal":
        info["eigendecomposition_seconds"] = engine.rotation(data).seconds
    if extra:
        log.info("missing trait values drawn by a Gibbs step between NUTS transitions; sampler: PyMC "
                 "(nutpie has no Gibbs steps; sampling.sampler asked for %s)", info["requested_sampler"])
    log.info("compiled the model in %.1f s", info["compile_seconds"] or 0.0)
    log.info("sampled %d chains x %d draws in %.1f s (%d gradient evaluations, %d divergences)",
             info["chains"], info["draws"], info["sampling_seconds"], info["gradient_evaluations"],
             info["divergences"])
    post = outputs.build_posterior(data, sampled.idata)
    table = outputs.parameter_table(post, float(config["compare"]["interval_mass"]))
    checks = outputs.check_convergence(table, config["checks"], info["divergences"], info["chains"])

    save_all = bool(config["model"].get("save_breeding_values", False))
    rng = generator(int(config["sampling"]["seed"]), "fit", population, "breeding_values")
    bv_start = time.perf_counter()
    bv = engine.breeding_values(data, sampled.idata, rng, max_draws=None if save_all else BREEDING_VALUE_DRAWS)
    info["breeding_value_seconds"] = time.perf_counter() - bv_start
    log.info("breeding values of %d animals from %d draws in %.1f s", data.pedigree.n, bv.shape[0],
             info["breeding_value_seconds"])

    inputs = {"config": str(args.config), "phenotypes": str(phen_path),
              "pedigree": str(args.pedigree or config["data"]["pedigree"])}
    hashes = {}
    for key, path in inputs.items():
        p = Path(path)
        p = p / "pedigree.csv" if p.is_dir() else p
        hashes[key] = file_sha256(p) if p.is_file() else None
    diagnostics = {
        "population": population,
        "traits": data.traits,
        "engine": engine_name,
        "engine_reason": reason,
        "records": data.n_records,
        "phenotyped_animals": int(data.phenotyped.sum()),
        "pedigree_animals": data.pedigree.n,
        "missing_trait_values": int(data.missing.sum()),
        # how missing trait values were handled: none, gibbs or nuts (marginal), masked (latent)
        "missing_values": (marginal_missing_mode(data, config["model"]) if engine_name == "marginal"
                           else "masked" if data.missing.any() else "none"),
        "fixed_effects": data.x_names,
        "random_effects": [r.name for r in data.random],
        "preparation_notes": data.notes,
        "sampling": info,
        "checks": checks,
        "on_failure": config["checks"]["on_failure"],
        "wall_seconds": time.perf_counter() - start,
        "versions": outputs.versions(),
        "inputs": inputs,
        "input_sha256": hashes,
        "assumptions": outputs.ASSUMPTIONS,
    }
    stop = (not checks["passed"]) and config["checks"]["on_failure"] == "stop"
    out = Path(args.out)
    with output_dir(out) as tmp:
        table.to_csv(tmp / "parameters.csv", index=False, float_format="%.6g")
        write_json(tmp / "diagnostics.json", diagnostics)
        if not stop:
            outputs.write_posterior(tmp / "posterior.nc", post, sampled.idata)
            outputs.breeding_value_summary(data, bv).to_csv(tmp / "breeding_values.csv", index=False,
                                                            float_format="%.6g")
            outputs.pedigree_used(data).to_csv(tmp / "pedigree_used.csv", index=False, float_format="%.10g")
            if save_all:
                outputs.write_breeding_value_draws(tmp / "breeding_values.nc", data, bv)
        check_fit_folder(tmp, stopped=stop)
    if stop:
        # Leave nothing from an earlier run that would look like a finished fit.
        for name in ("posterior.nc", "breeding_values.csv", "breeding_values.nc", "pedigree_used.csv"):
            (out / name).unlink(missing_ok=True)
        raise ChecksFailed(outputs.failure_message(population, checks)
                           + f" (diagnostics.json and parameters.csv are in {out})")
    if not checks["passed"]:
        log.warning("checks missed but kept (checks.on_failure: flag): %s",
                    outputs.failure_message(population, checks, stopped=False))
    log.info("wrote %s", out)
    return 0
