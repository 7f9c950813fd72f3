"""Formats (steps/formats.py): vocabulary.tsv and its escaping, the ids digest, shard schemas and
metadata, and the statistics records the steps hand each other.

Every file of a build is written by one function and read by one function here; these tests hold
the writers and the readers (the vocabulary step, the shard job, steps.reader, audit, cutoffs)
to the same text. Outside references are named in each test: sentencepiece for piece names,
hashlib for digests, pyarrow's Parquet reader for schemas and metadata, plain str methods for
the escaping.
"""

from __future__ import annotations

import dataclasses
import hashlib
import io
import json
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
import sentencepiece as spm
from hypothesis import given
from hypothesis import strategies as st

from conftest import DEMO, run_workflow, scenario
from corpusmill.audit import audit_build
from corpusmill.cutoffs import WordList
from corpusmill.formats import (
    METADATA_KEY,
    RESERVED,
    VOCABULARY_HEADER,
    Figures,
    FormatError,
    NgramTotals,
    ShardFile,
    ShardStats,
    Vocabulary,
    escape,
    file_sha256,
    id_type_name,
    read_ids_table,
    read_ngram_totals,
    read_shard_stats,
    read_vocabulary,
    shard_metadata,
    shard_schema,
    unescape,
    write_ids_table,
    writing_ngram_totals,
)
from corpusmill.reader import open_build
from corpusmill.subword import trainer_options

# The symbol ids of a word build with unknown = shape (README, "Vocabulary").
RESERVED_WITH_CLASSES = {
    "<pad>": 0, "<unk>": 1, "<s>": 2, "</s>": 3,
    "<unk-digits>": 4, "<unk-hyphenated>": 5, "<unk-upper>": 6, "<unk-title>": 7, "<unk-symbol>": 8,
}  # fmt: skip
# Pieces holding every character the file format escapes, pieces that look like escapes, and
# CSV quoting that must stay plain text.
ODD_PIECES = ["a\tb", "x\ny", "r\rs", "\\", "a\\tb", "\\\\n", "\t", "\n", "\\t\t", '"', '"q""', "null"]


def reference_escape(piece: str) -> str:
    """The escaping vocabulary.tsv documents, written with str.replace (backslash first)."""
    return piece.replace("\\", "\\\\").replace("\t", "\\t").replace("\n", "\\n").replace("\r", "\\r")


def piece_vocabulary(pieces: list[str]) -> Vocabulary:
    tokens = ["<pad>", "<unk>", "<s>", "</s>", "<0x09>", *pieces]
    return Vocabulary(tokens, list(range(len(tokens))), ["control"] * 4 + ["byte"] + ["piece"] * len(pieces))


# --- vocabulary.tsv ------------------------------------------------------------------------------


@given(piece=st.text(st.characters(exclude_categories=("Cs",)), max_size=30) | st.text("\\tnr\t\n\r", max_size=12))
def test_escaping_is_the_documented_one_and_unescaping_undoes_it(piece: str) -> None:
    """str.replace as the reference escaping; the escaped field holds no tab, line feed or
    carriage return, so a TSV row stays one line of four fields."""
    field = escape(piece)
    assert field == reference_escape(piece)
    assert not {"\t", "\n", "\r"} & set(field)
    assert unescape(field) == piece


