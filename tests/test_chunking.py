"""Chunking: cutting input files into byte-range chunks never splits a document, whatever the
chunk size, line ends or document sizes; and whatever the chunk and pack sizes, a build holds the
same rows per split, the same vocabulary and the same coverage (its shard files follow its
chunks, so their bytes differ), while two builds with one configuration are byte-identical."""

from __future__ import annotations

import gzip
import hashlib
import json
import random
import re
from collections import Counter
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


def frozen(value: object) -> object:
    """A row value made hashable: lists become tuples, at any depth."""
    return tuple(frozen(item) for item in value) if isinstance(value, list) else value


def split_rows(build: Path) -> dict[tuple[str, str], list[tuple]]:
    """Every row of each (split, kind), reading the split's shard files in manifest order (after
    checking that the manifest lists every shard file of the build)."""
    manifest = json.loads((build / "manifest.json").read_text(encoding="utf-8"))
    entries = [(split, entry) for split, figures in manifest["splits"].items() for entry in figures["shards"]]
    assert sorted(entry["file"] for _, entry in entries) == sorted(p.relative_to(build).as_posix() for p in (build / "shards").rglob("*.parquet"))
    rows: dict[tuple[str, str], list[tuple]] = {}
    for split, entry in entries:
        table = pq.read_table(build / entry["file"])
        rows.setdefault((split, entry["kind"]), []).extend(tuple(frozen(v) for v in row.values()) for row in table.to_pylist())
    return rows


def split_figures(build: Path) -> dict:
    """The manifest's figures per split (documents, sentences, tokens, rows, …) without its list of files."""
    manifest = json.loads((build / "manifest.json").read_text(encoding="utf-8"))
    return {split: {k: v for k, v in figures.items() if k != "shards"} for split, figures in manifest["splits"].items()}


def assert_same_build_content(build: Path, reference: Path) -> None:
    """What holds whatever chunk_mb and pack_mb (a build's shard files follow its chunks): each
    split holds the same rows, as a multiset for train (collections.Counter) and as the same
    sequence for dev and test read in manifest order; vocabulary.tsv and stats/token_counts.parquet
    are the same bytes (hashlib.sha256); coverage.json and the manifest's figures per split are
    equal (json.loads)."""
    rows, expected = split_rows(build), split_rows(reference)
    assert set(rows) == set(expected) == {(split, kind) for split in ("train", "dev", "test") for kind in ("ngram", "block", "stream")}
    for (split, kind), reference_rows in expected.items():
        assert reference_rows, (split, kind)
        if split == "train":
            assert Counter(rows[split, kind]) == Counter(reference_rows), (split, kind)
        else:
            assert rows[split, kind] == reference_rows, (split, kind)
    for name in ("vocabulary.tsv", "stats/token_counts.parquet"):
        assert hashlib.sha256((build / name).read_bytes()).digest() == hashlib.sha256((reference / name).read_bytes()).digest(), name
    assert json.loads((build / "stats" / "coverage.json").read_text()) == json.loads((reference / "stats" / "coverage.json").read_text())
    assert split_figures(build) == split_figures(reference)


def build_fingerprints(build: Path) -> dict[str, str]:
    """SHA-256 of every shard file, the vocabulary, the token counts, the coverage statistics and
    the manifest of a build."""
    named = ("vocabulary.tsv", "stats/token_counts.parquet", "stats/coverage.json", "manifest.json")
    files = sorted((build / "shards").rglob("*.parquet")) + [build / name for name in named]
    return {str(p.relative_to(build)): hashlib.sha256(p.read_bytes()).hexdigest() for p in files}


def test_chunk_and_pack_sizes_give_the_same_rows_vocabulary_and_coverage(tmp_path: Path):
    """A build with corpus.chunk_mb = 0.002 (about 2 KB, several chunks per file, some inside a
    document) and one with every file its own job (pack_mb 0) hold what the default build holds,
    where the four small files are one pack (assert_same_build_content). A second build with
    the tiny chunks is byte for byte the first (hashlib SHA-256 of every output file)."""
    root = tmp_path / "corpus"
    root.mkdir()
    (root / "lf.txt").write_bytes(text_corpus(11, "\n", 40, long=60).encode("utf-8"))
    (root / "crlf.txt").write_bytes(text_corpus(12, "\r\n", 30, long=60).encode("utf-8"))
    (root / "cr.txt").write_bytes(text_corpus(13, "\r", 20, long=60).encode("utf-8"))
    (root / "records.jsonl").write_bytes(jsonl_corpus(14, "\n", 40, long=60).encode("utf-8"))
    sources = sorted(p.name for p in root.iterdir())
    chunk_mb = 0.002
    tiny_chunks = plan_chunks(root, sources, int(chunk_mb * (1 << 20)), "paragraph", 1 << 20)
    assert len(tiny_chunks) >= 15
    assert [c.sources for c in plan_chunks(root, sources, 32 << 20, "paragraph", 1 << 20)] == [tuple(sources)]
    base = {"corpus": {"root": str(root)}}
    tiny = {"corpus": {"root": str(root), "chunk_mb": chunk_mb}}
    run_workflow(tmp_path / "default", base)
    run_workflow(tmp_path / "tiny", tiny)
    run_workflow(tmp_path / "unpacked", {"corpus": {"root": str(root), "pack_mb": 0}})
    run_workflow(tmp_path / "tiny-again", tiny)
    default = tmp_path / "default" / "build"
    assert len(list((default / "shards").rglob("*.parquet"))) == 3 * 3  # one chunk: 3 splits x 3 kinds
    assert len(list((tmp_path / "tiny" / "build" / "shards").rglob("*.parquet"))) == 3 * 3 * len(tiny_chunks)
    assert_same_build_content(tmp_path / "tiny" / "build", default)
    assert_same_build_content(tmp_path / "unpacked" / "build", default)
    first, second = build_fingerprints(tmp_path / "tiny" / "build"), build_fingerprints(tmp_path / "tiny-again" / "build")
    assert len(first) == 3 * 3 * len(tiny_chunks) + 4 and first == second


def test_a_compressed_file_larger_than_the_run_budget_gives_the_same_build(tmp_path: Path):
    """A compressed file is one chunk whatever its size; a prepare job writes it in runs once
    it holds RUN_FACTOR x chunk_mb of rows in Arrow memory, so memory stays bounded. With
    chunk_mb 0.01 the gzipped corpus (about 100 KB of text) takes several runs, and the build
    holds what the default build (one run) holds (assert_same_build_content)."""
    root = tmp_path / "corpus"
    root.mkdir()
    (root / "big.txt.gz").write_bytes(gzip.compress(text_corpus(21, "\n", 400, long=60).encode("utf-8")))
    run_workflow(tmp_path / "a", {"corpus": {"root": str(root)}})
    run_workflow(tmp_path / "b", {"corpus": {"root": str(root), "chunk_mb": 0.01}})
    runs = {}
    for name in ("a", "b"):
        table = pq.ParquetFile(next((tmp_path / name / "build" / "interim" / "prepared").glob("*.parquet")))
        column = table.schema_arrow.names.index("split")
        splits = [table.metadata.row_group(g).column(column).statistics.min for g in range(table.num_row_groups)]
        runs[name] = 1 + sum(1 for a, b in zip(splits, splits[1:]) if b < a)  # each run starts over at dev
    assert runs["a"] == 1 and runs["b"] >= 4
    assert_same_build_content(tmp_path / "b" / "build", tmp_path / "a" / "build")
