"""Reading the other stages' outputs for the report: one function per input.

The fit folders and the compare folder are read through their contracts
(:mod:`ped2g.contracts.fit_folder`, :mod:`ped2g.contracts.compare_tables`), which refuse files whose
columns are not the ones the stages write. This module only knows where the folders are and
gives the comparison tables the report's names for their columns (:data:`REPORT_NAMES`).

Required inputs (a missing one is a :class:`~ped2g.errors.UserError`): the results folder and one
fit folder with ``posterior.nc`` per population. Everything else is optional: a missing file gives
``None`` and the report says so in its section.
"""

from __future__ import annotations

import json
import os
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from ..contracts import compare_tables, fit_folder
from ..contracts.breeding_value_null import NULL_FILE, SUMMARY_FILE as NULL_SUMMARY_FILE
from ..errors import UserError
from ..io import read_stage_csv

#: The report's names for the comparison tables' columns: the median is the point estimate and
#: the HPD interval the interval shown, for the observed statistic and the null alike.
REPORT_NAMES = {"median": "estimate", "hpd_lower": "lower", "hpd_upper": "upper",
                "null_median": "null_estimate", "null_hpd_lower": "null_lower",
                "null_hpd_upper": "null_upper", "hpd_overlap": "overlap"}
#: Columns of the pedigree stage's changes.csv.
CHANGE_COLUMNS = ("row", "id", "problem", "action")


def _read_json(path: Path, what: str) -> dict[str, Any] | None:
    if not path.is_file():
        return None
    try:
        with open(path, encoding="utf-8") as handle:
            data = json.load(handle)
    except (json.JSONDecodeError, UnicodeDecodeError) as err:
        raise UserError(f"{what} {path} is not valid JSON ({err}); rerun the stage that wrote it") from None
    if not isinstance(data, dict):
        raise UserError(f"{what} {path} should hold a JSON object; rerun the stage that wrote it")
    return data


# ---------------------------------------------------------------------------------------------
# Where things are
# ---------------------------------------------------------------------------------------------
def results_root(path: str | os.PathLike) -> Path:
    """The folder holding ``pedigree/``, ``fits/``, ``null/`` and ``compare/``.

    Accepts that folder itself or its parent (a project folder with ``results/`` inside).
    """
    path = Path(path)
    if not path.is_dir():
        raise UserError(f"results folder not found: {path}; give --results the folder that holds fits/")
    for candidate in (path, path / "results"):
        if (candidate / "fits").is_dir():
            return candidate
    raise UserError(f"results folder {path} has no fits/ folder; run 'ped2g fit' first or point "
                    "--results at the folder that holds pedigree/, fits/, null/ and compare/")


def fit_folders(root: Path, populations: list[str]) -> dict[str, Path]:
    """Fit folder of each population, in the config's order (or sorted when it lists none).

    Raises
    ------
    UserError
        A population named in the config has no ``fits/<population>/posterior.nc``, or there is
        no fit at all.
    """
    fits = root / "fits"
    if populations:
        out = {}
        for pop in populations:
            folder = fits / pop
            if not (folder / fit_folder.POSTERIOR_FILE).is_file():
                raise UserError(f"config key 'populations' lists '{pop}' but {folder / 'posterior.nc'} "
                                f"is missing; run 'ped2g fit' for population '{pop}' first")
            out[pop] = folder
        return out
    folders = [p for p in sorted(fits.iterdir()) if p.is_dir() and not p.name.startswith(".")]
    unfinished = [p for p in folders if not (p / fit_folder.POSTERIOR_FILE).is_file()]
    if unfinished:
        why = ("its diagnostics.json says why (a fit that misses the checks with "
               "checks.on_failure: stop writes no posterior)" if (unfinished[0] / fit_folder.DIAGNOSTICS_FILE).is_file()
               else "run 'ped2g fit' for it")
        raise UserError(f"fit folder {unfinished[0]} has no posterior.nc; {why}, or remove the folder "
                        "to report on the other populations")
    out = {p.name: p for p in folders}
    if not out:
        raise UserError(f"no fit found under {fits} (no <population>/posterior.nc); run 'ped2g fit' first")
    return out


