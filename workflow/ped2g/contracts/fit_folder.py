"""The fit folder: what ``ped2g fit`` writes for one population and every later stage reads.

Files (:data:`POSTERIOR_FILE` and the other names below):

``posterior.nc``
    ArviZ InferenceData netCDF. Its ``posterior`` group has dimensions ``chain, draw`` first,
    coordinate ``trait`` (and ``trait2`` for the second axis of a matrix) and the variables
    :data:`POSTERIOR_VARIABLES`: ``G``, ``R``, ``P``, ``rg`` (trait, trait2), ``h2`` and ``mean``
    (trait; the population mean in original units), plus ``fixed`` (effect, trait) and
    ``cov_<name>`` (trait, trait2) per extra random effect. Its attributes name the population,
    the traits and the ped2g version (``ped2g_population``, ``ped2g_traits``, ``ped2g_version``,
    ``ped2g_kind = "fit"``). A ``sample_stats`` group holds the sampler's statistics.
``parameters.csv``
    One row per scalar, columns :data:`PARAMETER_COLUMNS`.
``diagnostics.json``
    At least the keys :data:`DIAGNOSTICS_KEYS`; ``missing_values`` says how missing trait values
    were handled (``none``, ``gibbs``, ``nuts`` or ``masked``) and ``checks.passed`` is the
    convergence verdict.
``pedigree_used.csv``
    The pruned pedigree (``id``, ``sire``, ``dam``, ...) with a ``phenotyped`` 0/1 column.
``breeding_values.csv``, ``breeding_values.nc``
    Breeding-value summaries (every draw in the .nc, only with ``model.save_breeding_values``).

A fit that misses its checks under ``checks.on_failure: stop`` leaves only ``parameters.csv``
and ``diagnostics.json`` (:data:`STOPPED_FILES`). The writer checks a finished folder with
:func:`check_fit_folder`; later stages read it only through the readers here.
"""

from __future__ import annotations

import json
import os
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import xarray as xr

from .. import __version__
from ..errors import UserError
from ..io import read_stage_csv

FIT_KIND = "fit"
MATRIX_DIMS = ("trait", "trait2")
POSTERIOR_FILE = "posterior.nc"
PARAMETERS_FILE = "parameters.csv"
DIAGNOSTICS_FILE = "diagnostics.json"
PEDIGREE_USED_FILE = "pedigree_used.csv"
BREEDING_VALUES_FILE = "breeding_values.csv"
BREEDING_VALUE_DRAWS_FILE = "breeding_values.nc"
#: Files of a fit that stopped on missed checks; a finished fit adds :data:`FINISHED_FILES`.
STOPPED_FILES = (PARAMETERS_FILE, DIAGNOSTICS_FILE)
FINISHED_FILES = (POSTERIOR_FILE, BREEDING_VALUES_FILE, PEDIGREE_USED_FILE)
#: Variables of the ``posterior`` group and their dimensions after ``chain, draw``.
POSTERIOR_VARIABLES = {"G": MATRIX_DIMS, "R": MATRIX_DIMS, "P": MATRIX_DIMS, "rg": MATRIX_DIMS,
                       "h2": ("trait",), "mean": ("trait",)}
PARAMETER_COLUMNS = ("parameter", "quantity", "mean", "sd", "hpd_lower", "hpd_upper", "ess_bulk",
                     "ess_tail", "r_hat", "fixed")
DIAGNOSTICS_KEYS = ("population", "traits", "engine", "engine_reason", "missing_values", "sampling",
                    "checks", "on_failure")
#: How a fit handled missing trait values (``diagnostics.json``, key ``missing_values``).
MISSING_VALUE_MODES = ("none", "gibbs", "nuts", "masked")


