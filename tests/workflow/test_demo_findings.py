"""On the demo study the comparisons find what the truth file says (slow: the whole demo).

The demo study (resources_demo/, made by `ped2g simulate --seed 2026`) gives one population a
G with reduced genetic variance along one trait combination and another a G whose leading axis
is rotated; resources_demo/truth.yaml holds the true matrices and each population's design.
The true direction of reduction is derived here from the true matrices alone, as the
generalised eigenvector of (G_reduced, G_reference) with the smallest eigenvalue (exact
identity: it minimises v'G_reduced v / v'G_reference v), on the variance-standardised scale the
demo config compares on. This test runs the whole workflow on the demo config, as the README's
first command does, and checks that

* the reduced population shows its reduction in the leading eigentensor of the genetic
  covariance tensor: one eigenvector of that eigentensor lies close to the true direction, and the
  reduced population has the least genetic variance of all populations along it;
* the rotated population shows the largest g_max angle: every pair of populations that includes
  it has a larger posterior-mean angle between g_max vectors than any pair that does not.
"""

from __future__ import annotations

import shutil

import numpy as np
import pandas as pd
import pytest
import scipy.linalg
import yaml

from workflow_helpers import ROOT, snakemake

pytestmark = pytest.mark.slow


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    folder = tmp_path_factory.mktemp("demo")
    shutil.copytree(ROOT / "resources_demo", folder / "resources_demo")
    config = folder / "config.yaml"
    shutil.copy(ROOT / "config" / "config.yaml", config)
    result = snakemake(folder, "--cores", "2", config=config, timeout=1800)
    assert result.returncode == 0, (result.stdout + result.stderr)[-5000:]
    truth = yaml.safe_load((folder / "resources_demo" / "truth.yaml").read_text(encoding="utf-8"))
    return folder, truth


def _population_with(truth, design):
    names = [p for p, v in truth["populations"].items() if v["design"] == design]
    assert len(names) == 1, f"the demo should have one '{design}' population"
    return names[0]


def test_reduced_population_shows_in_the_leading_eigentensor(demo):
    folder, truth = demo
    traits = truth["traits"]
    reduced = _population_with(truth, "reduced")
    reference = _population_with(truth, "reference")
    g_red = np.array(truth["populations"][reduced]["G_variance_standardised"])
    g_ref = np.array(truth["populations"][reference]["G_variance_standardised"])
    ratios, vectors = scipy.linalg.eigh(g_red, g_ref)
    direction = vectors[:, 0] / np.linalg.norm(vectors[:, 0])

    loadings = pd.read_csv(folder / "results/compare/loadings.csv")
    vecs = loadings[(loadings.reference == "eigentensor_vector") & (loadings.axis == 1)]
    cosines = {}
    for j, rows in vecs.groupby("axis2"):
        v = rows.set_index("trait").loc[traits, "value"].to_numpy()
        cosines[int(j)] = abs(v @ direction) / np.linalg.norm(v)
    best = max(cosines, key=cosines.get)
    assert cosines[best] > 0.8, cosines

    tensor = pd.read_csv(folder / "results/compare/tensor.csv")
    along = tensor[(tensor.statistic == "vector_variance") & (tensor.axis == 1)
                   & (tensor.axis2 == best)].set_index("population")["mean"]
    assert set(along.index) == set(truth["populations"])
    assert along.idxmin() == reduced, along.to_dict()


def test_rotated_population_shows_the_largest_gmax_angle(demo):
    folder, truth = demo
    rotated = _population_with(truth, "rotated")
    gmax = pd.read_csv(folder / "results/compare/gmax.csv")
    pairs = gmax[gmax.statistic == "angle_between"]
    assert len(pairs) == 3
    with_rotated = pairs[(pairs.population == rotated) | (pairs.population2 == rotated)]["mean"]
    without = pairs[(pairs.population != rotated) & (pairs.population2 != rotated)]["mean"]
    assert with_rotated.min() > without.max(), pairs[["population", "population2", "mean"]]
