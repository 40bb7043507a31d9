"""The compare stage's folder: what ``ped2g compare`` writes and the report reads.

Files:

``<method>.csv``, one per method of :data:`METHOD_ORDER`, in that order
    One row per statistic and label combination, columns :data:`COLUMNS` (their meaning is in
    the :mod:`ped2g.compare.summarise` docstring) and, when the refitting null ran (``--refits``),
    :data:`CALIBRATED_COLUMNS` after them (:func:`ped2g.compare.calibrated.calibrated_columns`).
``references.csv``, ``loadings.csv``, ``draw_checks.csv`` (:data:`AUX_FILES`)
    Random-direction references and fixed axes; draws left out (not positive definite).
``draws.nc``
    Every per-draw statistic, observed (``<name>``) and null (``null_<name>``).
``summary.json``
    The run's settings, counts and cautions.

:func:`check_tables` is the writer's check; :func:`read_tables`, :func:`read_extras` and
:func:`read_draws` are the readers. A column renamed in the writer fails both.
"""

from __future__ import annotations

import json
import os
from pathlib import Path
from typing import Any

import pandas as pd

from ..errors import UserError
from ..io import read_stage_csv

#: The comparison methods, in the order the stage runs them and the report shows them.
METHOD_ORDER = ("skewers", "subspace", "tensor", "gmax", "evolvability", "dimensions", "distance")
#: Columns of every method's table.
COLUMNS = ["method", "statistic", "population", "population2", "axis", "axis2", "axis_meaning",
           "scale", "n_draws", "mean", "median", "sd", "hpd_lower", "hpd_upper", "et_lower",
           "et_upper", "null_n_draws", "null_mean", "null_median", "null_sd", "null_hpd_lower",
           "null_hpd_upper", "null_et_lower", "null_et_upper", "n_pairs", "diff_mean",
           "diff_hpd_lower", "diff_hpd_upper", "p_obs_gt_null", "hpd_overlap", "interval_mass",
           "description"]
#: Columns added to every table by the calibrated test against the refitting null.
CALIBRATED_COLUMNS = ("test", "test_value", "null_refit_median", "null_refit_lower", "null_refit_upper",
                      "n_replicates", "p_value", "family", "family_size", "p_adjusted", "supported")
#: The stage's other tables, by the name the readers give them.
AUX_FILES = {"references": "references.csv", "loadings": "loadings.csv", "draw_checks": "draw_checks.csv"}
DRAWS_FILE = "draws.nc"
SUMMARY_FILE = "summary.json"


def as_table(frame: pd.DataFrame) -> pd.DataFrame:
    """``frame`` with the columns :data:`COLUMNS` in their order (absent ones empty)."""
    return frame.reindex(columns=list(COLUMNS))


def _column_problem(columns: list[str]) -> str | None:
    """What is wrong with a table's columns, or None."""
    missing = [c for c in COLUMNS if c not in columns]
    unknown = [c for c in columns if c not in COLUMNS and c not in CALIBRATED_COLUMNS]
    if not missing and not unknown:
        return None
    parts = []
    if "median" in missing:
        parts.append("no estimate column (median)")
        missing.remove("median")
    if missing:
        parts.append(f"no column {', '.join(missing)}")
    if unknown:
        parts.append(f"columns the contract does not know ({', '.join(unknown)})")
    return "; ".join(parts)


def check_tables(tables: dict[str, pd.DataFrame]) -> None:
    """The writer's check: one table per method of :data:`METHOD_ORDER`, in that order, each with
    :data:`COLUMNS` (and, if any has them, :data:`CALIBRATED_COLUMNS`).

    Raises
    ------
    ValueError
        A fault of the writer.
    """
    if tuple(tables) != METHOD_ORDER:
        raise ValueError(f"comparison tables {list(tables)} are not the methods {list(METHOD_ORDER)} in order")
    for method, frame in tables.items():
        problem = _column_problem(list(frame.columns))
        if problem:
            raise ValueError(f"comparison table {method}: {problem}")
        if set(frame["method"].dropna()) - {method}:
            raise ValueError(f"comparison table {method} holds rows of other methods")


def read_tables(folder: str | os.PathLike) -> dict[str, pd.DataFrame]:
    """Every method table of a compare folder, keyed by method: those of :data:`METHOD_ORDER` in
    that order, then any other (a method this version does not know) alphabetically. Empty
    tables are left out; none when the folder is absent.

    Raises
    ------
    UserError
        A table that is not readable or whose columns are not the contract's.
    """
    folder = Path(folder)
    if not folder.is_dir():
        return {}
    tables = {}
    for path in folder.glob("*.csv"):
        if path.name in AUX_FILES.values():
            continue
        frame = read_stage_csv(path, "comparison table")
        if frame.empty:
            continue
        problem = _column_problem(list(frame.columns))
        if problem:
            raise UserError(f"comparison table {path} has {problem}; columns are: "
                            f"{', '.join(map(str, frame.columns))}; rerun 'ped2g compare'")
        tables[path.stem] = frame

    def order(name: str) -> tuple[int, str]:
        return (METHOD_ORDER.index(name) if name in METHOD_ORDER else len(METHOD_ORDER), name)

    return {name: tables[name] for name in sorted(tables, key=order)}


def read_extras(folder: str | os.PathLike) -> dict[str, Any]:
    """The other outputs: ``references``, ``loadings``, ``draw_checks`` (tables) and ``summary``
    (``summary.json``); each None when absent."""
    folder = Path(folder)
    out: dict[str, Any] = {}
    for key, name in AUX_FILES.items():
        path = folder / name
        out[key] = read_stage_csv(path, "comparison table") if path.is_file() else None
    path = folder / SUMMARY_FILE
    out["summary"] = None
    if path.is_file():
        try:
            out["summary"] = json.loads(path.read_text(encoding="utf-8"))
        except (json.JSONDecodeError, UnicodeDecodeError) as err:
            raise UserError(f"comparison summary {path} is not valid JSON ({err}); rerun 'ped2g compare'") from None
        if not isinstance(out["summary"], dict):
            raise UserError(f"comparison summary {path} should hold a JSON object; rerun 'ped2g compare'")
    return out


def read_draws(folder: str | os.PathLike):
    """``draws.nc`` (every per-draw statistic, observed and ``null_``), or None when absent."""
    import xarray as xr

    path = Path(folder) / DRAWS_FILE
    if not path.is_file():
        return None
    try:
        with xr.open_dataset(path, engine="h5netcdf") as ds:
            return ds.load()
    except Exception:
        raise UserError(f"comparison draws {path} is not a readable netCDF file; rerun 'ped2g compare'") from None
