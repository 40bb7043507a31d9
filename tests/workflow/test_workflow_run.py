"""The whole workflow on the tiny invented study: report made, nothing redone, only what changed
redone, and the same numbers again from the same config and seed.

The tiny study (tests/data/workflow/, 2 populations of 84 animals, 2 traits) runs 2 chains x 100
draws, far too few for the convergence checks, so its config sets checks.on_failure: flag. The
numbers are not checked for accuracy here (the stages' own tests do that); this checks the
wiring.
"""

from __future__ import annotations

import json
import shutil
import subprocess
import time

import numpy as np
import pandas as pd
import psutil
import pytest

from workflow_helpers import make_study, planned_jobs, snakemake, snakemake_command

pytestmark = pytest.mark.slow

POPULATIONS = ["north", "south"]


def _tables(folder, pattern):
    return {p.relative_to(folder).as_posix(): pd.read_csv(p) for p in sorted(folder.glob(pattern))}


def _assert_same_tables(first, second):
    assert first.keys() == second.keys()
    for name in first:
        pd.testing.assert_frame_equal(first[name], second[name], check_exact=True, obj=name)


@pytest.fixture(scope="module")
def finished(tiny_local_run):
    # one run shared with test_workflow_slurm.py (conftest.py); its fits compile cold into a
    # cache of their own, and the refit below loads them
    return tiny_local_run


def test_every_stage_ran_and_the_report_was_written(finished):
    folder, _config, result = finished
    assert planned_jobs(result) == {"pedigree": 1, "fit": 2, "null_pilot": 2, "null_refit": 2, "compare": 1,
                                    "report": 1, "all": 1}
    html = (folder / "results/report/report.html").read_text(encoding="utf-8")
    assert all(p in html for p in POPULATIONS)
    assert any((folder / "results/report/figures").glob("*.png"))
    for p in POPULATIONS:
        assert (folder / f"results/fits/{p}/posterior.nc").stat().st_size > 0
        assert (folder / f"logs/fit/{p}.log").stat().st_size > 0
    for stage in ("pedigree", "compare", "report"):
        assert (folder / f"logs/{stage}/{stage}.log").stat().st_size > 0
    for p in POPULATIONS:
        assert (folder / f"logs/null/refit_{p}_0.log").stat().st_size > 0
        assert (folder / f"logs/null/pilot_{p}.log").stat().st_size > 0
    # the replicates were simulated under the bias-corrected shared G of config/tiny.yaml's 4 pilots
    summary = json.loads((folder / "results/compare/summary.json").read_text())["refit_null"]
    assert summary["pilot_replicates"] == 4
    assert not np.allclose(summary["shared_G"], summary["shared_G_uncorrected"])
    assert np.linalg.eigvalsh(np.array(summary["shared_G"])).min() > 0
    # every comparison row that compares populations has its calibrated p-value
    distance = pd.read_csv(folder / "results/compare/distance.csv")
    assert distance["p_value"].between(1 / 41, 1).all() and distance["p_adjusted"].notna().all()


def test_a_second_run_does_nothing(finished):
    folder, config, _ = finished
    again = snakemake(folder, "--cores", "2", config=config)
    assert again.returncode == 0, again.stderr[-3000:]
    assert "Nothing to be done" in again.stdout + again.stderr


def test_same_config_and_seed_give_the_same_numbers(finished, tmp_path):
    folder, config, _ = finished
    # a fresh folder fits one population again from the raw tables, with the compiled code the
    # first run left in its cache (fast-math code differed between a fresh compile and a cached
    # one; see ped2g.fit.sample.exact_numba_math)
    other = tmp_path / "again"
    other.mkdir()
    shutil.copytree(folder / "data", other / "data")
    shutil.copy(config, other / "study.yaml")
    refit = snakemake(other, "--cores", "2", "results/fits/south/parameters.csv",
                      config=other / "study.yaml", timeout=900, tmpdir=folder / "tmp")
    assert refit.returncode == 0, refit.stderr[-3000:]
    assert any((folder / "tmp/ped2g-compile-cache").iterdir())
    _assert_same_tables(_tables(folder / "results/fits/south", "*.csv"),
                        _tables(other / "results/fits/south", "*.csv"))
    # the refitting null and the comparisons made again in place
    before = _tables(folder / "results/compare", "*.csv")
    redo = snakemake(folder, "--cores", "2", "--forcerun", "null_refit", config=config,
                     tmpdir=folder / "tmp")
    assert redo.returncode == 0, redo.stderr[-3000:]
    assert planned_jobs(redo) == {"null_refit": 2, "compare": 1, "report": 1, "all": 1}
    _assert_same_tables(before, _tables(folder / "results/compare", "*.csv"))


def _kill(processes):
    """SIGKILL these processes, as a crash or ``kill -9`` would; wait until they are gone."""
    for member in processes:
        try:
            member.kill()
        except psutil.NoSuchProcess:
            pass
    psutil.wait_procs(processes, timeout=60)


