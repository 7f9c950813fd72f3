"""Deduplicate: exact duplicate documents across the whole corpus, and ids that name two documents.

Every document's 16-byte content fingerprint (written by its prepare job) is compared with all
others in corpus order (chunks in corpus order, rows by file and byte offset): the first is
kept, every later one is removed. Before anything, the job stops the run if any chunk's tally
recorded a file it could not read as configured (naming them all), or if one id names two
documents.

Then near-duplicates and contamination (steps.hygiene) from the chunks' signatures: their drops
join the removed lists, and their figures go to stats/.

Outputs: interim/duplicates.parquet (source, offset, doc_id, duplicate_of for every removed
document); per chunk, interim/removed/<chunk>.parquet (the chunk's removed documents: source,
offset), which a chunk's later jobs read, so that a change elsewhere in the corpus that does
not change which of its documents are removed reruns none of them; and the word counts per
split of the removed documents (word units), which the vocabulary subtracts from the chunks'
counts, so an unchanged chunk's counts never need recounting. Each chunk's part of those counts
is kept for the next run (interim/deduplicate/removed-counts-by-chunk.parquet), with what it
follows from: a chunk whose prepared table and removed list are the same is not counted again.
"""

from __future__ import annotations

import json
import sys
from collections.abc import Sequence
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq

from . import chunks as chunks_module
from . import hygiene, job, vocabulary, worker
from .accounting import problems_message
from .chunks import removed_mask
from .formats import METADATA_KEY, code_digest, file_sha256
from .settings import read_json
from .storage import write_table
from .vocabulary import COUNTS_SCHEMA, MERGE_FILES, count_tokens, sum_counts

RULE = "deduplicate"
SECTIONS = (
    "corpus.repeated_ids", "split.deduplicate", "split.salt", "units", "near_duplicates.policy", "near_duplicates.threshold",
    "contamination",
)  # fmt: skip

DUPLICATES_SCHEMA = pa.schema([("source", pa.string()), ("offset", pa.int64()), ("doc_id", pa.string()), ("duplicate_of", pa.string())])
REMOVED_SCHEMA = pa.schema([("source", pa.string()), ("offset", pa.int64())])
KEPT_COUNTS_SCHEMA = pa.schema([("chunk", pa.string()), *COUNTS_SCHEMA])
# Uncompressed bytes of row groups read at once while counting removed documents: bounds the
# job's memory whatever the chunk (a chunk of many duplicates would otherwise be read whole).
REMOVED_READ_BYTES = 64 << 20
# Cores the job uses: the clustering reads and sorts the next band while it confirms this one's
# pairs, and contamination scans train in steps.hygiene.SCAN_THREADS threads.
THREADS = 2


def corpus_order(table: pa.Table) -> np.ndarray:
    """Row positions of a prepared chunk table by file, then offset: corpus order."""
    codes, _ = _file_codes(table["source"])
    return np.lexsort((table["offset"].to_numpy(), codes))


def _file_codes(sources: pa.Array | pa.ChunkedArray) -> tuple[np.ndarray, list[str]]:
    """Each row's file as its rank among the distinct files (code point order), and the files."""
    encoded = pc.dictionary_encode(sources.combine_chunks() if isinstance(sources, pa.ChunkedArray) else sources)
    names = encoded.dictionary.to_pylist()
    rank = np.empty(len(names), dtype=np.int64)
    rank[np.argsort(np.array(names, dtype=object), kind="stable")] = np.arange(len(names))
    return rank[encoded.indices.to_numpy(zero_copy_only=False)], sorted(names)


