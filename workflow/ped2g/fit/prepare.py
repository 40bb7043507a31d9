"""From the config, the phenotype table and a clean pedigree to one population's :class:`FitData`.

Steps (each user mistake ends in one :class:`~ped2g.errors.UserError` naming file, line, column
or config key):

1. check that the id, population, trait, fixed-effect and random-effect columns exist;
2. keep the records of the population; parse the traits as numbers (blank, ``NA``, ``NaN`` and
   ``.`` mean missing) and drop records with no trait value;
3. link records to the pedigree; a phenotyped animal missing from the pedigree is added as a
   founder (both parents unknown) and logged -- its relationships to the others are then taken
   as zero, which is an assumption the user should know about;
4. prune the pedigree to the phenotyped animals and their informative ancestors;
5. build the fixed-effect design (an intercept, treatment-coded categorical columns, centred and
   scaled numeric columns) and the levels of each extra random effect (a blank or missing-value
   cell is an unknown level: no contribution from that effect); warn when animals have repeated
   records and no random effect is on the id column;
6. standardise each trait: ``(y - mean) / sd`` over the observed records of the population.
"""

from __future__ import annotations

import logging
from typing import Any

import numpy as np
import pandas as pd

from ..errors import UserError
from ..io import require_columns
from ..pedigree.core import Pedigree
from .data import UNKNOWN_LEVEL, FitData, RandomEffect

MISSING_VALUES = frozenset({"", "na", "nan", ".", "n/a", "null"})


def parse_numeric(frame: pd.DataFrame, column: str, source: str) -> np.ndarray:
    """Parse a column of text cells as floats; missing codes become NaN.

    Raises
    ------
    UserError
        Naming the first line whose cell is not a number (or is infinite).
    """
    text = frame[column].fillna("").astype(str).str.strip()
    is_missing = text.str.lower().isin(MISSING_VALUES)
    values = pd.to_numeric(text.where(~is_missing), errors="coerce").to_numpy(dtype=float)
    bad = (~is_missing.to_numpy()) & ~np.isfinite(values)
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise UserError(f"{source} line {frame.index[i]}: column '{column}' holds {text.iloc[i]!r}, "
                        f"which is not a number; use a number, or leave the cell blank (or NA) if missing")
    return values


def add_missing_founders(pedigree: Pedigree, ids: list[str]) -> tuple[Pedigree, list[str]]:
    """Append animals absent from the pedigree as founders (parents unknown, F = 0)."""
    index = pedigree.index
    absent = sorted({i for i in ids if i not in index})
    if not absent:
        return pedigree, []
    n_new = len(absent)
    ped = Pedigree(ids=np.concatenate([np.asarray(pedigree.ids, dtype=object), np.array(absent, dtype=object)]),
                   sire=np.concatenate([pedigree.sire, -np.ones(n_new, dtype=np.int64)]),
                   dam=np.concatenate([pedigree.dam, -np.ones(n_new, dtype=np.int64)]),
                   generation=np.concatenate([pedigree.generation, np.zeros(n_new, dtype=np.int64)]),
                   inbreeding=np.concatenate([pedigree.inbreeding, np.zeros(n_new)]))
    return ped, absent


def _prune(pedigree: Pedigree, keep_ids: list[str]) -> Pedigree:
    from ..pedigree.prune import prune

    return prune(pedigree, keep_ids)


def design_matrix(frame: pd.DataFrame, fixed: dict[str, str], source: str
                  ) -> tuple[np.ndarray, list[str], np.ndarray, list[str]]:
    """Intercept + fixed effects: treatment-coded categorical, centred and scaled numeric columns.

    Returns
    -------
    X, names, x_scale, notes
    """
    n = len(frame)
    cols = [np.ones(n)]
    names = ["intercept"]
    scales = [1.0]
    notes: list[str] = []
    for column, kind in fixed.items():
        if kind == "numeric":
            x = parse_numeric(frame, column, source)
            if np.isnan(x).any():
                i = int(np.flatnonzero(np.isnan(x))[0])
                raise UserError(f"{source} line {frame.index[i]}: fixed-effect column '{column}' is empty; "
                                f"fill it in or remove the record")
            sd = float(np.std(x, ddof=1)) if n > 1 else 0.0
            if not sd > 0:
                notes.append(f"fixed effect '{column}' is constant in this population and was left out")
                continue
            cols.append((x - x.mean()) / sd)
            names.append(column)
            scales.append(sd)
        elif kind == "categorical":
            text = frame[column].fillna("").astype(str).str.strip()
            empty = text.str.lower().isin(MISSING_VALUES)
            if empty.any():
                i = int(np.flatnonzero(empty.to_numpy())[0])
                raise UserError(f"{source} line {frame.index[i]}: fixed-effect column '{column}' is empty; "
                                f"fill it in or remove the record")
            levels = sorted(text.unique())
            if len(levels) < 2:
                notes.append(f"fixed effect '{column}' has one level in this population and was left out")
                continue
            for level in levels[1:]:
                cols.append((text == level).to_numpy(dtype=float))
                names.append(f"{column}[{level}]")
                scales.append(1.0)
        else:
            raise UserError(f"config key 'fixed.{column}' is {kind!r}; allowed: categorical, numeric")
    X = np.column_stack(cols)
    rank = np.linalg.matrix_rank(X)
    if rank < X.shape[1]:
        raise UserError(f"the fixed effects ({', '.join(fixed)}) are confounded with each other in "
                        f"{source} (design rank {rank} < {X.shape[1]} columns); remove one of them in "
                        f"config key 'fixed'")
    return X, names, np.asarray(scales), notes