# ---------------------------------------------------------------------------------------------
# One function per input
# ---------------------------------------------------------------------------------------------
def read_posterior(fit_dir: Path):
    """The fit's ArviZ InferenceData (:func:`ped2g.contracts.fit_folder.read_inference_data`)."""
    return fit_folder.read_inference_data(fit_dir)


def read_parameters(fit_dir: Path) -> pd.DataFrame | None:
    """``parameters.csv`` (:func:`ped2g.contracts.fit_folder.read_parameters`)."""
    return fit_folder.read_parameters(fit_dir)


def read_fit_diagnostics(fit_dir: Path) -> dict[str, Any] | None:
    """``diagnostics.json`` of a fit, or None when absent."""
    return fit_folder.read_diagnostics(fit_dir)


def read_pedigree_used(fit_dir: Path) -> pd.DataFrame | None:
    """``pedigree_used.csv``: id, sire, dam, generation, inbreeding and ``phenotyped``."""
    return fit_folder.read_pedigree_used(fit_dir)


def read_pedigree_summary(root: Path) -> dict[str, Any] | None:
    """``pedigree/summary.json`` of the pedigree stage, or None."""
    return _read_json(root / "pedigree" / "summary.json", "pedigree summary")


def read_pedigree_changes(root: Path) -> pd.DataFrame | None:
    """``pedigree/changes.csv`` (row, id, problem, action), or None."""
    path = root / "pedigree" / "changes.csv"
    if not path.is_file():
        return None
    frame = read_stage_csv(path, "pedigree changes")
    absent = [c for c in CHANGE_COLUMNS if c not in frame.columns]
    if absent and not frame.empty:
        raise UserError(f"pedigree changes {path} has no column {', '.join(absent)}; rerun 'ped2g pedigree'")
    return frame


def read_null_summary(root: Path) -> dict[str, Any] | None:
    """``null/summary.json``, or None when the null stage has not run."""
    return _read_json(root / "null" / NULL_SUMMARY_FILE, "null summary")


def read_compare_tables(root: Path) -> dict[str, pd.DataFrame]:
    """Every method table of ``compare/`` (:func:`ped2g.contracts.compare_tables.read_tables`:
    the methods in their order), columns renamed to the report's names (:data:`REPORT_NAMES`)."""
    tables = compare_tables.read_tables(root / "compare")
    return {name: frame.rename(columns=REPORT_NAMES) for name, frame in tables.items()}


def read_compare_extras(root: Path) -> dict[str, Any]:
    """The compare stage's other outputs: ``references``, ``loadings``, ``draw_checks`` (tables)
    and ``summary`` (``compare/summary.json``); each None when absent."""
    return compare_tables.read_extras(root / "compare")


def read_compare_draws(root: Path):
    """``compare/draws.nc`` (every per-draw statistic, observed and ``null_``), or None."""
    return compare_tables.read_draws(root / "compare")


def read_phenotypes(path: str | os.PathLike, population_column: str,
                    traits: list[str]) -> pd.DataFrame | None:
    """The raw phenotype table (population column and traits as numbers), or None if absent.

    A cell that does not parse as a number counts as missing, as the fit stage reads it.
    """
    from ..io import read_table, require_columns

    path = Path(path)
    if not path.is_file():
        return None
    frame = read_table(path, "phenotype table")
    require_columns(frame, {"population": population_column, **{f"trait '{t}'": t for t in traits}},
                    path, "phenotype table")
    out = pd.DataFrame({"population": frame[population_column].str.strip()})
    for trait in traits:
        out[trait] = pd.to_numeric(frame[trait].str.strip(), errors="coerce")
    return out