def derived_from_covariances(G: np.ndarray, P: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Heritabilities ``h2 = diag(G)/diag(P)`` and genetic correlations ``rg`` from G and P.

    Both arrays broadcast over leading (draw) axes: G, P have shape (..., t, t).
    """
    g_diag = np.diagonal(G, axis1=-2, axis2=-1)
    p_diag = np.diagonal(P, axis1=-2, axis2=-1)
    sd = np.sqrt(np.clip(g_diag, 0.0, None))
    with np.errstate(divide="ignore", invalid="ignore"):
        rg = G / (sd[..., :, None] * sd[..., None, :])
        h2 = g_diag / p_diag
    return h2, rg


def posterior_dataset(population: str, traits: list[str], G: np.ndarray, R: np.ndarray,
                      P: np.ndarray, mean: np.ndarray,
                      extra: dict[str, xr.DataArray] | None = None) -> xr.Dataset:
    """Build the ``posterior`` group of a fit from arrays with leading axes (chain, draw).

    Parameters
    ----------
    G, R, P
        Shape (chain, draw, t, t), original units.
    mean
        Shape (chain, draw, t): the population mean of each trait in original units.
    extra
        Further variables (fixed effects, other random-effect covariances), already labelled
        with dims that start with ``chain, draw``.
    """
    G, R, P, mean = (np.asarray(a, dtype=float) for a in (G, R, P, mean))
    h2, rg = derived_from_covariances(G, P)
    chain = np.arange(G.shape[0])
    draw = np.arange(G.shape[1])
    mdims = ("chain", "draw", *MATRIX_DIMS)
    coords = {"chain": chain, "draw": draw, "trait": list(traits), "trait2": list(traits)}
    data = {
        "G": (mdims, G), "R": (mdims, R), "P": (mdims, P), "rg": (mdims, rg),
        "h2": (("chain", "draw", "trait"), h2), "mean": (("chain", "draw", "trait"), mean),
    }
    ds = xr.Dataset(data, coords=coords)
    for name, arr in (extra or {}).items():
        ds[name] = arr
    ds.attrs.update(ped2g_kind=FIT_KIND, ped2g_population=str(population),
                    ped2g_traits=list(traits), ped2g_version=__version__)
    return ds


def check_fit_folder(folder: str | os.PathLike, stopped: bool = False) -> None:
    """The writer's check of a fit folder before it is published (``stopped``: the fit missed its
    checks and keeps only :data:`STOPPED_FILES`).

    Raises
    ------
    ValueError
        A file missing, a variable or column missing or with other dimensions, a diagnostics key
        missing: a fault of the writer, not of the user's data.
    """
    folder = Path(folder)
    names = STOPPED_FILES if stopped else STOPPED_FILES + FINISHED_FILES
    absent = [n for n in names if not (folder / n).is_file()]
    if absent:
        raise ValueError(f"fit folder {folder} lacks {', '.join(absent)}")
    import pandas as pd

    columns = list(pd.read_csv(folder / PARAMETERS_FILE, nrows=0).columns)
    if columns != list(PARAMETER_COLUMNS):
        raise ValueError(f"{folder / PARAMETERS_FILE} has columns {columns}, the contract {list(PARAMETER_COLUMNS)}")
    diagnostics = json.loads((folder / DIAGNOSTICS_FILE).read_text(encoding="utf-8"))
    lacking = [k for k in DIAGNOSTICS_KEYS if k not in diagnostics]
    if lacking or "passed" not in diagnostics["checks"]:
        raise ValueError(f"{folder / DIAGNOSTICS_FILE} lacks {', '.join(lacking) or 'checks.passed'}")
    if diagnostics["missing_values"] not in MISSING_VALUE_MODES:
        raise ValueError(f"{folder / DIAGNOSTICS_FILE}: missing_values {diagnostics['missing_values']!r} "
                         f"is not one of {MISSING_VALUE_MODES}")
    if stopped:
        return
    with xr.open_dataset(folder / POSTERIOR_FILE, group="posterior", engine="h5netcdf") as post:
        for name, dims in POSTERIOR_VARIABLES.items():
            if name not in post or tuple(post[name].dims) != ("chain", "draw", *dims):
                raise ValueError(f"{folder / POSTERIOR_FILE}: variable {name} missing or not of dims "
                                 f"{('chain', 'draw', *dims)}")
        if post.attrs.get("ped2g_kind") != FIT_KIND:
            raise ValueError(f"{folder / POSTERIOR_FILE} has no ped2g_kind = {FIT_KIND!r}")
    used = pd.read_csv(folder / PEDIGREE_USED_FILE, nrows=0).columns
    if not {"id", "sire", "dam", "phenotyped"} <= set(used):
        raise ValueError(f"{folder / PEDIGREE_USED_FILE} lacks id, sire, dam or phenotyped")


@dataclass
class Fit:
    """What later stages need from one population's fit.

    Attributes
    ----------
    population : str
    traits : list of str
    G, R, P : numpy.ndarray, shape (S, t, t)
        Posterior draws with chains pooled (chain-major), original units.
    mean : numpy.ndarray, shape (S, t)
    chain : numpy.ndarray of int, shape (S,)
        The chain of each pooled draw.
    pedigree_used : pathlib.Path
        The pruned pedigree the fit used (phenotyped animals and their informative ancestors).
    phenotyped : list of str
        Identifiers of the animals with at least one record (from ``pedigree_used.csv``).
    path : pathlib.Path
        The fit folder.
    """

    population: str
    traits: list[str]
    G: np.ndarray
    R: np.ndarray
    P: np.ndarray
    mean: np.ndarray
    chain: np.ndarray
    pedigree_used: Path
    phenotyped: list[str]
    path: Path


def load_fit(fit_dir: str | os.PathLike) -> Fit:
    """Read a fit folder (``posterior.nc`` and ``pedigree_used.csv``).

    Raises
    ------
    UserError
        If the folder or its files are missing or the file was not written by ped2g's fit stage.
    """
    import pandas as pd

    fit_dir = Path(fit_dir)
    nc = fit_dir / POSTERIOR_FILE if fit_dir.is_dir() else fit_dir
    if nc.name == POSTERIOR_FILE:
        fit_dir = nc.parent
    if not nc.is_file():
        raise UserError(f"fit {fit_dir}: no posterior.nc there; run 'ped2g fit' for it first")
    try:
        post = xr.open_dataset(nc, group="posterior", engine="h5netcdf").load()
    except Exception:
        raise UserError(f"fit {nc} is not an ArviZ netCDF file written by ped2g's fit stage") from None
    if post.attrs.get("ped2g_kind") != FIT_KIND or any(v not in post for v in ("G", "R", "P", "mean")):
        raise UserError(f"fit {nc} was not written by ped2g's fit stage (no ped2g attributes or G/R/P/mean)")
    traits = [str(t) for t in post["trait"].values]
    stacked = post.stack(sample=("chain", "draw"))

    def draws(name: str) -> np.ndarray:
        arr = stacked[name]
        return np.moveaxis(arr.values, -1, 0)

    ped_used = fit_dir / PEDIGREE_USED_FILE
    if not ped_used.is_file():
        raise UserError(f"fit {fit_dir}: pedigree_used.csv is missing; rerun 'ped2g fit'")
    used = pd.read_csv(ped_used, dtype=str, keep_default_na=False)
    phenotyped = used.loc[used.get("phenotyped", "1").astype(str).isin(["1", "True", "true"]), "id"].tolist()
    return Fit(population=str(post.attrs["ped2g_population"]), traits=traits,
               G=draws("G"), R=draws("R"), P=draws("P"), mean=draws("mean"),
               chain=np.asarray(stacked["chain"].values), pedigree_used=ped_used,
               phenotyped=phenotyped, path=fit_dir)


def posterior_means(fit_dir: str | os.PathLike) -> dict[str, xr.DataArray]:
    """The posterior mean of every variable of a fit (original units), labelled.

    Used by the refitting null (:mod:`ped2g.null.refit`), which simulates records from each
    population's own fixed effects (``fixed``, dims effect x trait), residual covariance ``R`` and
    extra random-effect covariances (``cov_<name>``). Checks the file as :func:`load_fit` does.
    """
    fit_dir = Path(fit_dir)
    load_fit(fit_dir)   # the checks, with their one-line errors
    nc = fit_dir / POSTERIOR_FILE if fit_dir.is_dir() else fit_dir
    with xr.open_dataset(nc, group="posterior", engine="h5netcdf") as post:
        return {str(name): post[name].mean(("chain", "draw")).load() for name in post.data_vars}


def thin_indices(n_draws: int, max_draws: int | None) -> np.ndarray:
    """Evenly spaced indices of at most ``max_draws`` of ``n_draws`` pooled draws (all if None)."""
    if max_draws is None or max_draws >= n_draws:
        return np.arange(n_draws)
    return np.unique(np.linspace(0, n_draws - 1, int(max_draws)).round().astype(int))


@dataclass
class FitSet:
    """Several populations' fits aligned for comparison.

    Attributes
    ----------
    populations : list of str
    traits : list of str
    G, R, P : numpy.ndarray, shape (S, m, t, t)
        Draw s of every population (draws thinned to a common count S).
    mean : numpy.ndarray, shape (S, m, t)
    draw_index : numpy.ndarray, shape (S,)
        Which pooled draw of each fit was used.
    fits : list of Fit
    """

    populations: list[str]
    traits: list[str]
    G: np.ndarray
    R: np.ndarray
    P: np.ndarray
    mean: np.ndarray
    draw_index: np.ndarray
    fits: list[Fit]


def load_fit_set(fit_dirs: list[str | os.PathLike], max_draws: int | None = None) -> FitSet:
    """Load and align the fits of several populations.

    Draws are paired by position after thinning every fit to the same number of draws
    (the smallest count, or ``max_draws``).

    Raises
    ------
    UserError
        Fewer than two fits, two fits of the same population, or fits whose trait sets or
        trait orders differ.
    """
    if len(fit_dirs) < 2:
        raise UserError(f"comparisons need at least two populations' fits; got {len(fit_dirs)}")
    fits = [load_fit(d) for d in fit_dirs]
    first = fits[0]
    seen: dict[str, Path] = {}
    for fit in fits:
        if fit.population in seen:
            raise UserError(f"fits {seen[fit.population]} and {fit.path} are both of population "
                            f"'{fit.population}'; give each population once")
        seen[fit.population] = fit.path
        if fit.traits != first.traits:
            if sorted(fit.traits) == sorted(first.traits):
                raise UserError(f"fit {fit.path} has the traits in another order ({', '.join(fit.traits)}) "
                                f"than {first.path} ({', '.join(first.traits)}); refit with one trait order")
            raise UserError(f"fit {fit.path} has traits ({', '.join(fit.traits)}) that differ from "
                            f"{first.path} ({', '.join(first.traits)}); fit every population on the same traits")
    n = min(len(f.G) for f in fits)
    index = thin_indices(n, max_draws)

    def stack(name: str) -> np.ndarray:
        return np.stack([getattr(f, name)[index] for f in fits], axis=1)

    G = stack("G")
    return FitSet(populations=[f.population for f in fits], traits=list(first.traits),
                  G=0.5 * (G + np.swapaxes(G, -1, -2)), R=stack("R"), P=stack("P"),
                  mean=stack("mean"), draw_index=index, fits=fits)


def read_inference_data(fit_dir: str | os.PathLike):
    """The fit's ArviZ InferenceData (``posterior`` loaded and, when present, ``sample_stats``).

    Raises
    ------
    UserError
        The file is not an ArviZ netCDF written by ped2g's fit stage.
    """
    import arviz as az

    path = Path(fit_dir) / POSTERIOR_FILE
    try:
        idata = az.from_netcdf(path)
    except Exception:
        raise UserError(f"fit {path} is not an ArviZ netCDF file written by ped2g's fit stage; "
                        "rerun 'ped2g fit'") from None
    post = getattr(idata, "posterior", None)
    if post is None or any(name not in post for name in ("G", "R", "P")):
        raise UserError(f"fit {path} has no posterior G, R and P; rerun 'ped2g fit'")
    if post.attrs.get("ped2g_kind") not in (None, FIT_KIND):
        raise UserError(f"fit {path} was not written by ped2g's fit stage (ped2g_kind = "
                        f"{post.attrs.get('ped2g_kind')!r})")
    idata.posterior = post.load()
    return idata


def read_diagnostics(fit_dir: str | os.PathLike) -> dict[str, Any] | None:
    """``diagnostics.json`` of a fit, or None when absent.

    Raises
    ------
    UserError
        The file is not a JSON object.
    """
    path = Path(fit_dir) / DIAGNOSTICS_FILE
    if not path.is_file():
        return None
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
    except (json.JSONDecodeError, UnicodeDecodeError) as err:
        raise UserError(f"fit diagnostics {path} is not valid JSON ({err}); rerun 'ped2g fit'") from None
    if not isinstance(data, dict):
        raise UserError(f"fit diagnostics {path} should hold a JSON object; rerun 'ped2g fit'")
    return data


def read_parameters(fit_dir: str | os.PathLike):
    """``parameters.csv`` (columns :data:`PARAMETER_COLUMNS`), or None when absent or empty.

    Raises
    ------
    UserError
        The table is not readable or lacks a column of the contract.
    """
    path = Path(fit_dir) / PARAMETERS_FILE
    if not path.is_file():
        return None
    frame = read_stage_csv(path, "fit parameters")
    if frame.empty:
        return None
    absent = [c for c in PARAMETER_COLUMNS if c not in frame.columns]
    if absent:
        raise UserError(f"fit parameters {path} has no column {', '.join(absent)}; rerun 'ped2g fit'")
    return frame


def read_pedigree_used(fit_dir: str | os.PathLike):
    """``pedigree_used.csv`` (id, sire, dam, generation, inbreeding, phenotyped), or None."""
    import pandas as pd

    path = Path(fit_dir) / PEDIGREE_USED_FILE
    if not path.is_file():
        return None
    frame = pd.read_csv(path, dtype={"id": str, "sire": str, "dam": str}, keep_default_na=False)
    if "id" not in frame.columns:
        raise UserError(f"pedigree {path} has no 'id' column; rerun 'ped2g fit'")
    return frame
