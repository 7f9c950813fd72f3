"""Deduplicate: exact duplicate documents across the whole corpus (the first in corpus order is
kept), ids that name two documents, and what the job hands each chunk: its list of removed
documents and the word counts of those documents."""

from __future__ import annotations

import json
import os
import random
import resource
import subprocess
import sys
from collections import Counter
from collections.abc import Callable
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
import yaml

from conftest import REPO, scenario
from corpusmill import chunks, deduplicate, prepare, worker
from corpusmill.chunks import removed_mask
from corpusmill.deduplicate import CorpusRows, find_duplicates, first_occurrences, removed_counts, repeated_ids, repeated_ids_message
from corpusmill.split import doc_hash, fingerprint
from corpusmill.storage import write_table
from tests.test_chunks import recorded_reads, store_chunk, synthetic_chunk
from tests.test_prepare import planned_build, recount


def write_chunk(path, columns: dict) -> None:
    """A prepared chunk's columns that deduplication reads, doc_hash derived from doc_id."""
    write_table(path, pa.table({**columns, "doc_hash": pa.array([doc_hash(d) for d in columns["doc_id"]], pa.uint64())}))


def test_duplicates_keep_the_first_in_corpus_order(tmp_path):
    def chunk(path, source, texts):
        write_chunk(
            path,
            {
                "source": [source] * len(texts),
                "offset": list(range(len(texts))),
                "doc_id": [f"{source}:{i}" for i in range(len(texts))],
                "fingerprint": pa.array([fingerprint(t) for t in texts], pa.binary(16)),
            },
        )

    chunk(tmp_path / "a.parquet", "a.txt", ["x", "y", "x"])
    chunk(tmp_path / "b.parquet", "b.txt", ["y", "z"])
    duplicates, chunk_of = find_duplicates(CorpusRows([str(tmp_path / "a.parquet"), str(tmp_path / "b.parquet")]))
    assert duplicates.to_pylist() == [
        {"source": "a.txt", "offset": 2, "doc_id": "a.txt:2", "duplicate_of": "a.txt:0"},
        {"source": "b.txt", "offset": 0, "doc_id": "b.txt:0", "duplicate_of": "a.txt:1"},
    ]
    assert chunk_of.tolist() == [0, 1]
    assert removed_mask(duplicates, pa.array(["a.txt"] * 3), pa.array([0, 1, 2])).tolist() == [False, False, True]


def test_duplicates_of_a_pack_of_files_are_found_in_corpus_order(tmp_path):
    """A pack holds several files whose offsets overlap; rows are stored out of corpus order."""
    write_chunk(
        tmp_path / "pack.parquet",
        {
            "source": ["b.txt", "a.txt", "b.txt", "a.txt"],
            "offset": [0, 0, 5, 5],
            "doc_id": ["b.txt:0", "a.txt:0", "b.txt:5", "a.txt:5"],
            "fingerprint": pa.array([fingerprint(t) for t in ["x", "y", "z", "x"]], pa.binary(16)),
        },
    )
    duplicates, chunk_of = find_duplicates(CorpusRows([str(tmp_path / "pack.parquet")]))
    assert duplicates.to_pylist() == [{"source": "b.txt", "offset": 0, "doc_id": "b.txt:0", "duplicate_of": "a.txt:5"}]
    assert chunk_of.tolist() == [0]
    mask = removed_mask(duplicates, pa.array(["a.txt", "b.txt", "a.txt", "b.txt"]), pa.array([0, 0, 5, 5]))
    assert mask.tolist() == [False, True, False, False]
    assert removed_mask(duplicates, pa.array(["c.txt"]), pa.array([0])).tolist() == [False]