@dataclass
class FitInputs:
    """What the report reads from one fit folder."""

    population: str
    path: Path
    idata: Any
    parameters: pd.DataFrame | None
    diagnostics: dict[str, Any] | None
    pedigree_used: pd.DataFrame | None

    @property
    def traits(self) -> list[str]:
        return [str(t) for t in self.idata.posterior["trait"].values]

    def divergences(self) -> int | None:
        """Divergent transitions: from diagnostics.json (its ``checks`` record, else its
        ``sampling`` record), else from ``sample_stats.diverging``."""
        for key in ("checks", "sampling"):
            value = (self.diagnostics or {}).get(key, {}).get("divergences")
            if isinstance(value, (int, float)) and not isinstance(value, bool):
                return int(value)
        stats = getattr(self.idata, "sample_stats", None)
        if stats is not None and "diverging" in stats:
            return int(np.asarray(stats["diverging"].values).sum())
        return None

    @property
    def missing_values(self) -> str | None:
        """How the fit handled missing trait values (diagnostics.json ``missing_values``: none,
        gibbs, nuts or masked), or None when the fit did not record it."""
        return (self.diagnostics or {}).get("missing_values")

    @property
    def checks_passed(self) -> bool | None:
        """The fit's own convergence verdict (diagnostics.json ``checks.passed``), or None."""
        value = (self.diagnostics or {}).get("checks", {}).get("passed")
        return None if value is None else bool(value)


@dataclass
class ResultInputs:
    """Everything the report reads, and the files it read (for checksums)."""

    root: Path
    fits: dict[str, FitInputs]
    pedigree_summary: dict[str, Any] | None
    pedigree_changes: pd.DataFrame | None
    null_summary: dict[str, Any] | None
    null_present: bool
    compare: dict[str, pd.DataFrame]
    compare_extras: dict[str, Any] = field(default_factory=dict)
    files_read: list[Path] = field(default_factory=list)

    @property
    def populations(self) -> list[str]:
        return list(self.fits)


def read_results(results: str | os.PathLike, populations: list[str]) -> ResultInputs:
    """Read every stage output the report uses (see the module docstring for what is required)."""
    root = results_root(results)
    fits = {}
    for pop, folder in fit_folders(root, populations).items():
        fits[pop] = FitInputs(population=pop, path=folder, idata=read_posterior(folder),
                              parameters=read_parameters(folder),
                              diagnostics=read_fit_diagnostics(folder),
                              pedigree_used=read_pedigree_used(folder))
    traits = next(iter(fits.values())).traits
    for fit in fits.values():
        if fit.traits != traits:
            raise UserError(f"fit {fit.path / 'posterior.nc'} has traits ({', '.join(fit.traits)}) "
                            f"that differ from the other fits ({', '.join(traits)}); fit every "
                            "population on the same traits")
    candidates = [root / "pedigree" / n for n in ("pedigree.csv", "changes.csv", "summary.json")]
    for fit in fits.values():
        candidates += [fit.path / n for n in (fit_folder.POSTERIOR_FILE, fit_folder.PARAMETERS_FILE,
                                              fit_folder.DIAGNOSTICS_FILE, fit_folder.PEDIGREE_USED_FILE)]
    candidates += [root / "null" / n for n in (NULL_FILE, NULL_SUMMARY_FILE)]
    compare_dir = root / "compare"
    if compare_dir.is_dir():
        candidates += sorted(compare_dir.glob("*.csv")) + [compare_dir / compare_tables.DRAWS_FILE,
                                                           compare_dir / compare_tables.SUMMARY_FILE]
    return ResultInputs(root=root, fits=fits,
                        pedigree_summary=read_pedigree_summary(root),
                        pedigree_changes=read_pedigree_changes(root),
                        null_summary=read_null_summary(root),
                        null_present=(root / "null" / NULL_FILE).is_file(),
                        compare=read_compare_tables(root),
                        compare_extras=read_compare_extras(root),
                        files_read=[p for p in candidates if p.is_file()])


def read_compare_as_written(root: Path) -> dict[str, pd.DataFrame]:
    """Every non-empty per-method ``compare/*.csv`` with the compare stage's own column names, in
    the methods' order (:func:`ped2g.contracts.compare_tables.read_tables`); the report's tables
    keep these names."""
    if not (root / "compare").is_dir():
        return {}
    return {name: frame for name, frame in compare_tables.read_tables(root / "compare").items()
            if not frame.empty}


def read_refit_null(root: Path, populations: list[str], traits: list[str]):
    """The refitting null's replicates (``null/refits/``) through
    :func:`ped2g.contracts.refit_null.read_refits`, or None when that folder is absent."""
    from ..contracts.refit_null import read_refits

    folder = root / "null" / "refits"
    if not folder.is_dir() or not any(folder.rglob("*.nc")):
        return None
    return read_refits([folder], populations, traits)
