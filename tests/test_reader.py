"""steps.reader: a build folder read back as numpy batches, checked against independent readers."""

from __future__ import annotations

import hashlib
import json
import os
import re
import shutil
import subprocess
import sys
from collections import Counter
from collections.abc import Iterable
from pathlib import Path

import duckdb
import numpy as np
import polars as pl
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from corpusmill.formats import read_vocabulary
from corpusmill.reader import BuildError, open_build, resolve_inside, to_numpy
from tests import hostile

Row = tuple
REPO = Path(__file__).resolve().parent.parent


def row_tuples(kind: str, batches: Iterable[dict]) -> list[Row]:
    """Every row of the batches as a hashable tuple, in order."""
    rows: list[Row] = []
    for batch in batches:
        if kind == "ngram":
            rows += [(tuple(c), int(t)) for c, t in zip(batch["context"].tolist(), batch["target"].tolist())]
        elif kind == "block":
            rows += [tuple(ids) for ids in batch["ids"].tolist()]
        else:
            offsets = batch["offsets"]
            rows += [(doc, tuple(batch["ids"][offsets[i] : offsets[i + 1]].tolist())) for i, doc in enumerate(batch["doc_id"])]
    return rows


def duckdb_rows(kind: str, path: Path) -> list[Row]:
    """One shard's rows as DuckDB reads them, in file order."""
    records = duckdb.sql(f"SELECT * FROM read_parquet('{path}')").fetchall()
    if kind == "ngram":
        return [(tuple(context), target) for context, target in records]
    if kind == "block":
        return [tuple(ids) for (ids,) in records]
    return [(doc, tuple(ids)) for doc, ids in records]


def polars_rows(kind: str, path: Path) -> list[Row]:
    """One shard's rows as polars reads them, in file order."""
    frame = pl.read_parquet(path)
    if kind == "ngram":
        return [(tuple(c), t) for c, t in zip(frame["context"].to_numpy().tolist(), frame["target"].to_list())]
    if kind == "block":
        return [tuple(ids) for ids in frame["ids"].to_numpy().tolist()]
    return [(doc, tuple(ids)) for doc, ids in zip(frame["doc_id"].to_list(), frame["ids"].to_list())]


def split_kinds(build_path: Path) -> list[tuple[str, str]]:
    build = open_build(build_path)
    return [(split, kind) for split in build.splits for kind in build.kinds(split)]


def write_synthetic_build(root: Path, group_sizes: list[list[int]]) -> Path:
    """A minimal build folder whose ngram rows are numbered: row i has context (i, i, i) and target i.

    One shard (one chunk) per inner list, one row group per size; numbered rows make
    disjointness checkable by row index, and the uneven row groups exercise ranges that cut row
    groups apart.
    """
    root.mkdir(parents=True, exist_ok=True)
    vocabulary = "id\ttoken\tcount\tkind\n0\t<pad>\t0\treserved\n1\t<unk>\t0\treserved\n2\t<s>\t0\treserved\n3\t</s>\t0\treserved\n"
    (root / "vocabulary.tsv").write_text(vocabulary, encoding="utf-8")
    digest = hashlib.sha256(vocabulary.encode("utf-8")).hexdigest()
    ids = read_vocabulary(root / "vocabulary.tsv").ids_digest
    shards, start = [], 0
    for index, sizes in enumerate(group_sizes):
        chunk = f"{index:04d}"
        info = {"split": "train", "kind": "ngram", "chunk": chunk, "n": 4, "ids_sha256": ids}
        schema = pa.schema([("context", pa.list_(pa.uint32(), 3)), ("target", pa.uint32())])
        schema = schema.with_metadata({b"corpusmill": json.dumps(info).encode()})
        path = root / "shards" / "train" / f"ngram-{chunk}.parquet"
        path.parent.mkdir(parents=True, exist_ok=True)
        with pq.ParquetWriter(path, schema) as writer:
            for size in sizes:
                numbers = np.arange(start, start + size, dtype=np.uint32)
                context = pa.FixedSizeListArray.from_arrays(pa.array(np.repeat(numbers, 3)), 3)
                writer.write_table(pa.Table.from_arrays([context, pa.array(numbers)], schema=schema))
                start += size
        entry = {"file": f"shards/train/ngram-{chunk}.parquet", "kind": "ngram", "chunk": chunk, "rows": sum(sizes)}
        shards.append({**entry, "sha256": hashlib.sha256(path.read_bytes()).hexdigest()})
    manifest = {"vocabulary": {"sha256": digest, "ids_sha256": ids}, "splits": {"train": {"shards": shards}}}
    (root / "manifest.json").write_text(json.dumps(manifest), encoding="utf-8")
    return root


