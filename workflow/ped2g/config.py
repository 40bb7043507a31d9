"""Loading and validating the one config file that drives every stage.

The schema (``schemas/config.schema.yaml`` inside this package, so an installed ped2g has it too)
gives every key a type, a description and a default. :func:`read_config_file` reads a YAML file
strictly (one line for a folder, an empty file, a key given twice or a request to evaluate the
file as a template); :func:`load_config` then rejects unknown keys and wrong types with one line
naming the key's path, and returns the config with every default filled in. The workflow
(``workflow/rules/common.smk``) reads its ``--configfile`` files with the same two functions.
"""

from __future__ import annotations

import copy
import os
from functools import lru_cache
from pathlib import Path
from typing import Any

import yaml

from .errors import UserError

#: The one copy of the schema, package data (declared in pyproject.toml).
SCHEMA_PATH = Path(__file__).resolve().parent / "schemas" / "config.schema.yaml"

#: A top-level key that makes Snakemake evaluate the file as a template (its YTE engine).
TEMPLATE_KEY = "__use_yte__"


@lru_cache(maxsize=1)
def schema() -> dict[str, Any]:
    """The config schema as a dict."""
    with open(SCHEMA_PATH, encoding="utf-8") as handle:
        return yaml.safe_load(handle)


class DuplicateKeyError(yaml.YAMLError):
    """A mapping in a YAML file gives the same key twice."""

    def __init__(self, key: Any, first_line: int, second_line: int):
        super().__init__(f"key {key!r} is given twice (lines {first_line} and {second_line})")
        self.key = key
        self.first_line = first_line
        self.second_line = second_line


class StrictLoader(yaml.SafeLoader):
    """PyYAML's safe loader, refusing a key given twice in one mapping.

    PyYAML keeps the last of two equal keys without a word, so a config with ``traits:`` twice
    would fit only the second list. Keys brought in by a merge (``<<: *anchor``) may still be
    overridden by the mapping's own keys, as YAML's merge key allows.
    """

    def construct_mapping(self, node: yaml.MappingNode, deep: bool = False) -> dict[Any, Any]:
        if isinstance(node, yaml.MappingNode):
            seen: dict[Any, int] = {}
            for key_node, _ in node.value:
                if key_node.tag == "tag:yaml.org,2002:merge":
                    continue
                key = self.construct_object(key_node, deep=True)
                try:
                    first = seen.get(key)
                except TypeError:
                    continue  # an unhashable key: the base class names it
                line = key_node.start_mark.line + 1
                if first is not None:
                    raise DuplicateKeyError(key, first, line)
                seen[key] = line
        return super().construct_mapping(node, deep=deep)


def read_config_file(path: str | os.PathLike) -> dict[str, Any]:
    """The mapping in a YAML config file, read strictly; not yet validated.

    Raises
    ------
    UserError
        One line naming the file (and the line where there is one) if the path is missing or a
        folder, the file is not UTF-8, not YAML, empty, not a mapping, gives a key twice, or
        has the top-level key ``__use_yte__`` (which asks Snakemake to evaluate the file as a
        template; ped2g configs hold plain values only).
    """
    path = Path(path)
    if path.is_dir():
        raise UserError(f"config {path} is a folder; give the path of a YAML file")
    if not path.is_file():
        raise UserError(f"config file not found: {path}")
    try:
        with open(path, encoding="utf-8") as handle:
            raw = yaml.load(handle, Loader=StrictLoader)  # noqa: S506 (a SafeLoader subclass)
    except DuplicateKeyError as err:
        raise UserError(f"config {path}: {err}; keep one of them") from None
    except yaml.YAMLError as err:
        mark = getattr(err, "problem_mark", None)
        where = f" line {mark.line + 1}" if mark is not None else ""
        raise UserError(f"config {path}{where} is not valid YAML: {getattr(err, 'problem', err)}") from None
    except UnicodeDecodeError:
        raise UserError(f"config {path} is not UTF-8 text") from None
    if raw is None:
        raise UserError(f"config {path} is empty; a config needs at least the 'data' section "
                        "and 'traits' (ped2g init writes one)")
    if not isinstance(raw, dict):
        raise UserError(f"config {path}: the config must be a mapping of keys to values")
    if TEMPLATE_KEY in raw:
        raise UserError(
            f"config {path}: top-level key '{TEMPLATE_KEY}' asks the workflow engine to evaluate "
            "the file as a template (it runs code); ped2g configs hold plain values only, so "
            "remove the key and write the values out")
    return raw


def _key_path(parts: Any) -> str:
    out = ""
    for part in parts:
        out += f"[{part}]" if isinstance(part, int) else (f".{part}" if out else str(part))
    return out or "(top level)"


