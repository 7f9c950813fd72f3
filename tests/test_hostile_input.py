"""Hostile input: every nasty file has a documented outcome, never a bare traceback or silent loss.

Outcomes are either a CorpusError naming the file and the byte offset, or a counted drop whose
reason appears in the tally (and so in the manifest's accounting, where
read + pieces_added = kept + sum(dropped)).
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import pyarrow.parquet as pq
import pytest
import regex

from conftest import run_workflow
from corpusmill import settings
from corpusmill.accounting import Tally, merge
from corpusmill.ingest import Chunk, CorpusError, Document, ReadOptions, chunk_key, read_documents
from corpusmill.plan import Plan
from corpusmill.prepare import prepare_chunk
from corpusmill.segment import Segmenter, is_lossless
from tests import hostile

REPO = Path(__file__).resolve().parent.parent
GRAPHEME = regex.compile(r"\X", regex.V1)


def write(root: Path, name: str, data: bytes) -> str:
    root.mkdir(parents=True, exist_ok=True)
    (root / name).write_bytes(data)
    return name


def read(root: Path, name: str, **options: object) -> tuple[list[Document], Tally]:
    """All documents of a one-chunk file, read with the given ReadOptions fields."""
    tally = Tally()
    chunk = Chunk(chunk_key(name, 0), (name,))
    return list(read_documents(root, chunk, 1 << 30, ReadOptions(**options), tally)), tally


def prepare(root: Path, name: str, out: Path, **sections: dict) -> tuple[list[dict], dict]:
    """Run the prepare step on one file; returns its rows in corpus order (the table stores them
    by split and doc_hash) and its tally."""
    config = settings.resolve({"corpus": {"root": str(root), **sections.pop("corpus", {})}, **sections})
    chunk = Chunk(chunk_key(name, 0), (name,))
    table_path, tally_path = out / "prepared.parquet", out / "tally.json"
    prepare_chunk(str(root), chunk, 1 << 30, config, str(table_path), str(tally_path), frozenset())
    return pq.read_table(table_path).sort_by("offset").to_pylist(), json.loads(tally_path.read_text())


def balanced(tally: dict) -> bool:
    """The accounting identity of the manifest: read + pieces_added = kept + sum(dropped)."""
    return tally["read"] + tally["pieces_added"] == tally["kept"] + sum(tally["dropped"].values())


def tokens_of(row: dict) -> list[str]:
    return [token for sentence in row["tokens"] for token in sentence]


# --- invalid UTF-8 under each policy ------------------------------------------------------


@pytest.mark.parametrize("kind", sorted(hostile.INVALID_UTF8))
def test_invalid_utf8_under_stop_names_the_file_and_the_exact_byte_offset(tmp_path: Path, kind: str) -> None:
    """RFC 3629 (UTF-8) §3: each sequence is ill-formed; the offset is where it starts in the file."""
    data, offset = hostile.invalid_utf8_text(kind)
    name = write(tmp_path, f"{kind}.txt", data)
    with pytest.raises(CorpusError) as caught:
        read(tmp_path, name, invalid_utf8="stop")
    message = str(caught.value)
    assert str(tmp_path / name) in message
    assert f"byte offset {offset} " in message
    assert "corpus.invalid_utf8" in message


@pytest.mark.parametrize("kind", sorted(hostile.INVALID_UTF8))
def test_invalid_utf8_under_replace_keeps_the_document_with_u_fffd_and_counts_it(tmp_path: Path, kind: str) -> None:
    """Unicode §3.9 (U+FFFD substitution): the bad bytes become U+FFFD; every document survives."""
    name = write(tmp_path, f"{kind}.txt", hostile.invalid_utf8_text(kind)[0])
    documents, tally = read(tmp_path, name, invalid_utf8="replace")
    assert len(documents) == 3 and tally.read == 3
    assert sum("\ufffd" in d.text for d in documents) == 1
    assert tally.replaced_sequences >= 1
    assert not tally.dropped


@pytest.mark.parametrize("kind", sorted(hostile.INVALID_UTF8))
def test_invalid_utf8_under_drop_removes_only_that_document_and_counts_it(tmp_path: Path, kind: str) -> None:
    """collections.Counter of reasons: exactly one "invalid_utf8" drop; read = returned + dropped."""
    name = write(tmp_path, f"{kind}.txt", hostile.invalid_utf8_text(kind)[0])
    documents, tally = read(tmp_path, name, invalid_utf8="drop")
    assert len(documents) == 2
    assert dict(tally.dropped) == {"invalid_utf8": 1}
    assert tally.read == len(documents) + sum(tally.dropped.values())


def test_an_invalid_byte_after_a_bom_is_reported_at_its_real_file_offset(tmp_path: Path) -> None:
    """The UTF-8 BOM (EF BB BF, Unicode §23.8) is three bytes of the file, so offsets count it."""
    data = b"\xef\xbb\xbfhello \x80 there\n"
    name = write(tmp_path, "bom_bad.txt", data)
    bad = data.index(b"\x80")
    with pytest.raises(CorpusError, match=f"byte offset {bad} "):
        read(tmp_path, name)


# --- control characters, BOM, line ends -----------------------------------------------------


def test_nul_bytes_become_spaces_and_the_document_is_kept(tmp_path: Path) -> None:
    """Unicode general category Cc (NUL is U+0000): control characters never reach a token."""
    name = write(tmp_path, "nul.txt", hostile.NUL_TEXT)
    rows, tally = prepare(tmp_path, name, tmp_path)
    assert tally["kept"] == 1 and balanced(tally)
    assert not any("\x00" in token for token in tokens_of(rows[0]))
    assert tokens_of(rows[0])[:3] == ["Null", "bytes", "sit"]


def test_a_leading_bom_is_removed_and_offsets_stay_file_offsets(tmp_path: Path) -> None:
    """Unicode §23.8: a BOM at the start of a UTF-8 file is a signature, not text."""
    name = write(tmp_path, "bom.txt", hostile.BOM_TEXT)
    documents, _ = read(tmp_path, name)
    assert documents[0].text.startswith("Words")
    assert documents[1].offset == hostile.BOM_TEXT.index(b"A second")


@pytest.mark.parametrize("ending", ["crlf", "lone_cr"])
def test_crlf_and_lone_cr_line_ends_give_the_same_documents_as_lf(tmp_path: Path, ending: str) -> None:
    """Unicode §5.8 (newline guidelines): CR LF, CR and LF are all line ends."""
    data = {"crlf": hostile.CRLF_TEXT, "lone_cr": hostile.CR_TEXT}[ending]
    lf_rows, _ = prepare(tmp_path / "lf", write(tmp_path / "lf", "lf.txt", hostile.LF_TEXT), tmp_path / "lf")
    rows, tally = prepare(tmp_path / ending, write(tmp_path / ending, f"{ending}.txt", data), tmp_path / ending)
    assert [r["tokens"] for r in rows] == [r["tokens"] for r in lf_rows]
    assert len(rows) == 3 and balanced(tally)
    line_end = b"\r\n" if ending == "crlf" else b"\r"
    assert [r["offset"] for r in rows] == [0, data.index(line_end * 2) + 2 * len(line_end), data.index(b"The third")]


# --- size: one huge line, oversize documents ------------------------------------------------


def _peak_rss_mib(root: Path, name: str, work: Path, corpus: dict, monkeypatch: pytest.MonkeyPatch) -> tuple[float, dict]:
    """Peak resident memory (MiB) of the prepare jobs of one file, each run as the workflow runs
    it (`python -m steps.run prepare --build … --chunk …`, measured by wait4(2)): the largest
    over the file's chunks, and the file's tallies merged over them."""
    work.mkdir(parents=True, exist_ok=True)
    monkeypatch.chdir(work)
    plan = Plan.from_config(settings.resolve({"corpus": {"root": str(root), "include": [name], **corpus}, "build_dir": "build"}))
    plan.write_files()
    peak = 0.0
    for key in plan.chunk_keys:
        command = [sys.executable, "-m", "steps.run", "prepare", "--build", "build", "--chunk", key]
        process = subprocess.Popen(command, cwd=work, env={**os.environ, "PYTHONPATH": str(REPO)})
        _, status, usage = os.wait4(process.pid, 0)
        assert status == 0
        peak = max(peak, usage.ru_maxrss / 1024)  # Linux reports KiB
    return peak, merge([json.loads(Path(plan.layout.tally(key)).read_text()) for key in plan.chunk_keys], {})


@pytest.mark.parametrize("oversize", ["truncate", "drop"])
def test_a_single_50_mb_line_is_read_in_bounded_memory(tmp_path: Path, oversize: str, monkeypatch: pytest.MonkeyPatch) -> None:
    """getrusage(2) ru_maxrss of each child: holding the line whole (bytes plus decoded text) would
    take at least 100 MiB over the step's baseline; streaming stays well below that, in the job
    of the chunk where the line starts as in those it runs through."""
    line = hostile.prose(50_000_000).replace(b"\n", b" ") + b"\n"
    big = write(tmp_path / "raw", "one_line.txt", line)
    small = write(tmp_path / "raw", "small.txt", hostile.prose(2_000))
    corpus = {"oversize": oversize}
    baseline, _ = _peak_rss_mib(tmp_path / "raw", small, tmp_path / "small", corpus, monkeypatch)
    peak, tally = _peak_rss_mib(tmp_path / "raw", big, tmp_path / "big", corpus, monkeypatch)
    assert peak - baseline < 100, f"peak {peak:.0f} MiB vs baseline {baseline:.0f} MiB"
    assert tally["read"] == 1 and balanced(tally)
    assert tally["truncated" if oversize == "truncate" else "dropped"] in (1, {"oversize": 1})


OVERSIZE_TEXT = ("Cafe\u0301 \U0001f1f3\U0001f1f4 " + hostile.ZWJ_FAMILY + " na\u0308ive. ") * 200


def _grapheme_starts(text: str) -> set[int]:
    return {m.start() for m in GRAPHEME.finditer(text)} | {len(text)}


def test_oversize_split_cuts_at_grapheme_boundaries_into_pieces_under_the_limit(tmp_path: Path) -> None:
    """UAX #29 extended grapheme clusters (regex \\X): no piece ends inside a cluster."""
    name = write(tmp_path, "big.txt", OVERSIZE_TEXT.encode("utf-8"))
    documents, tally = read(tmp_path, name, max_document_bytes=1000, oversize="split")
    assert "".join(d.text for d in documents) == OVERSIZE_TEXT
    assert all(len(d.text.encode("utf-8")) <= 1000 for d in documents)
    boundaries, position = _grapheme_starts(OVERSIZE_TEXT), 0
    for document in documents:
        position += len(document.text)
        assert position in boundaries
    assert tally.read == 1 and tally.pieces_added == len(documents) - 1 > 0
    assert [d.offset for d in documents[1:]] == [sum(len(d.text.encode("utf-8")) for d in documents[:i]) for i in range(1, len(documents))]


