"""Ingest: find input files, cut large ones into chunks at document boundaries, pack small
ones together, read documents.

A chunk is the input of one prepare job. Chunk k of an uncompressed file owns the documents
that *start* inside bytes [k*S, (k+1)*S): it seeks to k*S, skips to the next document start
and reads past its end to finish its last document. Every document therefore belongs to
exactly one chunk, and the chunk size never changes which documents exist. Compressed files
cannot seek and are one chunk each. Files smaller than the pack size are read whole, several
to a chunk (a pack), so a folder of many small files does not become as many jobs.
A document's id is its JSONL id field when configured (`relative/path#id` with
`corpus.repeated_ids: by_file`), else `relative/path:byte_offset` (the offset in the
uncompressed text where it starts), which orders documents like an ordinal.
"""

from __future__ import annotations

import bz2
import codecs
import functools
import hashlib
import io
import json
import lzma
import os
import re
import zlib
from collections.abc import Iterator
from dataclasses import dataclass
from itertools import chain
from pathlib import Path, PurePosixPath
from typing import BinaryIO, cast

import regex
import zstandard

from . import unicode_breaks
from .accounting import Tally

COMPRESSIONS = (".gz", ".bz2", ".xz", ".zst")
FORMATS = (".txt", ".jsonl")
READ_BLOCK = 1 << 20
_TERMINATOR = re.compile(rb"\r\n|\n|\r")
_BLANK_BYTES = b" \t\r\n\f\v"
# One or more blank lines, matched at a line start; and the same after a line's terminator (a
# scan for it skips quickly to the next CR or LF). A blank line is at most `limit` bytes with its
# terminator (`blank_line_patterns`).
_BLANK_RUN = rb"(?:[ \t\f\v]{0,%d}\r\n|[ \t\f\v]{0,%d}(?:\n|\r(?!\n)))+"
_ESCAPED_BYTES = "".join(map(chr, range(0xDC80, 0xDD00)))  # undecodable bytes under surrogateescape
_LONE_SURROGATE = regex.compile(r"[\ud800-\udfff]")  # JSON escapes can spell them; UTF-8 cannot


class CorpusError(Exception):
    """A problem in the input that the user must fix; the message names the file and position."""


@dataclass(frozen=True)
class Chunk:
    """One prepare job's input: chunk `index` of `count` of one file, or several small files
    (a pack, in corpus order) each read whole, as index 0 of 1."""

    key: str
    sources: tuple[str, ...]
    index: int = 0
    count: int = 1


@dataclass(frozen=True)
class Document:
    doc_id: str
    source: str
    offset: int
    text: str


@dataclass(frozen=True)
class ReadOptions:
    text_unit: str = "paragraph"
    jsonl_text_field: str = "text"
    jsonl_id_field: str | None = "id"
    repeated_ids: str = "stop"
    bad_records: str = "stop"
    invalid_utf8: str = "stop"
    max_document_bytes: int = 1 << 20
    oversize: str = "split"
    max_decompressed_bytes: int = 8 << 30

    @classmethod
    def from_config(cls, corpus: dict) -> ReadOptions:
        return cls(
            text_unit=corpus["text_unit"],
            jsonl_text_field=corpus["jsonl_text_field"],
            jsonl_id_field=corpus["jsonl_id_field"],
            repeated_ids=corpus["repeated_ids"],
            bad_records=corpus["bad_records"],
            invalid_utf8=corpus["invalid_utf8"],
            max_document_bytes=corpus["max_document_bytes"],
            oversize=corpus["oversize"],
            max_decompressed_bytes=corpus["max_decompressed_mb"] << 20,
        )


def split_name(name: str) -> tuple[str, str]:
    """Return (format, compression) of a file name, e.g. ('.jsonl', '.gz'); format '' if unknown."""
    lower = name.lower()
    compression = next((c for c in COMPRESSIONS if lower.endswith(c)), "")
    stem = lower[: len(lower) - len(compression)]
    return next((f for f in FORMATS if stem.endswith(f)), ""), compression


@dataclass(frozen=True)
class CorpusSurvey:
    """Every file under the corpus root and what becomes of it, each list sorted by path.

    sources: read as input. unselected: matched by no `include` pattern. excluded: matched,
    then removed by an `exclude` pattern. refused: selected but not read, with the reason (a
    link leading outside the root, a link to nothing, not a regular file)."""

    sources: list[str]
    unselected: list[str]
    excluded: list[str]
    refused: list[tuple[str, str]]


