"""Vocabulary: token counts per chunk and split, their merge, the cutoff, and the vocabulary file.

Only train counts choose the vocabulary; dev and test counts are kept for the OOV statistics.
Ids: reserved symbols first (fixed, see RESERVED), then the unknown classes, then words by
descending train count, ties broken by the token's code points.

vocabulary.tsv: a header line `id<TAB>token<TAB>count<TAB>kind`, then one row per id in id
order. kind is `reserved`, `unknown` (an out-of-vocabulary class; count = train tokens mapped
to it) or `word` (count = train occurrences); in subword mode `piece`, `byte` or `control`.

Subword mode: the rows are exactly the sentencepiece model's pieces in id order (ids 0-3 are
<pad> <unk> <s> </s> with kind `control`, then byte pieces with kind `byte` when byte fallback
is on, then learned pieces with kind `piece`); count = occurrences in the encoded train split.
Pieces may hold a line break (the model keeps the cleaned text as it is), so piece fields of
subword rows are written with backslash escapes for backslash, tab, line feed and carriage
return (a backslash and one of \\, t, n, r); word rows are written as they are.
"""

from __future__ import annotations

import argparse
import hashlib
import json
from collections.abc import Sequence
from dataclasses import dataclass
from functools import cached_property
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.csv as pa_csv
import pyarrow.parquet as pq
import regex
import sentencepiece as spm

from .layout import SPLITS
from .storage import write_table, write_text

PAD, UNK, BOS, EOS = "<pad>", "<unk>", "<s>", "</s>"
RESERVED = (PAD, UNK, BOS, EOS)
HEADER = "id\ttoken\tcount\tkind"
VOCABULARY_COLUMNS = {"id": pa.int64(), "token": pa.string(), "count": pa.int64(), "kind": pa.string()}
SUBWORD_KINDS = frozenset({"piece", "byte", "control"})
_ESCAPES = {"\\": "\\\\", "\t": "\\t", "\n": "\\n", "\r": "\\r"}
_ESCAPED = regex.compile(r"[\\\t\n\r]")
_UNESCAPED = regex.compile(r"\\(.)")
_UNESCAPES = {"\\": "\\", "t": "\t", "n": "\n", "r": "\r"}

# Unknown classes by word shape, tried in this order; a word matching none maps to <unk>.
SHAPE_CLASSES = (
    ("<unk-digits>", regex.compile(r"\p{N}", regex.V1)),
    ("<unk-hyphenated>", regex.compile(r"\p{L}[-\u2010\u2011]\p{L}", regex.V1)),
    ("<unk-upper>", regex.compile(r"^[\p{Lu}\p{M}]{2,}$", regex.V1)),
    ("<unk-title>", regex.compile(r"^\p{Lu}", regex.V1)),
    ("<unk-symbol>", regex.compile(r"^[^\p{L}\p{N}]+$", regex.V1)),
)

COUNTS_SCHEMA = pa.schema([("split", pa.string()), ("token", pa.string()), ("count", pa.int64())])
# Chunk count tables merged per step of the running sum (bounds the vocabulary job's memory).
MERGE_FILES = 16


def unknown_class(token: str) -> str:
    """The shape class of an out-of-vocabulary token."""
    for name, pattern in SHAPE_CLASSES:
        if pattern.search(token):
            return name
    return UNK


def count_tokens(table: pa.Table) -> pa.Table:
    """Word counts per split of a chunk table (columns split, tokens), counted by Arrow, with
    the boundary symbols as they occur in the id streams: <s> once per document, </s> once
    per sentence. No segmenter makes a token of these strings (`<` is always a token of its
    own), so they cannot be confused with words; `merge_counts` takes them out again."""
    parts = []
    for split in SPLITS:
        rows = table.filter(pc.equal(table["split"], split))
        sentences = pc.list_flatten(rows["tokens"]) if rows.num_rows else pa.array([], pa.list_(pa.string()))
        counted = pc.value_counts(pc.list_flatten(sentences))
        tokens = pa.concat_arrays([counted.field("values"), pa.array([BOS, EOS], pa.string())])
        numbers = pa.concat_arrays([pc.cast(counted.field("counts"), pa.int64()), pa.array([rows.num_rows, len(sentences)], pa.int64())])
        parts.append(pa.table({"split": pa.array([split] * len(tokens), pa.string()), "token": tokens, "count": numbers}, schema=COUNTS_SCHEMA))
    return pa.concat_tables(parts)