@pytest.mark.parametrize("halves_shared", [True, False])
def test_first_occurrences_match_a_first_seen_dict(halves_shared: bool):
    """Reference: a plain dict of the first row each fingerprint was seen at, over 20,000 rows
    drawn from 3,000 values; values equal in one 64-bit half only must not count as repeats.
    Without such values the first half alone orders the rows; with them both halves do."""
    rng = random.Random(7)
    values = [fingerprint(str(i).encode().hex()) for i in range(3000)]
    prints = [rng.choice(values) for _ in range(20000)]
    if halves_shared:  # each half of values[0] shared by another value, all three interleaved
        for place in rng.sample(range(20000), 60):
            prints[place] = rng.choice([values[0], values[0][:8] + bytes(8), bytes(8) + values[0][8:]])
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
    write_chunk(
        tmp_path / "a.parquet",
        {
            "source": ["a.txt"] * 3,
            "offset": [80, 0, 40],
            "doc_id": ["a.txt:80", "a.txt:0", "a.txt:40"],
            "fingerprint": pa.array([fingerprint(t) for t in ["x", "x", "x"]], pa.binary(16)),
        },
    )
    duplicates, _ = find_duplicates(CorpusRows([str(tmp_path / "a.parquet")]))
    assert duplicates.to_pylist() == [
        {"source": "a.txt", "offset": 40, "doc_id": "a.txt:40", "duplicate_of": "a.txt:0"},
        {"source": "a.txt", "offset": 80, "doc_id": "a.txt:80", "duplicate_of": "a.txt:0"},
    ]


def test_repeated_ids_are_found_within_and_across_chunks_with_every_place(tmp_path):
    """A plain dict of id -> places over the same rows is the reference; ids that share a
    doc_hash but differ as strings (a forced collision) are not repeats."""
    write_chunk(
        tmp_path / "a.parquet",
        {
            "source": ["a.jsonl"] * 3,
            "offset": [0, 10, 20],
            "doc_id": ["k1", "k2", "k1"],
            "fingerprint": pa.array([fingerprint(t) for t in "xyz"], pa.binary(16)),
        },
    )
    write_chunk(
        tmp_path / "b.parquet",
        {
            "source": ["b.jsonl"] * 2,
            "offset": [0, 7],
            "doc_id": ["k2", "solo"],
            "fingerprint": pa.array([fingerprint(t) for t in "uv"], pa.binary(16)),
        },
    )
    corpus = CorpusRows([str(tmp_path / "a.parquet"), str(tmp_path / "b.parquet")])
    assert repeated_ids(corpus) == [("k1", [("a.jsonl", 0), ("a.jsonl", 20)]), ("k2", [("a.jsonl", 10), ("b.jsonl", 0)])]
    corpus.hashes[:] = 7  # every id in one hash bucket: only equal strings are repeats
    assert [doc_id for doc_id, _ in repeated_ids(corpus)] == ["k1", "k2"]
    message = repeated_ids_message(repeated_ids(corpus), by_file=False)
    assert "'k1' at a.jsonl byte 0 and a.jsonl byte 20" in message and "corpus.repeated_ids: by_file" in message


def test_duplicates_of_a_pack_stored_in_many_row_groups_follow_corpus_order(tmp_path, monkeypatch):
    """A plain dict of first sightings over the rows sorted by (file, offset) is the reference;
    the pack's two files, whose offsets overlap, are spread over 30+ row groups, each with its
    own file-name dictionary."""
    monkeypatch.setattr(chunks, "GROUP_TOKENS", 150)
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
    duplicates, chunk_of = find_duplicates(CorpusRows([path]))
    assert duplicates.to_pylist() == expected and chunk_of.tolist() == [0] * len(expected)


@pytest.mark.parametrize(("read_bytes", "merge_files"), [(deduplicate.REMOVED_READ_BYTES, deduplicate.MERGE_FILES), (1, 2)])
def test_removed_counts_equal_a_counter_recount_of_the_removed_documents(tmp_path, monkeypatch, read_bytes: int, merge_files: int):
    """collections.Counter over the tokens of the documents named in a chunk's removed list, per
    split, with <s> once per document and </s> once per sentence; the chunk is a pack of two
    files, whose offsets overlap, stored in many row groups. Only row groups holding a removed
    document are read, in batches of the read budget (one group at a time for a budget of one
    byte, partial counts merged every two batches): the counts stay the same."""
    monkeypatch.setattr(chunks, "GROUP_TOKENS", 150)
    monkeypatch.setattr(deduplicate, "REMOVED_READ_BYTES", read_bytes)
    monkeypatch.setattr(deduplicate, "MERGE_FILES", merge_files)
    table = synthetic_chunk(900, sources=("a.txt", "b.txt"))
    path = str(tmp_path / "chunk.parquet")
    store_chunk(path, table, "word")
    parquet = pq.ParquetFile(path)
    assert parquet.num_row_groups > 30
    rows = table.to_pylist()
    removed = [rows[5], rows[17], rows[450], rows[899], *rows[100:700:41]]
    assert {r["offset"] for r in rows if r["source"] == "b.txt"} & {r["offset"] for r in removed if r["source"] == "a.txt"}
    places = pa.table({"source": [r["source"] for r in removed], "offset": pa.array([r["offset"] for r in removed], pa.int64())})
    expected = Counter((r["split"], token) for r in removed for sentence in r["tokens"] for token in sentence)
    expected.update((r["split"], "<s>") for r in removed)
    expected.update((r["split"], "</s>") for r in removed for _ in r["tokens"])
    reads = recorded_reads(monkeypatch)
    counts = removed_counts(path, places)
    assert {(r["split"], r["token"]): r["count"] for r in counts.to_pylist()} == dict(expected)
    wanted = {(r["source"], r["offset"]) for r in removed}
    holding = {g for g in range(parquet.num_row_groups) if wanted & set(zip(*parquet.read_row_group(g, columns=["source", "offset"]).to_pydict().values()))}
    assert sorted(g for read in reads for g in read) == sorted(holding) and len(holding) > 10
    assert len(reads) == (len(holding) if read_bytes == 1 else 1)
    assert removed_counts(path, places.slice(0, 0)).num_rows == 0


