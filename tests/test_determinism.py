"""Determinism: the same corpus and configuration give byte-identical outputs, whatever the
number of cores. Outside reference: hashlib.sha256 of every file a user consumes."""

from __future__ import annotations

import hashlib
from pathlib import Path

import pytest

from tests import hostile
from tests.test_audit import build


def digests(build_dir: Path) -> dict[str, str]:
    """SHA-256 of every shard and provenance table, the vocabulary, the token counts, coverage and the manifest."""
    tables = [*sorted((build_dir / "shards").rglob("*.parquet")), *sorted((build_dir / "provenance").rglob("*.parquet"))]
    chosen = [*tables, build_dir / "vocabulary.tsv", build_dir / "manifest.json",
              build_dir / "stats" / "token_counts.parquet", build_dir / "stats" / "coverage.json"]  # fmt: skip
    return {p.relative_to(build_dir).as_posix(): hashlib.sha256(p.read_bytes()).hexdigest() for p in chosen}


@pytest.fixture(scope="module")
def raw(tmp_path_factory: pytest.TempPathFactory) -> Path:
    root = tmp_path_factory.mktemp("determinism") / "raw"
    hostile.write_small_corpus(root)
    return root


def test_two_clean_builds_are_byte_identical(raw: Path, tmp_path: Path) -> None:
    """Same input, same configuration, two fresh folders: every SHA-256 matches."""
    first, second = digests(build(tmp_path / "a", raw)), digests(build(tmp_path / "b", raw))
    assert len(first) > 5 and first == second


def test_one_core_and_two_cores_give_byte_identical_builds(raw: Path, tmp_path: Path) -> None:
    """Job order differs with --cores 1 and --cores 2; outputs must not."""
    two = digests(build(tmp_path / "two", raw))
    one = digests(build(tmp_path / "one", raw, cores=1))
    assert one == two