def sum_counts(tables: Sequence[pa.Table]) -> pa.Table:
    """Counts tables added up per (split, token); rows summing to zero are left out."""
    # One thread, as the rules declare (threads: 1); threaded grouping also keeps one hash
    # table per thread.
    combined = pa.concat_tables([COUNTS_SCHEMA.empty_table(), *tables])
    grouped = combined.group_by(["split", "token"], use_threads=False).aggregate([("count", "sum")])
    summed = grouped.select(["split", "token", "count_sum"]).rename_columns(COUNTS_SCHEMA.names)
    return summed.filter(pc.not_equal(summed["count"], 0))


def merge_counts(paths: Sequence[str], removed: str | None = None) -> tuple[pa.Table, dict[str, dict[str, int]]]:
    """One table token → train, dev, test counts, summed over chunks minus the counts of the
    `removed` (duplicate) documents, sorted by (-train, token); and the boundary symbols'
    counts per split ({"<s>": {"train": documents, …}, "</s>": {"train": sentences, …}})."""
    # Sum a few chunk tables at a time into the running total: memory follows the vocabulary,
    # not the number of chunks (integer sums, so the order of merging cannot change a count).
    summed = COUNTS_SCHEMA.empty_table()
    for start in range(0, len(paths), MERGE_FILES):
        summed = sum_counts([summed] + [pq.read_table(p) for p in paths[start : start + MERGE_FILES]])
    if removed:
        duplicates = pq.read_table(removed)
        summed = sum_counts([summed, duplicates.set_column(2, "count", pc.negate(duplicates["count"]))])
    boundary = pc.is_in(summed["token"], value_set=pa.array([BOS, EOS], pa.string()))
    boundaries = {symbol: dict.fromkeys(SPLITS, 0) for symbol in (BOS, EOS)}
    for split, token, count in zip(*(summed.filter(boundary)[name].to_pylist() for name in COUNTS_SCHEMA.names)):
        boundaries[token][split] = count
    summed = summed.filter(pc.invert(boundary))
    tokens = pc.unique(summed["token"]) if summed.num_rows else pa.array([], pa.string())
    columns = {"token": tokens}
    for split in SPLITS:
        rows = summed.filter(pc.equal(summed["split"], split))
        position = pc.index_in(tokens, value_set=rows["token"])
        columns[split] = pc.fill_null(pc.take(rows["count"], position), 0)
    return sort_by_frequency(pa.table(columns)), boundaries


def sort_by_frequency(table: pa.Table) -> pa.Table:
    """Sort by descending train count, then by token (code point order) for deterministic ties."""
    return table.sort_by([("train", "descending"), ("token", "ascending")])


@dataclass(frozen=True)
class Cutoff:
    min_count: int | None = None
    max_size: int | None = None
    coverage: float | None = None

    @classmethod
    def from_config(cls, vocabulary: dict) -> "Cutoff":
        return cls(vocabulary["min_count"], vocabulary["max_size"], vocabulary["coverage"])


def choose_size(train_counts: np.ndarray, cutoff: Cutoff) -> int:
    """How many of the frequency-sorted words to keep under all active limits."""
    keep = int(np.count_nonzero(train_counts > 0))
    if cutoff.min_count is not None:
        keep = min(keep, int(np.count_nonzero(train_counts >= cutoff.min_count)))
    if cutoff.max_size is not None:
        keep = min(keep, cutoff.max_size)
    if cutoff.coverage is not None and keep:
        cumulative = np.cumsum(train_counts[:keep], dtype=np.float64)
        total = float(train_counts.sum())
        needed = int(np.searchsorted(cumulative, cutoff.coverage * total - 1e-9 * total, side="left")) + 1
        keep = min(keep, needed)
    return keep