def pattern_regex(pattern: str) -> re.Pattern[str]:
    """A glob over relative POSIX paths as a regular expression: `*` and `?` stay inside one
    folder name, `[...]` is a character class, a `**` segment spans any number of folders."""
    parts = []
    segments = pattern.split("/")
    for number, segment in enumerate(segments):
        last = number == len(segments) - 1
        if segment == "**":
            parts.append(".*" if last else "(?:[^/]+/)*")
            continue
        position, piece = 0, []
        while position < len(segment):
            char = segment[position]
            if char == "*":
                piece.append("[^/]*")
            elif char == "?":
                piece.append("[^/]")
            elif char == "[" and (close := segment.find("]", position + 2)) > 0:
                inner = segment[position + 1 : close]
                inner = "^" + inner[1:] if inner.startswith("!") else inner
                piece.append("[" + inner.replace("\\", "\\\\") + "]")
                position = close
            else:
                piece.append(re.escape(char))
            position += 1
        parts.append("".join(piece) + ("" if last else "/"))
    return re.compile("".join(parts), re.DOTALL)


def check_pattern(field: str, pattern: str) -> None:
    """Patterns select files below the root only: no absolute pattern, no `..` folder."""
    if pattern.startswith("/") or ".." in pattern.split("/"):
        raise CorpusError(
            f"{field} pattern {pattern!r} reaches outside corpus.root; patterns are relative to the root and may "
            "not start with '/' or hold a '..' folder: point corpus.root at the folder that holds all your text"
        )


def _walk(base: Path, follow_outside: bool) -> Iterator[tuple[str, str]]:
    """(relative path, what it is) for everything under `base`: "file", or for what is not
    read "outside_link", "broken_link", "special" (a FIFO, socket or device). Links inside the
    root are read through; a link to a folder inside the root is not descended (its files are
    found at their own place), one leading outside only under `follow_outside`."""
    real_base = base.resolve()
    visited = {real_base}
    folders = [("", base)]
    while folders:
        prefix, folder = folders.pop()
        try:
            entries = sorted(os.scandir(folder), key=lambda entry: entry.name)
        except OSError as error:
            raise CorpusError(f"{folder}: cannot be listed ({error.strerror}); check its permissions") from None
        for entry in entries:
            relative = prefix + entry.name
            if not entry.is_symlink():
                if entry.is_dir(follow_symlinks=False):
                    folders.append((relative + "/", Path(entry.path)))
                else:
                    yield relative, "file" if entry.is_file(follow_symlinks=False) else "special"
                continue
            try:
                target = Path(entry.path).resolve(strict=True)
            except (OSError, RuntimeError):
                yield relative, "broken_link"
                continue
            inside = target == real_base or real_base in target.parents
            if not inside and not follow_outside:
                yield relative, "outside_link"
            elif target.is_dir():
                if not inside and target not in visited:
                    visited.add(target)
                    folders.append((relative + "/", target))
            else:
                yield relative, "file" if target.is_file() else "special"


REFUSAL_REASONS = {
    "outside_link": "a link leading outside corpus.root (set corpus.outside_links: follow to read it)",
    "broken_link": "a link to nothing",
    "special": "not a regular file",
}


def survey_corpus(root: str | Path, include: list[str], exclude: list[str], follow_outside: bool = False) -> CorpusSurvey:
    """Walk the corpus root once and sort every file into sources, unselected, excluded and refused."""
    base = Path(root)
    if not base.is_dir():
        raise CorpusError(f"{root}: corpus root is not a folder; set corpus.root to the folder holding your text")
    for field, patterns in (("corpus.include", include), ("corpus.exclude", exclude)):
        for pattern in patterns:
            check_pattern(field, pattern)
    wanted = [pattern_regex(p) for p in include]
    unwanted = [pattern_regex(p) for p in exclude]

    def excluded(path: str) -> bool:
        folders = path.split("/")
        candidates = ["/".join(folders[:n]) for n in range(1, len(folders) + 1)]
        return any(p.fullmatch(c) for p in unwanted for c in candidates)

    sources, unselected, dropped, refused = [], [], [], []
    for path, kind in _walk(base, follow_outside):
        if not any(p.fullmatch(path) for p in wanted):
            unselected.append(path)
        elif excluded(path):
            dropped.append(path)
        elif kind != "file":
            refused.append((path, REFUSAL_REASONS[kind]))
        else:
            sources.append(path)
    unknown = [p for p in sources if not split_name(p)[0]]
    if unknown:
        raise CorpusError(f"{base / unknown[0]}: not a .txt or .jsonl file (optionally .gz/.bz2/.xz/.zst); narrow corpus.include or add it to corpus.exclude")
    return CorpusSurvey(sorted(sources), sorted(unselected), sorted(dropped), sorted(refused))


