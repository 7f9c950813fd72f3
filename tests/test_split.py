"""Split: salted hash assignment, stability, fractions, duplicate removal."""

from __future__ import annotations

import math
import random

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from corpusmill.accounting import Tally
from corpusmill.ingest import Document
from corpusmill.prepare import ChunkPreparer
from corpusmill.settings import resolve
from corpusmill.split import (
    CorpusRows, assign_split, doc_hash, duplicate_mask, find_duplicates, fingerprint, first_occurrences, kept_batches, kept_part, order_keys,
    part_bounds, part_of, read_part, repeated_ids, repeated_ids_message, split_position,
)
from corpusmill.storage import write_table
from tests.test_prepare import store_chunk, synthetic_chunk

FRACTIONS = {"train": 0.8, "dev": 0.1, "test": 0.1}
# Shares that put many documents in every split, so a wrong key or salt shows quickly.
SPREAD = {"train": 0.6, "dev": 0.2, "test": 0.2}


def prepared_splits(documents: list[tuple[str, str]], **split: object) -> dict[str, str]:
    """doc_id → split of (doc_id, text) documents run through the prepare step's ChunkPreparer
    with the given split options over the defaults."""
    preparer = ChunkPreparer(resolve({"split": split}))
    stream = (Document(doc_id, "notes.txt", 40 * number, text) for number, (doc_id, text) in enumerate(documents))
    splits = {}
    for table in preparer.batches(stream, Tally()):
        splits.update(zip(table["doc_id"].to_pylist(), table["split"].to_pylist()))
    return splits


def test_another_salt_draws_an_independent_split():
    """Independent draws agree on a document's split with probability sum(p_i**2) = 0.66 for
    shares 0.8/0.1/0.1; over 4,000 documents the agreement lies in the binomial 99.9% interval
    (z = 3.29). A salt that changed nothing would agree on every document."""
    n, agree = 4000, 0
    for i in range(n):
        key = fingerprint(f"document {i}")
        agree += assign_split(key, "corpusmill-split-v1", FRACTIONS) == assign_split(key, "another salt", FRACTIONS)
    p = sum(f * f for f in FRACTIONS.values())
    assert abs(agree - n * p) <= 3.29 * math.sqrt(n * p * (1 - p)), agree


def test_salts_longer_than_a_blake2b_key_still_draw_different_splits():
    """BLAKE2b keys hold at most 64 bytes (RFC 7693); salts that differ only after their 64th
    byte must still draw different splits."""
    base = "s" * 64
    keys = [fingerprint(f"document {i}") for i in range(200)]
    first = [assign_split(key, base + "-one", FRACTIONS) for key in keys]
    assert first != [assign_split(key, base + "-two", FRACTIONS) for key in keys]
    assert [assign_split(key, base + "1", FRACTIONS) for key in keys] != [assign_split(key, base + "2", FRACTIONS) for key in keys]


def test_salts_up_to_64_bytes_key_blake2b_directly():
    """Splits drawn by earlier builds stay where they were: a salt of at most 64 bytes is the
    BLAKE2b key itself (hashlib's RFC 7693 implementation as the reference), 8-byte digest,
    big-endian, divided by 2**64."""
    import hashlib

    for salt in ("corpusmill-split-v1", "s" * 64, ""):
        for key in (b"", b"a document", fingerprint("x")):
            expected = int.from_bytes(hashlib.blake2b(key, digest_size=8, key=salt.encode()).digest(), "big") / 2**64
            assert split_position(key, salt) == expected


def test_the_prepare_step_assigns_each_document_by_its_cleaned_text_and_the_salt():
    """split.key = content: the key is the fingerprint of the cleaned text, so the same text
    under two ids, or with other whitespace, gets one split; assign_split with the configured
    salt is the reference."""
    texts = [f"Paragraph {i} tells of the harbour and its {i % 7} boats." for i in range(300)]
    documents = [(f"a.txt:{i}", t) for i, t in enumerate(texts)] + [(f"b.txt:{i}", "  " + t.replace(" ", "\t")) for i, t in enumerate(texts)]
    for salt in ("corpusmill-split-v1", "another salt"):
        splits = prepared_splits(documents, salt=salt, fractions=SPREAD)
        assert [splits[f"a.txt:{i}"] for i in range(300)] == [splits[f"b.txt:{i}"] for i in range(300)]
        assert [splits[f"a.txt:{i}"] for i in range(300)] == [assign_split(fingerprint(t), salt, SPREAD) for t in texts]
    assert prepared_splits(documents, fractions=SPREAD) != prepared_splits(documents, salt="another salt", fractions=SPREAD)


