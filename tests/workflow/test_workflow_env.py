"""envs/ped2g.yaml (for conda users) must ask for the same versions as pyproject.toml (pip).

Conda cannot be reached where the tests run, so the environment file is checked as text: the
same packages, the same version ranges, the same Python.
"""

from __future__ import annotations

import re
import tomllib

import yaml

from workflow_helpers import ROOT

# Conda package names that differ from the PyPI names (none for now; add them here).
CONDA_NAMES: dict[str, str] = {}
NOT_FROM_PYPROJECT = {"pip"}  # conda-only entries of the environment file


def _split(requirement: str) -> tuple[str, frozenset[str]]:
    """'numpy >=1.26, <2.4' -> ('numpy', {'>=1.26', '<2.4'})."""
    match = re.match(r"^\s*([A-Za-z0-9_.\-]+)\s*(.*)$", requirement)
    assert match, requirement
    name = re.sub(r"[-_.]+", "-", match.group(1)).lower()
    spec = frozenset(s.replace(" ", "") for s in match.group(2).split(",") if s.strip())
    return name, spec


def _pyproject() -> dict:
    with open(ROOT / "pyproject.toml", "rb") as handle:
        return tomllib.load(handle)


def _environment() -> dict[str, frozenset[str]]:
    env = yaml.safe_load((ROOT / "envs" / "ped2g.yaml").read_text(encoding="utf-8"))
    return dict(_split(d) for d in env["dependencies"] if isinstance(d, str))


def test_environment_pins_equal_pyproject():
    wanted = dict(_split(d) for d in _pyproject()["project"]["dependencies"])
    wanted = {CONDA_NAMES.get(k, k): v for k, v in wanted.items()}
    have = {k: v for k, v in _environment().items() if k not in NOT_FROM_PYPROJECT | {"python"}}
    assert have == wanted


def test_environment_python_equals_requires_python():
    python = _pyproject()["project"]["requires-python"]
    assert _environment()["python"] == frozenset(s.replace(" ", "") for s in python.split(","))


def test_split_reads_both_spellings():
    # the two spellings the files use must compare equal
    assert _split("numpy>=1.26,<2.4") == _split("numpy >=1.26, <2.4")
    assert _split("numpy>=1.26,<2.4") != _split("numpy >=1.26,<2.5")
