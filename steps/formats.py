"""Formats: every file a build hands on, defined once, for the steps that write them, the reader,
audit and the commands.

- `vocabulary.tsv`: UTF-8 TSV, the header `id<TAB>token<TAB>count<TAB>kind`, then one row per id
  in id order. `kind` is `reserved`, `unknown` (a class of out-of-vocabulary words) or `word` for
  word units; `control`, `byte` or `piece` for subword units. Piece fields escape backslash, tab,
  line feed and carriage return (a backslash and one of `\\`, t, n, r); word fields never hold them.
  `count` is the number of train occurrences of the id in the build's id streams.
- The ids of a build are the (id, token, kind) rows of its vocabulary; `ids_digest` is their
  SHA-256. Shards name it in their metadata: counts may change while the ids stay. The jobs
  that read the ids take them from an Arrow IPC file beside the vocabulary file
  (`write_ids_table`), which needs no parsing.
- Shards: Parquet, one file per split, kind and chunk; columns by kind (`shard_schema`); the
  key-value metadata `corpusmill` holds JSON (`shard_metadata`).
- Provenance: beside each shard file a row table, and per chunk and split a document table
  (`provenance_rows_schema`, `provenance_documents_schema`: where every row comes from, kept out
  of the shards so their columns stay as they are).
- Statistics that cross stages are typed records with JSON round trips (`ShardStats`).
- The baseline's train n-gram totals, kept between runs (`NgramTotals`).

Importing this module loads neither numpy nor Arrow (the workflow process imports it); the
functions that need them load them.
"""

from __future__ import annotations

import hashlib
import json
from collections.abc import Callable, Iterator, Mapping, Sequence
from contextlib import contextmanager
from dataclasses import asdict, dataclass, field
from functools import cached_property
from pathlib import Path
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    import numpy as np
    import pyarrow as pa

VOCABULARY_HEADER = "id\ttoken\tcount\tkind"
PAD, UNK, BOS, EOS = "<pad>", "<unk>", "<s>", "</s>"
RESERVED = (PAD, UNK, BOS, EOS)
WORD_KINDS = ("reserved", "unknown", "word")
SUBWORD_KINDS = ("control", "byte", "piece")
# The kinds of ids that are not a word or piece of the text.
SYMBOL_KINDS = frozenset({"reserved", "unknown", "control"})
_ESCAPES = {"\\": "\\\\", "\t": "\\t", "\n": "\\n", "\r": "\\r"}
_UNESCAPES = {"\\": "\\", "t": "\t", "n": "\n", "r": "\r"}

KINDS = ("ngram", "block", "stream")
# The section of the `windows` configuration that enables each kind.
KIND_SECTIONS = {"ngram": "ngram", "block": "blocks", "stream": "streams"}
METADATA_KEY = b"corpusmill"
ID_TYPES = ("uint16", "uint32", "int64")


class FormatError(ValueError):
    """A file that does not follow its format; the message names the file and the place."""


def escape(piece: str) -> str:
    """A subword piece as one TSV field: backslash, tab, line feed and carriage return escaped."""
    return "".join(_ESCAPES.get(char, char) for char in piece) if any(c in piece for c in _ESCAPES) else piece


def unescape(text: str) -> str:
    """The piece an escaped TSV field stands for."""
    if "\\" not in text:
        return text
    out, position = [], 0
    while position < len(text):
        char = text[position]
        if char == "\\" and position + 1 < len(text) and text[position + 1] in _UNESCAPES:
            out.append(_UNESCAPES[text[position + 1]])
            position += 2
        else:
            out.append(char)
            position += 1
    return "".join(out)


def _shown(tokens: pa.StringArray, kinds: pa.StringArray) -> pa.StringArray:
    """The tokens as vocabulary.tsv writes them: the fields of subword kinds escaped."""
    import numpy as np
    import pyarrow as pa
    import pyarrow.compute as pc

    pieces = np.flatnonzero(pc.is_in(kinds, value_set=pa.array(SUBWORD_KINDS)).to_numpy(zero_copy_only=False))
    if not len(pieces):
        return tokens
    shown = tokens.to_pylist()
    for number in pieces.tolist():
        shown[number] = escape(shown[number])
    return pa.array(shown, pa.string())