def test_the_prepare_step_assigns_by_document_id_when_asked():
    """split.key = id: the key is the UTF-8 document id; equal texts under different ids are
    assigned independently (assign_split as the reference)."""
    documents = [(f"f.txt:{40 * i}", "The same words in every document.") for i in range(300)]
    splits = prepared_splits(documents, key="id", fractions=SPREAD)
    assert splits == {doc_id: assign_split(doc_id.encode("utf-8"), "corpusmill-split-v1", SPREAD) for doc_id, _ in documents}
    assert len(set(splits.values())) == 3


def test_a_documents_split_does_not_depend_on_the_other_documents():
    """Adding documents never moves existing ones: each document prepared alone gets the split
    it gets among others, in any order."""
    documents = [(f"f.txt:{i}", f"Entry {i}: the lamp was lit at {i % 13} o'clock.") for i in range(200)]
    together = prepared_splits(documents, fractions=SPREAD)
    shuffled = prepared_splits(documents[::-1] + [("g.txt:0", "A new document about the quay.")], fractions=SPREAD)
    alone = {doc_id: prepared_splits([(doc_id, text)], fractions=SPREAD)[doc_id] for doc_id, text in documents[:40]}
    assert {k: shuffled[k] for k in together} == together
    assert alone == {k: together[k] for k in alone}
    assert len(set(together.values())) == 3


def test_a_position_at_the_top_of_the_range_goes_to_the_last_split_with_a_share(monkeypatch):
    """Eight hash bytes divided by 2**64 in floating point round up to exactly 1.0 for the
    largest values, and shares like 0.7 + 0.2 + 0.1 add up to just under 1: such a position
    falls past every bound and must go to the last split with a share, never an empty one."""
    from corpusmill import split

    assert split_position(b"k", "s") < 1.0 and (2**64 - 1) / float(2**64) == 1.0
    monkeypatch.setattr(split, "split_position", lambda key, salt: 1.0)
    assert assign_split(b"k", "s", {"train": 0.7, "dev": 0.2, "test": 0.1}) == "test"
    assert assign_split(b"k", "s", {"train": 0.8, "dev": 0.2, "test": 0.0}) == "dev"
    assert assign_split(b"k", "s", {"train": 1.0, "dev": 0.0, "test": 0.0}) == "train"


def test_cumulative_bounds_put_positions_below_a_bound_in_its_split(monkeypatch):
    """Shares 0.8/0.1/0.1: positions in [0, 0.8) are train, [0.8, 0.9) dev, [0.9, 1) test
    (SPLITS order, half-open intervals)."""
    from corpusmill import split

    for position, expected in ((0.0, "train"), (0.7999, "train"), (0.8, "dev"), (0.8999, "dev"), (0.9, "test"), (0.9999, "test")):
        monkeypatch.setattr(split, "split_position", lambda key, salt, p=position: p)
        assert assign_split(b"k", "s", FRACTIONS) == expected, position


def test_fractions_fall_inside_the_binomial_interval():
    """10,000 synthetic documents; each split count lies in the binomial 99.9% interval
    (normal approximation, z = 3.29 for two-sided 99.9%)."""
    n = 10_000
    counts = {"train": 0, "dev": 0, "test": 0}
    for i in range(n):
        counts[assign_split(fingerprint(f"synthetic document {i}"), "corpusmill-split-v1", FRACTIONS)] += 1
    for split, p in FRACTIONS.items():
        half_width = 3.29 * math.sqrt(n * p * (1 - p))
        assert abs(counts[split] - n * p) <= half_width, (split, counts[split])


def test_zero_fractions_are_never_assigned():
    only_train = {"train": 1.0, "dev": 0.0, "test": 0.0}
    assert {assign_split(fingerprint(str(i)), "s", only_train) for i in range(200)} == {"train"}


