"""True parameters of a simulated study, for truth markers in the report's figures and tables.

A study made by ``ped2g simulate`` keeps its true parameters in ``truth.yaml`` beside its
phenotype table. The report uses a truth file when ``ped2g report --truth FILE`` names one, or,
without that option, when the phenotype table's folder holds a ``truth.yaml`` whose
``made_with.command`` starts with ``ped2g simulate`` (so a real study's folder never supplies
one by accident). Truth markers are drawn only where a true value exists for the quantity shown.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np
import yaml

from ..errors import UserError

#: The truth file's G matrix on each comparison scale (``compare.scale``).
G_KEY_BY_SCALE = {"original": "G", "variance": "G_variance_standardised", "mean": "G_mean_standardised"}


def find_truth(phenotypes: Path, given: str | Path | None) -> Path | None:
    """The truth file to use (see the module docstring), or None."""
    if given:
        path = Path(given)
        if not path.is_file():
            raise UserError(f"truth file not found: {path}; give --truth the truth.yaml of a simulated study")
        return path
    beside = Path(phenotypes).parent / "truth.yaml"
    if not beside.is_file():
        return None
    try:
        data = yaml.safe_load(beside.read_text(encoding="utf-8"))
    except (yaml.YAMLError, UnicodeDecodeError):
        return None
    made = (data or {}).get("made_with") if isinstance(data, dict) else None
    command = str((made or {}).get("command", "")) if isinstance(made, dict) else ""
    return beside if command.startswith("ped2g simulate") else None


def read_truth(path: Path) -> dict[str, Any]:
    """The parsed truth file; a :class:`UserError` when it is not one ``ped2g simulate`` wrote."""
    try:
        data = yaml.safe_load(path.read_text(encoding="utf-8"))
    except (yaml.YAMLError, UnicodeDecodeError) as err:
        raise UserError(f"truth file {path} is not readable YAML ({type(err).__name__})") from None
    if not isinstance(data, dict) or "populations" not in data or "traits" not in data:
        raise UserError(f"truth file {path} has no 'traits' and 'populations'; use the truth.yaml "
                        "that 'ped2g simulate' wrote")
    return data


def _reorder(matrix: Any, truth_traits: list[str], traits: list[str]) -> np.ndarray | None:
    m = np.asarray(matrix, dtype=float)
    if set(truth_traits) != set(traits) or m.shape != (len(traits),) * m.ndim:
        return None
    idx = [truth_traits.index(t) for t in traits]
    return m[np.ix_(idx, idx)] if m.ndim == 2 else m[idx]


def true_matrices(truth: dict[str, Any] | None, key: str, populations: list[str],
                  traits: list[str]) -> dict[str, np.ndarray] | None:
    """``truth.populations.<pop>.<key>`` for every population that has it, in ``traits`` order."""
    if not truth:
        return None
    out = {}
    names = [str(t) for t in truth.get("traits", [])]
    for pop in populations:
        record = (truth.get("populations") or {}).get(pop) or {}
        if key in record:
            m = _reorder(record[key], names, traits)
            if m is not None:
                out[pop] = m
    return out or None


def true_vectors(truth: dict[str, Any] | None, key: str, populations: list[str],
                 traits: list[str]) -> dict[str, np.ndarray] | None:
    """Per-trait true values (a mapping trait -> value, e.g. ``heritability``) as arrays."""
    if not truth:
        return None
    out = {}
    for pop in populations:
        record = ((truth.get("populations") or {}).get(pop) or {}).get(key)
        if isinstance(record, dict) and all(t in record for t in traits):
            out[pop] = np.array([float(record[t]) for t in traits])
    return out or None


__all__ = ["G_KEY_BY_SCALE", "find_truth", "read_truth", "true_matrices", "true_vectors"]
