"""The contract between the fit stage and the stages after it: ``posterior.nc``.

A fit folder holds ``posterior.nc`` (ArviZ InferenceData netCDF) and ``pedigree_used.csv``.
Its ``posterior`` group has dimensions ``chain, draw`` first, coordinate ``trait`` (and ``trait2``
for the second axis of a matrix) and the variables ``G``, ``R``, ``P`` (trait, trait2), ``h2``
(trait), ``rg`` (trait, trait2) and ``mean`` (trait, the population mean in original units),
plus fixed effects and the covariance matrix of each extra random effect. Its attributes name
the population, the traits and the ped2g version (``ped2g_population``, ``ped2g_traits``,
``ped2g_version``, ``ped2g_kind = "fit"``).

Later stages read fits only through :func:`load_fit`, which checks that a file is ped2g's.
"""

from __future__ import annotations

import os
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import xarray as xr

from . import __version__
from .errors import UserError

FIT_KIND = "fit"
MATRIX_DIMS = ("trait", "trait2")


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
    nc = fit_dir / "posterior.nc" if fit_dir.is_dir() else fit_dir
    if nc.name == "posterior.nc":
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

    ped_used = fit_dir / "pedigree_used.csv"
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
    nc = fit_dir / "posterior.nc" if fit_dir.is_dir() else fit_dir
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
