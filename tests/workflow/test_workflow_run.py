"""The whole workflow on the tiny invented study: report made, nothing redone, only what changed
redone, and the same numbers again from the same config and seed.

The tiny study (tests/data/workflow/, 2 populations of 84 animals, 2 traits) runs 2 chains x 100
draws, far too few for the convergence checks, so its config sets checks.on_failure: flag. The
numbers are not checked for accuracy here (the stages' own tests do that); this checks the
wiring.
"""

from __future__ import annotations

import shutil

import pandas as pd
import pytest

from workflow_helpers import make_study, planned_jobs, snakemake

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
    assert planned_jobs(result) == {"pedigree": 1, "fit": 2, "null": 1, "compare": 1,
                                    "report": 1, "all": 1}
    html = (folder / "results/report/report.html").read_text(encoding="utf-8")
    assert all(p in html for p in POPULATIONS)
    assert any((folder / "results/report/figures").glob("*.png"))
    for p in POPULATIONS:
        assert (folder / f"results/fits/{p}/posterior.nc").stat().st_size > 0
        assert (folder / f"logs/fit/{p}.log").stat().st_size > 0
    for stage in ("pedigree", "null", "compare", "report"):
        assert (folder / f"logs/{stage}/{stage}.log").stat().st_size > 0


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
    # the null and the comparisons made again in place
    before = _tables(folder / "results/compare", "*.csv")
    redo = snakemake(folder, "--cores", "2", "--forcerun", "null", config=config)
    assert redo.returncode == 0, redo.stderr[-3000:]
    assert planned_jobs(redo) == {"null": 1, "compare": 1, "report": 1, "all": 1}
    _assert_same_tables(before, _tables(folder / "results/compare", "*.csv"))


def test_a_comparison_setting_reruns_only_compare_and_report(finished):
    folder, config, _ = finished
    kept = {p: p.stat().st_mtime_ns for p in
            [*(folder / "results/fits").rglob("*.nc"), folder / "results/null/null_G.nc",
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
