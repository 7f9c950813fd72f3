"""Provenance: every row of every kind and split leads back to its input file, the document's
byte offset, the sentence and the token, and `corpusmill trace` prints that text.

Outside references: the input files read again here with the standard library (gzip,
zstandard, json; a document by its own rule: a paragraph ends at a blank line, a JSONL record
at its line end), re-cut with the project's cleaner and segmenter and looked up in
vocabulary.tsv (or encoded with the build's sentencepiece model); DuckDB and polars as
independent Parquet readers; real text from Debian's `fortunes` package.
"""

from __future__ import annotations

import gzip
import json
import random
import shutil
from pathlib import Path

import duckdb
import numpy as np
import polars as pl
import pyarrow.parquet as pq
import pytest
import zstandard

from conftest import DEMO, require_file, run_workflow, scenario
from corpusmill.audit import audit_build
from corpusmill.clean import CleanOptions, clean_text
from corpusmill.formats import BOS, EOS, PAD, read_vocabulary
from corpusmill.provenance import RunWriter, position_of_row
from corpusmill.reader import open_build
from corpusmill.segment import Segmenter
from corpusmill.trace import main as trace_main
from corpusmill.trace import provenance_record, trace_row
from corpusmill.vocabulary import unknown_class
from corpusmill.windows import document_block_starts, document_blocks, document_streams, ngram_target_positions, ngram_windows

FORTUNES = Path("/usr/share/games/fortunes")
ROWS_PER_FILE = 6