FILES = {
    "a.txt": ["The lamp was lit at dusk by the keeper.", "Gulls circled the pier at noon today.", "The lamp was lit at dusk by the keeper."],
    "b.txt": ["A storm came in from the west at night.", "Gulls circled the pier at noon today."],
    "c.txt": ["Nothing here repeats anything said before."],
    "d.txt": ["A storm came in from the west at night.", "The lamp was lit at dusk by the keeper.", "The tide turned late."],
}


def run_deduplicate(tmp_path, monkeypatch, **split: object):
    """Prepare every chunk of FILES (one chunk per file) and run the deduplicate job; returns
    the layout and chunk keys."""
    files = {name: "\n\n".join(paragraphs).encode() for name, paragraphs in FILES.items()}
    layout, keys = planned_build(tmp_path, monkeypatch, files, corpus={"pack_mb": 0}, split=split)
    assert len(keys) == 4
    for key in keys:
        prepare.main(["--build", "build", "--chunk", key])
    deduplicate.main(["--build", "build"])
    return layout, keys


def test_the_job_hands_each_chunk_its_own_removed_documents_and_their_word_counts(tmp_path, monkeypatch):
    """Four files, one chunk each, with repeats inside a file and across files. References: a
    plain dict of first sightings over the paragraphs in corpus order (files by path, then byte
    offset); each chunk's list holds exactly its own removed places, sorted (a chunk with none
    gets an empty list); the counts are a collections.Counter recount of the removed documents'
    tokens read back from the chunk tables."""
    layout, keys = run_deduplicate(tmp_path, monkeypatch)
    first: dict[str, str] = {}
    expected = []
    for name, paragraphs in FILES.items():
        offset = 0
        for text in paragraphs:
            doc_id = f"{name}:{offset}"
            if text in first:
                expected.append({"source": name, "offset": offset, "doc_id": doc_id, "duplicate_of": first[text]})
            else:
                first[text] = doc_id
            offset += len(text) + 2
    assert pq.read_table(layout.duplicates).to_pylist() == expected and len(expected) == 4
    removed_rows = []
    for key, name in zip(keys, FILES):
        listed = pq.read_table(layout.removed(key)).to_pylist()
        assert listed == [{"source": r["source"], "offset": r["offset"]} for r in expected if r["source"] == name], name
        places = {(r["source"], r["offset"]) for r in listed}
        removed_rows += [r for r in pq.read_table(layout.prepared(key)).to_pylist() if (r["source"], r["offset"]) in places]
    assert pq.read_table(layout.removed(keys[2])).num_rows == 0
    counts = pq.read_table(layout.removed_counts).to_pylist()
    assert {(r["split"], r["token"]): r["count"] for r in counts} == recount(removed_rows)
    assert [(r["split"], r["token"]) for r in counts] == sorted((r["split"], r["token"]) for r in counts)


def removed_rows(layout, keys) -> list[dict]:
    """The prepared rows of every chunk's removed documents, read back from the chunk tables."""
    rows = []
    for key in keys:
        places = {(r["source"], r["offset"]) for r in pq.read_table(layout.removed(key)).to_pylist()}
        rows += [r for r in pq.read_table(layout.prepared(key)).to_pylist() if (r["source"], r["offset"]) in places]
    return rows


