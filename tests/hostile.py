"""Hostile input for tests: byte strings and a whole corpus folder that corpusmill must survive.

Every case is a small, deterministic byte string built here, so a test can say exactly where a
bad byte sits. `write_hostile_corpus` lays every case out as files of one corpus folder for a
full workflow run under the lenient policies (corpus.invalid_utf8 = replace,
corpus.bad_records = drop). PATHOLOGICAL and TEXT_FUNCTIONS are the crafted texts and the text
paths they aim at: tests/test_untrusted.py checks the output, bench/crafted_input.py the time.
"""

from __future__ import annotations

import bz2
import codecs
import gzip
import json
import lzma
import random
from collections.abc import Callable
from pathlib import Path

import zstandard

from corpusmill import abbreviations, unicode_breaks
from corpusmill.clean import CleanOptions, clean_text, rejection
from corpusmill.ingest import _grapheme_cut
from corpusmill.segment import Segmenter
from corpusmill.vocabulary import unknown_class

# Byte sequences that are not UTF-8 (RFC 3629 §3 and §10), by the way they go wrong.
INVALID_UTF8 = {
    "stray_continuation": b"\x80",  # a continuation byte with no lead byte
    "overlong": b"\xc0\xaf",  # "/" spelled in two bytes (the classic path-traversal trick)
    "encoded_surrogate": b"\xed\xa0\x80",  # U+D800, which UTF-8 must never encode
    "truncated_at_end": b"\xe2\x82",  # the first two of the three bytes of U+20AC at end of file
}

GOOD_FIRST = b"The first paragraph reads cleanly and has words.\n\n"
GOOD_LAST = b"\n\nThe last paragraph reads cleanly as well.\n"


def invalid_utf8_text(kind: str) -> tuple[bytes, int]:
    """A three-paragraph .txt body with one bad sequence, and the byte offset of that sequence.

    The truncated sequence sits at the very end of the file, where a decoder sees it last.
    """
    bad = INVALID_UTF8[kind]
    if kind == "truncated_at_end":
        head = GOOD_FIRST + b"The middle paragraph is fine.\n\nThe last one stops short of its euro sign "
        return head + bad, len(head)
    head = GOOD_FIRST + b"The middle paragraph has a bad "
    return head + bad + b" sequence inside." + GOOD_LAST, len(head)


NUL_TEXT = b"Null\x00bytes sit\x00\x00inside this line of ordinary words.\n"
BOM_TEXT = codecs.BOM_UTF8 + b"Words after a byte order mark.\n\nA second paragraph.\n"
LF_TEXT = b"Line one of the first paragraph\nline two of it.\n\nThe second paragraph.\n\n\nThe third one.\n"
CRLF_TEXT = LF_TEXT.replace(b"\n", b"\r\n")
CR_TEXT = LF_TEXT.replace(b"\n", b"\r")

BIDI_TEXT = "Pay the \u202eamount\u202c due and \u2067isolated\u2069 words \u200fhere\u200e now."
ZWJ_FAMILY = "\U0001f469\u200d\U0001f469\u200d\U0001f467\u200d\U0001f466"  # family: woman woman girl boy
ZWJ_RAINBOW_FLAG = "\U0001f3f3\ufe0f\u200d\U0001f308"
ZWJ_TEXT = f"The family {ZWJ_FAMILY} waved the flag {ZWJ_RAINBOW_FLAG} at the parade."
SCRIPTS_TEXT = "English words meet русские слова and ελληνικές λέξεις, then عربية كلمات, 中文的字 and हिन्दी शब्द, ภาษาไทย, 日本語のかな, and עברית מילים."


