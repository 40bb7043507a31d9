"""The refitting null: one file per population and chunk of replicates (``ped2g null-refit``).

A file (netCDF-4, engine ``h5netcdf``) holds, for one population and replicates ``r`` of one chunk:

* ``G``, ``P`` of dims ``(replicate, draw, trait, trait2)`` and ``mean`` of dims
  ``(replicate, draw, trait)``: the refit's posterior draws in original units;
* ``rhat_max``, ``ess_bulk_min``, ``ess_tail_min``, ``divergences``, ``seconds`` of dim
  ``replicate``: the refit's convergence figures over the elements of G, and its time;
* coordinate ``replicate`` (the replicate numbers, shared by every population: replicate r of
  every population makes one simulated study), ``trait``, ``trait2``;
* attributes ``ped2g_kind = "null_refit"``, ``population``, ``engine``, ``shared_G`` (the G all
  populations share, row-major, original units), ``shared_G_uncorrected`` (the mean of the fits'
  posterior-mean G before the bias correction), ``pilot_replicates`` (pilot refits per population
  behind the correction, 0 for none), ``seed``, ``chains``, ``warmup``, ``draws``,
  ``ped2g_version``.

:func:`read_refits` gathers the files of every population into one :class:`RefitNull`, checking
that they belong together. Later stages read the refitting null only through it.

Pilot files (``ped2g null-refit --pilot``, one per population) have the same layout with
``ped2g_kind = "null_pilot"`` and ``shared_G`` the uncorrected mean they were simulated under;
:func:`read_pilots` returns their posterior-mean G matrices for
:func:`ped2g.null.refit.bias_corrected_G`.
"""

from __future__ import annotations

import os
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import xarray as xr

from .. import __version__
from ..errors import UserError
from ..io import load_netcdf

REFIT_KIND = "null_refit"
PILOT_KIND = "null_pilot"
DIAGNOSTICS = ("rhat_max", "ess_bulk_min", "ess_tail_min", "divergences", "seconds")


def write_chunk(path: str | os.PathLike, population: str, traits: list[str], replicates: list[int],
                results: list, attrs: dict[str, Any], kind: str = REFIT_KIND) -> Path:
    """Write one chunk (``results``: :class:`ped2g.null.refit.Replicate` per replicate number);
    ``kind`` is :data:`REFIT_KIND`, or :data:`PILOT_KIND` for a population's pilot refits.

    The writer's check: one result per replicate number, every draw array of the shape its
    dimensions say (ValueError otherwise).
    """
    path = Path(path)
    t = len(traits)
    if len(results) != len(replicates):
        raise ValueError(f"{len(results)} refits for {len(replicates)} replicate numbers")
    for r in results:
        if r.G.ndim != 3 or r.G.shape[1:] != (t, t) or r.P.shape != r.G.shape or r.mean.shape != r.G.shape[:2]:
            raise ValueError(f"refit draws of shapes G {r.G.shape}, P {r.P.shape}, mean {r.mean.shape} "
                             f"do not fit {t} traits")
    mdims = ("replicate", "draw", "trait", "trait2")
    ds = xr.Dataset(
        {"G": (mdims, np.stack([r.G for r in results])),
         "P": (mdims, np.stack([r.P for r in results])),
         "mean": (("replicate", "draw", "trait"), np.stack([r.mean for r in results])),
         **{k: (("replicate",), np.array([getattr(r, k) for r in results])) for k in DIAGNOSTICS}},
        coords={"replicate": np.asarray(replicates, dtype=np.int64), "trait": list(traits),
                "trait2": list(traits)})
    ds.attrs.update({k: v for k, v in attrs.items()})
    if kind not in (REFIT_KIND, PILOT_KIND):
        raise ValueError(f"kind must be {REFIT_KIND!r} or {PILOT_KIND!r}, got {kind!r}")
    ds.attrs.update(ped2g_kind=kind, population=str(population), ped2g_version=__version__)
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name(path.name + ".partial")
    ds.to_netcdf(tmp, engine="h5netcdf")
    os.replace(tmp, path)
    return path


@dataclass
class RefitNull:
    """The refitting null of every population, replicates aligned.

    Attributes
    ----------
    populations, traits : list of str
    replicates : numpy.ndarray of int, shape (Rn,)
    G, P : numpy.ndarray, shape (Rn, S, m, t, t)
    mean : numpy.ndarray, shape (Rn, S, m, t)
    diagnostics : pandas.DataFrame
        One row per population and replicate: population, replicate and :data:`DIAGNOSTICS`.
    shared_G : numpy.ndarray, shape (t, t)
    attrs : dict
        engine per population, seed, chains, warmup, draws, pilot_replicates and (when the shared G
        was bias-corrected) shared_G_uncorrected.
    """

    populations: list[str]
    traits: list[str]
    replicates: np.ndarray
    G: np.ndarray
    P: np.ndarray
    mean: np.ndarray
    diagnostics: pd.DataFrame
    shared_G: np.ndarray
    attrs: dict[str, Any]


def _open(path: Path, kind: str = REFIT_KIND) -> xr.Dataset:
    ds = load_netcdf(path, "refitting-null", "ped2g null-refit")
    if ds.attrs.get("ped2g_kind") != kind or "G" not in ds:
        what = "'ped2g null-refit --pilot'" if kind == PILOT_KIND else "'ped2g null-refit'"
        raise UserError(f"{path} was not written by {what}; rerun it")
    return ds


