"""Makes the shared test oracles (tests/textbook.py) importable from every test folder, and lays
the tests out for pytest-xdist.

The README's test command runs the tests on every core (pyproject.toml: ``-n auto --dist
loadgroup --no-loadscope-reorder``). Each test file is one unit of work, so its module fixtures
are built once; the files that share a session fixture form one unit, so it is built once too;
and the longest units are queued first, so that no worker is left with a long one at the end.
``pytest -n 0`` runs everything in one process in the same order.
"""

import sys
from pathlib import Path

import pytest

sys.path.insert(0, str(Path(__file__).resolve().parent))

# Session fixtures that are expensive to build (a whole workflow run, a whole report): every test
# using one runs on the worker that built it.
SHARED_SESSION_FIXTURES = ("tiny_local_run", "built_report")

# Units measured longest in a serial run of the suite (pytest --durations), longest first;
# every other file follows in collection order.
LONGEST_FIRST = (
    "tests/workflow/test_demo_findings.py",
    "tiny_local_run",
    "tests/fit/test_recovery.py",
    "tests/null/test_refit_calibration.py",
    "tests/fit/test_sparse_field_run.py",
    "tests/fit/test_sparse_engine.py",
    "tests/fit/test_latent_vs_marginal.py",
    "tests/fit/test_command_run.py",
)


def work_unit(item: pytest.Item) -> str:
    """The xdist group of a test: the group it is marked with (a file whose fixtures ask for a
    shared one at run time says so), else a shared session fixture it uses, else its file."""
    marked = item.get_closest_marker("xdist_group")
    if marked is not None:
        return str(marked.args[0] if marked.args else marked.kwargs.get("name", "default"))
    shared = [name for name in SHARED_SESSION_FIXTURES if name in item.fixturenames]
    return shared[0] if shared else item.nodeid.split("::")[0]


@pytest.hookimpl(tryfirst=True)
def pytest_collection_modifyitems(config, items):
    rank = {unit: i for i, unit in enumerate(LONGEST_FIRST)}
    units = {item.nodeid: work_unit(item) for item in items}
    items.sort(key=lambda item: rank.get(units[item.nodeid], len(rank)))  # stable: files keep their order
    for item in items:
        if item.get_closest_marker("xdist_group") is None:
            item.add_marker(pytest.mark.xdist_group(units[item.nodeid]))
