"""The workflow's plan: jobs per population, config mistakes stopped before any job, reruns.

These tests run Snakemake dry runs (-n) on the tiny invented study, so they need no stage to
be built. Reruns are checked on outputs made by hand with chosen time stamps: Snakemake
decides what to rerun from file modification times (its documented default rule: a job runs
again when an input is newer than an output), and the workflow keeps one settings file per
stage under results/config/ that changes only when that stage's settings change.
"""

from __future__ import annotations

import os
import time
from pathlib import Path

import pandas as pd
import pytest
import yaml

from workflow_helpers import ROOT, make_study, planned_jobs, planned_wildcards, snakemake

STAGE_OUTPUTS = {
    # in the order the stages run
    "pedigree": ["pedigree/pedigree.csv", "pedigree/relationship_inverse.mtx",
                 "pedigree/changes.csv", "pedigree/summary.json"],
    "fit": ["fits/{p}/posterior.nc", "fits/{p}/parameters.csv", "fits/{p}/diagnostics.json",
            "fits/{p}/pedigree_used.csv"],
    "null": ["null/null_G.nc", "null/summary.json"],
    "null_pilot": ["null/pilot/{p}.nc"],
    "null_refit": ["null/refits/{p}/replicates_0.nc"],
    "compare": ["compare/draws.nc"],
    "report": ["report/report.html"],
}


def test_dry_run_lists_one_fit_per_population(tmp_path):
    config = make_study(tmp_path)
    result = snakemake(tmp_path, "-n", config=config)
    assert result.returncode == 0, result.stderr[-3000:]
    table = pd.read_csv(tmp_path / "data" / "phenotypes.csv", dtype=str)
    populations = sorted(table["site"].unique())
    assert populations == ["north", "south"]
    # the refitting null: config/tiny.yaml asks for 39 replicates, 39 per job, after one pilot job
    # per population (pilot_replicates: 4)
    assert planned_jobs(result) == {"pedigree": 1, "fit": 2, "null_pilot": 2, "null_refit": 2, "compare": 1,
                                    "report": 1, "all": 1}
    assert planned_wildcards(result, "null_pilot") == ["north", "south"]
    assert planned_wildcards(result, "null_refit") == ["north", "south"]
    assert planned_wildcards(result, "fit") == populations


def test_populations_key_limits_the_fits(tmp_path):
    # three populations in the table: every one by default, the listed ones when listed
    # three populations need 60 null replicates with the tiny study's two traits (alpha 0.05)
    null_model = {"replicates": 60, "replicates_per_job": 20,
                  "refit": {"chains": 1, "warmup": 100, "draws": 100}}
    config = make_study(tmp_path, compare={"skewers": 50, "null_model": null_model})
    table = pd.read_csv(tmp_path / "data" / "phenotypes.csv", dtype=str)
    table.loc[table["bird"].isin([f"S{i:03d}" for i in range(1, 13)]), "site"] = "east"
    table.to_csv(tmp_path / "data" / "phenotypes.csv", index=False)
    everything = snakemake(tmp_path, "-n", config=config)
    assert everything.returncode == 0, everything.stderr[-3000:]
    assert planned_wildcards(everything, "fit") == ["east", "north", "south"]
    config = make_study(tmp_path, populations=["south", "east"],
                        compare={"skewers": 50, "null_model": null_model})
    table.to_csv(tmp_path / "data" / "phenotypes.csv", index=False)  # make_study copied afresh
    result = snakemake(tmp_path, "-n", config=config)
    assert result.returncode == 0, result.stderr[-3000:]
    assert planned_wildcards(result, "fit") == ["east", "south"]
    effective = yaml.safe_load((tmp_path / "results/config/effective.yaml").read_text())
    assert effective["populations"] == ["south", "east"]


def test_demo_config_dry_run_lists_every_population():
    demo = yaml.safe_load((ROOT / "config" / "config.yaml").read_text(encoding="utf-8"))
    phenotypes = ROOT / demo["data"]["phenotypes"]
    if not phenotypes.is_file():
        pytest.skip(f"demo data not made yet ({demo['data']['phenotypes']}; 'ped2g simulate')")
    column = demo["data"]["columns"]["population"]
    populations = demo.get("populations") or sorted(
        pd.read_csv(phenotypes, dtype=str, keep_default_na=False)[column].unique())
    result = snakemake(ROOT, "-n")  # the Snakefile's own config: config/config.yaml
    assert result.returncode == 0, result.stderr[-3000:]
    jobs = planned_jobs(result)
    if jobs:  # a finished demo run in the work tree plans nothing, which is also right
        assert jobs.get("fit", 0) <= len(populations)
        assert set(planned_wildcards(result, "fit")) <= set(populations)
    fresh = snakemake(ROOT, "-n", "--forceall")
    assert fresh.returncode == 0, fresh.stderr[-3000:]
    assert planned_jobs(fresh)["fit"] == len(populations)
    assert planned_wildcards(fresh, "fit") == sorted(populations)