def _lines(columns: Sequence[pa.Array]) -> bytes:
    """The rows of these string columns as tab-separated lines, each ended by a line feed; joined
    by Arrow rather than one Python string a row (the cost grew with the vocabulary)."""
    import pyarrow as pa
    import pyarrow.compute as pc

    if not len(columns[0]):
        return b""
    lines = pc.binary_join_element_wise(*columns, "\t")
    joined = pc.binary_join(pa.ListArray.from_arrays(pa.array([0, len(lines)], pa.int32()), lines), "\n")
    return joined[0].as_buffer().to_pybytes() + b"\n"


def _id_column(size: int) -> pa.StringArray:
    import numpy as np
    import pyarrow as pa

    return pa.array(np.arange(size)).cast(pa.string())


class Vocabulary:
    """The ids of a build: `tokens[i]` is the token with id i, with its train count and kind.

    Made from lists, or by the readers from the Arrow columns they read (`from_columns`); then the
    Python lists are made only when something asks for them. Every shard job reads the ids and
    needs only the columns: a Python string and kind per id cost it time that grew with the
    vocabulary."""

    def __init__(self, tokens: list[str], counts: list[int], kinds: list[str]) -> None:
        self.__dict__.update(tokens=tokens, counts=counts, kinds=kinds)

    @classmethod
    def from_columns(cls, tokens: pa.StringArray, counts: np.ndarray, kinds: pa.StringArray, digest: str | None = None) -> Vocabulary:
        """The vocabulary of these columns, in id order (`digest`: its ids digest, when known)."""
        vocabulary = cls.__new__(cls)
        vocabulary.__dict__.update(token_array=tokens, count_array=counts, kind_array=kinds)
        if digest is not None:
            vocabulary.__dict__["ids_digest"] = digest
        return vocabulary

    def __eq__(self, other: object) -> bool:
        if not isinstance(other, Vocabulary):
            return NotImplemented
        return (self.tokens, self.counts, self.kinds) == (other.tokens, other.counts, other.kinds)

    __hash__ = None  # type: ignore[assignment]  # equal by lists, which change

    def __repr__(self) -> str:
        return f"Vocabulary(size={self.size}, units={self.units!r})"

    @cached_property
    def tokens(self) -> list[str]:
        return self.token_array.to_pylist()

    @cached_property
    def counts(self) -> list[int]:
        return self.count_array.tolist()

    @cached_property
    def kinds(self) -> list[str]:
        import pyarrow.compute as pc

        encoded = pc.dictionary_encode(self.kind_array)
        names = encoded.dictionary.to_pylist()
        return [names[code] for code in encoded.indices.to_numpy(zero_copy_only=False).tolist()]

    @cached_property
    def token_array(self) -> pa.StringArray:
        """The tokens as an Arrow array, for lookups."""
        import pyarrow as pa

        return pa.array(self.tokens, pa.string())

    @cached_property
    def count_array(self) -> np.ndarray:
        import numpy as np

        return np.array(self.counts, np.int64)

    @cached_property
    def kind_array(self) -> pa.StringArray:
        import pyarrow as pa

        return pa.array(self.kinds, pa.string())

    @property
    def size(self) -> int:
        return len(self.__dict__["tokens"]) if "tokens" in self.__dict__ else len(self.token_array)

    def token(self, number: int) -> str:
        """The token of one id, without making the list of all of them."""
        return self.token_array[number].as_py()

    def kind(self, number: int) -> str:
        """The kind of one id, without making the list of all of them."""
        return self.kind_array[number].as_py()

    @cached_property
    def symbol_ids(self) -> np.ndarray:
        """The ids, ascending, of every symbol that is not a word or piece of the text (reserved,
        unknown classes, control pieces)."""
        import numpy as np
        import pyarrow as pa
        import pyarrow.compute as pc

        return np.flatnonzero(pc.is_in(self.kind_array, value_set=pa.array(sorted(SYMBOL_KINDS))).to_numpy(zero_copy_only=False))

    @cached_property
    def reserved(self) -> dict[str, int]:
        """Every symbol → its id (`symbol_ids`)."""
        return {self.token(i): i for i in self.symbol_ids.tolist()}

    @cached_property
    def first_word_id(self) -> int:
        """The first id that is not a symbol (the vocabulary's size when there is none)."""
        symbols = self.symbol_ids.tolist()
        return next((i for i, symbol in enumerate(symbols) if i != symbol), len(symbols))

    @cached_property
    def index(self) -> dict[str, int]:
        return {token: i for i, token in enumerate(self.tokens)}

    def id(self, token: str) -> int:
        """The id of a token (e.g. '</s>'); KeyError when absent."""
        return self.index[token]

    def unknown_ids(self) -> dict[str, int]:
        """The symbols out-of-vocabulary text maps to: <unk> and the unknown classes."""
        import pyarrow.compute as pc

        found = {token: i for token, i in self.reserved.items() if self.kind(i) == "unknown" or token == UNK}
        if UNK not in found:  # <unk> of another kind than a symbol
            place = pc.index(self.token_array, UNK).as_py()
            if place >= 0:
                found[UNK] = place
        return found

    @cached_property
    def units(self) -> str:
        import pyarrow.compute as pc

        return "word" if frozenset(SUBWORD_KINDS).isdisjoint(pc.unique(self.kind_array).to_pylist()) else "subword"

    def with_counts(self, counts: np.ndarray | Sequence[int]) -> Vocabulary:
        import numpy as np

        return Vocabulary.from_columns(self.token_array, np.asarray(counts), self.kind_array)

    def to_tsv(self) -> str:
        """The text of the vocabulary.tsv this vocabulary is written as."""
        import pyarrow as pa

        columns = [_id_column(self.size), _shown(self.token_array, self.kind_array), pa.array(self.count_array, pa.int64()).cast(pa.string()), self.kind_array]
        return VOCABULARY_HEADER + "\n" + _lines(columns).decode("utf-8")

    @cached_property
    def sha256(self) -> str:
        """SHA-256 of the file this vocabulary is written as."""
        return hashlib.sha256(self.to_tsv().encode("utf-8")).hexdigest()

    @cached_property
    def ids_digest(self) -> str:
        """SHA-256 of the ids: one `id<TAB>token<TAB>kind` line per id, tokens as vocabulary.tsv
        writes them."""
        return hashlib.sha256(_lines([_id_column(self.size), _shown(self.token_array, self.kind_array), self.kind_array])).hexdigest()


