"""The breeding-value null: ``null_G.nc``, the randomisation null's G draws (``ped2g null``).

The file is an xarray Dataset in netCDF-4 (engine ``h5netcdf``) with

* variable ``G`` of dims ``(draw, population, trait, trait2)``, original units: draw ``s`` of
  dummy population ``j`` estimated from breeding values simulated with the observed draw ``s``;
* variable ``draw_index`` of dim ``draw``: the pooled observed draw of every fit each null draw
  belongs to (as :attr:`ped2g.contracts.fit_folder.FitSet.draw_index`);
* coordinates ``population`` (the dummy populations carry the names and sizes of the observed
  ones), ``trait`` and ``trait2``;
* attributes ``ped2g_kind = "null"``, ``ped2g_version``, ``estimator``, ``estimator_reason``,
  ``seed`` and the counts of observed draws that were not positive definite.

``ped2g null`` also writes ``summary.json`` (:data:`SUMMARY_FILE`) beside it. Later stages read
the draws only through :func:`read_null`, which refuses any other file and returns a
:class:`BreedingValueNull`; :func:`null_dataset` is the writer's check.
"""

from __future__ import annotations

import os
from pathlib import Path
from typing import Any, NamedTuple

import numpy as np
import xarray as xr

from .. import __version__
from ..errors import UserError
from ..io import load_netcdf

NULL_KIND = "null"
NULL_FILE = "null_G.nc"
SUMMARY_FILE = "summary.json"
DIMS = ("draw", "population", "trait", "trait2")


class BreedingValueNull(NamedTuple):
    """The breeding-value null as read from ``null_G.nc``.

    Attributes
    ----------
    G : numpy.ndarray, shape (S, m, t, t)
        Null G draws, original units.
    populations, traits : list of str
    draw_index : numpy.ndarray of int, shape (S,)
        The pooled observed draw each null draw belongs to.
    attrs : dict
        The file's attributes (``estimator``, ``estimator_reason``, ``seed``, ...).
    """

    G: np.ndarray
    populations: list[str]
    traits: list[str]
    draw_index: np.ndarray
    attrs: dict[str, Any]


def null_dataset(G: np.ndarray, populations: list[str], traits: list[str], draw_index: np.ndarray,
                 attrs: dict[str, Any] | None = None) -> xr.Dataset:
    """Label null G draws as the ``null_G.nc`` dataset.

    Parameters
    ----------
    G
        Null G draws, shape (S, m, t, t), original units.
    populations, traits
        Names for the population axis (length m) and the trait axes (length t).
    draw_index
        Shape (S,): the pooled observed draw each null draw belongs to.
    attrs
        Extra attributes (estimator, reason, seed, ...); scalars, strings or lists of them.
    """
    G = np.asarray(G, dtype=float)
    draw_index = np.asarray(draw_index, dtype=np.int64)
    if G.ndim != 4 or G.shape[2] != G.shape[3]:
        raise ValueError(f"null G must have shape (draw, population, trait, trait), got {G.shape}")
    if G.shape[1] != len(populations) or G.shape[2] != len(traits):
        raise ValueError(f"null G shape {G.shape} does not match {len(populations)} populations "
                         f"and {len(traits)} traits")
    if draw_index.shape != (G.shape[0],):
        raise ValueError(f"draw_index must have shape ({G.shape[0]},), got {draw_index.shape}")
    ds = xr.Dataset(
        {"G": (DIMS, G), "draw_index": (("draw",), draw_index)},
        coords={"draw": np.arange(G.shape[0]), "population": [str(p) for p in populations],
                "trait": [str(t) for t in traits], "trait2": [str(t) for t in traits]},
    )
    ds["G"].attrs["description"] = ("null G of each dummy population (animals shuffled among "
                                    "populations, population sizes kept), original units")
    ds["draw_index"].attrs["description"] = "pooled observed posterior draw this null draw was simulated from"
    ds.attrs.update({k: _attr_value(v) for k, v in (attrs or {}).items()})
    ds.attrs.update(ped2g_kind=NULL_KIND, ped2g_version=__version__)
    return ds


def _attr_value(value: Any) -> Any:
    if isinstance(value, (list, tuple)):
        return [str(v) for v in value] if any(isinstance(v, str) for v in value) else list(value)
    if value is None:
        return "none"
    if isinstance(value, (bool, np.bool_)):
        return int(value)
    return value


def write_null(path: str | os.PathLike, G: np.ndarray, populations: list[str], traits: list[str],
               draw_index: np.ndarray, attrs: dict[str, Any] | None = None) -> Path:
    """Write ``null_G.nc`` (see :func:`null_dataset` for the arguments); returns the path."""
    path = Path(path)
    null_dataset(G, populations, traits, draw_index, attrs).to_netcdf(path, engine="h5netcdf")
    return path


def read_null(path: str | os.PathLike) -> BreedingValueNull:
    """Read a ``null_G.nc`` written by ``ped2g null``.

    Parameters
    ----------
    path
        The file, or the folder holding ``null_G.nc``.

    Raises
    ------
    UserError
        If the file is missing, is not netCDF, or was not written by ``ped2g null``.
    """
    path = Path(path)
    if path.is_dir():
        path = path / NULL_FILE
    ds = load_netcdf(path, "null", "ped2g null")
    if ds.attrs.get("ped2g_kind") != NULL_KIND or "G" not in ds or "draw_index" not in ds:
        raise UserError(f"null file {path} was not written by 'ped2g null' "
                        "(no ped2g_kind='null' attribute or no G/draw_index); rerun 'ped2g null'")
    if tuple(ds["G"].dims) != DIMS:
        raise UserError(f"null file {path}: G has dims {tuple(ds['G'].dims)}, expected {DIMS}; "
                        "rerun 'ped2g null' with this version of ped2g")
    G = np.asarray(ds["G"].values, dtype=float)
    populations = [str(p) for p in ds["population"].values]
    traits = [str(t) for t in ds["trait"].values]
    draw_index = np.asarray(ds["draw_index"].values, dtype=np.int64)
    return BreedingValueNull(G=G, populations=populations, traits=traits, draw_index=draw_index,
                             attrs=dict(ds.attrs))
