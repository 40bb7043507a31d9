"""The config schema gives every key a type, a description and a default, and config/README.md
explains every key. Both are read as data, so a key added later without them fails here."""

from __future__ import annotations

import re

import pytest
import yaml

from ped2g.config import SCHEMA_PATH
from workflow_helpers import ROOT

SCHEMA = yaml.safe_load(SCHEMA_PATH.read_text(encoding="utf-8"))
README = (ROOT / "config" / "README.md").read_text(encoding="utf-8")


def _keys(node, path=""):
    """Every (dotted path, schema node) of the config, not descending into list items."""
    for key, sub in node.get("properties", {}).items():
        dotted = f"{path}.{key}" if path else key
        yield dotted, sub
        yield from _keys(sub, dotted)


KEYS = dict(_keys(SCHEMA))


def test_the_schema_has_keys():
    assert {"data.pedigree", "traits", "sampling.seed", "compare.null_model.estimator"} <= set(KEYS)


@pytest.mark.parametrize("path", sorted(KEYS))
def test_every_key_has_type_description_and_default(path):
    node = KEYS[path]
    assert "description" in node and node["description"].strip()
    assert "default" in node
    assert "type" in node or all("type" in branch for branch in node.get("oneOf", [{}]))


@pytest.mark.parametrize("path", sorted(KEYS))
def test_every_key_is_explained_in_config_readme(path):
    assert re.search(rf"`{re.escape(path)}[`.]", README), f"config/README.md does not explain {path}"
