"""Ingest: finding inputs, planning chunks, reading documents of every format and unit."""

from __future__ import annotations

import bz2
import contextlib
import gzip
import io
import json
import lzma
import os
import random
import re
import tempfile
from collections.abc import Iterator
from pathlib import Path
from unittest import mock

import pytest
import regex
import zstandard
from hypothesis import given, settings
from hypothesis import strategies as st

from corpusmill import ingest, unicode_breaks
from corpusmill.ingest import (
    REFUSAL_REASONS,
    Chunk,
    CorpusError,
    ReadOptions,
    Tally,
    _grapheme_cut,
    chunk_key,
    pattern_regex,
    plan_chunks,
    read_documents,
    split_name,
    survey_corpus,
)


def read_all(root: Path, source: str, chunk_bytes: int = 1 << 30, **options) -> tuple[list, Tally]:
    tally = Tally()
    opts = ReadOptions(**options)
    chunks = plan_chunks(root, [source], chunk_bytes, opts.text_unit)
    assert chunks  # every file, even an empty one, is at least one chunk
    documents = [d for c in chunks for d in read_documents(root, c, chunk_bytes, opts, tally)]
    return documents, tally


def test_name_parts_recognise_format_and_compression():
    assert split_name("a/b.jsonl.gz") == (".jsonl", ".gz")
    assert split_name("x.TXT") == (".txt", "")
    assert split_name("x.txt.zst") == (".txt", ".zst")
    assert split_name("notes.md") == ("", "")


def test_inputs_are_found_by_globs_sorted_and_excluded(tmp_path: Path):
    for name in ["b/two.txt", "a/one.txt", "a/skip/three.txt", "four.jsonl.gz"]:
        (tmp_path / name).parent.mkdir(parents=True, exist_ok=True)
        (tmp_path / name).write_bytes(b"x")
    survey = survey_corpus(tmp_path, ["**/*.txt", "**/*.jsonl.*"], ["a/skip/**"])
    assert survey.sources == ["a/one.txt", "b/two.txt", "four.jsonl.gz"]
    assert survey.excluded == ["a/skip/three.txt"] and survey.unselected == [] and survey.refused == []


def test_a_selected_file_of_unknown_format_is_an_error_naming_it(tmp_path: Path):
    (tmp_path / "notes.md").write_text("x")
    with pytest.raises(CorpusError, match=r"notes\.md: not a \.txt or \.jsonl"):
        survey_corpus(tmp_path, ["*"], [])


def test_missing_root_is_an_error_saying_what_to_set(tmp_path: Path):
    with pytest.raises(CorpusError, match="corpus.root"):
        survey_corpus(tmp_path / "nowhere", ["*.txt"], [])


def test_chunk_plan_uses_sizes_only_and_keeps_compressed_files_whole(tmp_path: Path):
    (tmp_path / "big.txt").write_bytes(b"a\n" * 5000)
    (tmp_path / "big.txt.gz").write_bytes(gzip.compress(b"a\n" * 5000))
    chunks = plan_chunks(tmp_path, ["big.txt", "big.txt.gz"], 4096, "paragraph")
    assert [c.count for c in chunks] == [3, 3, 3, 1]
    assert len({c.key for c in chunks}) == 4
    assert chunk_key("big.txt", 0) == chunks[0].key  # stable: depends on the path and index only


def test_paragraph_documents_with_offsets_as_ids(tmp_path: Path):
    (tmp_path / "p.txt").write_bytes(b"one\ntwo\n\n  \n\nthree\n")
    documents, tally = read_all(tmp_path, "p.txt")
    assert [(d.doc_id, d.text) for d in documents] == [("p.txt:0", "one\ntwo\n"), ("p.txt:13", "three\n")]
    assert tally.read == 2


def test_line_and_file_units(tmp_path: Path):
    (tmp_path / "l.txt").write_bytes(b"one\n\ntwo\r\nthree")
    lines, _ = read_all(tmp_path, "l.txt", text_unit="line")
    assert [d.text for d in lines] == ["one\n", "two\r\n", "three"]
    whole, _ = read_all(tmp_path, "l.txt", text_unit="file")
    assert [d.text for d in whole] == ["one\n\ntwo\r\nthree"]


