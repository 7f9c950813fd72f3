"""`corpusmill audit BUILD`: check a finished build folder against its manifest.

Why: shards get copied between machines, truncated by full disks, or mixed with files of other
builds; training on them silently would waste a run. The audit recomputes what the manifest
promises: every shard's SHA-256 and row count, ids below the vocabulary size, window and block
widths, the vocabulary hash (file, manifest and every shard's `corpusmill` metadata), the
document accounting, and that shards/ holds exactly the listed files. It reads each shard in
record batches, so memory stays bounded by the batch, not the shard.
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

from steps.manifest import file_sha256
from steps.vocab import read_vocabulary

BATCH_ROWS = 65_536


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


def _id_columns(kind: str) -> list[str]:
    return {"ngram": ["context", "target"], "block": ["ids"], "stream": ["ids"]}[kind]


def _expected_width(kind: str, config: dict) -> int | None:
    """Fixed list width of a kind's id column: n-1 context ids, or L+1 block ids."""
    if kind == "ngram":
        return config["windows"]["ngram"]["n"] - 1
    if kind == "block":
        return config["windows"]["blocks"]["length"] + 1
    return None


def _max_id(column: pa.Array) -> int | None:
    """Largest id in a flat or list column (vectorized), None when empty."""
    values = column
    while pa.types.is_list(values.type) or pa.types.is_fixed_size_list(values.type) or pa.types.is_large_list(values.type):
        values = values.flatten()
    largest = pc.max(values).as_py()
    return None if largest is None else int(largest)


def check_shard(base: Path, entry: dict, config: dict, vocabulary_sha256: str, vocabulary_size: int, audit: Audit) -> None:
    """Hash, rows, metadata, widths and id range of one listed shard file."""
    name = entry["file"]
    path = base / name
    if not path.is_file():
        audit.fail(name, "listed in manifest.json but missing; rebuild (snakemake --cores N) or restore the file")
        return
    if file_sha256(path) != entry["sha256"]:
        audit.fail(name, f"SHA-256 differs from manifest.json ({entry['sha256'][:12]}…); the file was changed or damaged")
    try:
        parquet = pq.ParquetFile(path)
    except (pa.ArrowException, OSError) as error:
        audit.fail(name, f"not readable as Parquet ({error}); the file is damaged or truncated")
        return
    kind = entry["kind"]
    if parquet.metadata.num_rows != entry["rows"]:
        audit.fail(name, f"holds {parquet.metadata.num_rows} rows, manifest.json says {entry['rows']}")
    raw = (parquet.schema_arrow.metadata or {}).get(b"corpusmill")
    if raw is None:
        audit.fail(name, "no 'corpusmill' key-value metadata; not a corpusmill shard")
    elif json.loads(raw).get("vocabulary_sha256") != vocabulary_sha256:
        audit.fail(name, "its metadata vocabulary_sha256 differs from vocabulary.tsv; the shard belongs to another build")
    width = _expected_width(kind, config)
    for column in _id_columns(kind):
        if column not in parquet.schema_arrow.names:
            audit.fail(name, f"has no column {column!r} (a {kind} shard needs {', '.join(_id_columns(kind))})")
            return
        kind_type = parquet.schema_arrow.field(column).type
        if width is not None and column != "target":
            actual = kind_type.list_size if pa.types.is_fixed_size_list(kind_type) else None
            if actual != width:
                audit.fail(name, f"column {column!r} is {kind_type}, expected fixed_size_list of width {width}")
    try:
        largest = -1
        for batch in parquet.iter_batches(batch_size=BATCH_ROWS, columns=_id_columns(kind)):
            for column in batch.columns:
                value = _max_id(column)
                if value is not None:
                    largest = max(largest, value)
    except (pa.ArrowException, OSError) as error:
        audit.fail(name, f"its data cannot be read ({error}); the file is damaged or truncated")
        return
    if largest >= vocabulary_size:
        audit.fail(name, f"holds id {largest}, but the vocabulary has only {vocabulary_size} ids (0..{vocabulary_size - 1})")
    audit.rows += parquet.metadata.num_rows
    audit.shards += 1


