"""Reader: a finished build folder as numpy batches for a training loop (numpy + pyarrow only).

    from .reader import open_build

    build = open_build("build")                  # checks the manifest, raises BuildError
    build.splits                                 # ("dev", "test", "train")
    build.kinds("train")                         # ("block", "ngram", "stream")
    build.rows("train", "ngram")                 # rows of the split (or of one worker)
    build.info("train", "ngram")                 # the shards' `corpusmill` metadata: n, reserved, …
    build.vocabulary.tokens[id], .counts, .kinds, .size
    for batch in build.batches("train", "ngram", 512, seed=1, epoch=0, rank=0, world_size=1):
        batch["context"], batch["target"]        # [B, n-1], [B]

Batches are dicts of numpy arrays, one per kind:
  ngram   context [B, n-1], target [B]
  block   ids [B, L+1]                 (inputs ids[:, :-1], targets ids[:, 1:])
  stream  ids [sum of lengths], offsets [B+1] int64, doc_id list[str]
          (document i is ids[offsets[i]:offsets[i+1]])
These follow from each shard's Arrow schema (steps.formats.shard_schema), so a new kind needs
no reader code: a fixed_size_list column is [B, width], an integer column [B], a string column
list[str], and the one variable-length list column a kind may have its values with `offsets`.
Id arrays (every integer column; offsets are not ids) keep the shards' integer type (uint16 or
uint32) unless `dtype` asks for another (PyTorch embeddings want np.int64). Without a cast and
without row shuffling, a batch that lies inside one Parquet row group is a read-only view of
Arrow's buffers (fixed_size_list values reshaped, no copy); a batch straddling two row groups,
a cast or a shuffle copies.

Order, shuffling and data-parallel workers (all deterministic):
  1. Units are the row groups of the split's shards of one kind, in manifest order
     (shard by shard, row group by row group). With `seed` set, the units are permuted by
     numpy's default_rng([seed, epoch]), so shard order and row-group order change per epoch.
  2. The units' rows, laid end to end in that order, are numbered 0..N-1. Worker `rank` of
     `world_size` takes the contiguous range [floor(rank*N/W), floor((rank+1)*N/W)). Ranges are
     disjoint, cover all N rows, differ in size by at most one row, and each worker decodes only
     the row groups its range touches. Every worker computes the same permutation, so no
     coordination is needed beyond passing the same seed and epoch.
  3. With `seed` set and `shuffle_buffer` > 0, a worker's rows pass through a bounded buffer:
     after each row group is appended, if the buffer holds more than `shuffle_buffer` rows it
     is permuted (default_rng([seed, epoch, rank])) and all but `shuffle_buffer` rows are
     emitted; the rest are permuted and emitted at the end. Memory is bounded by the buffer
     plus one row group.
  Same seed, epoch, rank and world_size → the same batches; another epoch → another order.
  `seed=None` reads in manifest order without any shuffling (dev/test evaluation).

Checks done by `open_build` (each failure raises BuildError naming the file and the fix):
manifest.json is valid UTF-8 JSON with the fields the reader reads, of the right types (the
message names the key path); every file it names resolves, symlinks followed, inside the build
folder, is listed once, and is a regular file (never a FIFO or device; manifest.json at most
256 MiB, vocabulary.tsv at most 1 GiB); every listed shard exists, its Parquet footer has the
recorded row count, which its row groups add up to, its `corpusmill` metadata names the same
split and kind, and its ids_sha256 equals the digest of vocabulary.tsv's ids (formats.ids_digest),
which must equal the manifest's, as the file's SHA-256 must. `verify_hashes=True` also hashes every shard file against the manifest (reads
every byte; off by default). While reading, a row group that decodes to another number of rows
than its footer says raises BuildError.
"""

from __future__ import annotations

import hashlib
import json
import os
import stat
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path, PurePosixPath

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq

from .formats import KINDS, FormatError, Vocabulary, read_vocabulary
from .layout import RELATIVE