def _copy_and_kill_during_a_fit(finished, tmp_path, population, whole_tree):
    """Copy the finished study, run one fit with Snakemake's lock, SIGKILL it during the fit.

    ``whole_tree`` kills Snakemake and the job it started (a crash of the machine); otherwise
    only Snakemake, and the fit, orphaned, is left to finish on its own (``kill -9`` of the
    Snakemake process alone, or a cluster whose jobs outlive the login session). Returns
    (study folder, config, options of the command, surviving processes).
    """
    folder, config, _ = finished
    other = tmp_path / "killed"
    other.mkdir()
    shutil.copytree(folder / "data", other / "data")
    shutil.copy(config, other / "study.yaml")
    study = other / "study.yaml"
    options = ("--cores", "2", f"results/fits/{population}/parameters.csv")
    command, env = snakemake_command(other, *options, config=study, tmpdir=folder / "tmp",
                                     lock=True)
    fit_log = other / f"logs/fit/{population}.log"
    with subprocess.Popen(command, cwd=other, env=env, stdout=subprocess.DEVNULL,
                          stderr=subprocess.DEVNULL) as run:
        deadline = time.monotonic() + 600
        while not (fit_log.is_file() and "engine:" in fit_log.read_text(encoding="utf-8")):
            assert run.poll() is None, "the run ended before its fit started"
            assert time.monotonic() < deadline, "the fit did not start within 10 minutes"
            time.sleep(0.2)
        parent = psutil.Process(run.pid)
        parent.suspend()  # so it starts nothing between the listing and the kill
        children = parent.children(recursive=True)
        if whole_tree:
            for child in children:
                child.suspend()
            _kill([parent, *parent.children(recursive=True)])
            children = []
        else:
            _kill([parent])
    return other, study, options, children


def test_a_killed_run_completes_after_unlock_with_the_same_numbers(finished, tmp_path):
    # What the README says to do after a run is killed: unlock with the same options, then the
    # same command. Snakemake and its fit are killed (SIGKILL, so nothing can clean up) during
    # the fit, in a copy of the finished study with the same compile cache; the rerun must give
    # the finished run's numbers exactly.
    folder = finished[0]
    other, study, options, _ = _copy_and_kill_during_a_fit(finished, tmp_path, "south",
                                                           whole_tree=True)
    assert not (other / "results/fits/south/parameters.csv").exists()  # killed mid-fit

    locked = snakemake(other, *options, config=study, tmpdir=folder / "tmp", lock=True)
    assert locked.returncode != 0
    assert "cannot be locked" in locked.stderr and "--unlock" in locked.stderr
    unlocked = snakemake(other, *options, "--unlock", config=study, lock=True)
    assert unlocked.returncode == 0, unlocked.stderr[-3000:]
    rerun = snakemake(other, *options, config=study, tmpdir=folder / "tmp", lock=True,
                      timeout=900)
    assert rerun.returncode == 0, rerun.stderr[-3000:]
    assert planned_jobs(rerun) == {"fit": 1}  # the pedigree finished before the kill
    _assert_same_tables(_tables(folder / "results/fits/south", "*.csv"),
                        _tables(other / "results/fits/south", "*.csv"))


def test_a_fit_that_outlived_its_killed_snakemake_reruns_with_rerun_incomplete(finished,
                                                                               tmp_path):
    # Only Snakemake is killed; its fit runs on and writes its files. Snakemake cannot know they
    # are complete, so after unlocking the same command stops at "incomplete files", and the
    # README's --rerun-incomplete fits again, with the finished run's numbers.
    folder = finished[0]
    other, study, options, orphans = _copy_and_kill_during_a_fit(finished, tmp_path, "north",
                                                                 whole_tree=False)
    assert orphans, "the fit job was not running when Snakemake was killed"
    psutil.wait_procs(orphans, timeout=900)
    assert (other / "results/fits/north/parameters.csv").is_file()  # the orphan finished

    unlocked = snakemake(other, *options, "--unlock", config=study, lock=True)
    assert unlocked.returncode == 0, unlocked.stderr[-3000:]
    same = snakemake(other, *options, config=study, tmpdir=folder / "tmp", lock=True)
    assert same.returncode != 0
    assert "--rerun-incomplete" in same.stderr
    rerun = snakemake(other, *options, "--rerun-incomplete", config=study,
                      tmpdir=folder / "tmp", lock=True, timeout=900)
    assert rerun.returncode == 0, rerun.stderr[-3000:]
    assert planned_jobs(rerun) == {"fit": 1}
    _assert_same_tables(_tables(folder / "results/fits/north", "*.csv"),
                        _tables(other / "results/fits/north", "*.csv"))


def test_a_comparison_setting_reruns_only_compare_and_report(finished):
    folder, config, _ = finished
    kept = {p: p.stat().st_mtime_ns for p in
            [*(folder / "results/fits").rglob("*.nc"), *(folder / "results/null").rglob("*.nc"),
             folder / "results/pedigree/pedigree.csv"]}
    result = snakemake(folder, "--cores", "2", "--config", "compare={skewers: 60}",
                       config=config)
    assert result.returncode == 0, result.stderr[-3000:]
    assert planned_jobs(result) == {"compare": 1, "report": 1, "all": 1}
    assert {p: p.stat().st_mtime_ns for p in kept} == kept


def test_a_fit_that_misses_the_checks_stops_the_run_and_keeps_its_diagnostics(tmp_path):
    # 2 chains x 20 draws cannot reach an ESS of 100000 (at most 40): the check must fail
    config = make_study(tmp_path, checks={"on_failure": "stop", "min_ess": 100000},
                        sampling={"warmup": 20, "draws": 20})
    result = snakemake(tmp_path, "--cores", "2", "results/fits/north/posterior.nc",
                       config=config, timeout=900)
    assert result.returncode != 0
    assert "checks failed: population 'north'" in result.stderr
    assert "ESS" in result.stderr
    assert not (tmp_path / "results/fits/north/posterior.nc").exists()
    kept = tmp_path / "logs/fit/north.failed"
    assert (kept / "diagnostics.json").stat().st_size > 0
    assert (kept / "parameters.csv").stat().st_size > 0