def test_pieces_holding_tabs_line_breaks_and_backslashes_read_back_as_written(tmp_path: Path) -> None:
    """The bytes of the file split by hand (b"\\n" rows, b"\\t" fields): one row per id, the
    documented escapes in the token field; read_vocabulary gives back the pieces, a tab as a
    tab (a former reader gave the two characters backslash and t)."""
    vocabulary = piece_vocabulary(ODD_PIECES)
    path = tmp_path / "vocabulary.tsv"
    path.write_text(vocabulary.to_tsv(), encoding="utf-8")
    lines = path.read_bytes().split(b"\n")
    assert lines[0] == VOCABULARY_HEADER.encode() and lines[-1] == b""
    rows = [line.split(b"\t") for line in lines[1:-1]]
    assert [len(row) for row in rows] == [4] * vocabulary.size
    assert [row[1].decode() for row in rows] == [reference_escape(t) for t in vocabulary.tokens]
    assert [(int(row[0]), int(row[2]), row[3].decode()) for row in rows] == list(zip(range(vocabulary.size), vocabulary.counts, vocabulary.kinds))
    assert rows[5][1] == b"a\\tb" and rows[9][1] == b"a\\\\tb"
    again = read_vocabulary(path)
    assert again == vocabulary
    assert again.tokens[5] == "a\tb" and again.tokens[9] == "a\\tb"


def test_a_vocabulary_without_ids_is_its_header_line() -> None:
    """No id, no line but the header (the lines are joined only when there are some)."""
    assert Vocabulary([], [], []).to_tsv() == VOCABULARY_HEADER + "\n"


def test_word_tokens_are_written_and_read_verbatim(tmp_path: Path) -> None:
    """Word fields are never escaped (segmented words hold no tab or line break): a backslash
    in a word stays one backslash in the file and in the token read back."""
    words = ["back\\slash", "a\\tb", "\\n", '"', "null"]
    vocabulary = Vocabulary(["<pad>", "<unk>", "<s>", "</s>", *words], [0, 1, 2, 3, 9, 8, 7, 6, 5], ["reserved"] * 4 + ["word"] * 5)
    path = tmp_path / "vocabulary.tsv"
    path.write_text(vocabulary.to_tsv(), encoding="utf-8")
    assert [line.split("\t")[1] for line in path.read_text(encoding="utf-8").split("\n")[5:-1]] == words
    assert read_vocabulary(path).tokens[4:] == words


@pytest.mark.parametrize(
    ("tokens", "kinds", "symbols", "first_word", "unknown", "units"),
    [
        (["<pad>", "<unk>", "<s>", "</s>", "<unk-digits>", "a", "b"], ["reserved"] * 4 + ["unknown", "word", "word"], [0, 1, 2, 3, 4], 5,
         {"<unk>": 1, "<unk-digits>": 4}, "word"),
        (["<pad>", "<unk>", "<s>", "</s>", "<0x09>", "a\tb", "<ctl>", "\\"], ["control"] * 4 + ["byte", "piece", "control", "piece"],
         [0, 1, 2, 3, 6], 4, {"<unk>": 1}, "subword"),
        (["<pad>", "<s>", "</s>", "x", "<unk>"], ["control"] * 3 + ["piece", "piece"], [0, 1, 2], 3, {"<unk>": 4}, "subword"),
        (["<pad>", "<unk>"], ["reserved", "reserved"], [0, 1], 2, {"<unk>": 1}, "word"),
        (["<pad>", "<s>", "</s>", "x"], ["control"] * 3 + ["piece"], [0, 1, 2], 3, {}, "subword"),
        (["<unk>", "<s>", "</s>", "x"], ["piece", "control", "control", "piece"], [1, 2], 0, {"<unk>": 0}, "subword"),
    ],
)  # fmt: skip
def test_what_read_vocabulary_works_out_from_its_columns_is_what_the_rows_say(
    tmp_path: Path, tokens: list[str], kinds: list[str], symbols: list[int], first_word: int, unknown: dict[str, int], units: str
) -> None:
    """The symbols (kinds reserved, unknown and control), the first id that is not one, the ids
    unknown text maps to and the units, written out by hand for each vocabulary; read_vocabulary
    and read_ids_table work them out from the file's Arrow columns without making a Python list
    of every token or kind (what a shard job asks for), a Vocabulary made from lists from its
    lists: all give these. A control piece may stand among the pieces, and an <unk> piece is
    still where unknown text goes."""
    path = tmp_path / "vocabulary.tsv"
    path.write_text(Vocabulary(tokens, [0] * len(tokens), kinds).to_tsv(), encoding="utf-8")
    read = read_vocabulary(path)
    write_ids_table(tmp_path / "ids.arrow", read)
    table = read_ids_table(tmp_path / "ids.arrow")
    for vocabulary in (read, table, Vocabulary(tokens, [0] * len(tokens), kinds)):
        assert vocabulary.symbol_ids.tolist() == symbols
        assert vocabulary.reserved == {tokens[i]: i for i in symbols}
        assert vocabulary.first_word_id == first_word
        assert vocabulary.unknown_ids() == unknown
        assert vocabulary.units == units
        assert vocabulary.size == len(tokens)
        assert vocabulary.token_array.to_pylist() == tokens
    for columns in (read, table):
        assert not {"tokens", "counts", "kinds"} & set(vars(columns))
        assert (columns.tokens, columns.counts, columns.kinds) == (tokens, [0] * len(tokens), kinds)  # made when asked for