def test_a_chunks_removed_word_counts_are_kept_while_its_table_and_its_list_are_the_same(tmp_path, monkeypatch, capsys):
    """Each chunk's counts are kept for the next run with the SHA-256 of its prepared table and
    of its removed list. Run again: nothing is counted and the kept file is not rewritten. Then
    "storm" becomes "front" in b.txt and in d.txt's repeat of it: every document keeps its
    place, so d.txt's list of places is the same, but its removed document's words are not,
    and the changed table recounts it (as b.txt, whose list is also the same). Reference after
    every run: a collections.Counter recount of the removed documents' tokens."""
    layout, keys = run_deduplicate(tmp_path, monkeypatch)
    assert "removed documents' word counts: 0 chunks counted by an earlier run, 3 counted now" in capsys.readouterr().out

    def counts() -> Counter:
        return Counter({(r["split"], r["token"]): r["count"] for r in pq.read_table(layout.removed_counts).to_pylist()})

    assert counts() == recount(removed_rows(layout, keys))
    kept = Path(layout.removed_counts_by_chunk)
    written = kept.stat().st_mtime_ns
    deduplicate.main(["--build", "build"])
    assert "3 chunks counted by an earlier run, 0 counted now" in capsys.readouterr().out
    assert kept.stat().st_mtime_ns == written and counts() == recount(removed_rows(layout, keys))
    for name in ("b.txt", "d.txt"):
        path = tmp_path / "raw" / name
        path.write_bytes(path.read_bytes().replace(b"A storm came", b"A front came"))
        prepare.main(["--build", "build", "--chunk", keys[list(FILES).index(name)]])
    deduplicate.main(["--build", "build"])
    assert "1 chunks counted by an earlier run, 2 counted now" in capsys.readouterr().out
    assert counts() == recount(removed_rows(layout, keys))
    assert "front" in {token for _, token in counts()} and "storm" not in {token for _, token in counts()}
    # A tally written before prepare jobs recorded their table's digest: that chunk is counted.
    tally = Path(layout.tally(keys[0]))
    tally.write_text(json.dumps({k: v for k, v in json.loads(tally.read_text()).items() if k != "table_sha256"}))
    deduplicate.main(["--build", "build"])
    assert "2 chunks counted by an earlier run, 1 counted now" in capsys.readouterr().out
    assert counts() == recount(removed_rows(layout, keys))
    # Every repeat edited away: nothing is removed, and nothing stays kept.
    for number, name in enumerate(FILES):
        path = tmp_path / "raw" / name
        path.write_bytes(b"\n\n".join(b"%s %d %d" % (text.encode(), number, place) for place, text in enumerate(FILES[name])))
        prepare.main(["--build", "build", "--chunk", keys[number]])
    deduplicate.main(["--build", "build"])
    assert "0 chunks counted by an earlier run, 0 counted now" in capsys.readouterr().out
    assert counts() == Counter() and deduplicate.read_kept_counts(layout.removed_counts_by_chunk) == {}


def test_with_deduplication_off_every_chunk_gets_an_empty_list(tmp_path, monkeypatch):
    """split.deduplicate: false keeps every document: no duplicates, an empty removed list per
    chunk (the shard jobs still find one) and no counts to subtract."""
    layout, keys = run_deduplicate(tmp_path, monkeypatch, deduplicate=False)
    assert pq.read_table(layout.duplicates).num_rows == 0
    assert all(pq.read_table(layout.removed(key)).num_rows == 0 for key in keys)
    assert pq.read_table(layout.removed_counts).num_rows == 0


def test_a_chunk_with_a_file_it_could_not_read_stops_the_job_naming_it(tmp_path, monkeypatch):
    """RFC 3629: a lone continuation byte is invalid UTF-8; under corpus.invalid_utf8: stop the
    prepare job records the file and the deduplicate job stops before writing anything."""
    layout, keys = planned_build(tmp_path, monkeypatch, {"a.txt": b"Good text of a paragraph.\n", "b.txt": b"Bad \x80 byte here.\n"}, corpus={"pack_mb": 0})
    for key in keys:
        prepare.main(["--build", "build", "--chunk", key])
    with pytest.raises(SystemExit) as stopped:
        deduplicate.main(["--build", "build"])
    message = str(stopped.value)
    assert message.startswith("corpusmill: 1 input file(s) cannot be read as configured") and "b.txt: invalid UTF-8 at byte offset 4" in message
    assert not Path(layout.duplicates).exists() and not any(Path(layout.removed(key)).exists() for key in keys)