def test_oversize_truncate_keeps_a_grapheme_whole_prefix_and_counts_it(tmp_path: Path) -> None:
    """UAX #29 extended grapheme clusters: the prefix ends on a cluster boundary."""
    name = write(tmp_path, "big.txt", OVERSIZE_TEXT.encode("utf-8"))
    documents, tally = read(tmp_path, name, max_document_bytes=1000, oversize="truncate")
    [document] = documents
    assert OVERSIZE_TEXT.startswith(document.text) and len(document.text.encode("utf-8")) <= 1000
    assert len(document.text) in _grapheme_starts(OVERSIZE_TEXT)
    assert (tally.read, tally.truncated, tally.pieces_added) == (1, 1, 0)


def test_oversize_drop_removes_the_document_and_counts_it(tmp_path: Path) -> None:
    """collections.Counter of reasons: one "oversize" drop, the small neighbour kept."""
    name = write(tmp_path, "big.txt", OVERSIZE_TEXT.encode("utf-8") + b"\n\nA small neighbour.\n")
    documents, tally = read(tmp_path, name, max_document_bytes=1000, oversize="drop")
    assert [d.text for d in documents] == ["A small neighbour.\n"]
    assert tally.read == 2 and dict(tally.dropped) == {"oversize": 1}


def test_a_cluster_longer_than_the_limit_is_cut_between_code_points_not_inside_one(tmp_path: Path) -> None:
    """RFC 3629: a piece must stay valid UTF-8 even when one cluster (Zalgo text) fills the limit."""
    text = "a" + "\u20d0" * 2000  # 1 + 3 * 2000 bytes, one grapheme cluster
    name = write(tmp_path, "zalgo.txt", text.encode("utf-8"))
    documents, tally = read(tmp_path, name, max_document_bytes=1001, oversize="split")
    assert "".join(d.text for d in documents) == text
    assert tally.pieces_added == len(documents) - 1 and not tally.dropped