@pytest.mark.parametrize(
    ("text", "message"),
    [
        ("id\ttoken\tcount\n0\t<pad>\t0\treserved\n", "line 1: expected the header"),
        (f"{VOCABULARY_HEADER}\n0\t<pad>\t0\treserved\n1\tx\t4\tnoun\n", "line 3: kind 'noun'; allowed: byte, control"),
        (f"{VOCABULARY_HEADER}\n0\t<pad>\t0\treserved\n1\tx\t-4\tword\n", "line 3: a negative count"),
        (f"{VOCABULARY_HEADER}\n0\t<pad>\t0\treserved\n1\tx\t4\n", "line 3: expected '1<TAB>token<TAB>count<TAB>kind'"),
    ],
    ids=["header", "kind", "negative-count", "three-fields"],
)
def test_a_file_off_the_format_is_refused_naming_the_file_and_line(tmp_path: Path, text: str, message: str) -> None:
    path = tmp_path / "odd.tsv"
    path.write_text(text, encoding="utf-8")
    with pytest.raises(FormatError, match=rf"odd\.tsv: {message}"):
        read_vocabulary(path)


@pytest.mark.parametrize(
    "first",
    [b"id\ttoken\tcount\tkind\r", b"id\ttoken\tcount\tkind\t", b"id\ttoken\tcount\tkindXX", b"id\ttoken\tcount\tkind\xff"],
    ids=["windows-line-end", "fifth-column", "trailing-letters", "not-utf8"],
)
def test_a_first_line_that_is_not_exactly_the_header_is_refused_at_line_1(tmp_path: Path, first: bytes) -> None:
    path = tmp_path / "odd.tsv"
    path.write_bytes(first + b"\n0\t<pad>\t0\treserved\n")
    with pytest.raises(FormatError, match=r"odd\.tsv: line 1: expected the header"):
        read_vocabulary(path)


def test_tokens_and_kinds_that_look_like_numbers_are_read_as_text(tmp_path: Path) -> None:
    """Every token and kind is a string, whatever a CSV reader would guess from the column."""
    path = tmp_path / "odd.tsv"
    path.write_text(f"{VOCABULARY_HEADER}\n0\t1\t5\tword\n1\t2\t3\tword\n", encoding="utf-8")
    assert read_vocabulary(path).tokens == ["1", "2"]
    path.write_text(f"{VOCABULARY_HEADER}\n0\t1\t5\t7\n", encoding="utf-8")
    with pytest.raises(FormatError, match=r"odd\.tsv: line 2: kind '7'; allowed"):
        read_vocabulary(path)


def test_a_field_ending_in_a_lone_backslash_or_holding_an_unknown_escape_keeps_the_backslash() -> None:
    """Only the four documented escapes are undone; any other backslash is a plain character
    (a field written by hand, or by an older writer, may hold one)."""
    assert unescape("a\\") == "a\\"
    assert unescape("\\") == "\\"
    assert unescape("a\\qb") == "a\\qb"


