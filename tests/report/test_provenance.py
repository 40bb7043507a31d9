"""Provenance records: versions, checksums, seeds and run times."""

import hashlib

import numpy as np
import pandas as pd

from ped2g.report.provenance import checksums, package_versions, stage_records


def test_versions_match_the_imported_packages():
    versions = package_versions()
    assert versions["numpy"] == np.__version__
    assert versions["pandas"] == pd.__version__
    assert "python" in versions


def test_checksums_agree_with_hashlib_and_mark_missing_files(tmp_path):
    data = tmp_path / "a.csv"
    data.write_bytes(b"id,sire,dam\n1,,\n")
    rows = checksums([data, tmp_path / "absent.csv"], relative_to=tmp_path)
    assert rows[0]["file"] == "a.csv"
    assert rows[0]["sha256"] == hashlib.sha256(data.read_bytes()).hexdigest()  # hashlib as reference
    assert rows[0]["bytes"] == 16
    assert rows[1]["sha256"] == "missing" and rows[1]["bytes"] is None


def test_stage_records_find_times_and_seeds_one_level_deep():
    times, seeds = stage_records({
        "fit north": {"wall_seconds": 12.0, "sampling": {"sampling_seconds": 9.5, "seed": 3}},
        "null": {"run_seconds": 1.0, "seed": 3},
        "pedigree": None,
    })
    assert {(t["stage"], t["record"]) for t in times} == {
        ("fit north", "wall_seconds"), ("fit north", "sampling.sampling_seconds"), ("null", "run_seconds")}
    assert {(s["stage"], s["record"], s["value"]) for s in seeds} == {
        ("fit north", "sampling.seed", 3), ("null", "seed", 3)}
