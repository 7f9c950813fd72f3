"""Configuration errors stop the run before any job, naming the field, the value and what is allowed.

One test per class of mistake. The schema (workflow_config/config.schema.json, JSON Schema
2020-12) is the outside reference for types, ranges, enums and known keys; the checks a
schema cannot express are in steps.settings.
"""

from __future__ import annotations

import json
from pathlib import Path

import pytest
import yaml

from conftest import run_workflow, scenario
from corpusmill import settings


def error_of(raw: dict) -> str:
    with pytest.raises(settings.ConfigError) as caught:
        settings.resolve(raw)
    return str(caught.value)


def test_a_wrong_type_names_the_field_the_value_and_the_type_allowed() -> None:
    """JSON Schema `type`: an integer field given a string."""
    message = error_of({"shards": {"row_group_rows": "four"}})
    assert 'shards.row_group_rows = "four"' in message and "type integer" in message


@pytest.mark.parametrize("option", ["train_files", "heldout_files"])
def test_the_shard_counts_of_older_configs_are_unknown_keys_now(option: str) -> None:
    """Shard files follow the chunks (one set per chunk): an older config's shards.train_files or
    shards.heldout_files is refused by name rather than silently ignored."""
    message = error_of({"shards": {option: 4}})
    assert f"shards.{option}: unknown key" in message and "seed" in message.split("known keys:")[1]


def test_an_out_of_range_value_names_the_bounds() -> None:
    """JSON Schema `minimum`/`maximum`: a share above 1."""
    message = error_of({"clean": {"min_letter_share": 1.5}})
    assert "clean.min_letter_share = 1.5" in message and "<= 1" in message and ">= 0" in message


def test_an_unknown_key_names_it_and_lists_the_known_keys() -> None:
    """JSON Schema `additionalProperties: false`: a misspelt key is an error, not ignored."""
    message = error_of({"corpus": {"rooot": "texts"}})
    assert "corpus.rooot: unknown key" in message and "root" in message.split("known keys:")[1]


def test_a_bad_enum_value_lists_the_choices() -> None:
    """JSON Schema `enum`: the policy names are a closed set."""
    message = error_of({"corpus": {"invalid_utf8": "ignore"}})
    assert 'corpus.invalid_utf8 = "ignore"' in message and '"stop", "replace", "drop"' in message


def test_fractions_that_do_not_sum_to_one_are_refused_with_their_sum() -> None:
    """A partition of the documents: the split shares must add up to 1."""
    message = error_of({"split": {"fractions": {"train": 0.5, "dev": 0.2, "test": 0.2}}})
    assert "split.fractions" in message and "sum to 0.9" in message and "summing to 1" in message


def test_an_ngram_order_below_two_is_refused() -> None:
    """An n-gram model needs at least one context id (n - 1 >= 1)."""
    message = error_of({"windows": {"ngram": {"n": 1}}})
    assert "windows.ngram.n = 1" in message and ">= 2" in message


def test_a_stride_longer_than_a_block_is_refused_because_it_would_skip_ids() -> None:
    """Blocks of L+1 ids overlap by one at stride L; a stride above L+1 leaves ids in no block."""
    message = error_of({"windows": {"blocks": {"length": 8, "stride": 10}}})
    assert "windows.blocks.stride = 10" in message and "<= length + 1 = 9" in message


def test_disabling_every_output_kind_is_refused() -> None:
    """A build that writes no shard has nothing to train on."""
    message = error_of({"windows": {kind: {"enabled": False} for kind in ("ngram", "blocks", "streams")}})
    assert "windows" in message and "ngram, blocks, streams" in message


def test_yaml_aliases_sharing_one_mapping_are_validated_as_separate_sections() -> None:
    """YAML 1.2 §3.2.2.2 anchors and aliases: `*off` is the same node, but each section is its own."""
    raw = yaml.safe_load("windows:\n  ngram: &off {enabled: false}\n  blocks: *off\n  streams: *off\n")
    message = error_of(raw)
    assert "unknown key" not in message and "ngram, blocks, streams" in message


@pytest.mark.parametrize("value", ["../elsewhere", "/tmp/absolute", "a/../../b"])
def test_a_build_dir_leaving_the_working_directory_is_refused(value: str) -> None:
    """POSIX path semantics (pathlib.PurePosixPath): absolute paths and '..' escape the folder."""
    message = error_of({"build_dir": value})
    assert f"build_dir = {json.dumps(value)}" in message and "relative path without '..'" in message


