"""`corpusmill audit BUILD`: check a finished build folder against its manifest.

Why: shards get copied between machines, truncated by full disks, or mixed with files of other
builds; training on them silently would waste a run. The audit recomputes what the manifest
promises: every shard's SHA-256 and row count, ids below the vocabulary size, window and block
widths, the vocabulary hash (file, manifest and every shard's `corpusmill` metadata), the
document accounting, the provenance tables' hashes (listed under `files`), and that shards/ and
provenance/ hold exactly the listed files. It reads each shard in
record batches, so memory stays bounded by the batch, not the shard; rows are counted as they
decode from the data pages, so a footer edited to promise other rows is caught.

A manifest is treated as hostile input: its structure is checked first (every field read, with
its type), and a file it names is read only if it resolves, symlinks followed, inside the build
folder, is listed once, and is a regular file (a FIFO would block, /dev/zero never ends) within
the reader's size limits. The checked fields include all the reader's, so a build that passes
opens in steps.reader.
"""

from __future__ import annotations

import argparse
import json
import sys
from dataclasses import dataclass, field
from pathlib import Path

import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq

from .formats import file_sha256, id_columns, kind_width, read_vocabulary
from .layout import RELATIVE
from .reader import MANIFEST, MAX_MANIFEST_BYTES, MAX_VOCABULARY_BYTES, SHARD_FIELDS, file_problem, key_path, parse_manifest, resolve_inside

BATCH_ROWS = 65_536
FIX_FILE = "restore it from an intact copy of the build, or delete it and rerun snakemake to rebuild it"
FIX_MANIFEST = "restore manifest.json from an intact copy of the build, or delete it and rerun snakemake to write it again"

# Every manifest field the audit reads, with its type (steps.reader.structure_problem).
MANIFEST_FIELDS = {
    "config": {"windows": {"ngram": {"n": int}, "blocks": {"length": int}}},
    "vocabulary": {"file": str, "sha256": str, "ids_sha256": str, "size": int},
    "splits": {"*": {"rows": {"*": int}, "shards": [SHARD_FIELDS]}},
    "files": {"*": str},
    "accounting": {"read": int, "pieces_added": int, "kept": int, "dropped": {"*": int}, "balanced": bool},
}


@dataclass
class Audit:
    """Problems found, each naming a file relative to the build folder."""

    problems: list[str] = field(default_factory=list)
    rows: int = 0
    shards: int = 0
    vocabulary_size: int = 0
    accounting: dict = field(default_factory=dict)

    def fail(self, file: str, problem: str) -> None:
        self.problems.append(f"{file}: {problem}")


def listed_file(real_root: Path, name: str, where: str, audit: Audit, limit: int | None = None) -> Path | None:
    """The file a manifest entry names, or None after recording why it may not be read."""
    target, problem = resolve_inside(real_root, name)
    if problem:
        audit.fail(MANIFEST, f"{where} {json.dumps(name)} {problem}; {FIX_MANIFEST}")
        return None
    if problem := file_problem(target, limit):
        audit.fail(name, f"listed in manifest.json but {problem}; {FIX_FILE}")
        return None
    return target


def _max_id(column: pa.Array) -> int | None:
    """Largest id in a flat or list column (vectorized), None when empty."""
    values = column
    while pa.types.is_list(values.type) or pa.types.is_fixed_size_list(values.type) or pa.types.is_large_list(values.type):
        values = values.flatten()
    largest = pc.max(values).as_py()
    return None if largest is None else int(largest)


def _corpusmill_metadata(raw: bytes) -> dict | None:
    """A shard's `corpusmill` key-value metadata as a dict, None when it is not a JSON object."""
    try:
        info = json.loads(raw)
    except (ValueError, RecursionError):
        return None
    return info if isinstance(info, dict) else None


