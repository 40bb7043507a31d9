"""Config loading and validation (ped2g.config) against the schema."""

import pytest
import yaml

from ped2g.config import fill_defaults, load_config, schema, validate
from ped2g.errors import UserError


def _walk(node, path=""):
    """Yield (path, subschema) for every named key in the schema."""
    for key, sub in node.get("properties", {}).items():
        here = f"{path}.{key}" if path else key
        yield here, sub
        yield from _walk(sub, here)
    items = node.get("items")
    if isinstance(items, dict):
        yield from _walk(items, path + "[]")


def test_every_schema_key_has_a_description_and_a_default():
    for path, sub in _walk(schema()):
        assert sub.get("description"), f"{path} has no description"
        if "[]" not in path:
            assert "default" in sub, f"{path} has no default"


def test_defaults_are_filled_and_themselves_valid():
    config = validate({"traits": ["x", "y"]})
    assert config["sampling"]["chains"] == 4
    assert config["compare"]["null_model"]["estimator"] == "mendelian"
    assert config["data"]["columns"]["id"] == "id"
    # A default-filled config validates again unchanged.
    assert validate(config) == config
    assert fill_defaults(config) == config


@pytest.mark.parametrize(
    ("bad", "message"),
    [
        ({"compare": {"skewerz": 10}}, r"unknown key 'compare\.skewerz'"),
        ({"compare": {"scale": "log"}}, r"compare\.scale.*not one of"),
        ({"sampling": {"chains": "four"}}, r"sampling\.chains.*integer"),
        ({"random": [{"name": "maternal", "col": "dam"}]}, r"random\[0\]\.col"),
        ({"traits": []}, r"traits"),
        ({"model": {"fixed_covariances": {"G": [[1.0]], "R": [[1.0]]}}}, "2x2 matrix"),
        ({"fixed": {"sex": "factor"}}, r"fixed\.sex"),
    ],
)
def test_bad_configs_name_the_key(bad, message):
    with pytest.raises(UserError, match=message):
        validate({"traits": ["x", "y"], **bad})


def test_load_config_reports_missing_file_and_bad_yaml(tmp_path):
    with pytest.raises(UserError, match="config file not found"):
        load_config(tmp_path / "nope.yaml")
    bad = tmp_path / "bad.yaml"
    bad.write_text("traits: [a, b\nfixed: {}\n")
    with pytest.raises(UserError, match=r"line \d+ is not valid YAML"):
        load_config(bad)
    good = tmp_path / "good.yaml"
    good.write_text(yaml.safe_dump({"traits": ["a", "b"], "compare": {"skewers": 50}}))
    assert load_config(good)["compare"]["skewers"] == 50


def test_message_is_one_line():
    with pytest.raises(UserError) as info:
        validate({"traits": ["x"], "sampling": {"seed": -1}})
    assert "\n" not in str(info.value)