def write_chunk(path, columns: dict) -> None:
    """A prepared chunk's columns that deduplication reads, doc_hash derived from doc_id."""
    write_table(path, pa.table({**columns, "doc_hash": pa.array([doc_hash(d) for d in columns["doc_id"]], pa.uint64())}))


def test_duplicates_keep_the_first_in_corpus_order(tmp_path):
    def chunk(path, source, texts):
        write_chunk(path, {
            "source": [source] * len(texts), "offset": list(range(len(texts))), "doc_id": [f"{source}:{i}" for i in range(len(texts))],
            "fingerprint": pa.array([fingerprint(t) for t in texts], pa.binary(16)),
        })
    chunk(tmp_path / "a.parquet", "a.txt", ["x", "y", "x"])
    chunk(tmp_path / "b.parquet", "b.txt", ["y", "z"])
    duplicates = find_duplicates(CorpusRows([str(tmp_path / "a.parquet"), str(tmp_path / "b.parquet")]))
    assert duplicates.to_pylist() == [
        {"source": "a.txt", "offset": 2, "doc_id": "a.txt:2", "duplicate_of": "a.txt:0"},
        {"source": "b.txt", "offset": 0, "doc_id": "b.txt:0", "duplicate_of": "a.txt:1"},
    ]
    assert duplicate_mask(duplicates, pa.array(["a.txt"] * 3), pa.array([0, 1, 2])).to_pylist() == [False, False, True]


def test_duplicates_of_a_pack_of_files_are_found_in_corpus_order(tmp_path):
    """A pack holds several files whose offsets overlap; rows are stored out of corpus order."""
    write_chunk(tmp_path / "pack.parquet", {
        "source": ["b.txt", "a.txt", "b.txt", "a.txt"], "offset": [0, 0, 5, 5], "doc_id": ["b.txt:0", "a.txt:0", "b.txt:5", "a.txt:5"],
        "fingerprint": pa.array([fingerprint(t) for t in ["x", "y", "z", "x"]], pa.binary(16)),
    })
    duplicates = find_duplicates(CorpusRows([str(tmp_path / "pack.parquet")]))
    assert duplicates.to_pylist() == [{"source": "b.txt", "offset": 0, "doc_id": "b.txt:0", "duplicate_of": "a.txt:5"}]
    mask = duplicate_mask(duplicates, pa.array(["a.txt", "b.txt", "a.txt", "b.txt"]), pa.array([0, 0, 5, 5]))
    assert mask.to_pylist() == [False, True, False, False]
    assert duplicate_mask(duplicates, pa.array(["c.txt"]), pa.array([0])).to_pylist() == [False]


def test_first_occurrences_match_a_first_seen_dict():
    """Reference: a plain dict of the first row each fingerprint was seen at, over 20,000 rows
    drawn from 3,000 values; values equal in one 64-bit half only must not count as repeats."""
    rng = random.Random(7)
    values = [fingerprint(str(i).encode().hex()) for i in range(3000)]
    values += [values[0][:8] + bytes(8), bytes(8) + values[0][8:]]  # share one half with values[0]
    prints = [rng.choice(values) for _ in range(20000)]
    words = np.frombuffer(b"".join(prints), dtype=np.uint64).reshape(-1, 2)
    first_seen: dict[bytes, int] = {}
    expected = []
    for row, value in enumerate(prints):
        if value in first_seen:
            expected.append((row, first_seen[value]))
        else:
            first_seen[value] = row
    rows, owners = first_occurrences(words)
    assert list(zip(rows.tolist(), owners.tolist())) == expected
    assert first_occurrences(np.empty((0, 2), np.uint64))[0].size == 0


def test_rows_equal_in_one_word_only_are_not_repeats_even_when_sorted_side_by_side():
    """Fingerprints (5, 7) and (6, 7) share their second 64-bit word and sort next to each
    other; (3, 9) and (3, 8) share the first. None repeats another; the exact pair (6, 7) does."""
    words = np.array([[5, 7], [6, 7], [3, 9], [3, 8], [6, 7]], dtype=np.uint64)
    rows, owners = first_occurrences(words)
    assert (rows.tolist(), owners.tolist()) == ([4], [1])