@dataclass
class Vocabulary:
    """Ids of tokens; `tokens[i]` is the token with id i. Never changed once built, so the
    figures derived from it (reserved ids, digest) are computed once."""

    tokens: list[str]
    counts: list[int]
    kinds: list[str]

    @property
    def size(self) -> int:
        return len(self.tokens)

    @cached_property
    def reserved(self) -> dict[str, int]:
        return {token: i for i, (token, kind) in enumerate(zip(self.tokens, self.kinds)) if kind in ("reserved", "unknown", "control")}

    @cached_property
    def first_word_id(self) -> int:
        return next((i for i, kind in enumerate(self.kinds) if kind not in ("reserved", "unknown", "control")), self.size)

    def unknown_ids(self) -> dict[str, int]:
        return {token: i for i, (token, kind) in enumerate(zip(self.tokens, self.kinds)) if kind == "unknown" or token == UNK}

    def to_tsv(self) -> str:
        rows = [HEADER] + [
            f"{i}\t{escape(t) if k in SUBWORD_KINDS else t}\t{c}\t{k}"
            for i, (t, c, k) in enumerate(zip(self.tokens, self.counts, self.kinds))
        ]
        return "\n".join(rows) + "\n"

    def digest(self) -> str:
        return self._digest

    @cached_property
    def _digest(self) -> str:
        return hashlib.sha256(self.to_tsv().encode("utf-8")).hexdigest()


def escape(piece: str) -> str:
    """A subword piece as one TSV field: backslash, tab, line feed and carriage return escaped."""
    return _ESCAPED.sub(lambda m: _ESCAPES[m.group()], piece)


def unescape(field: str) -> str:
    return _UNESCAPED.sub(lambda m: _UNESCAPES.get(m.group(1), m.group()), field)


def read_vocabulary(path: str | Path) -> Vocabulary:
    """Read a vocabulary.tsv, checking the header and that ids run 0, 1, 2, … without gaps.

    Arrow's CSV reader parses it (a 120k-word file in about 30 ms instead of 0.4 s line by line);
    a file it cannot parse is read again line by line to name the first bad line."""
    with open(path, "rb") as handle:
        first = handle.readline().rstrip(b"\n").decode("utf-8", "replace")
    if first != HEADER:
        raise ValueError(f"{path}: line 1: expected the header {HEADER!r}; is this a corpusmill vocabulary file?")
    try:
        table = pa_csv.read_csv(
            path,
            read_options=pa_csv.ReadOptions(use_threads=False, block_size=16 << 20),
            parse_options=pa_csv.ParseOptions(delimiter="\t", quote_char=False, escape_char=False),
            convert_options=pa_csv.ConvertOptions(
                column_types=VOCABULARY_COLUMNS, strings_can_be_null=False, quoted_strings_can_be_null=False
            ),
        )
    except pa.ArrowInvalid as error:
        _raise_bad_line(path, str(error).splitlines()[0])
    ids = table["id"].to_numpy()
    if not np.array_equal(ids, np.arange(len(ids))):
        _raise_bad_line(path, "ids do not run 0, 1, 2, …")
    tokens, kinds = table["token"].to_pylist(), table["kind"].to_pylist()
    for i, kind in enumerate(kinds):
        if kind in SUBWORD_KINDS:
            tokens[i] = unescape(tokens[i])
    return Vocabulary(tokens, table["count"].to_pylist(), kinds)


def _raise_bad_line(path: str | Path, reason: str) -> None:
    """Raise a ValueError naming the first line of a vocabulary file that is not a valid row,
    or, when every line looks right, the reason the file could not be read."""
    expected = 0
    with open(path, encoding="utf-8", errors="replace") as handle:
        next(handle)
        for number, line in enumerate(handle, start=2):
            line = line.rstrip("\n")
            if not line:
                continue
            fields = line.split("\t")
            if len(fields) != 4 or not fields[0].isdigit() or int(fields[0]) != expected or not fields[2].lstrip("-").isdigit():
                raise ValueError(f"{path}: line {number}: expected '{expected}<TAB>token<TAB>count<TAB>kind', got {line[:80]!r}")
            expected += 1
    raise ValueError(f"{path}: cannot be read as a vocabulary file ({reason}); write it with corpusmill or fix that value")