MANIFEST = RELATIVE.manifest
VOCABULARY = RELATIVE.vocabulary
REBUILD = "rerun the workflow (snakemake) on this build folder to rewrite it"
# Far above any real build's (a manifest line per shard; a vocabulary line per id), far below
# what would exhaust memory when read whole.
MAX_MANIFEST_BYTES = 256 << 20
MAX_VOCABULARY_BYTES = 1 << 30
LARGEST_COUNT = 2**63 - 1  # Parquet's row counts are int64

# The manifest fields the reader reads, with their types (see structure_problem).
SHARD_FIELDS = {"file": str, "kind": KINDS, "chunk": str, "rows": int, "sha256": str}
READER_FIELDS = {"vocabulary": {"sha256": str, "ids_sha256": str}, "splits": {"*": {"shards": [SHARD_FIELDS]}}}

Batch = dict[str, "np.ndarray | list[str]"]


class BuildError(ValueError):
    """A build folder that does not match its manifest; the message names the file and the fix."""


@dataclass(frozen=True)
class Shard:
    """One shard file as recorded in the manifest, with the row counts of its row groups."""

    path: Path
    split: str
    kind: str
    chunk: str
    rows: int
    sha256: str
    group_rows: tuple[int, ...]
    info: dict


def key_path(where: str, key: str | int) -> str:
    """`where` extended by one key, as `a.b[3]`, or `a["stats/x.json"]` for keys that are not identifiers."""
    if isinstance(key, int):
        return f"{where}[{key}]"
    if key.isidentifier():
        return f"{where}.{key}" if where else key
    return f"{where}[{json.dumps(key[:80])}]"


def _found(value: object) -> str:
    if isinstance(value, bool) or value is None:
        return json.dumps(value)
    if isinstance(value, (int, float)):
        return f"the number {str(value)[:24]}"
    names: dict[object, str] = {dict: "an object", list: "an array", str: "a string"}
    return names[type(value)]


def _expected(spec: object) -> str:
    if isinstance(spec, tuple):
        return "one of " + ", ".join(map(json.dumps, spec))
    if isinstance(spec, (dict, list)):
        return "an object" if isinstance(spec, dict) else "an array"
    names: dict[object, str] = {str: "a string", int: "a whole number from 0 to 2^63-1", bool: "true or false"}
    return names[spec]


def structure_problem(value: object, spec: object, where: str = "") -> str | None:
    """Where parsed JSON first departs from `spec`, as 'key.path: expected …, found …'; None if it fits.

    A spec is a dict of required keys ('*' stands for every key of the object), a one-item list
    (an array of that), a tuple of allowed strings, or str, int (0..2^63-1) or bool. Recursion
    follows the spec, never deeper, so any nesting of the value is safe.
    """
    if isinstance(spec, dict) and isinstance(value, dict):
        for key, inner in spec.items():
            if key != "*" and key not in value:
                return f"{key_path(where, key)}: missing"
            for name in value if key == "*" else [key]:
                if problem := structure_problem(value[name], inner, key_path(where, name)):
                    return problem
        return None
    if isinstance(spec, list) and isinstance(value, list):
        for index, item in enumerate(value):
            if problem := structure_problem(item, spec[0], key_path(where, index)):
                return problem
        return None
    if isinstance(spec, tuple):
        fits = isinstance(value, str) and value in spec
    elif spec is int:
        fits = type(value) is int and 0 <= value <= LARGEST_COUNT
    else:
        fits = spec in (str, bool) and type(value) is spec
    return None if fits else f"{where or 'top level'}: expected {_expected(spec)}, found {_found(value)}"


def parse_manifest(data: bytes, fields: dict) -> tuple[dict, str | None]:
    """manifest.json's bytes parsed and checked against `fields`: (manifest, None), or ({}, what is wrong)."""
    try:
        manifest = json.loads(data.decode("utf-8"))
    except UnicodeDecodeError as error:
        return {}, f"byte {error.start}: not UTF-8"
    except json.JSONDecodeError as error:
        return {}, f"line {error.lineno} column {error.colno}: not valid JSON ({error.msg})"
    except RecursionError:
        return {}, "not valid JSON for this reader: arrays or objects nested too deeply"
    except ValueError as error:  # an integer of more than 4300 digits
        return {}, f"not valid JSON ({str(error).split(':')[0]})"
    problem = structure_problem(manifest, fields)
    return (manifest, None) if problem is None else ({}, problem)


