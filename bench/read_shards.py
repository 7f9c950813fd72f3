"""Benchmark: train shards read as numpy batches by steps.reader vs a bare pyarrow read.

    python bench/read_shards.py BUILD [--batch-size 4096] [--kinds ngram block stream] [--repeat 3]

Both sides read the same files after one untimed bare pass has put them in the page cache (and
paid pyarrow's first-call costs); the build is opened and checked once, untimed. The bare
side is the least a Python trainer can do to get numpy arrays: ParquetFile.read_row_group for
every row group, then the values of each id column as numpy (no batching, no checks). The reader
side is `build.batches("train", kind, B)` without a seed (manifest order), which adds the
worker-range bookkeeping, batching to exactly B rows and the batch dicts. A third
figure times the reader with seed and the default shuffle buffer. ids counts every id delivered:
context and target ids for ngram rows, L+1 per block, the stream ids. Targets: reader ≥ 0.8 × bare
and ≥ 50 M ids/s.
"""

from __future__ import annotations

import argparse
import sys
import time
from collections.abc import Callable, Iterable
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

from corpusmill.reader import open_build


def batch_ids(batch: dict) -> int:
    """Ids held by one reader batch, whatever its kind."""
    return sum(value.size for key, value in batch.items() if key in ("context", "target", "ids"))


def bare_ids(paths: Iterable[Path]) -> int:
    """Read every row group with pyarrow alone and touch each id column as numpy."""
    total = 0
    for path in paths:
        parquet = pq.ParquetFile(path)
        for group in range(parquet.num_row_groups):
            table = parquet.read_row_group(group)
            for name in table.column_names:
                if name == "doc_id":
                    continue
                column = table.column(name)
                for chunk in column.chunks:
                    values = chunk.flatten() if pa.types.is_list(chunk.type) or pa.types.is_fixed_size_list(chunk.type) else chunk
                    total += values.to_numpy(zero_copy_only=False).size
    return total


def timed(work: Callable[[], int], repeat: int) -> tuple[int, float, float]:
    """(ids, wall seconds, process CPU seconds), the fastest of `repeat` runs by wall time.

    CPU seconds (every thread of the process) stay meaningful when other work shares the machine.
    """
    best = (0, float("inf"), float("inf"))
    for _ in range(repeat):
        wall, cpu = time.perf_counter(), time.process_time()
        ids = work()
        wall, cpu = time.perf_counter() - wall, time.process_time() - cpu
        best = min(best, (ids, wall, cpu), key=lambda item: item[1])
    return best


def _line(label: str, files: int | None, rows: int | None, figures: tuple) -> str:
    """One table row: ids/s in millions from (ids, bare, reader wall, bare, reader CPU, shuffled wall)."""
    ids, bare_wall, reader_wall, bare_cpu, reader_cpu, shuffled_wall = figures
    files_text = "" if files is None else str(files)
    rows_text = "" if rows is None else f"{rows:,}"
    return (
        f"{label:<7} {files_text:>5} {rows_text:>11} {int(ids):>12,} {ids / bare_wall / 1e6:>12.1f} "
        f"{ids / reader_wall / 1e6:>14.1f} {bare_wall / reader_wall:>6.2f} {bare_cpu / reader_cpu:>9.2f} "
        f"{ids / shuffled_wall / 1e6:>16.1f}"
    )


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description="Reader vs bare pyarrow read of a build's train shards, in ids/s.")
    parser.add_argument("build", help="build folder (holding manifest.json) or its parent")
    parser.add_argument("--batch-size", type=int, default=4096)
    parser.add_argument("--kinds", nargs="*", default=None, help="kinds to time (default: every kind of train)")
    parser.add_argument("--repeat", type=int, default=1, help="runs per figure; the fastest is shown")
    args = parser.parse_args(argv)
    opened = time.perf_counter()
    build = open_build(args.build)
    opened = time.perf_counter() - opened
    kinds = args.kinds or list(build.kinds("train"))
    header = (
        f"{'kind':<7} {'files':>5} {'rows':>11} {'ids':>12} {'bare Mids/s':>12} {'reader Mids/s':>14} {'ratio':>6} {'cpu ratio':>9} {'shuffled Mids/s':>16}"
    )
    print(f"build {build.root}: opened and checked in {opened:.3f} s; batch size {args.batch_size}")
    print(header)
    totals = np.zeros(6)
    for kind in kinds:
        paths = [shard.path for shard in build.shards("train", kind)]
        bare_ids(paths)

        def reader_pass(seed: int | None, kind: str = kind) -> int:
            return sum(batch_ids(b) for b in build.batches("train", kind, args.batch_size, seed=seed))

        ids, bare_wall, bare_cpu = timed(lambda paths=paths: bare_ids(paths), args.repeat)
        read, reader_wall, reader_cpu = timed(lambda: reader_pass(None), args.repeat)
        shuffled, shuffled_wall, _ = timed(lambda: reader_pass(0), args.repeat)
        if not read == shuffled == ids:
            raise SystemExit(f"bench: {kind}: reader delivered {read} / {shuffled} ids, bare read {ids}")
        figures = (ids, bare_wall, reader_wall, bare_cpu, reader_cpu, shuffled_wall)
        print(_line(kind, len(paths), build.rows("train", kind), figures))
        totals += figures
    print(_line("all", None, None, tuple(totals)))
    print("targets: ratio >= 0.80 and reader >= 50 M ids/s")


if __name__ == "__main__":
    main()
