"""steps.reader's reading order, worker slices, shuffle buffer and batches, on numbered rows.

Outside reference: the reading order written out in plain Python from the module docstring of
steps/reader.py (units permuted by default_rng([seed, epoch]), worker ranges
[floor(rank*N/W), floor((rank+1)*N/W)), the bounded buffer permuted by
default_rng([seed, epoch, rank])), over builds whose row i carries the number i in every
kind, so any row lost, repeated, torn or reordered shows.
"""

from __future__ import annotations

import hashlib
import json
from collections.abc import Iterator
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from corpusmill import reader
from corpusmill.formats import KINDS, read_vocabulary
from corpusmill.reader import BuildError, open_build, to_numpy

LENGTH = 3  # block rows hold LENGTH + 1 ids
# Made-up kinds the reader has no code for, which it must read by their columns alone: fixed
# rows around an integer, and rows of one variable-length list without doc ids.
NEW_KIND, LIST_KIND = "skipgram", "sequence"
VOCABULARY = "id\ttoken\tcount\tkind\n0\t<pad>\t0\treserved\n1\t<unk>\t0\treserved\n2\t<s>\t0\treserved\n3\t</s>\t0\treserved\n"


def numbered_table(kind: str, numbers: np.ndarray) -> pa.Table:
    """Rows carrying their number: ngram context (i, i, i) and target i; block ids i, i+1, …;
    stream doc_id "d<i>" with 1 + i % 4 ids, each i (streams of unequal lengths); NEW_KIND, a
    kind the reader has no code for, written as steps.formats writes ids (fixed_size_list and
    integer columns): before (i, i), center i, after (i+1, i+2, i+3); LIST_KIND, another, the
    stream's ids alone."""
    if kind == NEW_KIND:
        before = pa.FixedSizeListArray.from_arrays(pa.array(np.repeat(numbers, 2)), 2)
        after = pa.FixedSizeListArray.from_arrays(pa.array((numbers[:, None] + np.arange(1, 4, dtype=np.uint32)).reshape(-1)), 3)
        return pa.table({"before": before, "center": pa.array(numbers), "after": after})
    if kind == "ngram":
        context = pa.FixedSizeListArray.from_arrays(pa.array(np.repeat(numbers, 3)), 3)
        return pa.table({"context": context, "target": pa.array(numbers)})
    if kind == "block":
        ids = (numbers[:, None] + np.arange(LENGTH + 1, dtype=np.uint32)).reshape(-1)
        return pa.table({"ids": pa.FixedSizeListArray.from_arrays(pa.array(ids), LENGTH + 1)})
    lists = [[int(i)] * (1 + int(i) % 4) for i in numbers]
    if kind == LIST_KIND:
        return pa.table({"ids": pa.array(lists, pa.list_(pa.uint32()))})
    return pa.table({"doc_id": pa.array([f"d{i}" for i in numbers]), "ids": pa.array(lists, pa.list_(pa.uint32()))})


def write_numbered_build(root: Path, kind: str, group_sizes: list[list[int]]) -> Path:
    """A build folder with one train shard (one chunk) per inner list and one row group per
    size, rows numbered 0, 1, 2, … in manifest order; the manifest has the fields of a real one."""
    (root / "shards" / "train").mkdir(parents=True, exist_ok=True)
    (root / "vocabulary.tsv").write_text(VOCABULARY, encoding="utf-8")
    digest = hashlib.sha256(VOCABULARY.encode("utf-8")).hexdigest()
    ids = read_vocabulary(root / "vocabulary.tsv").ids_digest
    reserved = {"<pad>": 0, "<unk>": 1, "<s>": 2, "</s>": 3}
    shards, start = [], 0
    for index, sizes in enumerate(group_sizes):
        chunk = f"{index:04d}"
        info = {"split": "train", "kind": kind, "chunk": chunk, "ids_sha256": ids, "vocabulary_size": 4, "reserved": reserved}
        info |= {"ngram": {"n": 4, "predict_end": True}, "block": {"length": LENGTH}, "stream": {}, NEW_KIND: {}, LIST_KIND: {}}[kind]
        name = f"shards/train/{kind}-{chunk}.parquet"
        schema = numbered_table(kind, np.zeros(1, np.uint32)).schema.with_metadata({b"corpusmill": json.dumps(info).encode()})
        with pq.ParquetWriter(root / name, schema) as writer:
            for size in sizes:
                writer.write_table(numbered_table(kind, np.arange(start, start + size, dtype=np.uint32)).cast(schema))
                start += size
        data = (root / name).read_bytes()
        shards.append({"file": name, "kind": kind, "chunk": chunk, "rows": sum(sizes), "bytes": len(data), "sha256": hashlib.sha256(data).hexdigest()})
    figures = {"documents": start, "sentences": start, "tokens": start, "rows": {kind: start}, "shards": shards}
    manifest = {
        "schema_version": 2,
        "vocabulary": {"file": "vocabulary.tsv", "sha256": digest, "ids_sha256": ids, "size": 4, "words": 0, "reserved": reserved},
        "splits": {"train": figures},
    }
    (root / "manifest.json").write_text(json.dumps(manifest), encoding="utf-8")
    return root


