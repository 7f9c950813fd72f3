"""Settings: the schema, its defaults, config.yaml and the checks `resolve` adds.

The outside reference is the `jsonschema` package's Draft 2020-12 validator used directly on
workflow_config/config.schema.json; config.yaml is read with PyYAML (YAML 1.1, as Snakemake
reads it). The messages of single mistakes are specified in tests/test_config_errors.py."""

from __future__ import annotations

import copy
import hashlib
import json
import re
from pathlib import Path
from typing import Any

import jsonschema
import pytest
import yaml

from conftest import REPO
from corpusmill import settings

CONFIG_YAML = REPO / "workflow_config" / "config.yaml"


def error_of(raw: dict) -> str:
    with pytest.raises(settings.ConfigError) as caught:
        settings.resolve(raw)
    return str(caught.value)


def leaves(value: Any, path: tuple[str, ...] = ()) -> set[tuple[str, ...]]:
    """The paths of a configuration's options (a mapping's keys, down to non-mappings)."""
    if not isinstance(value, dict):
        return {path}
    return set().union(*(leaves(item, (*path, key)) for key, item in value.items()))


def schema_leaves(node: dict, path: tuple[str, ...] = ()) -> set[tuple[str, ...]]:
    if "properties" not in node:
        return {path}
    return set().union(*(schema_leaves(child, (*path, key)) for key, child in node["properties"].items()))


def merged(base: dict, override: dict) -> dict:
    """Snakemake's deep merge of a --configfile over config.yaml."""
    result = copy.deepcopy(base)
    for key, value in override.items():
        result[key] = merged(result[key], value) if isinstance(value, dict) and isinstance(result.get(key), dict) else value
    return result


def test_the_schema_is_a_valid_draft_2020_12_schema() -> None:
    jsonschema.Draft202012Validator.check_schema(settings.load_schema())


def test_every_default_in_the_schema_is_valid_for_its_own_field() -> None:
    invalid = []

    def walk(node: dict, path: str) -> None:
        if "default" in node and not jsonschema.Draft202012Validator(node).is_valid(node["default"]):
            invalid.append(path)
        for key, child in node.get("properties", {}).items():
            walk(child, f"{path}.{key}".strip("."))

    walk(settings.load_schema(), "")
    assert invalid == []


def test_every_option_of_config_yaml_is_in_the_schema_and_every_option_of_the_schema_in_config_yaml() -> None:
    assert leaves(yaml.safe_load(CONFIG_YAML.read_text(encoding="utf-8"))) == schema_leaves(settings.load_schema())


def test_an_empty_configuration_resolves_to_the_values_config_yaml_lists_and_the_validator_accepts_them() -> None:
    """config.yaml says it lists every option with its default: the schema's defaults are those values."""
    resolved = settings.resolve({})
    assert resolved == yaml.safe_load(CONFIG_YAML.read_text(encoding="utf-8"))
    jsonschema.Draft202012Validator(settings.load_schema()).validate(resolved)


def test_every_option_of_config_yaml_has_a_comment_right_above_it() -> None:
    """Except the `resources:` options, which one comment describes together."""
    undocumented, previous, section = [], "", ""
    for line in CONFIG_YAML.read_text(encoding="utf-8").splitlines():
        option = re.match(r"(\s*)([A-Za-z0-9_]+):\s*(.*)$", line)
        if option and not option.group(1):
            section = option.group(2)
        if option and option.group(3) and not previous.startswith("#") and section != "resources":
            undocumented.append(f"{section}.{option.group(2)}")
        previous = line.strip()
    assert undocumented == []


def test_a_partial_section_keeps_its_values_and_takes_the_rest_from_the_defaults() -> None:
    defaults = settings.resolve({})
    resolved = settings.resolve({"clean": {"lowercase": True}, "windows": {"blocks": {"length": 64}}})
    assert resolved["clean"] == {**defaults["clean"], "lowercase": True}
    assert resolved["windows"]["blocks"] == {**defaults["windows"]["blocks"], "length": 64}
    assert resolved["windows"]["ngram"] == defaults["windows"]["ngram"]


