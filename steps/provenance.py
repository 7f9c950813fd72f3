"""Provenance: where every shard row comes from, written beside the shards and looked up again.

The shard job hands each row's stream position (steps.formats, provenance) to a `RunWriter`,
which stores rows whose positions move by the kind's step as one run, and each batch's
documents to a `DocumentWriter`. `position_of_row` and `read_documents` read them back with
row-group statistics, so a lookup decodes one row group of a row table, not the whole table.
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq

from .formats import METADATA_KEY, FormatError, provenance_documents_schema, provenance_rows_schema
from .storage import ParquetSink

# Runs per row group: a lookup decodes one group (a shuffled file holds a run per row).
GROUP_RUNS = 1 << 16


class RunWriter:
    """A row table: the stream positions of a shard's rows, in row order, as runs, in row groups
    of GROUP_RUNS runs. The last run stays open between calls, so the file's bytes do not
    depend on how the rows were batched."""

    def __init__(self, path: str | Path, metadata: dict[bytes, bytes], step: int) -> None:
        self.schema = provenance_rows_schema()
        # Delta encoding stores a run's consecutive rows and a shuffled file's positions (within
        # one batch's range) in a few bits each, where plain values take 8 bytes.
        delta = dict.fromkeys(self.schema.names, "DELTA_BINARY_PACKED")
        self.sink = ParquetSink(path, self.schema.with_metadata(metadata), dictionary=False, encodings=delta)
        self.step = step
        self.rows = 0
        self._open = np.empty((0, 3), np.int64)  # the open run: row, rows, position
        self._held = np.empty((0, 3), np.int64)  # closed runs not yet written

    def add(self, positions: np.ndarray) -> None:
        if not len(positions):
            return
        positions = positions.astype(np.int64, copy=False)
        starts = np.concatenate([[0], np.flatnonzero(np.diff(positions) != self.step) + 1])
        lengths = np.diff(np.concatenate([starts, [len(positions)]]))
        runs = np.column_stack([self.rows + starts, lengths, positions[starts]])
        if len(self._open):
            row, count, position = self._open[0]
            if position + count * self.step == runs[0, 2]:
                runs[0] = (row, count + runs[0, 1], position)
            else:
                runs = np.concatenate([self._open, runs])
        self.rows += len(positions)
        self._held = np.concatenate([self._held, runs[:-1]])
        self._open = runs[-1:]
        whole = len(self._held) // GROUP_RUNS * GROUP_RUNS
        for start in range(0, whole, GROUP_RUNS):
            self._write(self._held[start : start + GROUP_RUNS])
        self._held = self._held[whole:]

    def _write(self, runs: np.ndarray) -> None:
        if len(runs):
            self.sink.write(pa.table({"row": runs[:, 0], "rows": runs[:, 1], "position": runs[:, 2]}, schema=self.schema))

    def close(self) -> None:
        held = np.concatenate([self._held, self._open])
        for start in range(0, len(held), GROUP_RUNS):
            self._write(held[start : start + GROUP_RUNS])
        self.sink.close()

    def abort(self) -> None:
        self.sink.abort()


class DocumentWriter:
    """A document table: each encoded document with its stream position and sentence lengths."""

    def __init__(self, path: str | Path) -> None:
        self.schema = provenance_documents_schema()
        self.sink = ParquetSink(path, self.schema)

    def add(self, rows: pa.Table, nested: pa.ListArray, positions: np.ndarray) -> None:
        """`rows` (doc_id, source, offset) and their ids as documents → sentences → ids."""
        sentences = nested.flatten()
        lengths = pa.array(np.diff(sentences.offsets.to_numpy()).astype(np.int32), pa.int32())
        offsets = nested.offsets.to_numpy()
        per_document = pa.ListArray.from_arrays(pa.array((offsets - offsets[0]).astype(np.int32), pa.int32()), lengths)
        columns = [rows["doc_id"], rows["source"], rows["offset"], pa.array(positions.astype(np.int64)), per_document]
        self.sink.write(pa.Table.from_arrays(columns, schema=self.schema))

    def close(self) -> None:
        self.sink.close()

    def abort(self) -> None:
        self.sink.abort()


def _group_holding(path: str | Path, parquet: pq.ParquetFile, column: str, value: int) -> int | None:
    """The last row group whose sorted `column` starts at or before `value`."""
    index = parquet.schema_arrow.names.index(column)
    found = None
    for group in range(parquet.num_row_groups):
        stats = parquet.metadata.row_group(group).column(index).statistics
        if stats is None or not stats.has_min_max:
            raise FormatError(f"{path}: row group {group} has no statistics of {column!r}; not a corpusmill provenance table")
        if stats.min <= value:
            found = group
    return found


def position_of_row(path: str | Path, row: int) -> int:
    """The stream position of shard row `row`, from its row table."""
    parquet = pq.ParquetFile(path)
    step = int(json_metadata(path, parquet)["step"])
    group = _group_holding(path, parquet, "row", row)
    if group is None:
        raise FormatError(f"{path}: no run holds row {row}")
    runs = parquet.read_row_group(group, use_threads=False)
    first = runs["row"].to_numpy()
    run = int(np.searchsorted(first, row, side="right")) - 1
    start, count = int(first[run]), int(runs["rows"][run].as_py())
    if not start <= row < start + count:
        raise FormatError(f"{path}: no run holds row {row}")
    return int(runs["position"][run].as_py()) + (row - start) * step


def json_metadata(path: str | Path, parquet: pq.ParquetFile) -> dict:
    raw = (parquet.schema_arrow.metadata or {}).get(METADATA_KEY)
    try:
        value = json.loads(raw) if raw is not None else None
    except ValueError:
        value = None
    if not isinstance(value, dict):
        raise FormatError(f"{path}: no 'corpusmill' metadata holding a JSON object; not a corpusmill provenance table")
    return value


@dataclass(frozen=True)
class Place:
    """Where one stream position lies: a document (its row of the document table), a sentence
    and a token of it; token -1 is the document's <s>, token = its sentence's length its </s>.
    Beyond the last document (a block padded at the end of a chunk): document -1; a <s> that
    pads an n-gram context at a sentence start: document -2."""

    document: int
    sentence: int
    token: int


@dataclass(frozen=True)
class Documents:
    """A chunk's document table of one split, for locating stream positions."""

    doc_ids: list[str]
    sources: list[str]
    offsets: list[int]
    positions: np.ndarray
    sentences: list[list[int]]

    def place(self, position: int) -> Place:
        document = int(np.searchsorted(self.positions, position, side="right")) - 1
        if document < 0:
            return Place(-1, 0, 0)
        inside = position - int(self.positions[document])
        lengths = np.asarray(self.sentences[document], np.int64)
        ends = 1 + np.cumsum(lengths + 1)  # one past each sentence's </s>
        if inside >= (ends[-1] if len(ends) else 1):
            return Place(-1, 0, 0)
        if inside == 0:
            return Place(document, 0, -1)
        sentence = int(np.searchsorted(ends, inside, side="right"))
        start = int(ends[sentence - 1]) if sentence else 1
        return Place(document, sentence, inside - start)


def read_documents(path: str | Path) -> Documents:
    table = pq.read_table(path, use_threads=False)
    return Documents(
        table["doc_id"].to_pylist(),
        table["source"].to_pylist(),
        table["offset"].to_pylist(),
        table["position"].to_numpy(),
        table["sentences"].to_pylist(),
    )
