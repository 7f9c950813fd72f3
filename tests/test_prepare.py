"""Prepare: how a chunk table is stored, so that shard jobs read only their part of it."""

from __future__ import annotations

import random

import pyarrow as pa
import pyarrow.parquet as pq

from steps import prepare
from steps.prepare import chunk_schema, write_chunk_table
from steps.split import doc_hash


def synthetic_chunk(documents: int, seed: int = 7) -> pa.Table:
    """A word-unit chunk table in corpus (offset) order with random splits and lengths."""
    rng = random.Random(seed)
    rows = {name: [] for name in chunk_schema("word").names}
    for offset in range(documents):
        doc_id = f"notes.txt:{offset * 40}"
        rows["doc_id"].append(doc_id)
        rows["doc_hash"].append(doc_hash(doc_id))
        rows["source"].append("notes.txt")
        rows["offset"].append(offset * 40)
        rows["split"].append(rng.choices(["train", "dev", "test"], [8, 1, 1])[0])
        rows["fingerprint"].append(offset.to_bytes(16, "big"))
        rows["tokens"].append([[f"w{rng.randrange(50)}" for _ in range(rng.randint(1, 9))] for _ in range(rng.randint(1, 4))])
    return pa.table(rows, schema=chunk_schema("word"))


def test_rows_are_stored_by_split_then_doc_hash_in_groups_of_one_split(tmp_path, monkeypatch):
    monkeypatch.setattr(prepare, "GROUP_TOKENS", 100)
    table = synthetic_chunk(600)
    path = tmp_path / "chunk.parquet"
    write_chunk_table(str(path), table, "word")
    stored = pq.read_table(path)
    assert sorted(stored.to_pylist(), key=lambda r: r["offset"]) == table.to_pylist()
    keys = list(zip(stored["split"].to_pylist(), stored["doc_hash"].to_pylist()))
    assert keys == sorted(keys)
    parquet = pq.ParquetFile(path)
    assert parquet.num_row_groups > 20
    for group in range(parquet.num_row_groups):
        rows = parquet.read_row_group(group)
        assert len(set(rows["split"].to_pylist())) == 1
        per_document = [sum(len(s) for s in doc) for doc in rows["tokens"].to_pylist()]
        assert sum(per_document) < 100 + max(per_document)


def test_an_empty_chunk_is_stored_as_an_empty_table(tmp_path):
    path = tmp_path / "empty.parquet"
    write_chunk_table(str(path), chunk_schema("subword").empty_table(), "subword")
    assert pq.read_table(path).num_rows == 0


def test_subword_rows_are_grouped_by_sentence_characters(tmp_path, monkeypatch):
    monkeypatch.setattr(prepare, "GROUP_TOKENS", 50)
    schema = chunk_schema("subword")
    texts = [["a sentence of some length."] * (i % 5 + 1) for i in range(200)]
    ids = [f"f.txt:{i}" for i in range(200)]
    table = pa.table(
        {
            "doc_id": ids, "doc_hash": pa.array([doc_hash(d) for d in ids], pa.uint64()), "source": ["f.txt"] * 200,
            "offset": list(range(200)), "split": ["train"] * 200, "fingerprint": [i.to_bytes(16, "big") for i in range(200)],
            "sentences": texts,
        },
        schema=schema,
    )
    path = tmp_path / "sub.parquet"
    write_chunk_table(str(path), table, "subword")
    parquet = pq.ParquetFile(path)
    assert parquet.metadata.num_rows == 200 and parquet.num_row_groups > 10
    for group in range(parquet.num_row_groups):
        documents = parquet.read_row_group(group)["sentences"].to_pylist()
        weights = [max(sum(len(s.encode()) for s in doc) // 4, 1) for doc in documents]
        assert sum(weights) < 50 + max(weights)
