"""Chunking: cutting input files into byte-range chunks never splits a document and never
changes any output, whatever the chunk size, line ends or document sizes."""

from __future__ import annotations

import gzip
import hashlib
import json
import random
import re
from pathlib import Path

import pyarrow.parquet as pq
import pytest

from conftest import run_workflow
from corpusmill.accounting import Tally
from corpusmill.ingest import ReadOptions, plan_chunks, read_documents

WORDS = (
    "the of and a to in is was that for it with as his on be at by had not are but from or have an they which "
    "one you were her all she there would their we him been has when who will more no if out so said what up "
    "its about into than them can only other new some could time these two may then do first any my now such "
    "like our over man me even most made after also did many before must through back years where much your "
    "way well down should because each just those people café naïve façade Zürich crème brûlée — “quoted” "
    "Dr. St. e.g. 3.5 1,200 ice-cold don't keeper's"
).split()
ONE_CHUNK = 1 << 30
SMALL_CHUNKS = (1024, 777, 65536)


def sentence(rng: random.Random) -> str:
    words = [rng.choice(WORDS) for _ in range(rng.randint(3, 18))]
    return words[0].capitalize() + " " + " ".join(words[1:]) + rng.choice(".!?")


def paragraph(rng: random.Random, sentences: int) -> list[str]:
    """A paragraph as lines of about 70 characters."""
    text = " ".join(sentence(rng) for _ in range(sentences))
    lines, line = [], []
    for word in text.split(" "):
        line.append(word)
        if sum(map(len, line)) > 60:
            lines.append(" ".join(line))
            line = []
    return lines + ([" ".join(line)] if line else [])


def text_corpus(seed: int, newline: str, paragraphs: int, long: int = 1500) -> str:
    """Paragraphs separated by blank lines of varying shape; every 149th has `long` sentences
    (1,500: about 90 KB, longer than any chunk size tried), every 53rd 40 sentences."""
    rng = random.Random(seed)
    separators = [newline, newline * 2, f" {newline}", f"\t {newline}{newline}"]
    parts = []
    for number in range(paragraphs):
        size = long if number % 149 == 5 else (40 if number % 53 == 7 else rng.randint(1, 6))
        parts.append(newline.join(paragraph(rng, size)) + newline)
        parts.append(rng.choice(separators))
    return "".join(parts)


def jsonl_corpus(seed: int, newline: str, records: int, long: int = 1500) -> str:
    """JSON lines with and without an id field, ASCII-escaped or not; every 149th record long."""
    rng = random.Random(seed)
    lines = []
    for number in range(records):
        size = long if number % 149 == 3 else rng.randint(1, 8)
        text = " ".join(sentence(rng) for _ in range(size))
        record = {"id": f"r{seed}-{number}", "text": text} if number % 3 else {"text": text}
        lines.append(json.dumps(record, ensure_ascii=number % 2 == 0))
        if number % 17 == 0:
            lines.append("")  # blank lines between records are skipped
    return newline.join(lines) + newline


CORPUS = {
    "lf.txt": lambda: text_corpus(1, "\n", 300),
    "crlf.txt": lambda: text_corpus(2, "\r\n", 300),
    "cr.txt": lambda: text_corpus(3, "\r", 300),
    "lf.jsonl": lambda: jsonl_corpus(4, "\n", 300),
    "crlf.jsonl": lambda: jsonl_corpus(5, "\r\n", 300),
}


@pytest.fixture(scope="module")
def corpus(tmp_path_factory: pytest.TempPathFactory) -> Path:
    root = tmp_path_factory.mktemp("chunking")
    for name, make in CORPUS.items():
        (root / name).write_bytes(make().encode("utf-8"))
    return root


def read_with(root: Path, source: str, chunk_bytes: int, unit: str) -> tuple[list[tuple[str, str, int, str]], dict]:
    """Every document of every chunk of one file, and the summed tally of those chunks."""
    options = ReadOptions(text_unit=unit)
    tally = Tally()
    documents = []
    for chunk in plan_chunks(root, [source], chunk_bytes, unit):
        documents.extend((d.doc_id, d.source, d.offset, d.text) for d in read_documents(root, chunk, chunk_bytes, options, tally))
    return documents, tally.as_dict()


CASES = [(name, unit) for name in CORPUS if name.endswith(".txt") for unit in ("paragraph", "line")]
CASES += [(name, "paragraph") for name in CORPUS if name.endswith(".jsonl")]


@pytest.mark.parametrize(("source", "unit"), CASES)
def test_one_chunk_reads_every_document_at_its_byte_offset(corpus: Path, source: str, unit: str):
    """The unchunked read is the reference below, so first check it against the file itself:
    Python's bytes slicing at each offset, and an independent count of documents by `re`
    (blank-line separated blocks, non-blank lines, or non-blank JSON lines)."""
    data = (corpus / source).read_bytes()
    documents, tally = read_with(corpus, source, ONE_CHUNK, unit)
    if source.endswith(".txt"):
        for _, _, offset, text in documents:
            encoded = text.encode("utf-8")
            assert data[offset : offset + len(encoded)] == encoded
        lines = re.split(rb"\r\n|\n|\r", data)
        if unit == "line":
            expected = sum(1 for line in lines if line.strip())
        else:
            expected = sum(1 for a, b in zip([b""] + lines, lines) if b.strip() and not a.strip())
    else:
        expected = sum(1 for line in re.split(rb"\r\n|\n", data) if line.strip())
        assert all(json.loads(data[offset:].split(b"\n", 1)[0])["text"] == text for _, _, offset, text in documents)
    assert len(documents) == expected == tally["read"]
    if unit == "paragraph":
        assert any(len(text.encode("utf-8")) > max(SMALL_CHUNKS) for *_, text in documents)


