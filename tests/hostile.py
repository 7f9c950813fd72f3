"""Hostile input for tests: byte strings and a whole corpus folder that corpusmill must survive.

Every case is a small, deterministic byte string built here, so a test can say exactly where a
bad byte sits. `write_hostile_corpus` lays every case out as files of one corpus folder for a
full workflow run under the lenient policies (corpus.invalid_utf8 = replace,
corpus.bad_records = drop).
"""

from __future__ import annotations

import bz2
import codecs
import gzip
import json
import lzma
import random
from pathlib import Path

import zstandard

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
SCRIPTS_TEXT = (
    "English words meet русские слова and ελληνικές λέξεις, then عربية كلمات, "
    "中文的字 and हिन्दी शब्द, ภาษาไทย, 日本語のかな, and עברית מילים."
)


def combining_run(marks: int) -> str:
    """'Zalgo' text: one base letter under a long run of alternating combining marks (ccc 230 and 220)."""
    return "Zalgo e" + "\u0301\u0316" * (marks // 2) + " text ends here."


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
        + b'{"n": ' + b"9" * 5000 + b"}\n"
        + b"[" * 50_000 + b"\n",
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