class CorpusRows:
    """The documents of all prepared chunks numbered 0..n-1 in corpus order (chunks in corpus
    order, rows by file and offset), holding only their 16-byte fingerprints (`words`, an
    (n, 2) uint64 array) and `doc_hash`es: 24 bytes a document. Names and places of chosen
    rows are read back from the chunk files (`locate`)."""

    def __init__(self, paths: Sequence[str]) -> None:
        self.paths = list(paths)
        sizes = [pq.ParquetFile(p).metadata.num_rows for p in self.paths]
        self.starts = np.cumsum([0, *sizes])
        self.words = np.empty((self.starts[-1], 2), np.uint64)
        self.hashes = np.empty(self.starts[-1], np.uint64)

        def read(number: int) -> np.ndarray:
            """Fill in one chunk's rows; returns its corpus order."""
            parquet = pq.ParquetFile(self.paths[number], read_dictionary=["source"])
            table = parquet.read(columns=["source", "offset", "doc_hash", "fingerprint"], use_threads=False)
            order = corpus_order(table)
            if table.num_rows:
                column = table["fingerprint"].combine_chunks()
                words = np.frombuffer(column.buffers()[1], dtype=np.uint64, count=2 * len(column), offset=column.offset * 16)
                span = slice(self.starts[number], self.starts[number + 1])
                self.words[span] = words.reshape(-1, 2)[order]
                self.hashes[span] = table["doc_hash"].to_numpy()[order]
            return order

        with ThreadPoolExecutor(THREADS) as pool:
            self.orders = list(pool.map(read, range(len(self.paths))))  # each chunk's rows in corpus order

    def locate(self, rows: np.ndarray) -> pa.Table:
        """(source, offset, doc_id) of the given rows, in the order given (Arrow columns, no
        Python objects per row; one chunk of rows per corpus chunk when `rows` ascend, which
        spares a copy of them all)."""
        rows = np.asarray(rows, dtype=np.int64)
        ascending = bool(np.all(rows[1:] >= rows[:-1]))
        order = None if ascending else np.argsort(rows, kind="stable")
        ordered = rows if order is None else rows[order]
        chunk_of = np.searchsorted(self.starts, ordered, side="right") - 1
        bounds = np.searchsorted(chunk_of, np.arange(len(self.paths) + 1))

        def rows_of(chunk: int) -> pa.Table:
            table = pq.ParquetFile(self.paths[chunk]).read(columns=["source", "offset", "doc_id"], use_threads=False)
            local = ordered[bounds[chunk] : bounds[chunk + 1]] - self.starts[chunk]
            return table.take(pa.array(self.orders[chunk][local]))

        with ThreadPoolExecutor(THREADS) as pool:  # Parquet decodes without the interpreter lock
            parts = list(pool.map(rows_of, np.flatnonzero(np.diff(bounds)).tolist()))
        found = pa.concat_tables([DUPLICATES_SCHEMA.empty_table().select(["source", "offset", "doc_id"]), *parts])
        return found if order is None else found.take(pa.array(np.argsort(order, kind="stable")))


def _same_as_previous(values: np.ndarray) -> np.ndarray:
    return values[1:] == values[:-1]


