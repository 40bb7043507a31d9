"""Bad input to 'ped2g fit' ends with one clear line and exit status 2 (before any sampling)."""

import numpy as np
import pandas as pd
import pytest
import yaml

from ped2g.fit.prepare import prepare
from ped2g.config import validate
from ped2g.pedigree.core import Pedigree


def write_study(tmp_path, phen_rows=None, config_extra=None):
    ped = pd.DataFrame({"id": [f"a{i}" for i in range(12)],
                        "sire": ["", "", "", "", "a0", "a0", "a2", "a2", "a4", "a4", "a6", "a6"],
                        "dam": ["", "", "", "", "a1", "a3", "a1", "a3", "a5", "a7", "a7", "a5"]})
    ped.to_csv(tmp_path / "ped.csv", index=False)
    rng = np.random.default_rng(0)
    if phen_rows is None:
        phen_rows = [{"id": f"a{i}", "pop": "north", "mass": f"{rng.normal(10, 1):.3f}",
                      "wing": f"{rng.normal(5, 1):.3f}"} for i in range(4, 12)]
    pd.DataFrame(phen_rows).to_csv(tmp_path / "phen.csv", index=False)
    cfg = {"data": {"pedigree": str(tmp_path / "ped.csv"), "phenotypes": str(tmp_path / "phen.csv"),
                    "columns": {"population": "pop"}},
           "traits": ["mass", "wing"]}
    for key, value in (config_extra or {}).items():
        cfg[key] = value
    path = tmp_path / "config.yaml"
    path.write_text(yaml.safe_dump(cfg))
    return path


def run_fit(tmp_path, capsys, config, population="north"):
    from cli_runner import run_cli

    status = run_cli(["fit", "--config", str(config), "--population", population, "--out",
                      str(tmp_path / "out"), "--no-progress"])
    err = capsys.readouterr().err.strip().splitlines()
    return status, err


def assert_one_line_error(status, err, *patterns):
    assert status == 2
    lines = [ln for ln in err if "error:" in ln]
    assert len(lines) == 1, err
    for p in patterns:
        assert p in lines[0], lines[0]
    assert not (lines[0] and any("Traceback" in ln for ln in err))


def test_missing_trait_column(tmp_path, capsys):
    cfg = write_study(tmp_path, config_extra={"traits": ["mass", "tarsus"]})
    status, err = run_fit(tmp_path, capsys, cfg)
    assert_one_line_error(status, err, "no column 'tarsus'", "traits")
    assert not (tmp_path / "out").exists()


def test_non_numeric_trait_names_the_line(tmp_path, capsys):
    rows = [{"id": f"a{i}", "pop": "north", "mass": str(10 + i), "wing": str(i % 3)} for i in range(4, 12)]
    rows[3]["mass"] = "heavy"
    cfg = write_study(tmp_path, phen_rows=rows)
    status, err = run_fit(tmp_path, capsys, cfg)
    assert_one_line_error(status, err, "line 5", "'mass'", "'heavy'")


def test_population_without_records(tmp_path, capsys):
    cfg = write_study(tmp_path)
    status, err = run_fit(tmp_path, capsys, cfg, population="south")
    assert_one_line_error(status, err, "population 'south' has no records", "north")


def test_trait_without_variance(tmp_path, capsys):
    rows = [{"id": f"a{i}", "pop": "north", "mass": "7.5", "wing": str(i)} for i in range(4, 12)]
    cfg = write_study(tmp_path, phen_rows=rows)
    status, err = run_fit(tmp_path, capsys, cfg)
    assert_one_line_error(status, err, "trait 'mass' has no variance")


def test_too_few_records_for_the_parameters(tmp_path, capsys):
    rows = [{"id": f"a{i}", "pop": "north", "mass": str(i), "wing": str(i * i % 7) if i < 7 else ""}
            for i in range(4, 12)]
    cfg = write_study(tmp_path, phen_rows=rows)
    status, err = run_fit(tmp_path, capsys, cfg)
    assert_one_line_error(status, err, "trait 'wing' has 3 records", "parameters")


@pytest.mark.parametrize("extra,pattern", [
    ({"modle": {}}, "unknown key 'modle'"),
    ({"sampling": {"chains": "four"}}, "sampling.chains"),
    ({"model": {"engine": "fastest"}}, "model.engine"),
])
def test_config_mistakes_name_the_key(tmp_path, capsys, extra, pattern):
    cfg = write_study(tmp_path, config_extra=extra)
    status, err = run_fit(tmp_path, capsys, cfg)
    assert_one_line_error(status, err, pattern)


def test_phenotyped_animal_absent_from_pedigree_is_added_as_founder():
    ped = Pedigree(ids=np.array(["s", "d", "o1", "o2"], dtype=object), sire=np.array([-1, -1, 0, 0]),
                   dam=np.array([-1, -1, 1, 1]), generation=np.array([0, 0, 1, 1]), inbreeding=np.zeros(4))
    ids = ["o1", "o2", "stray"] * 3
    frame = pd.DataFrame({"id": ids, "population": "p", "x": [str(v) for v in range(9)],
                          "z": [str(v * v % 5) for v in range(9)]})
    frame.index = pd.Index(range(2, 11), name="line")
    data = prepare(validate({"traits": ["x", "z"]}), frame, ped, "p")
    assert "stray" in data.pedigree.index
    i = data.pedigree.index["stray"]
    assert data.pedigree.sire[i] == -1 and data.pedigree.dam[i] == -1 and data.phenotyped[i]
    assert any("added as founders" in note and "stray" in note for note in data.notes)
    assert data.repeated_records