def read_vocabulary(path: str | Path) -> Vocabulary:
    """Read a vocabulary.tsv, checking the header, that ids run 0, 1, 2, … and that every kind is
    known; raise FormatError naming the first bad line.

    Arrow's CSV reader parses it (an order of magnitude faster than line by line); a file it
    cannot parse is read again line by line to name the first bad line."""
    import numpy as np
    import pyarrow as pa
    import pyarrow.compute as pc
    import pyarrow.csv as pa_csv

    with open(path, "rb") as handle:
        first = handle.readline().rstrip(b"\n").decode("utf-8", "replace")
    if first != VOCABULARY_HEADER:
        raise FormatError(f"{path}: line 1: expected the header {VOCABULARY_HEADER!r}; is this a corpusmill vocabulary file?")
    try:
        table = pa_csv.read_csv(
            path,
            read_options=pa_csv.ReadOptions(use_threads=False, block_size=16 << 20),
            parse_options=pa_csv.ParseOptions(delimiter="\t", quote_char=False, escape_char=False),
            convert_options=pa_csv.ConvertOptions(
                column_types={"id": pa.int64(), "token": pa.string(), "count": pa.int64(), "kind": pa.string()},
                strings_can_be_null=False,
                quoted_strings_can_be_null=False,
            ),
        )
    except pa.ArrowInvalid as error:
        _raise_bad_line(path, str(error).splitlines()[0])
    ids = table["id"].to_numpy()
    wrong = np.flatnonzero(ids != np.arange(len(ids)))
    if len(wrong):
        _raise_bad_line(path, f"expected id {wrong[0]}, got {ids[wrong[0]]}")
    kind_column, token_column = table["kind"].combine_chunks(), table["token"].combine_chunks()
    known = [*WORD_KINDS, *SUBWORD_KINDS]
    strange = np.flatnonzero(~pc.is_in(kind_column, value_set=pa.array(known)).to_numpy(zero_copy_only=False))
    if len(strange):
        raise FormatError(f"{path}: line {strange[0] + 2}: kind {kind_column[int(strange[0])].as_py()!r}; allowed: {', '.join(sorted(known))}")
    pieces = np.flatnonzero(pc.is_in(kind_column, value_set=pa.array(SUBWORD_KINDS)).to_numpy(zero_copy_only=False))
    if len(pieces):  # piece fields are escaped; word fields are the tokens as they are
        tokens = token_column.to_pylist()
        for number in pieces.tolist():
            tokens[number] = unescape(tokens[number])
        token_column = pa.array(tokens, pa.string())
    counts = table["count"].to_numpy()
    if len(counts) and counts.min() < 0:
        raise FormatError(f"{path}: line {int(np.argmin(counts)) + 2}: a negative count")
    return Vocabulary.from_columns(token_column, counts, kind_column)


