"""Configuration errors stop the run before any job, naming the field, the value and what is allowed.

One test per class of mistake. The schema (workflow_config/config.schema.json, JSON Schema
2020-12) is the outside reference for types, ranges, enums and known keys; the checks a
schema cannot express are in steps.settings.
"""

from __future__ import annotations

from pathlib import Path

import pytest
import yaml

from conftest import run_workflow
from steps import settings

REPO = Path(__file__).resolve().parent.parent


def error_of(raw: dict) -> str:
    with pytest.raises(settings.ConfigError) as caught:
        settings.resolve(raw)
    return str(caught.value)


def test_a_wrong_type_names_the_field_the_value_and_the_type_allowed() -> None:
    """JSON Schema `type`: an integer field given a string."""
    message = error_of({"shards": {"train_files": "four"}})
    assert 'shards.train_files = "four"' in message and "type integer" in message


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
    assert f"build_dir = {value!r}" in message and "relative path without '..'" in message


def test_a_section_that_is_not_a_mapping_is_refused() -> None:
    """JSON Schema `type: object` for each section."""
    message = error_of({"corpus": 5})
    assert "corpus = 5" in message and "type object" in message


def test_the_real_workflow_stops_before_any_job_and_writes_nothing(tmp_path: Path) -> None:
    """Snakemake itself, not a dry run: the Snakefile's validation exits before the DAG runs."""
    run = run_workflow(tmp_path, {"corpus": {"root": str(REPO / "demo_raw")}, "windows": {"ngram": {"n": 1}}}, cores=1, check=False)
    assert run.returncode != 0
    assert "windows.ngram.n = 1: allowed: type integer, >= 2" in run.stdout + run.stderr
    assert not (tmp_path / "build").exists()