# Each case: (config changes, words the one-line message must contain).
MISTAKES = {
    "misspelled key": ({"compare": {"skewerz": 50}}, ["compare.skewerz", "skewers"]),
    "missing file": ({"data": {"pedigree": "data/pedigre.csv"}}, ["data.pedigree",
                                                                  "data/pedigre.csv"]),
    "trait not in table": ({"traits": ["wing", "tarsal"]}, ["traits", "tarsal", "wing, tarsus"]),
    "wrong type": ({"sampling": {"chains": "four"}}, ["sampling.chains", "integer"]),
    "bad choice": ({"compare": {"scale": "log"}}, ["compare.scale", "variance"]),
    "unknown population": ({"populations": ["north", "west"]}, ["populations", "west"]),
    "fixed column missing": ({"fixed": {"age": "numeric"}}, ["fixed", "age"]),
    "random column missing": ({"random": [{"name": "nest", "column": "nest_id"}]},
                              ["random[0].column", "nest_id"]),
    "id column missing": ({"data": {"columns": {"id": "ring", "sire": "father", "dam": "mother",
                                                "population": "site"}}},
                          ["data.columns.id", "ring"]),
    "one population only": ({"populations": ["north"]}, ["two populations", "populations"]),
    "alpha outside (0, 1)": ({"compare": {"alpha": 1.5}}, ["compare.alpha", "1.5"]),
    # two populations, two traits: Holm's smallest adjusted p 2 / (R + 1) <= 0.05 needs R >= 39
    "too few null replicates": ({"compare": {"null_model": {"replicates": 25}}},
                                ["compare.null_model.replicates", "25", "at least 39"]),
    # [[1, 2], [2, 1]] has eigenvalues 3 and -1 (exact), so it is no covariance matrix
    "fixed G not positive definite": (
        {"model": {"fixed_covariances": {"G": [[1.0, 2.0], [2.0, 1.0]],
                                         "R": [[1.0, 0.0], [0.0, 1.0]]}}},
        ["model.fixed_covariances.G", "not positive definite"]),
}


@pytest.mark.parametrize("case", sorted(MISTAKES))
def test_config_mistake_stops_with_one_line_before_any_job(tmp_path, case):
    changes, words = MISTAKES[case]
    config = make_study(tmp_path)
    raw = yaml.safe_load(config.read_text())
    for key, value in changes.items():
        if isinstance(value, dict) and isinstance(raw.get(key), dict):
            raw[key].update(value)
        else:
            raw[key] = value
    config.write_text(yaml.safe_dump(raw))
    result = snakemake(tmp_path, "--cores", "1", config=config)
    assert result.returncode == 2
    lines = [ln for ln in result.stderr.splitlines() if ln.strip()]
    assert len(lines) == 1, result.stderr
    assert lines[0].startswith("ped2g workflow: error: ")
    for word in words:
        assert word in lines[0], (word, lines[0])
    assert "Traceback" not in result.stdout + result.stderr
    assert not (tmp_path / "logs").exists()
    assert not (tmp_path / "results" / "pedigree").exists()


def test_command_line_override_is_validated_too(tmp_path):
    config = make_study(tmp_path)
    result = snakemake(tmp_path, "-n", "--config", "sampling={draws: 5}", config=config)
    assert result.returncode == 2
    assert result.stderr.strip().count("\n") == 0
    assert "--config overrides: key 'sampling.draws': 5 is less than the minimum of 10" in result.stderr