def test_lone_carriage_returns_end_lines(tmp_path: Path):
    (tmp_path / "cr.txt").write_bytes(b"one\rtwo\r\rthree\r")
    documents, _ = read_all(tmp_path, "cr.txt")
    assert [d.text for d in documents] == ["one\rtwo\r", "three\r"]


@pytest.mark.parametrize(
    "suffix,compress",
    [
        (".gz", gzip.compress),
        (".bz2", bz2.compress),
        (".xz", lzma.compress),
        (".zst", zstandard.ZstdCompressor().compress),
    ],
)
def test_compressed_files_read_like_plain_ones(tmp_path: Path, suffix, compress):
    data = b"alpha beta\n\ngamma delta\n"
    (tmp_path / f"c.txt{suffix}").write_bytes(compress(data))
    documents, _ = read_all(tmp_path, f"c.txt{suffix}")
    assert [d.text for d in documents] == ["alpha beta\n", "gamma delta\n"]


def test_jsonl_text_and_id_fields(tmp_path: Path):
    lines = [{"id": "a-1", "text": "first"}, {"text": "second"}, {"id": 7, "body": "x", "text": "third"}]
    (tmp_path / "d.jsonl").write_text("\n".join(json.dumps(r) for r in lines) + "\n\n")
    documents, tally = read_all(tmp_path, "d.jsonl")
    assert [(d.doc_id, d.text) for d in documents] == [("a-1", "first"), ("d.jsonl:31", "second"), ("7", "third")]
    assert tally.read == 3


def test_broken_jsonl_line_stops_with_offset_or_is_dropped(tmp_path: Path):
    (tmp_path / "d.jsonl").write_text('{"text": "ok"}\n{"text": broken\n{"other": 1}\n')
    with pytest.raises(CorpusError, match=r"d\.jsonl: record at byte offset 15: not valid JSON"):
        read_all(tmp_path, "d.jsonl")
    documents, tally = read_all(tmp_path, "d.jsonl", bad_records="drop")
    assert [d.text for d in documents] == ["ok"]
    assert dict(tally.dropped) == {"bad_json": 1, "no_text": 1} and tally.read == 3


def test_invalid_utf8_policies(tmp_path: Path):
    (tmp_path / "bad.txt").write_bytes(b"good text\n\nbad \xff byte\n")
    with pytest.raises(CorpusError, match=r"bad\.txt: invalid UTF-8 at byte offset 15.*corpus\.invalid_utf8"):
        read_all(tmp_path, "bad.txt")
    replaced, tally = read_all(tmp_path, "bad.txt", invalid_utf8="replace")
    assert replaced[1].text == "bad \ufffd byte\n" and tally.replaced_sequences == 1
    dropped, tally = read_all(tmp_path, "bad.txt", invalid_utf8="drop")
    assert [d.text for d in dropped] == ["good text\n"] and tally.dropped["invalid_utf8"] == 1 and tally.read == 2


def test_byte_order_mark_is_removed(tmp_path: Path):
    (tmp_path / "bom.txt").write_bytes(b"\xef\xbb\xbfhello\n")
    documents, _ = read_all(tmp_path, "bom.txt")
    assert documents[0].text == "hello\n"


def test_oversize_documents_follow_the_policy_at_grapheme_boundaries(tmp_path: Path):
    cluster = "e\u0301"  # two code points, one grapheme
    text = ("word " + cluster) * 400  # about 2.8 KB on one line
    (tmp_path / "long.txt").write_text(text)
    pieces, tally = read_all(tmp_path, "long.txt", max_document_bytes=1024, oversize="split")
    assert "".join(p.text for p in pieces) == text
    assert all(not p.text.startswith("\u0301") for p in pieces)
    assert tally.read == 1 and tally.pieces_added == len(pieces) - 1 >= 2
    truncated, tally = read_all(tmp_path, "long.txt", max_document_bytes=1024, oversize="truncate")
    assert len(truncated) == 1 and text.startswith(truncated[0].text) and len(truncated[0].text.encode()) <= 1024
    assert tally.truncated == 1
    dropped, tally = read_all(tmp_path, "long.txt", max_document_bytes=1024, oversize="drop")
    assert dropped == [] and tally.dropped["oversize"] == 1 and tally.read == 1