def write_ids_table(path: str | Path, vocabulary: Vocabulary) -> None:
    """The ids as an Arrow IPC file: columns token, count and kind in id order, the ids digest
    in the schema's `corpusmill` metadata. Every shard job reads the ids: this file reads with
    no text to parse and nothing to hash, two costs of vocabulary.tsv that grow with it."""
    import pyarrow as pa

    from .storage import atomic_path

    table = pa.table({"token": vocabulary.token_array, "count": pa.array(vocabulary.count_array, pa.int64()), "kind": vocabulary.kind_array})
    table = table.replace_schema_metadata({METADATA_KEY: json.dumps({"ids_sha256": vocabulary.ids_digest}).encode()})
    with atomic_path(path) as temporary, pa.OSFile(str(temporary), "wb") as sink, pa.ipc.new_file(sink, table.schema) as writer:
        writer.write_table(table)


def read_ids_table(path: str | Path) -> Vocabulary:
    """The ids `write_ids_table` wrote."""
    import pyarrow as pa

    with pa.OSFile(str(path), "rb") as source:
        table = pa.ipc.open_file(source).read_all()
    about = json.loads(table.schema.metadata[METADATA_KEY])
    return Vocabulary.from_columns(table["token"].combine_chunks(), table["count"].to_numpy(), table["kind"].combine_chunks(), about["ids_sha256"])


def _raise_bad_line(path: str | Path, reason: str) -> None:
    """Raise FormatError naming the first line that is not a valid row, or, when every line
    looks right, the reason the file could not be read."""
    expected = 0
    with open(path, encoding="utf-8", errors="replace") as handle:
        next(handle)
        for number, line in enumerate(handle, start=2):
            line = line.rstrip("\n")
            if not line:
                continue
            fields = line.split("\t")
            if len(fields) != 4 or not fields[0].isdigit() or int(fields[0]) != expected or not fields[2].lstrip("-").isdigit():
                raise FormatError(f"{path}: line {number}: expected '{expected}<TAB>token<TAB>count<TAB>kind', got {line[:80]!r}")
            expected += 1
    raise FormatError(f"{path}: cannot be read as a vocabulary file ({reason}); write it with corpusmill or fix that value")


# --- shards ------------------------------------------------------------------------------------


def enabled_kinds(windows: Mapping[str, Any]) -> list[str]:
    return [kind for kind in KINDS if windows[KIND_SECTIONS[kind]]["enabled"]]


def id_type_name(configured: str, vocabulary_size: int) -> str:
    """The configured id type, or the narrowest unsigned one holding every id; FormatError when
    the configured type cannot hold them."""
    if configured == "auto":
        return "uint16" if vocabulary_size <= 1 << 16 else "uint32"
    if configured == "uint16" and vocabulary_size > 1 << 16:
        raise FormatError(f"shards.id_type = uint16 cannot hold {vocabulary_size} ids; use auto or uint32")
    return configured