def test_duplicates_follow_offsets_not_storage_order(tmp_path):
    """Prepared chunks store rows by split and doc_hash; "first" still means first by offset."""
    write_chunk(tmp_path / "a.parquet", {
        "source": ["a.txt"] * 3, "offset": [80, 0, 40], "doc_id": ["a.txt:80", "a.txt:0", "a.txt:40"],
        "fingerprint": pa.array([fingerprint(t) for t in ["x", "x", "x"]], pa.binary(16)),
    })
    duplicates = find_duplicates(CorpusRows([str(tmp_path / "a.parquet")]))
    assert duplicates.to_pylist() == [
        {"source": "a.txt", "offset": 40, "doc_id": "a.txt:40", "duplicate_of": "a.txt:0"},
        {"source": "a.txt", "offset": 80, "doc_id": "a.txt:80", "duplicate_of": "a.txt:0"},
    ]


def test_repeated_ids_are_found_within_and_across_chunks_with_every_place(tmp_path):
    """A plain dict of id -> places over the same rows is the reference; ids that share a
    doc_hash but differ as strings (a forced collision) are not repeats."""
    write_chunk(tmp_path / "a.parquet", {
        "source": ["a.jsonl"] * 3, "offset": [0, 10, 20], "doc_id": ["k1", "k2", "k1"],
        "fingerprint": pa.array([fingerprint(t) for t in "xyz"], pa.binary(16)),
    })
    write_chunk(tmp_path / "b.parquet", {
        "source": ["b.jsonl"] * 2, "offset": [0, 7], "doc_id": ["k2", "solo"],
        "fingerprint": pa.array([fingerprint(t) for t in "uv"], pa.binary(16)),
    })
    corpus = CorpusRows([str(tmp_path / "a.parquet"), str(tmp_path / "b.parquet")])
    assert repeated_ids(corpus) == [("k1", [("a.jsonl", 0), ("a.jsonl", 20)]), ("k2", [("a.jsonl", 10), ("b.jsonl", 0)])]
    corpus.hashes[:] = 7  # every id in one hash bucket: only equal strings are repeats
    assert [doc_id for doc_id, _ in repeated_ids(corpus)] == ["k1", "k2"]
    message = repeated_ids_message(repeated_ids(corpus), by_file=False)
    assert "'k1' at a.jsonl byte 0 and a.jsonl byte 20" in message and "corpus.repeated_ids: by_file" in message


@pytest.mark.parametrize("budget", [1, 2_000, 20_000, 1 << 40])
def test_kept_batches_give_kept_part_in_corpus_order_whatever_the_budget(tmp_path, monkeypatch, budget: int):
    """kept_part (the whole split sorted by file and offset) is the reference; a chunk of two
    files in over 30 row groups, read in windows from one row to all."""
    from corpusmill import prepare

    monkeypatch.setattr(prepare, "GROUP_TOKENS", 150)
    table = synthetic_chunk(900, sources=("a.txt", "b.txt"))
    path = str(tmp_path / "chunk.parquet")
    store_chunk(path, table, "word", run_bytes=20_000)
    assert pq.ParquetFile(path).num_row_groups > 30
    rows = table.to_pylist()
    duplicates = pa.table({"source": [rows[i]["source"] for i in (3, 400, 899)], "offset": [rows[i]["offset"] for i in (3, 400, 899)],
                           "doc_id": ["x"] * 3, "duplicate_of": ["y"] * 3})  # fmt: skip
    for split in ("train", "dev"):
        expected = kept_part(path, split, 0, 1, duplicates, ["doc_id", "tokens"])
        batches = list(kept_batches(path, split, duplicates, ["doc_id", "tokens"], budget))
        assert pa.concat_tables(batches).to_pylist() == expected.to_pylist()
        assert (len(batches) > 5) == (budget <= 2_000)


