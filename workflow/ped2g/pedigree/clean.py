"""Cleaning a raw pedigree table into a :class:`~ped2g.pedigree.core.Pedigree`.

What a field or breeding pedigree brings, and what happens to it:

* surrounding white space in an id, sire or dam cell -- stripped, and logged;
* a parent cell holding an unknown-parent code (default ``0``, ``NA``, ``.``, or blank) -- the
  parent is unknown;
* exact duplicate rows -- one is kept, the others are logged as dropped;
* the same id with different parents -- refused, naming the id and both lines;
* a parent that never appears as an id -- added as a founder (both parents unknown), logged;
* an animal that is its own parent, or its own ancestor (a cycle) -- refused, printing the cycle;
* an id used as sire for some offspring and dam for others, or sire equal to dam (selfing) --
  refused unless ``hermaphrodite=True``;
* rows in any order -- sorted so that parents come first, by generation number (founders 0,
  otherwise 1 + the larger generation of the known parents), ties kept in file order.

Identifiers are strings kept exactly as written (leading zeros and case are kept). Every step is
vectorised over rows (pandas/numpy), so a pedigree of a million animals cleans in seconds.
"""

from __future__ import annotations

import os
from collections.abc import Iterable

import numpy as np
import pandas as pd

from ..errors import UserError
from ..io import read_table, require_columns
from .core import Pedigree
from .relationships import inbreeding

__all__ = ["DEFAULT_MISSING", "CHANGE_COLUMNS", "read_raw_pedigree", "clean_pedigree",
           "order_parents_first"]

DEFAULT_MISSING: tuple[str, ...] = ("0", "NA", ".", "")
CHANGE_COLUMNS = ["row", "id", "problem", "action"]
HERMAPHRODITE_HINT = ("allow it with --hermaphrodite (config: data.hermaphrodite: true) if the "
                      "species can be both sire and dam")


def read_raw_pedigree(path: str | os.PathLike, id_col: str = "id", sire_col: str = "sire",
                      dam_col: str = "dam", missing: Iterable[str] = DEFAULT_MISSING,
                      hermaphrodite: bool = False) -> tuple[Pedigree, pd.DataFrame]:
    """Read and clean a raw pedigree table (CSV, TSV or Excel).

    Parameters
    ----------
    path
        The raw table; any other columns are ignored.
    id_col, sire_col, dam_col
        Names of the animal, sire (father) and dam (mother) columns.
    missing
        Codes that mean "parent unknown" in the sire and dam columns; a blank cell always does.
    hermaphrodite
        Allow an animal to be sire of some offspring and dam of others, and allow selfing.

    Returns
    -------
    (Pedigree, pandas.DataFrame)
        The clean pedigree (parents first, with generation and inbreeding) and the table of
        every change made, with columns ``row`` (line in the file), ``id``, ``problem``,
        ``action``.

    Raises
    ------
    UserError
        For an unreadable table or a pedigree that cannot be repaired without guessing; the
        message names the file, the line and the id.
    """
    frame = read_table(path, what="pedigree table")
    return clean_pedigree(frame, id_col=id_col, sire_col=sire_col, dam_col=dam_col,
                          missing=missing, hermaphrodite=hermaphrodite, source=str(path))


def _text(series: pd.Series) -> np.ndarray:
    values = series.to_numpy(dtype=object, na_value="")
    if not all(isinstance(v, str) for v in values[:1000]):  # cheap check on a sample first
        values = np.array(["" if v is None or (isinstance(v, float) and np.isnan(v)) else str(v)
                           for v in values], dtype=object)
    return values


def _changes(rows, ids, problem: str, action) -> pd.DataFrame:
    rows = np.asarray(rows)
    return pd.DataFrame({"row": rows, "id": np.asarray(ids, dtype=object),
                         "problem": problem,
                         "action": np.broadcast_to(np.asarray(action, dtype=object), rows.shape)})