@pytest.mark.parametrize("value", ["b$(touch marker)", "x;touch marker;#", "`id`", "~", "~/b", "-rf", "a{b}", "<results>", "a|b", "a\nb", "s3://x", "q'uote"])
def test_a_build_dir_with_shell_wildcard_or_home_characters_is_refused(value: str) -> None:
    """POSIX shell syntax (command substitution, ';', quotes, '~'), Snakemake's {wildcard} and
    <pathvar> patterns, a URI scheme, a leading '-' read as an option: none may reach a
    command line or a path pattern, so the schema's message names the characters allowed."""
    message = error_of({"build_dir": value})
    assert "build_dir = " in message and "letters, digits, spaces and . _ - + @ , = /" in message


@pytest.mark.parametrize("value", ["build", "out dir/é", "b-1.2_x+y@z,w=v", "корпус/сборка"])
def test_a_build_dir_of_letters_digits_spaces_and_marks_of_any_script_is_accepted(value: str) -> None:
    assert settings.resolve({"build_dir": value})["build_dir"] == value


def test_a_yaml_alias_bomb_is_refused_before_anything_expands_it() -> None:
    """YAML 1.2 §3.2.2.2: an alias is the same node again, so nine levels of ten aliases stand
    for 10**9 values in a few hundred bytes. The check counts without expanding."""
    text = "junk:\n  l0: &l0 [x, x, x, x, x, x, x, x, x, x]\n" + "".join(f"  l{n}: &l{n} [{', '.join([f'*l{n - 1}'] * 10)}]\n" for n in range(1, 9))
    raw = yaml.safe_load(text)
    message = error_of(raw)
    assert "more than 100,000 values once YAML aliases" in message


def test_a_few_aliases_in_a_real_config_are_still_accepted() -> None:
    raw = yaml.safe_load("segment:\n  abbreviations: &list [dr, mr]\nreport:\n  embedding_widths: [1, 2]\n")
    assert settings.resolve(raw)["segment"]["abbreviations"] == ["dr", "mr"]


@pytest.mark.parametrize(
    ("override", "field"),
    [
        ({"corpus": {"chunk_mb": float("inf")}}, "corpus.chunk_mb = inf"),
        ({"corpus": {"chunk_mb": float("nan")}}, "corpus.chunk_mb = nan"),
        ({"corpus": {"pack_mb": float("inf")}}, "corpus.pack_mb = inf"),
        ({"vocabulary": {"coverage": float("nan")}}, "vocabulary.coverage = nan"),
    ],
)
def test_infinite_and_nan_numbers_are_refused_naming_the_field(override: dict, field: str) -> None:
    """IEEE 754 NaN compares false with every bound, so a schema's minimum and maximum let it pass."""
    message = error_of(override)
    assert field in message and "a finite number" in message


@pytest.mark.parametrize(
    ("override", "field"),
    [
        ({"corpus": {"chunk_mb": 1e-9}}, "corpus.chunk_mb"),
        ({"corpus": {"chunk_mb": 1e-6}}, "corpus.chunk_mb"),
        ({"subword": {"seed": 10**30}}, "subword.seed"),
        ({"windows": {"blocks": {"length": 1048576}}}, "windows.blocks.length"),
        ({"shards": {"seed": 2**64}}, "shards.seed"),
        ({"corpus": {"max_document_bytes": 2**40}}, "corpus.max_document_bytes"),
        ({"report": {"top_oov": 10**9}}, "report.top_oov"),
    ],
)
def test_every_number_has_a_range(override: dict, field: str) -> None:
    message = error_of(override)
    assert f"{field} = " in message and "allowed: type" in message


def test_every_number_in_the_schema_has_both_bounds() -> None:
    """A number without an upper bound lets a config plan millions of jobs or overflow later."""
    unbounded = []

    def walk(node: dict, path: str) -> None:
        types = node.get("type", [])
        types = types if isinstance(types, list) else [types]
        if {"integer", "number"} & set(types) and not ("maximum" in node and ("minimum" in node or "exclusiveMinimum" in node)):
            unbounded.append(path)
        for key, child in node.get("properties", {}).items():
            walk(child, f"{path}.{key}".strip("."))
        if isinstance(node.get("items"), dict):
            walk(node["items"], path + "[]")

    walk(settings.load_schema(), "")
    assert unbounded == []


def test_a_section_that_is_not_a_mapping_is_refused() -> None:
    """JSON Schema `type: object` for each section."""
    message = error_of({"corpus": 5})
    assert "corpus = 5" in message and "type object" in message


def test_the_real_workflow_stops_before_any_job_and_writes_nothing(tmp_path: Path) -> None:
    """Snakemake itself, not a dry run: the Snakefile's validation exits before the DAG runs."""
    run = run_workflow(tmp_path, scenario("demo", {"windows": {"ngram": {"n": 1}}}), cores=1, check=False)
    assert run.returncode != 0
    assert "windows.ngram.n = 1: allowed: type integer, >= 2" in run.stdout + run.stderr
    assert not (tmp_path / "build").exists()
