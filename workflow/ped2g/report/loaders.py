"""Reading the other stages' outputs for the report: one function per input.

The report is the last consumer of every stage's files, so this module is the one place that
knows their names and columns. Column names that may still change are looked up through the
alias tables below: a rename in another stage is a one-line edit here.

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

from ..errors import UserError

# ---------------------------------------------------------------------------------------------
# Column aliases: canonical name -> accepted names in the stage outputs, first match wins.
# ---------------------------------------------------------------------------------------------
COMPARE_COLUMNS: dict[str, list[str]] = {
    "method": ["method"],
    "statistic": ["statistic", "measure", "quantity"],
    "population": ["population", "population1", "pop", "pop1"],
    "population2": ["population2", "pop2", "other_population"],
    "axis": ["axis", "index", "k", "component"],
    "axis2": ["axis2", "trait"],
    "estimate": ["estimate", "median", "mean", "observed", "value"],
    "lower": ["hpd_lower", "lower", "hpd_low", "observed_hpd_lower"],
    "upper": ["hpd_upper", "upper", "hpd_high", "observed_hpd_upper"],
    "null_estimate": ["null_estimate", "null_median", "null_mean"],
    "null_lower": ["null_hpd_lower", "null_lower", "null_hpd_low"],
    "null_upper": ["null_hpd_upper", "null_upper", "null_hpd_high"],
    "p_obs_gt_null": ["p_obs_gt_null", "prob_obs_gt_null", "p_greater"],
    "overlap": ["hpd_overlap", "intervals_overlap"],
    "description": ["description"],
}
#: Files in compare/ that are not per-method tables, read by their own loaders.
COMPARE_AUX_FILES = {"references": "references.csv", "loadings": "loadings.csv",
                     "draw_checks": "draw_checks.csv"}
PARAMETER_COLUMNS: dict[str, list[str]] = {
    "parameter": ["parameter", "name", "variable", "param"],
    "r_hat": ["r_hat", "rhat", "R_hat"],
    "ess_bulk": ["ess_bulk", "bulk_ess"],
    "ess_tail": ["ess_tail", "tail_ess"],
}
CHANGE_COLUMNS: dict[str, list[str]] = {
    "row": ["row", "line"],
    "id": ["id", "animal"],
    "problem": ["problem", "issue"],
    "action": ["action", "fix"],
}
# Keys of diagnostics.json / summary.json read by name.
DIVERGENCE_KEYS = ["divergences", "n_divergences", "divergent", "num_divergences"]
#: Preferred order of the comparison methods in the report (others follow alphabetically).
COMPARE_ORDER = ["skewers", "subspace", "tensor", "gmax", "evolvability", "dimensions", "distance"]


def _rename(frame: pd.DataFrame, aliases: dict[str, list[str]]) -> pd.DataFrame:
    """Rename the first present alias of each canonical column to its canonical name."""
    mapping: dict[str, str] = {}
    present = set(frame.columns)
    for canonical, names in aliases.items():
        if canonical in present:
            continue
        for name in names:
            if name in present and name not in mapping:
                mapping[name] = canonical
                break
    return frame.rename(columns=mapping)


def _read_csv(path: Path, what: str) -> pd.DataFrame:
    try:
        return pd.read_csv(path, keep_default_na=True)
    except pd.errors.EmptyDataError:
        return pd.DataFrame()
    except (pd.errors.ParserError, UnicodeDecodeError) as err:
        raise UserError(f"{what} {path} is not a readable CSV table ({type(err).__name__}); "
                        "rerun the stage that wrote it") from None


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
            if not (folder / "posterior.nc").is_file():
                raise UserError(f"config key 'populations' lists '{pop}' but {folder / 'posterior.nc'} "
                                f"is missing; run 'ped2g fit' for population '{pop}' first")
            out[pop] = folder
        return out
    folders = [p for p in sorted(fits.iterdir()) if p.is_dir() and not p.name.startswith(".")]
    unfinished = [p for p in folders if not (p / "posterior.nc").is_file()]
    if unfinished:
        why = ("its diagnostics.json says why (a fit that misses the checks with "
               "checks.on_failure: stop writes no posterior)" if (unfinished[0] / "diagnostics.json").is_file()
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
    """The fit's ArviZ InferenceData (``posterior`` and, when present, ``sample_stats``).

    Raises
    ------
    UserError
        The file is not an ArviZ netCDF written by ped2g's fit stage.
    """
    import arviz as az

    path = fit_dir / "posterior.nc"
    try:
        idata = az.from_netcdf(path)
    except Exception:
        raise UserError(f"fit {path} is not an ArviZ netCDF file written by ped2g's fit stage; "
                        "rerun 'ped2g fit'") from None
    post = getattr(idata, "posterior", None)
    if post is None or any(name not in post for name in ("G", "R", "P")):
        raise UserError(f"fit {path} has no posterior G, R and P; rerun 'ped2g fit'")
    if post.attrs.get("ped2g_kind") not in (None, "fit"):
        raise UserError(f"fit {path} was not written by ped2g's fit stage (ped2g_kind = "
                        f"{post.attrs.get('ped2g_kind')!r})")
    idata.posterior = post.load()
    return idata


def read_parameters(fit_dir: Path) -> pd.DataFrame | None:
    """``parameters.csv`` with canonical columns (parameter, r_hat, ess_bulk, ess_tail, ...)."""
    path = fit_dir / "parameters.csv"
    if not path.is_file():
        return None
    frame = _rename(_read_csv(path, "fit parameters"), PARAMETER_COLUMNS)
    return frame if not frame.empty else None


def read_fit_diagnostics(fit_dir: Path) -> dict[str, Any] | None:
    """``diagnostics.json`` of a fit, or None when absent."""
    return _read_json(fit_dir / "diagnostics.json", "fit diagnostics")


def read_pedigree_used(fit_dir: Path) -> pd.DataFrame | None:
    """``pedigree_used.csv``: id, sire, dam, generation, inbreeding (and ``phenotyped`` if given)."""
    path = fit_dir / "pedigree_used.csv"
    if not path.is_file():
        return None
    frame = pd.read_csv(path, dtype={"id": str, "sire": str, "dam": str}, keep_default_na=False)
    if "id" not in frame.columns:
        raise UserError(f"pedigree {path} has no 'id' column; rerun 'ped2g fit'")
    return frame


def read_pedigree_summary(root: Path) -> dict[str, Any] | None:
    """``pedigree/summary.json`` of the pedigree stage, or None."""
    return _read_json(root / "pedigree" / "summary.json", "pedigree summary")


def read_pedigree_changes(root: Path) -> pd.DataFrame | None:
    """``pedigree/changes.csv`` with canonical columns (row, id, problem, action), or None."""
    path = root / "pedigree" / "changes.csv"
    if not path.is_file():
        return None
    return _rename(_read_csv(path, "pedigree changes"), CHANGE_COLUMNS)


def read_null_summary(root: Path) -> dict[str, Any] | None:
    """``null/summary.json``, or None when the null stage has not run."""
    return _read_json(root / "null" / "summary.json", "null summary")


def read_compare_tables(root: Path) -> dict[str, pd.DataFrame]:
    """Every ``compare/*.csv`` with canonical columns, keyed by method (file stem).

    Methods come in the order of :data:`COMPARE_ORDER`, then alphabetically.
    """
    folder = root / "compare"
    if not folder.is_dir():
        return {}
    tables = {}
    for path in folder.glob("*.csv"):
        if path.name in COMPARE_AUX_FILES.values():
            continue
        frame = _rename(_read_csv(path, "comparison table"), COMPARE_COLUMNS)
        if frame.empty:
            continue
        if "estimate" not in frame.columns:
            have = ", ".join(map(str, frame.columns))
            raise UserError(f"comparison table {path} has no estimate column (one of "
                            f"{', '.join(COMPARE_COLUMNS['estimate'])}; columns are: {have}); "
                            "rerun 'ped2g compare'")
        if "statistic" not in frame.columns:
            frame["statistic"] = path.stem
        if "method" not in frame.columns:
            frame["method"] = path.stem
        tables[path.stem] = frame

    def order(name: str) -> tuple[int, str]:
        return (COMPARE_ORDER.index(name) if name in COMPARE_ORDER else len(COMPARE_ORDER), name)

    return {name: tables[name] for name in sorted(tables, key=order)}


def read_compare_extras(root: Path) -> dict[str, Any]:
    """The compare stage's other outputs: ``references``, ``loadings``, ``draw_checks`` (tables)
    and ``summary`` (``compare/summary.json``); each None when absent."""
    folder = root / "compare"
    out: dict[str, Any] = {}
    for key, name in COMPARE_AUX_FILES.items():
        path = folder / name
        out[key] = _read_csv(path, "comparison table") if path.is_file() else None
    out["summary"] = _read_json(folder / "summary.json", "comparison summary")
    return out


def read_compare_draws(root: Path):
    """``compare/draws.nc`` (every per-draw statistic, observed and ``null_``), or None."""
    import xarray as xr

    path = root / "compare" / "draws.nc"
    if not path.is_file():
        return None
    try:
        with xr.open_dataset(path, engine="h5netcdf") as ds:
            return ds.load()
    except Exception:
        raise UserError(f"comparison draws {path} is not a readable netCDF file; rerun 'ped2g compare'") from None


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
        """Divergent transitions: from diagnostics.json (top level, or its ``checks`` or ``sampling``
        record), else from ``sample_stats.diverging``."""
        records = [self.diagnostics or {}]
        records += [v for k, v in (self.diagnostics or {}).items() if k in ("checks", "sampling")
                    and isinstance(v, dict)]
        for record in records:
            for key in DIVERGENCE_KEYS:
                value = record.get(key)
                if isinstance(value, (int, float)) and not isinstance(value, bool):
                    return int(value)
        stats = getattr(self.idata, "sample_stats", None)
        if stats is not None and "diverging" in stats:
            return int(np.asarray(stats["diverging"].values).sum())
        return None


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
        candidates += [fit.path / n for n in ("posterior.nc", "parameters.csv", "diagnostics.json",
                                              "pedigree_used.csv")]
    candidates += [root / "null" / n for n in ("null_G.nc", "summary.json")]
    compare_dir = root / "compare"
    if compare_dir.is_dir():
        candidates += sorted(compare_dir.glob("*.csv")) + [compare_dir / "draws.nc",
                                                           compare_dir / "summary.json"]
    return ResultInputs(root=root, fits=fits,
                        pedigree_summary=read_pedigree_summary(root),
                        pedigree_changes=read_pedigree_changes(root),
                        null_summary=read_null_summary(root),
                        null_present=(root / "null" / "null_G.nc").is_file(),
                        compare=read_compare_tables(root),
                        compare_extras=read_compare_extras(root),
                        files_read=[p for p in candidates if p.is_file()])


def read_compare_as_written(root: Path) -> dict[str, pd.DataFrame]:
    """Every per-method ``compare/*.csv`` with the compare stage's own column names (no aliases),
    in the order of :func:`read_compare_tables`; the report's tables keep these names."""
    folder = root / "compare"
    if not folder.is_dir():
        return {}
    order = list(read_compare_tables(root))
    out = {}
    for name in order:
        frame = _read_csv(folder / f"{name}.csv", "comparison table")
        if not frame.empty:
            out[name] = frame
    return out


def read_refit_null(root: Path, populations: list[str], traits: list[str]):
    """The refitting null's replicates (``null/refits/``) through
    :func:`ped2g.null.refit_io.read_refits`, or None when that folder is absent."""
    from ..null.refit_io import read_refits

    folder = root / "null" / "refits"
    if not folder.is_dir() or not any(folder.rglob("*.nc")):
        return None
    return read_refits([folder], populations, traits)
