"""Fixtures shared by the workflow tests."""

from __future__ import annotations

import pytest

from workflow_helpers import make_study, snakemake


@pytest.fixture(scope="session")
def tiny_local_run(tmp_path_factory):
    """The whole tiny workflow, run once on this machine: (folder, config, Snakemake's result).

    Its fits compile into a cache of their own (``folder/tmp``), so they compile cold; later runs
    given that folder as their ``tmpdir`` load the compiled code. Tests that read this run's fit
    outputs rely on no test refitting it in place.
    """
    folder = tmp_path_factory.mktemp("tiny_study")
    config = make_study(folder)
    result = snakemake(folder, "--cores", "2", config=config, timeout=1500, tmpdir=folder / "tmp")
    assert result.returncode == 0, (result.stdout + result.stderr)[-5000:]
    return folder, config, result