def build_vocabulary(counts: pa.Table, cutoff: Cutoff, unknown: str, boundaries: dict[str, int] | None = None) -> Vocabulary:
    """Reserved symbols, unknown classes, then the words that pass the cutoff. `boundaries`
    gives the train counts of <s> and </s> (documents and sentences)."""
    train = counts["train"].to_numpy()
    keep = choose_size(train, cutoff)
    classes = [UNK] + ([name for name, _ in SHAPE_CLASSES] if unknown == "shape" else [])
    unknown_counts = dict.fromkeys(classes, 0)
    for token, count in zip(counts["token"].slice(keep).to_pylist(), train[keep:].tolist()):
        if count:
            unknown_counts[unknown_class(token) if unknown == "shape" else UNK] += count
    tokens = list(RESERVED) + classes[1:] + counts["token"].slice(0, keep).to_pylist()
    ends = boundaries or {}
    numbers = [0, unknown_counts[UNK], ends.get(BOS, 0), ends.get(EOS, 0)] + [unknown_counts[c] for c in classes[1:]] + train[:keep].tolist()
    kinds = ["reserved"] * len(RESERVED) + ["unknown"] * (len(classes) - 1) + ["word"] * keep
    return Vocabulary(tokens, numbers, kinds)


class Lookup:
    """Maps token arrays to id arrays; OOV tokens go to their unknown class.

    Each call dictionary-encodes its tokens and finds only the distinct ones among the words
    with Arrow's `index_in` (10 ms for 120k distinct tokens against 120k words, where a Python
    dict lookup of each took 45 ms, measured); only OOV tokens are classified in Python."""

    def __init__(self, vocabulary: Vocabulary, unknown: str) -> None:
        self._first = vocabulary.first_word_id
        self._words = pa.array(vocabulary.tokens[self._first :], pa.string())
        self._unknown = unknown
        self._classes = vocabulary.unknown_ids()

    def ids(self, tokens: pa.Array) -> np.ndarray:
        """int64 ids of `tokens` (a string array)."""
        encoded = pc.dictionary_encode(tokens)
        found = pc.index_in(encoded.dictionary, value_set=self._words)
        distinct = pc.fill_null(found, -1).to_numpy().astype(np.int64) + self._first
        missing = np.flatnonzero(distinct < self._first)
        unk = self._classes[UNK]
        if self._unknown == "shape" and len(missing):
            classes = self._classes
            oov = pc.take(encoded.dictionary, pa.array(missing)).to_pylist()
            distinct[missing] = [classes.get(unknown_class(t), unk) for t in oov]
        else:
            distinct[missing] = unk
        return distinct[encoded.indices.to_numpy(zero_copy_only=False)]


class VocabularyError(ValueError):
    """A vocabulary that cannot be built or used; the message names the file or the cause."""


def check_frozen(vocabulary: Vocabulary, unknown: str, path: str | Path) -> None:
    """A frozen word vocabulary must have the layout the build relies on: the reserved symbols
    at ids 0-3, the unknown classes `unknown` asks for right after them, then distinct
    non-empty words; raise VocabularyError naming the first line that breaks it."""
    classes = [name for name, _ in SHAPE_CLASSES] if unknown == "shape" else []
    expected = [(token, "reserved") for token in RESERVED] + [(name, "unknown") for name in classes]
    for line, (token, kind) in enumerate(expected, start=2):
        found = (vocabulary.tokens[line - 2], vocabulary.kinds[line - 2]) if line - 2 < vocabulary.size else None
        if found != (token, kind):
            raise VocabularyError(
                f"{path}: line {line}: expected {token!r} of kind {kind!r} (id {line - 2}), found "
                f"{'nothing' if found is None else f'{found[0]!r} of kind {found[1]!r}'}; with vocabulary.unknown = "
                f"{unknown!r} ids 0-{len(expected) - 1} are {', '.join(t for t, _ in expected)}"
            )
    seen: dict[str, int] = {}
    for index in range(vocabulary.size):
        token, kind, count = vocabulary.tokens[index], vocabulary.kinds[index], vocabulary.counts[index]
        if index >= len(expected) and kind != "word":
            raise VocabularyError(f"{path}: line {index + 2}: kind {kind!r} after the reserved and unknown ids; words have kind 'word'")
        if not token or token != token.strip() or count < 0:
            raise VocabularyError(f"{path}: line {index + 2}: {token!r} with count {count} is not a word with a count >= 0")
        if token in seen:
            raise VocabularyError(f"{path}: line {index + 2}: {token!r} is listed again (first on line {seen[token] + 2}); ids must name distinct tokens")
        seen[token] = index