def chunk_key(source: str, index: int) -> str:
    """A readable, stable job name for a chunk: file stem, a short path hash, the chunk index."""
    stem = re.sub(r"[^A-Za-z0-9_.-]+", "_", PurePosixPath(source).name)[:40]
    digest = hashlib.sha1(source.encode("utf-8")).hexdigest()[:8]
    return f"{stem}-{digest}-{index:04d}"


def plan_chunks(root: str | Path, sources: list[str], chunk_bytes: int, text_unit: str, pack_bytes: int = 0) -> list[Chunk]:
    """Chunks from file sizes alone (no reading), in corpus order (path, then index).

    A file of one chunk smaller than `pack_bytes` joins a pack with its neighbours in path
    order. A pack ends after a file with probability (file size / pack_bytes), decided by a
    hash of the file's path, so packs hold about `pack_bytes` on average, and where a pack ends
    depends only on the files at that spot: adding, removing or editing a file changes its own
    pack (and at most the next one), never the packs elsewhere. A pack that would exceed
    `chunk_bytes` is cut early (rare while `pack_bytes` is well below it; such a cut can move
    the packs up to the next drawn end).
    """
    chunks: list[Chunk] = []
    pack: list[str] = []
    held = 0

    def close_pack() -> None:
        nonlocal held
        if pack:
            more = f"+{len(pack) - 1}" if len(pack) > 1 else ""  # a pack is named after its first file
            chunks.append(Chunk(chunk_key(pack[0], 0) + more, tuple(pack)))
            pack.clear()
            held = 0

    for source in sources:
        fmt, compression = split_name(source)
        size = (Path(root) / source).stat().st_size
        whole = compression or (fmt == ".txt" and text_unit == "file")
        count = 1 if whole else max(1, -(-size // chunk_bytes))
        if count == 1 and size < pack_bytes:
            if held + size > chunk_bytes:
                close_pack()
            pack.append(source)
            held += size
            if _pack_ends_after(source, size, pack_bytes):
                close_pack()
            continue
        close_pack()
        chunks.extend(Chunk(chunk_key(source, k), (source,), k, count) for k in range(count))
    close_pack()
    return chunks


def _pack_ends_after(source: str, size: int, pack_bytes: int) -> bool:
    """Whether a pack ends after this file: a uniform draw from its path below size / pack_bytes."""
    draw = int.from_bytes(hashlib.blake2b(source.encode("utf-8"), digest_size=8).digest(), "big") / 2.0**64
    return draw < size / pack_bytes


def _new_decompressor(compression: str):
    """A fresh decompressor of one member (gzip), stream (bz2, xz) or frame (zstd)."""
    if compression == ".gz":
        return zlib.decompressobj(wbits=31)
    if compression == ".bz2":
        return bz2.BZ2Decompressor()
    if compression == ".xz":
        return lzma.LZMADecompressor()
    return zstandard.ZstdDecompressor().decompressobj()


class _Frames(io.RawIOBase):
    """The members (gzip), streams (bz2, xz) or frames (zstd) of a compressed file one after
    another, with an error when the input ends inside one.

    Every byte decompressed before damage is delivered before the error is raised, so the
    error can say how much text was read (the standard library's readers drop a whole read's
    output on a cut-off member, and zstandard's end silently, losing the rest unnoticed).
    Input goes in small pieces, so one step's output stays bounded (a zstd block expands at
    most about 44,000-fold: 1 KiB gives at most about 44 MiB).
    """

    FEED = 1024

    def __init__(self, raw: BinaryIO, compression: str) -> None:
        self._raw = raw
        self._compression = compression
        self._part = _new_decompressor(compression)
        self._inside = False  # the current member has had input but not its end
        self._ready = memoryview(b"")

    def readable(self) -> bool:
        return True

    def close(self) -> None:
        self._raw.close()
        super().close()

    def readinto(self, buffer: memoryview) -> int:  # type: ignore[override]
        while not self._ready:
            data = self._raw.read(self.FEED)
            if not data:
                if self._inside:
                    raise EOFError("the input ends inside a compressed member")
                return 0
            self._ready = memoryview(self._decode(data))
        size = min(len(buffer), len(self._ready))
        buffer[:size] = self._ready[:size]
        self._ready = self._ready[size:]
        return size

    def _decode(self, data: bytes) -> bytes:
        out = []
        while data:
            if not self._inside and self._compression in (".gz", ".xz"):
                data = data.lstrip(b"\0")  # padding between members or streams
                if not data:
                    break
            self._inside = True
            out.append(self._part.decompress(data))
            if not self._part.eof:
                break
            data, self._inside = self._part.unused_data, False
            self._part = _new_decompressor(self._compression)
        return b"".join(out)


class _BoundedReader(io.RawIOBase):
    """Decompressed stream that stops with a clear error past a size limit (decompression bombs)."""

    def __init__(self, inner: _Frames, limit: int, path: str) -> None:
        self._inner, self._limit, self._path, self.position = inner, limit, path, 0

    def readable(self) -> bool:
        return True

    def readinto(self, buffer: memoryview) -> int:  # type: ignore[override]
        try:
            data = self._inner.read(len(buffer)) or b""
        except (EOFError, OSError, zlib.error, lzma.LZMAError, zstandard.ZstdError) as error:
            raise CorpusError(
                f"{self._path}: compressed data is damaged or truncated after {self.position} bytes of text ({error}); re-create or re-download the file"
            ) from error
        self.position += len(data)
        if self.position > self._limit:
            raise CorpusError(
                f"{self._path}: expands beyond corpus.max_decompressed_mb ({self._limit >> 20} MiB); check the file (a decompression bomb?) or raise the limit"
            )
        buffer[: len(data)] = data
        return len(data)

    def close(self) -> None:
        self._inner.close()
        super().close()


def open_source(path: Path, max_decompressed_bytes: int) -> BinaryIO:
    """Open a file as a binary stream of its (decompressed) bytes."""
    compression = split_name(path.name)[1]
    if not compression:
        return open(path, "rb")
    frames = _Frames(open(path, "rb"), compression)  # read unbuffered: a buffer would drop its text at an error
    return io.BufferedReader(_BoundedReader(frames, max_decompressed_bytes, str(path)), READ_BLOCK)


def is_blank_line(line: bytes, limit: int) -> bool:
    """Whether a whole line (with its terminator) is blank: only spaces, tabs, form feeds and
    vertical tabs before its terminator, and at most `limit` bytes. A longer line may come in
    pieces (`_lines`), which are never blank; were it blank when read whole, where the read
    blocks fall would decide where a paragraph ends."""
    return len(line) <= limit and line.strip(_BLANK_BYTES) == b""


@functools.lru_cache(maxsize=8)
def blank_line_patterns(limit: int) -> tuple[re.Pattern[bytes], re.Pattern[bytes]]:
    """One or more blank lines (`is_blank_line`): matched at a line start, and found after a
    line's terminator."""
    run = _BLANK_RUN % (max(limit - 2, 0), max(limit - 1, 0))
    return re.compile(run), re.compile(rb"(?:\r\n|\n|\r(?!\n))(" + run + rb")")


def _lines(stream: BinaryIO, offset: int, limit: int, runs: bool = False) -> Iterator[tuple[int, bytes, bool, bool]]:
    """Yield (offset, bytes with terminator, complete, blank) for LF, CRLF or lone-CR lines.

    A line longer than `limit` comes in pieces of `limit` bytes marked incomplete, so no line
    is ever held whole in memory; a blank line (`is_blank_line`) is complete and starts where
    no piece ended. With `runs`, consecutive blank lines come as one item and so do consecutive
    complete lines that are not, found by one regular-expression scan of each block rather than
    line by line: a paragraph reader then handles a paragraph at a time.
    """
    pending = b""
    open_line = False  # `pending` continues a line whose start came as a piece
    while True:
        block = stream.read(READ_BLOCK)
        if not block:
            if pending:
                yield offset, pending, True, not open_line and is_blank_line(pending, limit)
            return
        data = pending + block
        stop = _complete_lines_end(data)
        yield from (_line_runs if runs else _each_line)(data[:stop], offset, open_line, limit)
        open_line = open_line and stop == 0
        offset += stop
        rest = data[stop:]
        while len(rest) > limit:
            yield offset, rest[:limit], False, False
            open_line = True
            offset += limit
            rest = rest[limit:]
        pending = rest


def _complete_lines_end(data: bytes) -> int:
    """Where the last line terminator of `data` ends: 0 if none, and a carriage return at the
    very end does not count (it could be the first half of CRLF: the next block decides)."""
    last = max(data.rfind(b"\n"), data.rfind(b"\r"))
    if last == len(data) - 1 and data[last:] == b"\r":
        last = max(data.rfind(b"\n", 0, last), data.rfind(b"\r", 0, last))
    return last + 1


def _each_line(region: bytes, offset: int, open_line: bool, limit: int) -> Iterator[tuple[int, bytes, bool, bool]]:
    """The complete lines of `region` one by one (the first continues a piece when `open_line`)."""
    position = 0
    for match in _TERMINATOR.finditer(region):
        line = region[position : match.end()]
        yield offset + position, line, True, not open_line and is_blank_line(line, limit)
        position, open_line = match.end(), False


def _line_runs(region: bytes, offset: int, open_line: bool, limit: int) -> Iterator[tuple[int, bytes, bool, bool]]:
    """The complete lines of `region` as runs of blank lines and runs of other lines."""
    position = 0
    if open_line and region:  # the rest of a line begun in pieces: never blank, never with the lines after it
        position = _TERMINATOR.search(region).end()  # type: ignore[union-attr]  # region ends with a terminator
        yield offset, region[:position], True, False
    at_start, after_end = blank_line_patterns(limit)
    first = at_start.match(region, position)
    later = (gap.span(1) for gap in after_end.finditer(region, first.end() if first else position))
    for start, end in chain([first.span()] if first else [], later):
        if start > position:
            yield offset + position, region[position:start], True, False
        yield offset + start, region[start:end], True, True
        position = end
    if position < len(region):
        yield offset + position, region[position:], True, False


def _first_line_start(handle: BinaryIO, start: int, limit: int) -> tuple[int, bool]:
    """For a chunk starting at byte `start`, find the first line start >= start and whether the
    line before it is blank (`is_blank_line`: a paragraph may begin there)."""
    if start == 0:
        return 0, True
    handle.seek(start - 1)
    position = start - 1  # file offset of the block's first byte
    while True:
        block = handle.read(READ_BLOCK)
        if not block:
            return position, True
        match = _TERMINATOR.search(block)
        if match is None:
            position += len(block)
            continue
        line_start = position + match.end()
        if match.group() == b"\r" and match.end() == len(block) and handle.read(1) == b"\n":
            line_start += 1
        return line_start, _previous_line_blank(handle, line_start, limit)


def _previous_line_blank(handle: BinaryIO, line_start: int, limit: int) -> bool:
    """Whether the line that ends just before `line_start` is blank (`is_blank_line`), scanning
    back through its blanks; no further back than `limit` bytes."""
    handle.seek(max(0, line_start - 2))
    tail = handle.read(min(2, line_start))
    position = line_start - (2 if tail == b"\r\n" else 1)  # where the line's terminator starts
    while position > 0:
        step = min(READ_BLOCK, position)
        handle.seek(position - step)
        block = handle.read(step)
        stripped = block.rstrip(b" \t\f\v")
        if stripped == b"":
            position -= step
            if line_start - position > limit:
                return False
            continue
        begins = position - step + len(stripped)  # where the line would start
        return stripped[-1:] in (b"\n", b"\r") and line_start - begins <= limit
    return line_start <= limit


def _grapheme_cut(data: bytes) -> int:
    """Byte index of the last grapheme-cluster boundary before the final (maybe incomplete) cluster.

    The bytes of a character that the limit cut in two decode as escapes, one cluster each; they
    all go to the next piece, so a piece never ends inside a UTF-8 sequence. When one cluster
    fills the whole limit (e.g. a long run of combining marks), the cut falls between its code
    points instead. The clusters are found by unicode_breaks.last_cluster_start, which examines
    only the end of the text unless the end is one long run of joined characters.
    """
    text = data.decode("utf-8", "surrogateescape").rstrip(_ESCAPED_BYTES)
    start = unicode_breaks.last_cluster_start(text)
    head = text[:start] if start > 0 else text
    return len(head.encode("utf-8", "surrogateescape")) or len(data)


class _Assembler:
    """Collects the byte pieces of one document and applies the size limit policy."""

    def __init__(self, limit: int, policy: str, tally: Tally) -> None:
        self.limit, self.policy, self.tally = limit, policy, tally
        self.start: int | None = None
        self.parts: list[bytes] = []
        self.size = 0
        self.oversized = False

    def begin(self, offset: int) -> None:
        self.start, self.parts, self.size, self.oversized = offset, [], 0, False

    def add(self, data: bytes) -> Iterator[tuple[int, bytes]]:
        if self.oversized and self.policy != "split":
            return
        self.parts.append(data)
        self.size += len(data)
        while self.size > self.limit:
            if not self.oversized:
                self.oversized = True
                if self.policy == "split":
                    self.tally.file.read += 1
            buffer = b"".join(self.parts)
            if self.policy == "drop":
                self.parts, self.size = [], 0
                return
            cut = _grapheme_cut(buffer[: self.limit])
            piece, rest = buffer[:cut], buffer[cut:]
            assert self.start is not None
            if self.policy == "truncate":
                self.parts, self.size = [piece], len(piece)
                return
            yield self.start, piece
            self.tally.file.pieces_added += 1
            self.start += cut
            self.parts, self.size = [rest], len(rest)

    def finish(self) -> Iterator[tuple[int, bytes]]:
        if self.start is None:
            return
        start, data = self.start, b"".join(self.parts)
        self.start = None
        if self.oversized and self.policy == "drop":
            self.tally.file.read += 1
            self.tally.drop("oversize", start)
            return
        if not self.oversized or self.policy == "truncate":
            self.tally.file.read += 1
        if self.oversized and self.policy == "truncate":
            self.tally.file.truncated += 1
        yield start, data


def _raw_text_documents(handle: BinaryIO, piece: _FilePiece, options: ReadOptions, tally: Tally) -> Iterator[tuple[int, bytes]]:
    """Byte ranges of the documents of a .txt file piece: (offset, bytes)."""
    unit = options.text_unit
    assembler = _Assembler(options.max_document_bytes, options.oversize, tally)
    end = piece.end
    if piece.start == 0:
        offset, previous_blank = 0, True
    else:
        offset, previous_blank = _first_line_start(handle, piece.start, options.max_document_bytes)
        handle.seek(offset)
    inside = False
    line_open = False  # the previous piece was an incomplete line
    for position, data, complete, blank in _lines(handle, offset, options.max_document_bytes, runs=unit != "line"):
        starts_line = not line_open
        line_open = not complete
        if unit == "file":
            if not inside:
                assembler.begin(position)
                inside = True
            yield from assembler.add(data)
            continue
        if blank:
            if inside:
                yield from assembler.finish()
                inside = False
            previous_blank = True
            continue
        if not inside and starts_line:
            if unit == "line" or previous_blank:
                if end is not None and position >= end:
                    return
                assembler.begin(position)
                inside = True
            previous_blank = False
        if inside:
            yield from assembler.add(data)
            if unit == "line" and complete:
                yield from assembler.finish()
                inside = False
    if inside:
        yield from assembler.finish()


_BYTE_ORDER_MARKS = (
    (codecs.BOM_UTF32_LE, "UTF-32LE"), (codecs.BOM_UTF32_BE, "UTF-32BE"), (codecs.BOM_UTF16_LE, "UTF-16LE"), (codecs.BOM_UTF16_BE, "UTF-16BE"),
)  # fmt: skip


def foreign_encoding(data: bytes, file_start: bool) -> str | None:
    """The UTF-16 or UTF-32 form the bytes look like, or None: a byte order mark at the start of
    the file, or NUL bytes at every second position (UTF-16, where Latin letters take a zero
    byte) or at three of every four (UTF-32). Such text is often valid UTF-8 byte by byte (NUL
    is a character), so decoding alone would not notice it."""
    if file_start:
        for mark, name in _BYTE_ORDER_MARKS:
            if data.startswith(mark):
                return name
    sample = data[: 1 << 12]
    if b"\0" not in sample or len(sample) < 8:
        return None
    size = len(sample) // 4 * 4
    zeros = [sample[k:size:4].count(0) / (size // 4) for k in range(4)]
    if min(zeros[1:]) > 0.9 and zeros[0] < 0.1:
        return "UTF-32LE"
    if min(zeros[:3]) > 0.9 and zeros[3] < 0.1:
        return "UTF-32BE"
    even, odd = (zeros[0] + zeros[2]) / 2, (zeros[1] + zeros[3]) / 2
    if odd > 0.3 and even < 0.05:
        return "UTF-16LE"
    if even > 0.3 and odd < 0.05:
        return "UTF-16BE"
    return None


def _decoder(options: ReadOptions, tally: Tally, path: str):
    """A function decoding one document's bytes per the invalid-UTF-8 policy (None = drop).
    UTF-16 and UTF-32 text is not UTF-8 under any policy: it stops the run with advice to
    convert the file, or is dropped (replacing its bytes would keep nothing of the text)."""

    def decode(offset: int, data: bytes) -> str | None:
        if offset == 0 and data.startswith(codecs.BOM_UTF8):
            data, offset = data[3:], 3
        encoding = foreign_encoding(data, offset == 0) if (offset == 0 or b"\0" in data) else None
        if encoding is not None:
            if options.invalid_utf8 == "stop":
                raise CorpusError(
                    f"{path}: looks like {encoding} text, not UTF-8 (from byte offset {offset}); convert the file "
                    f"(e.g. iconv -f {encoding} -t UTF-8), or set corpus.invalid_utf8: drop to leave it out"
                )
            tally.drop("invalid_utf8", offset)
            return None
        try:
            return data.decode("utf-8")
        except UnicodeDecodeError as error:
            if options.invalid_utf8 == "stop":
                raise CorpusError(
                    f"{path}: invalid UTF-8 at byte offset {offset + error.start} ({error.reason}); re-encode the file "
                    "as UTF-8 from the encoding it is in (e.g. iconv -f LATIN1 -t UTF-8 for Latin-1 text), or set "
                    "corpus.invalid_utf8 to replace or drop"
                ) from None
            if options.invalid_utf8 == "drop":
                tally.drop("invalid_utf8", offset)
                return None
            text = data.decode("utf-8", "replace")
            tally.file.replaced_sequences += text.count("\ufffd") - data.count("\ufffd".encode())
            return text

    return decode


def _surrogate_policy(value: str, options: ReadOptions, tally: Tally, where: str, offset: int) -> str | None:
    """Apply the invalid-UTF-8 policy to a JSON string holding escaped lone surrogates (e.g.
    "\\ud800"): they are not characters, so no UTF-8 file or Arrow column can hold them."""
    if options.invalid_utf8 == "stop":
        found = _LONE_SURROGATE.search(value)
        assert found is not None
        raise CorpusError(
            f"{where}: field {options.jsonl_text_field!r} holds the lone surrogate escape \\u{ord(found.group()):04x} "
            f"at character {found.start()}, which is not text; fix the record or set corpus.invalid_utf8 to replace or drop"
        )
    if options.invalid_utf8 == "drop":
        tally.drop("invalid_utf8", offset)
        return None
    replaced, count = _LONE_SURROGATE.subn("\ufffd", value)
    tally.file.replaced_sequences += count
    return replaced


def _json_documents(handle: BinaryIO, piece: _FilePiece, options: ReadOptions, tally: Tally, path: str) -> Iterator[Document]:
    end = piece.end
    offset = 0
    if piece.start:
        offset, _ = _first_line_start(handle, piece.start, options.max_document_bytes)
        handle.seek(offset)
    decode = _decoder(options, tally, path)
    skipping = False
    for position, data, complete, blank in _lines(handle, offset, options.max_document_bytes):
        if skipping:
            skipping = not complete
            continue
        if end is not None and position >= end:
            return
        if blank:
            continue
        tally.file.read += 1
        if not complete or len(data) > options.max_document_bytes:
            tally.drop("oversize", position)  # a JSON record cannot be split; its line is skipped whole
            skipping = not complete
            continue
        text = decode(position, data)
        if text is None:
            continue
        problem, record, value = None, {}, None
        try:
            parsed = json.loads(text)
            record = parsed if isinstance(parsed, dict) else {}
        except json.JSONDecodeError as error:
            problem, reason = f"not valid JSON ({error.msg} at column {error.colno})", "bad_json"
        except (ValueError, RecursionError) as error:  # e.g. a 5,000-digit number, nesting too deep
            problem, reason = f"not readable JSON ({error})", "bad_json"
        if problem is None:
            value = record.get(options.jsonl_text_field)
            if not isinstance(value, str):
                problem, reason = f"no string field {options.jsonl_text_field!r}", "no_text"
            elif _LONE_SURROGATE.search(value):
                value = _surrogate_policy(value, options, tally, f"{path}: record at byte offset {position}", position)
                if value is None:
                    continue
        if problem is not None:
            if options.bad_records == "stop":
                raise CorpusError(
                    f"{path}: record at byte offset {position}: {problem}; fix the line, set corpus.jsonl_text_field, or set corpus.bad_records to drop"
                )
            tally.drop(reason, position)
            continue
        raw_id = record.get(options.jsonl_id_field) if options.jsonl_id_field else None
        usable = isinstance(raw_id, (str, int)) and not isinstance(raw_id, bool) and not _LONE_SURROGATE.search(str(raw_id))
        if not usable:
            doc_id = f"{piece.source}:{position}"
        else:
            doc_id = f"{piece.source}#{raw_id}" if options.repeated_ids == "by_file" else str(raw_id)
        yield Document(doc_id, piece.source, position, cast(str, value))  # a string: every other case continued above


@dataclass(frozen=True)
class _FilePiece:
    """The bytes of one file whose documents a reader yields: those starting in [start, end)
    (end None: to the end of the file)."""

    source: str
    start: int
    end: int | None


def _pieces(chunk: Chunk, chunk_bytes: int) -> Iterator[_FilePiece]:
    """What a chunk reads: each file of a pack whole, or its byte range of one large file."""
    if chunk.count == 1:
        yield from (_FilePiece(source, 0, None) for source in chunk.sources)
        return
    (source,) = chunk.sources
    end = (chunk.index + 1) * chunk_bytes if chunk.index + 1 < chunk.count else None
    yield _FilePiece(source, chunk.index * chunk_bytes, end)


def read_documents(root: str | Path, chunk: Chunk, chunk_bytes: int, options: ReadOptions, tally: Tally, collect_problems: bool = False) -> Iterator[Document]:
    """Stream the documents a chunk owns, in corpus order (file, then offset), counting every
    one in `tally`. A file that cannot be read as configured raises CorpusError, or with
    `collect_problems` is recorded in the tally and reading goes on with the next file."""
    for piece in _pieces(chunk, chunk_bytes):
        tally.start(piece.source)
        try:
            yield from _piece_documents(Path(root) / piece.source, piece, options, tally)
        except CorpusError as error:
            if not collect_problems:
                raise
            tally.problem(str(error))


def _piece_documents(path: Path, piece: _FilePiece, options: ReadOptions, tally: Tally) -> Iterator[Document]:
    try:
        handle = open_source(path, options.max_decompressed_bytes)
    except OSError as error:
        raise CorpusError(f"{path}: cannot be opened ({error.strerror}); check that it exists and is readable") from None
    with handle:
        if split_name(piece.source)[0] == ".jsonl":
            yield from _json_documents(handle, piece, options, tally, str(path))
            return
        decode = _decoder(options, tally, str(path))
        for offset, data in _raw_text_documents(handle, piece, options, tally):
            text = decode(offset, data)
            if text is not None:
                yield Document(f"{piece.source}:{offset}", piece.source, offset, text)


def document_at(root: str | Path, source: str, offset: int, options: ReadOptions) -> Document | None:
    """The document of `source` (relative to `root`) that starts at byte `offset` of its
    uncompressed text, exactly as `read_documents` reads it; None when none starts there.
    Reading starts at `offset` where the file can seek and a document begins on a line; else
    (compressed files, pieces of a split oversized document) at the start of the file."""
    tally = Tally()
    tally.start(source)
    for start in [offset, 0] if offset and not split_name(source)[1] else [0]:
        for document in _piece_documents(Path(root) / source, _FilePiece(source, start, None), options, tally):
            if document.offset == offset:
                return document
            if document.offset > offset:
                break
    return None