def reference_cut(data: bytes) -> int:
    """_grapheme_cut by its definition: regex's \\X over the whole decoded piece (undecodable bytes
    at the end left to the next piece); the last cluster's start, or the end if it is one cluster."""
    text = data.decode("utf-8", "surrogateescape").rstrip("".join(map(chr, range(0xDC80, 0xDD00))))
    starts = [m.start() for m in regex.finditer(r"\X", text, flags=regex.V1)]
    head = text[: starts[-1]] if starts and starts[-1] > 0 else text
    return len(head.encode("utf-8", "surrogateescape")) or len(data)


def test_an_oversize_cut_falls_where_regex_X_over_the_whole_piece_puts_it(monkeypatch: pytest.MonkeyPatch):
    """UAX #29 extended grapheme clusters (regex \\X) and RFC 3629 UTF-8: 5,000 seeded byte strings
    of clusters of one to four bytes (flags, emoji ZWJ sequences, Hangul syllables, a conjunct,
    Prepend, CR LF) and undecodable bytes, cut at a random length (often inside a character).
    The reach for a boundary valid whatever precedes is shortened to 8 characters, so that runs
    of flags and marks also take the path that matches clusters from the start."""
    monkeypatch.setattr(unicode_breaks, "_SURE_BOUNDARY_REACH", 8)
    units = [
        "a", "Z", " ", "\r", "\n", "\r\n", "\u00e9", "e\u0301", "\u0301", "\U0001F1E6", "\U0001F1EB",
        "\U0001F468\u200d\U0001F469", "\u200d", "\U0001F468", "\u1100\u1161\u11a8", "\u0600", "\u0915\u094d\u0937",
        "\u4e2d", "\U0001F1E6" * 12, "\u0301" * 12,
    ]  # fmt: skip
    invalid = [b"\xff", b"\xc3", b"\x80", b"\xe2\x82"]
    rng = random.Random(31)
    failures = []
    for _ in range(5000):
        data = b"".join(rng.choice(invalid) if rng.random() < 0.05 else rng.choice(units).encode("utf-8") for _ in range(rng.randint(1, 12)))
        data = data[: rng.randint(1, len(data))]
        if _grapheme_cut(data) != reference_cut(data):
            failures.append((data, _grapheme_cut(data), reference_cut(data)))
    assert not failures, failures[:10]


def test_truncated_compressed_file_is_an_error_naming_it(tmp_path: Path):
    (tmp_path / "t.txt.gz").write_bytes(gzip.compress(b"some text\n" * 1000)[:-30])
    with pytest.raises(CorpusError, match=r"t\.txt\.gz: compressed data is damaged or truncated"):
        read_all(tmp_path, "t.txt.gz")


def test_decompression_limit_stops_a_bomb(tmp_path: Path):
    (tmp_path / "bomb.txt.gz").write_bytes(gzip.compress(b"a" * (3 << 20)))
    with pytest.raises(CorpusError, match="max_decompressed_mb"):
        read_all(tmp_path, "bomb.txt.gz", max_decompressed_bytes=1 << 20)


@pytest.mark.parametrize("unit", ["paragraph", "line"])
@pytest.mark.parametrize("chunk_bytes", [7, 64, 1000])
def test_chunking_never_changes_the_documents(tmp_path: Path, unit: str, chunk_bytes: int):
    text = b"".join(b"paragraph %d line one\r\nline two %d\n\n\n" % (i, i) if i % 3 else b"short %d\r\r" % i for i in range(60))
    (tmp_path / "c.txt").write_bytes(text)
    whole, _ = read_all(tmp_path, "c.txt", text_unit=unit)
    chunked, _ = read_all(tmp_path, "c.txt", chunk_bytes=chunk_bytes, text_unit=unit)
    assert [(d.doc_id, d.text) for d in chunked] == [(d.doc_id, d.text) for d in whole]


