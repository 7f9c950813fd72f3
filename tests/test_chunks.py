"""The prepared chunk table: how a chunk is stored (runs of rows by split and doc_hash, row
groups that never mix splits) and how later steps read one split of it back without the removed
documents, in stored order (`split_groups`) or in corpus order (`kept_batches`), a bounded batch
at a time whatever the budget."""

from __future__ import annotations

import random
from collections import Counter

import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from corpusmill import chunks
from corpusmill.chunks import ChunkTableWriter, chunk_schema, kept_batches, removed_mask, row_weights, split_groups
from corpusmill.split import doc_hash

# Budgets from one byte (a batch per row group, a window per row) to more than any chunk.
BUDGETS = [1, 64, 700, 2_000, 9_000, 20_000, 60_000, 1 << 40]


def store_chunk(path: str, table: pa.Table, units: str, run_bytes: int = 1 << 40, batch_rows: int = 1 << 30) -> int:
    """Store `table` as prepare does, handed over in batches of `batch_rows`; returns the runs written."""
    with ChunkTableWriter(path, table.schema, units, run_bytes) as writer:
        for start in range(0, table.num_rows, batch_rows):
            writer.add(table.slice(start, batch_rows))
    return writer.runs


def synthetic_chunk(documents: int, seed: int = 7, sources: tuple[str, ...] = ("notes.txt",)) -> pa.Table:
    """A word-unit chunk table in corpus (file, offset) order with random splits and lengths;
    the documents are shared out over `sources` in order, each file's offsets starting at 0 (so
    the files of a pack share offsets, as they do in a real pack)."""
    rng = random.Random(seed)
    rows = {name: [] for name in chunk_schema("word").names}
    read_before: Counter[str] = Counter()
    for number in range(documents):
        source = sources[number * len(sources) // documents]
        offset = read_before[source] * 1600
        read_before[source] += 1
        doc_id = f"{source}:{offset}"
        rows["doc_id"].append(doc_id)
        rows["doc_hash"].append(doc_hash(doc_id))
        rows["source"].append(source)
        rows["offset"].append(offset)
        rows["split"].append(rng.choices(["train", "dev", "test"], [8, 1, 1])[0])
        rows["fingerprint"].append(number.to_bytes(16, "big"))
        rows["tokens"].append([[f"w{rng.randrange(50)}" for _ in range(rng.randint(1, 9))] for _ in range(rng.randint(1, 4))])
    return pa.table(rows, schema=chunk_schema("word"))


def removed_places(table: pa.Table, rows: list[int]) -> pa.Table:
    """The removed-documents table (source, offset) of the given rows of `table`."""
    chosen = table.take(pa.array(rows, pa.int64()))
    return pa.table({"source": chosen["source"], "offset": chosen["offset"]})


def place(row: dict) -> tuple[str, int]:
    return row["source"], row["offset"]


# --- storage -------------------------------------------------------------------------------------


def test_rows_are_stored_by_split_then_doc_hash_in_groups_of_one_split(tmp_path, monkeypatch):
    monkeypatch.setattr(chunks, "GROUP_TOKENS", 100)
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
    assert [parquet.metadata.row_group(g).num_rows for g in range(parquet.num_row_groups)] == group_sizes(stored, 100)


def group_sizes(stored: pa.Table, group_tokens: int) -> list[int]:
    """The row groups the docstring of ChunkTableWriter describes, restated as a plain loop over
    the stored rows: within each split, a row whose running token count (from the split's first
    row) passes a multiple of `group_tokens` starts a new group."""
    sizes: list[int] = []
    previous_split, group, total = None, None, 0
    for row in stored.to_pylist():
        if row["split"] != previous_split:
            previous_split, group, total = row["split"], None, 0
            sizes.append(0)
        total += max(sum(len(sentence) for sentence in row["tokens"]), 1)
        if group is not None and (total - 1) // group_tokens != group:
            sizes.append(0)
        group = (total - 1) // group_tokens
        sizes[-1] += 1
    return sizes


def test_an_empty_chunk_is_stored_as_an_empty_table(tmp_path):
    path = tmp_path / "empty.parquet"
    assert store_chunk(str(path), chunk_schema("subword").empty_table(), "subword") == 0
    assert pq.read_table(path).num_rows == 0
    assert list(split_groups(str(path), "train", removed_places(pq.read_table(path), []), ["doc_id"], 1 << 20)) == []
    assert list(kept_batches(str(path), "train", removed_places(pq.read_table(path), []), ["doc_id"], 1 << 20)) == []


def subword_chunk(documents: int) -> pa.Table:
    texts = [["a sentence of some length, caf\u00e9 \u2014 \u8a9e."] * (i % 5 + 1) for i in range(documents)]
    ids = [f"f.txt:{i}" for i in range(documents)]
    return pa.table(
        {
            "doc_id": ids, "doc_hash": pa.array([doc_hash(d) for d in ids], pa.uint64()), "source": ["f.txt"] * documents,
            "offset": list(range(documents)), "split": ["train"] * documents,
            "fingerprint": [i.to_bytes(16, "big") for i in range(documents)], "sentences": texts,
        },
        schema=chunk_schema("subword"),
    )  # fmt: skip


def test_subword_rows_are_grouped_by_a_quarter_of_their_sentence_bytes(tmp_path, monkeypatch):
    monkeypatch.setattr(chunks, "GROUP_TOKENS", 50)
    table = subword_chunk(200)
    path = tmp_path / "sub.parquet"
    store_chunk(str(path), table, "subword")
    parquet = pq.ParquetFile(path)
    assert parquet.metadata.num_rows == 200 and parquet.num_row_groups > 10
    for group in range(parquet.num_row_groups):
        documents = parquet.read_row_group(group)["sentences"].to_pylist()
        weights = [max(sum(len(s.encode()) for s in doc) // 4, 1) for doc in documents]
        assert sum(weights) < 50 + max(weights)


def test_row_weights_are_tokens_or_a_quarter_of_the_utf8_sentence_bytes_and_at_least_one():
    """Python's own counts: len() of every sentence's token list, and len(str.encode('utf-8'))
    of every sentence; an empty document weighs 1, never 0."""
    words = synthetic_chunk(300)
    expected = [max(sum(len(sentence) for sentence in doc), 1) for doc in words["tokens"].to_pylist()]
    assert row_weights(words, "word").tolist() == expected
    pieces = subword_chunk(40)
    pieces = pa.concat_tables([pieces, pieces.slice(0, 1).set_column(6, "sentences", pa.array([["ab"]], pa.list_(pa.string())))])
    expected = [max(sum(len(s.encode("utf-8")) for s in doc) // 4, 1) for doc in pieces["sentences"].to_pylist()]
    assert expected[-1] == 1
    assert row_weights(pieces, "subword").tolist() == expected


def test_a_row_of_a_multiple_of_four_sentence_bytes_weighs_exactly_a_quarter_first_row_included():
    """8 bytes weigh 2 wherever the row stands; 2 bytes round down to 0 and weigh 1."""
    sentences = pa.array([["abcd", "efgh"], ["ab"], ["abcdefgh"], ["\u00e9\u00e9\u00e9\u00e9"]], pa.list_(pa.string()))
    assert row_weights(pa.table({"sentences": sentences}), "subword").tolist() == [2, 1, 2, 2]


def test_a_chunk_larger_than_the_run_budget_is_stored_in_sorted_runs(tmp_path, monkeypatch):
    """Rows held past the budget are written as a run of their own (bounded memory for a big
    compressed file); every row is stored once, each run in (split, doc_hash) order, and a
    split read by row-group statistics still finds all its rows, in stored order."""
    monkeypatch.setattr(chunks, "GROUP_TOKENS", 100)
    table = synthetic_chunk(1200, sources=("a.txt", "b.txt", "c.txt"))
    path = str(tmp_path / "chunk.parquet")
    runs = store_chunk(path, table, "word", run_bytes=table.slice(0, 250).nbytes, batch_rows=100)
    assert runs == 4  # batches of 100 rows, a run closes at the first batch that reaches 250 rows
    stored = pq.read_table(path)
    assert sorted(stored.to_pylist(), key=place) == table.to_pylist()
    keys = list(zip(stored["split"].to_pylist(), stored["doc_hash"].to_pylist()))
    run_starts = [0] + [i for i in range(1, len(keys)) if keys[i] < keys[i - 1]]
    assert len(run_starts) == runs
    for start, stop in zip(run_starts, [*run_starts[1:], len(keys)]):
        assert keys[start:stop] == sorted(keys[start:stop])
    nothing = removed_places(table, [])
    for split in ("train", "dev", "test"):
        got = pa.concat_tables(split_groups(path, split, nothing, ["doc_id"], 3_000))["doc_id"].to_pylist()
        assert got == [r["doc_id"] for r in stored.to_pylist() if r["split"] == split]


# --- removed documents -----------------------------------------------------------------------------


def test_removed_mask_marks_exactly_the_rows_whose_place_is_removed():
    """Reference: a Python set of (source, offset) places. Rows of a pack of three files whose
    offsets overlap, given as plain or chunked arrays; the removed table also names places of
    files not among the rows and offsets no row has, which mark nothing."""
    rng = random.Random(19)
    sources = [rng.choice(["a.txt", "b.txt", "sub/c.txt"]) for _ in range(3000)]
    offsets = [rng.randrange(0, 600) * 8 for _ in range(3000)]
    rows = sorted(set(zip(sources, offsets)), key=lambda _: rng.random())
    removed = rng.sample(rows, 400) + [("other.txt", 0), ("a.txt", 7), ("b.txt", 1 << 40)]
    removed_table = pa.table({"source": [s for s, _ in removed], "offset": pa.array([o for _, o in removed], pa.int64())})
    expected = [(s, o) in set(removed) for s, o in rows]
    assert 300 < sum(expected) <= 400
    plain = removed_mask(removed_table, pa.array([s for s, _ in rows]), pa.array([o for _, o in rows], pa.int64()))
    assert plain.dtype == bool and plain.tolist() == expected
    cut = len(rows) // 3
    chunked = removed_mask(
        removed_table,
        pa.chunked_array([[s for s, _ in rows[:cut]], [s for s, _ in rows[cut:]]]),
        pa.chunked_array([pa.array([o for _, o in rows[:cut]], pa.int64()), pa.array([o for _, o in rows[cut:]], pa.int64())]),
    )
    assert chunked.tolist() == expected


def test_removed_mask_of_nothing_removed_or_no_rows_is_all_false():
    nothing = pa.table({"source": pa.array([], pa.string()), "offset": pa.array([], pa.int64())})
    assert removed_mask(nothing, pa.array(["a.txt", "a.txt"]), pa.array([0, 5], pa.int64())).tolist() == [False, False]
    elsewhere = pa.table({"source": ["b.txt"], "offset": pa.array([0], pa.int64())})
    assert removed_mask(elsewhere, pa.array(["a.txt", "a.txt"]), pa.array([0, 5], pa.int64())).tolist() == [False, False]
    assert removed_mask(elsewhere, pa.array([], pa.string()), pa.array([], pa.int64())).tolist() == []


# --- reading one split back ----------------------------------------------------------------------


@pytest.fixture
def pack(tmp_path, monkeypatch) -> tuple[str, pa.Table, pa.Table]:
    """A pack of two files stored in one run of over 30 row groups, and a removed table naming
    rows of both files (a train row of each, a dev row of the second)."""
    monkeypatch.setattr(chunks, "GROUP_TOKENS", 150)
    table = synthetic_chunk(900, sources=("a.txt", "b.txt"))
    path = str(tmp_path / "chunk.parquet")
    assert store_chunk(path, table, "word") == 1
    assert pq.ParquetFile(path).num_row_groups > 30
    rows = table.to_pylist()
    train = [i for i, r in enumerate(rows) if r["split"] == "train"]
    chosen = [train[3], train[-5], next(i for i, r in enumerate(rows) if r["split"] == "dev" and r["source"] == "b.txt")]
    assert [rows[i]["source"] for i in chosen] == ["a.txt", "b.txt", "b.txt"]
    return path, table, removed_places(table, chosen)


def kept_rows(table: pa.Table, split: str, removed: pa.Table) -> list[dict]:
    """The rows of one split whose place is not in the removed table (a Python set)."""
    gone = set(zip(removed["source"].to_pylist(), removed["offset"].to_pylist()))
    return [r for r in table.to_pylist() if r["split"] == split and place(r) not in gone]


def recorded_reads(monkeypatch) -> list[list[int]]:
    """The row groups of every read_row_groups call from now on."""
    reads: list[list[int]] = []
    original = pq.ParquetFile.read_row_groups

    def read_row_groups(self, groups, **options):
        reads.append(list(groups))
        return original(self, groups, **options)

    monkeypatch.setattr(pq.ParquetFile, "read_row_groups", read_row_groups)
    return reads


@pytest.mark.parametrize("budget", BUDGETS)
def test_split_groups_give_the_kept_rows_of_one_split_in_stored_order_whatever_the_budget(pack, monkeypatch, budget: int):
    """Reference: the split's rows without the removed places, sorted by (doc_hash, source,
    offset) with Python's sorted() (the stored order of a one-run chunk). Each read takes only
    row groups of that split (by their statistics), each group once, and stops at the first
    group that reaches the budget."""
    path, table, removed = pack
    parquet = pq.ParquetFile(path)
    split_of = [parquet.read_row_group(g, columns=["split"])["split"][0].as_py() for g in range(parquet.num_row_groups)]
    sizes = [parquet.metadata.row_group(g).total_byte_size for g in range(parquet.num_row_groups)]
    reads = recorded_reads(monkeypatch)
    for split in ("train", "dev", "test"):
        reads.clear()
        batches = list(split_groups(path, split, removed, ["doc_id", "doc_hash", "tokens"], budget))
        expected = sorted(kept_rows(table, split, removed), key=lambda r: (r["doc_hash"], r["source"], r["offset"]))
        assert pa.concat_tables(batches).to_pylist() == [{k: r[k] for k in ("doc_id", "doc_hash", "tokens")} for r in expected]
        assert sorted(g for read in reads for g in read) == [g for g, s in enumerate(split_of) if s == split]
        for read in reads:
            assert sum(sizes[g] for g in read[:-1]) < budget
        assert all(batch.num_rows for batch in batches) and len(batches) <= len(reads)


@pytest.mark.parametrize("budget", BUDGETS)
def test_kept_batches_give_the_kept_rows_of_one_split_in_corpus_order_whatever_the_budget(pack, budget: int):
    """Reference: the split's rows without the removed places, sorted by (source, offset) with
    Python's sorted(). A budget over the split's stored bytes reads it at once; a tenth of them
    or less reads it in more than five slices."""
    path, table, removed = pack
    parquet = pq.ParquetFile(path)
    for split in ("train", "dev", "test"):
        batches = list(kept_batches(path, split, removed, ["doc_id", "tokens"], budget))
        expected = sorted(kept_rows(table, split, removed), key=place)
        assert pa.concat_tables(batches).to_pylist() == [{"doc_id": r["doc_id"], "tokens": r["tokens"]} for r in expected]
        assert all(batch.num_rows for batch in batches)
        groups = [g for g in range(parquet.num_row_groups) if parquet.read_row_group(g, columns=["split"])["split"][0].as_py() == split]
        stored = sum(parquet.metadata.row_group(g).total_byte_size for g in groups)
        if budget >= stored:
            assert len(batches) == 1
        elif budget <= stored / 10:
            assert len(batches) > 5


@pytest.mark.parametrize("budget", [1, 2_000, 1 << 40])
def test_both_readers_find_every_kept_row_of_a_chunk_stored_in_several_runs(tmp_path, monkeypatch, budget: int):
    """Three files stored in four runs: kept_batches against Python's sorted() by (source,
    offset); split_groups against the stored order of the split's rows (pyarrow's whole-file
    read), without the removed places."""
    monkeypatch.setattr(chunks, "GROUP_TOKENS", 100)
    table = synthetic_chunk(1200, sources=("a.txt", "b.txt", "c.txt"))
    path = str(tmp_path / "chunk.parquet")
    assert store_chunk(path, table, "word", run_bytes=table.slice(0, 250).nbytes, batch_rows=100) == 4
    removed = removed_places(table, list(range(0, 1200, 7)))
    stored = pq.read_table(path)
    for split in ("train", "dev", "test"):
        in_order = pa.concat_tables(kept_batches(path, split, removed, ["doc_id"], budget))["doc_id"].to_pylist()
        assert in_order == [r["doc_id"] for r in sorted(kept_rows(table, split, removed), key=place)]
        grouped = pa.concat_tables(split_groups(path, split, removed, ["doc_id"], budget))["doc_id"].to_pylist()
        assert grouped == [r["doc_id"] for r in kept_rows(stored, split, removed)]


def test_a_split_whose_rows_are_all_removed_reads_as_nothing(pack):
    path, table, _ = pack
    dev = [i for i, r in enumerate(table.to_pylist()) if r["split"] == "dev"]
    everything = removed_places(table, dev)
    assert list(split_groups(path, "dev", everything, ["doc_id"], 1)) == []
    assert list(kept_batches(path, "dev", everything, ["doc_id"], 1)) == []
    assert list(kept_batches(path, "dev", everything, ["doc_id"], 1 << 40)) == []
