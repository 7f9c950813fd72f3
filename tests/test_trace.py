"""`corpusmill trace` on documents that are not whole paragraphs: the pieces of an oversize
document (`corpus.oversize: split`), lines (`corpus.text_unit: line`) and whole files
(`text_unit: file`). Every traced row's documents must quote exactly the input bytes the build
read for them.

Outside reference: the input files' bytes, cut in the test by the documented rules (README,
"Documents and ids"): a paragraph ends at a blank line, a line at its LF, CRLF or lone CR, a
file at its end, and a piece at the next piece's recorded offset. The corpora are ASCII
letters, punctuation, spaces and line ends, which the cleaner only folds as whitespace
(steps.clean: LF line ends, single spaces), so the expected words are the raw bytes split at
whitespace; no project code computes them.
"""

from __future__ import annotations

import json
import random
from collections import defaultdict
from pathlib import Path

import pyarrow.parquet as pq
import pytest

from conftest import run_workflow, scenario
from corpusmill.trace import trace_row

WORDS = (
    "harbour ferry lantern copper meadow river signal winter kettle stone tide quay barrel clerk ledger rope gull "
    "anchor beacon cargo dinghy estuary fathom gangway hawser inlet jetty keel mooring netting oar pier rudder "
    "shoal tiller wharf yardarm bosun compass drizzle ebb flood galley hull island"
).split()
LIMIT = 2048  # corpus.max_document_bytes of every build here (the block-rows scenario's value)


def sentence(rng: random.Random) -> str:
    return " ".join(rng.choice(WORDS) for _ in range(rng.randint(4, 11))).capitalize() + rng.choice(".!?")


def paragraph(rng: random.Random) -> str:
    return " ".join(sentence(rng) for _ in range(rng.randint(1, 4)))


def wrapped(rng: random.Random, size: int, width: int | None) -> str:
    """About `size` bytes of sentences in lines: of `width` bytes each, line end included
    (words cut anywhere), or hard-wrapped at word ends to 40-90 characters."""
    text = ""
    while len(text) < size:
        text += sentence(rng) + " "
    if width is not None:
        return "".join(text[k : k + width - 1] + "\n" for k in range(0, size, width - 1))
    lines, line = [], ""
    for word in text.split():
        if len(line) + len(word) > rng.randint(40, 90):
            lines.append(line)
            line = ""
        line = f"{line} {word}" if line else word
    return "\n".join([*lines, line]) + "\n"


# --- the independent expectation ----------------------------------------------------------------


def natural_end(data: bytes, offset: int, unit: str) -> int:
    """Where the document starting at `offset` ends by its unit's rule, before any size cut."""
    if unit == "file":
        return len(data)
    end = offset
    for line in data[offset:].splitlines(keepends=True):  # bytes: LF, CRLF and lone CR
        if unit == "paragraph" and not line.strip():
            break
        end += len(line)
        if unit == "line":
            break
    return end


def recorded_documents(build: Path) -> dict[str, list[int]]:
    """Every document's offset, by input file, from the document tables of every split."""
    offsets = defaultdict(set)
    for path in (build / "provenance").rglob("documents-*.parquet"):
        for row in pq.read_table(path, columns=["source", "offset"]).to_pylist():
            offsets[row["source"]].add(row["offset"])
    return {source: sorted(found) for source, found in offsets.items()}


def expected_ranges(build: Path, root: Path, unit: str) -> dict[tuple[str, int], tuple[int, int]]:
    """(source, offset) → the byte range the document holds: to its unit's end, or to the next
    recorded offset when that comes first (the next piece of a split document)."""
    ranges = {}
    for source, offsets in recorded_documents(build).items():
        data = (root / source).read_bytes()
        for offset, following in zip(offsets, [*offsets[1:], len(data)]):
            ranges[(source, offset)] = (offset, min(natural_end(data, offset, unit), following))
    return ranges


def rows_to_trace(build: Path, seed: int) -> list[tuple[str, str, str, int]]:
    """(split, kind, file, row): every stream row (one per document), and the first, last and a
    few seeded random rows of every n-gram and block file."""
    manifest = json.loads((build / "manifest.json").read_text())
    chosen, rng = [], random.Random(seed)
    for split, figures in manifest["splits"].items():
        for entry in figures["shards"]:
            rows = entry["rows"]
            if not rows:
                continue
            picked = range(rows) if entry["kind"] == "stream" else sorted({0, rows - 1, *(rng.randrange(rows) for _ in range(6))})
            chosen += [(split, entry["kind"], entry["file"], row) for row in picked]
    return chosen


def assert_traced_text_is_the_documents_bytes(build: Path, root: Path, unit: str, seed: int) -> tuple[set[tuple[str, str]], set[tuple[str, int]]]:
    """Trace the rows and compare every document's sentences, word for word, with its bytes;
    returns the (split, kind) pairs and the documents traced."""
    ranges = expected_ranges(build, root, unit)
    kinds, traced_documents = set(), set()
    for split, kind, file, row in rows_to_trace(build, seed):
        traced = trace_row(build, file, row)
        documents = traced.documents
        for document, sentences in traced.texts.items():
            key = (documents.sources[document], documents.offsets[document])
            start, end = ranges[key]
            expected = (root / key[0]).read_bytes()[start:end].decode("ascii").split()
            assert " ".join(s.text for s in sentences).split() == expected, (file, row, key)
            traced_documents.add(key)
        kinds.add((split, kind))
    return kinds, traced_documents


EVERY_SPLIT_AND_KIND = {(split, kind) for split in ("train", "dev", "test") for kind in ("ngram", "block", "stream")}


