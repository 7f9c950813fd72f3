"""Vocabulary: the ids a build's shards use, and the vocabulary file with the build's counts.

Word units: token counts per chunk and split (written by the prepare jobs) are merged, the
removed duplicates' counts subtracted, and the cutoff keeps words by train count only (dev and
test counts are kept for the OOV statistics). Ids: the reserved symbols first (RESERVED),
then the unknown classes, then words by descending train count, ties broken by the token's
code points; or a frozen vocabulary, checked, used unchanged. Subword units: the ids are the
sentencepiece model's pieces (steps.subword).

Rule `vocabulary` writes the ids (interim/vocabulary/ids.tsv, in vocabulary.tsv's format, and
ids.arrow, the table the jobs read; steps.formats) before the shards, and the build's word
counts. With a frozen word vocabulary the ids are the frozen file's, known before any count:
rule `vocabulary_frozen` writes them, so the shard jobs need not wait for the counts, and rule
`vocabulary` writes the counts alone. Rule `vocabulary_table` writes the public vocabulary.tsv
with the count of every id in the build's train streams, summed from the shard jobs' id counts,
and stats/token_counts.parquet (every word's train, dev and test counts, or every piece's).
"""

from __future__ import annotations

import json
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq
import regex

from . import job
from .formats import BOS, EOS, METADATA_KEY, RESERVED, UNK, FormatError, Vocabulary, file_sha256, read_ids_table, read_vocabulary, write_ids_table
from .layout import SPLITS, Layout
from .storage import write_table, write_text

# By rule: the ids (and counts), a frozen vocabulary's ids, the table.
SECTIONS = {"vocabulary": ("units", "vocabulary"), "vocabulary_frozen": ("units", "vocabulary.frozen", "vocabulary.unknown"), "vocabulary_table": ("units",)}

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
MERGE_FILES = 32


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
    """Counts tables added up per (split, token); rows summing to zero are left out. Each split
    is grouped by token alone: Arrow's grouping by one string key holds less than by two."""
    combined = pa.concat_tables([COUNTS_SCHEMA.empty_table(), *tables])
    parts = []
    for split in SPLITS:
        rows = combined.filter(pc.equal(combined["split"], split))
        # One thread, as the rules declare (threads: 1); threaded grouping also keeps one hash
        # table per thread.
        grouped = rows.group_by("token", use_threads=False).aggregate([("count", "sum")])
        kept = grouped.filter(pc.not_equal(grouped["count_sum"], 0))
        names = pa.array([split] * kept.num_rows, pa.string())
        parts.append(pa.table({"split": names, "token": kept["token"], "count": kept["count_sum"]}, schema=COUNTS_SCHEMA))
    return pa.concat_tables(parts)


def read_kept_sum(path: str) -> tuple[pa.Table, set[tuple[str, str]]]:
    """A kept sum of chunk count tables and the (path, SHA-256) of every table in it; an empty
    sum when the file is missing or unreadable (the tables are then summed again)."""
    try:
        table = pq.read_table(path)
        counted = json.loads(table.schema.metadata[METADATA_KEY])["counted"]
        return table.replace_schema_metadata(None).cast(COUNTS_SCHEMA), {(str(p), str(d)) for p, d in counted}
    except (OSError, KeyError, TypeError, ValueError, pa.ArrowException):
        return COUNTS_SCHEMA.empty_table(), set()


