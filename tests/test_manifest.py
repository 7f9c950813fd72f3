"""steps.manifest: manifest.json equals an independent recount of the build it describes.

Outside references: hashlib.sha256 over every file, os.stat for sizes, pyarrow's Parquet reader
for the rows and ids of every shard, json for the canonical digests (sorted keys, no spaces),
and plain-Python sums over the shards for the per-split figures. The build has one chunk per
input file (corpus.pack_mb: 0), so every split has several shard files of each kind.
"""

from __future__ import annotations

import hashlib
import json
import os
from collections import Counter
from pathlib import Path

import pyarrow.parquet as pq
import pytest

from conftest import DEMO, scenario
from corpusmill import settings

KINDS = ("ngram", "block", "stream")


def sha256(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def canonical_sha256(value: object) -> str:
    """SHA-256 of JSON with sorted keys and no spaces (the manifest's digests of its own values)."""
    return hashlib.sha256(json.dumps(value, sort_keys=True, separators=(",", ":"), ensure_ascii=False).encode("utf-8")).hexdigest()


@pytest.fixture(scope="module")
def manifest(demo_chunks_build: Path) -> dict:
    return json.loads((demo_chunks_build / "manifest.json").read_text(encoding="utf-8"))


def test_the_shard_list_is_every_file_on_disk_hashed_sized_and_counted(demo_chunks_build: Path, manifest: dict) -> None:
    """Every file under shards/<split>/ is listed once, with its kind and chunk (from its name
    `<kind>-<chunk>.parquet`), its size, its SHA-256 and its rows (pyarrow), chunks in corpus
    order (interim/plan/chunks.json) and kinds in the order ngram, block, stream."""
    chunks = json.loads((demo_chunks_build / "interim" / "plan" / "chunks.json").read_text(encoding="utf-8"))
    assert len(chunks) == 7
    for split in ("train", "dev", "test"):
        expected = []
        for chunk in chunks:
            for kind in KINDS:
                path = demo_chunks_build / "shards" / split / f"{kind}-{chunk}.parquet"
                rows = pq.read_table(path).num_rows
                expected.append({"file": f"shards/{split}/{path.name}", "kind": kind, "chunk": chunk, "rows": rows,
                                 "bytes": os.stat(path).st_size, "sha256": sha256(path)})  # fmt: skip
        on_disk = sorted(p.name for p in (demo_chunks_build / "shards" / split).iterdir())
        assert manifest["splits"][split]["shards"] == expected
        assert on_disk == sorted(Path(e["file"]).name for e in expected)


def stream_figures(build: Path, entries: list[dict], eos: int) -> dict:
    """documents, sentences, tokens, rows per kind, and ids in blocks of the default
    L = 64, stride 64, span document, remainder drop (a document of d >= 65 ids gives blocks at
    0, 64, … holding its first ((d - 65) // 64) * 64 + 65 ids), recounted from the shards."""
    rows: Counter = Counter()
    lengths, sentences = [], 0
    for entry in entries:
        table = pq.read_table(build / entry["file"])
        rows[entry["kind"]] += table.num_rows
        if entry["kind"] == "stream":
            for ids in table["ids"].to_pylist():
                lengths.append(len(ids))
                sentences += ids.count(eos)
    documents = rows["stream"]
    return {
        "documents": documents, "sentences": sentences, "tokens": sum(lengths) - documents - sentences, "rows": dict(rows),
        "stream_ids": sum(lengths), "block_ids": sum(min(d, ((d - 65) // 64) * 64 + 65) for d in lengths if d >= 65),
    }  # fmt: skip


def test_per_split_figures_are_the_sums_over_the_split_shards(demo_chunks_build: Path, manifest: dict) -> None:
    """Each stream is <s>, then every sentence's ids and </s>: documents are stream rows,
    sentences the </s> ids, tokens the rest."""
    tokens = [line.split("\t") for line in (demo_chunks_build / "vocabulary.tsv").read_text(encoding="utf-8").splitlines()[1:]]
    eos = next(int(number) for number, token, _, _ in tokens if token == "</s>")
    for split, figures in manifest["splits"].items():
        recount = stream_figures(demo_chunks_build, figures["shards"], eos)
        assert {key: figures[key] for key in recount} == recount, split
        assert recount["documents"] > 20 and recount["sentences"] > recount["documents"]


def test_inputs_are_every_file_read_with_its_size_and_hash(demo_chunks_build: Path, manifest: dict) -> None:
    """The files under the demo corpus in path order, each hashed here; inputs_sha256 is the
    canonical digest of that list."""
    files = sorted(p.relative_to(DEMO).as_posix() for p in DEMO.rglob("*") if p.is_file())
    expected = [{"path": name, "bytes": (DEMO / name).stat().st_size, "sha256": sha256(DEMO / name)} for name in files]
    assert manifest["inputs"] == expected
    assert manifest["inputs_sha256"] == canonical_sha256(expected)
    assert manifest["not_read"] == {"unselected": [], "excluded": [], "refused": []}


def test_the_configuration_is_the_resolved_one_with_its_digest(demo_chunks_build: Path, manifest: dict) -> None:
    """settings.resolve of the run's override file: the whole configuration, nothing left out."""
    assert manifest["config"] == settings.resolve(scenario("one-chunk-per-file"))
    assert manifest["config_sha256"] == canonical_sha256(manifest["config"])
    assert manifest["schema_version"] == 2


def test_the_vocabulary_entry_describes_vocabulary_tsv(demo_chunks_build: Path, manifest: dict) -> None:
    """The file's SHA-256; the digest of its id, token and kind columns (what shards name); its
    size, words, and the ids of its symbols, read line by line."""
    path = demo_chunks_build / "vocabulary.tsv"
    rows = [line.split("\t") for line in path.read_text(encoding="utf-8").splitlines()[1:]]
    ids = hashlib.sha256("".join(f"{number}\t{token}\t{kind}\n" for number, token, _, kind in rows).encode("utf-8")).hexdigest()
    assert manifest["vocabulary"] == {
        "file": "vocabulary.tsv", "sha256": sha256(path), "ids_sha256": ids, "size": len(rows),
        "words": sum(kind == "word" for *_, kind in rows),
        "reserved": {token: int(number) for number, token, _, kind in rows if kind in ("reserved", "unknown")},
    }  # fmt: skip
    listed = [demo_chunks_build / "stats" / "coverage.json", demo_chunks_build / "stats" / "baseline.json"]  # the baseline: on by default
    provenance = sorted((demo_chunks_build / "provenance").rglob("*.parquet"))
    assert provenance and manifest["files"] == {p.relative_to(demo_chunks_build).as_posix(): sha256(p) for p in [*listed, *provenance]}


def test_the_accounting_sums_the_chunk_tallies_and_keeps_what_the_shards_hold(demo_chunks_build: Path, manifest: dict) -> None:
    """collections.Counter over the prepare jobs' tallies, duplicates counted by the
    deduplication's list; kept documents are the stream rows of all splits."""
    fields = Counter()
    for path in (demo_chunks_build / "interim" / "prepared").glob("*.tally.json"):
        tally = json.loads(path.read_text(encoding="utf-8"))
        fields.update({key: tally[key] for key in ("read", "pieces_added", "truncated", "replaced_sequences")})
    duplicates = pq.read_table(demo_chunks_build / "interim" / "duplicates.parquet").num_rows
    accounting = manifest["accounting"]
    assert {key: accounting[key] for key in fields} == dict(fields)
    assert accounting["dropped"]["duplicate"] == duplicates > 0
    assert accounting["kept"] == sum(manifest["splits"][s]["rows"]["stream"] for s in manifest["splits"])
    assert accounting["read"] + accounting["pieces_added"] == accounting["kept"] + sum(accounting["dropped"].values())
    assert accounting == json.loads((demo_chunks_build / "stats" / "accounting.json").read_text(encoding="utf-8"))
