"""Provenance of a report: the config, checksums of inputs, package versions, seeds, run times."""

from __future__ import annotations

import datetime as _dt
import os
import platform
import sys
from importlib import metadata
from pathlib import Path
from typing import Any

from ..io import file_sha256

#: Distributions whose versions the report records (import name not needed: metadata only).
PACKAGES = ["ped2g", "numpy", "scipy", "pandas", "xarray", "h5netcdf", "arviz", "pymc", "pytensor",
            "nutpie", "numba", "matplotlib", "seaborn", "jinja2", "snakemake", "pyyaml", "jsonschema"]
#: Keys of a stage's JSON record read as run times (seconds) and as seeds.
TIME_KEYS = ("seconds", "elapsed_seconds", "run_seconds", "wall_seconds", "sampling_seconds",
             "duration_seconds", "elapsed", "run_time")
SEED_KEYS = ("seed", "seeds", "rng_seed")


def package_versions() -> dict[str, str]:
    """Installed version of each package in :data:`PACKAGES` and of Python itself."""
    versions = {"python": platform.python_version()}
    for name in PACKAGES:
        try:
            versions[name] = metadata.version(name)
        except metadata.PackageNotFoundError:
            versions[name] = "not installed"
    return versions


def checksums(paths: list[Path], relative_to: Path | None = None) -> list[dict[str, Any]]:
    """SHA-256, size and modification time (UTC) of each existing file."""
    rows = []
    for path in paths:
        path = Path(path)
        if not path.is_file():
            rows.append({"file": str(path), "sha256": "missing", "bytes": None, "modified_utc": None})
            continue
        shown = path
        if relative_to is not None:
            try:
                shown = path.resolve().relative_to(relative_to.resolve())
            except ValueError:
                shown = path
        stat = path.stat()
        rows.append({"file": str(shown), "sha256": file_sha256(path), "bytes": stat.st_size,
                     "modified_utc": _dt.datetime.fromtimestamp(stat.st_mtime, _dt.timezone.utc)
                     .strftime("%Y-%m-%d %H:%M:%S")})
    return rows


def _find(record: dict[str, Any] | None, keys: tuple[str, ...]) -> dict[str, Any]:
    """Entries of ``record`` (one level of nesting searched) whose key is one of ``keys``."""
    found: dict[str, Any] = {}
    if not record:
        return found
    for key, value in record.items():
        if key in keys:
            found[key] = value
        elif isinstance(value, dict):
            for sub, inner in value.items():
                if sub in keys:
                    found[f"{key}.{sub}"] = inner
    return found


def stage_records(records: dict[str, dict[str, Any] | None]) -> tuple[list[dict[str, Any]], list[dict[str, Any]]]:
    """Run times and seeds recorded by the stages (``records`` maps a stage label to its JSON)."""
    times, seeds = [], []
    for label, record in records.items():
        for key, value in _find(record, TIME_KEYS).items():
            times.append({"stage": label, "record": key, "value": value})
        for key, value in _find(record, SEED_KEYS).items():
            seeds.append({"stage": label, "record": key, "value": value})
    return times, seeds


def run_context(argv: list[str] | None = None) -> dict[str, Any]:
    """When, where and how the report was made."""
    return {
        "report made (UTC)": _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%d %H:%M:%S"),
        "command": " ".join(argv if argv is not None else sys.argv),
        "platform": platform.platform(),
        "processors": os.cpu_count(),
    }