def merge_counts(paths: Sequence[str], removed: str | None = None, kept: str | None = None) -> tuple[pa.Table, dict[str, dict[str, int]]]:
    """One table token → train, dev, test counts, summed over chunks minus the counts of the
    `removed` (duplicate) documents, sorted by (-train, token); and the boundary symbols'
    counts per split ({"<s>": {"train": documents, …}, "</s>": {"train": sentences, …}}).
    `kept`: where the sum of the chunk tables is kept with the SHA-256 of each; a later call
    whose tables are those and more (chunks added) sums only the new ones."""
    summed, todo = COUNTS_SCHEMA.empty_table(), list(paths)
    if kept:
        digests = {path: file_sha256(path) for path in paths}
        carried, counted = read_kept_sum(kept)
        if counted and counted <= set(digests.items()):
            summed, todo = carried, [path for path in paths if (path, digests[path]) not in counted]
        print(f"chunk count tables: {len(paths) - len(todo)} summed by an earlier run, {len(todo)} summed now")
    # Sum a few chunk tables at a time into the running total: memory follows the vocabulary,
    # not the number of chunks (integer sums, so the order of merging cannot change a count).
    for start in range(0, len(todo), MERGE_FILES):
        summed = sum_counts([summed] + [pq.read_table(p) for p in todo[start : start + MERGE_FILES]])
    if kept and todo:  # with nothing summed now, the kept sum is already the sum of these tables
        about = json.dumps({"counted": [[path, digests[path]] for path in paths]}).encode()
        write_table(kept, summed.replace_schema_metadata({METADATA_KEY: about}))
    if removed:
        duplicates = pq.read_table(removed)
        summed = sum_counts([summed, duplicates.set_column(2, "count", pc.negate(duplicates["count"]))])
    boundary = pc.is_in(summed["token"], value_set=pa.array([BOS, EOS]))
    boundaries = {symbol: dict.fromkeys(SPLITS, 0) for symbol in (BOS, EOS)}
    for split, token, count in zip(*(summed.filter(boundary)[name].to_pylist() for name in COUNTS_SCHEMA.names)):
        boundaries[token][split] = count
    summed = summed.filter(pc.invert(boundary))
    tokens = pc.unique(summed["token"])
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
    def from_config(cls, vocabulary: dict) -> Cutoff:
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


def read_frozen(path: str | Path, unknown: str) -> Vocabulary:
    """A frozen vocabulary file, read (steps.formats) and checked (check_frozen); raise
    VocabularyError naming the file and line of the first problem."""
    try:
        vocabulary = read_vocabulary(path)
    except (OSError, FormatError) as error:
        raise VocabularyError(str(error)) from None
    check_frozen(vocabulary, unknown, path)
    return vocabulary


def build_counts(count_paths: Sequence[str], removed: str | None, kept: str | None = None) -> tuple[pa.Table, dict[str, dict[str, int]]]:
    """The token counts of the build and the sentence boundaries per split (merge_counts);
    raise VocabularyError when train is empty."""
    counts, boundaries = merge_counts(count_paths, removed, kept)
    totals = {split: boundaries[BOS][split] for split in SPLITS}
    if not totals["train"]:
        raise VocabularyError(
            f"the train split is empty: no kept document landed in train (dev {totals['dev']}, test {totals['test']} documents); "
            "give the corpus more documents or raise split.fractions.train (the vocabulary and every model are learned on train)"
        )
    return counts, boundaries


def vocabulary_from_counts(count_paths: Sequence[str], removed: str | None, config: dict, kept: str | None = None) -> tuple[Vocabulary, pa.Table]:
    """The vocabulary built by the cutoff and the token counts of the build (`kept`: see
    merge_counts); raise VocabularyError when train is empty."""
    counts, boundaries = build_counts(count_paths, removed, kept)
    vocabulary_config = config["vocabulary"]
    cutoff = Cutoff.from_config(vocabulary_config)
    train_ends = {symbol: boundaries[symbol]["train"] for symbol in (BOS, EOS)}
    return build_vocabulary(counts, cutoff, vocabulary_config["unknown"], train_ends), counts


def model_vocabulary(model: str) -> Vocabulary:
    """The ids of a sentencepiece model: its pieces in id order (kinds control, byte, piece)."""
    import sentencepiece as spm

    processor = spm.SentencePieceProcessor(model_file=model)
    kinds = []
    for number in range(processor.get_piece_size()):
        if processor.is_byte(number):
            kinds.append("byte")
        elif processor.is_control(number) or processor.is_unknown(number):
            kinds.append("control")
        else:
            kinds.append("piece")
    pieces = [processor.id_to_piece(i) for i in range(processor.get_piece_size())]
    return Vocabulary(pieces, [0] * len(pieces), kinds)


