"""Shards (word units): one job per chunk writes the chunk's kept documents as ids, one file per
split and kind, with figures per input file for the coverage statistics and each file's rows,
bytes and SHA-256 for the manifest; read in manifest order, dev and test keep corpus order."""

from __future__ import annotations

import hashlib
import json
from collections import Counter
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from conftest import run_workflow, scenario
from corpusmill.encoder import WordEncoder
from corpusmill.formats import Figures, ShardStats, Vocabulary, read_shard_stats, read_vocabulary
from corpusmill.shards import Rows, kind_table
from corpusmill.split import doc_hash, order_keys
from corpusmill.vocabulary import unknown_class

# The two journal files cut into chunks of about 25 KB: two chunks each.
CHUNKED = scenario("journals", {"corpus": {"chunk_mb": 0.025, "pack_mb": 0}})


@pytest.fixture(scope="module")
def chunked_build(tmp_path_factory: pytest.TempPathFactory) -> Path:
    directory = tmp_path_factory.mktemp("chunked")
    run_workflow(directory, CHUNKED)
    return directory / "build"


def removed_places(build: Path) -> set[tuple[str, int]]:
    return {(r["source"], r["offset"]) for r in pq.read_table(build / "interim" / "duplicates.parquet").to_pylist()}


def test_figures_per_source_and_unknown_classes_match_a_recount(demo_build: Path) -> None:
    """Reference: collections.Counter recount over the prepared tokens of the kept documents."""
    vocabulary = read_vocabulary(demo_build / "vocabulary.tsv")
    words = set(vocabulary.tokens[vocabulary.first_word_id :])
    removed = removed_places(demo_build)
    expected, classes = Counter(), Counter()
    for path in sorted((demo_build / "interim" / "prepared").glob("*.parquet")):
        for row in pq.read_table(path, columns=["source", "offset", "split", "tokens"]).to_pylist():
            if (row["source"], row["offset"]) in removed:
                continue
            key = (row["source"], row["split"])
            expected[(*key, "documents")] += 1
            expected[(*key, "sentences")] += len(row["tokens"])
            for token in (t for sentence in row["tokens"] for t in sentence):
                expected[(*key, "tokens")] += 1
                if token not in words:
                    expected[(*key, "unknown")] += 1
                    classes[(row["split"], unknown_class(token))] += 1
    got, got_classes = Counter(), Counter()
    for path in sorted((demo_build / "interim" / "shards").glob("*.json")):
        for source, per_split in read_shard_stats(path).sources.items():
            for split, figures in per_split.items():
                for key in ("documents", "sentences", "tokens", "unknown"):
                    got[(source, split, key)] += getattr(figures, key)
                for token_id, count in figures.by_unknown.items():
                    got_classes[(split, vocabulary.tokens[int(token_id)])] += count
    assert got == expected and sum(v for k, v in expected.items() if k[2] == "tokens") > 50_000
    assert got_classes == classes
    coverage = json.loads((demo_build / "stats" / "coverage.json").read_text())
    for source, splits in coverage["sources"].items():
        for split, figures in splits.items():
            assert figures["unknown_tokens"] == expected[(source, split, "unknown")]
            assert figures["tokens"] == figures["words"] == expected[(source, split, "tokens")]


def test_token_ids_keep_the_sentence_and_document_structure() -> None:
    vocabulary = Vocabulary(
        ["<pad>", "<unk>", "<s>", "</s>", "harbour", "lamp"], [0, 3, 0, 0, 9, 4], ["reserved", "reserved", "reserved", "reserved", "word", "word"]
    )
    encoder = WordEncoder(vocabulary, "single")
    tokens = pa.array(
        [[["harbour"]], [["lamp", "tide"], ["harbour"]], [["tide", "tide", "lamp"]], [["mist"], [], ["lamp"]]],
        pa.list_(pa.list_(pa.string())),
    )
    rows = pa.table({"source": ["x.txt", "log.txt", "log.txt", "cove.txt"], "tokens": tokens}).slice(1)
    stats = ShardStats("chunk")
    encoded = encoder.encode(rows, "train", stats)
    assert encoded.to_pylist() == [[[5, 1], [4]], [[1, 1, 5]], [[1], [], [5]]]
    assert stats.sources == {
        "log.txt": {"train": Figures(documents=2, sentences=3, tokens=6, unknown=3, words=6, by_unknown={"1": 3})},
        "cove.txt": {"train": Figures(documents=1, sentences=3, tokens=2, unknown=1, words=2, by_unknown={"1": 1})},
    }