def first_occurrences(words: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(rows, owners): every row of `words` ((n, 2) uint64 fingerprints) equal to an earlier
    row, ascending, and the first row it equals.

    A stable sort by both words puts equal fingerprints next to each other in row order, so
    each group's first row is its earliest. Sorting by the first word alone gives that order
    whenever no two different fingerprints share it (two random 64-bit words rarely do), and
    takes a fraction of the time; when some do, both words are sorted. Memory: the
    fingerprints plus about 24 bytes per row (the sort order and one key column at a time), not
    np.unique's copies of everything."""
    order = np.argsort(words[:, 0], kind="stable")
    same, second = _same_as_previous(words[order, 0]), _same_as_previous(words[order, 1])
    if np.any(same & ~second):  # different fingerprints share a first word
        order = np.lexsort((words[:, 1], words[:, 0]))
        same, second = _same_as_previous(words[order, 0]), _same_as_previous(words[order, 1])
    same &= second
    later = np.flatnonzero(same) + 1  # sorted positions holding a repeat
    group_starts = np.flatnonzero(np.concatenate([[True], ~same]))
    owners = order[group_starts[np.searchsorted(group_starts, later, side="right") - 1]]
    rows = order[later]
    ascending = np.argsort(rows, kind="stable")
    return rows[ascending], owners[ascending]


def find_duplicates(corpus: CorpusRows, found: tuple[np.ndarray, np.ndarray] | None = None) -> tuple[pa.Table, np.ndarray]:
    """Rows (source, offset, doc_id, duplicate_of) for every document whose fingerprint was seen
    earlier in corpus order, and the chunk (position in `corpus.paths`) each lies in; `found`:
    first_occurrences of the corpus when already known."""
    rows, owners = found if found is not None else first_occurrences(corpus.words)
    if not len(rows):
        return DUPLICATES_SCHEMA.empty_table(), np.zeros(0, np.int64)
    located = corpus.locate(np.concatenate([rows, owners]))
    removed, kept = located.slice(0, len(rows)), located.slice(len(rows))
    table = pa.Table.from_arrays([removed["source"], removed["offset"], removed["doc_id"], kept["doc_id"]], schema=DUPLICATES_SCHEMA)
    return table, np.searchsorted(corpus.starts, rows, side="right") - 1


def repeated_ids(corpus: CorpusRows) -> list[tuple[str, list[tuple[str, int]]]]:
    """Every document id that names more than one document, with the places (source, offset)
    of its documents in corpus order. Candidates are rows sharing a `doc_hash`; their ids are
    then compared as strings, so a hash collision of two ids is not reported."""
    order = np.argsort(corpus.hashes, kind="stable")
    same = np.flatnonzero(corpus.hashes[order][1:] == corpus.hashes[order][:-1])
    if not len(same):
        return []
    candidates = np.unique(np.concatenate([order[same], order[same + 1]]))
    located = corpus.locate(candidates)
    places: dict[str, list[tuple[str, int]]] = {}
    for doc_id, source, offset in zip(*(located[c].to_pylist() for c in ("doc_id", "source", "offset"))):
        places.setdefault(doc_id, []).append((source, offset))
    return sorted((doc_id, found) for doc_id, found in places.items() if len(found) > 1)


def repeated_ids_message(repeats: list[tuple[str, list[tuple[str, int]]]], by_file: bool) -> str:
    """What the user reads when ids repeat: the first few ids with both places, and the fixes."""
    shown = "; ".join(
        f"{doc_id!r} at {places[0][0]} byte {places[0][1]} and {places[1][0]} byte {places[1][1]}" + (f" (+{len(places) - 2} more)" if len(places) > 2 else "")
        for doc_id, places in repeats[:5]
    )
    more = f"; and {len(repeats) - 5} more ids" if len(repeats) > 5 else ""
    fix = (
        "ids repeat inside one file: fix the records, or set corpus.jsonl_id_field: null to use path:offset ids"
        if by_file
        else "fix the records, set corpus.repeated_ids: by_file to qualify JSONL ids by their file, or corpus.jsonl_id_field: null to use path:offset ids"
    )
    return f"corpusmill: {len(repeats)} document id(s) name more than one document: {shown}{more}; every id must name one document: {fix}"


def removed_counts(path: str, removed: pa.Table) -> pa.Table:
    """Word counts per split (with <s> and </s>, steps.vocabulary.count_tokens) of a chunk's
    removed documents, reading only the row groups that hold them, a bounded batch at a time."""
    parquet = pq.ParquetFile(path)
    if not removed.num_rows or "tokens" not in parquet.schema_arrow.names:
        return COUNTS_SCHEMA.empty_table()
    located = parquet.read(columns=["source", "offset"], use_threads=False)
    rows = np.flatnonzero(removed_mask(removed, located["source"], located["offset"]))
    sizes = np.array([parquet.metadata.row_group(g).num_rows for g in range(parquet.num_row_groups)])
    starts = np.cumsum(sizes) - sizes
    group_of = np.searchsorted(starts, rows, side="right") - 1
    parts: list[pa.Table] = []
    batch: list[int] = []
    held = 0
    for group in np.unique(group_of).tolist():
        batch.append(group)
        held += parquet.metadata.row_group(group).total_byte_size
        if held >= REMOVED_READ_BYTES or group == group_of[-1]:
            table = parquet.read_row_groups(batch, columns=["split", "tokens"], use_threads=False)
            read_starts = np.cumsum(sizes[batch]) - sizes[batch]
            chosen = np.isin(group_of, batch)
            positions = read_starts[np.searchsorted(batch, group_of[chosen])] + rows[chosen] - starts[group_of[chosen]]
            parts.append(count_tokens(table.take(pa.array(positions))))
            if len(parts) >= MERGE_FILES:
                parts = [sum_counts(parts)]
            batch, held = [], 0
    return sum_counts(parts)


def read_kept_counts(path: str) -> dict[str, tuple[str, pa.Table]]:
    """Each chunk's removed word counts kept by an earlier run, with what they follow from
    (`write_kept_counts`); nothing when the file is missing or unreadable (all are counted)."""
    try:
        table = pq.read_table(path)
        keys = json.loads(table.schema.metadata[METADATA_KEY])["keys"]
        encoded = pc.dictionary_encode(table["chunk"].combine_chunks())
    except (OSError, KeyError, TypeError, ValueError, pa.ArrowException):
        return {}
    codes = encoded.indices.to_numpy(zero_copy_only=False)
    order = np.argsort(codes, kind="stable")
    bounds = np.searchsorted(codes[order], np.arange(len(encoded.dictionary) + 1))
    # One take, then a slice per chunk: a take of a few rows from a column of several chunks
    # concatenates the whole column first, and the system allocator keeps much of each copy.
    counts = table.select(COUNTS_SCHEMA.names).replace_schema_metadata(None).cast(COUNTS_SCHEMA).take(pa.array(order)).combine_chunks()
    found = {chunk: counts.slice(bounds[code], bounds[code + 1] - bounds[code]) for code, chunk in enumerate(encoded.dictionary.to_pylist())}
    return {chunk: (str(keys[chunk]), found[chunk]) for chunk in found if chunk in keys}


def write_kept_counts(path: str, counted: dict[str, tuple[str, pa.Table]]) -> None:
    """Keep each chunk's removed word counts for the next run, with the key each follows from:
    the chunk's prepared table (its SHA-256, from the prepare job's tally), its removed list
    (the list file's SHA-256) and the counting code."""
    parts = [counts.add_column(0, "chunk", pa.array([chunk] * counts.num_rows, pa.string())) for chunk, (_, counts) in sorted(counted.items())]
    table = pa.concat_tables(parts) if parts else KEPT_COUNTS_SCHEMA.empty_table()
    about = json.dumps({"keys": {chunk: key for chunk, (key, _) in sorted(counted.items())}}).encode()
    write_table(path, table.cast(KEPT_COUNTS_SCHEMA).replace_schema_metadata({METADATA_KEY: about}))


def main(argv: list[str] | None = None) -> None:
    run = job.start(argv, RULE, "Find exact duplicate documents across the prepared chunks; refuse repeated ids.")
    layout, chunks = run.layout, run.chunks()
    if short := worker.too_few_open_files(len(chunks), worker.open_files_limit()):
        raise SystemExit(f"corpusmill: {short}")
    tallies = [read_json(layout.tally(chunk)) for chunk in chunks]
    message = problems_message(tallies)
    if message:
        raise SystemExit(message)
    corpus = CorpusRows([layout.prepared(chunk) for chunk in chunks])
    repeats = repeated_ids(corpus)
    if repeats:
        raise SystemExit(repeated_ids_message(repeats, run.options["corpus"]["repeated_ids"] == "by_file"))
    corpus.hashes = np.zeros(0, np.uint64)  # only the check of ids needs them
    empty = np.zeros(0, np.int64)
    found = first_occurrences(corpus.words)
    table, chunk_of = find_duplicates(corpus, found if run.options["split"]["deduplicate"] else (empty, empty))
    write_table(layout.duplicates, table)
    signed = hygiene.CorpusSignatures([(layout.signatures(chunk), layout.verification(chunk)) for chunk in chunks])
    if not np.array_equal(signed.starts, corpus.starts):
        raise SystemExit(
            f"corpusmill: the signature files under {Path(layout.signatures(chunks[0])).parent} do not match the prepared chunks: "
            "rerun the prepare jobs (snakemake --forcerun prepare)"
        )
    findings = hygiene.measure(signed, corpus.words, found, run.options)
    drops, drop_chunk_of = hygiene.write_findings(layout, chunks, corpus.locate, signed, findings, run.options)
    del corpus, signed

    words = run.options["units"] == "word"
    kept = read_kept_counts(layout.removed_counts_by_chunk) if words else {}
    code = code_digest(sys.modules[__name__], vocabulary, chunks_module)

    def write_removed(number: int) -> tuple[str, pa.Table] | None:
        """Write the chunk's removed list; with word units and removed documents, their word
        counts and what they follow from (taken from the kept counts when that is unchanged)."""
        chunk = chunks[number]
        mine = pa.concat_tables(
            [table.filter(pa.array(chunk_of == number)).select(REMOVED_SCHEMA.names),
             drops.filter(pa.array(drop_chunk_of == number)).select(REMOVED_SCHEMA.names)]
        )  # fmt: skip
        write_table(layout.removed(chunk), mine.sort_by([("source", "ascending"), ("offset", "ascending")]))
        if not words or not mine.num_rows:
            return None
        table_sha256 = tallies[number].get("table_sha256")  # absent from a tally of an older prepare job
        key = f"{table_sha256}:{file_sha256(layout.removed(chunk))}:{code}" if table_sha256 else ""
        if key and kept.get(chunk, ("", None))[0] == key:
            return key, kept[chunk][1]
        return key, removed_counts(layout.prepared(chunk), mine)

    with ThreadPoolExecutor(THREADS) as pool:
        counted = {chunks[number]: found for number, found in enumerate(pool.map(write_removed, range(len(chunks)))) if found is not None}
    totals = sum_counts([counts for _, counts in counted.values()]) if counted else COUNTS_SCHEMA.empty_table()
    write_table(layout.removed_counts, totals.sort_by([("split", "ascending"), ("token", "ascending")]))
    if words:
        now = sum(1 for chunk, (key, _) in counted.items() if not key or kept.get(chunk, ("", None))[0] != key)
        print(f"removed documents' word counts: {len(counted) - now} chunks counted by an earlier run, {now} counted now")
        keyed = {chunk: found for chunk, found in counted.items() if found[0]}
        if now or set(kept) != set(keyed):
            write_kept_counts(layout.removed_counts_by_chunk, keyed)
    print(f"{table.num_rows} duplicate documents removed, {drops.num_rows} more as near-duplicates or contaminated")


if __name__ == "__main__":
    main()