ROWS = f"{VOCABULARY_HEADER}\n0\t<pad>\t0\treserved\n"


@pytest.mark.parametrize(
    ("text", "line", "bad"),
    [
        (ROWS + "".join(f"{i}\tw{i}\t5\tword\n" for i in range(1, 5)) + "5\tx\t4\n", 7, "5\tx\t4"),
        (ROWS + "\n1\tx\t4 \n", 4, "1\tx\t4 "),
        (ROWS + "1\tNew York\t3\tword\n2\tTAX\n", 4, "2\tTAX"),
        (ROWS + "1\tx\t-4\tword\n2\ty\tX4\tword\n", 4, "2\ty\tX4\tword"),
        (ROWS + "1\t" + "y" * 100 + "\n", 3, "1\t" + "y" * 78),
    ],
    ids=["fifth-row", "after-a-blank-line", "after-a-token-with-a-space", "count-not-a-number", "long-line"],
)
def test_the_first_line_off_the_format_is_named_and_quoted_as_written(tmp_path: Path, text: str, line: int, bad: str) -> None:
    """Ids counted from 0 over every row, blank lines skipped, fields split at tabs only, a
    negative count still a row (refused later, by value); the line is quoted without its line
    break, trailing spaces kept, cut to 80 characters."""
    path = tmp_path / "odd.tsv"
    path.write_text(text, encoding="utf-8")
    expected = bad.split("\t")[0]
    with pytest.raises(FormatError) as raised:
        read_vocabulary(path)
    assert str(raised.value) == f"{path}: line {line}: expected '{expected}<TAB>token<TAB>count<TAB>kind', got {bad!r}"


def test_a_file_that_is_not_utf8_is_refused_as_a_format_error_naming_the_file(tmp_path: Path) -> None:
    """Arrow refuses the bytes; the search for the bad line reads them with replacement
    characters, so it ends in the same kind of error, not a decoding error of its own."""
    path = tmp_path / "odd.tsv"
    path.write_bytes(ROWS.encode() + b"1\tcaf\xe9\t4\tword\n")
    with pytest.raises(FormatError, match=r"odd\.tsv: cannot be read as a vocabulary file \(.*\); write it with corpusmill or fix that value"):
        read_vocabulary(path)


def model_with_odd_pieces(path: Path) -> spm.SentencePieceProcessor:
    """A sentencepiece model with the project's reserved ids whose pieces hold a tab, a line
    feed, a carriage return and a backslash before t; learned on the demo journals."""
    text = [line for file in sorted((DEMO / "journals").glob("*.txt")) for line in file.read_text(encoding="utf-8").splitlines() if line.strip()]
    settings = {"model_type": "unigram", "vocab_size": 400, "character_coverage": 1.0, "byte_fallback": True}
    writer = io.BytesIO()
    spm.SentencePieceTrainer.train(
        sentence_iterator=iter(text), model_writer=writer, user_defined_symbols=["a\tb", "x\ny", "r\rs", "c\\td"], **trainer_options(settings, 1)
    )
    path.write_bytes(writer.getvalue())
    return spm.SentencePieceProcessor(model_file=str(path))


