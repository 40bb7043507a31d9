"""The tiny workflow on a real SLURM cluster, through Snakemake's SLURM executor plugin and the
project's profile (profiles/slurm) with an account and a partition filled in, as the README's
cluster section tells a lab to do.

It needs a running cluster with accounting (`sacct` reads jobs back from slurmdbd), such as the
one-node cluster that `.ci/slurm-up` starts. Elsewhere it skips with the reason; with
PED2G_REQUIRE_SLURM=1 (set by .ci/run) it fails instead, so CI cannot pass without it.
PED2G_SLURM_ACCOUNT and PED2G_SLURM_PARTITION name the account and partition (default: those
`.ci/slurm-up` makes; its default partition allows one hour, too little for a fit's request).

Checked against SLURM's own accounting record (`sacct`): every fit and every job of the
refitting null (its pilot refits and its replicates), and nothing else, ran as a SLURM job that completed, with the memory, time limit
and CPUs its rule asks for (the resources Snakemake resolves for the rule in a dry run:
fit_mem_mb and fit_runtime in workflow/rules/common.smk, threads = chains of a fit or of a
refit), on the profile's account and partition. Checked against the same config and seed run on
this machine (the session's local run, conftest.py): every table of every fit, every posterior
draw and every draw of the refitting null and of its pilots are identical.
"""

from __future__ import annotations

import importlib.util
import os
import re
import shutil
import subprocess
import time

import pandas as pd
import pytest
import xarray as xr
import yaml

from workflow_helpers import ROOT, make_study, snakemake

# the fixture below asks for tiny_local_run only when SLURM answers: tests/conftest.py lists this
# file with the ones that share that run, so the run is built once
pytestmark = pytest.mark.slow

POPULATIONS = ["north", "south"]
ACCOUNT = os.environ.get("PED2G_SLURM_ACCOUNT", "ped2g-ci")
PARTITION = os.environ.get("PED2G_SLURM_PARTITION", "long")
REQUIRED = os.environ.get("PED2G_REQUIRE_SLURM") == "1"
SACCT_FIELDS = ["JobIDRaw", "Comment", "WorkDir", "Account", "Partition", "ReqMem",
                "TimelimitRaw", "AllocCPUS", "State", "ExitCode"]


def _run(*command: str) -> subprocess.CompletedProcess:
    return subprocess.run(command, capture_output=True, text=True, timeout=60)


def _why_slurm_cannot_run() -> str | None:
    """None when a cluster answers and can take the jobs, else one line saying what is missing."""
    if importlib.util.find_spec("snakemake_executor_plugin_slurm") is None:
        return "Snakemake's SLURM executor plugin is not installed (pip install -e '.[cluster]')"
    for tool in ("sinfo", "sbatch", "sacct", "sacctmgr"):
        if shutil.which(tool) is None:
            return f"no '{tool}' on PATH (start a one-node cluster with .ci/slurm-up, as root)"
    nodes = _run("sinfo", "--noheader", "--partition", PARTITION, "--format", "%T")
    if nodes.returncode != 0:
        return f"sinfo failed: {(nodes.stderr or nodes.stdout).strip().splitlines()[-1:]}"
    states = nodes.stdout.split()
    if not any(s.rstrip("*") in ("idle", "mixed") for s in states):
        return f"no idle node in partition '{PARTITION}' (sinfo: {states or 'no nodes'})"
    accounting = _run("sacct", "--noheader", "--allocations", "--starttime", "now")
    if accounting.returncode != 0:
        return f"sacct cannot read the accounting database: {accounting.stderr.strip()}"
    accounts = _run("sacctmgr", "--noheader", "--parsable2", "list", "associations",
                    "format=account")
    if ACCOUNT not in accounts.stdout.split():
        return f"the account '{ACCOUNT}' is not in SLURM's accounting database"
    return None