# --- oversize documents split into pieces -------------------------------------------------------


@pytest.fixture(scope="module")
def pieces_build(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, Path, dict[str, tuple[int, int]]]:
    """Paragraphs around two of about 6 KB: one in lines of 89 bytes (23 of them make 2047
    bytes, so a cut can fall on a line start), one hard-wrapped at word ends. Returns the build,
    the corpus and each long paragraph's byte range by file."""
    directory = tmp_path_factory.mktemp("pieces")
    root = directory / "corpus"
    root.mkdir()
    rng = random.Random(7)
    long_ranges = {}
    for name, width, around in (("a.txt", 89, 40), ("b.txt", None, 30)):
        long = wrapped(rng, 6000, width).rstrip("\n")
        text = "\n\n".join([paragraph(rng) for _ in range(around)] + [long] + [paragraph(rng) for _ in range(around)]) + "\n"
        (root / name).write_text(text, encoding="utf-8")
        start = text.index(long)
        long_ranges[name] = (start, start + len(long) + 1)  # ASCII: characters are bytes; the line end included
    run_workflow(directory, scenario("block-rows", {"corpus": {"root": str(root), "max_document_bytes": LIMIT}}))
    return directory / "build", root, long_ranges


def test_every_piece_of_a_split_document_traces_to_its_own_bytes(pieces_build: tuple[Path, Path, dict[str, tuple[int, int]]]) -> None:
    """Each piece quotes the bytes from its recorded offset to the next piece's (the last: to
    the blank line). The pieces of each long paragraph tile it, at most max_document_bytes
    each; some start mid-line, some on a line start; every one was traced."""
    build, root, long_ranges = pieces_build
    kinds, traced = assert_traced_text_is_the_documents_bytes(build, root, "paragraph", seed=1)
    assert kinds == EVERY_SPLIT_AND_KIND
    ranges = expected_ranges(build, root, "paragraph")
    line_starts = set()
    for source, (begin, end) in long_ranges.items():
        pieces = sorted(ranges[key] for key in ranges if key[0] == source and begin <= key[1] < end)
        assert len(pieces) >= 3 and pieces[0][0] == begin and pieces[-1][1] == end
        assert all(a[1] == b[0] for a, b in zip(pieces, pieces[1:])) and all(stop - start <= LIMIT for start, stop in pieces)
        assert {(source, start) for start, _ in pieces} <= traced
        data = (root / source).read_bytes()
        line_starts |= {data[start - 1 : start] == b"\n" for start, _ in pieces[1:]}
    assert line_starts == {True, False}


# --- lines and whole files as documents ---------------------------------------------------------


def write_lines_corpus(root: Path) -> None:
    """LF lines with blank and space-only lines between some, lines starting with spaces; a file
    mixing LF, CRLF and lone CR line ends; one line of about 5 KB, cut into pieces."""
    rng = random.Random(11)
    lines = []
    for _ in range(60):
        lines.append(rng.choice(["", "   ", "  " + sentence(rng)]) if rng.random() < 0.2 else sentence(rng))
    (root / "lines.txt").write_text("\n".join(lines) + "\n", encoding="utf-8")
    mixed = "".join(sentence(rng) + rng.choice(["\n", "\r\n", "\r"]) for _ in range(40))
    long = " ".join(sentence(rng) for _ in range(90))
    (root / "mixed.txt").write_bytes((mixed + long + "\r\n" + sentence(rng) + "\r").encode("ascii"))


def write_files_corpus(root: Path) -> None:
    """Twenty small files of one to three paragraphs (one with CRLF line ends, one starting with
    blank lines) and one of about 6 KB in lines of 89 bytes, cut into pieces on line starts."""
    rng = random.Random(13)
    for number in range(20):
        text = "\n\n".join(paragraph(rng) for _ in range(rng.randint(1, 3))) + "\n"
        text = text.replace("\n", "\r\n") if number == 3 else "\n\n" + text if number == 5 else text
        (root / f"note-{number:02d}.txt").write_bytes(text.encode("ascii"))
    (root / "long.txt").write_text(wrapped(rng, 6000, 89), encoding="utf-8")


@pytest.mark.parametrize("unit", ["line", "file"])
def test_rows_of_line_and_file_documents_trace_to_the_line_or_the_whole_file(tmp_path: Path, unit: str) -> None:
    """A line document quotes exactly its line (to its LF, CRLF or lone CR), a file document
    the whole file; a piece of an oversize line or file quotes its bytes up to the next piece.
    Rows of every split and kind are traced, pieces among them."""
    root = tmp_path / "corpus"
    root.mkdir()
    (write_lines_corpus if unit == "line" else write_files_corpus)(root)
    run_workflow(tmp_path, scenario("wide-held-out-splits", {"corpus": {"root": str(root), "text_unit": unit, "max_document_bytes": LIMIT}}))
    build = tmp_path / "build"
    kinds, traced = assert_traced_text_is_the_documents_bytes(build, root, unit, seed=3)
    assert kinds == EVERY_SPLIT_AND_KIND
    ranges = expected_ranges(build, root, unit)
    pieces = {key for key, (start, end) in ranges.items() if end < natural_end((root / key[0]).read_bytes(), start, unit)}
    assert len(pieces) >= 2 and pieces <= traced
    if unit == "file":
        assert {source for source, offset in traced if offset == 0} == {p.name for p in root.iterdir()}
        assert all((root / source).read_bytes()[offset - 1 : offset] == b"\n" for source, offset in traced if offset)