def _realpath(real_root: str, name: str, folders: dict[str, str]) -> str:
    """os.path.realpath(real_root/name), resolving each parent folder once (shards share a few)."""
    folder, _, base = name.rpartition("/")
    if folder not in folders:
        folders[folder] = os.path.realpath(os.path.join(real_root, folder))
    path = os.path.join(folders[folder], base)
    return os.path.realpath(path) if base in ("", ".", "..") or os.path.islink(path) else path


def resolve_inside(real_root: Path, name: str, folders: dict[str, str] | None = None) -> tuple[Path, str | None]:
    """A manifest's file name resolved (symlinks followed) under the resolved build folder, and
    why it may not be read, if so: a build is self-contained, so nothing outside it is opened.
    Pass one `folders` dict to the calls for one build to resolve each folder once."""
    if PurePosixPath(name).is_absolute():
        return Path(name), "is an absolute path; a manifest names files relative to its build folder"
    root = str(real_root)
    try:
        target = _realpath(root, name, {} if folders is None else folders)
    except (OSError, ValueError) as error:
        return real_root / name, f"cannot be resolved to a file ({error})"
    if not target.startswith(root.rstrip("/") + "/"):
        shown = target if target.isprintable() else json.dumps(target)
        return Path(target), f"leads outside the build folder (to {shown})"
    return Path(target), None


def _file_type(mode: int) -> str:
    tests = {"FIFO": stat.S_ISFIFO, "character device": stat.S_ISCHR, "block device": stat.S_ISBLK, "directory": stat.S_ISDIR}
    return next((name for name, test in tests.items() if test(mode)), "socket or other special file")


def file_problem(path: Path, limit: int | None = None) -> str | None:
    """Why `path` may not be read, if so: missing, not a regular file (opening a FIFO blocks,
    /dev/zero never ends), or over `limit` bytes. Checked with os.stat, before any open."""
    try:
        status = os.stat(path)
    except FileNotFoundError:
        return "missing"
    except (OSError, ValueError) as error:
        return f"cannot be examined ({error})"
    if not stat.S_ISREG(status.st_mode):
        return f"not a regular file (a {_file_type(status.st_mode)})"
    if limit is not None and status.st_size > limit:
        size = f"{limit >> 30} GiB" if limit % (1 << 30) == 0 else f"{limit >> 20} MiB"
        return f"over the {size} size limit ({status.st_size:,} bytes)"
    return None


def _sha256(path: Path) -> str:
    hasher = hashlib.sha256()
    with open(path, "rb") as handle:
        while block := handle.read(1 << 22):
            hasher.update(block)
    return hasher.hexdigest()


def _read_vocabulary(path: Path) -> Vocabulary:
    try:
        return read_vocabulary(path)
    except (FormatError, UnicodeDecodeError) as error:
        raise BuildError(f"{error}; {REBUILD}") from None