def vocabulary_from_counts(
    count_paths: Sequence[str], removed: str | None, config: dict, frozen: str | None
) -> tuple[Vocabulary, pa.Table]:
    """The vocabulary (built, or the frozen file checked) and the token counts of the build;
    raise VocabularyError when train is empty or the frozen file is unusable."""
    counts, boundaries = merge_counts(count_paths, removed)
    totals = {split: boundaries[BOS][split] for split in SPLITS}
    if not totals["train"]:
        raise VocabularyError(
            f"the train split is empty: no kept document landed in train (dev {totals['dev']}, test {totals['test']} documents); "
            "give the corpus more documents or raise split.fractions.train (the vocabulary and every model are learned on train)"
        )
    vocabulary_config = config["vocabulary"]
    if frozen:
        try:
            vocabulary = read_vocabulary(frozen)
        except (OSError, ValueError) as error:
            raise VocabularyError(str(error)) from None
        check_frozen(vocabulary, vocabulary_config["unknown"], frozen)
        return vocabulary, counts
    cutoff = Cutoff.from_config(vocabulary_config)
    train_ends = {symbol: boundaries[symbol]["train"] for symbol in (BOS, EOS)}
    return build_vocabulary(counts, cutoff, vocabulary_config["unknown"], train_ends), counts


def piece_kind(processor: spm.SentencePieceProcessor, piece_id: int) -> str:
    if processor.is_byte(piece_id):
        return "byte"
    if processor.is_control(piece_id) or processor.is_unknown(piece_id):
        return "control"
    return "piece"


def vocabulary_from_model(model: str, count_paths: Sequence[str]) -> tuple[Vocabulary, pa.Table]:
    """The model's pieces in id order with their train counts, and token counts per split
    (pieces only: <s> and </s>, counted in the vocabulary, are not tokens of the text).

    `count_paths` are the encode step's piece counts (split, id, count) per chunk."""
    processor = spm.SentencePieceProcessor(model_file=model)
    size = processor.get_piece_size()
    pieces = [processor.id_to_piece(i) for i in range(size)]
    per_split = {split: np.zeros(size, np.int64) for split in SPLITS}
    for path in count_paths:
        table = pq.read_table(path)
        for split in SPLITS:
            rows = table.filter(pc.equal(table["split"], split))
            np.add.at(per_split[split], rows["id"].to_numpy(), rows["count"].to_numpy())
    vocabulary = Vocabulary(pieces, per_split["train"].tolist(), [piece_kind(processor, i) for i in range(size)])
    counts = pa.table({"token": pa.array(pieces, pa.string()), **{split: pa.array(per_split[split], pa.int64()) for split in SPLITS}})
    boundary = np.isin(np.arange(size), [RESERVED.index(BOS), RESERVED.index(EOS)])
    return vocabulary, sort_by_frequency(counts.filter(pa.array(~boundary)))


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description="Build the vocabulary from the chunks' counts.")
    sub = parser.add_subparsers(dest="command", required=True)
    build = sub.add_parser("build")
    build.add_argument("--options", required=True)
    build.add_argument("--removed", help="counts of the removed duplicate documents, subtracted")
    build.add_argument("--vocabulary", required=True)
    build.add_argument("--token-counts", required=True)
    build.add_argument("--model", help="sentencepiece model (units = subword; counts are then piece counts)")
    build.add_argument("counts", nargs="*")
    args = parser.parse_args(argv)
    config = json.loads(args.options)
    if config["units"] == "subword":
        if not args.model:
            raise SystemExit("corpusmill: vocab build: units = subword needs --model")
        vocabulary, counts = vocabulary_from_model(args.model, args.counts)
        write_table(args.token_counts, counts)
        write_text(args.vocabulary, vocabulary.to_tsv())
        print(f"vocabulary: {vocabulary.size} ids from {args.model} ({vocabulary.kinds.count('byte')} byte pieces)")
        return
    frozen = config["vocabulary"]["frozen"]
    try:
        vocabulary, counts = vocabulary_from_counts(args.counts, args.removed, config, frozen)
    except VocabularyError as error:
        raise SystemExit(f"corpusmill: {'vocabulary.frozen: ' if frozen else ''}{error}") from None
    write_table(args.token_counts, counts)
    write_text(args.vocabulary, vocabulary.to_tsv())
    print(f"vocabulary: {vocabulary.size} ids ({vocabulary.size - vocabulary.first_word_id} words)")


if __name__ == "__main__":
    main()