def _profile(folder) -> str:
    """profiles/slurm with the account and partition filled in, as the README says to."""
    settings = yaml.safe_load((ROOT / "profiles" / "slurm" / "config.yaml").read_text())
    settings["default-resources"]["slurm_account"] = ACCOUNT
    settings["default-resources"]["slurm_partition"] = PARTITION
    folder.mkdir()
    (folder / "config.yaml").write_text(yaml.safe_dump(settings, sort_keys=False))
    return str(folder)


def _fit_resources(dry_run: subprocess.CompletedProcess, threads: dict[str, int]) -> dict[str, dict[str, int]]:
    """{'<rule>_<population>': {'mem_mb', 'runtime', 'threads'}} of the fit and null jobs a
    dry run plans (one chain per thread, ``threads`` per rule; a dry run for a cluster does not
    print the threads)."""
    found = {}
    for block in re.split(r"\n(?=\[)", dry_run.stdout + dry_run.stderr):
        rule = re.search(r"\brule (fit|null_pilot|null_refit):", block)
        if rule:
            population = re.search(r"wildcards: population=(\w+)", block).group(1)
            resources = re.search(r"resources: (.*)", block).group(1)
            found[f"{rule.group(1)}_{population}"] = {
                "mem_mb": int(re.search(r"\bmem_mb=(\d+)", resources).group(1)),
                "runtime": int(re.search(r"\bruntime=(\d+)", resources).group(1)),
                "threads": threads[rule.group(1)],
            }
    return found


def _jobs_of(folder, since: str) -> pd.DataFrame:
    """SLURM's accounting record of the jobs that ran in ``folder`` since ``since``."""
    # a finished job can take a moment to reach the database
    for _ in range(30):
        result = _run("sacct", "--allocations", "--parsable2", "--noheader", "--allusers",
                      "--starttime", since, "--format", ",".join(SACCT_FIELDS))
        assert result.returncode == 0, result.stderr
        rows = [line.split("|") for line in result.stdout.splitlines() if line]
        jobs = pd.DataFrame(rows, columns=SACCT_FIELDS)
        jobs = jobs[jobs["WorkDir"] == os.path.realpath(folder)]
        if len(jobs) and jobs["State"].isin(["COMPLETED", "FAILED", "CANCELLED", "TIMEOUT",
                                             "OUT_OF_MEMORY", "NODE_FAIL"]).all():
            return jobs
        time.sleep(2)
    return jobs


@pytest.fixture(scope="module")
def slurm_run(request, tmp_path_factory):
    reason = _why_slurm_cannot_run()
    if reason is not None:
        if REQUIRED:
            pytest.fail(f"PED2G_REQUIRE_SLURM=1 but SLURM cannot run the test: {reason}")
        pytest.skip(f"SLURM cannot run the test: {reason}")
    local = request.getfixturevalue("tiny_local_run")
    folder = tmp_path_factory.mktemp("tiny_study_slurm")
    config = make_study(folder)
    profile = _profile(folder / "profile")
    dry = snakemake(folder, "--profile", profile, "-n", config=config)
    assert dry.returncode == 0, (dry.stdout + dry.stderr)[-3000:]
    since = time.strftime("%Y-%m-%dT%H:%M:%S", time.localtime(time.time() - 5))
    # the fits load the code the local run compiled (its cache folder), so they start at once;
    # the plugin first asks SLURM about its jobs after 10 s instead of 40
    try:
        result = snakemake(folder, "--profile", profile, "--slurm-keep-successful-logs",
                           "--slurm-init-seconds-before-status-checks", "10",
                           config=config, timeout=900, tmpdir=local[0] / "tmp")
    except subprocess.TimeoutExpired as stopped:
        # a job the plugin refuses to submit leaves Snakemake waiting for ever
        said = stopped.stderr or b""
        said = said.decode(errors="replace") if isinstance(said, bytes) else said
        pytest.fail(f"Snakemake did not finish on SLURM in 900 s; squeue: "
                    f"{_run('squeue').stdout.strip()!r}; its last output:\n{said[-3000:]}")
    logs = "\n".join(p.read_text(errors="replace")[-2000:]
                     for p in sorted((folder / ".snakemake" / "slurm_logs").rglob("*.log")))
    assert result.returncode == 0, (result.stdout + result.stderr)[-5000:] + logs
    settings = yaml.safe_load(config.read_text())
    threads = {"fit": settings["sampling"]["chains"],
               "null_pilot": settings["compare"]["null_model"]["refit"]["chains"],
               "null_refit": settings["compare"]["null_model"]["refit"]["chains"]}
    return folder, local[0], _fit_resources(dry, threads), _jobs_of(folder, since)


