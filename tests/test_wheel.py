"""A regular install works: the wheel holds everything the package reads at run time.

The package once found its config schema through a path relative to the source tree, so an
installed ped2g (a wheel, or ``pip install .``) failed on every config. This test builds the wheel
from a copy of the package alone, installs it with ``pip install --no-deps --target`` (the
dependencies come from the Python running the tests), and runs the command from a folder outside
the repository with only the installed copy on ``PYTHONPATH``. It asserts that the code that ran
is the installed copy, so the source tree cannot stand in for a missing file.
"""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
import zipfile
from pathlib import Path

import pytest
import yaml

pytestmark = pytest.mark.slow  # builds a wheel (about 10 s) and runs four commands

ROOT = Path(__file__).resolve().parents[1]
TINY = ROOT / "tests" / "data" / "workflow"
SCHEMA_IN_WHEEL = "ped2g/schemas/config.schema.yaml"
# Files a run leaves beside the sources (bytecode, numba's on-disk cache); not part of a build.
NOT_SOURCES = shutil.ignore_patterns("__pycache__", "*.pyc", "*.nbi", "*.nbc")


@pytest.fixture(scope="module")
def installed(tmp_path_factory):
    """(site folder, environment) of the wheel installed with nothing else of the repository."""
    base = tmp_path_factory.mktemp("wheel")
    source = base / "source"
    (source / "workflow").mkdir(parents=True)
    shutil.copy(ROOT / "pyproject.toml", source)
    shutil.copy(ROOT / "README.md", source)  # pyproject.toml names it as the long description
    shutil.copytree(ROOT / "workflow" / "ped2g", source / "workflow" / "ped2g", ignore=NOT_SOURCES)
    dist = base / "dist"
    build = subprocess.run(
        [sys.executable, "-m", "pip", "wheel", "--no-deps", "--quiet", "--wheel-dir", str(dist),
         str(source)], capture_output=True, text=True, cwd=base, timeout=600)
    assert build.returncode == 0, build.stderr[-3000:]
    (wheel,) = dist.glob("ped2g-*.whl")
    with zipfile.ZipFile(wheel) as archive:
        assert SCHEMA_IN_WHEEL in archive.namelist()
    site = base / "site"
    install = subprocess.run(
        [sys.executable, "-m", "pip", "install", "--no-deps", "--quiet", "--target", str(site),
         str(wheel)], capture_output=True, text=True, cwd=base, timeout=600)
    assert install.returncode == 0, install.stderr[-3000:]
    env = {k: v for k, v in os.environ.items() if k != "PYTHONPATH"}
    env["PYTHONPATH"] = str(site)
    return site, env


def _run(args, env, cwd):
    return subprocess.run(args, capture_output=True, text=True, env=env, cwd=cwd, timeout=600)


def test_the_installed_copy_is_the_one_that_runs(installed, tmp_path):
    site, env = installed
    result = _run([sys.executable, "-c",
                   "import ped2g, ped2g.config; print(ped2g.__file__); "
                   "print(ped2g.config.SCHEMA_PATH)"], env, tmp_path)
    assert result.returncode == 0, result.stderr
    module, schema = result.stdout.split()
    assert Path(module).resolve().is_relative_to(site.resolve())
    assert Path(schema).resolve().is_relative_to(site.resolve())
    assert Path(schema).is_file()


def test_help_init_pedigree_and_a_config_load_from_the_wheel(installed, tmp_path):
    site, env = installed
    ped2g = str(site / "bin" / "ped2g")  # the console script the wheel declares
    work = tmp_path / "study"  # a folder outside the repository
    (work / "data").mkdir(parents=True)
    for name in ("pedigree.csv", "phenotypes.csv"):
        shutil.copy(TINY / name, work / "data" / name)

    shown = _run([ped2g, "--help"], env, work)
    assert shown.returncode == 0, shown.stderr
    assert "pedigree" in shown.stdout and "fit" in shown.stdout

    init = _run([ped2g, "init", "--pedigree", "data/pedigree.csv", "--phenotypes",
                 "data/phenotypes.csv", "--out", "study.yaml"], env, work)
    assert init.returncode == 0, init.stderr
    written = yaml.safe_load((work / "study.yaml").read_text(encoding="utf-8"))
    assert written["traits"] == ["wing", "tarsus"]  # the tiny study's two trait columns

    pedigree = _run([ped2g, "pedigree", "data/pedigree.csv", "--out", "results/pedigree",
                     "--id", "bird", "--sire", "father", "--dam", "mother"], env, work)
    assert pedigree.returncode == 0, pedigree.stderr
    out = work / "results" / "pedigree"
    assert sorted(p.name for p in out.iterdir()) == [
        "changes.csv", "pedigree.csv", "relationship_inverse.mtx", "summary.json"]

    # loading the written config fills the schema's defaults from the installed schema file
    loaded = _run([sys.executable, "-c",
                   "import json; from ped2g.config import load_config; "
                   "c = load_config('study.yaml'); "
                   "print(json.dumps([c['traits'], c['sampling']['chains'], "
                   "c['compare']['null_model']['estimator']]))"], env, work)
    assert loaded.returncode == 0, loaded.stderr
    schema = yaml.safe_load((ROOT / "workflow" / "ped2g" / "schemas" / "config.schema.yaml")
                            .read_text(encoding="utf-8"))
    sampling = schema["properties"]["sampling"]["properties"]
    null_model = schema["properties"]["compare"]["properties"]["null_model"]["properties"]
    assert yaml.safe_load(loaded.stdout) == [["wing", "tarsus"], sampling["chains"]["default"],
                                             null_model["estimator"]["default"]]

    # a stage command reads its config strictly from the installed package too
    twice = work / "twice.yaml"
    twice.write_text((work / "study.yaml").read_text(encoding="utf-8") + "traits: [wing]\n",
                     encoding="utf-8")
    refused = _run([ped2g, "fit", "--config", "twice.yaml", "--population", "north",
                    "--pedigree", "results/pedigree", "--out", "results/fits/north"], env, work)
    assert refused.returncode == 2
    assert refused.stderr.strip().count("\n") == 0, refused.stderr
    assert "key 'traits' is given twice" in refused.stderr
    assert not (work / "results" / "fits").exists()