def test_located_rows_name_each_document_in_the_order_asked(tmp_path):
    """Outside reference: a dict of corpus position → (source, offset, doc_id) built from the
    chunk files with Python's sort by (source, offset). Rows asked ascending and shuffled."""
    rng = random.Random(5)
    paths, expected = [], []
    for number in range(3):
        rows = [(f"{number}-{name}.txt", offset) for name in "ba" for offset in rng.sample(range(1000), 7)]
        rng.shuffle(rows)
        write_chunk(
            tmp_path / f"{number}.parquet",
            {
                "source": [source for source, _ in rows],
                "offset": [offset for _, offset in rows],
                "doc_id": [f"{source}:{offset}" for source, offset in rows],
                "fingerprint": pa.array([fingerprint(f"{number}{i}") for i in range(len(rows))], pa.binary(16)),
            },
        )
        paths.append(str(tmp_path / f"{number}.parquet"))
        expected += [{"source": s, "offset": o, "doc_id": f"{s}:{o}"} for s, o in sorted(rows)]
    corpus = CorpusRows(paths)
    for asked in (np.arange(0, len(expected), 2), np.array(rng.sample(range(len(expected)), 20)), np.zeros(0, np.int64)):
        assert corpus.locate(asked).to_pylist() == [expected[row] for row in asked]


def limited_open_files(limit: int) -> Callable[[], None]:
    """For subprocess.run(preexec_fn=…): a process that may hold `limit` files open, soft and hard."""
    return lambda: resource.setrlimit(resource.RLIMIT_NOFILE, (limit, limit))


def test_the_job_stops_before_reading_when_it_may_not_hold_a_file_per_chunk(tmp_path, monkeypatch):
    """On a machine (a cluster node, say) whose hard open-files limit is below one per chunk plus
    the spare ones, the deduplicate job stops first, naming the limit and how many files would do; one more
    file allowed and it goes on to read the chunks (here: none was prepared)."""
    layout, chunk_keys = planned_build(tmp_path, monkeypatch, {f"f{i}.txt": b"A line of text.\n" * 40 for i in range(3)}, corpus={"pack_mb": 0})
    needed = len(chunk_keys) + worker.SPARE_FILES
    command = [sys.executable, "-m", "steps.run", "deduplicate", "--build", layout.root]
    environment = {**os.environ, "PYTHONPATH": str(REPO)}
    short = subprocess.run(command, capture_output=True, text=True, env=environment, preexec_fn=limited_open_files(needed - 1))
    assert short.returncode == 1 and "3 chunks" in short.stderr and f"may hold {needed - 1}" in short.stderr and f"at least {needed}" in short.stderr
    enough = subprocess.run(command, capture_output=True, text=True, env=environment, preexec_fn=limited_open_files(needed))
    assert enough.returncode != 0 and "open-files limit" not in enough.stderr and "tally" in enough.stderr


def test_the_run_stops_before_any_job_when_a_job_may_not_hold_a_file_per_chunk(tmp_path):
    """The workflow process checks its own hard limit, which its local jobs inherit, before its
    first job: the demo corpus as one chunk per file (7 chunks) with a limit one short."""
    limit = 7 + worker.SPARE_FILES - 1
    config = scenario("one-chunk-per-file")
    (tmp_path / "override.yaml").write_text(yaml.safe_dump(config), encoding="utf-8")
    command = [sys.executable, "-m", "snakemake", "--snakefile", str(REPO / "Snakefile"), "--directory", str(tmp_path), "--cores", "1"]
    command += ["--configfile", str(tmp_path / "override.yaml")]
    result = subprocess.run(command, capture_output=True, text=True, preexec_fn=limited_open_files(limit))
    assert result.returncode == 1 and "7 chunks" in result.stderr and f"may hold {limit}" in result.stderr
    assert not (tmp_path / "build" / "logs").exists() and not (tmp_path / "build" / "interim" / "prepared").exists()