@pytest.mark.parametrize("case,words", [
    ("folder", ["is a folder"]),
    ("empty", ["is empty"]),
    ("twice", ["key 'traits' is given twice", "lines"]),
    ("template", ["'__use_yte__'"]),
    ("indefinite G", ["model.fixed_covariances.G", "not positive definite"]),
])
def test_config_file_refusals_end_in_one_line_and_write_nothing(tmp_path, capsys, case, words):
    cfg = write_study(tmp_path)
    text = cfg.read_text()
    if case == "folder":
        cfg = tmp_path / "configs"
        cfg.mkdir()
    elif case == "empty":
        cfg.write_text("")
    elif case == "twice":
        cfg.write_text(text + "traits: [wing, mass]\n")
    elif case == "template":
        cfg.write_text("__use_yte__: true\n" + text)
    else:
        # [[1, 2], [2, 1]] has eigenvalues 3 and -1 (exact)
        cfg.write_text(text + "model:\n  fixed_covariances:\n    G: [[1, 2], [2, 1]]\n"
                              "    R: [[1, 0], [0, 1]]\n")
    before = sorted(p.name for p in tmp_path.iterdir())
    status, err = run_fit(tmp_path, capsys, cfg)
    assert_one_line_error(status, err, str(cfg), *words)
    assert len(err) == 1, err
    assert sorted(p.name for p in tmp_path.iterdir()) == before  # no out/, nothing else


def _rows_with(column, values):
    rng = np.random.default_rng(0)
    return [{"id": f"a{i}", "pop": "north", "mass": f"{rng.normal(10, 1):.3f}", "wing": f"{rng.normal(5, 1):.3f}",
             column: v} for i, v in zip(range(4, 12), values)]


@pytest.mark.parametrize("values,configured,words", [
    (["a1", "a3"] * 4, "brood", ["no column 'brood'", "config key 'random'", "'maternal'"]),
    (["a1", "", "a1", "NA", "a1", "a1", ".", "a1"], "dam", ["random effect 'maternal'", "config key 'random'",
                                                     "column 'dam'", "one known level ('a1')",
                                                     "remove the effect from config key 'random' or check the column"]),
    (["", "NA", "", ".", "na", "", "", ""], "dam", ["random effect 'maternal'", "column 'dam'", "no known level",
                                             "8 records", "config key 'random'"]),
], ids=["missing column", "one level", "all unknown"])
def test_random_effect_refusals_end_in_one_line(tmp_path, capsys, values, configured, words):
    # the table has a 'dam' column; the config names 'configured'
    cfg = write_study(tmp_path, phen_rows=_rows_with("dam", values),
                      config_extra={"random": [{"name": "maternal", "column": configured}]})
    status, err = run_fit(tmp_path, capsys, cfg)
    assert_one_line_error(status, err, *words)
    assert not (tmp_path / "out").exists()


def _prepare_logged(caplog, values, random_column):
    import logging

    ped = Pedigree(ids=np.array(["s", "d", "o1", "o2", "o3"], dtype=object), sire=np.array([-1, -1, 0, 0, 0]),
                   dam=np.array([-1, -1, 1, 1, 1]), generation=np.array([0, 0, 1, 1, 1]), inbreeding=np.zeros(5))
    ids = ["o1", "o2", "o3"] * 4
    frame = pd.DataFrame({"id": ids, "population": "p", "x": [str(v) for v in range(12)],
                          "z": [str(v * v % 5) for v in range(12)], "year": values})
    frame.index = pd.Index(range(2, 14), name="line")
    random = [{"name": "cohort", "column": "year"}] + ([{"name": "permanent", "column": random_column}]
                                                       if random_column else [])
    with caplog.at_level(logging.INFO, logger="ped2g.fit"):
        data = prepare(validate({"traits": ["x", "z"], "random": random}), frame, ped, "p")
    return data, [r for r in caplog.records if r.name == "ped2g.fit"]


def test_unknown_levels_are_kept_and_logged_once_per_effect(caplog):
    values = ["2001", "", "2002", "NA", "2001", "2003", ".", "2002", "2003", "2001", "", "2002"]
    data, records = _prepare_logged(caplog, values, "id")
    eff = data.random[0]
    assert eff.levels == ["2001", "2002", "2003"]
    # records 2, 4, 7 and 11 (1-based) are unknown: level -1, the others keep their year
    assert eff.level.tolist() == [0, -1, 1, -1, 0, 2, -1, 1, 2, 0, -1, 1]
    lines = [r.getMessage() for r in records if "unknown level" in r.getMessage()]
    assert lines == ["population p: random effect 'cohort' (column year): 4 records with an unknown level "
                     "get no contribution from it"]
    assert data.random[1].n_unknown == 0


def test_repeated_records_warning_once_without_an_id_effect(caplog):
    values = ["2001", "2002", "2003"] * 4
    data, records = _prepare_logged(caplog, values, None)
    assert data.repeated_records
    warnings = [r for r in records if r.levelname == "WARNING"]
    assert len(warnings) == 1, [r.getMessage() for r in warnings]
    text = warnings[0].getMessage()
    assert "\n" not in text
    for words in ("3 animals have more than one record", "up to 4", "id column 'id'", "inflating G",
                  "permanent-environment effect", "config key 'random'"):
        assert words in text, text
    assert any("inflating G" in note for note in data.notes)      # also kept for diagnostics.json


def test_no_repeated_records_warning_with_an_id_effect(caplog):
    data, records = _prepare_logged(caplog, ["2001", "2002", "2003"] * 4, "id")
    assert data.repeated_records
    assert not [r for r in records if r.levelname == "WARNING" or "inflating" in r.getMessage()]