def _shard(root: Path, entry: dict, split: str, ids_sha256: str, verify_hash: bool) -> Shard:
    """Check one manifest entry against its file's footer and metadata."""
    path = root / entry["file"]
    if problem := file_problem(path):
        raise BuildError(f"{path}: listed in {root / MANIFEST} but {problem}; {REBUILD}")
    try:
        metadata = pq.read_metadata(path)
    except (OSError, pa.ArrowException) as error:
        raise BuildError(f"{path}: not a readable Parquet file ({error}); {REBUILD}") from error
    if metadata.num_rows != entry["rows"]:
        raise BuildError(f"{path}: holds {metadata.num_rows} rows but {root / MANIFEST} records {entry['rows']}; {REBUILD}")
    groups = tuple(metadata.row_group(i).num_rows for i in range(metadata.num_row_groups))
    if sum(groups) != metadata.num_rows:
        raise BuildError(
            f"{path}: its footer says {metadata.num_rows} rows, but its row groups add up to {sum(groups)}; "
            f"the file was altered after it was written; {REBUILD}"
        )
    raw = (metadata.metadata or {}).get(b"corpusmill")
    if raw is None:
        raise BuildError(f"{path}: no 'corpusmill' key-value metadata; not written by this workflow; {REBUILD}")
    try:
        info = json.loads(raw)
    except (ValueError, RecursionError):
        info = None
    if not isinstance(info, dict):
        raise BuildError(f"{path}: its 'corpusmill' metadata is not a JSON object; not written by this workflow; {REBUILD}")
    if (info.get("split"), info.get("kind")) != (split, entry["kind"]):
        raise BuildError(
            f"{path}: metadata says split={info.get('split')!r} kind={info.get('kind')!r}, "
            f"{root / MANIFEST} says split={split!r} kind={entry['kind']!r}; {REBUILD}"
        )
    if info.get("ids_sha256") != ids_sha256:
        raise BuildError(
            f"{path}: written with the ids {str(info.get('ids_sha256'))[:12]}…, but {root / VOCABULARY} holds the ids "
            f"{ids_sha256[:12]}…; its ids mean other tokens; {REBUILD}"
        )
    if verify_hash and _sha256(path) != entry["sha256"]:
        raise BuildError(f"{path}: SHA-256 differs from {root / MANIFEST}; the file was changed after the build; {REBUILD}")
    return Shard(path, split, entry["kind"], entry["chunk"], int(entry["rows"]), entry["sha256"], groups, info)


def _worker_range(total: int, rank: int, world_size: int) -> tuple[int, int]:
    """Rows [lo, hi) of worker `rank`: contiguous, disjoint, covering, sizes within one row."""
    return total * rank // world_size, total * (rank + 1) // world_size


def _single(column: pa.ChunkedArray) -> pa.Array:
    """One contiguous Arrow array; copies only when the column has several chunks."""
    return column.chunk(0) if column.num_chunks == 1 else column.combine_chunks()


def _numpy(array: pa.Array) -> np.ndarray:
    """A primitive Arrow array as numpy; zero-copy when it has no nulls (shards never do)."""
    return array.to_numpy(zero_copy_only=False)


@dataclass(frozen=True)
class _Lists:
    """A variable-length list column (a stream's ids): its values, and offsets [R+1] into them,
    not necessarily starting at 0, so slicing rows never copies the values."""

    name: str
    values: np.ndarray
    offsets: np.ndarray

    def slice(self, start: int, stop: int) -> _Lists:
        return _Lists(self.name, self.values, self.offsets[start : stop + 1])

    def compact(self) -> tuple[np.ndarray, np.ndarray]:
        """(the values of these rows only, offsets starting at 0)."""
        return self.values[self.offsets[0] : self.offsets[-1]], self.offsets - self.offsets[0]

    def take(self, order: np.ndarray) -> _Lists:
        """The rows' lists in the given order (a copy)."""
        starts = self.offsets[:-1][order]
        lengths = self.offsets[1:][order] - starts
        placed = np.concatenate([[0], np.cumsum(lengths)]).astype(np.int64)
        gather = np.repeat(starts - placed[:-1], lengths) + np.arange(placed[-1], dtype=np.int64)
        return _Lists(self.name, np.take(self.values, gather), placed)

    @staticmethod
    def concat(parts: list[_Lists]) -> _Lists:
        """The parts' lists one after another (a copy)."""
        pieces = [part.compact() for part in parts]
        bases = np.cumsum([0] + [len(values) for values, _ in pieces[:-1]])
        offsets = np.concatenate([[0]] + [local[1:] + base for (_, local), base in zip(pieces, bases)]).astype(np.int64)
        return _Lists(parts[0].name, np.concatenate([values for values, _ in pieces]), offsets)


