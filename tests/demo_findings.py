"""The demo study's designed differences, read back from the compare stage's tables.

Shared by the demo-findings test (tests/workflow/test_demo_findings.py, on the workflow's CSV
files) and the power script (tests/null/refit_calibration.py --truth, on simulated studies), so
that the power quoted in the README is the power of exactly what the test asserts.

The true direction of reduction is derived from the true matrices alone, as the generalised
eigenvector of (G_reduced, G_reference) with the smallest eigenvalue (exact identity: it
minimises v'G_reduced v / v'G_reference v), on the variance-standardised scale the demo config
compares on. "At or below" is the reading rule's comparison (ped2g.compare.calibrated.at_or_below).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import scipy.linalg

from ped2g.compare.calibrated import at_or_below


def population_with(truth: dict, design: str) -> str:
    """The one population of the truth file with this design."""
    names = [p for p, v in truth["populations"].items() if v["design"] == design]
    assert len(names) == 1, f"the demo should have one '{design}' population"
    return names[0]


def reduced_direction(truth: dict) -> np.ndarray:
    """Unit vector along which the reduced population's G is least, relative to the reference's."""
    g_red = np.array(truth["populations"][population_with(truth, "reduced")]["G_variance_standardised"])
    g_ref = np.array(truth["populations"][population_with(truth, "reference")]["G_variance_standardised"])
    _ratios, vectors = scipy.linalg.eigh(g_red, g_ref)
    return vectors[:, 0] / np.linalg.norm(vectors[:, 0])


def reduced_axis_rows(tensor: pd.DataFrame, loadings: pd.DataFrame, truth: dict) -> tuple[pd.DataFrame, float]:
    """Every population's variance along the leading eigentensor's eigenvector closest to the true
    direction of reduction (tensor rows indexed by population), and that cosine."""
    traits = truth["traits"]
    direction = reduced_direction(truth)
    vecs = loadings[(loadings.reference == "eigentensor_vector") & (loadings.axis == 1)]
    cosines = {}
    for j, rows in vecs.groupby("axis2"):
        v = rows.set_index("trait").loc[traits, "value"].to_numpy(dtype=float)
        cosines[int(j)] = abs(v @ direction) / np.linalg.norm(v)
    best = max(cosines, key=cosines.get)
    rows = tensor[(tensor.statistic == "vector_variance") & (tensor.axis == 1)
                  & (tensor.axis2 == best)].set_index("population")
    return rows, cosines[best]


def gmax_pairs(gmax: pd.DataFrame, truth: dict) -> tuple[pd.Series, pd.DataFrame, pd.DataFrame]:
    """The g_max angle rows: (the rotated population's pairs' means, the rotated-reference row,
    the rows of pairs without the rotated population)."""
    rotated = population_with(truth, "rotated")
    reference = population_with(truth, "reference")
    pairs = gmax[gmax.statistic == "angle_between"]
    with_rotated = pairs[(pairs.population == rotated) | (pairs.population2 == rotated)]["mean"]
    turned = pairs[pairs.population.isin([rotated, reference]) & pairs.population2.isin([rotated, reference])]
    without = pairs[(pairs.population != rotated) & (pairs.population2 != rotated)]
    return with_rotated, turned, without


def designed_findings(tensor: pd.DataFrame, loadings: pd.DataFrame, gmax: pd.DataFrame, truth: dict,
                      alpha: float = 0.05) -> dict[str, bool]:
    """Each check of the demo-findings test, True when it holds on these tables."""
    reduced = population_with(truth, "reduced")
    rows, cosine = reduced_axis_rows(tensor, loadings, truth)
    leading = tensor[(tensor.statistic == "variance") & (tensor.axis == 1)].iloc[0]
    with_rotated, turned, without = gmax_pairs(gmax, truth)
    return {
        "reduced axis found (cosine > 0.8)": bool(cosine > 0.8),
        "reduced population least along it": bool(rows["mean"].idxmin() == reduced),
        "reduced population's deviation p <= alpha": bool(at_or_below(rows.loc[reduced, "p_value"], alpha)),
        "leading eigentensor supported (Holm)": bool(at_or_below(leading["p_adjusted"], alpha)),
        "rotated pairs have the largest g_max angles": bool(with_rotated.min() > without["mean"].max()),
        "rotated vs reference g_max angle p <= alpha": bool(at_or_below(turned["p_value"].iloc[0], alpha)),
        "equal-in-truth g_max angle not flagged": bool(without["p_value"].iloc[0] > alpha),
    }
