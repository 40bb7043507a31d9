"""profiles/slurm: this Snakemake version reads it, and a fit job gets the resources it needs.

The profile is read with the local executor put in its place (a dry run), so no cluster is
needed: every other setting of the profile is taken. test_workflow_slurm.py runs it on SLURM.
"""

from __future__ import annotations

import re

import pytest
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
        _assert_plugin_accepts(resources)


def _assert_plugin_accepts(resources: str) -> None:
    """No sbatch option in slurm_extra that the SLURM plugin sets itself: it refuses such a job
    (its own list, snakemake_executor_plugin_slurm.validation), and Snakemake 9.27 then waits
    for ever (seen with --job-name on a one-node cluster)."""
    extra = re.search(r"slurm_extra=(.*?)(?:, \w+=|$)", resources)
    if extra is None:
        return
    validation = pytest.importorskip("snakemake_executor_plugin_slurm.validation")
    for pattern, name in validation.get_forbidden_slurm_options().items():
        assert not re.search(pattern, extra.group(1)), f"slurm_extra sets the {name}"


def test_a_large_population_asks_for_the_memory_of_its_eigendecomposition(tmp_path):
    """fit_mem_mb: the marginal engine's peak (ped2g.fit.marginal.memory_needed) for the
    population's phenotype rows, over the share of a job's memory that engine plans to fill."""
    import pandas as pd

    from ped2g.fit import marginal

    config = make_study(tmp_path)
    table = tmp_path / "data" / "phenotypes.csv"
    rows = pd.read_csv(table)
    south = rows[rows["site"] == "south"]
    big = pd.concat([rows] + [south] * 178, ignore_index=True)     # south: 84 x 179 = 15,036 rows
    big.to_csv(table, index=False)
    result = snakemake(tmp_path, "--profile", str(ROOT / "profiles" / "slurm"),
                       "--executor", "local", "-n", config=config)
    assert result.returncode == 0, result.stderr[-3000:]
    text = result.stdout + result.stderr
    memory = {}
    for block in re.split(r"\n(?=\[)", text):
        if re.search(r"\brule fit:", block):
            population = re.search(r"wildcards: population=(\w+)", block).group(1)
            memory[population] = int(re.search(r"mem_mb=(\d+)", block).group(1))
    need_mb = (24 * 15036 ** 2 + marginal.OTHER_BYTES) / marginal.MEMORY_SHARE / 1e6    # 9,732 MB
    assert need_mb <= memory["south"] <= need_mb + 2
    assert memory["north"] == 4000


def test_profile_names_the_slurm_executor_and_leaves_light_rules_local():
    profile = yaml.safe_load((ROOT / "profiles" / "slurm" / "config.yaml").read_text())
    assert profile["executor"] == "slurm"
    assert profile["retries"] >= 1  # the fit's memory and time double on a retry
    snakefile = (ROOT / "Snakefile").read_text()
    local = re.search(r"localrules:\n((?:\s+\w+,\n)+)", snakefile).group(1).split()
    assert {w.rstrip(",") for w in local} == {"all", "pedigree", "null", "compare", "report"}
