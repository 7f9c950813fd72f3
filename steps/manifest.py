"""Manifest: one JSON file describing a build completely, with nothing that varies between runs.

It records the resolved configuration and its hash, a fingerprint of every input file, the
files under the corpus root that were not read (unselected, excluded, refused), the
vocabulary hash, per-split figures, every shard file with its rows and SHA-256, and the
document accounting (steps/accounting.py), in total and per input file: read + pieces added
by splitting = kept + dropped (by reason).
"""

from __future__ import annotations

import argparse
import hashlib
import json
from collections.abc import Sequence
from pathlib import Path

import pyarrow.parquet as pq

from .layout import SPLITS
from .settings import digest, read_json
from .storage import write_json
from .vocab import read_vocabulary

SCHEMA_VERSION = 1


def file_sha256(path: str | Path) -> str:
    hasher = hashlib.sha256()
    with open(path, "rb") as handle:
        while block := handle.read(1 << 22):
            hasher.update(block)
    return hasher.hexdigest()


def build_manifest(
    config: dict,
    corpus: dict,
    build_dir: str,
    accounting: dict,
    part_stats: dict[tuple[str, int], dict],
    shards: dict[tuple[str, int], dict[str, str]],
    extra_files: Sequence[str],
) -> dict:
    base = Path(build_dir)
    vocabulary = read_vocabulary(base / "vocabulary.tsv")
    splits = {}
    for split in SPLITS:
        figures = {"documents": 0, "sentences": 0, "tokens": 0, "rows": {}, "shards": []}
        for (name, part), stats in sorted(part_stats.items()):
            if name != split:
                continue
            for key in ("documents", "sentences", "tokens", "block_ids", "stream_ids"):
                if key in stats:
                    figures[key] = figures.get(key, 0) + stats[key]
            for kind, path in sorted(shards[(name, part)].items()):
                rows = pq.ParquetFile(path).metadata.num_rows
                figures["rows"][kind] = figures["rows"].get(kind, 0) + rows
                figures["shards"].append(
                    {
                        "file": Path(path).relative_to(base).as_posix(),
                        "kind": kind,
                        "part": part,
                        "rows": rows,
                        "bytes": Path(path).stat().st_size,
                        "sha256": file_sha256(path),
                    }
                )
        splits[split] = figures
    inputs = []
    for source in corpus["sources"]:
        path = Path(corpus["root"]) / source
        inputs.append({"path": source, "bytes": path.stat().st_size, "sha256": file_sha256(path)})
    return {
        "schema_version": SCHEMA_VERSION,
        "config": config,
        "config_sha256": digest(config),
        "inputs": inputs,
        "inputs_sha256": digest(inputs),
        "not_read": {key: corpus[key] for key in ("unselected", "excluded", "refused")},
        "vocabulary": {
            "file": "vocabulary.tsv",
            "sha256": vocabulary.digest(),
            "size": vocabulary.size,
            "words": vocabulary.size - vocabulary.first_word_id,
            "reserved": vocabulary.reserved,
            **(
                {"subword_model": {"file": "subword.model", "sha256": file_sha256(base / "subword.model")}}
                if config.get("units") == "subword"
                else {}
            ),
        },
        "files": {Path(p).relative_to(base).as_posix(): file_sha256(p) for p in extra_files},
        "splits": splits,
        "accounting": accounting,
    }


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description="Write the manifest of a build.")
    parser.add_argument("--options", required=True)
    parser.add_argument("--plan", required=True, help="the manifest's plan file (steps/plan.py): the build's files")
    parser.add_argument("--output", required=True)
    args = parser.parse_args(argv)
    config = json.loads(args.options)
    plan = read_json(args.plan)
    part_stats = {(s["split"], s["part"]): read_json(s["stats"]) for s in plan["parts"]}
    shards = {(s["split"], s["part"]): s["files"] for s in plan["parts"]}
    manifest = build_manifest(
        config, read_json(plan["corpus"]), plan["build_dir"], read_json(plan["accounting"]), part_stats, shards, plan["extra_files"]
    )
    write_json(args.output, manifest)
    print(json.dumps({key: value for key, value in manifest["accounting"].items() if key != "files"}, sort_keys=True))


if __name__ == "__main__":
    main()