def numbers_of(kind: str, batch: dict) -> list[int]:
    """The row numbers of a batch, checking that every row is whole (all its values agree)."""
    if kind == "ngram":
        assert (batch["context"] == batch["target"][:, None]).all()
        return batch["target"].tolist()
    if kind == "block":
        ids = batch["ids"]
        assert (ids == ids[:, :1] + np.arange(LENGTH + 1)).all()
        return ids[:, 0].tolist()
    if kind == NEW_KIND:
        center = batch["center"]
        assert (batch["before"] == center[:, None]).all() and (batch["after"] == center[:, None] + np.arange(1, 4)).all()
        return center.tolist()
    offsets = batch["offsets"]
    assert offsets[0] == 0 and offsets[-1] == len(batch["ids"])
    numbers = batch["ids"][offsets[:-1]].tolist() if kind == LIST_KIND else [int(doc[1:]) for doc in batch["doc_id"]]
    assert len(offsets) == len(numbers) + 1
    for i, number in enumerate(numbers):
        assert batch["ids"][offsets[i] : offsets[i + 1]].tolist() == [number] * (1 + number % 4)
    return numbers


def reference_order(group_sizes: list[list[int]], seed: int | None, epoch: int, rank: int, world_size: int, buffer: int) -> list[int]:
    """The row numbers worker `rank` reads, by the module docstring of steps/reader.py."""
    units, start = [], 0
    for sizes in group_sizes:
        for size in sizes:
            units.append(list(range(start, start + size)))
            start += size
    if seed is not None:
        units = [units[i] for i in np.random.default_rng([seed, epoch]).permutation(len(units))]
    total = sum(map(len, units))
    low, high = total * rank // world_size, total * (rank + 1) // world_size
    runs, position = [], 0
    for unit in units:
        piece = unit[max(low - position, 0) : max(high - position, 0)]
        if piece:
            runs.append(piece)
        position += len(unit)
    if seed is None or buffer == 0:
        return [number for run in runs for number in run]
    rng = np.random.default_rng([seed, epoch, rank])
    held: list[int] = []
    out: list[int] = []
    for run in runs:
        held = held + run
        if len(held) > buffer:
            mixed = [held[i] for i in rng.permutation(len(held))]
            out += mixed[: len(held) - buffer]
            held = mixed[len(held) - buffer :]
    return out + [held[i] for i in rng.permutation(len(held))] if held else out


GROUPS = [[7, 13, 1], [20], [5, 5, 5, 9], [11, 2]]


@pytest.fixture(scope="module", params=["ngram", "block", "stream", NEW_KIND, LIST_KIND])
def numbered(request: pytest.FixtureRequest, tmp_path_factory: pytest.TempPathFactory) -> Iterator[tuple[str, Path]]:
    """A numbered build of each kind; the made-up kinds' names are added where
    steps.formats.KINDS is read (the manifest check), as adding them to KINDS would."""
    kind = request.param
    with pytest.MonkeyPatch.context() as patch:
        patch.setitem(reader.SHARD_FIELDS, "kind", (*KINDS, NEW_KIND, LIST_KIND))
        yield kind, write_numbered_build(tmp_path_factory.mktemp(f"numbered-{kind}"), kind, GROUPS)


