"""Prepare: how a chunk table is stored, so that shard jobs read only their part of it, in
bounded memory whatever the size of the chunk."""

from __future__ import annotations

import random

import pyarrow as pa
import pyarrow.parquet as pq

from corpusmill import prepare
from corpusmill.prepare import ChunkTableWriter, chunk_schema
from corpusmill.split import doc_hash, read_part


def store_chunk(path: str, table: pa.Table, units: str, run_bytes: int = 1 << 40, batch_rows: int = 1 << 30) -> int:
    """Store `table` as prepare does, handed over in batches of `batch_rows`; returns the runs written."""
    with ChunkTableWriter(path, table.schema, units, run_bytes) as writer:
        for start in range(0, table.num_rows, batch_rows):
            writer.add(table.slice(start, batch_rows))
    return writer.runs


def synthetic_chunk(documents: int, seed: int = 7, sources: tuple[str, ...] = ("notes.txt",)) -> pa.Table:
    """A word-unit chunk table in corpus (file, offset) order with random splits and lengths;
    the documents are shared out over `sources` in order."""
    rng = random.Random(seed)
    rows = {name: [] for name in chunk_schema("word").names}
    for number in range(documents):
        source = sources[number * len(sources) // documents]
        offset = number * 40
        doc_id = f"{source}:{offset}"
        rows["doc_id"].append(doc_id)
        rows["doc_hash"].append(doc_hash(doc_id))
        rows["source"].append(source)
        rows["offset"].append(offset * 40)
        rows["split"].append(rng.choices(["train", "dev", "test"], [8, 1, 1])[0])
        rows["fingerprint"].append(number.to_bytes(16, "big"))
        rows["tokens"].append([[f"w{rng.randrange(50)}" for _ in range(rng.randint(1, 9))] for _ in range(rng.randint(1, 4))])
    return pa.table(rows, schema=chunk_schema("word"))


def test_rows_are_stored_by_split_then_doc_hash_in_groups_of_one_split(tmp_path, monkeypatch):
    monkeypatch.setattr(prepare, "GROUP_TOKENS", 100)
    table = synthetic_chunk(600)
    path = tmp_path / "chunk.parquet"
    assert store_chunk(str(path), table, "word") == 1
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
    assert store_chunk(str(path), chunk_schema("subword").empty_table(), "subword") == 0
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
    store_chunk(str(path), table, "subword")
    parquet = pq.ParquetFile(path)
    assert parquet.metadata.num_rows == 200 and parquet.num_row_groups > 10
    for group in range(parquet.num_row_groups):
        documents = parquet.read_row_group(group)["sentences"].to_pylist()
        weights = [max(sum(len(s.encode()) for s in doc) // 4, 1) for doc in documents]
        assert sum(weights) < 50 + max(weights)


def test_a_chunk_larger_than_the_run_budget_is_stored_in_sorted_runs(tmp_path, monkeypatch):
    """Rows held past the budget are written as a run of their own (bounded memory for a big
    compressed file); every row is stored once, each run in (split, doc_hash) order, and a
    part read by row-group statistics still finds all its rows."""
    monkeypatch.setattr(prepare, "GROUP_TOKENS", 100)
    table = synthetic_chunk(1200, sources=("a.txt", "b.txt", "c.txt"))
    path = str(tmp_path / "chunk.parquet")
    runs = store_chunk(path, table, "word", run_bytes=table.slice(0, 250).nbytes, batch_rows=100)
    assert runs == 4  # batches of 100 rows, a run closes at the first batch that reaches 250 rows
    stored = pq.read_table(path)
    key = lambda r: (r["source"], r["offset"])  # noqa: E731
    assert sorted(stored.to_pylist(), key=key) == table.to_pylist()
    keys = list(zip(stored["split"].to_pylist(), stored["doc_hash"].to_pylist()))
    run_starts = [0] + [i for i in range(1, len(keys)) if keys[i] < keys[i - 1]]
    assert len(run_starts) == runs
    for start, stop in zip(run_starts, [*run_starts[1:], len(keys)]):
        assert keys[start:stop] == sorted(keys[start:stop])
    for part in range(3):
        got = read_part(path, "dev", part, 3, ["doc_id"])["doc_id"].to_pylist()
        assert sorted(got) == sorted(r["doc_id"] for r in table.to_pylist() if r["split"] == "dev" and r["doc_hash"] * 3 >> 64 == part)