def test_the_build_reader_audit_and_ids_file_name_every_piece_as_sentencepiece_does(tmp_path: Path) -> None:
    """sentencepiece's id_to_piece as the reference for every id of a build whose frozen model
    has pieces holding a tab, a line feed, a carriage return and a backslash: the ids file, the
    vocabulary.tsv that steps.reader opens and audit checks all give those pieces, and the
    manifest's ids_sha256 is hashlib's SHA-256 of the id/token/kind lines, escaped by hand."""
    model = model_with_odd_pieces(tmp_path / "odd.model")
    pieces = [model.id_to_piece(i) for i in range(model.get_piece_size())]
    assert {"a\tb", "x\ny", "r\rs", "c\\td"} <= set(pieces)
    run_workflow(tmp_path / "run", scenario("journals", {"units": "subword", "subword": {"frozen": str(tmp_path / "odd.model")}}))
    build = tmp_path / "run" / "build"
    kinds = ["byte" if model.is_byte(i) else "control" if model.is_control(i) or model.is_unknown(i) else "piece" for i in range(len(pieces))]
    lines = "".join(f"{i}\t{reference_escape(p)}\t{k}\n" for i, (p, k) in enumerate(zip(pieces, kinds)))
    manifest = json.loads((build / "manifest.json").read_text(encoding="utf-8"))
    assert manifest["vocabulary"]["ids_sha256"] == hashlib.sha256(lines.encode("utf-8")).hexdigest()
    assert read_vocabulary(build / "interim" / "vocabulary" / "ids.tsv").tokens == pieces
    assert open_build(build).vocabulary.tokens == pieces
    assert len((build / "vocabulary.tsv").read_bytes().split(b"\n")) == 2 + len(pieces)
    assert audit_build(build).problems == []
    with pytest.raises(SystemExit, match=r"vocabulary\.tsv: a subword vocabulary; cutoffs apply to word vocabularies"):
        WordList.read(build / "vocabulary.tsv")


# --- the ids digest -------------------------------------------------------------------------------


@pytest.mark.parametrize(
    "vocabulary",
    [piece_vocabulary(ODD_PIECES), Vocabulary([*RESERVED, "<unk-digits>", "a", "b"], [0, 5, 2, 3, 1, 9, 0], ["reserved"] * 4 + ["unknown", "word", "word"])],
)
def test_the_ids_table_holds_the_vocabulary_and_its_digest(tmp_path: Path, vocabulary: Vocabulary) -> None:
    """The Arrow IPC file the jobs read the ids from: read back, the same tokens (pieces with
    tabs, line breaks and backslashes as they are), counts and kinds; its digest is hashlib's
    over vocabulary.tsv's rows without counts; pyarrow reads it as a plain IPC file."""
    path = tmp_path / "ids.arrow"
    write_ids_table(path, vocabulary)
    again = read_ids_table(path)
    assert again == vocabulary
    (tmp_path / "vocabulary.tsv").write_text(vocabulary.to_tsv(), encoding="utf-8")
    rows = [line.split(b"\t") for line in (tmp_path / "vocabulary.tsv").read_bytes().split(b"\n")[1:-1]]
    assert again.ids_digest == hashlib.sha256(b"".join(b"\t".join([row[0], row[1], row[3]]) + b"\n" for row in rows)).hexdigest()
    table = pa.ipc.open_file(pa.OSFile(str(path))).read_all()
    assert table.column_names == ["token", "count", "kind"] and table["token"].to_pylist() == vocabulary.tokens


def test_ids_digest_is_the_sha256_of_the_id_token_kind_lines_and_ignores_counts(tmp_path: Path) -> None:
    """hashlib over the file's rows with the count field taken out: the digest names the ids
    (which id is which token of which kind), not how often each occurs."""
    vocabulary = piece_vocabulary(ODD_PIECES)
    path = tmp_path / "vocabulary.tsv"
    path.write_text(vocabulary.to_tsv(), encoding="utf-8")
    rows = [line.split(b"\t") for line in path.read_bytes().split(b"\n")[1:-1]]
    expected = hashlib.sha256(b"".join(b"\t".join([row[0], row[1], row[3]]) + b"\n" for row in rows)).hexdigest()
    assert vocabulary.ids_digest == expected
    assert read_vocabulary(path).ids_digest == expected  # from the file's Arrow columns
    assert vocabulary.sha256 == hashlib.sha256(path.read_bytes()).hexdigest()
    assert vocabulary.with_counts([7] * vocabulary.size).ids_digest == expected
    assert vocabulary.with_counts([7] * vocabulary.size).sha256 != vocabulary.sha256
    swapped = vocabulary.tokens[:5] + [vocabulary.tokens[6], vocabulary.tokens[5]] + vocabulary.tokens[7:]
    assert Vocabulary(swapped, vocabulary.counts, vocabulary.kinds).ids_digest != expected
    assert Vocabulary(vocabulary.tokens, vocabulary.counts, vocabulary.kinds[:-1] + ["byte"]).ids_digest != expected