def test_resolving_leaves_the_callers_configuration_unchanged() -> None:
    raw = {"clean": {"lowercase": True}, "near_duplicates": {"policy": False}}
    before = copy.deepcopy(raw)
    settings.resolve(raw)
    assert raw == before


def test_every_field_the_validator_refuses_is_named_in_one_message_in_field_order() -> None:
    override = {"shards": {"row_group_rows": "many"}, "clean": {"min_letter_share": 2}, "corpus": {"text_unit": "page"}}
    config = merged(yaml.safe_load(CONFIG_YAML.read_text(encoding="utf-8")), override)
    refused = sorted(".".join(map(str, e.absolute_path)) for e in jsonschema.Draft202012Validator(settings.load_schema()).iter_errors(config))
    assert refused == ["clean.min_letter_share", "corpus.text_unit", "shards.row_group_rows"]
    lines = error_of(override).splitlines()
    assert lines[0] == "invalid configuration:" and [line.split(" = ")[0].strip() for line in lines[1:]] == refused


def test_an_unquoted_off_policy_reads_as_off() -> None:
    """YAML 1.1 reads an unquoted `off` as the boolean false."""
    raw = yaml.safe_load("near_duplicates:\n  policy: off\n")
    assert raw["near_duplicates"]["policy"] is False
    assert settings.resolve(raw)["near_duplicates"]["policy"] == "off"


def test_an_unquoted_date_is_shown_with_its_yaml_type_and_the_advice_to_quote_it() -> None:
    raw = yaml.safe_load("metadata:\n  date_published: 2024-05-01\n")
    assert 'metadata.date_published = "2024-05-01 (a YAML date; quote it)": allowed: type string or null' in error_of(raw)
    assert settings.resolve({"metadata": {"date_published": "2024-05-01"}})["metadata"]["date_published"] == "2024-05-01"


def test_bands_that_do_not_divide_the_permutations_are_refused_naming_both() -> None:
    message = error_of({"near_duplicates": {"permutations": 128, "bands": 12}})
    assert "near_duplicates.bands = 12 does not divide near_duplicates.permutations = 128" in message
    assert settings.resolve({"near_duplicates": {"permutations": 120, "bands": 12}})["near_duplicates"]["bands"] == 12


def test_a_zero_train_share_is_refused_because_the_vocabulary_is_counted_on_train() -> None:
    message = error_of({"split": {"fractions": {"train": 0.0, "dev": 0.5, "test": 0.5}}})
    assert message.startswith("invalid configuration: split.fractions.train = 0") and "(the vocabulary is counted on train)" in message


def test_the_baseline_without_streams_is_refused_naming_both_options() -> None:
    message = error_of({"windows": {"streams": {"enabled": False}}})
    assert "baseline.enabled = true needs windows.streams.enabled = true" in message and "baseline.enabled: false" in message
    assert settings.resolve({"windows": {"streams": {"enabled": False}}, "baseline": {"enabled": False}})["baseline"]["enabled"] is False


def test_the_digest_is_the_sha256_of_the_canonical_json_whatever_the_key_order() -> None:
    """hashlib.sha256 of the JSON text with sorted keys, no spaces and UTF-8 characters as they are."""
    value = {"b": [1, 2.5, None], "a": {"é": "ü", "z": True}}
    expected = hashlib.sha256('{"a":{"z":true,"é":"ü"},"b":[1,2.5,null]}'.encode()).hexdigest()
    assert settings.digest(value) == expected
    assert settings.digest(dict(reversed(list(value.items())))) == expected
    assert settings.digest({**value, "b": [2.5, 1, None]}) != expected


def test_a_json_file_is_read_as_utf_8(tmp_path: Path) -> None:
    path = tmp_path / "x.json"
    path.write_bytes(json.dumps({"name": "корпус"}, ensure_ascii=False).encode("utf-8"))
    assert settings.read_json(path) == {"name": "корпус"}
