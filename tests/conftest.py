"""Makes the shared test oracles (tests/textbook.py) importable from every test folder, and lays
the tests out for pytest-xdist.

The README's test command runs the tests on every core (pyproject.toml: ``-n auto --dist
loadfile --no-loadscope-reorder``). The scheduler below (``pytest_xdist_make_scheduler``) makes
each test file one unit of work, so its module fixtures are built once, and puts the files that
share an expensive session fixture into one unit (``SHARED_SESSION_FILES``), so it is built
once too; the hook below queues the longest units first (``LONGEST_FIRST``), so that no worker
is left with a long one at the end. ``pytest -n 0`` runs everything in one process in the same
order.
"""

import sys
from pathlib import Path

import pytest

sys.path.insert(0, str(Path(__file__).resolve().parent))

# Files whose tests use an expensive session fixture (a whole workflow run, a whole report), by
# that fixture: they run on one worker, which builds it once. Collection fails, naming the file,
# if a test uses one of these fixtures from a file not listed here (the SLURM test asks for the
# local run at run time, so it is listed by hand).
SHARED_SESSION_FILES = {
    "tiny_local_run": ("tests/workflow/test_workflow_run.py", "tests/workflow/test_workflow_slurm.py"),
    "built_report": ("tests/report/test_report.py", "tests/report/test_chromium.py"),
}
_UNIT_OF_FILE = {path: fixture for fixture, paths in SHARED_SESSION_FILES.items() for path in paths}

# Units measured longest in a run of the suite (pytest --durations), longest first; every
# other file follows in collection order.
LONGEST_FIRST = (
    "tests/workflow/test_demo_findings.py",
    "tiny_local_run",
    "tests/fit/test_recovery.py",
    "tests/null/test_refit_calibration.py",
    "tests/fit/test_sparse_field_run.py",
    "tests/fit/test_sparse_engine.py",
    "tests/fit/test_command_run.py",
    "tests/fit/test_latent_vs_marginal.py",
)


def work_unit(nodeid: str) -> str:
    """The unit of work of a test: the shared session fixture of its file, else its file."""
    path = nodeid.split("::")[0]
    return _UNIT_OF_FILE.get(path, path)


@pytest.hookimpl(tryfirst=True)
def pytest_collection_modifyitems(config, items):
    for item in items:
        path = item.nodeid.split("::")[0]
        for fixture in SHARED_SESSION_FILES:
            if fixture in item.fixturenames and _UNIT_OF_FILE.get(path) != fixture:
                raise pytest.UsageError(f"{path} uses the session fixture {fixture!r}: add it to "
                                        "SHARED_SESSION_FILES in tests/conftest.py")
    rank = {unit: i for i, unit in enumerate(LONGEST_FIRST)}
    items.sort(key=lambda item: rank.get(work_unit(item.nodeid), len(rank)))  # stable within a unit


@pytest.hookimpl(optionalhook=True)
def pytest_xdist_make_scheduler(config, log):
    from xdist.scheduler import LoadScopeScheduling

    class WorkUnitScheduling(LoadScopeScheduling):
        """xdist's per-file scheduling, with the files of SHARED_SESSION_FILES as one unit."""

        def _split_scope(self, nodeid: str) -> str:
            return work_unit(nodeid)

    return WorkUnitScheduling(config, log)