@pytest.mark.parametrize(
    ("seed", "epoch", "world_size", "buffer", "batch_size"),
    [(None, 0, 1, 0, 4), (None, 0, 3, 0, 5), (3, 0, 1, 0, 4), (3, 1, 2, 10, 7), (11, 2, 3, 6, 1), (5, 0, 4, 1000, 16), (7, 3, 8, 1, 3)],
)
def test_every_worker_reads_the_rows_the_documented_order_gives(numbered, seed, epoch, world_size, buffer, batch_size) -> None:
    """Each worker's row numbers, batch after batch, equal the plain-Python reading order, for
    every kind, with and without a seed, a buffer, and several workers."""
    kind, path = numbered
    build = open_build(path)
    total = sum(map(sum, GROUPS))
    for rank in range(world_size):
        batches = list(build.batches("train", kind, batch_size, seed=seed, epoch=epoch, rank=rank, world_size=world_size, shuffle_buffer=buffer))
        got = [number for batch in batches for number in numbers_of(kind, batch)]
        assert got == reference_order(GROUPS, seed, epoch, rank, world_size, buffer), (rank, world_size)
        assert build.rows("train", kind, rank, world_size) == len(got) == (total * (rank + 1) // world_size - total * rank // world_size)
        sizes = [len(numbers_of(kind, batch)) for batch in batches]
        assert sizes == [batch_size] * (len(got) // batch_size) + ([len(got) % batch_size] if len(got) % batch_size else [])


def test_a_buffer_filled_exactly_to_its_capacity_waits_for_more_rows(tmp_path: Path) -> None:
    """ "More than shuffle_buffer rows" triggers a permutation: six row groups of 5 rows and a
    buffer of 10 reach exactly 10 rows without drawing from the generator (the reference order
    would differ after an extra draw)."""
    groups = [[5] * 6]
    build = open_build(write_numbered_build(tmp_path, "ngram", groups))
    got = [n for b in build.batches("train", "ngram", 4, seed=1, shuffle_buffer=10) for n in numbers_of("ngram", b)]
    assert got == reference_order(groups, 1, 0, 0, 1, 10)


def test_drop_last_leaves_out_only_the_short_last_batch(numbered) -> None:
    """78 rows in batches of 10: seven batches, the eight rows left over are not read."""
    kind, path = numbered
    build = open_build(path)
    kept = list(build.batches("train", kind, 10, seed=2, shuffle_buffer=5, drop_last=True))
    everything = [n for batch in build.batches("train", kind, 10, seed=2, shuffle_buffer=5) for n in numbers_of(kind, batch)]
    assert [len(numbers_of(kind, b)) for b in kept] == [10] * 7
    assert [n for batch in kept for n in numbers_of(kind, batch)] == everything[:70] and len(everything) == 78


def test_the_shuffle_buffer_order_changes_with_the_epoch_inside_one_row_group(tmp_path: Path) -> None:
    """One shard of one row group: permuting the units cannot change anything, so a new order in
    a new epoch can only come from the buffer's generator, which takes the epoch."""
    build = open_build(write_numbered_build(tmp_path, "ngram", [[60]]))

    def order(epoch: int, seed: int = 4) -> list[int]:
        return [n for b in build.batches("train", "ngram", 8, seed=seed, epoch=epoch, shuffle_buffer=20) for n in numbers_of("ngram", b)]

    assert order(0) != order(1) and order(1) != order(2)
    assert sorted(order(0)) == sorted(order(1)) == list(range(60))
    assert order(0, seed=4) != order(0, seed=5)


def test_workers_shuffle_their_rows_independently(tmp_path: Path) -> None:
    """Two workers over one row group of 60 rows: the buffer's generator takes the rank, so
    worker 1's order is not worker 0's order shifted by its 30 rows."""
    build = open_build(write_numbered_build(tmp_path, "ngram", [[60]]))
    first, second = (
        [n for b in build.batches("train", "ngram", 8, seed=4, rank=rank, world_size=2, shuffle_buffer=10) for n in numbers_of("ngram", b)] for rank in (0, 1)
    )
    assert sorted(first) == list(range(30)) and sorted(second) == list(range(30, 60))
    assert [n - 30 for n in second] != first


def test_tables_yield_each_touched_row_group_once_cut_to_the_workers_range(tmp_path: Path) -> None:
    """Build.tables without a seed: one table per row group the range touches, in manifest
        order, the first and last cut at the range's ends: worker 1 of 3 reads rows 26..51 of the
    78, from the groups holding rows 21..40, 41..45, 46..50 and 51..55."""
    build = open_build(write_numbered_build(tmp_path, "ngram", GROUPS))
    tables = list(build.tables("train", "ngram", rank=1, world_size=3))
    assert [t["target"].to_pylist() for t in tables] == [list(range(26, 41)), list(range(41, 46)), list(range(46, 51)), [51]]
    assert [t.num_rows for t in build.tables("train", "ngram")] == [size for sizes in GROUPS for size in sizes]


@pytest.mark.parametrize("dtype", [np.int64, np.int32, np.uint32])
def test_a_requested_dtype_casts_every_id_array_and_nothing_else(numbered, dtype) -> None:
    """PyTorch wants int64 ids: every id array comes in the asked type, offsets stay int64, and
    the values are those of the uncast batch."""
    kind, path = numbered
    build = open_build(path)
    plain = next(build.batches("train", kind, 9))
    cast = next(build.batches("train", kind, 9, dtype=dtype))
    for name, value in cast.items():
        if name == "offsets":
            assert value.dtype == np.int64
        elif name != "doc_id":
            assert value.dtype == dtype and value.tolist() == plain[name].tolist()
    assert {v.dtype for k, v in plain.items() if k not in ("offsets", "doc_id")} == {np.dtype(np.uint32)}


def test_bad_batch_sizes_and_buffers_are_refused(tmp_path: Path) -> None:
    """A batch needs at least one row and a buffer cannot be negative; a batch of one row works."""
    build = open_build(write_numbered_build(tmp_path, "ngram", [[3]]))
    with pytest.raises(ValueError, match="batch_size must be >= 1"):
        next(build.batches("train", "ngram", 0))
    with pytest.raises(ValueError, match="shuffle_buffer >= 0, got 4 and -1"):
        next(build.batches("train", "ngram", 4, shuffle_buffer=-1))
    assert [numbers_of("ngram", b) for b in build.batches("train", "ngram", 1)] == [[0], [1], [2]]
    for rank, world_size in ((-1, 2), (0, 0), (3, 3)):
        with pytest.raises(ValueError, match=f"rank={rank}, world_size={world_size}"):
            build.rows("train", "ngram", rank, world_size)


def test_the_default_shuffle_buffer_holds_65536_rows(tmp_path: Path) -> None:
    """README: `shuffle_buffer=65536` rows by default; 70,000 rows in two row groups read with a
    seed and no buffer argument follow the reference order for that size."""
    groups = [[40_000, 30_000]]
    build = open_build(write_numbered_build(tmp_path, "ngram", groups))
    got = [n for b in build.batches("train", "ngram", 10_000, seed=6) for n in b["target"].tolist()]
    assert got == reference_order(groups, 6, 0, 0, 1, 65_536)


def test_more_workers_than_rows_leaves_some_workers_without_rows(tmp_path: Path) -> None:
    """Three rows over five workers: ranges of 0 or 1 rows; a worker without rows yields no
    batch, shuffled or not, and no error."""
    build = open_build(write_numbered_build(tmp_path, "ngram", [[3]]))
    for seed in (None, 8):
        read = [[n for b in build.batches("train", "ngram", 2, seed=seed, rank=r, world_size=5) for n in numbers_of("ngram", b)] for r in range(5)]
        assert read == [[], [0], [], [1], [2]]
        assert [build.rows("train", "ngram", r, 5) for r in range(5)] == [0, 1, 0, 1, 1]


def test_the_short_last_batch_is_cast_like_the_others(numbered) -> None:
    """dtype applies to every batch, the last, shorter one included (78 rows in batches of 20)."""
    kind, path = numbered
    batches = list(open_build(path).batches("train", kind, 20, seed=1, shuffle_buffer=7, dtype=np.int64))
    assert [len(numbers_of(kind, b)) for b in batches] == [20, 20, 20, 18]
    assert {v.dtype for b in batches for k, v in b.items() if k != "doc_id"} == {np.dtype(np.int64)}


def test_tables_default_to_epoch_zero(tmp_path: Path) -> None:
    """Build.tables(seed=s) is the order of epoch 0, as batches' is."""
    build = open_build(write_numbered_build(tmp_path, "ngram", GROUPS))

    def order(**options: int) -> list[int]:
        return [n for t in build.tables("train", "ngram", seed=3, **options) for n in t["target"].to_pylist()]

    assert order() == order(epoch=0) != order(epoch=1)
    assert order() == reference_order(GROUPS, 3, 0, 0, 1, 0)


def test_a_range_starting_at_a_row_group_boundary_reads_no_group_before_it(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    """Worker 5 of 6 reads rows 65..77, which start exactly where a row group starts: it gets
    that group and the next, decodes no other group, and opens each shard file once."""
    build = open_build(write_numbered_build(tmp_path, "ngram", GROUPS))
    opened, decoded = [], []
    original_init, original_read = pq.ParquetFile.__init__, pq.ParquetFile.read_row_group
    monkeypatch.setattr(pq.ParquetFile, "__init__", lambda self, source, *a, **k: opened.append(Path(source).name) or original_init(self, source, *a, **k))
    monkeypatch.setattr(pq.ParquetFile, "read_row_group", lambda self, i, *a, **k: decoded.append(i) or original_read(self, i, *a, **k))
    tables = list(build.tables("train", "ngram", rank=5, world_size=6))
    assert [t["target"].to_pylist() for t in tables] == [list(range(65, 76)), [76, 77]]
    assert opened == ["ngram-0003.parquet"] and decoded == [0, 1]
    opened.clear()
    assert sum(t.num_rows for t in build.tables("train", "ngram")) == 78
    assert opened == [f"ngram-{index:04d}.parquet" for index in range(4)]


def test_unshuffled_batches_inside_one_row_group_are_views_of_the_arrow_buffers(tmp_path: Path) -> None:
    """The module docstring: without a cast or shuffle, a batch that lies inside one row group is
    a read-only view (no copy); one that straddles two groups is a copy. Groups of 10 rows in
    batches of 5: every batch is a view; batches of 4 straddle at rows 8..11."""
    build = open_build(write_numbered_build(tmp_path, "ngram", [[10, 10]]))
    fives = list(build.batches("train", "ngram", 5))
    assert [b["target"].tolist()[0] for b in fives] == [0, 5, 10, 15]
    assert not any(b["context"].flags.owndata or b["target"].flags.owndata for b in fives)
    fours = list(build.batches("train", "ngram", 4))
    assert [b["target"].flags.owndata for b in fours] == [False, False, True, False, False]


def test_to_numpy_reads_every_chunk_of_a_table(numbered) -> None:
    """A table read whole or concatenated has several chunks per column; to_numpy takes them all."""
    kind, path = numbered
    table = pq.read_table(path / "shards" / "train" / f"{kind}-0000.parquet")
    joined = pa.concat_tables([table.slice(0, 5), table.slice(5, 3), table.slice(8)])
    assert joined.column(0).num_chunks > 1
    assert numbers_of(kind, to_numpy(kind, joined)) == list(range(21))


def test_a_kind_new_to_the_reader_is_read_by_its_columns(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    """Adding a kind needs no reader code: a made-up kind with fixed_size_list columns of widths 2
    and 3 around an integer column reads as [B, 2], [B] and [B, 3] arrays in the shards' type, in
    the schema's column order, views of Arrow's buffers (addresses compared) inside one row
    group (the module docstring). The order, worker and dtype tests above run on it too (the `numbered` fixture)."""
    monkeypatch.setitem(reader.SHARD_FIELDS, "kind", (*KINDS, NEW_KIND))
    build = open_build(write_numbered_build(tmp_path, NEW_KIND, [[10, 10]]))
    batches = list(build.batches("train", NEW_KIND, 5))
    assert [list(batch) for batch in batches] == [["before", "center", "after"]] * 4
    assert [(b["before"].shape, b["center"].shape, b["after"].shape) for b in batches] == [((5, 2), (5,), (5, 3))] * 4
    assert {value.dtype for batch in batches for value in batch.values()} == {np.dtype(np.uint32)}
    assert [n for batch in batches for n in numbers_of(NEW_KIND, batch)] == list(range(20))
    assert not any(value.flags.owndata for batch in batches for value in batch.values())
    table = numbered_table(NEW_KIND, np.arange(20, dtype=np.uint32)).slice(5, 10)
    for name, value in to_numpy(NEW_KIND, table).items():
        column = table.column(name).chunk(0)
        values = column.flatten() if pa.types.is_fixed_size_list(column.type) else column
        assert value.__array_interface__["data"][0] == values.buffers()[1].address + values.offset * 4, name


def test_a_column_the_reader_cannot_read_is_named_with_its_kind(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    """The reader reads fixed-size lists, integers, strings and one variable-length list per
    kind; any other column (a float column in a build's shard, a second variable-length list)
    is refused by name rather than read wrongly."""
    monkeypatch.setitem(reader.SHARD_FIELDS, "kind", (*KINDS, NEW_KIND))
    build = write_numbered_build(tmp_path, NEW_KIND, [[3]])
    path = build / "shards" / "train" / f"{NEW_KIND}-0000.parquet"
    pq.write_table(pq.read_table(path).append_column("weight", pa.array([0.5, 1.5, 2.5])), path)
    with pytest.raises(BuildError, match=f"^{NEW_KIND} shards: column 'weight' is double; the reader reads fixed-size lists"):
        next(open_build(build).batches("train", NEW_KIND, 2))
    lists = pa.array([[1, 2], [3]], pa.list_(pa.uint32()))
    with pytest.raises(BuildError, match=f"^{LIST_KIND} shards: column 'more' is list<item: uint32>; "):
        to_numpy(LIST_KIND, pa.table({"ids": lists, "more": lists}))