def clean_pedigree(frame: pd.DataFrame, id_col: str = "id", sire_col: str = "sire",
                   dam_col: str = "dam", missing: Iterable[str] = DEFAULT_MISSING,
                   hermaphrodite: bool = False,
                   source: str = "") -> tuple[Pedigree, pd.DataFrame]:
    """Clean a pedigree table already read by :func:`ped2g.io.read_table`.

    Parameters are those of :func:`read_raw_pedigree`; ``frame`` has one string cell per
    field and its index is the line number in the file; ``source`` names the file in messages.
    """
    where = f"pedigree table {source}" if source else "pedigree table"
    require_columns(frame, {"id": id_col, "sire": sire_col, "dam": dam_col}, source,
                    what="pedigree table")
    if len({id_col, sire_col, dam_col}) < 3:
        raise UserError(f"{where}: the id, sire and dam columns must be three different columns "
                        f"(got id '{id_col}', sire '{sire_col}', dam '{dam_col}')")
    if len(frame) == 0:
        raise UserError(f"{where} has a header but no data rows")
    codes = {str(m).strip() for m in missing} | {""}
    lines = np.asarray(frame.index)
    changes: list[pd.DataFrame] = []

    # 1. surrounding white space
    cols = {}
    for role, name in (("id", id_col), ("sire", sire_col), ("dam", dam_col)):
        raw = pd.Series(_text(frame[name]), dtype=object)
        stripped = raw.str.strip()
        touched = (stripped != raw).to_numpy()
        if touched.any():
            ids_here = (cols["id"][touched] if role != "id" else stripped.to_numpy()[touched])
            changes.append(_changes(lines[touched], ids_here,
                                    f"white space around the {role}", "stripped"))
        cols[role] = stripped.to_numpy(dtype=object)
    ids, sire, dam = cols["id"], cols["sire"], cols["dam"]

    # 2. ids that are blank or read as unknown; unknown-parent codes
    bad_id = pd.Series(ids).isin(codes).to_numpy()
    if bad_id.any():
        k = int(np.argmax(bad_id))
        if ids[k] == "":
            raise UserError(f"{where} line {lines[k]}: the {id_col} column is blank; every row "
                            "needs an animal id")
        raise UserError(f"{where} line {lines[k]}: animal id '{ids[k]}' is one of the "
                        f"unknown-parent codes ({_show(codes)}), so it could never be named as a "
                        "parent; rename the animal or change the unknown-parent codes")
    sire = np.where(pd.Series(sire).isin(codes).to_numpy(), "", sire)
    dam = np.where(pd.Series(dam).isin(codes).to_numpy(), "", dam)

    # 3. exact duplicates, then conflicting rows for one id
    table = pd.DataFrame({"id": ids, "sire": sire, "dam": dam, "line": lines})
    dup = table.duplicated(["id", "sire", "dam"], keep="first").to_numpy()
    if dup.any():
        first_line = table.groupby(["id", "sire", "dam"], sort=False)["line"].transform("first")
        changes.append(_changes(lines[dup], ids[dup], "duplicate row",
                                "dropped (same as line " + first_line[dup].astype(str) + ")"))
        table = table.loc[~dup].reset_index(drop=True)
    clash = table["id"].duplicated(keep=False).to_numpy()
    if clash.any():
        name = table["id"].to_numpy()[np.argmax(clash)]
        both = table.loc[table["id"].to_numpy() == name].iloc[:2]
        shown = [f"line {r.line} (sire '{r.sire}', dam '{r.dam}')" for r in both.itertuples()]
        raise UserError(f"{where}: animal '{name}' appears on {shown[0]} and {shown[1]} with "
                        "different parents; keep one row per animal (blank = unknown parent)")
    ids = table["id"].to_numpy(dtype=object)
    sire = table["sire"].to_numpy(dtype=object)
    dam = table["dam"].to_numpy(dtype=object)
    lines = table["line"].to_numpy()

    # 4. own parent, selfing, one id as both sire and dam
    own = (ids == sire) | (ids == dam)
    if own.any():
        k = int(np.argmax(own))
        role = "sire" if ids[k] == sire[k] else "dam"
        raise UserError(f"{where} line {lines[k]}: animal '{ids[k]}' is listed as its own "
                        f"{role}; correct the parent on that line")
    if not hermaphrodite:
        selfed = (sire == dam) & (sire != "")
        if selfed.any():
            k = int(np.argmax(selfed))
            raise UserError(f"{where} line {lines[k]}: animal '{ids[k]}' has '{sire[k]}' as both "
                            f"sire and dam (selfing); correct the parents, or "
                            f"{HERMAPHRODITE_HINT}")
        known_dams = pd.unique(dam[dam != ""])
        as_both = (pd.Series(sire).isin(known_dams).to_numpy()) & (sire != "")
        if as_both.any():
            k = int(np.argmax(as_both))
            parent = sire[k]
            j = int(np.argmax(dam == parent))
            raise UserError(f"{where}: '{parent}' is the sire of '{ids[k]}' (line {lines[k]}) "
                            f"and the dam of '{ids[j]}' (line {lines[j]}); correct the pedigree, "
                            f"or {HERMAPHRODITE_HINT}")

    # 5. parents without a row of their own become founders
    index = pd.Index(ids)
    if not index.is_unique:  # pragma: no cover - guaranteed by step 3
        raise AssertionError("ids not unique after cleaning")
    n_listed = len(ids)
    sire_pos = index.get_indexer(sire)
    dam_pos = index.get_indexer(dam)
    lost_s = (sire_pos < 0) & (sire != "")
    lost_d = (dam_pos < 0) & (dam != "")
    if lost_s.any() or lost_d.any():
        named = pd.DataFrame({
            "name": np.concatenate([sire[lost_s], dam[lost_d]]),
            "line": np.concatenate([lines[lost_s], lines[lost_d]]),
            "role": np.repeat(["sire", "dam"], [int(lost_s.sum()), int(lost_d.sum())]),
        }).sort_values("line", kind="stable").drop_duplicates("name", keep="first")
        for role in ("sire", "dam"):
            part = named[named["role"] == role]
            if len(part):
                changes.append(_changes(part["line"].to_numpy(), part["name"].to_numpy(),
                                        f"{role} has no row of its own",
                                        "added as a founder (both parents unknown)"))
        added = named["name"].to_numpy(dtype=object)
        ids = np.concatenate([ids, added])
        index = pd.Index(ids)
        sire_pos = index.get_indexer(sire)
        dam_pos = index.get_indexer(dam)
    n = len(ids)
    sire_pos = np.concatenate([sire_pos, np.full(n - n_listed, -1)]).astype(np.int64)
    dam_pos = np.concatenate([dam_pos, np.full(n - n_listed, -1)]).astype(np.int64)
    row_of = np.concatenate([lines, np.full(n - n_listed, -1)])

    # 6. parents first, generation numbers, cycles
    order, generation = order_parents_first(sire_pos, dam_pos)
    if order is None:
        raise UserError(f"{where}: {_describe_cycle(generation, sire_pos, dam_pos, ids, row_of)}")
    new_pos = np.empty(n, dtype=np.int64)
    new_pos[order] = np.arange(n)
    s = sire_pos[order]
    d = dam_pos[order]
    s = np.where(s >= 0, new_pos[np.maximum(s, 0)], -1)
    d = np.where(d >= 0, new_pos[np.maximum(d, 0)], -1)
    ped = Pedigree(ids=ids[order], sire=s, dam=d, generation=generation[order],
                   inbreeding=inbreeding(s, d))
    if changes:
        log = pd.concat(changes, ignore_index=True)
        log = log.sort_values("row", kind="stable").reset_index(drop=True)
    else:
        log = pd.DataFrame({c: pd.Series(dtype=object) for c in CHANGE_COLUMNS})
    return ped, log[CHANGE_COLUMNS]