@pytest.mark.parametrize("policy", ["split", "truncate", "drop"])
def test_an_oversize_jsonl_record_is_dropped_under_every_policy(tmp_path: Path, policy: str) -> None:
    """JSON (RFC 8259) cannot be cut: the record is counted "oversize", the next one still read."""
    data = hostile.jsonl({"text": "x " * 2000}, {"text": "small record"})
    name = write(tmp_path, "big.jsonl", data)
    documents, tally = read(tmp_path, name, max_document_bytes=1000, oversize=policy)
    assert [d.text for d in documents] == ["small record"]
    assert dict(tally.dropped) == {"oversize": 1} and tally.read == 2


# --- empty input, binary input ---------------------------------------------------------------


@pytest.mark.parametrize("data", [b"", b" \n\t\n   \r\n\n"], ids=["empty", "whitespace"])
def test_empty_and_whitespace_only_files_hold_no_documents(tmp_path: Path, data: bytes) -> None:
    """Blank lines separate paragraphs and are no document (text_unit = paragraph)."""
    name = write(tmp_path, "blank.txt", data)
    rows, tally = prepare(tmp_path, name, tmp_path)
    assert rows == [] and tally["read"] == 0 and balanced(tally)


def test_a_whitespace_only_document_is_dropped_as_empty(tmp_path: Path) -> None:
    """collections.Counter of reasons: whole-file and JSONL documents of blanks count as "empty"."""
    write(tmp_path, "blank.txt", b"  \n\t \n")
    rows, tally = prepare(tmp_path, "blank.txt", tmp_path, corpus={"text_unit": "file"})
    assert rows == [] and tally["dropped"] == {"empty": 1} and balanced(tally)
    write(tmp_path, "blank.jsonl", hostile.jsonl({"text": "   \n  "}, {"text": "Words are here."}))
    rows, tally = prepare(tmp_path, "blank.jsonl", tmp_path)
    assert len(rows) == 1 and tally["dropped"] == {"empty": 1} and balanced(tally)