@pytest.mark.parametrize("block", [1, 2, 3, 4, 5, 1 << 20])
def test_a_crlf_cut_by_a_read_block_still_ends_one_line(tmp_path: Path, block: int):
    """A block may end between CR and LF: the pair is still one terminator, not a line ended by
    CR followed by an empty (blank) line that would end the paragraph."""
    (tmp_path / "w.txt").write_bytes(b"one\r\ntwo\r\n\r\nthree\r\nfour\r")
    with mock.patch.object(ingest, "READ_BLOCK", block):
        documents, _ = read_all(tmp_path, "w.txt")
    assert [(d.offset, d.text) for d in documents] == [(0, "one\r\ntwo\r\n"), (12, "three\r\nfour\r")]


def test_runs_of_lines_come_as_one_item_each() -> None:
    """With `runs`, a paragraph's lines come as one item and so do the blank lines between
    paragraphs (the reader then does per-paragraph work, not per-line work)."""
    text = b"one\ntwo\r\n\n \t\r\nthree\rfour"
    assert list(ingest._lines(io.BytesIO(text), 10, 100, runs=True)) == [
        (10, b"one\ntwo\r\n", True, False), (19, b"\n \t\r\n", True, True), (24, b"three\r", True, False),
        (30, b"four", True, False),  # the end of the text without a terminator: left until the text ends
    ]  # fmt: skip
    assert len(list(ingest._lines(io.BytesIO(text), 10, 100))) == 6


@pytest.mark.parametrize("block", [1, 4, 1 << 20])
def test_a_jsonl_record_of_exactly_the_limit_at_the_end_of_the_file_is_read(tmp_path: Path, block: int):
    """A last line without a terminator is read whole when it holds exactly
    corpus.max_document_bytes: only a longer one comes in pieces (and is dropped as oversize)."""
    last = b'{"text": "abcdef"}'
    (tmp_path / "r.jsonl").write_bytes(b'{"text": "ab"}\n' + last)
    with mock.patch.object(ingest, "READ_BLOCK", block):
        documents, tally = read_all(tmp_path, "r.jsonl", max_document_bytes=len(last))
    assert [d.text for d in documents] == ["ab", "abcdef"] and tally.read == 2 and not tally.dropped


# Bytes that shape lines and paragraphs: terminators, blanks, a letter and a two-byte letter.
LINE_BYTES = st.lists(st.sampled_from([b"a", b" ", b"\t", b"\x0b", b"\x0c", b"\r", b"\n", b"\r\n", "\u00e9".encode()]), max_size=80)


@pytest.mark.parametrize("block", [4, 16, 64, 1 << 20])
@pytest.mark.parametrize("chunk_bytes", [20, 1 << 30])
def test_a_line_of_blanks_longer_than_the_size_limit_never_ends_a_paragraph(tmp_path: Path, block: int, chunk_bytes: int):
    """Such a line comes in pieces when read blocks cut it and whole when they do not; it is
    never blank, so the paragraph runs on through it whatever the blocks and chunks, and no
    chunk reads the next paragraph again as a document of its own."""
    (tmp_path / "w.txt").write_bytes(b"para one\n" + b" " * 40 + b"\n" + b"para two\n\n" + b" " * 19 + b"\npara three\n")
    with mock.patch.object(ingest, "READ_BLOCK", block):
        documents, tally = read_all(tmp_path, "w.txt", chunk_bytes, max_document_bytes=20, oversize="truncate")
    assert [(d.offset, d.text) for d in documents] == [(0, "para one\n" + " " * 10), (80, "para three\n")]
    assert tally.read == 2 and tally.file.truncated == 1


# A text and how it is read: size limit, oversize policy, read block and chunk size.
READINGS = {
    "parts": LINE_BYTES, "oversize": st.sampled_from(["split", "truncate", "drop"]), "limit": st.integers(2, 40),
    "block": st.integers(1, 17), "chunk_bytes": st.integers(1, 90),
}  # fmt: skip