def _show(codes: set[str]) -> str:
    return ", ".join(repr(c) if c else "blank" for c in sorted(codes))


def order_parents_first(sire: np.ndarray, dam: np.ndarray) -> tuple[np.ndarray | None, np.ndarray]:
    """Order animals so that parents come before offspring (Kahn's algorithm, level by level).

    Parameters
    ----------
    sire, dam : numpy.ndarray of int64
        Parent positions in any order, -1 = unknown.

    Returns
    -------
    (order, generation)
        ``order`` sorts by (generation, original position); ``generation`` is 0 for founders and
        ``1 + max(generation of known parents)`` otherwise. If the parent links contain a cycle,
        ``order`` is ``None`` and ``generation`` is -1 for every animal in or below a cycle.

    Notes
    -----
    Each pass takes the animals whose parents are all placed (the current generation), and
    lowers the count of unplaced parents of their offspring; cost ``O(n + links)`` plus one
    numpy call per generation.
    """
    n = len(sire)
    idx = np.arange(n, dtype=np.int64)
    ks = sire >= 0
    kd = dam >= 0
    parents = np.concatenate([sire[ks], dam[kd]])
    kids = np.concatenate([idx[ks], idx[kd]])
    by_parent = np.argsort(parents, kind="stable")
    kids = kids[by_parent]
    ptr = np.zeros(n + 1, dtype=np.int64)
    np.cumsum(np.bincount(parents, minlength=n), out=ptr[1:])
    waiting = ks.astype(np.int64) + kd.astype(np.int64)
    generation = np.full(n, -1, dtype=np.int64)
    frontier = idx[waiting == 0]
    g = 0
    while frontier.size:
        generation[frontier] = g
        starts = ptr[frontier]
        counts = ptr[frontier + 1] - starts
        total = int(counts.sum())
        if total == 0:
            break
        offsets = np.repeat(starts - np.cumsum(counts) + counts, counts) + np.arange(total)
        child, times = np.unique(kids[offsets], return_counts=True)
        waiting[child] -= times
        frontier = child[waiting[child] == 0]
        g += 1
    if np.any(generation < 0):
        return None, generation
    return np.lexsort((idx, generation)), generation


def _describe_cycle(generation, sire, dam, ids, row_of) -> str:
    """Follow unplaced parents from an unplaced animal until one repeats; print that loop."""
    start = int(np.argmax(generation < 0))
    seen: dict[int, int] = {}
    path: list[int] = []
    k = start
    while k not in seen:
        seen[k] = len(path)
        path.append(k)
        k = int(sire[k]) if sire[k] >= 0 and generation[sire[k]] < 0 else int(dam[k])
    loop = path[seen[k]:] + [k]

    def name(i: int) -> str:
        return f"'{ids[i]}' (line {row_of[i]})" if row_of[i] >= 0 else f"'{ids[i]}'"

    chain = " <- ".join(name(i) for i in loop)
    return (f"animal '{ids[loop[0]]}' is its own ancestor: {chain}, where x <- y means y is a "
            "parent of x; correct one of these rows")