def test_a_binary_file_named_txt_stops_at_its_first_invalid_byte(tmp_path: Path) -> None:
    """PNG signature (RFC 2083 §12.11): byte 0x89 is not UTF-8, so offset 0 is named."""
    name = write(tmp_path, "picture.txt", hostile.binary_bytes())
    with pytest.raises(CorpusError, match=r"picture\.txt: invalid UTF-8 at byte offset 0 "):
        read(tmp_path, name)


def test_a_binary_file_named_txt_under_drop_is_counted_and_keeps_nothing(tmp_path: Path) -> None:
    """collections.Counter of reasons: every document of the file is an "invalid_utf8" drop."""
    name = write(tmp_path, "picture.txt", hostile.binary_bytes())
    rows, tally = prepare(tmp_path, name, tmp_path, corpus={"invalid_utf8": "drop"})
    assert rows == [] and tally["read"] >= 1 and set(tally["dropped"]) == {"invalid_utf8"} and balanced(tally)


def test_a_binary_file_under_replace_is_filtered_as_few_letters_not_kept(tmp_path: Path) -> None:
    """Common practice: text with a small share of letters is not language; it is counted, not kept."""
    name = write(tmp_path, "picture.txt", hostile.binary_bytes())
    rows, tally = prepare(tmp_path, name, tmp_path, corpus={"invalid_utf8": "replace"})
    assert rows == [] and balanced(tally) and tally["replaced_sequences"] > 0
    assert set(tally["dropped"]) <= {"few_letters", "too_short", "empty"}