@contextlib.contextmanager
def text_file(parts: list[bytes], block: int) -> Iterator[Path]:
    """A folder holding t.txt, the parts joined, read `block` bytes at a time while it is open."""
    with tempfile.TemporaryDirectory() as folder, mock.patch.object(ingest, "READ_BLOCK", block):
        (Path(folder) / "t.txt").write_bytes(b"".join(parts))
        yield Path(folder)


# A line as the reference splitter reads it: up to and with its terminator (CRLF one terminator),
# or what is left at the end of the text.
REFERENCE_LINE = re.compile(rb"[^\r\n]*(?:\r\n|\n|\r)|[^\r\n]+")


@settings(max_examples=400, deadline=None)
@given(parts=LINE_BYTES, limit=st.integers(2, 40), block=st.integers(1, 17), runs=st.booleans(), start=st.integers(0, 1000))
def test_lines_cover_the_text_in_order_and_in_bounded_pieces(parts, limit, block, runs, start):
    """What the line scanner yields, against a reference splitter (Python's re over the whole
    text): the items cover the text end to end with their offsets; cut where every run of
    pieces is joined to the line it begins, they are the reference lines (with `runs`, runs of
    them); a piece holds exactly the limit; no item is longer than the limit plus a read block
    (memory stays bounded); blank marks exactly the lines of spaces, tabs, form and line feeds
    that start a line and, with their terminator, are no longer than the limit."""
    text = b"".join(parts)
    with mock.patch.object(ingest, "READ_BLOCK", block):
        items = list(ingest._lines(io.BytesIO(text), start, limit, runs))
    assert b"".join(data for _, data, _, _ in items) == text
    assert [offset for offset, _, _, _ in items] == [start + sum(len(d) for _, d, _, _ in items[:k]) for k in range(len(items))]
    assert all(len(data) == limit for _, data, complete, _ in items if not complete)
    assert all(0 < len(data) <= limit + block for _, data, _, _ in items)
    reference = REFERENCE_LINE.findall(text)
    lines, after_piece = [], False
    for _, data, complete, blank in items:
        found = REFERENCE_LINE.findall(data)
        if after_piece:  # the rest of a line begun in pieces: one line, never blank
            lines[-1] += found[0]
            assert not blank and (not complete or len(found) == 1)
        else:
            lines += found
            assert all((line.strip(b" \t\f\v\r\n") == b"" and len(line) <= limit) == blank for line in found) if complete else not blank
            assert complete or len(found) == 1
            assert runs or len(found) == 1
        after_piece = not complete
    assert lines == reference


@settings(max_examples=400, deadline=None)
@given(unit=st.sampled_from(["paragraph", "file"]), **READINGS)
def test_paragraphs_read_by_runs_of_lines_match_reading_line_by_line(parts, unit, oversize, limit, block, chunk_bytes):
    """The paragraph reader takes runs of blank and of other lines from one scan of each block;
    the specification is the line-by-line reading (which the line unit still uses): the same
    documents, offsets and tallies, at every block size, size limit, policy and chunk start."""
    options = {"text_unit": unit, "max_document_bytes": limit, "oversize": oversize, "invalid_utf8": "replace"}
    with text_file(parts, block) as root:
        by_runs, runs_tally = read_all(root, "t.txt", chunk_bytes, **options)
        with mock.patch.object(ingest, "_line_runs", ingest._each_line):
            by_lines, lines_tally = read_all(root, "t.txt", chunk_bytes, **options)
    assert [(d.doc_id, d.offset, d.text) for d in by_runs] == [(d.doc_id, d.offset, d.text) for d in by_lines]
    assert runs_tally.as_dict() == lines_tally.as_dict()


@settings(max_examples=300, deadline=None)
@given(unit=st.sampled_from(["paragraph", "line"]), **READINGS)
def test_chunking_never_changes_the_documents_of_any_text(parts, unit, oversize, limit, block, chunk_bytes):
    """Every document belongs to the chunk it starts in, whatever the text: reading in chunks
    (each finding its first document by looking back at the line before its start) gives the
    documents and tallies of reading the file whole."""
    options = {"text_unit": unit, "max_document_bytes": limit, "oversize": oversize, "invalid_utf8": "replace"}
    with text_file(parts, block) as root:
        whole, whole_tally = read_all(root, "t.txt", **options)
        chunked, chunked_tally = read_all(root, "t.txt", chunk_bytes, **options)
    assert [(d.doc_id, d.text) for d in chunked] == [(d.doc_id, d.text) for d in whole]
    assert chunked_tally.as_dict() == whole_tally.as_dict()


