"""Manifest: one JSON file describing a build completely, with nothing that varies between runs.

It records the resolved configuration and its hash, a fingerprint of every input file, the
files under the corpus root that were not read (unselected, excluded, refused), the
vocabulary hash, per-split figures, every shard file with its rows and SHA-256 (and, under
`files`, every provenance table with its SHA-256, as the shard jobs wrote them), and the
document accounting (steps/accounting.py), in total and per input file: read + pieces added
by splitting = kept + dropped (by reason), and the near-duplicate and contamination figures
(steps/hygiene.py; the documents one by one are in stats/).
"""

from __future__ import annotations

import json
from collections.abc import Sequence
from pathlib import Path

from . import job
from .formats import Figures, ShardStats, file_sha256, read_shard_stats, read_vocabulary
from .layout import RELATIVE, SPLITS, Layout
from .settings import digest, read_json
from .storage import write_json

RULE = "manifest"
SECTIONS = "all"  # the manifest records the whole resolved configuration
SCHEMA_VERSION = 2


def build_manifest(
    config: dict,
    corpus: dict,
    layout: Layout,
    accounting: dict,
    stats: Sequence[ShardStats],
    inputs: dict[str, dict],
    extra_files: Sequence[str],
    baseline: dict | None = None,
    hygiene: dict | None = None,
) -> dict:
    """The manifest from the shard jobs' statistics (every file with rows, bytes and SHA-256, as
    written), the accounting, the corpus survey, the inputs' sizes and SHA-256 (hashed by the
    prepare jobs while they read them) and, when counted, the n-gram baseline's figures."""
    base = Path(layout.root)
    vocabulary = read_vocabulary(layout.vocabulary)
    splits = {}
    for split in SPLITS:
        totals = Figures()
        figures: dict = {"rows": {}, "shards": []}
        for chunk in stats:
            for per_split in chunk.sources.values():
                if split in per_split:
                    totals.add(per_split[split])
            for kind, rows in chunk.rows.get(split, {}).items():
                figures["rows"][kind] = figures["rows"].get(kind, 0) + rows
            for key in ("block_ids", "stream_ids"):
                if split in getattr(chunk, key):
                    figures[key] = figures.get(key, 0) + getattr(chunk, key)[split]
            figures["shards"] += [
                {"file": f.file, "kind": f.kind, "chunk": f.chunk, "rows": f.rows, "bytes": f.bytes, "sha256": f.sha256}
                for f in chunk.files
                if f.split == split
            ]
        figures.update(documents=totals.documents, sentences=totals.sentences, tokens=totals.tokens)
        figures["rows"] = dict(sorted(figures["rows"].items()))
        splits[split] = figures
    listed = [{"path": source, **inputs[source]} for source in corpus["sources"]]
    return {
        "schema_version": SCHEMA_VERSION,
        "config": config,
        "config_sha256": digest(config),
        "inputs": listed,
        "inputs_sha256": digest(listed),
        "not_read": {key: corpus[key] for key in ("unselected", "excluded", "refused")},
        "vocabulary": {
            "file": RELATIVE.vocabulary,
            "sha256": file_sha256(layout.vocabulary),
            "ids_sha256": vocabulary.ids_digest,
            "size": vocabulary.size,
            "words": vocabulary.size - vocabulary.first_word_id,
            "reserved": vocabulary.reserved,
            **({"subword_model": {"file": RELATIVE.subword_model, "sha256": file_sha256(layout.subword_model)}} if vocabulary.units == "subword" else {}),
        },
        "files": {Path(p).relative_to(base).as_posix(): file_sha256(p) for p in extra_files}
        | {name: sha256 for chunk in stats for name, sha256 in chunk.provenance.items()},
        "splits": splits,
        "accounting": accounting,
        **({"baseline": baseline} if baseline is not None else {}),
        **(hygiene_figures(hygiene) if hygiene is not None else {}),
    }


def hygiene_figures(hygiene: dict) -> dict:
    """The manifest's near_duplicates and contamination: the figures of stats/hygiene.json,
    without the per-file table and the list of documents."""
    contamination = {key: value for key, value in hygiene["contamination"].items() if key != "listed"}
    return {"near_duplicates": hygiene["near_duplicates"], "contamination": {"ngram_words": hygiene["ngram_words"], **contamination}}


def main(argv: list[str] | None = None) -> None:
    run = job.start(argv, RULE, "Write the manifest of a build.")
    layout, chunks = run.layout, run.chunks()
    stats = [read_shard_stats(layout.shard_stats(chunk)) for chunk in chunks]
    inputs: dict[str, dict] = {}
    for chunk in chunks:
        inputs.update(read_json(layout.tally(chunk))["inputs"])
    counted = run.options["baseline"]["enabled"]
    extra = [layout.coverage, *([layout.baseline] if counted else [])]
    manifest = build_manifest(
        run.options, read_json(layout.corpus_plan), layout, read_json(layout.accounting), stats, inputs, extra,
        read_json(layout.baseline) if counted else None, read_json(layout.hygiene),
    )  # fmt: skip
    write_json(layout.manifest, manifest)
    print(json.dumps({key: value for key, value in manifest["accounting"].items() if key != "files"}, sort_keys=True))


if __name__ == "__main__":
    main()