SYNTHETIC_GROUPS = [[7, 13, 1], [20], [5, 5, 5, 9], [11, 2]]
SYNTHETIC_ROWS = sum(map(sum, SYNTHETIC_GROUPS))


def targets(batches: Iterable[dict]) -> list[int]:
    return [int(t) for batch in batches for t in batch["target"]]


def test_open_build_lists_the_splits_and_kinds_of_the_manifest(demo_chunks_build: Path) -> None:
    """The manifest as reference: the reader's splits, kinds and row totals are the recorded ones."""
    build = open_build(demo_chunks_build)
    manifest = json.loads((demo_chunks_build / "manifest.json").read_text())
    assert set(build.splits) == {"train", "dev", "test"}
    for split in build.splits:
        assert set(build.kinds(split)) == {"ngram", "block", "stream"}
        for kind in build.kinds(split):
            assert build.rows(split, kind) == manifest["splits"][split]["rows"][kind]
    assert build.info("train", "ngram")["n"] == 4
    assert build.vocabulary.size == manifest["vocabulary"]["size"]


def test_unshuffled_rows_equal_duckdb_rows_file_by_file(demo_chunks_build: Path) -> None:
    """DuckDB as an independent Parquet reader: without a seed the reader yields every shard's rows in file order."""
    build = open_build(demo_chunks_build)
    for split, kind in split_kinds(demo_chunks_build):
        expected = [row for shard in build.shards(split, kind) for row in duckdb_rows(kind, shard.path)]
        assert row_tuples(kind, build.batches(split, kind, 100)) == expected, (split, kind)


def test_unshuffled_rows_equal_polars_rows_file_by_file(demo_chunks_build: Path) -> None:
    """polars as a second independent Parquet reader, with batches that straddle row groups."""
    build = open_build(demo_chunks_build)
    for split, kind in split_kinds(demo_chunks_build):
        expected = [row for shard in build.shards(split, kind) for row in polars_rows(kind, shard.path)]
        assert row_tuples(kind, build.batches(split, kind, 7)) == expected, (split, kind)