def read_pilots(paths: list[str | os.PathLike], populations: list[str], traits: list[str],
                shared_G: np.ndarray) -> list[np.ndarray]:
    """The posterior-mean G of every pilot refit of every population (files or folders).

    Raises
    ------
    UserError
        A file that is not a pilot file, other traits, a population without pilots, or pilots
        simulated under another G than ``shared_G`` (the fits changed since: rerun the pilots).
    """
    files: list[Path] = []
    for p in map(Path, paths):
        files += sorted(p.rglob("*.nc")) if p.is_dir() else [p]
    means, seen = [], set()
    t = len(traits)
    for f in files:
        ds = _open(f, PILOT_KIND)
        if [str(x) for x in ds["trait"].values] != list(traits):
            raise UserError(f"pilot file {f} has traits {[str(x) for x in ds['trait'].values]}, the fits "
                            f"have {list(traits)}; rerun 'ped2g null-refit --pilot'")
        under = np.asarray(ds.attrs["shared_G"], dtype=float).reshape(t, t)
        if not np.allclose(under, shared_G, rtol=1e-12, atol=0):
            raise UserError(f"pilot file {f} was simulated under another shared G than the present fits "
                            "give (the fits changed since); rerun 'ped2g null-refit --pilot'")
        seen.add(str(ds.attrs["population"]))
        means += list(np.asarray(ds["G"].values, dtype=float).mean(axis=1))
    missing = [p for p in populations if p not in seen]
    if missing:
        raise UserError(f"no pilot refits for population(s) {', '.join(missing)}; run "
                        "'ped2g null-refit --pilot' for them, or set compare.null_model.pilot_replicates: 0")
    return means


def read_refits(paths: list[str | os.PathLike], populations: list[str], traits: list[str]) -> RefitNull:
    """Gather chunk files (or folders holding them) for ``populations`` in that order.

    Raises
    ------
    UserError
        A file that is not ped2g's, traits that differ, a population without files or with
        other replicate numbers than the rest, or files built from different shared G matrices.
    """
    files: list[Path] = []
    for p in map(Path, paths):
        files += sorted(p.rglob("*.nc")) if p.is_dir() else [p]
    by_pop: dict[str, list[xr.Dataset]] = {}
    for f in files:
        ds = _open(f)
        if [str(t) for t in ds["trait"].values] != list(traits):
            raise UserError(f"refitting-null file {f} has traits {[str(t) for t in ds['trait'].values]}, "
                            f"the fits have {list(traits)}; rerun 'ped2g null-refit'")
        by_pop.setdefault(str(ds.attrs["population"]), []).append(ds)
    missing = [p for p in populations if p not in by_pop]
    if missing:
        raise UserError(f"no refitting-null files for population(s) {', '.join(missing)}; "
                        "run 'ped2g null-refit' for them")
    merged = {p: xr.concat(by_pop[p], dim="replicate").sortby("replicate") for p in populations}
    reps = [np.asarray(merged[p]["replicate"].values) for p in populations]
    for p, r in zip(populations, reps):
        if len(np.unique(r)) != len(r):
            raise UserError(f"refitting-null files of population '{p}' repeat replicate numbers; "
                            "remove stale files and rerun 'ped2g null-refit'")
        if not np.array_equal(r, reps[0]):
            raise UserError(f"population '{p}' has refitted replicates {r.min()}-{r.max()} ({len(r)}), "
                            f"'{populations[0]}' has {reps[0].min()}-{reps[0].max()} ({len(reps[0])}); "
                            "every population needs the same replicates")
    shared = [np.asarray(merged[p].attrs["shared_G"], dtype=float) for p in populations]
    if any(not np.allclose(s, shared[0], rtol=1e-12, atol=0) for s in shared):
        raise UserError("the refitting-null files were built from different shared G matrices (the fits "
                        "changed in between); rerun 'ped2g null-refit' for every population")
    draws = {merged[p].sizes["draw"] for p in populations}
    if len(draws) != 1:
        raise UserError("the refitting-null files have different numbers of draws per replicate; rerun "
                        "'ped2g null-refit' with one config")
    t = len(traits)
    stack = {k: np.stack([merged[p][k].values for p in populations], axis=2) for k in ("G", "P", "mean")}
    diag = pd.concat([merged[p][list(DIAGNOSTICS)].to_dataframe().reset_index().assign(population=p)
                      for p in populations], ignore_index=True)
    first = merged[populations[0]].attrs
    attrs = {"engine": {p: str(merged[p].attrs.get("engine", "")) for p in populations},
             **{k: first.get(k) for k in ("seed", "chains", "warmup", "draws", "pilot_replicates")}}
    if "shared_G_uncorrected" in first:
        attrs["shared_G_uncorrected"] = np.asarray(first["shared_G_uncorrected"], dtype=float).reshape(t, t)
    return RefitNull(populations=list(populations), traits=list(traits), replicates=reps[0],
                     G=stack["G"], P=stack["P"], mean=stack["mean"],
                     diagnostics=diag[["population", "replicate", *DIAGNOSTICS]],
                     shared_G=shared[0].reshape(t, t), attrs=attrs)