class _Rows:
    """A run of rows of one kind as numpy arrays, so batching and shuffling are numpy slicing.

    Read by the table's own Arrow schema, so a kind needs no code here: `columns` holds each
    column with one value per row, rows on the first axis (fixed-size list [R, width], integer
    [R], string an object array of str); a variable-length list column, at most one per kind
    (a stream's ids), is `lists`.
    """

    def __init__(self, columns: dict[str, np.ndarray], lists: _Lists | None = None) -> None:
        self.columns = columns
        self.lists = lists

    @classmethod
    def from_table(cls, kind: str, table: pa.Table) -> _Rows:
        columns: dict[str, np.ndarray] = {}
        lists: _Lists | None = None
        for field, column in zip(table.schema, table.columns):
            array = _single(column)
            if pa.types.is_fixed_size_list(field.type):
                columns[field.name] = _numpy(array.flatten()).reshape(-1, field.type.list_size)
            elif pa.types.is_integer(field.type):
                columns[field.name] = _numpy(array)
            elif pa.types.is_string(field.type):
                columns[field.name] = array.to_numpy(zero_copy_only=False)
            elif pa.types.is_list(field.type) and lists is None:
                lists = _Lists(field.name, _numpy(array.values), _numpy(array.offsets).astype(np.int64))
            else:
                raise BuildError(
                    f"{kind} shards: column {field.name!r} is {field.type}; the reader reads fixed-size lists, integers, strings "
                    f"and one variable-length list per kind (steps.formats.shard_schema); {REBUILD}"
                )
        return cls(columns, lists)

    def __len__(self) -> int:
        return len(self.lists.offsets) - 1 if self.lists is not None else len(next(iter(self.columns.values())))

    def slice(self, start: int, stop: int) -> _Rows:
        lists = None if self.lists is None else self.lists.slice(start, stop)
        return _Rows({name: value[start:stop] for name, value in self.columns.items()}, lists)

    def take(self, order: np.ndarray) -> _Rows:
        """The rows in the given order (a copy; np.take is several times faster than fancy indexing here)."""
        columns = {name: np.take(value, order, axis=0) for name, value in self.columns.items()}
        return _Rows(columns, None if self.lists is None else self.lists.take(order))

    @staticmethod
    def concat(parts: list[_Rows]) -> _Rows:
        """The parts' rows one after another (a copy)."""
        if len(parts) == 1:
            return parts[0]
        columns = {name: np.concatenate([part.columns[name] for part in parts]) for name in parts[0].columns}
        lists = [part.lists for part in parts if part.lists is not None]
        return _Rows(columns, _Lists.concat(lists) if lists else None)

    def batch(self, dtype: np.dtype | None) -> Batch:
        """The public batch dict: lists as values and offsets first, then the columns, strings as
        list[str]; integer arrays but the offsets cast to `dtype` when given (a copy)."""

        def cast(ids: np.ndarray) -> np.ndarray:
            return ids if dtype is None or ids.dtype == dtype else ids.astype(dtype)

        batch: Batch = {}
        if self.lists is not None:
            values, offsets = self.lists.compact()
            batch = {self.lists.name: cast(values), "offsets": offsets}
        for name, value in self.columns.items():
            batch[name] = value.tolist() if value.dtype == object else cast(value)
        return batch


def to_numpy(kind: str, table: pa.Table, dtype: np.dtype | None = None) -> Batch:
    """Numpy arrays of one batch of rows of a shard table (see the module docstring)."""
    return _Rows.from_table(kind, table).batch(None if dtype is None else np.dtype(dtype))


class _Batcher:
    """Cuts a stream of row runs into runs of exactly `size` rows (the last may be short)."""

    def __init__(self, size: int) -> None:
        self.size = size
        self.pending: list[_Rows] = []
        self.count = 0

    def push(self, rows: _Rows) -> Iterator[_Rows]:
        start, total = 0, len(rows)
        if self.pending:
            head = rows.slice(0, min(total, self.size - self.count))
            self.pending.append(head)
            self.count += len(head)
            start = len(head)
            if self.count < self.size:
                return
            yield _Rows.concat(self.pending)
            self.pending, self.count = [], 0
        while total - start >= self.size:
            yield rows.slice(start, start + self.size)
            start += self.size
        if start < total:
            self.pending, self.count = [rows.slice(start, total)], total - start

    def finish(self) -> Iterator[_Rows]:
        if self.pending:
            yield _Rows.concat(self.pending)
            self.pending, self.count = [], 0