def test_duplicates_of_a_pack_stored_in_many_row_groups_follow_corpus_order(tmp_path, monkeypatch):
    """A plain dict of first sightings over the rows sorted by (file, offset) is the reference;
    the pack's two files are spread over 30+ row groups, each with its own file-name dictionary."""
    from corpusmill import prepare

    monkeypatch.setattr(prepare, "GROUP_TOKENS", 150)
    table = synthetic_chunk(900, sources=("b.txt", "a.txt"))
    prints = [(i % 37).to_bytes(16, "big") for i in range(900)]
    table = table.set_column(table.schema.get_field_index("fingerprint"), "fingerprint", pa.array(prints, pa.binary(16)))
    path = str(tmp_path / "pack.parquet")
    store_chunk(path, table, "word")
    assert pq.ParquetFile(path).num_row_groups > 30
    rows = sorted(table.select(["source", "offset", "doc_id", "fingerprint"]).to_pylist(), key=lambda r: (r["source"], r["offset"]))
    first: dict[bytes, str] = {}
    expected = []
    for row in rows:
        if row["fingerprint"] in first:
            expected.append({"source": row["source"], "offset": row["offset"], "doc_id": row["doc_id"], "duplicate_of": first[row["fingerprint"]]})
        else:
            first[row["fingerprint"]] = row["doc_id"]
    assert find_duplicates(CorpusRows([path])).to_pylist() == expected


def test_parts_are_equal_ranges_of_the_doc_hash():
    """Reference: part = floor(h * parts / 2**64) in exact integer arithmetic."""
    rng = random.Random(3)
    edges = [0, 1, (1 << 63) - 1, 1 << 63, (1 << 64) - 1]
    for parts in (1, 3, 4, 7, 1000):
        bounds = part_bounds(parts)
        hashes = edges + [rng.randrange(1 << 64) for _ in range(2000)] + [b + d for b in bounds[1:-1] for d in (-1, 0, 1)]
        expected = [h * parts >> 64 for h in hashes]
        assert part_of(np.array(hashes, dtype=np.uint64), parts).tolist() == expected
        assert bounds[0] == 0 and bounds[-1] == 1 << 64 and len(bounds) == parts + 1


def test_doc_hash_is_blake2b_of_the_id():
    """Reference: hashlib's BLAKE2b (RFC 7693), 8-byte digest, big-endian."""
    import hashlib

    assert doc_hash("notes.txt:0") == int.from_bytes(hashlib.blake2b(b"notes.txt:0", digest_size=8).digest(), "big")


def reference_mix(value: int) -> int:
    """splitmix64's output function in plain integer arithmetic (Steele, Lea & Flood, 2014)."""
    mask = (1 << 64) - 1
    value = ((value ^ (value >> 30)) * 0xBF58476D1CE4E5B9) & mask
    value = ((value ^ (value >> 27)) * 0x94D049BB133111EB) & mask
    return value ^ (value >> 31)


def test_order_keys_are_a_seeded_splitmix64_mix_of_the_doc_hash():
    """Reference: splitmix64 seeded with 0 first returns 0xE220A8397B1DCDAF (the published
    reference output, value from memory), and a plain-integer restatement of the mix."""
    assert reference_mix(0x9E3779B97F4A7C15) == 0xE220A8397B1DCDAF
    rng = random.Random(5)
    hashes = [0, 1, (1 << 64) - 1] + [rng.randrange(1 << 64) for _ in range(500)]
    for seed in (0, 1, 20240601):
        keys = order_keys(np.array(hashes, dtype=np.uint64), seed)
        assert keys.dtype == np.uint64
        assert keys.tolist() == [reference_mix(h ^ reference_mix(seed)) for h in hashes]
    assert len(set(order_keys(np.array(hashes, dtype=np.uint64), 3).tolist())) == len(set(hashes)), "a bijection"
    assert order_keys(np.array(hashes, np.uint64), 1).tolist() != order_keys(np.array(hashes, np.uint64), 2).tolist()


def test_order_seeds_of_any_size_are_taken_modulo_2_to_the_64():
    """shards.seed has no upper bound in the schema; the mix takes a seed modulo 2**64 (Python's
    & on a negative int is two's complement), so 2**64 + 5 and 5, or -1 and 2**64 - 1, order alike."""
    hashes = np.array([0, 1, 12345, (1 << 64) - 1], np.uint64)
    assert order_keys(hashes, -1).tolist() == order_keys(hashes, (1 << 64) - 1).tolist()
    assert order_keys(hashes, (1 << 64) + 5).tolist() == order_keys(hashes, 5).tolist() == [reference_mix(int(h) ^ reference_mix(5)) for h in hashes]