def id_counts(paths: Sequence[str], size: int) -> dict[str, np.ndarray]:
    """Occurrences of each id per split, summed over the shard jobs' id counts (split, id, count)."""
    totals = {split: np.zeros(size, np.int64) for split in SPLITS}
    for path in paths:
        table = pq.ParquetFile(path).read(use_threads=False)
        for split in SPLITS:
            rows = table.filter(pc.equal(table["split"], split))
            np.add.at(totals[split], rows["id"].to_numpy(), rows["count"].to_numpy())
    return totals


def piece_counts(vocabulary: Vocabulary, totals: dict[str, np.ndarray]) -> pa.Table:
    """token → train, dev and test occurrences of every piece (not <s> and </s>, which are not
    pieces of the text), most frequent in train first."""
    keep = np.array([token not in (BOS, EOS) for token in vocabulary.tokens])
    table = pa.table({"token": pa.array(vocabulary.tokens, pa.string()), **{split: pa.array(totals[split], pa.int64()) for split in SPLITS}})
    return sort_by_frequency(table.filter(pa.array(keep)))


def write_ids(layout: Layout, vocabulary: Vocabulary) -> None:
    """The ids in vocabulary.tsv's format, as the table the jobs read, and their digest."""
    write_text(layout.ids, vocabulary.to_tsv())
    write_ids_table(layout.ids_table, vocabulary)
    write_text(layout.ids_digest, vocabulary.ids_digest + "\n")


def main_ids(argv: list[str]) -> None:
    run = job.start(argv, "vocabulary", "The ids the shards use and the build's word counts (rule vocabulary).")
    layout, options = run.layout, run.options
    if options["units"] == "subword":
        vocabulary = model_vocabulary(layout.subword_model)
        write_ids(layout, vocabulary)
        print(f"ids: {vocabulary.size} pieces of {layout.subword_model}")
        return
    frozen = options["vocabulary"]["frozen"]
    paths = [layout.counts(c) for c in run.chunks()]
    try:
        if frozen:
            counts, _ = build_counts(paths, layout.removed_counts, layout.chunk_counts_sum)
        else:
            vocabulary, counts = vocabulary_from_counts(paths, layout.removed_counts, options, layout.chunk_counts_sum)
    except VocabularyError as error:
        raise SystemExit(f"corpusmill: {error}") from None
    write_table(layout.word_counts, counts)
    if frozen:
        print(f"word counts of the build ({counts.num_rows:,} rows); the ids are the frozen vocabulary's (rule vocabulary_frozen)")
        return
    write_ids(layout, vocabulary)
    print(f"ids: {vocabulary.size} ({vocabulary.size - vocabulary.first_word_id} words)")


def main_frozen(argv: list[str]) -> None:
    run = job.start(argv, "vocabulary_frozen", "The ids of a frozen word vocabulary, checked (rule vocabulary_frozen).")
    frozen = run.options["vocabulary"]["frozen"]
    try:
        vocabulary = read_frozen(frozen, run.options["vocabulary"]["unknown"])
    except VocabularyError as error:
        raise SystemExit(f"corpusmill: vocabulary.frozen: {error}") from None
    write_ids(run.layout, vocabulary)
    print(f"ids: {vocabulary.size} ({vocabulary.size - vocabulary.first_word_id} words) of {frozen}")


def main_table(argv: list[str]) -> None:
    run = job.start(argv, "vocabulary_table", "vocabulary.tsv with the build's train counts (rule vocabulary_table).")
    layout = run.layout
    ids = read_ids_table(layout.ids_table)
    totals = id_counts([layout.id_counts(chunk) for chunk in run.chunks()], ids.size)
    write_text(layout.vocabulary, ids.with_counts(totals["train"]).to_tsv())
    if run.options["units"] == "subword":
        write_table(layout.token_counts, piece_counts(ids, totals))
    else:
        write_table(layout.token_counts, pq.ParquetFile(layout.word_counts).read(use_threads=False))
    print(f"vocabulary.tsv: {ids.size} ids, {int(totals['train'].sum()):,} train ids")


main = job.entries(ids=main_ids, frozen=main_frozen, table=main_table)

if __name__ == "__main__":
    main()