def test_command_line_override_reaches_the_stages_with_its_type(tmp_path):
    # Snakemake reads nested --config values as strings; the workflow gives them the schema's type
    config = make_study(tmp_path)
    result = snakemake(tmp_path, "-n", "--config", "compare={skewers: 60, subspace_dims: 1}",
                       "checks={on_failure: stop}", config=config)
    assert result.returncode == 0, result.stderr[-3000:]
    effective = yaml.safe_load((tmp_path / "results/config/effective.yaml").read_text())
    assert effective["compare"]["skewers"] == 60 and effective["compare"]["subspace_dims"] == 1
    assert effective["checks"]["on_failure"] == "stop"
    assert effective["sampling"]["draws"] == 100  # the rest of the study's config is kept
    compare = yaml.safe_load((tmp_path / "results/config/compare.yaml").read_text())
    assert compare["compare"]["skewers"] == 60


def test_study_config_does_not_inherit_the_demo_config(tmp_path):
    # Snakemake merges --configfile into the Snakefile's default config; the workflow must use
    # only the study's file, so a key the study leaves out takes the schema default.
    config = make_study(tmp_path)
    raw = yaml.safe_load(config.read_text())
    del raw["fixed"]
    del raw["report"]
    config.write_text(yaml.safe_dump(raw))
    result = snakemake(tmp_path, "-n", config=config)
    assert result.returncode == 0, result.stderr[-3000:]
    effective = yaml.safe_load((tmp_path / "results/config/effective.yaml").read_text())
    import ped2g.config

    defaults = ped2g.config.fill_defaults({})
    assert effective["fixed"] == defaults["fixed"] == {}
    assert effective["report"] == defaults["report"]
    assert effective["data"]["pedigree"] == "data/pedigree.csv"


def _fake_finished_run(folder: Path, populations: list[str]) -> None:
    """Make every output by hand, each newer than the files it is made from."""
    now = time.time()
    stamp = now - 10_000
    for path in [folder / "data" / "pedigree.csv", folder / "data" / "phenotypes.csv",
                 *sorted((folder / "results" / "config").glob("*.yaml"))]:
        os.utime(path, (stamp, stamp))
    for step, (stage, outputs) in enumerate(STAGE_OUTPUTS.items(), start=1):
        for pattern in outputs:
            for p in populations if "{p}" in pattern else [None]:
                path = folder / "results" / pattern.format(p=p)
                path.parent.mkdir(parents=True, exist_ok=True)
                path.write_text("made by the test\n")
                os.utime(path, (stamp + 1000 * step, stamp + 1000 * step))


@pytest.mark.parametrize("changes, expected", [
    ({}, {}),
    ({"compare": {"skewers": 80}}, {"compare": 1, "report": 1, "all": 1}),
    # the breeding-value null's estimator is not read by the refitting null
    ({"compare": {"null_model": {"estimator": "sample", "replicates": 39, "replicates_per_job": 39,
                                 "pilot_replicates": 4, "refit": {"chains": 1, "warmup": 100, "draws": 100}}}},
     {"compare": 1, "report": 1, "all": 1}),
    ({"compare": {"null_model": {"replicates": 39, "replicates_per_job": 39, "pilot_replicates": 4,
                                 "refit": {"chains": 1, "warmup": 100, "draws": 120}}}},
     {"null_pilot": 2, "null_refit": 2, "compare": 1, "report": 1, "all": 1}),
    # more pilots: new pilots, hence a new shared G and new replicates
    ({"compare": {"null_model": {"replicates": 39, "replicates_per_job": 39, "pilot_replicates": 5,
                                 "refit": {"chains": 1, "warmup": 100, "draws": 100}}}},
     {"null_pilot": 2, "null_refit": 2, "compare": 1, "report": 1, "all": 1}),
    # more replicates reuse the pilots
    ({"compare": {"null_model": {"replicates": 40, "replicates_per_job": 40, "pilot_replicates": 4,
                                 "refit": {"chains": 1, "warmup": 100, "draws": 100}}}},
     {"null_refit": 2, "compare": 1, "report": 1, "all": 1}),
    ({"compare": {"alpha": 0.1}}, {"compare": 1, "report": 1, "all": 1}),
    ({"report": {"title": "Another title"}}, {"report": 1, "all": 1}),
    ({"sampling": {"draws": 150}}, {"fit": 2, "null_pilot": 2, "null_refit": 2, "compare": 1, "report": 1,
                                    "all": 1}),
    ({"data": {"missing_parent": ["0", "NA", "-"]}},
     {"pedigree": 1, "fit": 2, "null_pilot": 2, "null_refit": 2, "compare": 1, "report": 1, "all": 1}),
], ids=["nothing", "skewers", "null-estimator", "refit-draws", "pilots", "replicates", "alpha", "report-title",
        "draws", "missing-codes"])