def standardise(Y: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Centre each trait on the mean of its observed records and divide by their SD (ddof 1).

    Returns ``(y, center, scale)`` with ``y = (Y - center) / scale`` (NaN stays NaN). The fit
    and the refitting null (:mod:`ped2g.null.refit`) standardise records through this one
    function, so a simulated data set is put on its scale exactly as observed records are.
    """
    center = np.zeros(Y.shape[1])
    scale = np.ones(Y.shape[1])
    for j in range(Y.shape[1]):
        obs = Y[~np.isnan(Y[:, j]), j]
        center[j] = float(np.mean(obs))
        scale[j] = float(np.std(obs, ddof=1))
    return (Y - center) / scale, center, scale


def random_effect(frame: pd.DataFrame, spec: dict[str, str], population: str,
                  source: str) -> tuple[RandomEffect, str | None]:
    """The levels of one extra random effect (config key ``random``) over ``frame``'s records.

    A blank cell or a missing-value code is an unknown level (:data:`~ped2g.fit.data.UNKNOWN_LEVEL`):
    that record gets no contribution from the effect (docs/methods.md §2.13). Returns the effect
    and a note saying how many records that concerns (None when every level is known).

    Raises
    ------
    UserError
        When no record of the population has a known level, or only one level is known (its
        covariance cannot then be estimated).
    """
    name, column = spec["name"], spec["column"]
    text = frame[column].fillna("").astype(str).str.strip()
    unknown = text.str.lower().isin(MISSING_VALUES).to_numpy()
    what = f"random effect '{name}' (config key 'random', column '{column}')"
    if unknown.all():
        raise UserError(f"{what} has no known level in population '{population}' of {source}: every "
                        f"one of its {len(text)} records is blank or a missing-value code; fill the "
                        f"column in or remove the effect from config key 'random'")
    levels, level = np.unique(text.to_numpy(dtype=str)[~unknown], return_inverse=True)
    if len(levels) < 2:
        raise UserError(f"{what} has one known level ({str(levels[0])!r}) in population '{population}' of "
                        f"{source}: the covariance of a single level cannot be estimated (its one value "
                        f"is confounded with the intercept); remove the effect from config key "
                        f"'random' or check the column")
    full = np.full(len(text), UNKNOWN_LEVEL, dtype=np.int64)
    full[~unknown] = level
    note = (f"random effect '{name}' (column {column}): {int(unknown.sum())} records with an unknown "
            f"level get no contribution from it") if unknown.any() else None
    return RandomEffect(name=name, column=column, level=full, levels=[str(v) for v in levels]), note


def repeated_records_warning(ids: pd.Series, id_column: str, random: list[dict[str, str]]) -> str | None:
    """The warning for repeated records without a permanent-environment effect, or None.

    When an animal has several records and no extra random effect groups records by the id
    column, the animal's lasting non-genetic deviations are shared by its records like a genetic
    effect and end up in G (common practice: add a permanent-environment effect on the id
    column; docs/methods.md §2.13).
    """
    counts = ids.value_counts()
    repeated = int((counts > 1).sum())
    if not repeated or any(r["column"] == id_column for r in random):
        return None
    return (f"{repeated} animals have more than one record (up to "
            f"{int(counts.max())}) and no random effect is on the id column '{id_column}': their lasting "
            f"non-genetic differences will be counted as additive genetic variance, inflating G and "
            f"the heritabilities; add a permanent-environment effect to config key 'random' "
            f"(e.g. {{name: permanent, column: {id_column}}})")


def prepare(config: dict[str, Any], phenotypes: pd.DataFrame, pedigree: Pedigree, population: str,
            source: str = "phenotype table", logger: logging.Logger | None = None) -> FitData:
    """Prepare one population's data for an engine.

    Parameters
    ----------
    config
        The validated config (defaults filled in).
    phenotypes
        The phenotype table as read by :func:`ped2g.io.read_table` (text cells; index = line).
    pedigree
        The clean pedigree (all populations).
    population
        The population to fit.
    source
        How messages name the phenotype table (its path).

    Raises
    ------
    UserError
        Missing columns, non-numeric trait cells, a population without phenotyped animals, a
        trait with no variance or too few records, confounded fixed effects, an extra random
        effect with fewer than two known levels.
    """
    log = logger or logging.getLogger("ped2g.fit")
    cols = config["data"]["columns"]
    traits = list(config["traits"])
    fixed = dict(config.get("fixed") or {})
    random = list(config.get("random") or [])
    require_columns(phenotypes, {"id": cols["id"], "population": cols["population"]}, source,
                    "phenotype table")
    for t in traits:
        if t not in phenotypes.columns:
            raise UserError(f"phenotype table {source} has no column '{t}' listed in config key 'traits' "
                            f"(columns are: {', '.join(map(str, phenotypes.columns))})")
    for c in fixed:
        if c not in phenotypes.columns:
            raise UserError(f"phenotype table {source} has no column '{c}' named in config key 'fixed' "
                            f"(columns are: {', '.join(map(str, phenotypes.columns))})")
    for r in random:
        if r["column"] not in phenotypes.columns:
            raise UserError(f"phenotype table {source} has no column '{r['column']}', which config key "
                            f"'random' names for random effect '{r['name']}'; add the column or fix "
                            f"the entry (columns are: {', '.join(map(str, phenotypes.columns))})")
    pops = phenotypes[cols["population"]].fillna("").astype(str).str.strip()
    frame = phenotypes.loc[pops == population]
    if frame.empty:
        present = ", ".join(sorted(pops.unique())[:20])
        raise UserError(f"population '{population}' has no records in {source} (column "
                        f"'{cols['population']}'; populations present: {present})")
    notes: list[str] = []
    Y = np.column_stack([parse_numeric(frame, t, source) for t in traits])
    has_any = ~np.all(np.isnan(Y), axis=1)
    if not has_any.any():
        raise UserError(f"population '{population}' has no phenotyped animals in {source}: every "
                        f"record has all of the traits ({', '.join(traits)}) missing")
    if not has_any.all():
        notes.append(f"{int((~has_any).sum())} records with no trait value were dropped")
        frame = frame.loc[has_any]
        Y = Y[has_any]
    ids = frame[cols["id"]].fillna("").astype(str).str.strip()
    if (ids == "").any():
        i = int(np.flatnonzero((ids == "").to_numpy())[0])
        raise UserError(f"{source} line {frame.index[i]}: the id column '{cols['id']}' is empty")
    ped, absent = add_missing_founders(pedigree, ids.tolist())
    if absent:
        shown = ", ".join(absent[:5]) + (" ..." if len(absent) > 5 else "")
        notes.append(f"{len(absent)} phenotyped animals absent from the pedigree were added as founders "
                     f"(no known parents; taken as unrelated to the rest): {shown}")
    keep = sorted(set(ids))
    ped = _prune(ped, keep)
    index = ped.index
    record_animal = np.array([index[i] for i in ids], dtype=np.int64)
    phenotyped = np.zeros(ped.n, dtype=bool)
    phenotyped[record_animal] = True

    X, x_names, x_scale, x_notes = design_matrix(frame, fixed, source)
    notes += x_notes
    effects = []
    for r in random:
        effect, note = random_effect(frame, r, population, source)
        effects.append(effect)
        if note:
            notes.append(note)
    repeated = repeated_records_warning(ids, cols["id"], random)

    n_params = X.shape[1] + 2 + len(effects)
    for j, t in enumerate(traits):
        obs = Y[~np.isnan(Y[:, j]), j]
        if len(obs) <= n_params:
            raise UserError(f"trait '{t}' has {len(obs)} records in population '{population}', not more "
                            f"than the {n_params} parameters per trait of the model (intercept, fixed "
                            f"effects, variances); add records or drop fixed/random effects")
        if not float(np.std(obs, ddof=1)) > 0:
            raise UserError(f"trait '{t}' has no variance in population '{population}' (every record is "
                            f"{obs[0]:g}); remove it from config key 'traits'")
    y, center, scale = standardise(Y)
    for note in notes:
        log.info("population %s: %s", population, note)
    if repeated:
        # The one place the fit and the refitting null warn about it (both prepare through here).
        log.warning("population %s: %s", population, repeated)
        notes.append(repeated)
    return FitData(population=population, traits=traits, pedigree=ped, phenotyped=phenotyped,
                   record_animal=record_animal, y=y, y_center=center, y_scale=scale, X=X,
                   x_names=x_names, random=effects, x_scale=x_scale, notes=notes)
