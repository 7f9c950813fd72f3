"""Shards (word units): each part's slice of the prepared chunks, mapped to ids, with OOV
counted per input file for the coverage statistics."""

from __future__ import annotations

import json
from collections import Counter

import pyarrow as pa
import pyarrow.parquet as pq

from corpusmill.shards import TokenIds
from corpusmill.split import doc_hash
from corpusmill.vocab import Vocabulary, read_vocabulary, unknown_class


def test_oov_per_source_and_unknown_classes_match_a_recount(demo_build):
    """Reference: collections.Counter recount over the prepared tokens of the kept documents."""
    vocabulary = read_vocabulary(demo_build / "vocabulary.tsv")
    words = set(vocabulary.tokens[vocabulary.first_word_id :])
    removed = {(r["source"], r["offset"]) for r in pq.read_table(demo_build / "interim" / "duplicates.parquet").to_pylist()}
    expected, classes = Counter(), Counter()
    for path in sorted((demo_build / "interim" / "prepared").glob("*.parquet")):
        for row in pq.read_table(path, columns=["source", "offset", "split", "tokens"]).to_pylist():
            if (row["source"], row["offset"]) in removed:
                continue
            for token in (t for sentence in row["tokens"] for t in sentence):
                expected[(row["source"], row["split"], "tokens")] += 1
                if token not in words:
                    expected[(row["source"], row["split"], "oov_tokens")] += 1
                    classes[(row["split"], unknown_class(token))] += 1
    got, got_classes = Counter(), Counter()
    for path in sorted((demo_build / "interim" / "shards").glob("*.json")):
        stats = json.loads(path.read_text())
        for source, figures in stats["sources"].items():
            for key in ("tokens", "oov_tokens"):
                got[(source, stats["split"], key)] += figures[key]
            for token_id, count in figures["unknown"].items():
                got_classes[(stats["split"], vocabulary.tokens[int(token_id)])] += count
    assert got == expected and sum(expected.values()) > 50_000
    assert got_classes == classes
    coverage = json.loads((demo_build / "stats" / "coverage.json").read_text())
    for source, splits in coverage["sources"].items():
        for split, figures in splits.items():
            assert figures["oov_tokens"] == expected[(source, split, "oov_tokens")]


def test_token_ids_keep_the_sentence_and_document_structure():
    vocabulary = Vocabulary(
        ["<pad>", "<unk>", "<s>", "</s>", "harbour", "lamp"], [0, 3, 0, 0, 9, 4], ["reserved", "unknown", "reserved", "reserved", "word", "word"]
    )
    token_ids = TokenIds(vocabulary, "single")
    tokens = pa.array(
        [[["harbour"]], [["lamp", "tide"], ["harbour"]], [["tide", "tide", "lamp"]], [["mist"], [], ["lamp"]]],
        pa.list_(pa.list_(pa.string())),
    )
    rows = pa.table({"source": ["x.txt", "log.txt", "log.txt", "cove.txt"], "tokens": tokens}).slice(1)
    encoded = token_ids.encode(rows)
    assert encoded.to_pylist() == [[[5, 1], [4]], [[1, 1, 5]], [[1], [], [5]]]
    assert token_ids.sources == {
        "log.txt": {"tokens": 6, "oov_tokens": 3, "unknown": {"1": 3}},
        "cove.txt": {"tokens": 2, "oov_tokens": 1, "unknown": {"1": 1}},
    }


def test_token_ids_add_up_over_calls_and_count_shape_classes():
    vocabulary = Vocabulary(
        ["<pad>", "<unk>", "<s>", "</s>", "<unk-digits>", "<unk-title>", "lamp"],
        [0, 0, 0, 0, 0, 0, 4],
        ["reserved", "unknown", "reserved", "reserved", "unknown", "unknown", "word"],
    )
    token_ids = TokenIds(vocabulary, "shape")
    for batch in ([[["lamp", "42"]]], [[["Orrin", "7b", "lamp"]]]):
        token_ids.encode(pa.table({"source": ["log.txt"], "tokens": pa.array(batch, pa.list_(pa.list_(pa.string())))}))
    assert token_ids.sources == {"log.txt": {"tokens": 5, "oov_tokens": 3, "unknown": {"4": 2, "5": 1}}}


def heldout_corpus_order(build, split: str) -> list[str]:
    """doc_ids of a held-out split's kept documents by input file (manifest order), then offset."""
    from tests.test_report import corpus_rows

    removed = {(r["source"], r["offset"]) for r in pq.read_table(build / "interim" / "duplicates.parquet").to_pylist()}
    rows = corpus_rows(build, ["doc_id", "split"])
    return [r["doc_id"] for r in rows if r["split"] == split and (r["source"], r["offset"]) not in removed]


def test_dev_and_test_streams_keep_corpus_order(demo_build):
    for split in ("dev", "test"):
        streams = pq.read_table(demo_build / "shards" / split / "stream-0000.parquet", columns=["doc_id"])
        expected = heldout_corpus_order(demo_build, split)
        assert streams["doc_id"].to_pylist() == expected
        assert expected != sorted(expected, key=doc_hash), "storage order would pass too"