def kind_width(kind: str, windows: Mapping[str, Any]) -> int | None:
    """The fixed list width of a kind's id column: n-1 context ids or L+1 block ids; None for streams."""
    if kind == "ngram":
        return int(windows["ngram"]["n"]) - 1
    if kind == "block":
        return int(windows["blocks"]["length"]) + 1
    return None


def id_columns(kind: str) -> list[str]:
    return {"ngram": ["context", "target"], "block": ["ids"], "stream": ["ids"]}[kind]


def shard_schema(kind: str, id_type: str, windows: Mapping[str, Any]):  # -> pa.Schema
    """The columns of a kind: ngram (context fixed_size_list[n-1], target), block (ids
    fixed_size_list[L+1]), stream (doc_id, ids list)."""
    import pyarrow as pa

    ids = {"uint16": pa.uint16(), "uint32": pa.uint32(), "int64": pa.int64()}[id_type]
    if kind == "ngram":
        return pa.schema([("context", pa.list_(ids, kind_width(kind, windows))), ("target", ids)])
    if kind == "block":
        return pa.schema([("ids", pa.list_(ids, kind_width(kind, windows)))])
    return pa.schema([("doc_id", pa.string()), ("ids", pa.list_(ids))])


def shard_metadata(split: str, kind: str, chunk: str, vocabulary: Vocabulary, windows: Mapping[str, Any]) -> dict[bytes, bytes]:
    """The `corpusmill` key-value metadata of a shard file: split, kind, the chunk it holds, the
    ids it uses (digest, size, symbol ids), and n or the block settings."""
    detail: dict[str, Any] = {}
    if kind == "ngram":
        detail = {"n": windows["ngram"]["n"], "predict_end": windows["ngram"]["predict_end"]}
    elif kind == "block":
        detail = {key: value for key, value in windows["blocks"].items() if key != "enabled"}
    value = {
        "split": split,
        "kind": kind,
        "chunk": chunk,
        "ids_sha256": vocabulary.ids_digest,
        "vocabulary_size": vocabulary.size,
        "reserved": vocabulary.reserved,
        **detail,
    }
    return {METADATA_KEY: json.dumps(value, sort_keys=True).encode("utf-8")}


def file_sha256(path: str | Path) -> str:
    hasher = hashlib.sha256()
    with open(path, "rb") as handle:
        while block := handle.read(1 << 22):
            hasher.update(block)
    return hasher.hexdigest()


def code_digest(*modules: Any) -> str:
    """A digest of the source of some modules: what a result kept between runs was computed
    by, so that it is used only while that code is unchanged."""
    hasher = hashlib.sha256()
    for module in modules:
        hasher.update(Path(str(module.__file__)).read_bytes())
    return hasher.hexdigest()[:16]


# --- provenance ----------------------------------------------------------------------------------
#
# A chunk's documents of one split, encoded in the order the shard job cut them, laid end to end
# as one stream (<s> s1 </s> s2 </s> … per document, steps.windows.document_streams) give every
# id a *stream position*. Every row has one: an n-gram row its target's (a </s> target is the
# position of its sentence's </s>), a block row its first id's, a stream row its document's <s>.
#
# Document table (`provenance/<split>/documents-<chunk>.parquet`), one row per document in that
# order: doc_id, source (input file, relative to corpus.root), offset (byte offset of the
# document in the file's uncompressed text), position (stream position of its <s>) and
# sentences (ids per sentence, </s> not counted). Sentence s of a document starts at
# position + 1 + sum of (sentences[i] + 1) for i < s; token t of it is one position further per t.
#
# Row table (`provenance/<split>/<kind>-<chunk>.parquet`), runs of rows in row order: row (the
# first row of the run), rows (how many) and position (the first row's stream position); row
# row + k has position + k * step. Step (the `corpusmill` metadata, with split, kind, chunk and
# the shard's row count): 1 for n-gram rows, the block stride for blocks, 0 for streams (every
# run one row). Train rows are shuffled, so their runs are mostly one row long.


