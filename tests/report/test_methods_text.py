"""The methods paragraph and the cautions follow what was run."""

from __future__ import annotations

import re

from ped2g.config import validate
from ped2g.report.methods_text import REFERENCES, cautions, methods_paragraph

VERSIONS = {"ped2g": "9.9.9", "pymc": "1.2.3", "nutpie": "0.0.1", "arviz": "4.5.6", "numpy": "7.8.9",
            "scipy": "1.0", "python": "3.99", "pytensor": "2.0", "xarray": "2000.1"}


def _config(**compare):
    return validate({"traits": ["wing", "mass"], "compare": compare})


def _paragraph(config, methods, null_present=True, **kw):
    return methods_paragraph(config, ["north", "south"], ["wing", "mass"], ["marginal"], 3,
                             passed=2, methods=methods, null_present=null_present, versions=VERSIONS, **kw)


def test_only_methods_that_ran_are_described_and_cited():
    text, refs = _paragraph(_config(), ["skewers"])
    assert "random skewers" in text and "1000 unit selection gradients" in text
    assert "Krzanowski" not in text and not any("Krzanowski" in r for r in refs)
    assert any(r.startswith("Cheverud JM, Marroig G (2007)") for r in refs)


def test_every_citation_in_the_text_is_in_the_reference_list():
    text, refs = _paragraph(_config(), ["skewers", "subspace", "tensor", "gmax", "evolvability",
                                        "dimensions", "distance"])
    cited = set()
    for group in re.findall(r"\(([^()]*)\)", text):
        for item in group.split(";"):
            item = item.strip()
            if item in REFERENCES:
                cited.add(item)
    assert cited, "no citation found"
    assert {REFERENCES[c] for c in cited} <= set(refs)
    # and nothing is listed that the text does not cite
    assert len(refs) == len(cited)


def test_settings_and_versions_are_those_given():
    config = _config(scale="mean", skewers=250)
    text, _ = _paragraph(config, ["skewers", "subspace"], compare_record={"subspace_dims": 2, "skewers": 500})
    assert "PyMC 1.2.3" in text and "nutpie 0.0.1" in text and "NumPy 7.8.9" in text
    assert "mean-standardisation" in text
    # what the compare stage recorded wins over the config
    assert "500 unit selection gradients" in text and "k = 2 leading eigenvectors" in text
    assert "made 3 changes" in text and "2 of 2 fits met every check" in text


def test_null_sentence_names_the_estimator_or_is_absent():
    text, _ = _paragraph(_config(null_model={"estimator": "sample"}), ["skewers"])
    assert "sample covariance" in text and "biases low" in text
    text, refs = _paragraph(_config(), ["skewers"], null_present=False)
    assert "randomisation null" not in text and not any("Aguirre" in r for r in refs)


def test_cautions_put_failed_fits_first_and_follow_the_null():
    config = _config(null_model={"estimator": "sample"})
    items = cautions(config, ["south"], null_present=True, has_null_columns=True, n_changes=0)
    assert items[0].startswith("Fits of south missed")
    assert any("no prediction error" in i for i in items)
    assert any("biased low by the factor 1 + F̄ − ā" in i for i in items)
    assert any("much stricter criterion than a test at the 5% level" in i for i in items)
    items = cautions(_config(), [], null_present=False, has_null_columns=False, n_changes=None)
    assert not any(i.startswith("Fits of") for i in items)
    assert any("No randomisation null was found" in i for i in items)


def test_sampler_that_ran_and_the_missing_value_step_are_named():
    # The fits recorded PyMC (the Gibbs step for missing values runs on it) although the config
    # asks for nutpie: the text names what ran and the data-augmentation step, and cites it.
    text, refs = _paragraph(_config(), ["skewers"], samplers=["pymc"], missing_by_gibbs=True)
    assert "in PyMC 1.2.3, each with" in text and "nutpie 0.0.1" not in text
    assert "Gibbs step between NUTS transitions" in text and "Tanner & Wong 1987" in text
    assert any(r.startswith("Tanner MA, Wong WH (1987)") for r in refs)
    text, refs = _paragraph(_config(), ["skewers"])
    assert "in nutpie 0.0.1 (github.com/pymc-devs/nutpie), each with" in text and "Gibbs step" not in text
    assert not any("Tanner" in r for r in refs)


def test_software_is_cited_with_version_and_reference():
    # The software papers, recalled from memory [M] (docs/methods.md §8): PyMC, Abril-Pla et al.
    # 2023, PeerJ Computer Science 9:e1516; NumPy, Harris et al. 2020, Nature 585:357-362; SciPy,
    # Virtanen et al. 2020, Nature Methods 17:261-272; ArviZ, Kumar et al. 2019, JOSS 4(33):1143;
    # Snakemake, Mölder et al. 2021, F1000Research 10:33; nutpie has no paper: its repository.
    versions = {**VERSIONS, "snakemake": "8.1.0"}
    text, refs = methods_paragraph(_config(), ["north", "south"], ["wing", "mass"], ["marginal"], 3,
                                   passed=2, methods=["skewers"], null_present=True, versions=versions)
    for software, citation, reference in [
            ("PyMC 1.2.3", "Abril-Pla et al. 2023", "PeerJ Computer Science 9:e1516"),
            ("NumPy 7.8.9", "Harris et al. 2020", "Nature 585:357-362"),
            ("SciPy 1.0", "Virtanen et al. 2020", "Nature Methods 17:261-272"),
            ("ArviZ 4.5.6", "Kumar et al. 2019", "Journal of Open Source Software 4(33):1143"),
            ("Snakemake 8.1.0", "Mölder et al. 2021", "F1000Research 10:33"),
            ("nutpie 0.0.1", "github.com/pymc-devs/nutpie", "https://github.com/pymc-devs/nutpie")]:
        assert f"{software} ({citation})" in text, software
        assert sum(reference in r for r in refs) == 1, reference
    # no Snakemake sentence or reference when Snakemake is not installed
    text, refs = _paragraph(_config(), ["skewers"])
    assert "Snakemake" not in text and not any("Snakemake" in r for r in refs)
    # the sampler that ran is the one cited: PyMC alone leaves the nutpie repository out
    text, refs = _paragraph(_config(), ["skewers"], samplers=["pymc"])
    assert not any("nutpie" in r for r in refs)