def test_a_builds_manifest_shards_and_ids_file_name_the_ids_of_its_vocabulary(demo_build: Path) -> None:
    """hashlib over vocabulary.tsv's rows without their counts; every shard's `corpusmill`
    metadata, read with pyarrow, carries the same digest; the ids file the shards were written
    from has the same ids."""
    rows = [line.split("\t") for line in (demo_build / "vocabulary.tsv").read_text(encoding="utf-8").split("\n")[1:-1]]
    expected = hashlib.sha256("".join(f"{i}\t{t}\t{k}\n" for i, t, _, k in rows).encode("utf-8")).hexdigest()
    manifest = json.loads((demo_build / "manifest.json").read_text(encoding="utf-8"))
    assert manifest["vocabulary"]["ids_sha256"] == expected
    assert read_vocabulary(demo_build / "interim" / "vocabulary" / "ids.tsv").ids_digest == expected
    assert read_ids_table(demo_build / "interim" / "vocabulary" / "ids.arrow") == read_vocabulary(demo_build / "interim" / "vocabulary" / "ids.tsv")
    shards = [entry for split in manifest["splits"].values() for entry in split["shards"]]
    assert shards
    for entry in shards:
        metadata = json.loads(pq.read_schema(demo_build / entry["file"]).metadata[METADATA_KEY])
        assert metadata["ids_sha256"] == expected, entry["file"]


# --- shards ---------------------------------------------------------------------------------------


def test_shard_files_have_the_documented_columns_and_metadata_of_their_kind(demo_build: Path) -> None:
    """pyarrow's Parquet reader for the stored schema and key-value metadata; the expected
    columns written out from the README's table with the demo configuration (n = 4, blocks of
    L = 64, ids of at most 65,536 values: uint16)."""
    manifest = json.loads((demo_build / "manifest.json").read_text(encoding="utf-8"))
    config = manifest["config"]
    windows = config["windows"]
    ids = pa.uint16()
    expected = {
        "ngram": pa.schema([("context", pa.list_(ids, 3)), ("target", ids)]),
        "block": pa.schema([("ids", pa.list_(ids, 65))]),
        "stream": pa.schema([("doc_id", pa.string()), ("ids", pa.list_(ids))]),
    }
    vocabulary = read_vocabulary(demo_build / "vocabulary.tsv")
    seen = set()
    for split, figures in manifest["splits"].items():
        for entry in figures["shards"]:
            stored = pq.read_schema(demo_build / entry["file"])
            assert stored.remove_metadata() == expected[entry["kind"]] == shard_schema(entry["kind"], "uint16", windows)
            metadata = json.loads(stored.metadata[METADATA_KEY])
            assert metadata == json.loads(shard_metadata(split, entry["kind"], entry["chunk"], vocabulary, windows)[METADATA_KEY])
            assert (metadata["split"], metadata["kind"], metadata["chunk"]) == (split, entry["kind"], entry["chunk"])
            assert metadata["vocabulary_size"] == vocabulary.size
            assert metadata["reserved"] == RESERVED_WITH_CLASSES
            if entry["kind"] == "ngram":
                assert (metadata["n"], metadata["predict_end"]) == (windows["ngram"]["n"], windows["ngram"]["predict_end"])
            if entry["kind"] == "block":
                assert {k: metadata[k] for k in ("length", "stride", "span", "remainder")} == {
                    k: windows["blocks"][k] for k in ("length", "stride", "span", "remainder")
                }
                assert "enabled" not in metadata
            seen.add(entry["kind"])
    assert seen == {"ngram", "block", "stream"}