# --- compressed input ------------------------------------------------------------------------


@pytest.mark.parametrize("codec", [".gz", ".zst", ".bz2", ".xz"])
def test_a_truncated_compressed_file_stops_with_a_damaged_file_error(tmp_path: Path, codec: str) -> None:
    """RFC 1952 (gzip), RFC 8878 (zstd), bzip2 and xz formats: the stream has no end marker."""
    packed = hostile.compress(hostile.prose(200_000), codec)
    name = write(tmp_path, f"cut.txt{codec}", packed[: len(packed) // 2])
    with pytest.raises(CorpusError) as caught:
        read(tmp_path, name)
    assert str(tmp_path / name) in str(caught.value)
    assert "damaged or truncated" in str(caught.value)


def test_concatenated_zstd_frames_are_all_read(tmp_path: Path) -> None:
    """RFC 8878 §3.1: a zstd file may hold several frames, decoded one after another."""
    first, second = b"First frame paragraph.\n\n", b"Second frame paragraph.\n"
    name = write(tmp_path, "two.txt.zst", hostile.compress(first, ".zst") + hostile.compress(second, ".zst"))
    documents, _ = read(tmp_path, name)
    assert [d.text for d in documents] == [first.decode().rstrip("\n") + "\n", second.decode()]


# --- JSON Lines ------------------------------------------------------------------------------

BROKEN = hostile.jsonl({"text": "A good first record."}) + b'{"text": "no closing brace"\n' + hostile.jsonl({"text": "A good last one."})


def test_a_broken_jsonl_line_under_stop_names_the_file_and_its_byte_offset(tmp_path: Path) -> None:
    """JSON Lines: one JSON value per line; the offset is the start of the broken line."""
    name = write(tmp_path, "broken.jsonl", BROKEN)
    offset = BROKEN.index(b'{"text": "no closing')
    with pytest.raises(CorpusError) as caught:
        read(tmp_path, name)
    assert f"broken.jsonl: record at byte offset {offset}: not valid JSON" in str(caught.value)
    assert "corpus.bad_records" in str(caught.value)


@pytest.mark.parametrize(
    "line",
    [b'{"text": "no closing brace"', b'{"n": ' + b"9" * 5000 + b"}", b"[" * 50_000, b"\xff{}"],
    ids=["unclosed", "5000-digit-number", "nested-50000-deep", "not-utf8-under-replace"],
)
def test_unreadable_jsonl_lines_under_drop_are_counted_as_bad_json(tmp_path: Path, line: bytes) -> None:
    """Python json module limits (int digits, recursion depth) surface as a counted drop, not a traceback."""
    data = hostile.jsonl({"text": "Good."}) + line + b"\n"
    name = write(tmp_path, "bad.jsonl", data)
    documents, tally = read(tmp_path, name, bad_records="drop", invalid_utf8="replace")
    assert [d.text for d in documents] == ["Good."]
    assert dict(tally.dropped) == {"bad_json": 1}


@pytest.mark.parametrize(
    "record",
    [{"body": "missing"}, {"text": 42}, {"text": None}, {"text": ["a", "b"]}, [1, 2], "a bare string"],
    ids=["missing", "number", "null", "list", "array-record", "string-record"],
)
def test_a_missing_or_non_string_text_field_is_an_error_or_a_no_text_drop(tmp_path: Path, record: object) -> None:
    """RFC 8259 value types: only a JSON string is text."""
    name = write(tmp_path, "fields.jsonl", hostile.jsonl(record, {"text": "Fine."}))
    with pytest.raises(CorpusError, match=r"fields\.jsonl: record at byte offset 0: no string field 'text'"):
        read(tmp_path, name)
    documents, tally = read(tmp_path, name, bad_records="drop")
    assert [d.text for d in documents] == ["Fine."] and dict(tally.dropped) == {"no_text": 1}


@pytest.mark.parametrize("policy", ["stop", "replace", "drop"])
def test_an_escaped_lone_surrogate_in_jsonl_follows_the_invalid_utf8_policy(tmp_path: Path, policy: str) -> None:
    """RFC 8259 §8.2: "\\ud800" parses to a lone surrogate, which no UTF-8 text may hold."""
    name = write(tmp_path, "s.jsonl", b'{"id": "\\udfff", "text": "lone \\ud800 escape"}\n')
    if policy == "stop":
        with pytest.raises(CorpusError, match=r"s\.jsonl: record at byte offset 0: .*lone surrogate escape \\ud800"):
            read(tmp_path, name, invalid_utf8=policy)
        return
    documents, tally = read(tmp_path, name, invalid_utf8=policy)
    if policy == "drop":
        assert documents == [] and dict(tally.dropped) == {"invalid_utf8": 1}
    else:
        [document] = documents
        assert document.text == "lone \ufffd escape" and tally.replaced_sequences == 1
        assert document.doc_id == "s.jsonl:0"  # an id that is not text falls back to path:offset
        rows, prepared = prepare(tmp_path, name, tmp_path, corpus={"invalid_utf8": "replace"})
        assert len(rows) == 1 and balanced(prepared)


# --- Unicode that is valid but tricky ------------------------------------------------------


def test_bidi_controls_are_removed_and_the_words_around_them_kept(tmp_path: Path) -> None:
    """Unicode UAX #9 explicit directional formatting characters (general category Cf)."""
    name = write(tmp_path, "bidi.txt", hostile.BIDI_TEXT.encode("utf-8"))
    rows, _ = prepare(tmp_path, name, tmp_path)
    tokens = tokens_of(rows[0])
    assert "amount" in tokens and "isolated" in tokens and "here" in tokens
    assert not any(regex.search(r"\p{Bidi_Control}", t) for t in tokens)


@pytest.mark.parametrize("words", ["uax29", "pattern"])
def test_a_long_run_of_combining_marks_stays_one_lossless_token(tmp_path: Path, words: str) -> None:
    """UAX #29 grapheme rule GB9 (× Extend): marks attach to their base letter; UAX #15 §13
    (Stream-Safe Text Format): a U+034F joiner follows every 30 marks, so NFC stays linear."""
    name = write(tmp_path, "zalgo.txt", hostile.combining_run(4000).encode("utf-8"))
    rows, tally = prepare(tmp_path, name, tmp_path, segment={"words": words})
    [zalgo] = [t for t in tokens_of(rows[0]) if len(t) > 1000]
    assert tally["kept"] == 1
    assert zalgo[0] == "\u00e9"  # NFC composes e + U+0301, the first mark
    assert len(zalgo.replace("\u034f", "")) == 4000 and zalgo.count("\u034f") == 3999 // 30


@pytest.mark.parametrize("words", ["uax29", "pattern"])
def test_zwj_emoji_sequences_are_single_tokens(tmp_path: Path, words: str) -> None:
    """UTS #51 emoji ZWJ sequences and UAX #29 rule WB3c: the joiner keeps the sequence whole."""
    name = write(tmp_path, "zwj.txt", hostile.ZWJ_TEXT.encode("utf-8"))
    rows, _ = prepare(tmp_path, name, tmp_path, segment={"words": words})
    tokens = tokens_of(rows[0])
    assert hostile.ZWJ_FAMILY in tokens and hostile.ZWJ_RAINBOW_FLAG in tokens


@pytest.mark.parametrize("words", ["uax29", "pattern"])
def test_several_scripts_in_one_document_are_tokenized_losslessly(tmp_path: Path, words: str) -> None:
    """UAX #29 word boundaries across Latin, Cyrillic, Greek, Arabic, Han, Devanagari, Thai, kana, Hebrew."""
    name = write(tmp_path, "scripts.txt", hostile.SCRIPTS_TEXT.encode("utf-8"))
    rows, tally = prepare(tmp_path, name, tmp_path, segment={"words": words})
    assert tally["kept"] == 1
    tokens = tokens_of(rows[0])
    assert is_lossless(hostile.SCRIPTS_TEXT, tokens)
    for word in ("русские", "ελληνικές", "עברית"):
        assert word in tokens
    assert Segmenter(words_mode=words).tokens("中文的字") != []


# --- one full run over the whole hostile corpus ------------------------------------------------


def test_the_workflow_builds_the_hostile_corpus_under_lenient_policies_and_balances(tmp_path: Path) -> None:
    """The real workflow (snakemake) end to end; `corpusmill audit` as the independent check."""
    raw = tmp_path / "raw"
    hostile.write_hostile_corpus(raw)
    override = tmp_path / "over.yaml"
    override.write_text(json.dumps({"corpus": {"root": str(raw), "invalid_utf8": "replace", "bad_records": "drop"}}))
    run = subprocess.run(
        [sys.executable, "-m", "snakemake", "--snakefile", str(REPO / "Snakefile"), "--directory", str(tmp_path),
         "--cores", "2", "--configfile", str(override), "--quiet"],
        capture_output=True, text=True, timeout=600,
    )  # fmt: skip
    assert run.returncode == 0, run.stderr[-3000:]
    accounting = json.loads((tmp_path / "build" / "manifest.json").read_text())["accounting"]
    assert accounting["balanced"] is True
    assert {"bad_json", "no_text", "empty"} <= set(accounting["dropped"])
    assert accounting["replaced_sequences"] >= len(hostile.INVALID_UTF8)
    audit = subprocess.run([sys.executable, "-m", "corpusmill.cli", "audit", str(tmp_path / "build")], cwd=REPO, capture_output=True, text=True)
    assert audit.returncode == 0, audit.stdout + audit.stderr


# --- document ids ---------------------------------------------------------------------------------


def _jsonl(path: Path, records: list[tuple[str, str]]) -> None:
    path.write_text("".join(json.dumps({"id": i, "text": t}) + "\n" for i, t in records), encoding="utf-8")


def test_one_id_for_two_documents_stops_the_run_naming_both_places(tmp_path: Path) -> None:
    """Across files and inside one file: the run stops in the deduplicate job with each repeated
    id and the file and byte offset of both documents; with corpus.repeated_ids: by_file, ids
    become path#id and the build passes, while a repeat inside one file still stops it."""
    root = tmp_path / "raw"
    root.mkdir()
    _jsonl(root / "a.jsonl", [("n1", "The lantern keeper wrote daily notes."), ("n2", "The harbour froze early that winter.")])
    _jsonl(root / "b.jsonl", [("n1", "A different document that reuses the first id."), ("n3", "Gulls circled the pier at noon.")])
    run = run_workflow(tmp_path / "one", {"corpus": {"root": str(root)}}, check=False)
    assert run.returncode != 0
    assert "1 document id(s) name more than one document: 'n1' at a.jsonl byte 0 and b.jsonl byte 0" in run.stderr
    assert not (tmp_path / "one" / "build" / "manifest.json").exists()
    run_workflow(tmp_path / "two", {"corpus": {"root": str(root), "repeated_ids": "by_file"}})
    doc_ids = sorted(d for p in (tmp_path / "two" / "build").glob("shards/*/stream-*.parquet") for d in pq.read_table(p)["doc_id"].to_pylist())
    assert doc_ids == ["a.jsonl#n1", "a.jsonl#n2", "b.jsonl#n1", "b.jsonl#n3"]
    _jsonl(root / "b.jsonl", [("n3", "Gulls circled the pier at noon."), ("n3", "A second record with the same id.")])
    run = run_workflow(tmp_path / "two", {"corpus": {"root": str(root), "repeated_ids": "by_file"}}, check=False)
    assert run.returncode != 0 and "'b.jsonl#n3' at b.jsonl byte 0 and b.jsonl byte" in run.stderr
    assert "ids repeat inside one file" in run.stderr