@pytest.mark.parametrize(
    ("text", "limit", "expected"),
    [
        (b"\nabc\r", 10, [(1, "abc\r")]),  # an LF at the very start, a CR at the very end
        (b"a\r\nx\r\n\r\nb\r\n", 10, [(0, "a\r\nx\r\n"), (8, "b\r\n")]),  # one-letter CRLF lines
        (b"a\rx\r\rb\r", 10, [(0, "a\rx\r"), (5, "b\r")]),
        (b"p\n   \nq\n", 4, [(0, "p\n"), (6, "q\n")]),  # a blank line of exactly the limit
        (b"p\n    \nq\n", 4, [(0, "p\n ")]),  # one byte over: not blank, so one paragraph, truncated
        (b"   \nq\n", 4, [(4, "q\n")]),  # the same at the start of the file
        (b"    \nq\n", 4, [(0, "   ")]),
        (b"p\n      \nq\n", 3, [(0, "p\n")]),  # a line of blanks read in pieces is not blank either,
        (b"p\n     \nq\n", 3, [(0, "p\n")]),  # nor is what follows its last piece
        (b"a\nX\nb\n", 10, [(0, "a\nX\nb\n")]),  # a line of one capital letter is text
    ],
)
def test_documents_of_crafted_texts_whatever_the_blocks_and_chunk_starts(text: bytes, limit: int, expected: list, tmp_path: Path):
    """Documents worked out by hand for texts at the edges of the line rules, read whole at
    several read-block sizes and in chunks of every size (every chunk start)."""
    (tmp_path / "c.txt").write_bytes(text)
    options = {"max_document_bytes": limit, "oversize": "truncate"}
    for block in (1, 2, 3, 5, 1 << 20):
        with mock.patch.object(ingest, "READ_BLOCK", block):
            assert [(d.offset, d.text) for d in read_all(tmp_path, "c.txt", **options)[0]] == expected, block
            for chunk_bytes in range(1, len(text) + 1):
                assert [(d.offset, d.text) for d in read_all(tmp_path, "c.txt", chunk_bytes, **options)[0]] == expected, (block, chunk_bytes)


def test_chunk_of_an_empty_file_yields_nothing(tmp_path: Path):
    (tmp_path / "empty.txt").write_bytes(b"")
    documents, tally = read_all(tmp_path, "empty.txt")
    assert documents == [] and tally.read == 0