def test_the_id_type_is_the_narrowest_that_holds_every_id() -> None:
    """numpy's iinfo: uint16 holds ids 0..65535, so 65,536 ids fit and one more does not."""
    limit = int(np.iinfo(np.uint16).max) + 1
    assert id_type_name("auto", limit) == "uint16"
    assert id_type_name("auto", limit + 1) == "uint32"
    assert id_type_name("uint16", limit) == "uint16"
    assert id_type_name("int64", 5) == "int64"
    with pytest.raises(FormatError, match=r"shards\.id_type = uint16 cannot hold 65537 ids; use auto or uint32"):
        id_type_name("uint16", limit + 1)


# --- statistics records ---------------------------------------------------------------------------


def test_figures_add_every_field() -> None:
    """dataclasses.fields as the reference list: a field added to Figures and forgotten in
    `add` fails here."""
    numbers = [f.name for f in dataclasses.fields(Figures) if f.name != "by_unknown"]
    first = Figures(**{name: index + 1 for index, name in enumerate(numbers)}, by_unknown={"1": 2, "5": 1})
    second = Figures(**{name: 10 * (index + 1) for index, name in enumerate(numbers)}, by_unknown={"5": 4, "7": 3})
    first.add(second)
    assert [getattr(first, name) for name in numbers] == [11 * (index + 1) for index in range(len(numbers))]
    assert first.by_unknown == {"1": 2, "5": 5, "7": 3}


def sample_stats() -> ShardStats:
    stats = ShardStats("notes.txt-0000+1")
    stats.files.append(ShardFile("shards/train/ngram-notes.txt-0000+1.parquet", "train", "ngram", "notes.txt-0000+1", 12, 3456, "ab" * 32))
    stats.rows = {"train": {"ngram": 12, "block": 1}, "dev": {"ngram": 0, "block": 0}}
    stats.block_ids, stats.stream_ids = {"train": 40, "dev": 0}, {"train": 52, "dev": 0}
    stats.figures("notes.txt", "train").add(Figures(3, 7, 51, 4, 44, 2, 1, {"10": 1, "9": 2, "1": 1}))
    stats.figures("notes.txt", "dev").add(Figures(documents=1))
    stats.figures("b/ä.txt", "test").add(Figures(1, 1, 5, 0, 4))
    return stats


def test_shard_stats_and_figures_round_trip_through_json_text() -> None:
    """json.dumps and json.loads as the carrier: what a shard job writes is what coverage and
    the manifest read, field for field; unknown tokens are listed by id in numeric order."""
    stats = sample_stats()
    value = stats.to_json()
    assert list(value["sources"]["notes.txt"]["train"]["by_unknown"]) == ["1", "9", "10"]
    again = ShardStats.from_json(json.loads(json.dumps(value, ensure_ascii=False)))
    assert again == stats and again.to_json() == value
    figures = stats.sources["notes.txt"]["train"]
    assert Figures.from_json(json.loads(json.dumps(figures.to_json()))) == figures


def test_a_builds_shard_statistics_read_back_unchanged(demo_build: Path) -> None:
    """The JSON files the shard jobs wrote, parsed by json.load, equal what read_shard_stats
    gives back written out again: nothing is dropped or renamed on the way."""
    paths = sorted((demo_build / "interim" / "shards").glob("*.json"))
    assert paths
    for path in paths:
        assert read_shard_stats(path).to_json() == json.loads(path.read_text(encoding="utf-8"))


def test_file_sha256_equals_hashlib_over_the_whole_file(tmp_path: Path) -> None:
    """hashlib.sha256 of the bytes read at once, for files shorter and longer than the 4 MiB
    blocks file_sha256 reads."""
    rng = np.random.default_rng(3)
    for size in (0, 5, (4 << 20) - 1, 4 << 20, (9 << 20) + 3):
        path = tmp_path / f"{size}.bin"
        path.write_bytes(rng.integers(0, 256, size, dtype=np.uint8).tobytes())
        assert file_sha256(path) == hashlib.sha256(path.read_bytes()).hexdigest(), size


