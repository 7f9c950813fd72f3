"""Growth: distinct types after each prefix of the train stream (stats/growth.json)."""

from __future__ import annotations

import json
from pathlib import Path

import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from corpusmill.growth import train_token_batches
from corpusmill.laws import growth_curve
from tests.test_report import corpus_order, corpus_rows


def test_growth_curve_equals_a_set_recount_of_the_train_stream(demo_chunks_build: Path) -> None:
    """Brute force: distinct train tokens after each prefix of the prepared documents in corpus
    order (duplicates left out), counted with a Python set, over a build of one chunk per file."""
    removed = {(r["source"], r["offset"]) for r in pq.read_table(demo_chunks_build / "interim" / "duplicates.parquet").to_pylist()}
    prepared = corpus_order(demo_chunks_build)
    seen: set[str] = set()
    after: list[int] = [0]
    for row in corpus_rows(demo_chunks_build, ["split", "tokens"]):
        if row["split"] != "train" or (row["source"], row["offset"]) in removed:
            continue
        for token in (t for sentence in row["tokens"] for t in sentence):
            seen.add(token)
            after.append(len(seen))
    vocabulary = pq.read_table(demo_chunks_build / "stats" / "token_counts.parquet")["token"].combine_chunks()
    duplicates = pq.read_table(demo_chunks_build / "interim" / "duplicates.parquet")
    tokens, types = growth_curve(train_token_batches([(path, duplicates) for path in prepared], vocabulary), len(vocabulary))
    assert tokens[-1] == len(after) - 1
    assert types.tolist() == [after[n] for n in tokens]
    growth = json.loads((demo_chunks_build / "stats" / "growth.json").read_text())
    assert growth == {"unit": "words", "read": tokens.tolist(), "distinct": types.tolist()}


def test_stale_counts_are_reported_with_the_file_and_the_fix(tmp_path: Path, demo_chunks_build: Path) -> None:
    """Error messages name the file and the fix (project convention)."""
    prepared = sorted(str(p) for p in (demo_chunks_build / "interim" / "prepared").glob("*.parquet"))[:1]
    with pytest.raises(SystemExit, match=r"\.parquet: train token .* rerun the workflow"):
        list(train_token_batches([(path, pq.read_table(demo_chunks_build / "interim" / "duplicates.parquet")) for path in prepared], pa.array(["the"])))
