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
  deviation along the axis above has p at or below 0.05, the angle between the rotated
  population's g_max and the reference population's has p at or below 0.05, and the g_max angle
  of the reference and the reduced population -- equal in truth (the reduction is along another
  axis) -- is not flagged (p above 0.05). "At or below" is the reading rule's comparison
  (ped2g.compare.calibrated.at_or_below): a Monte Carlo p-value k / (R + 1) has level exactly
  alpha when rejected at p <= alpha (Davison & Hinkley 1997, section 4.2 [M]);
* the report's findings at a glance name the reduced and the rotated population;
* the report's truth markers are the true values and lie inside the plotted intervals at the
  nominal rate.

The checks are those of tests/demo_findings.py; `python tests/null/refit_calibration.py --truth`
measures how often each holds over studies simulated at the demo's design (its power; README,
"Calibration and power"). The demo's own numbers are fixed by its seed.
"""

from __future__ import annotations

import shutil

import pandas as pd
import pytest
import yaml

from demo_findings import gmax_pairs, population_with, reduced_axis_rows
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


def _tables(folder):
    read = lambda name: pd.read_csv(folder / "results" / "compare" / f"{name}.csv")  # noqa: E731
    return read("tensor"), read("loadings"), read("gmax")


def _reduced_axis_rows(folder, truth):
    tensor, loadings, _ = _tables(folder)
    return reduced_axis_rows(tensor, loadings, truth)


def test_reduced_population_stands_out_beyond_estimation_noise(demo):
    folder, truth = demo
    reduced = population_with(truth, "reduced")
    rows, _ = _reduced_axis_rows(folder, truth)
    # calibrated: the reduced population stands out along that axis beyond estimation noise
    assert at_or_below(rows.loc[reduced, "p_value"], 0.05), rows[["mean", "p_value", "p_adjusted"]]


def test_reduced_population_shows_in_the_leading_eigentensor(demo):
    folder, truth = demo
    reduced = population_with(truth, "reduced")
    rows, cosine = _reduced_axis_rows(folder, truth)
    assert cosine > 0.8, cosine
    along = rows["mean"]
    assert set(along.index) == set(truth["populations"])
    assert along.idxmin() == reduced, along.to_dict()
    tensor = _tables(folder)[0]
    leading = tensor[(tensor.statistic == "variance") & (tensor.axis == 1)].iloc[0]
    assert at_or_below(leading["p_adjusted"], 0.05) and bool(leading["supported"]), leading


def test_rotated_population_shows_the_largest_gmax_angle(demo):
    folder, truth = demo
    gmax = _tables(folder)[2]
    assert len(gmax[gmax.statistic == "angle_between"]) == 3
    with_rotated, turned, without = gmax_pairs(gmax, truth)
    assert len(with_rotated) == 2 and len(turned) == 1 and len(without) == 1
    assert with_rotated.min() > without["mean"].max(), (with_rotated, without["mean"])
    # calibrated: the rotated g_max against the reference's is beyond estimation noise, while the
    # angle of the two populations whose g_max is the same in truth is not flagged
    assert at_or_below(turned["p_value"].iloc[0], 0.05), turned[["population", "population2", "p_value"]]
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
    rotated = population_with(truth, "rotated")
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


def test_the_findings_summary_names_the_reduced_population(demo):
    # named either as a supported difference or as a lead (raw p at or below alpha, labelled "not
    # supported")
    folder, truth = demo
    reduced = population_with(truth, "reduced")
    text, sentences = _findings_sentences(folder)
    about_reduced = [s for s in sentences if reduced in s and "genetic variance" in s and "less" in s]
    assert about_reduced, text


def test_truth_markers_lie_inside_the_plotted_intervals(demo):
    # The report draws a truth marker beside every interval that has a true value (the demo's
    # truth.yaml sits beside its phenotypes): the eigenvalues of each G and every population's
    # variance along the fixed axes. The markers must be the true values -- the eigenvalues of each
    # population's true G on the compared (variance-standardised) scale, exact up to the truth
    # file's six significant digits -- and lie inside the plotted HPD intervals at the nominal rate:
    # at most the number of misses that a calibrated interval exceeds with probability 0.01
    # (binomial quantile, scipy.stats.binom).
    import numpy as np
    import scipy.stats

    folder, truth = demo
    config = yaml.safe_load((folder / "config.yaml").read_text(encoding="utf-8"))
    mass = float(config["compare"]["interval_mass"])
    tables = folder / "results" / "report" / "tables"
    eigen = pd.read_csv(tables / "eigenvalues.csv")
    assert set(eigen["population"]) == set(truth["populations"])
    for pop, rows in eigen.groupby("population"):
        G = np.array(truth["populations"][pop]["G_variance_standardised"], dtype=float)
        expected = np.sort(np.linalg.eigvalsh(G))[::-1][: len(rows)]
        np.testing.assert_allclose(rows.sort_values("axis")["true_value"], expected, rtol=1e-4)
    along = pd.read_csv(tables / "variance_along_axes.csv")
    assert along["true_value"].notna().all() and len(along) >= 2 * len(truth["populations"])
    rows = pd.concat([eigen, along], ignore_index=True)
    inside = (rows["hpd_lower"] <= rows["true_value"]) & (rows["true_value"] <= rows["hpd_upper"])
    allowed = int(scipy.stats.binom.ppf(0.99, len(rows), 1 - mass))
    assert (~inside).sum() <= allowed, rows.loc[~inside, ["population", "axis", "hpd_lower", "hpd_upper",
                                                           "true_value"]]
