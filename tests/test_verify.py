"""`corpusmill audit BUILD` finds every kind of damage to a finished build and passes a good one.

Outside reference: hashlib.sha256 over the files and pyarrow's Parquet reader, against the
figures the manifest recorded when the build was made.
"""

from __future__ import annotations

import json
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

from steps.verify import audit_build
from tests import hostile

REPO = Path(__file__).resolve().parent.parent


def build(workdir: Path, raw: Path, cores: int = 2, **sections: dict) -> Path:
    """Run the real workflow on `raw` into workdir/build."""
    override = workdir / "over.json"
    workdir.mkdir(parents=True, exist_ok=True)
    override.write_text(json.dumps({"corpus": {"root": str(raw)}, "shards": {"train_files": 2}, **sections}))
    run = subprocess.run(
        [sys.executable, "-m", "snakemake", "--snakefile", str(REPO / "Snakefile"), "--directory", str(workdir),
         "--cores", str(cores), "--configfile", str(override), "--quiet"],
        capture_output=True, text=True, timeout=600,
    )  # fmt: skip
    assert run.returncode == 0, run.stderr[-3000:]
    return workdir / "build"


@pytest.fixture(scope="module")
def builds(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, Path]:
    """A good build, and a second build of the same corpus with another vocabulary cutoff."""
    base = tmp_path_factory.mktemp("audit")
    hostile.write_small_corpus(base / "raw")
    good = build(base / "good", base / "raw")
    other = build(base / "other", base / "raw", vocabulary={"min_count": 1})
    return good, other


@pytest.fixture
def copy(builds: tuple[Path, Path], tmp_path: Path) -> Path:
    """A private copy of the good build to damage."""
    return Path(shutil.copytree(builds[0], tmp_path / "build"))


def audit(build_dir: Path) -> subprocess.CompletedProcess[str]:
    return subprocess.run([sys.executable, "-m", "steps.cli", "audit", str(build_dir)], cwd=REPO, capture_output=True, text=True)


def first_shard(build_dir: Path, kind: str = "ngram") -> Path:
    return sorted((build_dir / "shards" / "train").glob(f"{kind}-*.parquet"))[0]


def test_a_good_build_passes_with_a_short_summary(builds: tuple[Path, Path]) -> None:
    """The manifest's own figures, recomputed: every check holds on an untouched build."""
    run = audit(builds[0])
    assert run.returncode == 0, run.stderr
    assert "OK:" in run.stdout and "shard files" in run.stdout and "vocabulary" in run.stdout
    assert len(run.stdout.strip().splitlines()) == 1


def test_a_flipped_byte_in_a_shard_is_reported_by_file(copy: Path) -> None:
    """hashlib.sha256: one changed byte changes the digest."""
    shard = first_shard(copy)
    data = bytearray(shard.read_bytes())
    data[len(data) // 2] ^= 0x01
    shard.write_bytes(bytes(data))
    run = audit(copy)
    assert run.returncode != 0
    assert f"{shard.relative_to(copy).as_posix()}: SHA-256 differs from manifest.json" in run.stderr


def test_a_truncated_shard_is_reported_as_damaged(copy: Path) -> None:
    """Parquet format: a file without its footer (magic "PAR1" at the end) cannot be opened."""
    shard = first_shard(copy, "block")
    shard.write_bytes(shard.read_bytes()[: shard.stat().st_size // 2])
    run = audit(copy)
    assert run.returncode != 0
    name = shard.relative_to(copy).as_posix()
    assert f"{name}: SHA-256 differs" in run.stderr and f"{name}: not readable as Parquet" in run.stderr


def test_a_missing_shard_is_reported(copy: Path) -> None:
    """The manifest lists every shard; one absent from disk is named."""
    shard = first_shard(copy, "stream")
    shard.unlink()
    run = audit(copy)
    assert run.returncode != 0
    assert f"{shard.relative_to(copy).as_posix()}: listed in manifest.json but missing" in run.stderr


def test_an_extra_file_under_shards_is_reported(copy: Path) -> None:
    """A leftover (a .partial, a shard of another build) would be read by a glob over shards/."""
    extra = copy / "shards" / "train" / "ngram-0099.parquet"
    shutil.copy(first_shard(copy), extra)
    (copy / "shards" / "dev" / ".ngram-0000.parquet.partial").write_bytes(b"half")
    run = audit(copy)
    assert run.returncode != 0
    assert "shards/train/ngram-0099.parquet: is not listed in manifest.json" in run.stderr
    assert "shards/dev/.ngram-0000.parquet.partial: is not listed in manifest.json" in run.stderr


def test_a_vocabulary_swapped_for_another_builds_is_reported(copy: Path, builds: tuple[Path, Path]) -> None:
    """vocabulary_sha256 in each shard's Parquet key-value metadata ties the shard to its vocabulary."""
    shutil.copy(builds[1] / "vocabulary.tsv", copy / "vocabulary.tsv")
    run = audit(copy)
    assert run.returncode != 0
    assert "vocabulary.tsv: SHA-256" in run.stderr and "differs from manifest.json" in run.stderr


def test_shards_mixed_from_another_build_are_reported_by_their_vocabulary_hash(copy: Path, builds: tuple[Path, Path]) -> None:
    """A shard and manifest copied together from another build: the hash in its metadata differs."""
    manifest = json.loads((copy / "manifest.json").read_text())
    other = json.loads((builds[1] / "manifest.json").read_text())
    entry = next(e for e in other["splits"]["dev"]["shards"] if e["kind"] == "ngram")
    shutil.copy(builds[1] / entry["file"], copy / entry["file"])
    mine = next(e for e in manifest["splits"]["dev"]["shards"] if e["kind"] == "ngram")
    mine.update(sha256=entry["sha256"], rows=entry["rows"], bytes=entry["bytes"])
    manifest["splits"]["dev"]["rows"]["ngram"] = entry["rows"]
    (copy / "manifest.json").write_text(json.dumps(manifest))
    problems = audit_build(copy).problems
    assert any("metadata vocabulary_sha256 differs from vocabulary.tsv" in p for p in problems), problems


def test_an_unbalanced_accounting_is_reported(copy: Path) -> None:
    """The identity read + pieces_added = kept + sum(dropped) (manifest 'accounting')."""
    manifest = json.loads((copy / "manifest.json").read_text())
    manifest["accounting"]["kept"] += 1
    (copy / "manifest.json").write_text(json.dumps(manifest))
    run = audit(copy)
    assert run.returncode != 0 and "accounting does not balance" in run.stderr


def test_a_build_without_manifest_is_reported_as_unfinished(tmp_path: Path) -> None:
    """No manifest.json means the manifest job never finished."""
    run = audit(tmp_path)
    assert run.returncode != 0 and "manifest.json: missing or unreadable" in run.stderr