class Build:
    """A checked build folder; use `open_build` to make one."""

    def __init__(self, root: Path, manifest: dict, vocabulary: Vocabulary, shards: list[Shard]) -> None:
        self.root = root
        self.manifest = manifest
        self.vocabulary = vocabulary
        self._shards = shards

    @property
    def splits(self) -> tuple[str, ...]:
        """Splits with at least one shard, in manifest order (the manifest sorts them by name)."""
        return tuple(dict.fromkeys(shard.split for shard in self._shards))

    def kinds(self, split: str) -> tuple[str, ...]:
        """Kinds (ngram, block, stream) that the split has shards of, sorted."""
        return tuple(sorted({shard.kind for shard in self._shards if shard.split == split}))

    def shards(self, split: str, kind: str) -> list[Shard]:
        """The checked shard files of one split and kind, in manifest order."""
        chosen = [shard for shard in self._shards if shard.split == split and shard.kind == kind]
        if not chosen:
            available = ", ".join(f"{s}/{k}" for s in self.splits for k in self.kinds(s))
            raise BuildError(f"{self.root / MANIFEST}: no {split}/{kind} shards; available: {available or 'none'}")
        return chosen

    def info(self, split: str, kind: str) -> dict:
        """The shards' `corpusmill` metadata (n or length, reserved ids, vocabulary size), minus the chunk."""
        info = dict(self.shards(split, kind)[0].info)
        info.pop("chunk", None)
        return info

    def rows(self, split: str, kind: str, rank: int = 0, world_size: int = 1) -> int:
        """Rows that worker `rank` of `world_size` reads per epoch (the whole split by default)."""
        _check_worker(rank, world_size)
        lo, hi = _worker_range(sum(shard.rows for shard in self.shards(split, kind)), rank, world_size)
        return hi - lo

    def _units(self, split: str, kind: str, seed: int | None, epoch: int) -> list[tuple[Shard, int, int]]:
        """(shard, row group, rows) in reading order: manifest order, or permuted by (seed, epoch)."""
        units = [(shard, group, rows) for shard in self.shards(split, kind) for group, rows in enumerate(shard.group_rows)]
        if seed is None:
            return units
        order = np.random.default_rng([seed, epoch]).permutation(len(units))
        return [units[i] for i in order]

    def tables(self, split: str, kind: str, *, seed: int | None = None, epoch: int = 0, rank: int = 0, world_size: int = 1) -> Iterator[pa.Table]:
        """Worker `rank`'s slice of the split as Arrow tables, one per row group touched, unshuffled rows."""
        _check_worker(rank, world_size)
        units = self._units(split, kind, seed, epoch)
        lo, hi = _worker_range(sum(rows for _, _, rows in units), rank, world_size)
        start = 0
        opened: tuple[Path, pq.ParquetFile] | None = None
        for shard, group, rows in units:
            first, last = max(lo, start), min(hi, start + rows)
            if first < last:
                if opened is None or opened[0] != shard.path:
                    opened = (shard.path, pq.ParquetFile(shard.path))
                table = opened[1].read_row_group(group)
                if table.num_rows != rows:
                    raise BuildError(
                        f"{shard.path}: row group {group} decodes to {table.num_rows} rows, but the file's footer says "
                        f"{rows}; the file was altered after it was written; {REBUILD}"
                    )
                yield table.slice(first - start, last - first)
            start += rows
            if start >= hi:
                break

    def batches(
        self,
        split: str,
        kind: str,
        batch_size: int,
        *,
        seed: int | None = None,
        epoch: int = 0,
        rank: int = 0,
        world_size: int = 1,
        shuffle_buffer: int = 65536,
        drop_last: bool = False,
        dtype: np.dtype | type | None = None,
    ) -> Iterator[Batch]:
        """Numpy batches of worker `rank`'s rows; see the module docstring for order and sharding."""
        if batch_size < 1 or shuffle_buffer < 0:
            raise ValueError(f"batch_size must be >= 1 and shuffle_buffer >= 0, got {batch_size} and {shuffle_buffer}")
        cast = None if dtype is None else np.dtype(dtype)
        batcher = _Batcher(batch_size)
        for rows in self._shuffled(split, kind, seed, epoch, rank, world_size, shuffle_buffer):
            for batch in batcher.push(rows):
                yield batch.batch(cast)
        if not drop_last:
            for batch in batcher.finish():
                yield batch.batch(cast)

    def _shuffled(self, split: str, kind: str, seed: int | None, epoch: int, rank: int, world_size: int, capacity: int) -> Iterator[_Rows]:
        """The worker's rows, row group by row group, through the bounded shuffle buffer (none without a seed)."""
        tables = self.tables(split, kind, seed=seed, epoch=epoch, rank=rank, world_size=world_size)
        runs = (_Rows.from_table(kind, table) for table in tables)
        if seed is None or capacity == 0:
            yield from runs
            return
        rng = np.random.default_rng([seed, epoch, rank])
        buffer: _Rows | None = None
        for run in runs:
            buffer = run if buffer is None else _Rows.concat([buffer, run])
            if len(buffer) > capacity:
                mixed = buffer.take(rng.permutation(len(buffer)))
                cut = len(buffer) - capacity
                yield mixed.slice(0, cut)
                buffer = mixed.slice(cut, len(mixed))
        if buffer is not None and len(buffer):
            yield buffer.take(rng.permutation(len(buffer)))


