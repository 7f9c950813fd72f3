"""Growth: distinct types after each prefix of the train stream (stats/growth.json), from each
chunk's sightings merged in corpus order."""

from __future__ import annotations

import json
import random
import re
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from corpusmill import growth
from corpusmill.storage import write_table
from tests.test_report import corpus_rows


def test_growth_curve_equals_a_set_recount_of_the_train_stream(demo_chunks_build: Path) -> None:
    """Brute force: distinct train tokens after each prefix of the prepared documents in corpus
    order (duplicates left out), counted with a Python set, over a build of one chunk per file."""
    removed = {(r["source"], r["offset"]) for r in pq.read_table(demo_chunks_build / "interim" / "duplicates.parquet").to_pylist()}
    seen: set[str] = set()
    after: list[int] = [0]
    for row in corpus_rows(demo_chunks_build, ["split", "tokens"]):
        if row["split"] != "train" or (row["source"], row["offset"]) in removed:
            continue
        for token in (t for sentence in row["tokens"] for t in sentence):
            seen.add(token)
            after.append(len(seen))
    curve = json.loads((demo_chunks_build / "stats" / "growth.json").read_text())
    assert len(curve["read"]) > 100 and curve["read"][-1] == len(after) - 1
    assert curve["distinct"] == [after[n] for n in curve["read"]]


def write_sightings(path: Path, stream: list[str], cuts: list[int]) -> None:
    """A chunk's sighting file as a shard job writes it, its stream fed in batches cut at `cuts`."""
    batches = [pa.array(stream[low:high], pa.string()) for low, high in zip([0, *cuts], [*cuts, len(stream)])]
    table, length = growth.sightings(batches)
    write_table(path, table.replace_schema_metadata({growth.LENGTH_KEY: str(length).encode()}))


@pytest.mark.parametrize("merge_rows", [1, 7, growth.MERGE_ROWS])
def test_sightings_merged_in_corpus_order_equal_a_set_recount_whatever_the_chunks_and_batches(tmp_path: Path, monkeypatch, merge_rows: int) -> None:
    """Brute force: a Python set grown token by token over the whole stream gives the distinct
    types after every prefix; the stream is cut into chunks (one of them empty) and each chunk
    into batches at random places, and merges are forced after every file or every 7 rows."""
    monkeypatch.setattr(growth, "MERGE_ROWS", merge_rows)
    rng = random.Random(3)
    stream = [f"w{int(rng.paretovariate(1.1)) % 500}" for _ in range(5000)]
    expected, seen = [0], set()
    for token in stream:
        seen.add(token)
        expected.append(len(seen))
    bounds = [0, *sorted(rng.sample(range(1, len(stream)), 6)), len(stream), len(stream)]
    paths = []
    for number, (low, high) in enumerate(zip(bounds, bounds[1:])):
        chunk = stream[low:high]
        cuts = sorted(rng.sample(range(1, len(chunk)), min(4, max(len(chunk) - 1, 0)))) if len(chunk) > 1 else []
        paths.append(tmp_path / f"{number}.parquet")
        write_sightings(paths[-1], chunk, cuts)
    firsts, length = growth.merged_firsts(str(path) for path in paths)
    assert length == len(stream)
    positions = np.arange(len(stream) + 1)
    assert np.searchsorted(firsts, positions, side="left").tolist() == expected
    read, distinct = growth.growth_points(firsts, length)
    assert read[-1] == len(stream) and distinct.tolist() == [expected[n] for n in read]


def test_a_chunk_sees_each_type_once_at_its_first_place() -> None:
    """Definition, checked by hand: types in order of first appearance, positions counted across batches."""
    table, length = growth.sightings([pa.array(["b", "a", "b"]), pa.array([], pa.string()), pa.array(["c", "a", "d", "c"])])
    assert (table.to_pydict(), length) == ({"type": ["b", "a", "c", "d"], "first": [0, 1, 3, 5]}, 7)
    assert growth.sightings([])[1] == 0 and growth.merged_firsts([])[1] == 0


@pytest.mark.parametrize("indices", [[0, 1, 0, 2, 1, 3], [2, 0, 2, 1, 0], [0, 0, 0], []])
def test_first_places_of_dictionary_entries_whatever_their_numbering(indices: list[int]) -> None:
    """Outside reference: Python's list.index for each entry; the second case numbers the entries
    out of their order of appearance (Arrow does not, but nothing documents that it never will)."""
    entries = max(indices, default=-1) + 1
    assert growth._first_places(np.array(indices, dtype=np.int64), entries).tolist() == [indices.index(entry) for entry in range(entries)]


def test_a_sightings_file_without_its_stream_length_stops_the_job_naming_it_and_the_fix(tmp_path: Path) -> None:
    """Error messages name the file and the fix (project convention)."""
    write_sightings(tmp_path / "0.parquet", ["a", "b"], [])
    stray = tmp_path / "1.parquet"
    write_table(stray, growth.SIGHTINGS_SCHEMA.empty_table())
    with pytest.raises(SystemExit, match=rf"{re.escape(str(stray))}: no train stream length .*\(snakemake --forcerun shards\)"):
        growth.merged_firsts([str(tmp_path / "0.parquet"), str(stray)])
