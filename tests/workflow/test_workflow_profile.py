"""profiles/slurm: this Snakemake version reads it, and a fit job gets the resources it needs.

The SLURM executor plugin is not installed where the tests run, so the profile is read with
the local executor put in its place (a dry run): every other setting of the profile is taken.
"""

from __future__ import annotations

import re

import yaml

from workflow_helpers import ROOT, make_study, snakemake


def test_profile_is_read_and_fit_jobs_get_memory_and_time(tmp_path):
    config = make_study(tmp_path)
    result = snakemake(tmp_path, "--profile", str(ROOT / "profiles" / "slurm"),
                       "--executor", "local", "-n", config=config)
    assert result.returncode == 0, result.stderr[-3000:]
    text = result.stdout + result.stderr
    fit_blocks = [b for b in re.split(r"\n(?=\[)", text) if re.search(r"\brule fit:", b)]
    assert len(fit_blocks) == 2
    for block in fit_blocks:
        resources = re.search(r"resources: (.*)", block).group(1)
        assert "mem_mb=4000" in resources and "runtime=240" in resources
        assert "slurm_extra=" in resources


def test_profile_names_the_slurm_executor_and_leaves_light_rules_local():
    profile = yaml.safe_load((ROOT / "profiles" / "slurm" / "config.yaml").read_text())
    assert profile["executor"] == "slurm"
    assert profile["retries"] >= 1  # the fit's memory and time double on a retry
    snakefile = (ROOT / "Snakefile").read_text()
    local = re.search(r"localrules:\n((?:\s+\w+,\n)+)", snakefile).group(1).split()
    assert {w.rstrip(",") for w in local} == {"all", "pedigree", "null", "compare", "report"}
