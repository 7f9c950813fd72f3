"""steps.storage: nothing half-written ever looks finished.

Outside references: os.listdir for what a folder holds after a write or a failure; json.loads
and DuckDB (an independent Parquet reader) for what was written; Parquet's own footer
(pyarrow.parquet.read_metadata) for the codec and row groups.
"""

from __future__ import annotations

import json
import os
from pathlib import Path

import duckdb
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from corpusmill.storage import ParquetSink, atomic_path, rebased_offsets, write_json, write_table, write_text

SCHEMA = pa.schema([("word", pa.string()), ("count", pa.int64())])


class Planned(Exception):
    """The failure a test raises on purpose halfway through a write."""


def table(words: list[str]) -> pa.Table:
    return pa.table({"word": words, "count": list(range(len(words)))}, schema=SCHEMA)


def test_a_finished_block_leaves_only_the_target(tmp_path: Path) -> None:
    """The temporary sibling is renamed onto the target: the folder (created on the way) holds
    the target alone."""
    target = tmp_path / "deep" / "folder" / "out.txt"
    with atomic_path(target) as temporary:
        assert temporary.parent == target.parent and temporary != target
        temporary.write_text("done", encoding="utf-8")
        assert not target.exists()
    assert os.listdir(target.parent) == ["out.txt"] and target.read_text(encoding="utf-8") == "done"


def test_a_failing_block_leaves_no_file_and_no_partial(tmp_path: Path) -> None:
    target = tmp_path / "out.txt"
    with pytest.raises(Planned):
        with atomic_path(target) as temporary:
            temporary.write_text("half", encoding="utf-8")
            raise Planned
    assert os.listdir(tmp_path) == []


def test_a_failing_rewrite_keeps_the_previous_file_untouched(tmp_path: Path) -> None:
    """A rerun that fails must not damage the output of the last good run."""
    target = tmp_path / "out.json"
    write_json(target, {"run": 1})
    before = target.read_bytes()
    with pytest.raises(Planned):
        with atomic_path(target) as temporary:
            temporary.write_text("{", encoding="utf-8")
            raise Planned
    assert target.read_bytes() == before and os.listdir(tmp_path) == ["out.json"]


def test_json_is_written_with_sorted_keys_and_a_trailing_newline(tmp_path: Path) -> None:
    """Deterministic text (project rule): equal values give equal bytes whatever the key order;
    json.loads reads back the value, non-ASCII text kept as UTF-8."""
    value = {"zeta": [1, 2], "alpha": {"b": 1, "a": "ü"}}
    write_json(tmp_path / "a.json", value)
    write_json(tmp_path / "b.json", dict(reversed(list(value.items()))))
    data = (tmp_path / "a.json").read_bytes()
    assert data == (tmp_path / "b.json").read_bytes()
    assert data.endswith(b"}\n") and data.index(b'"alpha"') < data.index(b'"zeta"') and "ü".encode() in data
    assert json.loads(data) == value
    write_text(tmp_path / "c.txt", "line\n")
    assert (tmp_path / "c.txt").read_text(encoding="utf-8") == "line\n"


def test_a_parquet_sink_shows_its_file_only_when_closed(tmp_path: Path) -> None:
    """Row groups are written as they come, under a temporary name; DuckDB reads the closed
    file's rows in order, and empty tables add no row group."""
    target = tmp_path / "shards" / "x.parquet"
    sink = ParquetSink(target, SCHEMA)
    sink.write(table(["a", "b"]))
    sink.write(table([]))
    sink.write(table(["c"]))
    assert not target.exists() and sink.rows == 3
    sink.close()
    assert os.listdir(target.parent) == ["x.parquet"]
    assert duckdb.sql(f"SELECT word, count FROM read_parquet('{target}')").fetchall() == [("a", 0), ("b", 1), ("c", 0)]
    assert pq.read_metadata(target).num_row_groups == 2


def test_an_error_inside_a_parquet_sink_leaves_no_file_and_no_partial(tmp_path: Path) -> None:
    target = tmp_path / "x.parquet"
    with pytest.raises(Planned):
        with ParquetSink(target, SCHEMA) as sink:
            sink.write(table(["a"]))
            raise Planned
    assert os.listdir(tmp_path) == []


def test_an_aborted_parquet_sink_keeps_the_previous_file(tmp_path: Path) -> None:
    target = tmp_path / "x.parquet"
    write_table(target, table(["old"]))
    before = target.read_bytes()
    sink = ParquetSink(target, SCHEMA)
    sink.write(table(["new", "rows"]))
    sink.abort()
    assert target.read_bytes() == before and os.listdir(tmp_path) == ["x.parquet"]


@pytest.mark.parametrize(("compression", "level", "codec"), [("zstd", 3, "ZSTD"), ("none", None, "UNCOMPRESSED"), ("snappy", 3, "SNAPPY")])
def test_the_codec_asked_for_is_the_one_in_the_footer(tmp_path: Path, compression: str, level: int | None, codec: str) -> None:
    """Parquet footer: every column chunk names its codec; "none" writes uncompressed pages,
    and a level is passed only to codecs that take one (snappy has none)."""
    target = tmp_path / "x.parquet"
    write_table(target, table(["a", "b"]), compression=compression, level=level, dictionary=False)
    group = pq.read_metadata(target).row_group(0)
    assert {group.column(i).compression for i in range(group.num_columns)} == {codec}
    assert pq.read_table(target).equals(table(["a", "b"]))


def test_rebased_offsets_start_at_zero_for_a_sliced_list_array() -> None:
    """List lengths from to_pylist as reference: the rebased offsets rebuild the same lists
    around the slice's own values."""
    lists = pa.array([[1], [2, 3], [], [4, 5, 6], [7]], pa.list_(pa.int64())).slice(1, 3)
    offsets = rebased_offsets(lists)
    assert offsets.to_pylist() == [0, 2, 2, 5]
    values = pa.concat_arrays([lists.flatten()])
    assert pa.ListArray.from_arrays(offsets, values).to_pylist() == lists.to_pylist()