def provenance_rows_schema():  # -> pa.Schema
    import pyarrow as pa

    return pa.schema([("row", pa.int64()), ("rows", pa.int64()), ("position", pa.int64())])


def provenance_documents_schema():  # -> pa.Schema
    import pyarrow as pa

    return pa.schema([("doc_id", pa.string()), ("source", pa.string()), ("offset", pa.int64()), ("position", pa.int64()), ("sentences", pa.list_(pa.int32()))])


def provenance_step(kind: str, windows: Mapping[str, Any]) -> int:
    """How far the stream position moves from one row of a run to the next (see above)."""
    return {"ngram": 1, "block": int(windows["blocks"]["stride"]), "stream": 0}[kind]


def provenance_metadata(split: str, kind: str, chunk: str, step: int) -> dict[bytes, bytes]:
    value = {"split": split, "kind": kind, "chunk": chunk, "step": step}
    return {METADATA_KEY: json.dumps(value, sort_keys=True).encode("utf-8")}


# --- statistics records ------------------------------------------------------------------------


@dataclass
class Figures:
    """What one split of one input file (or of a chunk, or of the build) holds once encoded.

    tokens: ids of the text (words or pieces; not <s> </s>); unknown: of them, ids for text
    outside the vocabulary (<unk> and unknown classes); words: the words tokens are counted
    against (word units: the tokens themselves; subword units: whitespace-separated words of
    the sentences); byte_pieces and byte_runs: byte-fallback pieces and runs of them (each run
    one <unk> without byte fallback); by_unknown: unknown tokens per symbol id."""

    documents: int = 0
    sentences: int = 0
    tokens: int = 0
    unknown: int = 0
    words: int = 0
    byte_pieces: int = 0
    byte_runs: int = 0
    by_unknown: dict[str, int] = field(default_factory=dict)

    def add(self, other: Figures) -> None:
        for name in ("documents", "sentences", "tokens", "unknown", "words", "byte_pieces", "byte_runs"):
            setattr(self, name, getattr(self, name) + getattr(other, name))
        for key, count in other.by_unknown.items():
            self.by_unknown[key] = self.by_unknown.get(key, 0) + count

    def to_json(self) -> dict[str, Any]:
        value = asdict(self)
        value["by_unknown"] = dict(sorted(self.by_unknown.items(), key=lambda item: int(item[0])))
        return value

    @classmethod
    def from_json(cls, value: Mapping[str, Any]) -> Figures:
        return cls(**{**value, "by_unknown": dict(value.get("by_unknown", {}))})


@dataclass
class ShardFile:
    """One written shard file."""

    file: str  # relative to the build folder
    split: str
    kind: str
    chunk: str
    rows: int
    bytes: int
    sha256: str


@dataclass
class ShardStats:
    """What one shard job wrote: its files, and per split the rows of each kind, the ids in
    blocks (`block_ids` of `stream_ids`), and the encoded figures per input file."""

    chunk: str
    files: list[ShardFile] = field(default_factory=list)
    rows: dict[str, dict[str, int]] = field(default_factory=dict)  # split -> kind -> rows
    block_ids: dict[str, int] = field(default_factory=dict)
    stream_ids: dict[str, int] = field(default_factory=dict)
    sources: dict[str, dict[str, Figures]] = field(default_factory=dict)  # source -> split -> figures
    provenance: dict[str, str] = field(default_factory=dict)  # provenance file -> SHA-256

    def figures(self, source: str, split: str) -> Figures:
        return self.sources.setdefault(source, {}).setdefault(split, Figures())

    def to_json(self) -> dict[str, Any]:
        return {
            "chunk": self.chunk,
            "files": [asdict(f) for f in self.files],
            "rows": self.rows,
            "block_ids": self.block_ids,
            "stream_ids": self.stream_ids,
            "sources": {s: {split: f.to_json() for split, f in sorted(per.items())} for s, per in sorted(self.sources.items())},
            "provenance": dict(sorted(self.provenance.items())),
        }

    @classmethod
    def from_json(cls, value: Mapping[str, Any]) -> ShardStats:
        return cls(
            chunk=value["chunk"],
            files=[ShardFile(**f) for f in value["files"]],
            rows={split: dict(kinds) for split, kinds in value["rows"].items()},
            block_ids=dict(value["block_ids"]),
            stream_ids=dict(value["stream_ids"]),
            sources={s: {split: Figures.from_json(f) for split, f in per.items()} for s, per in value["sources"].items()},
            provenance=dict(value.get("provenance", {})),
        )


