"""Incremental builds: a corpus that grows, changes and shrinks, rebuilt in place, gives exactly
what a clean build of the same corpus and configuration gives.

Outside reference: a clean build in a fresh folder (hashlib.sha256 of every shard file,
vocabulary.tsv, manifest.json and every file under stats/), and os.stat for which shard files a
rebuild rewrote. The corpus is one chunk per file (corpus.pack_mb: 0) of seeded invented text
with no paragraph repeated across files, so a change to a file touches its own chunk only: with
a frozen vocabulary (ids that never move), every shard file of every other chunk keeps its bytes
and is not even rewritten.
"""

from __future__ import annotations

import hashlib
import json
import random
import shutil
from pathlib import Path

import pytest

from conftest import run_workflow, scenario

SYLLABLES = ["ka", "lo", "mi", "ren", "tas", "vo", "dun", "pel", "sir", "ath", "mor", "quin", "bel", "tor", "ish", "nu"]


def lexicon(seed: int) -> list[str]:
    rng = random.Random(seed)
    return sorted({"".join(rng.choice(SYLLABLES) for _ in range(rng.randint(1, 3))) for _ in range(400)})


WORDS = lexicon(2026)


def paragraph(rng: random.Random) -> str:
    """Two to five sentences of words drawn with falling weights (a few common, many rare)."""
    sentences = []
    for _ in range(rng.randint(2, 5)):
        words = [WORDS[min(int(rng.paretovariate(1.1)) - 1, len(WORDS) - 1)] for _ in range(rng.randint(4, 12))]
        if rng.random() < 0.2:
            words.append(str(rng.randint(2, 2000)))
        sentences.append(" ".join(words).capitalize() + ".")
    return " ".join(sentences)


def text(rng: random.Random, paragraphs: int) -> str:
    return "\n\n".join(paragraph(rng) for _ in range(paragraphs)) + "\n"


def write_corpus(root: Path, files: dict[str, str]) -> None:
    """Make `root` hold exactly `files` (name → text); unchanged files are left untouched."""
    root.mkdir(parents=True, exist_ok=True)
    for path in root.iterdir():
        if path.name not in files:
            path.unlink()
    for name, content in files.items():
        path = root / name
        if not path.exists() or path.read_text(encoding="utf-8") != content:
            path.write_text(content, encoding="utf-8")


def changes(seed: int, files: dict[str, str]) -> list[tuple[str, dict[str, str]]]:
    """A seeded sequence of three changes, one of each kind in a random order: a new file (its
    name sorting among the others), an edited file (a paragraph replaced and one added), a
    removed file; each with the corpus after it."""
    rng = random.Random(seed)
    current, sequence = dict(files), []
    for kind in rng.sample(["add", "edit", "remove"], 3):
        current = dict(current)
        if kind == "add":
            name = f"{rng.choice(sorted(current))[:-4]}-new{len(sequence)}.txt"
            current[name] = text(rng, rng.randint(6, 12))
        elif kind == "edit":
            name = rng.choice(sorted(current))
            kept = current[name].rstrip("\n").split("\n\n")
            kept[rng.randrange(len(kept))] = paragraph(rng)
            current[name] = "\n\n".join(kept + [paragraph(rng)]) + "\n"
        else:
            name = rng.choice(sorted(current))
            del current[name]
        sequence.append((f"{kind} {name}", current))
    return sequence


def outputs(build: Path) -> dict[str, str]:
    """SHA-256 of every shard file, vocabulary.tsv, manifest.json and the statistics, by path in
    the build."""
    paths = [*sorted((build / "shards").rglob("*.parquet")), build / "vocabulary.tsv", build / "manifest.json", *sorted((build / "stats").iterdir())]
    return {p.relative_to(build).as_posix(): hashlib.sha256(p.read_bytes()).hexdigest() for p in paths}


def chunk_files(build: Path) -> dict[str, list]:
    """Each chunk's plan record (its files with size and modification time), by chunk key."""
    keys = json.loads((build / "interim" / "plan" / "chunks.json").read_text(encoding="utf-8"))
    return {key: json.loads((build / "interim" / "plan" / "chunks" / f"{key}.json").read_text(encoding="utf-8"))["files"] for key in keys}


def shard_states(build: Path) -> dict[str, tuple[str, int]]:
    """(SHA-256, modification time) of every shard file."""
    return {p.relative_to(build).as_posix(): (hashlib.sha256(p.read_bytes()).hexdigest(), p.stat().st_mtime_ns)
            for p in sorted((build / "shards").rglob("*.parquet"))}  # fmt: skip