def test_read_part_returns_exactly_its_part_and_skips_other_row_groups(tmp_path, monkeypatch):
    from corpusmill import prepare

    monkeypatch.setattr(prepare, "GROUP_TOKENS", 200)
    table = synthetic_chunk(2000)
    path = str(tmp_path / "chunk.parquet")
    store_chunk(path, table, "word")
    read_groups = []
    original = pq.ParquetFile.read_row_groups
    monkeypatch.setattr(pq.ParquetFile, "read_row_groups", lambda self, groups, **kw: read_groups.append(len(groups)) or original(self, groups, **kw))
    total_groups = pq.ParquetFile(path).num_row_groups
    rows = table.to_pylist()
    for split in ("train", "dev", "test"):
        for parts in (1, 5):
            seen = []
            for part in range(parts):
                got = read_part(path, split, part, parts, ["doc_id", "doc_hash", "tokens"]).to_pylist()
                assert all(r["doc_hash"] * parts >> 64 == part for r in got)
                seen += got
            expected = [{k: r[k] for k in ("doc_id", "doc_hash", "tokens")} for r in rows if r["split"] == split]
            assert sorted(seen, key=lambda r: r["doc_id"]) == sorted(expected, key=lambda r: r["doc_id"])
    read_groups.clear()
    read_part(path, "train", 2, 5, ["doc_id"])
    # Train holds about 80% of the groups; a fifth of it plus at most one group at either end.
    assert 0 < read_groups[0] <= total_groups * 0.8 / 5 + 2


def test_kept_part_leaves_out_duplicates_and_keeps_corpus_order(tmp_path):
    table = synthetic_chunk(300, sources=("a.txt", "b.txt"))
    path = str(tmp_path / "chunk.parquet")
    store_chunk(path, table, "word")
    rows = [r for r in table.to_pylist() if r["split"] == "train"]
    assert rows[3]["source"] == "a.txt" and rows[-5]["source"] == "b.txt"
    removed = [rows[3], rows[-5]]
    duplicates = pa.table({
        "source": [r["source"] for r in removed], "offset": [r["offset"] for r in removed],
        "doc_id": [r["doc_id"] for r in removed], "duplicate_of": ["x", "x"],
    })
    kept = kept_part(path, "train", 0, 1, duplicates, ["doc_id", "offset"]).to_pylist()
    assert kept == [{"doc_id": r["doc_id"], "offset": r["offset"]} for r in rows if r not in removed]


def test_removed_counts_equal_a_counter_recount_of_the_removed_documents(tmp_path, monkeypatch):
    """collections.Counter over the tokens of the documents named in the duplicates table, per
    split, with <s> once per document and </s> once per sentence; the chunk is a pack of two
    files stored in many row groups."""
    from collections import Counter

    from corpusmill import prepare
    from corpusmill.split import removed_counts

    monkeypatch.setattr(prepare, "GROUP_TOKENS", 150)
    table = synthetic_chunk(900, sources=("a.txt", "b.txt"))
    path = str(tmp_path / "chunk.parquet")
    store_chunk(path, table, "word")
    assert pq.ParquetFile(path).num_row_groups > 30
    rows = table.to_pylist()
    removed = [rows[5], rows[17], rows[450], rows[899]]
    duplicates = pa.table({
        "source": [r["source"] for r in removed], "offset": [r["offset"] for r in removed],
        "doc_id": [r["doc_id"] for r in removed], "duplicate_of": ["x"] * len(removed),
    })
    expected = Counter((r["split"], token) for r in removed for sentence in r["tokens"] for token in sentence)
    expected.update((r["split"], "<s>") for r in removed)
    expected.update((r["split"], "</s>") for r in removed for _ in r["tokens"])
    counts = removed_counts([path], duplicates)
    assert {(r["split"], r["token"]): r["count"] for r in counts.to_pylist()} == dict(expected)
    assert removed_counts([path], duplicates.slice(0, 0)).num_rows == 0