def _check_worker(rank: int, world_size: int) -> None:
    if world_size < 1 or not 0 <= rank < world_size:
        raise ValueError(f"need 0 <= rank < world_size, got rank={rank}, world_size={world_size}")


def open_build(path: str | Path, *, verify_hashes: bool = False) -> Build:
    """Open a build folder (the one holding manifest.json, or its parent) and check it."""
    root = Path(path)
    if not (root / MANIFEST).is_file() and (root / "build" / MANIFEST).is_file():
        root = root / "build"
    manifest_path, real_root = root / MANIFEST, root.resolve()
    target, problem = resolve_inside(real_root, MANIFEST)
    if (problem := problem or file_problem(target, MAX_MANIFEST_BYTES)) == "missing":
        raise BuildError(
            f"{manifest_path}: missing; {root} is not a finished build folder: run the workflow (snakemake) to build it, or give the path of a finished build"
        )
    if problem is None:
        manifest, problem = parse_manifest(target.read_bytes(), READER_FIELDS)
    if problem:
        raise BuildError(f"{manifest_path}: {problem}; {REBUILD}")
    vocabulary_path = root / VOCABULARY
    target, problem = resolve_inside(real_root, VOCABULARY)
    if problem := problem or file_problem(target, MAX_VOCABULARY_BYTES):
        raise BuildError(f"{vocabulary_path}: {problem}; {REBUILD}")
    vocabulary_sha256 = _sha256(vocabulary_path)
    recorded = manifest["vocabulary"]["sha256"]
    if vocabulary_sha256 != recorded:
        raise BuildError(
            f"{vocabulary_path}: sha256 {vocabulary_sha256} differs from {recorded} recorded in {manifest_path}; "
            f"the vocabulary was edited or replaced after the build; {REBUILD}"
        )
    vocabulary = _read_vocabulary(vocabulary_path)
    if vocabulary.ids_digest != manifest["vocabulary"]["ids_sha256"]:
        raise BuildError(f"{vocabulary_path}: its ids differ from those {manifest_path} records; {REBUILD}")
    shards: list[Shard] = []
    seen: dict[Path, str] = {}
    folders: dict[str, str] = {}
    for split, figures in manifest["splits"].items():
        for index, entry in enumerate(figures["shards"]):
            where = key_path(key_path(key_path("splits", split), "shards"), index) + ".file"
            target, problem = resolve_inside(real_root, entry["file"], folders)
            if problem:
                raise BuildError(f"{manifest_path}: {where} {json.dumps(entry['file'])} {problem}; {REBUILD}")
            if target in seen:
                raise BuildError(f"{manifest_path}: {where} names the same file as {seen[target]}; {REBUILD}")
            seen[target] = where
            shards.append(_shard(root, entry, split, vocabulary.ids_digest, verify_hashes))
    return Build(root, manifest, vocabulary, shards)
