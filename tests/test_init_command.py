"""`ped2g init`: guesses of columns and traits, and the starter config it writes.

The expected guesses are read off the small tables written in each test; the written config
is checked against the config schema (ped2g.config.validate) and, once, by the workflow's own
dry run, which is what a user runs next.
"""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import pandas as pd
import pytest
import yaml

from ped2g.cli import main
from ped2g.config import load_config
from ped2g.errors import UserError
from ped2g.init_command import guess

ROOT = Path(__file__).resolve().parents[1]
TINY = ROOT / "tests" / "data" / "workflow"


def _frame(rows: list[list[str]]) -> pd.DataFrame:
    return pd.DataFrame(rows[1:], columns=rows[0]).astype(str)


def _write(path: Path, rows: list[list[str]]) -> Path:
    path.write_text("\n".join(",".join(r) for r in rows) + "\n", encoding="utf-8")
    return path


PEDIGREE = [["Animal", "Father", "Mother"],
            ["a1", "-9", "-9"], ["a2", "-9", "-9"], ["a3", "a1", "a2"], ["a4", "a1", "a2"],
            ["a5", "a3", "x9"]]
PHENOTYPES = [["Animal", "Sex", "Island", "Year", "wing", "mass", "tag_no"],
              ["a1", "M", "A", "2001", "10.1", "3.2", "101"],
              ["a2", "F", "A", "2001", "9.5", "NA", "102"],
              ["a3", "M", "B", "2002", "10.7", "3.5", "103"],
              ["a4", "F", "B", "2002", "9.9", "3.0", "104"],
              ["a5", "M", "B", "2003", "10.0", "3.3", "105"]]


def test_guesses_on_a_small_table():
    g = guess(_frame(PEDIGREE), _frame(PHENOTYPES))
    assert g.columns == {"id": "Animal", "sire": "Father", "dam": "Mother",
                         "population": "Island"}
    assert g.traits == ["wing", "mass"]  # 'NA' counts as missing, not as text
    assert g.possible_fixed == {"Sex": "categorical", "Year": "categorical"}
    assert "-9" in g.missing and "x9" not in g.missing
    assert g.populations == ["A", "B"]
    assert not g.hermaphrodite
    notes = "\n".join(g.notes)
    assert "'tag_no' skipped" in notes  # whole numbers, all different: an identifier
    assert "'x9'" in notes  # a parent id that is not an animal is reported


def test_hermaphrodite_is_detected():
    rows = [r[:] for r in PEDIGREE] + [["a6", "a3", "a4"], ["a7", "a4", "a3"]]
    g = guess(_frame(rows), _frame(PHENOTYPES))
    assert g.hermaphrodite


def test_options_override_the_guesses():
    g = guess(_frame(PEDIGREE), _frame(PHENOTYPES), population="Sex", traits=["mass"])
    assert g.columns["population"] == "Sex" and g.traits == ["mass"]


@pytest.mark.parametrize("kwargs, message", [
    ({"traits": ["wingspan"]}, r"--traits 'wingspan' is not a column of the phenotype table"),
    ({"id_col": "ring"}, r"--id 'ring' is not a column of the pedigree table"),
])
def test_named_column_that_does_not_exist(kwargs, message):
    with pytest.raises(UserError, match=message):
        guess(_frame(PEDIGREE), _frame(PHENOTYPES), **kwargs)


def test_no_population_column_says_which_option_to_give():
    rows = [[c for i, c in enumerate(r) if i != 2] for r in PHENOTYPES]  # drop 'Island'
    with pytest.raises(UserError, match=r"--population-column COL"):
        guess(_frame(PEDIGREE), _frame(rows))


def test_no_numeric_trait():
    rows = [r[:4] for r in PHENOTYPES]
    with pytest.raises(UserError, match=r"no numeric trait column.*--traits"):
        guess(_frame(PEDIGREE), _frame(rows))


def test_written_config_passes_the_schema_and_keeps_the_guesses(tmp_path, capsys):
    ped = _write(tmp_path / "ped.csv", PEDIGREE)
    phen = _write(tmp_path / "phen.csv", PHENOTYPES)
    out = tmp_path / "cfg" / "study.yaml"
    assert main(["init", "--pedigree", str(ped), "--phenotypes", str(phen), "--out", str(out)]) == 0
    config = load_config(out)  # raises if the schema rejects it
    assert config["data"]["columns"] == {"id": "Animal", "sire": "Father", "dam": "Mother",
                                         "population": "Island"}
    assert config["traits"] == ["wing", "mass"]
    assert "-9" in config["data"]["missing_parent"]
    assert config["data"]["pedigree"] == str(ped)
    err = capsys.readouterr().err
    assert "population column: 'Island'" in err and "wrote" in err
    # a second run does not overwrite without --force
    assert main(["init", "--pedigree", str(ped), "--phenotypes", str(phen), "--out", str(out)]) == 2
    assert "exists" in capsys.readouterr().err
    assert main(["init", "--pedigree", str(ped), "--phenotypes", str(phen), "--out", str(out),
                 "--force", "--traits", "mass"]) == 0
    assert load_config(out)["traits"] == ["mass"]


def test_cli_mistake_is_one_line_with_status_2(tmp_path):
    out = tmp_path / "study.yaml"
    result = subprocess.run(
        [sys.executable, "-m", "ped2g.cli", "init", "--pedigree", str(tmp_path / "nope.csv"),
         "--phenotypes", str(TINY / "phenotypes.csv"), "--out", str(out)],
        capture_output=True, text=True)
    assert result.returncode == 2
    assert result.stderr.strip().count("\n") == 0
    assert "nope.csv" in result.stderr and "not found" in result.stderr
    assert not out.exists()


def test_starter_config_for_the_tiny_study_runs_the_workflow_dry_run(tmp_path):
    out = tmp_path / "study.yaml"
    assert main(["init", "--pedigree", str(TINY / "pedigree.csv"), "--phenotypes",
                 str(TINY / "phenotypes.csv"), "--out", str(out)]) == 0
    written = yaml.safe_load(out.read_text())
    assert written["traits"] == ["wing", "tarsus"]
    assert written["data"]["columns"]["population"] == "site"
    result = subprocess.run(
        [sys.executable, "-m", "snakemake", "-n", "--snakefile", str(ROOT / "Snakefile"),
         "--directory", str(tmp_path), "--configfile", str(out)],
        capture_output=True, text=True, cwd=tmp_path)
    assert result.returncode == 0, result.stderr[-2000:]
    assert "population=north" in result.stdout and "population=south" in result.stdout


def test_covariates_are_offered_as_fixed_effects_of_the_usual_kind():
    rows = [r + [age, year] for r, age, year in zip(
        PHENOTYPES, ["age_days", "31", "45", "52", "38", "60"],
        ["cohort", "2001", "2002", "2003", "2004", "2005"])]
    g = guess(_frame(PEDIGREE), _frame(rows))
    assert g.possible_fixed["age_days"] == "numeric"  # a slope on age
    assert g.possible_fixed["cohort"] == "categorical"  # a level per cohort
    assert "age_days" not in g.traits and "cohort" not in g.traits