def chunk_of(shard: str) -> str:
    """The chunk of `shards/<split>/<kind>-<chunk>.parquet`."""
    return Path(shard).name.split("-", 1)[1].removesuffix(".parquet")


@pytest.fixture(scope="module")
def start(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, dict[str, str], Path]:
    """Five files of 8 to 14 paragraphs, and the vocabulary.tsv of their build (to freeze)."""
    base = tmp_path_factory.mktemp("incremental")
    rng = random.Random(18)
    files = {f"{name}.txt": text(rng, rng.randint(8, 14)) for name in ("alder", "birch", "cedar", "elm", "fir")}
    write_corpus(base / "first" / "corpus", files)
    run_workflow(base / "first", scenario("one-chunk-per-file", {"corpus": {"root": str(base / "first" / "corpus")}}))
    frozen = base / "frozen.tsv"
    shutil.copy(base / "first" / "build" / "vocabulary.tsv", frozen)
    return base, files, frozen


def check_like_a_clean_build(base: Path, overrides: dict, label: str) -> None:
    """The incremental build's outputs are byte for byte those of a clean build in a fresh
    folder of the same corpus (the same corpus.root, so the manifests' configurations agree)."""
    clean = base / f"clean-{label.replace(' ', '-')}"
    run_workflow(clean, overrides)
    assert outputs(base / "live" / "build") == outputs(clean / "build"), label
    shutil.rmtree(clean)


def test_with_a_frozen_vocabulary_each_change_equals_a_clean_build_and_spares_the_other_chunks(start: tuple[Path, dict[str, str], Path]) -> None:
    base, files, frozen = start
    corpus = base / "live" / "corpus"
    overrides = scenario("one-chunk-per-file", {"corpus": {"root": str(corpus)}, "vocabulary": {"frozen": str(frozen)}})
    write_corpus(corpus, files)
    run_workflow(base / "live", overrides)
    check_like_a_clean_build(base, overrides, "frozen start")
    for label, after in changes(7, files):
        build = base / "live" / "build"
        before_chunks, before_shards = chunk_files(build), shard_states(build)
        write_corpus(corpus, after)
        run_workflow(base / "live", overrides)
        now_chunks, now_shards = chunk_files(build), shard_states(build)
        untouched = {key for key, record in now_chunks.items() if before_chunks.get(key) == record}
        assert len(untouched) >= 3 and len(untouched) < len(now_chunks) + (label.startswith("remove")), label
        spared = {name: state for name, state in before_shards.items() if chunk_of(name) in untouched}
        assert len(spared) == 9 * len(untouched)
        assert {name: now_shards[name] for name in spared} == spared, label
        if label.startswith("add"):  # the vocabulary and the baseline sum and count the new file alone
            log = (build / "logs" / "vocabulary" / "vocabulary.log").read_text(encoding="utf-8")
            assert f"chunk count tables: {len(now_chunks) - 1} summed by an earlier run, 1 summed now" in log
            log = (build / "logs" / "baseline" / "baseline.log").read_text(encoding="utf-8")
            assert f"train stream files: {len(now_chunks) - 1} counted by an earlier run, 1 counted now" in log
            # Run again with nothing new: every file's totals are kept, and the file is not rewritten.
            totals = build / "interim" / "baseline" / "train-ngram-totals.arrow"
            written = totals.stat().st_mtime_ns
            run_workflow(base / "live", overrides, "--forcerun", "baseline")
            log = (build / "logs" / "baseline" / "baseline.log").read_text(encoding="utf-8")
            assert f"train stream files: {len(now_chunks)} counted by an earlier run, 0 counted now" in log
            assert totals.stat().st_mtime_ns == written
        check_like_a_clean_build(base, overrides, f"frozen {label}")


def test_without_a_frozen_vocabulary_the_changed_corpus_equals_a_clean_build(start: tuple[Path, dict[str, str], Path]) -> None:
    """Ids follow the train counts, so any change may move them and rewrite every shard; the
    end state must still be the clean build's."""
    base, files, _ = start
    corpus = base / "live" / "corpus"
    shutil.rmtree(base / "live", ignore_errors=True)
    overrides = scenario("one-chunk-per-file", {"corpus": {"root": str(corpus)}})
    write_corpus(corpus, files)
    run_workflow(base / "live", overrides)
    for _, after in changes(11, files):
        write_corpus(corpus, after)
        run_workflow(base / "live", overrides)
    check_like_a_clean_build(base, overrides, "recomputed end")