def test_token_ids_add_up_over_calls_and_count_shape_classes() -> None:
    vocabulary = Vocabulary(
        ["<pad>", "<unk>", "<s>", "</s>", "<unk-digits>", "<unk-title>", "lamp"],
        [0, 0, 0, 0, 0, 0, 4],
        ["reserved", "reserved", "reserved", "reserved", "unknown", "unknown", "word"],
    )
    encoder = WordEncoder(vocabulary, "shape")
    stats = ShardStats("chunk")
    for batch in ([[["lamp", "42"]]], [[["Orrin", "7b", "lamp"]]]):
        encoder.encode(pa.table({"source": ["log.txt"], "tokens": pa.array(batch, pa.list_(pa.list_(pa.string())))}), "dev", stats)
    assert stats.sources == {"log.txt": {"dev": Figures(documents=2, sentences=2, tokens=5, unknown=3, words=5, by_unknown={"4": 2, "5": 1})}}


def corpus_rows(build: Path, columns: list[str]) -> list[dict]:
    """Every prepared row (kept before deduplication) in corpus order: input file as listed in
    the manifest, then byte offset; prepared tables store rows by split and doc_hash."""
    inputs = [entry["path"] for entry in json.loads((build / "manifest.json").read_text())["inputs"]]
    rows = [row for path in (build / "interim" / "prepared").glob("*.parquet")
            for row in pq.read_table(path, columns=sorted({*columns, "source", "offset"})).to_pylist()]  # fmt: skip
    return sorted(rows, key=lambda r: (inputs.index(r["source"]), r["offset"]))


def heldout_corpus_order(build: Path, split: str) -> list[str]:
    """doc_ids of a held-out split's kept documents by input file (manifest order), then offset."""
    removed = removed_places(build)
    return [r["doc_id"] for r in corpus_rows(build, ["doc_id", "split"]) if r["split"] == split and (r["source"], r["offset"]) not in removed]


def manifest_files(build: Path, split: str, kind: str) -> list[Path]:
    """A split's shard files of one kind in manifest order."""
    manifest = json.loads((build / "manifest.json").read_text())
    return [build / entry["file"] for entry in manifest["splits"][split]["shards"] if entry["kind"] == kind]


def stream_doc_ids(build: Path, split: str) -> list[str]:
    return [doc_id for path in manifest_files(build, split, "stream") for doc_id in pq.read_table(path, columns=["doc_id"])["doc_id"].to_pylist()]


@pytest.mark.parametrize("which", ["demo", "chunked"])
def test_dev_and_test_streams_read_in_manifest_order_keep_corpus_order(demo_build: Path, chunked_build: Path, which: str) -> None:
    """The prepared rows sorted by input file (manifest order) and byte offset as the reference;
    in the chunked build a split's documents lie in several chunk files, read in manifest order."""
    build = demo_build if which == "demo" else chunked_build
    for split in ("dev", "test"):
        expected = heldout_corpus_order(build, split)
        assert stream_doc_ids(build, split) == expected
        assert expected != sorted(expected, key=doc_hash), "storage order would pass too"
        if which == "chunked":
            assert sum(1 for path in manifest_files(build, split, "stream") if pq.ParquetFile(path).metadata.num_rows) >= 2