def check_shard(path: Path, entry: dict, config: dict, ids_sha256: str, vocabulary_size: int, audit: Audit) -> None:
    """Hash, rows (footer and decoded), metadata, widths and id range of one listed shard file."""
    name = entry["file"]
    if file_sha256(path) != entry["sha256"]:
        audit.fail(name, f"SHA-256 differs from manifest.json ({entry['sha256'][:12]}…); the file was changed or damaged; {FIX_FILE}")
    try:
        parquet = pq.ParquetFile(path)
    except (pa.ArrowException, OSError) as error:
        audit.fail(name, f"not readable as Parquet ({error}); the file is damaged or truncated; {FIX_FILE}")
        return
    kind, footer = entry["kind"], parquet.metadata
    if footer.num_rows != entry["rows"]:
        audit.fail(name, f"holds {footer.num_rows} rows, manifest.json says {entry['rows']}; {FIX_FILE}")
    raw = (parquet.schema_arrow.metadata or {}).get(b"corpusmill")
    info = None if raw is None else _corpusmill_metadata(raw)
    if info is None:
        audit.fail(name, f"no 'corpusmill' key-value metadata holding a JSON object; not a corpusmill shard; {FIX_FILE}")
    elif info.get("ids_sha256") != ids_sha256:
        audit.fail(name, f"its metadata ids_sha256 differs from the ids of vocabulary.tsv; the shard belongs to another build; {FIX_FILE}")
    width = kind_width(kind, config["windows"])
    for column in id_columns(kind):
        if column not in parquet.schema_arrow.names:
            audit.fail(name, f"has no column {column!r} (a {kind} shard needs {', '.join(id_columns(kind))}); {FIX_FILE}")
            return
        kind_type = parquet.schema_arrow.field(column).type
        if width is not None and column != "target":
            actual = kind_type.list_size if pa.types.is_fixed_size_list(kind_type) else None
            if actual != width:
                audit.fail(name, f"column {column!r} is {kind_type}, expected fixed_size_list of width {width}; {FIX_FILE}")
    altered = "the file was altered after it was written"
    try:
        largest, decoded = -1, 0
        for group in range(footer.num_row_groups):
            rows = 0
            for batch in parquet.iter_batches(batch_size=BATCH_ROWS, row_groups=[group], columns=id_columns(kind)):
                rows += batch.num_rows
                for column in batch.columns:
                    value = _max_id(column)
                    if value is not None:
                        largest = max(largest, value)
            if rows != footer.row_group(group).num_rows:
                audit.fail(name, f"row group {group} holds {rows} rows in its data pages, but its footer says "
                           f"{footer.row_group(group).num_rows}; {altered}; {FIX_FILE}")  # fmt: skip
            decoded += rows
    except (pa.ArrowException, OSError) as error:
        audit.fail(name, f"its data cannot be read ({error}); the file is damaged or truncated; {FIX_FILE}")
        return
    if decoded != footer.num_rows:
        audit.fail(name, f"holds {decoded} rows in its data pages, but its footer says {footer.num_rows}; {altered}; {FIX_FILE}")
    if largest >= vocabulary_size:
        audit.fail(name, f"holds id {largest}, but the vocabulary has only {vocabulary_size} ids (0..{vocabulary_size - 1}); {FIX_FILE}")
    audit.rows += decoded
    audit.shards += 1


def check_vocabulary(real_root: Path, listed: dict, audit: Audit) -> None:
    """The vocabulary file against the manifest's hash and size (the shard checks use the manifest's)."""
    path = listed_file(real_root, listed["file"], "vocabulary.file", audit, MAX_VOCABULARY_BYTES)
    if path is None:
        return
    try:
        vocabulary = read_vocabulary(path)
    except (OSError, ValueError) as error:
        audit.fail(listed["file"], f"unreadable ({error}); {FIX_FILE}")
        return
    if vocabulary.ids_digest != listed["ids_sha256"]:
        audit.fail(listed["file"], f"its ids differ from manifest.json's ids_sha256 ({listed['ids_sha256'][:12]}…); {FIX_FILE}")
    if (found := file_sha256(path)) != listed["sha256"]:
        audit.fail(listed["file"], f"SHA-256 {found[:12]}… differs from manifest.json ({listed['sha256'][:12]}…); "
                   f"the vocabulary was replaced (another build's?) or edited; {FIX_FILE}")  # fmt: skip
    if vocabulary.size != listed["size"]:
        audit.fail(listed["file"], f"has {vocabulary.size} ids, manifest.json says {listed['size']}; {FIX_FILE}")


