"""Fixtures for the compare tests: small fake fit folders and null files written through the
project's own contracts (ped2g.contracts.fit_folder.posterior_dataset, ped2g.contracts.breeding_value_null.write_null)."""

from __future__ import annotations

from pathlib import Path

import arviz as az
import numpy as np
import pandas as pd
import pytest
import yaml

from ped2g.contracts.fit_folder import posterior_dataset


def random_spd(rng: np.random.Generator, t: int, size: tuple[int, ...] = ()) -> np.ndarray:
    """Random symmetric positive-definite matrices, shape (*size, t, t)."""
    X = rng.standard_normal(size + (t, t + 2))
    return X @ np.swapaxes(X, -1, -2) / (t + 2) + 0.1 * np.eye(t)


def circle_skewers(n: int) -> np.ndarray:
    """Evenly spaced unit vectors on the circle: the mean over them is the trapezoid rule of a
    periodic integrand, which converges geometrically (a standard result of numerical analysis)."""
    theta = 2 * np.pi * (np.arange(n) + 0.5) / n
    return np.column_stack([np.cos(theta), np.sin(theta)])


def write_fit(folder: Path, population: str, traits: list[str], G: np.ndarray,
              mean: np.ndarray | None = None, P: np.ndarray | None = None, chains: int = 2) -> Path:
    """A fit folder with posterior.nc (G of shape (S, t, t), S divisible by ``chains``) and
    pedigree_used.csv."""
    S, t, _ = G.shape
    if P is None:
        P = G + np.eye(t)
    R = P - G
    if mean is None:
        mean = np.full((S, t), 10.0)
    shape = (chains, S // chains)
    ds = posterior_dataset(population, traits, G.reshape(shape + (t, t)), R.reshape(shape + (t, t)),
                           P.reshape(shape + (t, t)), mean.reshape(shape + (t,)))
    folder.mkdir(parents=True, exist_ok=True)
    az.InferenceData(posterior=ds).to_netcdf(str(folder / "posterior.nc"), engine="h5netcdf")
    pd.DataFrame({"id": [f"{population}{i}" for i in range(4)], "sire": "", "dam": "",
                  "phenotyped": 1}).to_csv(folder / "pedigree_used.csv", index=False)
    return folder


def write_config(path: Path, **compare: object) -> Path:
    config = {"traits": ["a", "b", "c"], "sampling": {"seed": 3},
              "compare": {"skewers": 200, "interval_mass": 0.9, **compare}}
    path.write_text(yaml.safe_dump(config))
    return path


@pytest.fixture
def fit_folders(tmp_path: Path) -> list[Path]:
    """Three populations, three traits, 40 draws each, distinct means."""
    rng = np.random.default_rng(11)
    traits = ["a", "b", "c"]
    folders = []
    for j, pop in enumerate(["north", "south", "east"]):
        base = random_spd(rng, 3)
        G = base + 0.05 * random_spd(rng, 3, (40,))
        mean = np.array([10.0, 20.0, 5.0]) + j + 0.1 * rng.standard_normal((40, 3))
        folders.append(write_fit(tmp_path / "fits" / pop, pop, traits, G, mean=mean))
    return folders
