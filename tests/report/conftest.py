"""Fixtures of the report tests (the invented study is written by report_study.py)."""

import pytest

from report_study import make_study


@pytest.fixture(scope="session")
def built_report(tmp_path_factory):
    """One full report built from the three-population study (shared by the test session)."""
    from ped2g.config import load_config
    from ped2g.report.assemble import build_report

    paths = make_study(tmp_path_factory.mktemp("study"))
    config = load_config(paths["config"])
    result = build_report(config, paths["results"], paths["out"], config_path=paths["config"])
    return paths, result