def check_accounting(accounting: dict, audit: Audit) -> None:
    """read + pieces_added = kept + sum(dropped): no document appears or vanishes unexplained."""
    left = accounting["read"] + accounting["pieces_added"]
    right = accounting["kept"] + sum(accounting["dropped"].values())
    if left != right or not accounting.get("balanced", False):
        audit.fail(
            MANIFEST,
            f"accounting does not balance: read {accounting['read']} + pieces_added {accounting['pieces_added']} = {left}, "
            f"kept {accounting['kept']} + dropped {sum(accounting['dropped'].values())} = {right}; {FIX_MANIFEST}",
        )


def audit_build(build: str | Path) -> Audit:
    """Every check of the module docstring; the returned Audit lists what failed."""
    base = Path(build)
    real_root, audit = base.resolve(), Audit()
    target, problem = resolve_inside(real_root, MANIFEST)
    if problem := problem or file_problem(target, MAX_MANIFEST_BYTES):
        audit.fail(MANIFEST, f"{problem}; the build is not finished or was damaged: rerun snakemake in its working "
                   "folder (move a damaged manifest.json away first)")  # fmt: skip
        return audit
    try:
        manifest, problem = parse_manifest(target.read_bytes(), MANIFEST_FIELDS)
    except OSError as error:
        manifest, problem = {}, f"unreadable ({error})"
    if problem:
        audit.fail(MANIFEST, f"{problem}; {FIX_MANIFEST}")
        return audit
    config = manifest["config"]
    listed = manifest["vocabulary"]
    check_vocabulary(real_root, listed, audit)
    entries: list[dict] = []
    seen: dict[Path, str] = {}
    for split, figures in manifest["splits"].items():
        for index, entry in enumerate(figures["shards"]):
            entries.append(entry)
            where = key_path(key_path(key_path("splits", split), "shards"), index) + ".file"
            path = listed_file(real_root, entry["file"], where, audit)
            if path in seen:
                audit.fail(MANIFEST, f"{where} names the same file as {seen[path]}; {FIX_MANIFEST}")
            elif path is not None:
                seen[path] = where
                check_shard(path, entry, config, listed["ids_sha256"], listed["size"], audit)
    for split, figures in manifest["splits"].items():
        for kind, rows in figures["rows"].items():
            total = sum(e["rows"] for e in figures["shards"] if e["kind"] == kind)
            if total != rows:
                where = key_path(key_path(key_path("splits", split), "rows"), kind)
                audit.fail(MANIFEST, f"{where} = {rows}, but its shards list {total} rows; {FIX_MANIFEST}")
    # Every entry but a real directory: a glob over shards/ would also meet FIFOs and symlinks.
    present = set()
    for folder in (base / RELATIVE.shards_dir, base / RELATIVE.provenance_dir):
        if folder.is_dir():
            present |= {p.relative_to(base).as_posix() for p in folder.rglob("*") if p.is_symlink() or not p.is_dir()}
    for extra in sorted(present - {e["file"] for e in entries} - set(manifest["files"])):
        audit.fail(extra, "is not listed in manifest.json; remove it (a leftover or a file of another build)")
    for name, sha256 in sorted(manifest["files"].items()):
        path = listed_file(real_root, name, "files key", audit)
        if path is not None and file_sha256(path) != sha256:
            audit.fail(name, f"SHA-256 differs from manifest.json; the file was changed; {FIX_FILE}")
    check_accounting(manifest["accounting"], audit)
    audit.vocabulary_size, audit.accounting = listed["size"], manifest["accounting"]
    return audit


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(prog="corpusmill audit", description="Check a build folder against its manifest.json.")
    parser.add_argument("build", help="the build folder (the one holding manifest.json)")
    args = parser.parse_args(argv)
    audit = audit_build(args.build)
    if audit.problems:
        for problem in audit.problems:
            print(f"corpusmill: {problem}", file=sys.stderr)
        raise SystemExit(f"corpusmill: {len(audit.problems)} problem(s) in {args.build}")
    accounting = audit.accounting
    print(
        f"corpusmill audit: {args.build} OK: {audit.shards} shard files, {audit.rows} rows, "
        f"vocabulary {audit.vocabulary_size} ids, documents read {accounting['read']} + pieces {accounting['pieces_added']} "
        f"= kept {accounting['kept']} + dropped {sum(accounting['dropped'].values())}"
    )


if __name__ == "__main__":
    main()