@pytest.mark.parametrize("chunk_bytes", SMALL_CHUNKS)
@pytest.mark.parametrize(("source", "unit"), CASES)
def test_tiny_chunks_yield_exactly_the_documents_of_one_chunk(corpus: Path, source: str, unit: str, chunk_bytes: int):
    """Ids, offsets, texts and the document tally are those of the unchunked read (reference
    checked above); chunk sizes of 1 KB and 777 bytes put boundaries inside documents, inside
    CRLF pairs, inside multi-byte UTF-8 characters and inside runs of blank lines."""
    size = (corpus / source).stat().st_size
    assert len(plan_chunks(corpus, [source], chunk_bytes, unit)) == -(-size // chunk_bytes) > 1
    whole, whole_tally = read_with(corpus, source, ONE_CHUNK, unit)
    chunked, chunked_tally = read_with(corpus, source, chunk_bytes, unit)
    assert chunked == whole
    assert chunked_tally == whole_tally


def build_fingerprints(build: Path) -> dict[str, str]:
    """SHA-256 of every shard file, the vocabulary and the coverage statistics of a build."""
    files = sorted((build / "shards").rglob("*.parquet")) + [build / "vocabulary.tsv", build / "stats" / "coverage.json"]
    return {str(p.relative_to(build)): hashlib.sha256(p.read_bytes()).hexdigest() for p in files}


def test_chunk_and_pack_sizes_give_byte_identical_shards_and_vocabulary(tmp_path: Path):
    """Hashlib SHA-256 of each output file: a build with corpus.chunk_mb = 0.002 (about 2 KB,
    several chunks per file, some inside a document) and one with every file its own job
    (pack_mb 0) equal the default build, where the four small files are one pack, byte for byte."""
    root = tmp_path / "corpus"
    root.mkdir()
    (root / "lf.txt").write_bytes(text_corpus(11, "\n", 40, long=60).encode("utf-8"))
    (root / "crlf.txt").write_bytes(text_corpus(12, "\r\n", 30, long=60).encode("utf-8"))
    (root / "cr.txt").write_bytes(text_corpus(13, "\r", 20, long=60).encode("utf-8"))
    (root / "records.jsonl").write_bytes(jsonl_corpus(14, "\n", 40, long=60).encode("utf-8"))
    sources = sorted(p.name for p in root.iterdir())
    chunk_mb = 0.002
    assert len(plan_chunks(root, sources, int(chunk_mb * (1 << 20)), "paragraph", 1 << 20)) >= 15
    assert [c.sources for c in plan_chunks(root, sources, 32 << 20, "paragraph", 1 << 20)] == [tuple(sources)]
    base = {"corpus": {"root": str(root)}, "shards": {"train_files": 2}}
    run_workflow(tmp_path / "default", base)
    run_workflow(tmp_path / "tiny", {**base, "corpus": {"root": str(root), "chunk_mb": chunk_mb}})
    run_workflow(tmp_path / "unpacked", {**base, "corpus": {"root": str(root), "pack_mb": 0}})
    default = build_fingerprints(tmp_path / "default" / "build")
    assert len(default) == 3 * 4 + 2  # 2 train + 1 dev + 1 test parts, 3 kinds each
    assert build_fingerprints(tmp_path / "tiny" / "build") == default
    assert build_fingerprints(tmp_path / "unpacked" / "build") == default


def test_a_compressed_file_larger_than_the_run_budget_gives_the_same_build(tmp_path: Path):
    """A compressed file is one chunk whatever its size; a prepare job writes it in runs once
    it holds RUN_FACTOR x chunk_mb of rows in Arrow memory, so memory stays bounded. With
    chunk_mb 0.01 the gzipped corpus (about 100 KB of text) takes several runs, and the shards,
    vocabulary and statistics equal those of the default build (one run) byte for byte
    (hashlib SHA-256)."""
    root = tmp_path / "corpus"
    root.mkdir()
    (root / "big.txt.gz").write_bytes(gzip.compress(text_corpus(21, "\n", 400, long=60).encode("utf-8")))
    base = {"corpus": {"root": str(root)}, "shards": {"train_files": 2}}
    run_workflow(tmp_path / "a", base)
    run_workflow(tmp_path / "b", {**base, "corpus": {"root": str(root), "chunk_mb": 0.01}})
    runs = {}
    for name in ("a", "b"):
        table = pq.ParquetFile(next((tmp_path / name / "build" / "interim" / "prepared").glob("*.parquet")))
        column = table.schema_arrow.names.index("split")
        splits = [table.metadata.row_group(g).column(column).statistics.min for g in range(table.num_row_groups)]
        runs[name] = 1 + sum(1 for a, b in zip(splits, splits[1:]) if b < a)  # each run starts over at dev
    assert runs["a"] == 1 and runs["b"] >= 4
    assert build_fingerprints(tmp_path / "b" / "build") == build_fingerprints(tmp_path / "a" / "build")
