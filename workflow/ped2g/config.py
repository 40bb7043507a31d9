"""Loading and validating the one config file that drives every stage.

The schema (``schemas/config.schema.yaml`` inside this package, so an installed ped2g has it too)
gives every key a type, a description and a default. :func:`load_config` reads a YAML file, rejects unknown keys and wrong types with one line
naming the key's path, and returns the config with every default filled in.
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


@lru_cache(maxsize=1)
def schema() -> dict[str, Any]:
    """The config schema as a dict."""
    with open(SCHEMA_PATH, encoding="utf-8") as handle:
        return yaml.safe_load(handle)


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
    names = [r["name"] for r in config["random"]]
    if len(set(names)) != len(names):
        raise UserError(f"{source}: key 'random': two random effects share a name")
    clash = set(config["fixed"]) & set(traits)
    if clash:
        raise UserError(f"{source}: key 'fixed': '{sorted(clash)[0]}' is also a trait")


def load_config(path: str | os.PathLike) -> dict[str, Any]:
    """Read, validate and default-fill a YAML config file.

    Raises
    ------
    UserError
        If the file is missing, is not YAML, or breaks the schema (naming the key).
    """
    path = Path(path)
    if not path.is_file():
        raise UserError(f"config file not found: {path}")
    try:
        with open(path, encoding="utf-8") as handle:
            raw = yaml.safe_load(handle)
    except yaml.YAMLError as err:
        mark = getattr(err, "problem_mark", None)
        where = f" line {mark.line + 1}" if mark is not None else ""
        raise UserError(f"config {path}{where} is not valid YAML: {getattr(err, 'problem', err)}") from None
    except UnicodeDecodeError:
        raise UserError(f"config {path} is not UTF-8 text") from None
    return validate(raw, source=f"config {path}")