def test_batches_have_the_documented_shapes_and_types(demo_chunks_build: Path) -> None:
    """The module docstring as specification: [B, n-1] and [B] n-gram arrays, [B, L+1] blocks, CSR streams."""
    build = open_build(demo_chunks_build)
    n, length = build.info("train", "ngram")["n"], build.info("train", "block")["length"]
    ngram = next(build.batches("train", "ngram", 32))
    assert ngram["context"].shape == (32, n - 1) and ngram["target"].shape == (32,)
    assert ngram["context"].dtype == np.uint16
    block = next(build.batches("train", "block", 8, dtype=np.int64))
    assert block["ids"].shape == (8, length + 1) and block["ids"].dtype == np.int64
    stream = next(build.batches("dev", "stream", 5))
    assert len(stream["doc_id"]) == 5 and stream["offsets"][0] == 0 and stream["offsets"][-1] == len(stream["ids"])
    total = build.rows("dev", "ngram")
    sizes = [len(b["target"]) for b in build.batches("dev", "ngram", 1000)]
    assert sizes == [1000] * (total // 1000) + ([total % 1000] if total % 1000 else [])
    kept = [len(b["target"]) for b in build.batches("dev", "ngram", 1000, drop_last=True)]
    assert kept == [1000] * (total // 1000)


def test_fixed_size_lists_become_numpy_views_without_a_copy() -> None:
    """Arrow's buffer addresses as reference: context and target arrays point into the Arrow values buffers."""
    numbers = np.arange(60, dtype=np.uint16)
    context = pa.FixedSizeListArray.from_arrays(pa.array(numbers), 3)
    table = pa.table({"context": context, "target": pa.array(numbers[:20])}).slice(5, 10)
    batch = to_numpy("ngram", table)
    values = context.values.buffers()[1]
    assert batch["context"].__array_interface__["data"][0] == values.address + 5 * 3 * 2
    assert batch["context"].tolist() == numbers[15:45].reshape(10, 3).tolist()
    assert not batch["context"].flags.owndata


def test_workers_of_the_demo_split_share_no_rows_and_together_read_all_of_it(demo_chunks_build: Path) -> None:
    """collections.Counter multisets: the workers' shuffled row tuples add up exactly to the split's, for several world sizes."""
    build = open_build(demo_chunks_build)
    for kind in ("ngram", "block", "stream"):
        whole = Counter(row_tuples(kind, build.batches("train", kind, 256)))
        for world_size in (2, 3):
            parts = [
                Counter(row_tuples(kind, build.batches("train", kind, 64, seed=5, epoch=2, rank=r, world_size=world_size, shuffle_buffer=100)))
                for r in range(world_size)
            ]
            assert sum(parts, Counter()) == whole, (kind, world_size)
            sizes = [sum(part.values()) for part in parts]
            assert sizes == [build.rows("train", kind, r, world_size) for r in range(world_size)]
            assert max(sizes) - min(sizes) <= 1


def test_workers_get_disjoint_row_indices_whose_union_is_every_row(tmp_path: Path) -> None:
    """Row indices (numbered synthetic rows) as reference: each index is read by exactly one worker."""
    build = open_build(write_synthetic_build(tmp_path / "build", SYNTHETIC_GROUPS))
    for world_size in (1, 2, 3, 5, 8):
        for epoch in (0, 1):
            seen = [
                targets(build.batches("train", "ngram", 4, seed=9, epoch=epoch, rank=r, world_size=world_size, shuffle_buffer=6)) for r in range(world_size)
            ]
            flat = [index for part in seen for index in part]
            assert sorted(flat) == list(range(SYNTHETIC_ROWS)), (world_size, epoch)
            assert max(map(len, seen)) - min(map(len, seen)) <= 1


def test_same_seed_and_epoch_repeat_the_order_and_another_epoch_changes_it(tmp_path: Path) -> None:
    """Determinism by repetition: two readers with one (seed, epoch) agree; epochs and seeds differ, same rows."""
    path = write_synthetic_build(tmp_path / "build", SYNTHETIC_GROUPS)

    def order(seed: int, epoch: int, rank: int = 0, world_size: int = 1) -> list[int]:
        return targets(open_build(path).batches("train", "ngram", 5, seed=seed, epoch=epoch, rank=rank, world_size=world_size, shuffle_buffer=10))

    assert order(3, 0) == order(3, 0)
    assert order(3, 1, rank=1, world_size=2) == order(3, 1, rank=1, world_size=2)
    assert order(3, 0) != order(3, 1) and order(3, 0) != order(4, 0)
    assert sorted(order(3, 0)) == sorted(order(3, 1)) == list(range(SYNTHETIC_ROWS))
    assert order(3, 0) != list(range(SYNTHETIC_ROWS))


def test_without_a_shuffle_buffer_only_row_groups_are_reordered(tmp_path: Path) -> None:
    """The row-group sizes written as reference: shuffle_buffer=0 keeps each row group's rows together and in order."""
    build = open_build(write_synthetic_build(tmp_path / "build", SYNTHETIC_GROUPS))
    read = targets(build.batches("train", "ngram", 3, seed=1, shuffle_buffer=0))
    runs, start = [], 0
    for sizes in SYNTHETIC_GROUPS:
        for size in sizes:
            runs.append(list(range(start, start + size)))
            start += size
    pieces, position = [], 0
    while position < len(read):
        run = next(run for run in runs if run[0] == read[position])
        pieces.append(read[position : position + len(run)])
        assert pieces[-1] == run
        position += len(run)
    assert pieces != runs and sorted(map(tuple, pieces)) == sorted(map(tuple, runs))


def test_shuffle_buffer_mixes_rows_of_different_row_groups(tmp_path: Path) -> None:
    """Row indices as reference: with a buffer, the first batch draws from more than the first row group read."""
    build = open_build(write_synthetic_build(tmp_path / "build", [[50, 50, 50, 50]]))
    first = targets(build.batches("train", "ngram", 20, seed=2, shuffle_buffer=80))[:20]
    assert len({index // 50 for index in first}) > 1


def test_a_shard_rewritten_after_the_build_was_opened_is_refused_naming_the_row_group(tmp_path: Path) -> None:
    """The row groups are planned from the footers read at opening; a shard rewritten since then
    (same rows, one row group) no longer matches the plan, and reading says so."""
    build = open_build(write_synthetic_build(tmp_path / "build", SYNTHETIC_GROUPS))
    shard = tmp_path / "build" / "shards" / "train" / "ngram-0000.parquet"
    pq.write_table(pq.read_table(shard), shard)
    with pytest.raises(BuildError, match=r"ngram-0000\.parquet: row group 0 decodes to 21 rows, but the file's footer says 7; the file was altered"):
        for _ in build.tables("train", "ngram"):
            pass


def listed_shard(build: Path, split: str, kind: str, index: int = 2) -> str:
    """The file name (relative to the build) of the manifest's `index`-th shard of a split and kind."""
    manifest = json.loads((build / "manifest.json").read_text(encoding="utf-8"))
    return [e["file"] for e in manifest["splits"][split]["shards"] if e["kind"] == kind][index]


def copy_build(source: Path, target: Path) -> Path:
    """The files the reader needs, copied so they can be damaged."""
    target.mkdir(parents=True)
    for name in ("manifest.json", "vocabulary.tsv"):
        shutil.copy(source / name, target / name)
    shutil.copytree(source / "shards", target / "shards")
    return target


def rewrite(path: Path, table: pa.Table, **options: object) -> None:
    pq.write_table(table, path, **options)


def drop_first_row(shard: Path) -> None:
    table = pq.read_table(shard)
    rewrite(shard, table.slice(1))


def foreign_ids(shard: Path) -> None:
    table = pq.read_table(shard)
    info = json.loads(table.schema.metadata[b"corpusmill"])
    info["ids_sha256"] = "0" * 64
    rewrite(shard, table.replace_schema_metadata({b"corpusmill": json.dumps(info).encode()}))


def other_split(shard: Path) -> None:
    table = pq.read_table(shard)
    info = json.loads(table.schema.metadata[b"corpusmill"])
    info["split"] = "dev"
    rewrite(shard, table.replace_schema_metadata({b"corpusmill": json.dumps(info).encode()}))


@pytest.mark.parametrize(
    ("damage", "message"),
    [
        (lambda build, shard: shard.unlink(), "missing"),
        (lambda build, shard: drop_first_row(shard), "rows but"),
        (lambda build, shard: foreign_ids(shard), "written with the ids 000000000000…, but .*vocabulary.tsv holds the ids"),
        (lambda build, shard: other_split(shard), "split='dev'"),
        (lambda build, shard: shard.write_bytes(b"not parquet"), "not a readable Parquet file"),
        (lambda build, shard: (build / "vocabulary.tsv").write_text("id\ttoken\tcount\tkind\n", encoding="utf-8"), "vocabulary.tsv: sha256"),
    ],
    ids=["missing-shard", "row-count", "shard-ids", "shard-split", "not-parquet", "edited-vocabulary"],
)
def test_a_build_that_disagrees_with_its_manifest_is_refused_naming_the_file(demo_chunks_build: Path, tmp_path: Path, damage, message: str) -> None:
    """The manifest as reference: every recorded fact about a shard is checked, and the error names the file."""
    build = copy_build(demo_chunks_build, tmp_path / "build")
    shard = build / listed_shard(build, "train", "ngram")
    damage(build, shard)
    with pytest.raises(BuildError, match=message) as error:
        open_build(build)
    named = "vocabulary.tsv" if message.startswith("vocabulary.tsv") else shard.name
    assert named in str(error.value)


def test_a_folder_without_a_manifest_is_refused_saying_how_to_get_a_build(tmp_path: Path) -> None:
    """The message reaches Python callers and the command line alike, so it names the folder and
    says what to do in words that need neither (no function names)."""
    missing = tmp_path / "no-such-build"
    with pytest.raises(BuildError) as error:
        open_build(missing)
    assert str(error.value) == (
        f"{missing / 'manifest.json'}: missing; {missing} is not a finished build folder: "
        "run the workflow (snakemake) to build it, or give the path of a finished build"
    )


def test_hash_check_catches_a_shard_rewritten_with_the_same_rows(demo_chunks_build: Path, tmp_path: Path) -> None:
    """SHA-256 as reference: a shard recompressed with equal rows passes the footer checks but not verify_hashes."""
    build = copy_build(demo_chunks_build, tmp_path / "build")
    shard = build / listed_shard(build, "train", "block", 1)
    rewrite(shard, pq.read_table(shard), compression="snappy")
    open_build(build)
    with pytest.raises(BuildError, match=f"{re.escape(shard.name)}: SHA-256 differs"):
        open_build(build, verify_hashes=True)


def test_asking_for_an_absent_split_or_a_bad_rank_explains_what_exists(demo_chunks_build: Path) -> None:
    """The manifest as reference: the error lists the split/kind pairs that do exist."""
    build = open_build(demo_chunks_build)
    with pytest.raises(BuildError, match="available: dev/block"):
        build.rows("valid", "ngram")
    with pytest.raises(ValueError, match="rank=2, world_size=2"):
        next(build.batches("train", "ngram", 8, rank=2, world_size=2))


def edit_manifest(build: Path, change) -> None:
    manifest = json.loads((build / "manifest.json").read_text(encoding="utf-8"))
    change(manifest)
    (build / "manifest.json").write_text(json.dumps(manifest), encoding="utf-8")


@pytest.mark.parametrize("route", ["dot-dot", "absolute", "symlink", "symlinked-folder"])
def test_a_shard_outside_the_build_folder_is_refused(demo_chunks_build: Path, tmp_path: Path, route: str) -> None:
    """A shard moved out of the build and reached by `..`, an absolute path, a symlink, or a symlinked shards/ folder."""
    build = copy_build(demo_chunks_build, tmp_path / "build")
    name = listed_shard(build, "train", "ngram")
    outside = tmp_path / "elsewhere" / Path(name).name
    outside.parent.mkdir()
    if route == "symlinked-folder":
        (build / "shards" / "train").rename(outside.parent / "train")
        (build / "shards" / "train").symlink_to(outside.parent / "train")
    else:
        (build / name).rename(outside)
    if route == "symlink":
        (build / name).symlink_to(outside)
    if route in ("dot-dot", "absolute"):
        target = f"../elsewhere/{outside.name}" if route == "dot-dot" else str(outside)

        def point(manifest: dict) -> None:
            next(e for e in manifest["splits"]["train"]["shards"] if e["file"] == name)["file"] = target

        edit_manifest(build, point)
    with pytest.raises(BuildError, match=r"manifest\.json: splits\.train\.shards\[\d+\]\.file .*(outside the build folder|absolute path)"):
        open_build(build)


def test_a_vocabulary_symlinked_to_dev_zero_is_refused(demo_chunks_build: Path, tmp_path: Path) -> None:
    """/dev/zero never ends; vocabulary.tsv must be a file inside the build folder."""
    build = copy_build(demo_chunks_build, tmp_path / "build")
    (build / "vocabulary.tsv").unlink()
    (build / "vocabulary.tsv").symlink_to("/dev/zero")
    with pytest.raises(BuildError, match=r"vocabulary\.tsv.*outside the build folder \(to /dev/zero\)"):
        open_build(build)


OPEN_BUILD = (
    "import sys\nfrom corpusmill.reader import BuildError, open_build\n"
    "try:\n    open_build(sys.argv[1])\nexcept BuildError as error:\n    sys.exit(f'BuildError: {error}')\n"
)


@pytest.mark.parametrize("victim", ["vocabulary.tsv", "manifest.json", "shard"])
def test_a_fifo_in_place_of_a_build_file_is_refused_as_not_a_regular_file(demo_chunks_build: Path, tmp_path: Path, victim: str) -> None:
    """POSIX: opening a FIFO for reading blocks until a writer comes, so it is refused by os.stat before any open.

    open_build runs in a child process with a time limit, so a blocking open fails the test instead of hanging it.
    """
    build = copy_build(demo_chunks_build, tmp_path / "build")
    victim = listed_shard(build, "train", "ngram") if victim == "shard" else victim
    (build / victim).unlink()
    os.mkfifo(build / victim)
    run = subprocess.run([sys.executable, "-c", OPEN_BUILD, str(build)], cwd=REPO, capture_output=True, text=True, timeout=60)
    assert run.returncode == 1 and run.stderr.startswith(f"BuildError: {build / victim}: "), run.stderr
    assert "not a regular file (a FIFO)" in run.stderr


def test_a_vocabulary_over_the_size_limit_is_refused_before_reading(demo_chunks_build: Path, tmp_path: Path) -> None:
    """A sparse vocabulary.tsv one byte over 1 GiB (no disk used) is refused by its size."""
    build = copy_build(demo_chunks_build, tmp_path / "build")
    with open(build / "vocabulary.tsv", "r+b") as handle:
        handle.truncate((1 << 30) + 1)
    with pytest.raises(BuildError, match=r"vocabulary\.tsv: over the 1 GiB size limit \(1,073,741,825 bytes\)"):
        open_build(build)


@pytest.mark.parametrize("case", sorted(hostile.HOSTILE_MANIFESTS))
def test_a_malformed_manifest_raises_build_error_naming_the_key_path(demo_chunks_build: Path, tmp_path: Path, case: str) -> None:
    """Wrong types, missing keys, deep nesting, huge numbers, non-UTF-8 bytes: BuildError, nothing else."""
    build = copy_build(demo_chunks_build, tmp_path / "build")
    make, expected = hostile.HOSTILE_MANIFESTS[case]
    manifest = json.loads((build / "manifest.json").read_text(encoding="utf-8"))
    (build / "manifest.json").write_bytes(make(manifest))
    with pytest.raises(BuildError) as error:
        open_build(build)
    assert "manifest.json: " in str(error.value) and expected in str(error.value)
    assert "\n" not in str(error.value)


def test_a_shard_listed_twice_is_refused(demo_chunks_build: Path, tmp_path: Path) -> None:
    """One shard listed twice would be read twice per epoch."""
    build = copy_build(demo_chunks_build, tmp_path / "build")

    def twice(manifest: dict) -> None:
        shards = manifest["splits"]["train"]["shards"]
        shards.append(dict(shards[0], file=shards[0]["file"].replace("train/", "train/./")))

    edit_manifest(build, twice)
    with pytest.raises(BuildError, match=r"names the same file as splits\.train\.shards\[0\]\.file"):
        open_build(build)


FOOTER_EDITS = {"file-total": (1000, {}), "row-group": (1000, {0: 1000}), "moved-between-groups": (0, {0: 1000, 1: -1000})}


@pytest.mark.parametrize("edit", sorted(FOOTER_EDITS))
def test_a_footer_promising_other_rows_than_its_pages_hold_is_refused(demo_chunks_build: Path, tmp_path: Path, edit: str) -> None:
    """Parquet footer (Thrift compact protocol) edited, manifest rows and hash edited to match: opening or reading notices."""
    build = copy_build(demo_chunks_build, tmp_path / "build")
    shard = build / listed_shard(build, "train", "ngram")
    pq.write_table(pq.read_table(shard), shard, row_group_size=pq.ParquetFile(shard).metadata.num_rows // 2 + 1)
    extra, groups = FOOTER_EDITS[edit]
    hostile.inflate_parquet_rows(shard, extra, groups)

    def match(manifest: dict) -> None:
        entry = next(e for e in manifest["splits"]["train"]["shards"] if e["file"].endswith(shard.name))
        entry.update(rows=entry["rows"] + extra, sha256=hashlib.sha256(shard.read_bytes()).hexdigest())

    edit_manifest(build, match)
    with pytest.raises(BuildError, match=rf"{re.escape(shard.name)}: .*footer"):
        opened = open_build(build, verify_hashes=True)
        for _ in opened.batches("train", "ngram", 4096):
            pass


@pytest.mark.parametrize("metadata", [b'["not", "an object"]', b"[1, 2"], ids=["array", "broken-json"])
def test_shard_metadata_that_is_not_a_json_object_is_refused(demo_chunks_build: Path, tmp_path: Path, metadata: bytes) -> None:
    """The `corpusmill` key-value metadata must be a JSON object; anything else is not this workflow's shard."""
    build = copy_build(demo_chunks_build, tmp_path / "build")
    shard = build / listed_shard(build, "train", "ngram")
    table = pq.read_table(shard)
    rewrite(shard, table.replace_schema_metadata({b"corpusmill": metadata}))
    with pytest.raises(BuildError, match=rf"{re.escape(shard.name)}: its 'corpusmill' metadata is not a JSON object"):
        open_build(build)


def test_resolving_each_folder_once_agrees_with_os_path_realpath(tmp_path: Path) -> None:
    """os.path.realpath as reference: names through symlinked files and folders, '.', '..' and missing files."""
    root = tmp_path / "build"
    (root / "shards" / "train").mkdir(parents=True)
    (root / "shards" / "train" / "a.parquet").write_bytes(b"")
    (root / "shards" / "train" / "b.parquet").symlink_to(root / "shards" / "train" / "a.parquet")
    (root / "shards" / "train" / "up").symlink_to("..")
    (root / "link").symlink_to(root / "shards")
    (root / "out").symlink_to(tmp_path)
    names = [
        "shards/train/a.parquet", "shards/train/b.parquet", "link/train/a.parquet", "link/train/b.parquet",
        "shards/train/../train/a.parquet", "shards/./train/a.parquet", "shards/train/up/train/a.parquet",
        "shards/train/up", "out/elsewhere.parquet", "out/build/shards/train/a.parquet", "shards/..", ".", "shards/train/",
        "missing/file.parquet", "link/../../outside.parquet",
    ]  # fmt: skip
    real, folders = root.resolve(), {}
    for name in names:
        target, problem = resolve_inside(real, name, folders)
        expected = os.path.realpath(real / name)
        assert str(target) == expected, name
        assert (problem is None) == expected.startswith(f"{real}/"), name