@pytest.fixture(scope="module")
def fortunes_build(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """Three of Debian's fortune files, as they are, one chunk each; blocks joined across
    documents, overlapping (stride < L) and with the chunk's last block padded."""
    directory = tmp_path_factory.mktemp("fortunes")
    raw = directory / "raw"
    raw.mkdir()
    for name in ("fortunes", "wisdom", "science"):
        shutil.copyfile(require_file(FORTUNES / name, "fortunes"), raw / f"{name}.txt")
    run_workflow(directory, scenario("overlapping-blocks", {"corpus": {"root": str(raw)}}))
    return directory / "build"


@pytest.fixture(scope="module")
def subword_build(tmp_path_factory: pytest.TempPathFactory) -> Path:
    directory = tmp_path_factory.mktemp("subword")
    run_workflow(directory, scenario("subword", {"subword": {"vocab_size": 600}}))
    return directory / "build"


# --- an independent reading of the source --------------------------------------------------------


def uncompressed(path: Path) -> bytes:
    data = path.read_bytes()
    if path.name.endswith(".gz"):
        return gzip.decompress(data)
    if path.name.endswith(".zst"):
        return zstandard.ZstdDecompressor().decompressobj().decompress(data)
    return data


def source_text(root: Path, source: str, offset: int, config: dict) -> str:
    """The document at `offset`: a JSONL record's text field, or a paragraph's lines up to the
    next blank line."""
    data = uncompressed(root / source)[offset:]
    if ".jsonl" in source:
        return json.loads(data.splitlines()[0])[config["corpus"]["jsonl_text_field"]]
    lines = []
    for line in data.splitlines(keepends=True):
        if not line.strip():
            break
        lines.append(line)
    return b"".join(lines).decode("utf-8", "replace")


class Source:
    """A build's documents re-cut independently: sentences of ids, as the vocabulary or model gives them."""

    def __init__(self, build: Path) -> None:
        manifest = json.loads((build / "manifest.json").read_text())
        self.config = manifest["config"]
        self.root = Path(self.config["corpus"]["root"])
        self.vocabulary = read_vocabulary(build / "vocabulary.tsv")
        self.words = {t: i for i, (t, k) in enumerate(zip(self.vocabulary.tokens, self.vocabulary.kinds)) if k == "word"}
        self.segmenter = Segmenter.from_config(self.config["segment"])
        self.clean = CleanOptions.from_config(self.config["clean"])
        self.pieces = None
        if self.config["units"] == "subword":
            import sentencepiece as spm

            self.pieces = spm.SentencePieceProcessor(model_file=str(build / "subword.model"))

    def sentences(self, source: str, offset: int) -> tuple[list[list[str]], list[list[int]]]:
        """(tokens, ids) per sentence of the document."""
        text = clean_text(source_text(self.root, source, offset, self.config), self.clean)
        if self.pieces is not None:
            sentences = self.segmenter.sentences(text)
            return [self.pieces.encode(s, out_type=str) for s in sentences], [self.pieces.encode(s) for s in sentences]
        tokens = self.segmenter.segment(text)
        unk = self.vocabulary.id("<unk>")
        index = self.vocabulary.index
        return tokens, [[self.words.get(t, index.get(unknown_class(t), unk)) for t in sentence] for sentence in tokens]


def stored_row(build: Path, file: str, row: int) -> list[int]:
    record = pq.read_table(build / file).slice(row, 1).to_pylist()[0]
    return [*record["context"], record["target"]] if "target" in record else list(record["ids"])


def sample_rows(build: Path, seed: int) -> list[tuple[str, str, str, int]]:
    """(split, kind, file, row): a few seeded random rows of every shard file."""
    manifest = json.loads((build / "manifest.json").read_text())
    chosen, rng = [], random.Random(seed)
    for split, figures in manifest["splits"].items():
        for entry in figures["shards"]:
            if entry["rows"]:
                rows = {0, entry["rows"] - 1, *(rng.randrange(entry["rows"]) for _ in range(ROWS_PER_FILE))}
                chosen += [(split, entry["kind"], entry["file"], row) for row in sorted(rows)]
    return chosen


def assert_rows_lead_to_their_source(build: Path, seed: int) -> set[tuple[str, str]]:
    """Every sampled row's ids equal the ids of the tokens its provenance names, read from the
    input file independently; returns the (split, kind) pairs checked."""
    source = Source(build)
    vocabulary = source.vocabulary
    checked = set()
    for split, kind, file, row in sample_rows(build, seed):
        record = provenance_record(trace_row(build, file, row))
        texts = {n: source.sentences(d["source"], d["offset"])[1] for n, d in enumerate(record["documents"])}
        expected = []
        for place in record["places"]:
            if place is None:  # before the sentence (n-gram context) or past the chunk's end (block)
                expected.append(vocabulary.id(BOS) if kind == "ngram" else vocabulary.id(PAD))
                continue
            sentence = texts[place["document"]][place["sentence"]] if place["token"] >= 0 else []
            token = place["token"]
            expected.append(vocabulary.id(BOS) if token < 0 else vocabulary.id(EOS) if token == len(sentence) else sentence[token])
        assert stored_row(build, file, row) == expected, (file, row, record)
        for document in record["documents"]:
            if ".jsonl" not in document["source"]:
                assert document["doc_id"] == f"{document['source']}:{document['offset']}"
        if kind == "stream":
            assert pq.read_table(build / file, columns=["doc_id"])["doc_id"][row].as_py() == record["documents"][0]["doc_id"]
        checked.add((split, kind))
    return checked


# --- tests -------------------------------------------------------------------------------------


def test_stream_positions_of_targets_and_block_starts_hold_the_rows_ids() -> None:
    """Reference: the stream itself (steps.windows.document_streams): an n-gram row's target and
    a block's first id are the stream's ids at their positions."""
    rng = np.random.default_rng(3)
    lengths = rng.integers(1, 9, 40)
    per_doc = np.array([5, 1, 12, 7, 15])
    ids = rng.integers(10, 99, int(lengths.sum()))
    stream, doc_lengths = document_streams(ids, lengths, per_doc, 2, 3)
    for predict_end in (True, False):
        _, target = ngram_windows(ids, lengths, 3, 2, 3 if predict_end else None)
        assert stream[ngram_target_positions(lengths, per_doc, predict_end)].tolist() == target.tolist()
    for stride, remainder in ((4, "drop"), (3, "pad"), (9, "pad")):
        blocks = document_blocks(stream, doc_lengths, 8, stride, remainder, 0)
        assert stream[document_block_starts(doc_lengths, 8, stride, remainder)].tolist() == blocks[:, 0].tolist()


@pytest.mark.parametrize("step", [1, 0, 5])
def test_row_tables_give_every_rows_position_and_do_not_depend_on_batching(tmp_path: Path, step: int) -> None:
    """Reference: the positions handed in, row by row; the same rows in other batches give the
    same bytes."""
    rng = np.random.default_rng(step)
    runs = [p + np.arange(n) * step for p, n in zip(np.cumsum(rng.integers(1, 500, 60)), rng.integers(1, 30, 60))]
    positions = np.concatenate([rng.permutation(np.concatenate(runs[:20])), *runs[20:]])
    files = []
    for name, cuts in (("whole", []), ("pieces", sorted(rng.choice(len(positions), 25, replace=False).tolist()))):
        writer = RunWriter(tmp_path / f"{name}.parquet", {b"corpusmill": json.dumps({"step": step}).encode()}, step)
        for piece in np.split(positions, cuts):
            writer.add(piece)
        writer.close()
        files.append((tmp_path / f"{name}.parquet").read_bytes())
    assert files[0] == files[1]
    assert [position_of_row(tmp_path / "whole.parquet", row) for row in range(len(positions))] == positions.tolist()
    if step:
        assert pq.read_metadata(tmp_path / "whole.parquet").num_rows < len(positions)


def test_random_rows_of_every_kind_and_split_lead_to_their_source_text(demo_build: Path) -> None:
    """Demo corpus (plain, gzip JSONL and zstd text), word units."""
    checked = assert_rows_lead_to_their_source(demo_build, seed=1)
    assert checked == {(split, kind) for split in ("train", "dev", "test") for kind in ("ngram", "block", "stream")}


def test_random_rows_of_real_fortunes_lead_to_their_source_text(fortunes_build: Path) -> None:
    """Debian's fortunes, blocks joined across documents with a padded last block."""
    checked = assert_rows_lead_to_their_source(fortunes_build, seed=2)
    assert {kind for _, kind in checked} == {"ngram", "block", "stream"}


def test_random_rows_of_a_subword_build_lead_to_their_source_pieces(subword_build: Path) -> None:
    """Reference: the build's sentencepiece model run here on the independently cut sentences."""
    checked = assert_rows_lead_to_their_source(subword_build, seed=3)
    assert {kind for _, kind in checked} == {"ngram", "block", "stream"}


def test_trace_prints_the_target_token_marked_in_its_sentence_with_its_context(demo_build: Path, capsys: pytest.CaptureFixture) -> None:
    """The marked target is the token the independent re-cut finds at the traced place, and the
    marked context holds the n-1 tokens before it (<s> where the sentence starts)."""
    source = Source(demo_build)
    n = source.config["windows"]["ngram"]["n"]
    for _, kind, file, row in sample_rows(demo_build, seed=4):
        if kind != "ngram":
            continue
        record = provenance_record(trace_row(demo_build, file, row))
        place, document = record["places"][-1], record["documents"][0]
        tokens = source.sentences(document["source"], document["offset"])[0][place["sentence"]]
        token = place["token"]
        context = tokens[max(0, token - (n - 1)) : token]
        trace_main([str(demo_build), file, str(row)])
        printed = capsys.readouterr().out
        line = next(line for line in printed.splitlines() if line.startswith(f"  sentence {place['sentence']}:"))
        assert f"[[{tokens[token] if token < len(tokens) else EOS}]]" in line, (file, row, printed)
        marked = line[line.index("{{") + 2 : line.index("}}")]
        assert "".join(marked.split()) == "".join([BOS] * (n - 1 - len(context)) + context), (file, row, printed)
        assert f"{document['source']}, byte {document['offset']}" in printed


def test_trace_marks_the_chosen_id_of_a_block_row(demo_build: Path, capsys: pytest.CaptureFixture) -> None:
    file = next(f for _, kind, f, _ in sample_rows(demo_build, seed=5) if kind == "block" and "/dev/" in f)
    ids = stored_row(demo_build, file, 0)
    vocabulary = read_vocabulary(demo_build / "vocabulary.tsv")
    trace_main([str(demo_build), file, "0", "--target", "5"])
    printed = capsys.readouterr().out
    assert f"target:   id 5 of the row: {ids[5]} {vocabulary.tokens[ids[5]]}" in printed
    assert printed.count("[[") == 1 and "{{" in printed


def test_a_row_outside_the_file_or_an_unlisted_file_is_refused_naming_it(demo_build: Path) -> None:
    file = sample_rows(demo_build, seed=6)[0][2]
    rows = pq.read_metadata(demo_build / file).num_rows
    for argv, expected in (([file, str(rows)], f"holds rows 0 to {rows - 1}"), (["shards/train/other.parquet", "0"], "lists no shard file")):
        with pytest.raises(SystemExit) as stopped:
            trace_main([str(demo_build), *argv])
        error = stopped.value.code
        assert isinstance(error, str) and error.startswith("corpusmill: ") and expected in error


@pytest.mark.parametrize("edit", ["shifted", "same_length"])
def test_a_source_file_edited_since_the_build_is_reported_not_misquoted(demo_build: Path, tmp_path: Path, edit: str) -> None:
    """A line added before the document (no document starts at the offset any more), or its
    first word overwritten with as many other bytes (the offsets hold, the ids do not)."""
    corpus = Path(shutil.copytree(DEMO, tmp_path / "raw"))
    file = next(f for _, kind, f, _ in sample_rows(demo_build, seed=7) if kind == "ngram" and "/dev/" in f)
    row = next(r for r in range(100) if provenance_record(trace_row(demo_build, file, r))["documents"][0]["source"].endswith(".txt"))
    document = provenance_record(trace_row(demo_build, file, row))["documents"][0]
    path, offset = corpus / document["source"], document["offset"]
    data = path.read_bytes()
    if edit == "shifted":
        path.write_bytes(b"An edited line.\n\n" + data)
    else:
        word = data[offset:].split()[0]
        path.write_bytes(data[:offset] + b"Q" * len(word) + data[offset + len(word) :])
    with pytest.raises(SystemExit) as stopped:
        trace_main([str(demo_build), file, str(row), "--corpus", str(corpus)])
    error = stopped.value.code
    assert isinstance(error, str) and error.startswith("corpusmill: ") and "rebuild" in error


def test_side_tables_read_by_duckdb_and_polars_equal_pyarrow_and_give_the_same_documents(demo_build: Path) -> None:
    """Reference: DuckDB and polars read every provenance table as pyarrow does, and DuckDB's
    SQL over the row and document tables finds the document `corpusmill trace` names."""
    tables = sorted((demo_build / "provenance").rglob("*.parquet"))
    assert tables
    for path in tables:
        expected = pq.read_table(path).to_pylist()
        assert duckdb.sql(f"SELECT * FROM read_parquet('{path}')").fetchall() == [tuple(r.values()) for r in expected]
        assert pl.read_parquet(path).to_dicts() == expected
    for split, kind, file, row in sample_rows(demo_build, seed=8):
        chunk = Path(file).stem.split("-", 1)[1]
        runs, documents = demo_build / "provenance" / split / f"{kind}-{chunk}.parquet", demo_build / "provenance" / split / f"documents-{chunk}.parquet"
        step = json.loads(pq.read_schema(runs).metadata[b"corpusmill"])["step"]
        query = f"SELECT position + ({row} - row) * {step} FROM read_parquet('{runs}') WHERE row <= {row} AND {row} < row + rows"
        (position,) = duckdb.sql(query).fetchall()[0]
        found = duckdb.sql(f"SELECT doc_id FROM read_parquet('{documents}') WHERE position <= {position} ORDER BY position DESC LIMIT 1").fetchall()[0]
        traced = provenance_record(trace_row(demo_build, file, row))
        place = traced["places"][-1 if kind == "ngram" else 0]
        if place is not None:
            assert found[0] == traced["documents"][place["document"]]["doc_id"], (file, row)


def test_shards_keep_their_columns_and_the_reader_never_opens_provenance(demo_build: Path, tmp_path: Path) -> None:
    """The id columns third-party readers see are the ones they saw before; the reader's batches
    are the same with the provenance folder gone."""
    columns = {"ngram": ["context", "target"], "block": ["ids"], "stream": ["doc_id", "ids"]}
    for path in (demo_build / "shards").rglob("*.parquet"):
        assert pq.read_schema(path).names == columns[path.name.split("-")[0]]
    bare = Path(shutil.copytree(demo_build, tmp_path / "build", ignore=shutil.ignore_patterns("provenance")))
    for kind in ("ngram", "block", "stream"):
        with_tables = list(open_build(demo_build).batches("train", kind, 300, seed=1))
        without = list(open_build(bare).batches("train", kind, 300, seed=1))
        assert len(with_tables) == len(without)
        for a, b in zip(with_tables, without):
            assert all(np.array_equal(np.asarray(a[k]), np.asarray(b[k])) for k in a if k != "doc_id")


def test_the_manifest_lists_every_provenance_table_and_the_audit_checks_them(demo_build: Path, tmp_path: Path) -> None:
    manifest = json.loads((demo_build / "manifest.json").read_text())
    on_disk = {p.relative_to(demo_build).as_posix() for p in (demo_build / "provenance").rglob("*") if p.is_file()}
    assert on_disk and on_disk <= set(manifest["files"])
    copy = Path(shutil.copytree(demo_build, tmp_path / "build"))
    damaged = copy / sorted(on_disk)[0]
    damaged.write_bytes(damaged.read_bytes()[:-9] + b"corrupted")
    (copy / "provenance" / "train" / "stray.parquet").write_bytes(b"")
    problems = "\n".join(audit_build(copy).problems)
    assert f"{sorted(on_disk)[0]}: SHA-256 differs" in problems
    assert "provenance/train/stray.parquet: is not listed" in problems


def test_train_rows_keep_the_seeded_order_they_had_before_provenance(demo_build: Path) -> None:
    """Reference: the shuffle as documented (README, Shards): one generator per chunk seeded
    with shards.seed and the chunk's key, drawing the n-gram permutation, then the block
    permutation, per batch (the demo's chunk is one batch). Cut from the train stream shard, in
    that order, the rows equal the shard's row for row, so tracing changed no train row."""
    from corpusmill.shards import chunk_seed

    config = json.loads((demo_build / "manifest.json").read_text())["config"]
    ngram, blocks = config["windows"]["ngram"], config["windows"]["blocks"]
    (stream_file,) = (demo_build / "shards" / "train").glob("stream-*.parquet")
    chunk = stream_file.stem.split("-", 1)[1]
    vocabulary = read_vocabulary(demo_build / "vocabulary.tsv")
    bos, eos, pad = vocabulary.id(BOS), vocabulary.id(EOS), vocabulary.id(PAD)
    sentences, per_doc = [], []
    for ids in pq.read_table(stream_file)["ids"].to_pylist():
        body = ids[1:]
        ends = [i for i, token in enumerate(body) if token == eos]
        sentences += [body[a + 1 if k else 0 : b] for k, (a, b) in enumerate(zip([-1, *ends], ends))]
        per_doc.append(len(ends))
    lengths = np.array([len(s) for s in sentences])
    flat = np.array([t for s in sentences for t in s], np.int64)
    rng = np.random.default_rng(chunk_seed(config["shards"]["seed"], chunk))
    rows = int(lengths.sum()) + (len(lengths) if ngram["predict_end"] else 0)
    context, target = ngram_windows(flat, lengths, ngram["n"], bos, eos if ngram["predict_end"] else None, rng.permutation(rows))
    stream, doc_lengths = document_streams(flat, lengths, np.array(per_doc), bos, eos)
    cut = document_blocks(stream, doc_lengths, blocks["length"], blocks["stride"], blocks["remainder"], pad)
    cut = cut[rng.permutation(len(cut))]
    shard = pq.read_table(demo_build / "shards" / "train" / f"ngram-{chunk}.parquet")
    assert shard["context"].to_pylist() == context.tolist() and shard["target"].to_pylist() == target.tolist()
    assert pq.read_table(demo_build / "shards" / "train" / f"block-{chunk}.parquet")["ids"].to_pylist() == cut.tolist()