def check_accounting(accounting: dict, audit: Audit) -> None:
    """read + pieces_added = kept + sum(dropped): no document appears or vanishes unexplained."""
    left = accounting["read"] + accounting["pieces_added"]
    right = accounting["kept"] + sum(accounting["dropped"].values())
    if left != right or not accounting.get("balanced", False):
        audit.fail(
            "manifest.json",
            f"accounting does not balance: read {accounting['read']} + pieces_added {accounting['pieces_added']} = {left}, "
            f"kept {accounting['kept']} + dropped {sum(accounting['dropped'].values())} = {right}",
        )


def audit_build(build: str | Path) -> Audit:
    """Every check of the module docstring; the returned Audit lists what failed."""
    base = Path(build)
    audit = Audit()
    manifest_path = base / "manifest.json"
    try:
        manifest = json.loads(manifest_path.read_text(encoding="utf-8"))
    except (OSError, ValueError) as error:
        audit.fail("manifest.json", f"missing or unreadable ({error}); the build is not finished — run snakemake again")
        return audit
    config = manifest["config"]
    listed = manifest["vocabulary"]
    try:
        vocabulary = read_vocabulary(base / listed["file"])
    except (OSError, ValueError) as error:
        audit.fail(listed["file"], f"unreadable ({error})")
        return audit
    if vocabulary.digest() != listed["sha256"]:
        audit.fail(listed["file"], f"SHA-256 {vocabulary.digest()[:12]}… differs from manifest.json ({listed['sha256'][:12]}…); "
                   "the vocabulary was replaced (another build's?) or edited")
    if vocabulary.size != listed["size"]:
        audit.fail(listed["file"], f"has {vocabulary.size} ids, manifest.json says {listed['size']}")
    entries = [entry for split in manifest["splits"].values() for entry in split["shards"]]
    for entry in entries:
        check_shard(base, entry, config, listed["sha256"], listed["size"], audit)
    for split, figures in manifest["splits"].items():
        for kind, rows in figures["rows"].items():
            total = sum(e["rows"] for e in figures["shards"] if e["kind"] == kind)
            if total != rows:
                audit.fail("manifest.json", f"splits.{split}.rows.{kind} = {rows}, but its shards list {total} rows")
    shards_dir = base / "shards"
    present = {p.relative_to(base).as_posix() for p in shards_dir.rglob("*") if p.is_file()} if shards_dir.is_dir() else set()
    for extra in sorted(present - {e["file"] for e in entries}):
        audit.fail(extra, "is not listed in manifest.json; remove it (a leftover or a file of another build)")
    for name, sha256 in sorted(manifest.get("files", {}).items()):
        path = base / name
        if not path.is_file():
            audit.fail(name, "listed in manifest.json but missing")
        elif file_sha256(path) != sha256:
            audit.fail(name, "SHA-256 differs from manifest.json; the file was changed")
    check_accounting(manifest["accounting"], audit)
    audit.vocabulary_size, audit.accounting = vocabulary.size, manifest["accounting"]
    return audit


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(prog="corpusmill audit", description="Check a build folder against its manifest.json.")
    parser.add_argument("build", help="the build folder (the one holding manifest.json)")
    args = parser.parse_args(argv)
    audit = audit_build(args.build)
    if audit.problems:
        for problem in audit.problems:
            print(f"corpusmill audit: {Path(args.build) / problem}", file=sys.stderr)
        raise SystemExit(f"corpusmill audit: {len(audit.problems)} problem(s) in {args.build}")
    accounting = audit.accounting
    print(
        f"corpusmill audit: {args.build} OK: {audit.shards} shard files, {audit.rows} rows, "
        f"vocabulary {audit.vocabulary_size} ids, documents read {accounting['read']} + pieces {accounting['pieces_added']} "
        f"= kept {accounting['kept']} + dropped {sum(accounting['dropped'].values())}"
    )


if __name__ == "__main__":
    main()
