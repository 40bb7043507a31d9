"""Findings at a glance: the calibrated comparisons put in words, generated from the numbers.

Input is the compare stage's tables as written (``compare/<method>.csv``, their own column
names), its ``loadings.csv`` (the fixed axes, to name trait combinations) and the reading rule.
Each supported row (``supported`` True: Holm-adjusted p at or below alpha within its family, see
:mod:`ped2g.compare.calibrated`) becomes one sentence saying which populations differ, along
which trait combination, by how much (the posterior mean beside what a shared G gives) and how
sure (the adjusted p-value). The rows that are not supported are counted and the pairs and
populations without any supported difference are named. One table (``findings.csv``) lists
every tested row with the compare tables' column names, supported rows first.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from .html import fmt
from .words import combination_in_words, ordinal

#: Columns of the findings table, all named as in the compare stage's tables, plus ``in_words``.
FINDING_COLUMNS = ["method", "statistic", "population", "population2", "axis", "axis2", "in_words",
                   "mean", "test", "test_value", "null_refit_median", "null_refit_lower",
                   "null_refit_upper", "p_value", "p_adjusted", "supported"]
#: Statistics measured in degrees (their values print with a degree sign).
DEGREES = {("skewers", "angle"), ("subspace", "angle"), ("gmax", "angle_between"),
           ("gmax", "angle_to_divergence")}
#: Plain names of the per-population statistics tested as deviations from the populations' mean.
PLAIN_NAMES = {
    ("skewers", "response_magnitude"): "response to random selection",
    ("gmax", "share"): "share of genetic variance along g_max",
    ("evolvability", "evolvability"): "evolvability",
    ("evolvability", "conditional_evolvability"): "conditional evolvability",
    ("evolvability", "respondability"): "respondability",
    ("evolvability", "autonomy"): "autonomy",
    ("evolvability", "integration"): "integration",
    ("dimensions", "effective_dimensions"): "effective number of dimensions",
    ("dimensions", "participation_ratio"): "participation ratio",
}


@dataclass
class Findings:
    """What :func:`findings` found: sentences for the page and the table for the CSV."""

    headline: str
    supported: list[str]
    not_supported: list[str]
    table: pd.DataFrame
    differing: list[str] = field(default_factory=list)
    tested: int = 0
    #: Rows whose own p-value is at or below alpha but whose Holm-adjusted p-value is not: not
    #: supported by the reading rule, named so that a reader sees what came close.
    leads: list[str] = field(default_factory=list)


def _present(value: Any) -> bool:
    return value is not None and not (isinstance(value, float) and np.isnan(value)) and str(value) != ""


def _int(value: Any) -> int | None:
    try:
        return int(float(value))
    except (TypeError, ValueError):
        return None


def _truthy(value: Any) -> bool:
    return str(value).strip().lower() in ("true", "1", "1.0", "yes")


def axis_vectors(loadings: pd.DataFrame | None, traits: list[str]) -> dict[tuple[str, int, int], np.ndarray]:
    """The fixed axes of ``loadings.csv`` as unit vectors over ``traits``.

    Keys: ``("tensor", k, j)`` (eigenvector j of eigentensor k) and ``("subspace", k, 0)``
    (axis k of H).
    """
    out: dict[tuple[str, int, int], np.ndarray] = {}
    if loadings is None or loadings.empty or "reference" not in loadings:
        return out
    for reference, kind in (("eigentensor_vector", "tensor"), ("subspace_axis", "subspace")):
        part = loadings[loadings["reference"] == reference]
        keys = ["axis", "axis2"] if kind == "tensor" else ["axis"]
        for key, rows in part.groupby(keys, dropna=False):
            key = key if isinstance(key, tuple) else (key,)
            k, j = _int(key[0]), _int(key[1]) if len(key) > 1 else 0
            if k is None or j is None:
                continue
            values = rows.set_index("trait")["value"]
            v = np.array([float(values.get(t, np.nan)) for t in traits])
            if np.all(np.isfinite(v)) and np.any(v):
                out[(kind, k, j)] = v / np.linalg.norm(v)
    return out


def _axis_words(method: str, statistic: str, row: pd.Series, axes: dict, traits: list[str]) -> str:
    k = _int(row.get("axis"))
    if method == "tensor" and k is not None:
        j = _int(row.get("axis2")) if statistic == "vector_variance" else 1
        v = axes.get(("tensor", k, j or 1))
        where = (f"eigenvector {j} of eigentensor {k}" if statistic == "vector_variance"
                 else f"eigentensor {k}, leading eigenvector")
        return f"{combination_in_words(v, traits)} ({where})" if v is not None else where
    if method == "subspace" and k is not None:
        v = axes.get(("subspace", k, 0))
        return (f"{combination_in_words(v, traits)} (axis {k} of H)" if v is not None else f"axis {k} of H")
    if method == "gmax" and statistic == "share":
        return "g_max"
    return ""


def _value(method: str, statistic: str, x: Any) -> str:
    if not _present(x):
        return "?"
    return f"{fmt(x, 2)}°" if (method, statistic) in DEGREES else fmt(x)


def _noise(method: str, statistic: str, row: pd.Series) -> str:
    return (f"a shared G gives {_value(method, statistic, row['null_refit_median'])} "
            f"[{_value(method, statistic, row['null_refit_lower'])}, "
            f"{_value(method, statistic, row['null_refit_upper'])}]")


def _sure(row: pd.Series) -> str:
    return f"Holm-adjusted p = {fmt(row['p_adjusted'], 2)}"


def _unadjusted(row: pd.Series) -> str:
    return (f"p = {fmt(row['p_value'], 2)} on its own, Holm-adjusted p = {fmt(row['p_adjusted'], 2)} "
            f"within its family of {_int(row.get('family_size')) or '?'} tests: not supported")


def _sentence(method: str, statistic: str, row: pd.Series, family: pd.DataFrame, words: str,
              sure=_sure) -> str:
    """One difference in words (``sure`` says how sure: the adjusted p-value by default)."""
    a, b = str(row.get("population", "")), str(row.get("population2", ""))
    mean = row["mean"]
    v = _value(method, statistic, mean)
    if _present(row.get("population2")):
        if (method, statistic) == ("gmax", "angle_between"):
            text = (f"The directions of most genetic variance (g_max) of {a} and {b} are turned {v} apart; "
                    f"for the tested value (an angle of {_value(method, statistic, row['test_value'])}) "
                    f"{_noise(method, statistic, row)}")
        elif (method, statistic) == ("skewers", "correlation"):
            text = (f"{a} and {b} respond to the same selection in different directions: mean correlation "
                    f"of their responses {v}, where {_noise(method, statistic, row)}")
        elif (method, statistic) == ("skewers", "angle"):
            text = (f"{a} and {b} respond to the same selection in directions {v} apart, where "
                    f"{_noise(method, statistic, row)}")
        elif (method, statistic) == ("skewers", "magnitude_ratio"):
            text = (f"{a} responds {v} times as strongly as {b} to the same selection; for |ln ratio| "
                    f"= {fmt(row['test_value'])} {_noise(method, statistic, row)}")
        elif (method, statistic) == ("distance", "riemannian"):
            text = (f"The G matrices of {a} and {b} are {v} apart (Riemannian distance), where "
                    f"{_noise(method, statistic, row)}")
        else:
            text = f"{statistic} of {a} and {b}: {v}, where {_noise(method, statistic, row)}"
    elif _present(row.get("population")):
        others = family[family["population"].astype(str) != a]["mean"]
        ref = float(np.mean(others)) if len(others) else float("nan")
        more = "more" if float(mean) > ref else "less"
        if (method, statistic) == ("tensor", "vector_variance"):
            text = (f"{a} has {more} genetic variance than the other populations along {words}: {v} "
                    f"against {_value(method, statistic, ref)} on average in the others")
        elif (method, statistic) == ("tensor", "coordinate"):
            text = (f"{a} stands apart from the other populations along {words}: coordinate {v} against "
                    f"{_value(method, statistic, ref)} on average in the others")
        elif (method, statistic) == ("subspace", "angle"):
            text = (f"{a}'s leading genetic subspace is turned {v} from {words}, against "
                    f"{_value(method, statistic, ref)} on average in the others")
        else:
            name = PLAIN_NAMES.get((method, statistic), statistic.replace("_", " "))
            text = (f"{a} has {'a larger' if more == 'more' else 'a smaller'} {name} than the other "
                    f"populations: {v} against {_value(method, statistic, ref)} on average")
        text += f"; for its distance from the populations' mean {_noise(method, statistic, row)}"
    else:
        if (method, statistic) == ("tensor", "variance"):
            text = (f"The G matrices differ among the populations as a set along {words}: variance "
                    f"among populations {v}, where {_noise(method, statistic, row)}")
        elif method == "subspace":
            text = (f"The populations' leading genetic subspaces share less than a shared G gives along "
                    f"{words}: {statistic} {v}, where {_noise(method, statistic, row)}")
        else:
            text = f"{statistic} ({method}): {v}, where {_noise(method, statistic, row)}"
    return f"{text} ({sure(row)})."


def findings(compare: dict[str, pd.DataFrame], loadings: pd.DataFrame | None, traits: list[str],
             populations: list[str], alpha: float) -> Findings:
    """Put the calibrated tests of ``compare`` (method -> table as written) in words."""
    axes = axis_vectors(loadings, traits)
    rows_out, supported, leads, by_pair, by_pop = [], [], [], set(), set()
    whole_set = False
    for method, frame in compare.items():
        if "p_adjusted" not in frame or "supported" not in frame:
            continue
        tested = frame[frame["p_adjusted"].notna()]
        for _, row in tested.iterrows():
            statistic = str(row["statistic"])
            words = _axis_words(method, statistic, row, axes, traits)
            is_supported = _truthy(row["supported"])
            record = {c: row.get(c, np.nan) for c in FINDING_COLUMNS if c not in ("method", "in_words")}
            record.update(method=method, in_words=words, supported=is_supported)
            rows_out.append(record)
            same = tested[(tested["statistic"] == row["statistic"])
                          & (tested["axis"].astype(str) == str(row.get("axis")))
                          & (tested["axis2"].astype(str) == str(row.get("axis2")))]
            if not is_supported:
                if _present(row.get("p_value")) and float(row["p_value"]) <= alpha * (1 + 1e-9):
                    leads.append((float(row["p_value"]),
                                  _sentence(method, statistic, row, same, words, sure=_unadjusted)))
                continue
            supported.append((float(row["p_adjusted"]), _sentence(method, statistic, row, same, words)))
            if _present(row.get("population2")):
                by_pair.add(frozenset((str(row["population"]), str(row["population2"]))))
            elif _present(row.get("population")):
                by_pop.add(str(row["population"]))
            else:
                whole_set = True
    table = pd.DataFrame(rows_out, columns=FINDING_COLUMNS)
    if len(table):
        table = table.sort_values(["supported", "p_adjusted"], ascending=[False, True], kind="stable")
        table = table.reset_index(drop=True)
    differing = [p for p in populations if p in by_pop or any(p in pair for pair in by_pair)]
    n_tested, n_yes = len(table), len(supported)
    if n_tested == 0:
        headline = "No statistic was tested against the refitting null, so no difference can be read here."
    elif n_yes == 0:
        headline = (f"None of the {n_tested} tested statistics differs by more than estimation noise alone "
                    "would give: the data do not show that these G matrices differ (which is not evidence "
                    "that they are equal).")
    else:
        who = (", ".join(differing) if differing else "the populations as a set")
        headline = (f"{n_yes} of {n_tested} tested statistics differ by more than estimation noise alone "
                    f"would give (alpha = {alpha:g} after Holm's adjustment). Populations that differ: {who}"
                    + (" (and the populations differ as a set)" if whole_set and differing else "") + ".")
    not_supported = []
    if n_tested:
        not_supported.append(f"{n_tested - n_yes} of {n_tested} tested statistics are not supported: the data "
                             "cannot tell them from estimation noise (the full list is in the table below "
                             "and in tables/findings.csv).")
        pairs = [(a, b) for i, a in enumerate(populations) for b in populations[i + 1:]]
        quiet_pairs = [f"{a} and {b}" for a, b in pairs if frozenset((a, b)) not in by_pair]
        if quiet_pairs and len(populations) > 1:
            not_supported.append("No pairwise statistic (skewers, g_max angle, distance) separates "
                                 + "; ".join(quiet_pairs) + ".")
        quiet = [p for p in populations if p not in by_pop]
        if quiet:
            not_supported.append("No per-population statistic sets apart " + ", ".join(quiet) + ".")
    return Findings(headline=headline, supported=[s for _, s in sorted(supported, key=lambda x: x[0])],
                    not_supported=not_supported, table=table, differing=differing, tested=n_tested,
                    leads=[s for _, s in sorted(leads, key=lambda x: x[0])])


__all__ = ["FINDING_COLUMNS", "Findings", "axis_vectors", "findings"]