def _describe(error: Any) -> str:
    """One line for a jsonschema ValidationError, naming the key's path."""
    where = _key_path(error.absolute_path)
    if error.validator == "additionalProperties":
        props = error.schema.get("properties", {})
        extra = sorted(set(error.instance) - set(props)) if isinstance(error.instance, dict) else []
        allowed = ", ".join(sorted(props)) or "none"
        prefix = f"{where}." if error.absolute_path else ""
        if extra:
            return f"unknown key '{prefix}{extra[0]}' (allowed here: {allowed})"
    if error.validator == "enum":
        return f"key '{where}': {error.instance!r} is not one of {error.validator_value}"
    if error.validator == "type":
        return f"key '{where}': {error.instance!r} should be of type {error.validator_value}"
    if error.validator == "oneOf":
        return f"key '{where}': {error.instance!r} is not allowed ({error.schema.get('description', '')})"
    return f"key '{where}': {error.message}"


def fill_defaults(config: dict[str, Any], node: dict[str, Any] | None = None) -> dict[str, Any]:
    """Return ``config`` with the schema's defaults filled in, recursively for objects."""
    node = schema() if node is None else node
    out = copy.deepcopy(config)
    for key, sub in node.get("properties", {}).items():
        if key not in out and "default" in sub:
            out[key] = copy.deepcopy(sub["default"])
        if isinstance(out.get(key), dict) and sub.get("type") == "object":
            out[key] = fill_defaults(out[key], sub)
    return out


def with_defaults(part: dict[str, Any] | None, *path: str) -> dict[str, Any]:
    """``part``, the config section at ``path`` (e.g. ``"model", "priors"``), with the schema's
    defaults filled in where it lacks a key.

    For functions that may be handed a section of a config that did not go through
    :func:`validate` (tests, benchmarks), so that the schema stays the one place for defaults.
    ``part`` is not validated.
    """
    node = schema()
    for key in path:
        node = node["properties"][key]
    return fill_defaults(part or {}, node)


def validate(config: dict[str, Any], source: str = "config") -> dict[str, Any]:
    """Validate a config dict against the schema and return it with defaults filled in.

    Raises
    ------
    UserError
        Naming the first offending key, e.g. ``unknown key 'compare.skewerz'``.
    """
    import jsonschema

    if config is None:
        config = {}
    if not isinstance(config, dict):
        raise UserError(f"{source}: the config must be a mapping of keys to values")
    validator = jsonschema.Draft202012Validator(schema())
    errors = sorted(validator.iter_errors(config), key=lambda e: list(map(str, e.absolute_path)))
    if errors:
        raise UserError(f"{source}: {_describe(errors[0])}")
    filled = fill_defaults(config)
    _check_consistency(filled, source)
    return filled


def _check_consistency(config: dict[str, Any], source: str) -> None:
    traits = config["traits"]
    fixed_cov = config["model"]["fixed_covariances"]
    if fixed_cov is not None:
        for name in ("G", "R"):
            matrix = fixed_cov[name]
            if len(matrix) != len(traits) or any(len(row) != len(traits) for row in matrix):
                raise UserError(
                    f"{source}: key 'model.fixed_covariances.{name}' must be a "
                    f"{len(traits)}x{len(traits)} matrix (one row and column per trait)")
            _check_covariance(matrix, f"{source}: key 'model.fixed_covariances.{name}'")
    names = [r["name"] for r in config["random"]]
    if len(set(names)) != len(names):
        raise UserError(f"{source}: key 'random': two random effects share a name")
    clash = set(config["fixed"]) & set(traits)
    if clash:
        raise UserError(f"{source}: key 'fixed': '{sorted(clash)[0]}' is also a trait")


def _check_covariance(matrix: list[list[float]], where: str) -> None:
    """Refuse a covariance matrix that is not finite, symmetric and positive definite.

    The same conditions as the fit's (``ped2g.fit.priors.fixed_covariances``), checked here so a
    bad matrix stops the workflow before any job instead of inside a fit, after reading the data.
    """
    import numpy as np

    m = np.asarray(matrix, dtype=float)
    if not np.all(np.isfinite(m)):
        raise UserError(f"{where} holds a value that is not a finite number")
    if not np.allclose(m, m.T, rtol=1e-10, atol=1e-12):
        raise UserError(f"{where} is not symmetric")
    smallest = float(np.linalg.eigvalsh(m)[0])
    if smallest <= 0:
        raise UserError(f"{where} is not positive definite (smallest eigenvalue {smallest:.4g}); "
                        "a covariance matrix needs every eigenvalue above zero")


def load_config(path: str | os.PathLike) -> dict[str, Any]:
    """Read (:func:`read_config_file`), validate and default-fill a YAML config file.

    Raises
    ------
    UserError
        If the file cannot be read strictly or breaks the schema (naming the key).
    """
    return validate(read_config_file(path), source=f"config {path}")
