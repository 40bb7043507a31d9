"""Config loading and validation (ped2g.config) against the schema."""

import pytest
import yaml

from ped2g.config import SCHEMA_PATH, fill_defaults, load_config, schema, validate, with_defaults
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


def test_a_partial_section_gets_the_schema_defaults_and_keeps_its_own_values():
    # Oracle: the schema file read here with plain PyYAML, not through ped2g.config.
    with open(SCHEMA_PATH, encoding="utf-8") as handle:
        raw = yaml.safe_load(handle)
    priors = raw["properties"]["model"]["properties"]["priors"]["properties"]
    got = with_defaults({"lkj_eta": 5.0}, "model", "priors")
    assert got == {"lkj_eta": 5.0, "sd_scale": priors["sd_scale"]["default"],
                   "sd_family": priors["sd_family"]["default"], "fixed_sd": priors["fixed_sd"]["default"]}
    checks = raw["properties"]["checks"]["properties"]
    assert with_defaults(None, "checks") == {k: v["default"] for k, v in checks.items()}


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


# --------------------------------------------------------------------------------------------
# Strict reading of the file: a key given twice, a folder, an empty file, a template request
# --------------------------------------------------------------------------------------------

GOOD_TEXT = """\
data:
  pedigree: ped.csv
  phenotypes: phen.csv
traits: [a, b]
compare:
  skewers: 50
"""


def _read_error(path):
    with pytest.raises(UserError) as info:
        load_config(path)
    message = str(info.value)
    assert "\n" not in message
    assert str(path) in message
    return message


def test_a_top_level_key_given_twice_is_refused_naming_both_lines(tmp_path):
    # PyYAML's own safe loader keeps the second list without a word (checked here, so this test
    # fails if the strict reader stops being used rather than PyYAML changing behaviour).
    text = GOOD_TEXT + "traits: [c, d]\n"
    assert yaml.safe_load(text)["traits"] == ["c", "d"]
    path = tmp_path / "twice.yaml"
    path.write_text(text)
    message = _read_error(path)
    assert "key 'traits' is given twice (lines 4 and 7)" in message


def test_a_nested_key_given_twice_is_refused(tmp_path):
    path = tmp_path / "nested.yaml"
    path.write_text(GOOD_TEXT + "sampling:\n  chains: 2\n  draws: 200\n  chains: 4\n")
    assert "key 'chains' is given twice (lines 8 and 10)" in _read_error(path)


def test_merge_keys_may_still_be_overridden(tmp_path):
    # YAML 1.1's merge key: a mapping's own keys override merged ones (yaml.org/type/merge.html);
    # that is not a key given twice.
    path = tmp_path / "merge.yaml"
    path.write_text(GOOD_TEXT + "sampling:\n  <<: {chains: 2, draws: 200}\n  chains: 3\n")
    config = load_config(path)
    assert config["sampling"]["chains"] == 3
    assert config["sampling"]["draws"] == 200


def test_a_folder_as_config_is_refused_in_one_line(tmp_path):
    folder = tmp_path / "configs"
    folder.mkdir()
    assert "is a folder" in _read_error(folder)


@pytest.mark.parametrize("text", ["", "\n\n", "# only a comment\n"])
def test_an_empty_config_is_refused_instead_of_running_on_defaults(tmp_path, text):
    path = tmp_path / "empty.yaml"
    path.write_text(text)
    assert "is empty" in _read_error(path)


def test_a_template_request_is_refused(tmp_path):
    path = tmp_path / "template.yaml"
    path.write_text("__use_yte__: true\n" + GOOD_TEXT)
    assert "'__use_yte__'" in _read_error(path)


def test_a_config_that_is_not_a_mapping_is_refused(tmp_path):
    path = tmp_path / "list.yaml"
    path.write_text("- traits\n- a\n")
    assert "mapping" in _read_error(path)


# --------------------------------------------------------------------------------------------
# Fixed covariance matrices are checked at validation, before any data are read
# --------------------------------------------------------------------------------------------

IDENTITY = [[1.0, 0.0], [0.0, 1.0]]


@pytest.mark.parametrize(("name", "matrix", "words"), [
    # [[1, 2], [2, 1]] has eigenvalues 1 + 2 = 3 and 1 - 2 = -1 (exact: eigenvectors (1, 1) and
    # (1, -1)), so it is indefinite although its diagonal is positive.
    ("G", [[1.0, 2.0], [2.0, 1.0]], ["positive definite", "-1"]),
    ("R", [[1.0, 2.0], [2.0, 1.0]], ["positive definite", "-1"]),
    # [[1, 1], [1, 1]] has eigenvalues 2 and 0 (exact): singular, not positive definite.
    ("G", [[1.0, 1.0], [1.0, 1.0]], ["positive definite"]),
    ("G", [[1.0, 0.5], [0.2, 1.0]], ["not symmetric"]),
    ("R", [[1.0, 0.0], [0.0, float("nan")]], ["finite"]),
])
def test_a_fixed_covariance_that_is_not_positive_definite_is_refused(name, matrix, words):
    fixed = {"G": IDENTITY, "R": IDENTITY, name: matrix}
    with pytest.raises(UserError) as info:
        validate({"traits": ["x", "y"], "model": {"fixed_covariances": fixed}})
    message = str(info.value)
    assert f"model.fixed_covariances.{name}" in message
    for word in words:
        assert word in message


def test_a_positive_definite_fixed_covariance_passes():
    # [[4, 2], [2, 9]]: leading minors 4 and 32 are positive (Sylvester's criterion)
    fixed = {"G": [[4.0, 2.0], [2.0, 9.0]], "R": IDENTITY}
    config = validate({"traits": ["x", "y"], "model": {"fixed_covariances": fixed}})
    assert config["model"]["fixed_covariances"]["G"] == [[4.0, 2.0], [2.0, 9.0]]


def test_the_schema_is_package_data():
    # one copy, inside the package, so an installed ped2g reads the same file (pyproject.toml
    # declares it as package data; the wheel test in tests/test_wheel.py installs it)
    from pathlib import Path

    import ped2g
    from ped2g.config import SCHEMA_PATH

    assert SCHEMA_PATH.is_file()
    assert SCHEMA_PATH.parent.parent == Path(ped2g.__file__).resolve().parent