def combining_run(marks: int) -> str:
    """'Zalgo' text: one base letter under a long run of alternating combining marks (ccc 230 and 220)."""
    return "Zalgo e" + "\u0301\u0316" * (marks // 2) + " text ends here."


# Text of about n characters that makes backtracking engines (or quadratic algorithms) slow:
# long runs without a break, terminators everywhere, marks, quotes, abbreviations, hyphens and
# apostrophes, and runs of regional indicators (\X pairs each by counting back to the run's start).
PATHOLOGICAL: dict[str, Callable[[int], str]] = {
    "spaces_and_tabs": lambda n: " \t" * (n // 2),
    "carriage_returns": lambda n: "\r" * n,
    "controls": lambda n: "\x01" * n,
    "zero_width_spaces": lambda n: "a\u200b" * (n // 2),
    "combining_marks": lambda n: "e" + "\u0301\u0316" * (n // 2),
    "one_long_word_then_bang": lambda n: "x" * n + "! A",
    "periods_between_letters": lambda n: "a." * (n // 2),
    "capital_initials": lambda n: "A. " * (n // 3),
    "closing_quotes": lambda n: ".\"')]" * (n // 5),
    "abbreviations": lambda n: "dr. " * (n // 4),
    "inner_periods": lambda n: "e.g." * (n // 4),
    "hyphens_between_letters": lambda n: "a-" * (n // 2),
    "apostrophes_between_letters": lambda n: "a'" * (n // 2),
    "marks_before_hyphens": lambda n: ("a" + "\u0301" * 50 + "-") * (n // 52),
    "closers_then_spaces": lambda n: "a." + ")" * (n // 2) + " " * (n // 2) + "b",
    "digits_and_separators": lambda n: "1,1." * (n // 4),
    "only_periods": lambda n: "." * n,
    "narrow_spaces_in_numbers": lambda n: "1\u202f" * (n // 2),
    "regional_indicators": lambda n: "\U0001f1e6" * n,
    "letters_between_periods": lambda n: "a." * (n // 2) + "a",
    "letters_between_periods_then_bang": lambda n: "a." * (n // 2) + "a! A",
    "abbreviations_before_capitals": lambda n: "Dr. A " * (n // 6),
}

# Every path a document's text takes, as a function of one text. The oversize cut is given the
# UTF-8 bytes of a document as long as corpus.max_document_bytes, as the reader gives it one.
ABBREVIATIONS = frozenset({"dr", "e.g", "etc"})
TEXT_FUNCTIONS: dict[str, Callable[[str], object]] = {
    "clean_text+rejection": lambda text: rejection(clean_text(text, CleanOptions()), CleanOptions()),
    "segment uax29 keep": Segmenter(abbreviations=ABBREVIATIONS).segment,
    "segment uax29 split": Segmenter(apostrophes="split", hyphens="split").segment,
    "segment pattern+punctuation keep": Segmenter(sentences_mode="punctuation", words_mode="pattern", abbreviations=ABBREVIATIONS).segment,
    "segment pattern+punctuation split": Segmenter(sentences_mode="punctuation", words_mode="pattern", apostrophes="split", hyphens="split").segment,
    "learn_abbreviations": lambda text: abbreviations.learn_abbreviations([text]),
    "split_graphemes": lambda text: unicode_breaks.split_graphemes(text, 1000),
    "oversize document cut": lambda text: _grapheme_cut(text.encode("utf-8")),
    "unknown_class": unknown_class,
}

# Inputs aimed at each UAX #29 rule that looks ahead or behind (SB8 look-ahead, SB9/SB10 runs,
# WB4/GB9 mark runs, WB15/GB12 flag runs), for the break functions themselves.
RULE_LOOKAHEAD: dict[str, Callable[[int], str]] = {
    "periods": lambda n: "." * n,
    "combining marks": lambda n: "a" + "\u0301" * n,
    "quotes and closing brackets after a period": lambda n: "a." + '")' * (n // 2) + " b",
    "spaces after a period": lambda n: "a." + " " * n + "B",
    "spaces then a lowercase letter": lambda n: "a." + " " * n + "b",
    "open brackets then a lowercase letter": lambda n: "a." + "(" * n + "b",
    "digits after a period": lambda n: "a." + "1" * n,
    "regional indicators": lambda n: "\U0001f1e6" * n,
    "hyphens between letters": lambda n: "a-" * (n // 2),
    "apostrophes between letters": lambda n: "a'" * (n // 2),
    "zero width joiners": lambda n: "\u200d" * n,
}
BREAK_FUNCTIONS: dict[str, Callable[[str], object]] = {
    "word_tokens": unicode_breaks.word_tokens,
    "word_tokens split": lambda text: unicode_breaks.word_tokens(text, apostrophes="split", hyphens="split"),
    "sentence_segments": unicode_breaks.sentence_segments,
    "sentence_segments abbreviations": lambda text: unicode_breaks.sentence_segments(text, frozenset({"a", "dr"})),
    "split_graphemes 100": lambda text: unicode_breaks.split_graphemes(text, 100),
}


def binary_bytes(size: int = 4096, seed: int = 7) -> bytes:
    """What a binary file looks like: a PNG signature, then seeded random bytes."""
    rng = random.Random(seed)
    return b"\x89PNG\r\n\x1a\n" + bytes(rng.randrange(256) for _ in range(size))


def compress(data: bytes, codec: str) -> bytes:
    """`data` in one of the container formats corpusmill reads (".gz", ".bz2", ".xz", ".zst")."""
    if codec == ".gz":
        return gzip.compress(data, mtime=0)
    if codec == ".bz2":
        return bz2.compress(data)
    if codec == ".xz":
        return lzma.compress(data)
    return zstandard.ZstdCompressor(level=3).compress(data)


def prose(size: int, seed: int = 3) -> bytes:
    """About `size` bytes of ordinary sentences in paragraphs, seeded (compresses about 3:1)."""
    rng = random.Random(seed)
    words = ["harbour", "ferry", "lantern", "copper", "meadow", "river", "signal", "winter", "kettle", "stone"]
    parts, total = [], 0
    while total < size:
        sentence = " ".join(rng.choice(words) for _ in range(rng.randint(4, 12))).capitalize() + ". "
        if rng.random() < 0.1:
            sentence += "\n\n"
        parts.append(sentence)
        total += len(sentence)
    return "".join(parts).encode("utf-8")[:size]


def jsonl(*records: object) -> bytes:
    return b"".join(json.dumps(r).encode("ascii") + b"\n" for r in records)


def write_hostile_corpus(root: Path) -> dict[str, str]:
    """Write every hostile case as one file under `root`; returns case name → relative path.

    Ordinary prose files sit beside them so that the build has a vocabulary to make.
    """
    files: dict[str, bytes] = {
        "prose_a.txt": prose(20_000, seed=1),
        "prose_b.txt.gz": compress(prose(20_000, seed=2), ".gz"),
        "nul.txt": NUL_TEXT,
        "bom.txt": BOM_TEXT,
        "crlf.txt": CRLF_TEXT,
        "lone_cr.txt": CR_TEXT,
        "empty.txt": b"",
        "blank.txt": b" \n\t\n   \r\n\n",
        "binary.txt": binary_bytes(),
        "bidi.txt": BIDI_TEXT.encode("utf-8"),
        "combining.txt": combining_run(4000).encode("utf-8"),
        "zwj.txt": ZWJ_TEXT.encode("utf-8"),
        "scripts.txt": SCRIPTS_TEXT.encode("utf-8"),
        "records.jsonl": jsonl(
            {"id": "ok-1", "text": "A record that is fine and has words."},
            {"id": "no-text", "body": "the text field is missing"},
            {"id": "number", "text": 42},
            {"id": "blank", "text": "   \n  "},
            {"id": "surrogate", "text": "lone \ud800 surrogate escape in words"},
        )
        + b'{"id": "broken", "text": "no closing brace"\n'
        + b'{"n": '
        + b"9" * 5000
        + b"}\n"
        + b"[" * 50_000
        + b"\n",
    }
    for kind in INVALID_UTF8:
        files[f"invalid_{kind}.txt"] = invalid_utf8_text(kind)[0]
    root.mkdir(parents=True, exist_ok=True)
    for name, data in files.items():
        (root / name).write_bytes(data)
    return {Path(name).name.split(".")[0]: name for name in files}


def write_small_corpus(root: Path) -> None:
    """Two small ordinary files (one plain, one gzip) for full builds that take a few seconds."""
    root.mkdir(parents=True, exist_ok=True)
    (root / "notes.txt").write_bytes(prose(12_000, seed=11))
    (root / "letters.txt.gz").write_bytes(compress(prose(12_000, seed=12), ".gz"))


# Parquet's footer is a FileMetaData struct in the Thrift compact protocol
# (apache/thrift doc/specs/thrift-compact-protocol.md; apache/parquet-format parquet.thrift):
# FileMetaData field 3 is num_rows, field 4 the row groups; RowGroup field 3 is num_rows.
_BOOL_TRUE, _BOOL_FALSE, _BYTE, _I16, _I32, _I64, _DOUBLE, _BINARY, _LIST, _SET, _MAP, _STRUCT = range(1, 13)


def _read_varint(data: bytes, pos: int) -> tuple[int, int]:
    value = shift = 0
    while True:
        byte = data[pos]
        pos += 1
        value |= (byte & 0x7F) << shift
        shift += 7
        if byte < 0x80:
            return value, pos


def _varint(value: int) -> bytes:
    out = bytearray()
    while value >= 0x80:
        out.append(value & 0x7F | 0x80)
        value >>= 7
    out.append(value)
    return bytes(out)


def _read_value(data: bytes, pos: int, kind: int) -> tuple[object, int]:
    if kind in (_BOOL_TRUE, _BOOL_FALSE, _BYTE):
        return data[pos], pos + 1
    if kind in (_I16, _I32, _I64):
        raw, pos = _read_varint(data, pos)
        return (raw >> 1) ^ -(raw & 1), pos
    if kind == _DOUBLE:
        return data[pos : pos + 8], pos + 8
    if kind == _BINARY:
        size, pos = _read_varint(data, pos)
        return data[pos : pos + size], pos + size
    if kind in (_LIST, _SET):
        header = data[pos]
        pos += 1
        size, element = header >> 4, header & 0x0F
        if size == 15:
            size, pos = _read_varint(data, pos)
        items = []
        for _ in range(size):
            item, pos = _read_value(data, pos, element)
            items.append(item)
        return (element, items), pos
    if kind == _MAP:
        size, pos = _read_varint(data, pos)
        if not size:
            return (0, 0, []), pos
        types = data[pos]
        pos += 1
        pairs = []
        for _ in range(size):
            key, pos = _read_value(data, pos, types >> 4)
            value, pos = _read_value(data, pos, types & 0x0F)
            pairs.append((key, value))
        return (types >> 4, types & 0x0F, pairs), pos
    if kind == _STRUCT:
        fields, last = [], 0
        while True:
            header = data[pos]
            pos += 1
            if header == 0:
                return fields, pos
            field_kind, delta = header & 0x0F, header >> 4
            if delta:
                field = last + delta
            else:
                raw, pos = _read_varint(data, pos)
                field = (raw >> 1) ^ -(raw & 1)
            last = field
            if field_kind in (_BOOL_TRUE, _BOOL_FALSE):
                value = None
            else:
                value, pos = _read_value(data, pos, field_kind)
            fields.append([field, field_kind, value])
    raise ValueError(f"unknown Thrift compact type {kind} at byte {pos}")


def _value(kind: int, value: object) -> bytes:
    if kind in (_BOOL_TRUE, _BOOL_FALSE, _BYTE):
        return bytes([value])
    if kind in (_I16, _I32, _I64):
        return _varint((value << 1) ^ (value >> 63))
    if kind == _DOUBLE:
        return value
    if kind == _BINARY:
        return _varint(len(value)) + value
    if kind in (_LIST, _SET):
        element, items = value
        header = bytes([len(items) << 4 | element]) if len(items) < 15 else bytes([0xF0 | element]) + _varint(len(items))
        return header + b"".join(_value(element, item) for item in items)
    if kind == _MAP:
        key_kind, value_kind, pairs = value
        if not pairs:
            return b"\x00"
        body = b"".join(_value(key_kind, k) + _value(value_kind, v) for k, v in pairs)
        return _varint(len(pairs)) + bytes([key_kind << 4 | value_kind]) + body
    out, last = bytearray(), 0
    for field, field_kind, field_value in value:
        if 0 < field - last <= 15:
            out.append((field - last) << 4 | field_kind)
        else:
            out += bytes([field_kind]) + _varint((field << 1) ^ (field >> 15))
        last = field
        if field_kind not in (_BOOL_TRUE, _BOOL_FALSE):
            out += _value(field_kind, field_value)
    return bytes(out + b"\x00")


def inflate_parquet_rows(path: Path, extra: int, groups: dict[int, int] | None = None) -> None:
    """Add `extra` to the row count in a Parquet file's footer, and groups[i] to row group i's count.

    The data pages stay as they are, so the footer then promises rows that no page holds: a
    file tampered with consistently, which only decoding the pages can tell apart.
    """
    data = path.read_bytes()
    length = int.from_bytes(data[-8:-4], "little")
    start = len(data) - 8 - length
    metadata, _ = _read_value(data, start, _STRUCT)

    def bump(fields: list, field_id: int, by: int) -> None:
        next(field for field in fields if field[0] == field_id)[2] += by

    bump(metadata, 3, extra)
    row_groups = next(field for field in metadata if field[0] == 4)[2][1]
    for group, by in (groups or {}).items():
        bump(row_groups[group], 3, by)
    footer = _value(_STRUCT, metadata)
    path.write_bytes(data[:start] + footer + len(footer).to_bytes(4, "little") + b"PAR1")


RAW = "@raw@"  # placeholder for JSON text that json.dumps cannot write (deep nesting, huge numbers, bad bytes)


def edited_manifest(manifest: dict, keys: tuple, value: object = None, *, delete: bool = False, raw: bytes = b"") -> bytes:
    """The manifest's JSON bytes with the value at `keys` replaced (or deleted, or set to raw JSON text)."""
    copy = json.loads(json.dumps(manifest))
    parent = copy
    for key in keys[:-1]:
        parent = parent[key]
    if delete:
        del parent[keys[-1]]
    else:
        parent[keys[-1]] = RAW if raw else value
    return json.dumps(copy).encode("utf-8").replace(json.dumps(RAW).encode(), raw)


FIRST_ROWS = ("splits", "train", "shards", 0, "rows")

# Case → (the manifest bytes made from a real manifest, the text the refusal must contain).
HOSTILE_MANIFESTS = {
    "top-level-array": (lambda m: b"[]", "top level: expected an object, found an array"),
    "splits-as-array": (lambda m: edited_manifest(m, ("splits",), list(m["splits"].values())), "splits: expected an object, found an array"),
    "missing-vocabulary": (lambda m: edited_manifest(m, ("vocabulary",), delete=True), "vocabulary: missing"),
    "missing-shard-file": (lambda m: edited_manifest(m, ("splits", "train", "shards", 0, "file"), delete=True), "splits.train.shards[0].file: missing"),
    "shards-as-object": (lambda m: edited_manifest(m, ("splits", "dev", "shards"), {"file": "x"}), "splits.dev.shards: expected an array, found an object"),
    "unknown-kind": (lambda m: edited_manifest(m, ("splits", "train", "shards", 0, "kind"), "zip"), "splits.train.shards[0].kind: expected one of"),
    "rows-as-string": (lambda m: edited_manifest(m, FIRST_ROWS, "12"), "splits.train.shards[0].rows: expected a whole number"),
    "rows-true": (lambda m: edited_manifest(m, FIRST_ROWS, True), "splits.train.shards[0].rows: expected a whole number"),
    "rows-negative": (lambda m: edited_manifest(m, FIRST_ROWS, -1), "splits.train.shards[0].rows: expected a whole number"),
    "rows-beyond-int64": (lambda m: edited_manifest(m, FIRST_ROWS, 2**64), "splits.train.shards[0].rows: expected a whole number"),
    "rows-infinite": (lambda m: edited_manifest(m, FIRST_ROWS, raw=b"1e400"), "splits.train.shards[0].rows: expected a whole number"),
    "rows-5000-digits": (lambda m: edited_manifest(m, FIRST_ROWS, raw=b"9" * 5000), "not valid JSON"),
    "nested-500-deep": (lambda m: edited_manifest(m, FIRST_ROWS, raw=b"[" * 500 + b"]" * 500), "splits.train.shards[0].rows: expected a whole number"),
    "nested-100000-deep": (lambda m: edited_manifest(m, FIRST_ROWS, raw=b"[" * 100_000 + b"]" * 100_000), "nested too deeply"),
    "not-utf8": (lambda m: edited_manifest(m, ("vocabulary", "sha256"), raw=b'"\xff\xfe"'), "not UTF-8"),
}
