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
  it has a larger posterior-mean angle between g_max vectors than any pair that does not;
* against the refitting null (the workflow's default): the leading eigentensor's variance is a
  supported difference (Holm-adjusted p at or below compare.alpha), the reduced population's
  deviation along the axis above has p at or below 0.05 (at present a strict expected failure,
  p = 0.07: see DEMO_AT_ITS_POWER_LIMIT), the angle between the rotated
  population's g_max and the reference population's has p at or below 0.05, and the g_max angle
  of the reference and the reduced population -- equal in truth (the reduction is along another
  axis) -- is not flagged (p above 0.05). "At or below" is the reading rule's comparison
  (ped2g.compare.calibrated.at_or_below): a Monte Carlo p-value k / (R + 1) has level exactly
  alpha when rejected at p <= alpha (Davison & Hinkley 1997, section 4.2 [M]).

The demo's 500 records per population give these tests modest power (tests/null/
refit_calibration.py --truth measures it); the demo's numbers are fixed by its seed.
"""

from __future__ import annotations

import shutil

import numpy as np
import pandas as pd
import pytest
import scipy.linalg
import yaml

from ped2g.compare.calibrated import at_or_below
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
    assert list((folder / "results" / "null" / "refits").iterdir()), "the refitting null did not run"
    truth = yaml.safe_load((folder / "resources_demo" / "truth.yaml").read_text(encoding="utf-8"))
    return folder, truth


def _population_with(truth, design):
    names = [p for p, v in truth["populations"].items() if v["design"] == design]
    assert len(names) == 1, f"the demo should have one '{design}' population"
    return names[0]


def _reduced_axis_rows(folder, truth):
    """The tensor rows of every population's variance along the leading eigentensor's eigenvector
    closest to the true direction of reduction, and that cosine."""
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
    tensor = pd.read_csv(folder / "results/compare/tensor.csv")
    rows = tensor[(tensor.statistic == "vector_variance") & (tensor.axis == 1)
                  & (tensor.axis2 == best)].set_index("population")
    return rows, cosines[best]


# With the bias-corrected shared G (compare.null_model.pilot_replicates: 10, the default since it
# measured closer to an exact test: tests/null/refit_calibration.py, README "Calibration and
# power"), the demo's reduced population's deviation along the reduced axis has p = 7/100; with
# the uncorrected null it had 5/100. At 99 replicates the Monte Carlo SE of a p near 0.05 is
# 0.022: the demo's 500 records per population put this designed difference at the edge of what
# they can show. Kept as a strict expected failure (the demo's numbers are fixed by its seed, so
# it passes unexpectedly only if they change) until the demo is sized to show it with margin.
DEMO_AT_ITS_POWER_LIMIT = pytest.mark.xfail(
    strict=True, reason="the demo's reduced population: p = 0.07 against the bias-corrected null "
                        "(0.05 against the uncorrected one); the demo is at its power limit here")


@DEMO_AT_ITS_POWER_LIMIT
def test_reduced_population_stands_out_beyond_estimation_noise(demo):
    folder, truth = demo
    reduced = _population_with(truth, "reduced")
    rows, _ = _reduced_axis_rows(folder, truth)
    # calibrated: the reduced population stands out along that axis beyond estimation noise
    assert at_or_below(rows.loc[reduced, "p_value"], 0.05), rows[["mean", "p_value", "p_adjusted"]]


def test_reduced_population_shows_in_the_leading_eigentensor(demo):
    folder, truth = demo
    reduced = _population_with(truth, "reduced")
    rows, cosine = _reduced_axis_rows(folder, truth)
    assert cosine > 0.8, cosine
    along = rows["mean"]
    assert set(along.index) == set(truth["populations"])
    assert along.idxmin() == reduced, along.to_dict()
    tensor = pd.read_csv(folder / "results/compare/tensor.csv")
    leading = tensor[(tensor.statistic == "variance") & (tensor.axis == 1)].iloc[0]
    assert at_or_below(leading["p_adjusted"], 0.05) and bool(leading["supported"]), leading


def test_rotated_population_shows_the_largest_gmax_angle(demo):
    folder, truth = demo
    rotated = _population_with(truth, "rotated")
    gmax = pd.read_csv(folder / "results/compare/gmax.csv")
    pairs = gmax[gmax.statistic == "angle_between"]
    assert len(pairs) == 3
    with_rotated = pairs[(pairs.population == rotated) | (pairs.population2 == rotated)]["mean"]
    without = pairs[(pairs.population != rotated) & (pairs.population2 != rotated)]
    assert with_rotated.min() > without["mean"].max(), pairs[["population", "population2", "mean"]]
    # calibrated: the rotated g_max against the reference's is beyond estimation noise, while the
    # angle of the two populations whose g_max is the same in truth is not flagged
    reference = _population_with(truth, "reference")
    turned = pairs[pairs.population.isin([rotated, reference]) & pairs.population2.isin([rotated, reference])]
    assert len(turned) == 1 and at_or_below(turned["p_value"].iloc[0], 0.05), \
        pairs[["population", "population2", "p_value"]]
    assert len(without) == 1
    assert without["p_value"].iloc[0] > 0.05 and not bool(without["supported"].iloc[0]), without


def test_the_report_states_the_rule_and_the_supported_findings(demo):
    from ped2g.compare.calibrated import READING_RULE

    folder, _truth = demo
    page = " ".join((folder / "results/report/report.html").read_text(encoding="utf-8").split())
    assert "Findings: differences beyond estimation noise" in page
    assert READING_RULE.format(alpha=0.05).replace("'", "&#39;") in page or READING_RULE.format(alpha=0.05) in page
    tensor = pd.read_csv(folder / "results/compare/tensor.csv")
    supported = tensor[tensor["supported"].astype(str) == "True"]
    assert len(supported) >= 1
    import re

    counted = re.search(r"(\d+) of (\d+) tested statistics differ by more than estimation noise", page)
    assert counted and int(counted.group(1)) >= len(supported), counted
    methods = " ".join((folder / "results/report/methods.txt").read_text(encoding="utf-8").split())
    assert READING_RULE.format(alpha=0.05) in methods and "Holm" in methods


def test_the_findings_summary_names_the_rotated_population(demo):
    # The findings at the top of the report name the designed differences, each either as a
    # supported difference or, when Holm's adjustment takes it above alpha, as a lead labelled
    # "not supported": here the rotated population's g_max (the reduced population's variance:
    # test_the_findings_summary_names_the_reduced_population).
    folder, truth = demo
    rotated = _population_with(truth, "rotated")
    text, sentences = _findings_sentences(folder)
    about_rotated = [s for s in sentences if rotated in s]
    assert about_rotated, text


def _findings_sentences(folder):
    import html as html_module
    import re

    page = (folder / "results/report/report.html").read_text(encoding="utf-8")
    start, end = page.find("Findings at a glance"), page.find("Supported differences")
    text = html_module.unescape(re.sub(r"\s+", " ", re.sub(r"<[^>]+>", " ", page[start:end])))
    return text, re.split(r"(?<=\.) (?=[A-Za-z])", text)


@DEMO_AT_ITS_POWER_LIMIT
def test_the_findings_summary_names_the_reduced_population(demo):
    # named either as a supported difference or as a lead (raw p at or below alpha, labelled "not
    # supported"): with p = 0.07 it is neither (see DEMO_AT_ITS_POWER_LIMIT)
    folder, truth = demo
    reduced = _population_with(truth, "reduced")
    text, sentences = _findings_sentences(folder)
    about_reduced = [s for s in sentences if reduced in s and "genetic variance" in s and "less" in s]
    assert about_reduced, text
