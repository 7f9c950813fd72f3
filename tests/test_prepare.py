"""Prepare: one chunk's job reads its files, cleans, segments and splits every document, and
writes the chunk table (tests/test_chunks.py covers its storage), the chunk's word counts, its
tally with each input file's size and SHA-256, and the log of its dropped documents, all at the
paths of the build's layout."""

from __future__ import annotations

import gzip
import hashlib
import json
from collections import Counter
from pathlib import Path

import pyarrow.parquet as pq
import pytest

from corpusmill import prepare
from corpusmill.layout import Layout
from corpusmill.plan import Plan
from corpusmill.settings import resolve

PARAGRAPHS = [
    "The lamp was lit at dusk. The keeper wrote it down.",
    "x",
    "Gulls circled the pier at noon, and the ferry was late.",
    "The lamp was lit at dusk. The keeper wrote it down.",
    "12 34 56 78 90",
    "A storm came in from the west; the boats stayed in.",
]


def planned_build(tmp_path: Path, monkeypatch: pytest.MonkeyPatch, files: dict[str, bytes], **sections: dict) -> tuple[Layout, list[str]]:
    """A build folder planned as the workflow plans it (chunk list, chunk plans, options files)
    for a corpus of `files`; returns its layout and chunk keys in corpus order."""
    root = tmp_path / "raw"
    root.mkdir()
    for name, data in files.items():
        (root / name).write_bytes(data)
    monkeypatch.chdir(tmp_path)
    config = resolve({**sections, "corpus": {"root": str(root), **sections.get("corpus", {})}, "build_dir": "build"})
    plan = Plan.from_config(config)
    plan.write_files()
    return plan.layout, plan.chunk_keys


def recount(rows: list[dict]) -> Counter:
    """(split, token) → count over the rows' tokens, with <s> once per document and </s> once
    per sentence (collections.Counter)."""
    counts: Counter = Counter()
    for row in rows:
        counts.update((row["split"], token) for sentence in row["tokens"] for token in sentence)
        counts[(row["split"], "<s>")] += 1
        counts[(row["split"], "</s>")] += len(row["tokens"])
    return counts


def test_a_chunk_job_writes_its_table_counts_tally_and_drop_log_at_the_layout_paths(tmp_path, monkeypatch, capsys):
    """Two small files packed into one chunk. References: a recount by hand of the paragraphs
    (every one read is kept or dropped with its reason, exact duplicates are still kept here:
    the deduplicate step removes them), collections.Counter over the stored tokens for the
    counts, and hashlib.sha256 and the file size for each input."""
    files = {"a.txt": "\n\n".join(PARAGRAPHS).encode(), "b.txt": b"One more paragraph of the log.\n\nAnd a final one that differs.\n"}
    layout, chunks = planned_build(tmp_path, monkeypatch, files)
    assert len(chunks) == 1
    prepare.main(["--build", "build", "--chunk", chunks[0]])
    offsets = [sum(len(p) + 2 for p in PARAGRAPHS[:n]) for n in range(len(PARAGRAPHS))]
    rows = pq.read_table(layout.prepared(chunks[0])).to_pylist()
    kept = [("a.txt", offsets[n]) for n in (0, 2, 3, 5)] + [("b.txt", 0), ("b.txt", 32)]
    assert sorted((r["source"], r["offset"]) for r in rows) == kept
    assert all(r["doc_id"] == f"{r['source']}:{r['offset']}" for r in rows)
    counts = pq.read_table(layout.counts(chunks[0])).to_pylist()
    assert {(r["split"], r["token"]): r["count"] for r in counts} == recount(rows)
    tally = json.loads(Path(layout.tally(chunks[0])).read_text())
    assert (tally["read"], tally["kept"], tally["dropped"]) == (8, 6, {"too_short": 2})
    assert tally["inputs"] == {name: {"bytes": len(data), "sha256": hashlib.sha256(data).hexdigest()} for name, data in files.items()}
    drops = pq.read_table(layout.drop_log(chunks[0])).to_pylist()
    assert drops == [{"source": "a.txt", "offset": offsets[n], "reason": "too_short"} for n in (1, 4)]
    assert json.loads(capsys.readouterr().out.strip().splitlines()[-1])["kept"] == 6


def test_only_the_first_chunk_of_a_cut_file_records_its_size_and_sha256(tmp_path, monkeypatch):
    """A file cut into several chunks is hashed once (hashlib.sha256 as the reference), by the
    job of its first chunk; the others record no inputs, so the manifest never sums them twice."""
    data = "".join(f"Paragraph {n} of the harbour log tells of tides and ships.\n\n" for n in range(400)).encode()
    layout, chunks = planned_build(tmp_path, monkeypatch, {"log.txt": data}, corpus={"chunk_mb": 0.004})
    assert len(chunks) >= 5
    kept = 0
    for chunk in chunks:
        prepare.main(["--build", "build", "--chunk", chunk])
        tally = json.loads(Path(layout.tally(chunk)).read_text())
        expected = {"log.txt": {"bytes": len(data), "sha256": hashlib.sha256(data).hexdigest()}} if chunk == chunks[0] else {}
        assert tally["inputs"] == expected, chunk
        kept += tally["kept"]
    assert kept == 400


def test_a_chunk_written_in_several_runs_holds_the_rows_and_counts_of_one_run(tmp_path, monkeypatch):
    """A compressed file is one chunk whatever its size; a chunk_mb far below its text makes the
    job write its table in several runs (bounded memory). The rows (as a multiset, Python's
    sorted() by place) and the counts equal those of a job that holds the chunk in one run."""
    text = "".join(f"Paragraph {n}: the ferry left at {n % 24} o'clock and the crew sang. Gulls followed.\n\n" for n in range(3000))
    layout, chunks = planned_build(tmp_path, monkeypatch, {"log.txt.gz": gzip.compress(text.encode())})
    (chunk,) = chunks
    options = json.loads(Path(layout.options("prepare")).read_text())
    results = {}
    for name, chunk_mb in (("one", 64), ("many", 0.02)):
        options["corpus"]["chunk_mb"] = chunk_mb
        Path(layout.options("prepare")).write_text(json.dumps(options))
        prepare.main(["--build", "build", "--chunk", chunk])
        parquet = pq.ParquetFile(layout.prepared(chunk))
        column = parquet.schema_arrow.names.index("split")
        minima = [parquet.metadata.row_group(g).column(column).statistics.min for g in range(parquet.num_row_groups)]
        runs = 1 + sum(1 for a, b in zip(minima, minima[1:]) if b < a)  # each run starts over at its first split
        table = parquet.read().to_pylist()
        counts = {(r["split"], r["token"]): r["count"] for r in pq.read_table(layout.counts(chunk)).to_pylist()}
        results[name] = (runs, sorted(table, key=lambda r: (r["source"], r["offset"])), counts)
    assert results["one"][0] == 1 and results["many"][0] >= 4
    assert results["many"][1] == results["one"][1] and len(results["one"][1]) == 3000
    assert results["many"][2] == results["one"][2] == recount(results["one"][1])