def test_each_chunks_train_stream_holds_its_kept_train_documents_in_the_seeded_order(chunked_build: Path) -> None:
    """Per chunk, the train stream file holds exactly the chunk's kept train documents (read from
    its prepared table), ordered by the seeded mix of their doc_hash (steps.split.order_keys,
    itself checked against a plain-Python splitmix64 in test_split); the train files together
    hold every kept train document once."""
    manifest = json.loads((chunked_build / "manifest.json").read_text())
    seed = manifest["config"]["shards"]["seed"]
    removed = removed_places(chunked_build)
    chunks = json.loads((chunked_build / "interim" / "plan" / "chunks.json").read_text())
    assert len(chunks) == 4
    streams = {entry["chunk"]: chunked_build / entry["file"] for entry in manifest["splits"]["train"]["shards"] if entry["kind"] == "stream"}
    assert list(streams) == chunks
    everything = []
    for chunk in chunks:
        rows = pq.read_table(chunked_build / "interim" / "prepared" / f"{chunk}.parquet", columns=["doc_id", "source", "offset", "split"]).to_pylist()
        kept = [r["doc_id"] for r in rows if r["split"] == "train" and (r["source"], r["offset"]) not in removed]
        keys = order_keys(np.array([doc_hash(doc_id) for doc_id in kept], np.uint64), seed)
        expected = [kept[i] for i in np.argsort(keys, kind="stable")]
        stored = pq.read_table(streams[chunk], columns=["doc_id"])["doc_id"].to_pylist()
        assert stored == expected and len(stored) > 1, chunk
        everything += stored
    assert len(everything) == len(set(everything)) == manifest["splits"]["train"]["documents"]


def test_every_shard_file_is_recorded_with_its_rows_bytes_and_sha256(chunked_build: Path) -> None:
    """pyarrow's footer row count, the file size and hashlib's SHA-256 of each file as written;
    one file per split, kind and chunk, named after them, and the split's rows per kind add up."""
    manifest = json.loads((chunked_build / "manifest.json").read_text())
    chunks = json.loads((chunked_build / "interim" / "plan" / "chunks.json").read_text())
    for split, figures in manifest["splits"].items():
        entries = figures["shards"]
        assert sorted((e["kind"], e["chunk"]) for e in entries) == sorted((k, c) for k in ("ngram", "block", "stream") for c in chunks)
        for entry in entries:
            path = chunked_build / entry["file"]
            assert entry["file"] == f"shards/{split}/{entry['kind']}-{entry['chunk']}.parquet"
            assert entry["rows"] == pq.ParquetFile(path).metadata.num_rows
            assert entry["bytes"] == path.stat().st_size
            assert entry["sha256"] == hashlib.sha256(path.read_bytes()).hexdigest()
        for kind, rows in figures["rows"].items():
            assert rows == sum(e["rows"] for e in entries if e["kind"] == kind)


def test_a_kind_new_to_the_shard_writer_is_written_by_its_schema() -> None:
    """kind_table has no code per kind: a made-up kind's columns, given as Rows describes them (a
    2-D array, a 1-D array, a list of str, values and lengths), become the fixed_size_list,
    integer, string and variable-length list columns its schema names; pyarrow's to_pylist
    reads them back row by row."""
    schema = pa.schema([("before", pa.list_(pa.uint16(), 2)), ("center", pa.uint16()), ("name", pa.string()), ("after", pa.list_(pa.uint16()))])
    columns = {
        "before": np.array([[1, 2], [3, 4], [5, 6]]),
        "center": np.array([7, 8, 9]),
        "name": ["a", "b", "c"],
        "after": (np.arange(6), np.array([2, 0, 4])),
    }
    table = kind_table("skipgram", Rows({"skipgram": columns}, {}), schema)
    assert table.schema == schema
    assert table.to_pylist() == [
        {"before": [1, 2], "center": 7, "name": "a", "after": [0, 1]},
        {"before": [3, 4], "center": 8, "name": "b", "after": []},
        {"before": [5, 6], "center": 9, "name": "c", "after": [2, 3, 4, 5]},
    ]
