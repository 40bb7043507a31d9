"""Helpers for the workflow tests: a throw-away study folder and a way to run Snakemake in it."""

from __future__ import annotations

import os
import re
import shutil
import subprocess
import sys
from pathlib import Path

import yaml

ROOT = Path(__file__).resolve().parents[2]
SNAKEFILE = ROOT / "Snakefile"
TINY_DATA = ROOT / "tests" / "data" / "workflow"
TINY_CONFIG = ROOT / "config" / "tiny.yaml"


def make_study(folder: Path, **changes) -> Path:
    """Copy the tiny invented study into ``folder`` and write its config; return the config path.

    ``changes`` replace top-level config keys (a dict value updates that section key by key).
    """
    data = folder / "data"
    data.mkdir(parents=True, exist_ok=True)
    for name in ("pedigree.csv", "phenotypes.csv"):
        shutil.copy(TINY_DATA / name, data / name)
    config = yaml.safe_load(TINY_CONFIG.read_text(encoding="utf-8"))
    config["data"]["pedigree"] = "data/pedigree.csv"
    config["data"]["phenotypes"] = "data/phenotypes.csv"
    for key, value in changes.items():
        if isinstance(value, dict) and isinstance(config.get(key), dict):
            config[key].update(value)
        else:
            config[key] = value
    path = folder / "study.yaml"
    path.write_text(yaml.safe_dump(config, sort_keys=False), encoding="utf-8")
    return path


def snakemake_command(folder: Path, *args: str, config: Path | None = None,
                      tmpdir: Path | None = None, lock: bool = False) -> tuple[list[str], dict]:
    """The command line and environment that run the workflow's Snakefile in ``folder``.

    ``tmpdir`` becomes the jobs' temporary directory (``TMPDIR``), where the fits keep their
    compile cache: a new folder means a cold cache. Without ``lock`` Snakemake does not lock the
    folder (``--nolock``), so tests that run it side by side do not wait on each other.
    """
    command = [sys.executable, "-m", "snakemake", "--snakefile", str(SNAKEFILE),
               "--directory", str(folder)]
    if not lock:
        command.append("--nolock")
    if config is not None:
        command += ["--configfile", str(config)]
    command += list(args)
    env = dict(os.environ, PYTHONHASHSEED="0")
    if tmpdir is not None:
        tmpdir.mkdir(parents=True, exist_ok=True)
        env["TMPDIR"] = str(tmpdir)
    return command, env


def snakemake(folder: Path, *args: str, config: Path | None = None, timeout: float = 600,
              tmpdir: Path | None = None, lock: bool = False) -> subprocess.CompletedProcess:
    """Run the workflow's Snakefile with ``folder`` as working directory (see snakemake_command)."""
    command, env = snakemake_command(folder, *args, config=config, tmpdir=tmpdir, lock=lock)
    return subprocess.run(command, cwd=folder, capture_output=True, text=True, timeout=timeout,
                          env=env)


def planned_jobs(result: subprocess.CompletedProcess) -> dict[str, int]:
    """The 'Job stats' table of a Snakemake dry run as {rule: count} ({} when nothing to do)."""
    text = result.stdout + result.stderr
    if "Nothing to be done" in text:
        return {}
    match = re.search(r"Job stats:\n(.*?)\n\s*total\s+\d+", text, re.S)
    assert match, f"no job table in the Snakemake output:\n{text[-3000:]}"
    jobs = {}
    for line in match.group(1).splitlines():
        parts = line.split()
        if len(parts) == 2 and parts[1].isdigit():
            jobs[parts[0]] = int(parts[1])
    return jobs


def planned_wildcards(result: subprocess.CompletedProcess, rule: str) -> list[str]:
    """The population wildcard of every planned job of ``rule`` in a dry run's output."""
    text = result.stdout + result.stderr
    blocks = re.split(r"\n(?=\[|rule |localrule )", text)
    found = []
    for block in blocks:
        if re.match(rf"\s*(local)?rule {rule}:", block):
            m = re.search(r"wildcards: population=([^,\s]+)", block)
            if m:
                found.append(m.group(1))
    return sorted(found)
