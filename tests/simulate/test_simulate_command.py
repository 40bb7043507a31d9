"""The ``ped2g simulate`` command: byte-identical reruns, the shipped demo data, one-line errors."""

from pathlib import Path

import numpy as np
import pytest
import yaml

from ped2g.cli import main
from ped2g.simulate import DEMO_SEED

ROOT = Path(__file__).resolve().parents[2]
DEMO = ROOT / "resources_demo"
FILES = ("pedigree.csv", "phenotypes.csv", "truth.yaml")
SMALL = {"populations": ["red", "blue"], "traits": ["x", "y"], "animals": 90, "founders": 16,
         "years": 4, "phenotyped": 60, "absent_parents": 2}


def _settings(tmp_path, values=SMALL, name="small.yaml"):
    path = tmp_path / name
    path.write_text(yaml.safe_dump(values), encoding="utf-8")
    return str(path)


def test_same_seed_gives_byte_identical_files(tmp_path):
    settings = _settings(tmp_path)
    for out in ("a", "b"):
        assert main(["simulate", "--out", str(tmp_path / out), "--seed", "17",
                     "--settings", settings]) == 0
    for name in FILES:
        assert (tmp_path / "a" / name).read_bytes() == (tmp_path / "b" / name).read_bytes()
    assert main(["simulate", "--out", str(tmp_path / "c"), "--seed", "18", "--settings", settings]) == 0
    assert (tmp_path / "a" / "phenotypes.csv").read_bytes() != (tmp_path / "c" / "phenotypes.csv").read_bytes()
    truth = yaml.safe_load((tmp_path / "a" / "truth.yaml").read_text())
    assert truth["made_with"]["command"] == "ped2g simulate --seed 17 --settings small.yaml"
    assert list(truth["populations"]) == ["red", "blue"]


def test_options_override_the_settings_file(tmp_path):
    settings = _settings(tmp_path)
    assert main(["simulate", "--out", str(tmp_path / "o"), "--settings", settings,
                 "--animals", "80", "--phenotyped", "50", "--missing-values", "0"]) == 0
    header, *rows = (tmp_path / "o" / "phenotypes.csv").read_text().splitlines()
    assert header == "id,population,sex,year,x,y"
    assert len(rows) == 2 * 50
    assert not any(",," in r or r.endswith(",") for r in rows)  # no missing values
    truth = yaml.safe_load((tmp_path / "o" / "truth.yaml").read_text())
    assert truth["settings"]["animals"] == 80
    assert truth["made_with"]["command"].endswith("--animals 80 --phenotyped 50 --missing-values 0.0")


def test_shipped_demo_is_what_the_command_makes(tmp_path):
    """resources_demo/ is exactly `ped2g simulate --out resources_demo --seed 2026`."""
    assert main(["simulate", "--out", str(tmp_path), "--seed", str(DEMO_SEED)]) == 0
    for name in FILES:
        assert (tmp_path / name).read_bytes() == (DEMO / name).read_bytes(), name


def test_demo_study_has_the_promised_shape():
    truth = yaml.safe_load((DEMO / "truth.yaml").read_text(encoding="utf-8"))
    pops = truth["populations"]
    assert [p["design"] for p in pops.values()] == ["reference", "reduced", "rotated"]
    assert len(truth["traits"]) == 4
    # resources_demo/README.md: about 840 skinks per islet in the pedigree, 600 of them measured
    for p in pops.values():
        assert 750 <= p["animals_in_true_pedigree"] <= 950
        assert 550 <= p["phenotyped_animals"] <= 650
        assert all(v > 0 for v in p["mean"].values())
        assert all(0.3 <= v <= 0.75 for v in p["heritability"].values())
    # the G matrices really differ: compare on the reference scale (numpy eigh)
    ref, red, rot = (np.array(p["G_reference_scale"]) for p in pops.values())
    lam_ref, vec_ref = np.linalg.eigh(ref)
    assert np.linalg.eigvalsh(rot) == pytest.approx(lam_ref, rel=1e-4)
    assert abs(np.linalg.eigh(rot)[1][:, -1] @ vec_ref[:, -1]) < 0.8  # leading axis turned
    kept = truth["settings"]["reduction"]  # resources_demo/README.md: "keeps only 10%"
    assert kept == 0.1
    assert vec_ref[:, -2] @ red @ vec_ref[:, -2] == pytest.approx(kept * lam_ref[-2], rel=1e-4)


@pytest.mark.parametrize("args, message", [
    (["--animals", "0"], "study setting 'animals' must be at least founders"),
    (["--unknown-parents", "1.5"], "study setting 'unknown_parent_fraction' must be in"),
    (["--seed", "-3"], "--seed must be a non-negative integer"),
])
def test_bad_options_end_in_one_line(tmp_path, capsys, args, message):
    out = tmp_path / "never"
    assert main(["simulate", "--out", str(out), *args]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and message in err[0] and "Traceback" not in err[0]
    assert not out.exists()
    assert not list(tmp_path.glob(".never*"))  # no temporary folder left behind


def test_bad_settings_files_end_in_one_line(tmp_path, capsys):
    cases = [
        (_settings(tmp_path, {"animal": 5}, "typo.yaml"), "unknown setting 'animal' (allowed: populations"),
        (_settings(tmp_path, {"phenotypic_cv": "wide"}, "type.yaml"), "'phenotypic_cv' must be a number"),
        (_settings(tmp_path, [1, 2], "list.yaml"), "must hold a mapping of setting: value"),
        (str(tmp_path / "absent.yaml"), "settings file not found"),
    ]
    bad = tmp_path / "broken.yaml"
    bad.write_text("traits: [a, b\nanimals: 3\n", encoding="utf-8")
    cases.append((str(bad), "is not valid YAML"))
    twice = tmp_path / "twice.yaml"
    twice.write_text("animals: 300\nfounders: 20\nanimals: 30\n", encoding="utf-8")
    cases.append((str(twice), "key 'animals' is given twice (lines 1 and 3)"))
    for path, message in cases:
        assert main(["simulate", "--out", str(tmp_path / "o"), "--settings", path]) == 2
        err = capsys.readouterr().err.strip().splitlines()
        assert len(err) == 1 and message in err[0], err