def read_shard_stats(path: str | Path) -> ShardStats:
    return ShardStats.from_json(json.loads(Path(path).read_text(encoding="utf-8")))


# --- n-gram totals kept between runs -------------------------------------------------------------
#
# `interim/baseline/train-ngram-totals.arrow`, an Arrow IPC file: the baseline's train counts at
# its highest order, kept so that a run whose train streams only gained files counts the new
# files alone. One record batch per bucket of steps.ngram_buckets, in bucket order, each in key
# order; columns `low` and `high` (uint64, the packed n-grams of steps.kneser_ney.Keys; `high`
# zero when keys fit 64 bits) and `count` (int64, occurrences). The schema's `corpusmill`
# metadata: order, vocabulary_size, code (a digest of the counting code), counted (every
# [file, sha256] of the train stream files the totals are of) and buckets.


@dataclass(frozen=True)
class NgramTotals:
    """What kept train n-gram totals are of."""

    order: int
    vocabulary_size: int
    code: str
    counted: tuple[tuple[str, str], ...]  # (stream file relative to the build folder, its SHA-256)
    buckets: int


@dataclass(frozen=True)
class KeptNgramTotals:
    """Kept totals read back: what they are of, and each bucket's columns."""

    about: NgramTotals
    reader: Any  # pyarrow.ipc.RecordBatchFileReader

    def bucket(self, bucket: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """(low, high, count) of one bucket."""
        batch = self.reader.get_batch(bucket)
        low, high, count = (batch.column(name).to_numpy() for name in ("low", "high", "count"))
        return low, high, count


def _ngram_totals_schema(about: NgramTotals) -> pa.Schema:
    import pyarrow as pa

    fields = [("low", pa.uint64()), ("high", pa.uint64()), ("count", pa.int64())]
    return pa.schema(fields, metadata={METADATA_KEY: json.dumps(asdict(about)).encode()})


@contextmanager
def writing_ngram_totals(path: str | Path, about: NgramTotals) -> Iterator[Callable[[Any, Any, Any], None]]:
    """Yields `write(low, high, count)`, to be called once per bucket in bucket order; the file
    replaces `path` only when the block ends with every bucket written."""
    import pyarrow as pa

    from .storage import atomic_path

    schema = _ngram_totals_schema(about)
    written = 0

    def write(low: Any, high: Any, count: Any) -> None:
        nonlocal written
        writer.write_batch(pa.record_batch([pa.array(low), pa.array(high), pa.array(count)], schema=schema))
        written += 1

    with atomic_path(path) as temporary, pa.OSFile(str(temporary), "wb") as sink, pa.ipc.new_file(sink, schema) as writer:
        yield write
        if written != about.buckets:
            raise ValueError(f"{written} buckets of n-gram totals written, {about.buckets} expected")


def read_ngram_totals(path: str | Path) -> KeptNgramTotals | None:
    """The totals, or None when the file is missing or not one of ours (they are then counted
    again)."""
    import pyarrow as pa

    try:
        reader = pa.ipc.open_file(pa.OSFile(str(path), "rb"))  # read, not mapped: a bucket's pages leave memory with it
        about = json.loads(reader.schema.metadata[METADATA_KEY])
        counted = tuple((str(f), str(d)) for f, d in about["counted"])
        kept = NgramTotals(int(about["order"]), int(about["vocabulary_size"]), str(about["code"]), counted, int(about["buckets"]))
        if reader.num_record_batches != kept.buckets or reader.schema.remove_metadata() != _ngram_totals_schema(kept).remove_metadata():
            return None
        return KeptNgramTotals(kept, reader)
    except (OSError, KeyError, ValueError, TypeError, pa.ArrowInvalid):
        return None
