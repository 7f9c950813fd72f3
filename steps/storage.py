"""Writing files so that nothing half-written ever looks finished, and reading them back."""

from __future__ import annotations

import json
import os
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Any

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq


@contextmanager
def atomic_path(path: str | Path) -> Iterator[Path]:
    """Yield a temporary sibling of `path`; rename it onto `path` only if the block succeeds."""
    target = Path(path)
    target.parent.mkdir(parents=True, exist_ok=True)
    temporary = target.with_name(f".{target.name}.partial")
    try:
        yield temporary
        os.replace(temporary, target)
    finally:
        if temporary.exists():
            temporary.unlink()


def write_json(path: str | Path, value: Any) -> None:
    """Write JSON deterministically (sorted keys, fixed indentation, trailing newline)."""
    with atomic_path(path) as temporary:
        temporary.write_text(json.dumps(value, indent=2, sort_keys=True, ensure_ascii=False) + "\n", encoding="utf-8")


def write_text(path: str | Path, text: str) -> None:
    with atomic_path(path) as temporary:
        temporary.write_text(text, encoding="utf-8")


class ParquetSink:
    """A Parquet file written row group by row group, renamed into place on `close`."""

    def __init__(
        self,
        path: str | Path,
        schema: pa.Schema,
        *,
        compression: str = "zstd",
        level: int | None = 3,
        dictionary: bool | list[str] = True,
        encodings: dict[str, str] | None = None,
    ) -> None:
        self._target = Path(path)
        self._target.parent.mkdir(parents=True, exist_ok=True)
        self._temporary = self._target.with_name(f".{self._target.name}.partial")
        codec = None if compression == "none" else compression
        self._writer = pq.ParquetWriter(
            self._temporary,
            schema,
            compression=codec or "none",
            compression_level=level if codec in ("zstd", "gzip") else None,
            write_statistics=True,
            use_dictionary=dictionary,
            column_encoding=encodings,
        )
        self.rows = 0

    def write(self, table: pa.Table) -> None:
        if table.num_rows:
            self._writer.write_table(table)
            self.rows += table.num_rows

    def close(self) -> None:
        self._writer.close()
        os.replace(self._temporary, self._target)

    def abort(self) -> None:
        self._writer.close()
        self._temporary.unlink(missing_ok=True)

    def __enter__(self) -> ParquetSink:
        return self

    def __exit__(self, kind: object, *_: object) -> None:
        if kind is None:
            self.close()
        else:
            self.abort()


def write_table(path: str | Path, table: pa.Table, **options: Any) -> None:
    with ParquetSink(path, table.schema, **options) as sink:
        sink.write(table)


def rebased_offsets(array: pa.ListArray) -> pa.Array:
    """The offsets of a (possibly sliced) list array, starting at 0: for rebuilding it around
    a new values array."""
    offsets = array.offsets.to_numpy()
    return pa.array((offsets - offsets[0]).astype(np.int32), pa.int32())