def test_a_settings_change_reruns_only_the_stages_it_affects(tmp_path, changes, expected):
    config = make_study(tmp_path)
    first = snakemake(tmp_path, "-n", config=config)  # writes results/config/*.yaml
    assert first.returncode == 0, first.stderr[-3000:]
    _fake_finished_run(tmp_path, ["north", "south"])
    assert planned_jobs(snakemake(tmp_path, "-n", config=config)) == {}
    raw = yaml.safe_load(config.read_text())
    for key, value in changes.items():
        raw[key].update(value)
    config.write_text(yaml.safe_dump(raw))
    result = snakemake(tmp_path, "-n", config=config)
    assert result.returncode == 0, result.stderr[-3000:]
    assert planned_jobs(result) == expected


def test_changed_phenotype_table_reruns_the_fits(tmp_path):
    config = make_study(tmp_path)
    assert snakemake(tmp_path, "-n", config=config).returncode == 0
    _fake_finished_run(tmp_path, ["north", "south"])
    (tmp_path / "data" / "phenotypes.csv").touch()
    result = snakemake(tmp_path, "-n", config=config)
    assert planned_jobs(result) == {"fit": 2, "null_pilot": 2, "null_refit": 2, "compare": 1, "report": 1,
                                    "all": 1}


# Each case: (text added to the study's config, words the one-line message must contain).
# Snakemake's own reading keeps the last of two equal keys; the workflow reads the file again
# strictly (ped2g.config.read_config_file).
TEXT_MISTAKES = {
    "key given twice": ("traits: [tarsus, wing]\n", ["key 'traits' is given twice", "line"]),
    "nested key given twice": ("sampling:\n  draws: 100\n  draws: 200\n",
                               ["key 'sampling' is given twice"]),
    "template request": ("__use_yte__: false\n", ["'__use_yte__'"]),
}


@pytest.mark.parametrize("case", sorted(TEXT_MISTAKES))
def test_config_text_mistake_stops_with_one_line_before_any_job(tmp_path, case):
    added, words = TEXT_MISTAKES[case]
    config = make_study(tmp_path)
    config.write_text(config.read_text() + added)
    result = snakemake(tmp_path, "--cores", "1", config=config)
    assert result.returncode == 2, result.stderr[-3000:]
    lines = [ln for ln in result.stderr.splitlines() if ln.strip()]
    assert len(lines) == 1, result.stderr
    assert lines[0].startswith("ped2g workflow: error: config study.yaml")
    for word in words:
        assert word in lines[0], (word, lines[0])
    assert not (tmp_path / "logs").exists()
    assert not (tmp_path / "results").exists()


def test_snakemake_evaluates_a_template_before_the_workflow_can_refuse_it(tmp_path):
    # What the README's security note says: with a top-level __use_yte__: true, Snakemake runs
    # the file's expressions while reading --configfile, before any code of ours. The workflow
    # still refuses the file, but the expression has already run (here it makes a file).
    config = make_study(tmp_path)
    probe = tmp_path / "evaluated"
    config.write_text("__use_yte__: true\n"
                      f"probe: ?__import__('pathlib').Path({str(probe)!r}).touch()\n"
                      + config.read_text())
    result = snakemake(tmp_path, "-n", config=config)
    assert result.returncode == 2
    assert "'__use_yte__'" in result.stderr
    assert probe.exists()


@pytest.mark.parametrize("case", ["folder", "empty file"])
def test_a_folder_or_empty_file_as_configfile_loses_nothing(tmp_path, case):
    # Snakemake opens every --configfile itself before it reads the Snakefile, so these two end
    # in Snakemake's own message, not ours (ped2g's commands refuse them in one line:
    # tests/test_config.py): a traceback for a folder, an unnamed WorkflowError for an empty
    # file. Checked here so the README's note is revised if Snakemake ever changes this. What
    # the workflow guarantees: no job runs and nothing is written.
    make_study(tmp_path)
    bad = tmp_path / "configs"
    if case == "folder":
        bad.mkdir()
    else:
        bad = tmp_path / "empty.yaml"
        bad.write_text("")
    before = sorted(p.name for p in tmp_path.iterdir())
    result = snakemake(tmp_path, "--cores", "1", config=bad)
    assert result.returncode != 0
    assert "Traceback" in result.stderr if case == "folder" else "WorkflowError" in result.stderr
    assert sorted(p.name for p in tmp_path.iterdir() if p.name != ".snakemake") == before
