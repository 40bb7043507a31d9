"""The fit stage without its command line: from one population's data to its fit folder.

:func:`fit` prepares the data, chooses the engine (:func:`ped2g.fit.engine.choose`), builds and
samples its model, summarises the draws in original units, checks convergence and draws the
breeding values; :func:`write_outputs` writes the fit folder through :func:`ped2g.io.output_dir`
and checks it against its contract (:func:`ped2g.contracts.fit_folder.check_fit_folder`), so a
failed run leaves nothing that looks finished. Engines are used only through their interface.
"""

from __future__ import annotations

import logging
import time
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import xarray as xr

from ..contracts import fit_folder
from ..errors import ChecksFailed
from ..rng import generator
from . import outputs, sample
from .data import FitData
from .engine import choose
from .prepare import prepare

#: Breeding-value summaries use at most this many evenly thinned draws (all with
#: model.save_breeding_values).
BREEDING_VALUE_DRAWS = 400


@dataclass
class FitResult:
    """Everything the fit stage writes for one population."""

    data: FitData
    posterior: xr.Dataset
    idata: Any
    parameters: pd.DataFrame
    breeding_values: np.ndarray
    diagnostics: dict[str, Any]
    save_all_breeding_values: bool

    @property
    def passed(self) -> bool:
        return bool(self.diagnostics["checks"]["passed"])


def fit(config: dict[str, Any], phenotypes: pd.DataFrame, pedigree, population: str, source: str,
        inputs: dict[str, Any], log: logging.Logger | None = None, progress: bool = True,
        started: float | None = None) -> FitResult:
    """Fit one population (``config``: the validated config; ``inputs``: what diagnostics.json
    records of the input files, ``{"inputs": ..., "input_sha256": ...}``; ``started``: the
    ``time.perf_counter()`` the stage's wall time counts from)."""
    log = log or logging.getLogger("ped2g.fit")
    start = time.perf_counter() if started is None else started
    data = prepare(config, phenotypes, pedigree, population, source=source, logger=log)
    log.info("population %s: %d records of %d animals, pedigree of %d animals after pruning, %d missing trait values",
             population, data.n_records, int(data.phenotyped.sum()), data.pedigree.n, int(data.missing.sum()))
    engine_name, engine, reason = choose(data, config["model"]["engine"], config["model"])
    log.info("engine: %s (%s)", engine_name, reason)
    built = engine.build(data, config["model"])
    sampled = sample.run(built.model, config["sampling"], population, progress=progress,
                         nutpie_options=built.nutpie_options, extra_steps=built.extra_steps,
                         numba_opt_level=built.numba_opt_level, log=log)
    info = {k: v for k, v in sampled.info.items() if k != "compiled"}
    info.update(built.timings)
    if built.extra_steps:
        log.info("missing trait values drawn by a Gibbs step between NUTS transitions; sampler: PyMC "
                 "(nutpie has no Gibbs steps; sampling.sampler asked for %s)", info["requested_sampler"])
    log.info("compiled the model in %.1f s", info["compile_seconds"] or 0.0)
    log.info("sampled %d chains x %d draws in %.1f s (%d gradient evaluations, %d divergences)",
             info["chains"], info["draws"], info["sampling_seconds"], info["gradient_evaluations"],
             info["divergences"])
    post = outputs.build_posterior(data, sampled.idata)
    table = outputs.parameter_table(post, float(config["compare"]["interval_mass"]))
    checks = outputs.check_convergence(table, config["checks"], info["divergences"], info["chains"])

    save_all = bool(config["model"]["save_breeding_values"])
    rng = generator(int(config["sampling"]["seed"]), "fit", population, "breeding_values")
    bv_start = time.perf_counter()
    bv = engine.breeding_values(data, sampled.idata, rng, max_draws=None if save_all else BREEDING_VALUE_DRAWS)
    info["breeding_value_seconds"] = time.perf_counter() - bv_start
    log.info("breeding values of %d animals from %d draws in %.1f s", data.pedigree.n, bv.shape[0],
             info["breeding_value_seconds"])
    diagnostics = {
        "population": population,
        "traits": data.traits,
        "engine": engine_name,
        "engine_reason": reason,
        "records": data.n_records,
        "phenotyped_animals": int(data.phenotyped.sum()),
        "pedigree_animals": data.pedigree.n,
        "missing_trait_values": int(data.missing.sum()),
        "missing_values": built.missing_values,
        "fixed_effects": data.x_names,
        "random_effects": [r.name for r in data.random],
        "preparation_notes": data.notes,
        "sampling": info,
        "checks": checks,
        "on_failure": config["checks"]["on_failure"],
        "wall_seconds": time.perf_counter() - start,
        "versions": outputs.versions(),
        **inputs,
        "assumptions": outputs.ASSUMPTIONS,
    }
    return FitResult(data=data, posterior=post, idata=sampled.idata, parameters=table, breeding_values=bv,
                     diagnostics=diagnostics, save_all_breeding_values=save_all)


def write_outputs(result: FitResult, out: str | Path, log: logging.Logger | None = None) -> None:
    """Write the fit folder ``out``. A fit that missed its checks under ``checks.on_failure: stop``
    keeps only parameters.csv and diagnostics.json and raises :class:`~ped2g.errors.ChecksFailed`."""
    from ..io import output_dir, write_json

    log = log or logging.getLogger("ped2g.fit")
    diagnostics, data = result.diagnostics, result.data
    population = diagnostics["population"]
    stop = (not result.passed) and diagnostics["on_failure"] == "stop"
    out = Path(out)
    with output_dir(out) as tmp:
        result.parameters.to_csv(tmp / fit_folder.PARAMETERS_FILE, index=False, float_format="%.6g")
        write_json(tmp / fit_folder.DIAGNOSTICS_FILE, diagnostics)
        if not stop:
            outputs.write_posterior(tmp / fit_folder.POSTERIOR_FILE, result.posterior, result.idata)
            outputs.breeding_value_summary(data, result.breeding_values).to_csv(
                tmp / fit_folder.BREEDING_VALUES_FILE, index=False, float_format="%.6g")
            outputs.pedigree_used(data).to_csv(tmp / fit_folder.PEDIGREE_USED_FILE, index=False,
                                               float_format="%.10g")
            if result.save_all_breeding_values:
                outputs.write_breeding_value_draws(tmp / fit_folder.BREEDING_VALUE_DRAWS_FILE, data,
                                                   result.breeding_values)
        fit_folder.check_fit_folder(tmp, stopped=stop)
    checks = diagnostics["checks"]
    if stop:
        # Leave nothing from an earlier run that would look like a finished fit.
        for name in (*fit_folder.FINISHED_FILES, fit_folder.BREEDING_VALUE_DRAWS_FILE):
            (out / name).unlink(missing_ok=True)
        raise ChecksFailed(outputs.failure_message(population, checks)
                           + f" (diagnostics.json and parameters.csv are in {out})")
    if not result.passed:
        log.warning("checks missed but kept (checks.on_failure: flag): %s",
                    outputs.failure_message(population, checks, stopped=False))