def test_ngram_totals_read_back_as_written_and_an_unreadable_file_reads_as_none(tmp_path: Path) -> None:
    """An Arrow IPC file, a record batch per bucket (read here with pyarrow's own IPC reader);
    a truncated, foreign or incomplete file is counted again rather than trusted."""
    path = tmp_path / "totals.arrow"
    counted = (("shards/train/stream-a.parquet", "aa"), ("shards/train/stream-b.parquet", "bb"))
    about = NgramTotals(3, 300, "c0de", counted, 3)
    buckets = [([5, 9, 40], [0, 0, 1], [2, 1, 7]), ([], [], []), ([2**64 - 1], [3], [4])]
    with writing_ngram_totals(path, about) as write:
        for low, high, count in buckets:
            write(np.array(low, np.uint64), np.array(high, np.uint64), np.array(count, np.int64))
    plain = pa.ipc.open_file(str(path))
    assert plain.num_record_batches == 3 and plain.schema.names == ["low", "high", "count"]
    assert json.loads(plain.schema.metadata[b"corpusmill"])["counted"] == [list(f) for f in counted]
    assert [plain.get_batch(b).to_pydict() for b in range(3)] == [{"low": lo, "high": hi, "count": c} for lo, hi, c in buckets]
    read = read_ngram_totals(path)
    assert read is not None and read.about == about
    for bucket, (low, high, count) in enumerate(buckets):
        assert [column.tolist() for column in read.bucket(bucket)] == [low, high, count]
    assert [column.dtype for column in read.bucket(0)] == [np.uint64, np.uint64, np.int64]
    # Fewer buckets written than announced: the file is not replaced.
    with pytest.raises(ValueError, match="2 buckets of n-gram totals written, 3 expected"):
        with writing_ngram_totals(path, about) as write:
            for low, high, count in buckets[:2]:
                write(np.array(low, np.uint64), np.array(high, np.uint64), np.array(count, np.int64))
    assert read_ngram_totals(path) is not None and not list(tmp_path.glob(".*partial"))
    path.write_bytes(path.read_bytes()[:100])
    assert read_ngram_totals(path) is None
    assert read_ngram_totals(tmp_path / "missing.arrow") is None
    # Fewer batches than its buckets, or another table: not ours.
    with writing_ngram_totals(path, about) as write:
        for low, high, count in buckets:
            write(np.array(low, np.uint64), np.array(high, np.uint64), np.array(count, np.int64))
    schema = pa.ipc.open_file(str(path)).schema
    with pa.OSFile(str(path), "wb") as sink, pa.ipc.new_file(sink, schema) as writer:
        writer.write_batch(pa.record_batch([pa.array([1], pa.uint64()), pa.array([0], pa.uint64()), pa.array([1])], schema=schema))
    assert read_ngram_totals(path) is None
    with pa.OSFile(str(path), "wb") as sink, pa.ipc.new_file(sink, schema) as writer:
        for _ in range(3):
            writer.write_batch(pa.record_batch([pa.array([1], pa.uint64()), pa.array([0], pa.uint64()), pa.array([1])], schema=schema))
    assert read_ngram_totals(path) is not None  # three batches of the right columns: read
    other = pa.schema([("low", pa.uint64()), ("high", pa.int64()), ("count", pa.int64())], metadata=schema.metadata)
    with pa.OSFile(str(path), "wb") as sink, pa.ipc.new_file(sink, other) as writer:
        for _ in range(3):
            writer.write_batch(pa.record_batch([pa.array([1], pa.uint64()), pa.array([0]), pa.array([1])], schema=other))
    assert read_ngram_totals(path) is None
