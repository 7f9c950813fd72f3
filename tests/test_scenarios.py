"""tests/scenarios: the override configs the end-to-end tests build, one YAML file per scenario.

Each file is what a user could pass with `snakemake --configfile`, so each must pass
settings.resolve (the JSON schema, then the project's own checks), say at its top what it is
for, and be built by at least one test, or it rots unnoticed.
"""

from __future__ import annotations

from pathlib import Path

import pytest
import yaml

from conftest import REPO, SCENARIOS, scenario
from corpusmill import settings

SCENARIO_FILES = sorted(SCENARIOS.glob("*.yaml"))


@pytest.mark.parametrize("path", SCENARIO_FILES, ids=lambda path: path.stem)
def test_every_scenario_file_opens_with_a_comment_and_is_a_valid_override_config(path: Path) -> None:
    text = path.read_text(encoding="utf-8")
    assert text.startswith("# "), f"{path.name}: open the file with a comment saying what the scenario is for"
    settings.resolve(yaml.safe_load(text))


def test_every_scenario_file_is_built_by_a_test() -> None:
    """A test names a scenario as scenario("<file name without .yaml>" (conftest.scenario)."""
    sources = "".join(path.read_text(encoding="utf-8") for path in (REPO / "tests").glob("*.py") if path.name != Path(__file__).name)
    unused = [path.name for path in SCENARIO_FILES if f'scenario("{path.stem}"' not in sources]
    assert SCENARIO_FILES and unused == [], f"no test builds {unused}: use them in a test or delete them"


def test_a_scenario_reads_its_corpus_from_the_repository_and_takes_overrides_option_by_option() -> None:
    """The demo corpus named relative to the repository becomes absolute (tests run the workflow
    in other folders); a per-test override replaces single options and keeps the file's others."""
    assert scenario("journals") == {"corpus": {"root": str(REPO / "demo_raw"), "include": ["journals/*.txt"]}}
    assert scenario("journals", {"corpus": {"root": "corpus", "pack_mb": 0}, "units": "subword"}) == {
        "corpus": {"root": "corpus", "include": ["journals/*.txt"], "pack_mb": 0},
        "units": "subword",
    }