def write_sized(root: Path, sizes: dict[str, int]) -> list[str]:
    """Files of the given sizes (paragraphs of filler text); returns their names sorted."""
    for name, size in sizes.items():
        (root / name).write_bytes((b"filler words here.\n\n" * (size // 20 + 1))[:size])
    return sorted(sizes)


def packs_of(chunks: list[Chunk]) -> set[tuple[str, ...]]:
    return {c.sources for c in chunks if c.count == 1}


def test_small_files_are_packed_in_path_order_and_larger_ones_stand_alone(tmp_path: Path):
    sizes = {f"small-{i:02d}.txt": 3000 + 700 * i for i in range(30)}
    sizes |= {"mid.txt": 150_000, "big.txt": 450_000}
    sources = write_sized(tmp_path, sizes)
    (tmp_path / "tiny.jsonl.gz").write_bytes(gzip.compress(b'{"text": "a record"}\n'))
    sources = sorted([*sources, "tiny.jsonl.gz"])
    chunks = plan_chunks(tmp_path, sources, 200_000, "paragraph", pack_bytes=100_000)
    assert [s for c in chunks for s in c.sources if c.index == 0] == sources  # every file once, in order
    assert [(c.sources, c.index, c.count) for c in chunks if c.sources == ("big.txt",)] == [(("big.txt",), k, 3) for k in range(3)]
    assert (("mid.txt",), 0, 1) in [(c.sources, c.index, c.count) for c in chunks]
    packs = [c for c in chunks if len(c.sources) > 1]
    assert packs and all(c.key == f"{chunk_key(c.sources[0], 0)}+{len(c.sources) - 1}" for c in packs)
    assert all(c.key == chunk_key(c.sources[0], c.index) for c in chunks if len(c.sources) == 1)
    assert len({c.key for c in chunks}) == len(chunks)
    assert all(sum((tmp_path / s).stat().st_size for s in c.sources) <= 200_000 for c in packs)
    unpacked = plan_chunks(tmp_path, sources, 200_000, "paragraph")
    assert [c.sources for c in unpacked if c.index == 0] == [(s,) for s in sources]


def test_packs_hold_the_pack_size_on_average(tmp_path: Path):
    """A pack ends after a file with probability size / pack size, so the number of packs is
    about total / pack size (2,000 files of 1-20 KB, 21 MB, at 100 KB: about 210 packs)."""
    rng = random.Random(3)
    sources = write_sized(tmp_path, {f"f{i:04d}.txt": rng.randint(1000, 20_000) for i in range(2000)})
    total = sum((tmp_path / s).stat().st_size for s in sources)
    chunks = plan_chunks(tmp_path, sources, 1 << 30, "paragraph", pack_bytes=100_000)
    assert 0.8 < total / len(chunks) / 100_000 < 1.2


@pytest.mark.parametrize("change", ["add", "remove", "resize"])
def test_changing_one_file_changes_only_the_packs_around_it(tmp_path: Path, change: str):
    """Adding, removing or resizing a file replaces at most two packs (its own and the next)
    with at most two new ones holding the same files, give or take that file; the other
    packs stay as they were, so their prepare jobs do not rerun."""
    rng = random.Random(11)
    sizes = {f"f{i:04d}.txt": rng.randint(1000, 20_000) for i in range(0, 800, 2)}
    write_sized(tmp_path, sizes)
    before = packs_of(plan_chunks(tmp_path, sorted(sizes), 1 << 30, "paragraph", pack_bytes=60_000))
    for trial in range(40):
        changed = dict(sizes)
        if change == "add":
            touched = f"f{rng.randrange(0, 800, 2) + 1:04d}.txt"
            changed[touched] = rng.randint(1000, 20_000)
        elif change == "remove":
            touched = rng.choice(sorted(sizes))
            del changed[touched]
        else:
            touched = rng.choice(sorted(sizes))
            changed[touched] = rng.randint(1000, 20_000)
        folder = tmp_path / f"{change}-{trial}"
        folder.mkdir()
        write_sized(folder, changed)
        after = packs_of(plan_chunks(folder, sorted(changed), 1 << 30, "paragraph", pack_bytes=60_000))
        gone, new = before - after, after - before
        assert len(gone) <= 2 and len(new) <= 2
        assert {s for p in gone for s in p} - {touched} == {s for p in new for s in p} - {touched}


def test_a_pack_reads_each_file_whole_in_path_order(tmp_path: Path):
    (tmp_path / "a.txt").write_bytes(b"first one\n\nsecond one\n")
    (tmp_path / "b.jsonl").write_bytes(b'{"text": "a record", "id": "r1"}\n{"text": "another"}\n')
    (tmp_path / "c.txt").write_bytes(b"\xef\xbb\xbfwith a mark\n")
    chunks = plan_chunks(tmp_path, ["a.txt", "b.jsonl", "c.txt"], 1 << 20, "paragraph", pack_bytes=1 << 20)
    assert [c.sources for c in chunks] == [("a.txt", "b.jsonl", "c.txt")]
    tally = Tally()
    documents = list(read_documents(tmp_path, chunks[0], 1 << 20, ReadOptions(), tally))
    assert [(d.doc_id, d.source, d.offset, d.text) for d in documents] == [
        ("a.txt:0", "a.txt", 0, "first one\n"),
        ("a.txt:11", "a.txt", 11, "second one\n"),
        ("r1", "b.jsonl", 0, "a record"),
        ("b.jsonl:33", "b.jsonl", 33, "another"),
        ("c.txt:0", "c.txt", 0, "with a mark\n"),
    ]
    assert tally.read == 5


@pytest.mark.parametrize("pattern", ["../../outside/*.txt", "/etc/*.txt", "a/../../x.txt", ".."])
def test_a_pattern_reaching_outside_the_root_is_refused_naming_it(tmp_path: Path, pattern: str):
    outside = tmp_path / "outside"
    outside.mkdir()
    (outside / "secret.txt").write_text("not for the corpus")
    root = tmp_path / "root" / "inner"
    root.mkdir(parents=True)
    with pytest.raises(CorpusError, match="reaches outside corpus.root"):
        survey_corpus(root, [pattern], [])
    with pytest.raises(CorpusError, match="corpus.exclude pattern"):
        survey_corpus(root, ["*.txt"], [pattern])


def test_links_leading_outside_the_root_are_refused_and_listed_unless_followed(tmp_path: Path):
    """A link to a file or folder outside the root is not read by default and is listed with its
    reason; links inside the root are read; a FIFO and a dangling link are refused too (a FIFO
    would block a reader forever)."""
    outside = tmp_path / "outside"
    (outside / "deep").mkdir(parents=True)
    (outside / "passwd.txt").write_text("root:x:0:0")
    (outside / "deep" / "more.txt").write_text("more")
    root = tmp_path / "root"
    (root / "real").mkdir(parents=True)
    (root / "real" / "kept.txt").write_text("kept")
    (root / "passwd.txt").symlink_to(outside / "passwd.txt")
    (root / "away").symlink_to(outside / "deep")
    (root / "inside.txt").symlink_to(root / "real" / "kept.txt")
    (root / "again").symlink_to(root / "real")  # a second way into a folder inside: not descended
    (root / "dangling.txt").symlink_to(tmp_path / "nothing.txt")
    os.mkfifo(root / "pipe.txt")
    (root / "notes.md").write_text("not selected")
    survey = survey_corpus(root, ["**/*.txt"], [])
    assert survey.sources == ["inside.txt", "real/kept.txt"]
    assert survey.refused == [
        ("dangling.txt", REFUSAL_REASONS["broken_link"]),
        ("passwd.txt", REFUSAL_REASONS["outside_link"]),
        ("pipe.txt", REFUSAL_REASONS["special"]),
    ]
    assert survey.unselected == ["away", "notes.md"]
    followed = survey_corpus(root, ["**/*.txt"], [], follow_outside=True)
    assert followed.sources == ["away/more.txt", "inside.txt", "passwd.txt", "real/kept.txt"]


def test_a_folder_link_loop_ends(tmp_path: Path):
    outside = tmp_path / "outside"
    outside.mkdir()
    (outside / "loop").symlink_to(outside)
    (outside / "a.txt").write_text("a")
    root = tmp_path / "root"
    root.mkdir()
    (root / "out").symlink_to(outside)
    assert survey_corpus(root, ["**/*.txt"], [], follow_outside=True).sources == ["out/a.txt"]


@pytest.mark.parametrize("pattern", ["**/*.txt", "*.txt", "a/*.txt", "**/*.txt.*", "a/**/*.jsonl", "[ab]/*", "?.txt", "**/[!x]*.txt"])
def test_include_patterns_select_what_pathlib_glob_selects(tmp_path: Path, pattern: str):
    """Python's pathlib.Path.glob as the reference for the glob dialect (regular files only)."""
    for name in ["a.txt", "x.txt", "a/b.txt", "a/c/d.txt", "b/e.txt.gz", "a/f.jsonl", "a/c/g.jsonl", "xy.txt", "b/x1.txt"]:
        (tmp_path / name).parent.mkdir(parents=True, exist_ok=True)
        (tmp_path / name).write_text("x")
    expected = sorted(p.relative_to(tmp_path).as_posix() for p in tmp_path.glob(pattern) if p.is_file())
    assert sorted(p for p in survey_corpus(tmp_path, ["**/*"], []).sources if pattern_regex(pattern).fullmatch(p)) == expected