def test_every_fit_ran_as_a_slurm_job_with_the_resources_its_rule_asks_for(slurm_run):
    _folder, _local, asked, jobs = slurm_run
    expected = sorted(f"{rule}_{p}" for rule in ("fit", "null_pilot", "null_refit") for p in POPULATIONS)
    assert sorted(asked) == expected
    # only the fits and the refitting null's jobs go to SLURM; the light steps run where
    # Snakemake runs (the tiny study has one pilot and one null_refit job per population)
    ran = sorted(re.match(r"rule_(fit|null_pilot|null_refit)_wildcards_(\w+?)(?:_\d+)?$", c).expand(r"\1_\2")
                 for c in jobs["Comment"])
    assert ran == expected, jobs.to_string()
    for _, job in jobs.iterrows():
        want = asked[re.match(r"rule_(fit|null_pilot|null_refit)_wildcards_(\w+?)(?:_\d+)?$",
                              job["Comment"]).expand(r"\1_\2")]
        assert job["State"] == "COMPLETED" and job["ExitCode"] == "0:0", job.to_string()
        assert job["ReqMem"] == f"{want['mem_mb']}M", job.to_string()
        assert int(job["TimelimitRaw"]) == want["runtime"], job.to_string()
        assert int(job["AllocCPUS"]) == want["threads"], job.to_string()
        assert job["Account"] == ACCOUNT and job["Partition"] == PARTITION, job.to_string()


def test_the_cluster_run_gives_the_numbers_of_the_local_run(slurm_run):
    folder, local, _asked, _jobs = slurm_run
    assert (folder / "results/report/report.html").stat().st_size > 0
    for population in POPULATIONS:
        here = local / "results/fits" / population
        there = folder / "results/fits" / population
        tables = sorted(p.name for p in here.glob("*.csv"))
        assert tables and tables == sorted(p.name for p in there.glob("*.csv"))
        for name in tables:
            pd.testing.assert_frame_equal(pd.read_csv(here / name), pd.read_csv(there / name),
                                          check_exact=True, obj=f"{population}/{name}")
        with xr.open_dataset(here / "posterior.nc", group="posterior", engine="h5netcdf") as a, \
                xr.open_dataset(there / "posterior.nc", group="posterior",
                                engine="h5netcdf") as b:
            assert "G" in a.data_vars
            xr.testing.assert_equal(a.load(), b.load())
    # the refitting null's draws (the local run's comparison tables may be remade in place with
    # other settings by tests/workflow/test_workflow_run.py, its null files are not)
    refits = sorted(p.relative_to(local).as_posix() for p in (local / "results/null").rglob("*.nc"))
    assert any("/pilot/" in name for name in refits) and any("/refits/" in name for name in refits)
    assert refits == sorted(p.relative_to(folder).as_posix() for p in (folder / "results/null").rglob("*.nc"))
    for name in refits:
        with xr.open_dataset(local / name, engine="h5netcdf") as a, \
                xr.open_dataset(folder / name, engine="h5netcdf") as b:
            xr.testing.assert_equal(a[["G", "P", "mean"]].load(), b[["G", "P", "mean"]].load())
