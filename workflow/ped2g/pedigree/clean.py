"""Cleaning a raw pedigree table into a :class:`~ped2g.pedigree.core.Pedigree`.

What a field or breeding pedigree brings, and what happens to it:

* surrounding white space in an id, sire or dam cell -- stripped, and logged under the id that
  was repaired (for a sire or dam cell, that parent's id, with the offspring of the row);
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


def _text(series: pd.Series) -> pd.Series:
    """The column as pandas strings (a missing cell becomes the empty string)."""
    if not isinstance(series.dtype, pd.StringDtype):
        series = series.astype(object).where(series.notna(), "").astype("str")
    return series.fillna("").reset_index(drop=True)


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

    Notes
    -----
    All identifiers (ids, sires, dams) are turned into integer codes by one hashing pass, and
    every check below works on those integer arrays, so the cost is linear in the number of
    rows with no Python loop over rows.
    """
    where = f"pedigree table {source}" if source else "pedigree table"
    require_columns(frame, {"id": id_col, "sire": sire_col, "dam": dam_col}, source,
                    what="pedigree table")
    if len({id_col, sire_col, dam_col}) < 3:
        raise UserError(f"{where}: the id, sire and dam columns must be three different columns "
                        f"(got id '{id_col}', sire '{sire_col}', dam '{dam_col}')")
    if len(frame) == 0:
        raise UserError(f"{where} has a header but no data rows")
    codes_unknown = {str(m).strip() for m in missing} | {""}
    lines = np.asarray(frame.index)
    n_rows = len(frame)
    changes: list[pd.DataFrame] = []

    # 1. surrounding white space
    stripped = {}
    for role, name in (("id", id_col), ("sire", sire_col), ("dam", dam_col)):
        raw = _text(frame[name])
        clean = raw.str.strip()
        touched = (clean != raw).to_numpy(dtype=bool)
        if touched.any():
            # the record names the value repaired (for a parent cell, the sire's or dam's id)
            # and, for a parent, the offspring on whose row it was found
            fixed = clean[touched].to_numpy(dtype=object)
            if role == "id":
                action: object = "stripped"
            else:
                offspring = stripped["id"][touched]
                action = (f"stripped (the {role} of '" + offspring + "' on this line)").to_numpy(dtype=object)
            changes.append(_changes(lines[touched], fixed, f"white space around the {role}", action))
        stripped[role] = clean

    # 2. one integer code per distinct string; unknown-parent codes become -1
    code, names = pd.factorize(pd.concat([stripped["id"], stripped["sire"], stripped["dam"]],
                                         ignore_index=True))
    names = np.asarray(names, dtype=object)
    code = code.astype(np.int64)
    idc = code[:n_rows]
    sc = code[n_rows:2 * n_rows].copy()
    dc = code[2 * n_rows:].copy()
    unknown = np.zeros(len(names), dtype=bool)
    for value in codes_unknown:
        unknown |= names == value
    bad_id = unknown[idc]
    if bad_id.any():
        k = int(np.argmax(bad_id))
        if names[idc[k]] == "":
            raise UserError(f"{where} line {lines[k]}: the {id_col} column is blank; every row "
                            "needs an animal id")
        raise UserError(f"{where} line {lines[k]}: animal id '{names[idc[k]]}' is one of the "
                        f"unknown-parent codes ({_show(codes_unknown)}), so it could never be "
                        "named as a parent; rename the animal or change the unknown-parent codes")
    sc[unknown[sc]] = -1
    dc[unknown[dc]] = -1

    # 3. exact duplicates, then conflicting rows for one id
    table = pd.DataFrame({"id": idc, "sire": sc, "dam": dc})
    dup = table.duplicated(keep="first").to_numpy()
    if dup.any():
        first_line = pd.Series(lines).groupby([idc, sc, dc], sort=False).transform("first")
        changes.append(_changes(lines[dup], names[idc[dup]], "duplicate row",
                                "dropped (same as line " + first_line[dup].astype(str) + ")"))
        keep = ~dup
        idc, sc, dc, lines = idc[keep], sc[keep], dc[keep], lines[keep]
    clash = np.bincount(idc, minlength=len(names))[idc] > 1
    if clash.any():
        first = int(np.argmax(clash))
        rows = np.flatnonzero(idc == idc[first])[:2]
        shown = [f"line {lines[r]} (sire '{_name(names, sc[r])}', dam '{_name(names, dc[r])}')"
                 for r in rows]
        raise UserError(f"{where}: animal '{names[idc[first]]}' appears on {shown[0]} and "
                        f"{shown[1]} with different parents; keep one row per animal "
                        "(blank = unknown parent)")

    # 4. own parent, selfing, one id as both sire and dam
    own = (idc == sc) | (idc == dc)
    if own.any():
        k = int(np.argmax(own))
        role = "sire" if idc[k] == sc[k] else "dam"
        raise UserError(f"{where} line {lines[k]}: animal '{names[idc[k]]}' is listed as its own "
                        f"{role}; correct the parent on that line")
    if not hermaphrodite:
        selfed = (sc == dc) & (sc >= 0)
        if selfed.any():
            k = int(np.argmax(selfed))
            raise UserError(f"{where} line {lines[k]}: animal '{names[idc[k]]}' has "
                            f"'{names[sc[k]]}' as both sire and dam (selfing); correct the "
                            f"parents, or {HERMAPHRODITE_HINT}")
        is_dam = np.zeros(len(names), dtype=bool)
        is_dam[dc[dc >= 0]] = True
        as_both = (sc >= 0) & is_dam[np.maximum(sc, 0)]
        if as_both.any():
            k = int(np.argmax(as_both))
            j = int(np.argmax(dc == sc[k]))
            raise UserError(f"{where}: '{names[sc[k]]}' is the sire of '{names[idc[k]]}' "
                            f"(line {lines[k]}) and the dam of '{names[idc[j]]}' (line "
                            f"{lines[j]}); correct the pedigree, or {HERMAPHRODITE_HINT}")

    # 5. parents without a row of their own become founders
    n_listed = len(idc)
    pos_of = np.full(len(names), -1, dtype=np.int64)
    pos_of[idc] = np.arange(n_listed)
    lost_s = (sc >= 0) & (pos_of[np.maximum(sc, 0)] < 0)
    lost_d = (dc >= 0) & (pos_of[np.maximum(dc, 0)] < 0)
    added = np.zeros(0, dtype=np.int64)
    if lost_s.any() or lost_d.any():
        named = pd.DataFrame({
            "code": np.concatenate([sc[lost_s], dc[lost_d]]),
            "line": np.concatenate([lines[lost_s], lines[lost_d]]),
            "role": np.repeat(["sire", "dam"], [int(lost_s.sum()), int(lost_d.sum())]),
        }).sort_values("line", kind="stable").drop_duplicates("code", keep="first")
        for role in ("sire", "dam"):
            part = named[named["role"] == role]
            if len(part):
                changes.append(_changes(part["line"].to_numpy(),
                                        names[part["code"].to_numpy()],
                                        f"{role} has no row of its own",
                                        "added as a founder (both parents unknown)"))
        added = named["code"].to_numpy(dtype=np.int64)
        pos_of[added] = n_listed + np.arange(len(added))
    all_codes = np.concatenate([idc, added])
    n = len(all_codes)
    sire_pos = np.concatenate([np.where(sc >= 0, pos_of[np.maximum(sc, 0)], -1),
                               np.full(len(added), -1)]).astype(np.int64)
    dam_pos = np.concatenate([np.where(dc >= 0, pos_of[np.maximum(dc, 0)], -1),
                              np.full(len(added), -1)]).astype(np.int64)
    row_of = np.concatenate([lines, np.full(len(added), -1)])
    ids = names[all_codes]

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


def _name(names: np.ndarray, code: int) -> str:
    return names[code] if code >= 0 else ""


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
