"""The build plan the Snakefile reads: inputs, chunks, shard parts and per-rule options.

Everything here is decided from the configuration and file sizes alone, before any job runs.
"""

from __future__ import annotations

import hashlib
import json
from dataclasses import dataclass
from pathlib import Path

from steps import ingest
from steps.layout import SPLITS, Layout
from steps.shards import enabled_kinds

STEPS_DIR = Path(__file__).resolve().parent

# The step modules each rule runs; editing one reruns the rules that use it.
RULE_MODULES = {
    "prepare": ("ingest", "clean", "segment", "unicode_breaks", "split", "prepare", "vocab", "storage"),
    "abbreviations": ("segment", "unicode_breaks", "clean", "ingest", "storage"),
    "deduplicate": ("split", "vocab", "storage"),
    "subword_sample": ("subword", "split", "vocab", "storage"),
    "subword_train": ("subword", "vocab", "storage"),
    "subword_model": ("subword", "vocab", "storage"),
    "vocabulary": ("vocab", "storage"),
    "encode": ("encode", "vocab", "split", "storage"),
    "shard": ("shards", "windows", "vocab", "split", "encode", "storage"),
    "coverage": ("report", "summary", "vocab", "storage"),
    "manifest": ("manifest", "vocab", "settings", "storage"),
    "growth": ("growth", "laws", "split", "storage", "vocab"),
    "report": ("report_page", "laws", "settings", "storage", "vocab"),
}

# The configuration sections each rule reads; changing another section does not rerun it.
RULE_SECTIONS = {
    "prepare": ("corpus", "clean", "segment", "split", "units"),
    "abbreviations": ("corpus", "clean"),
    "vocabulary": ("vocabulary", "units"),
    "encode": ("shards", "units", "subword"),
    "subword_sample": ("subword",),
    "subword_train": ("subword",),
    "shard": ("windows", "shards", "vocabulary", "units"),
    "coverage": ("report", "units"),
    "growth": ("units",),
    "report": ("report", "windows"),
}


def code_hash(rule: str) -> str:
    """SHA-256 over the source of the step modules a rule runs."""
    hasher = hashlib.sha256()
    for module in RULE_MODULES[rule]:
        path = STEPS_DIR / f"{module}.py"
        if path.exists():
            hasher.update(path.read_bytes())
    return hasher.hexdigest()[:16]


@dataclass
class Plan:
    config: dict
    root: str
    sources: list[str]
    chunks: list[ingest.Chunk]
    parts: dict[str, int]
    kinds: list[str]
    layout: Layout

    @classmethod
    def from_config(cls, config: dict) -> "Plan":
        corpus = config["corpus"]
        root = corpus["root"]
        sources = ingest.find_inputs(root, corpus["include"], corpus["exclude"])
        if not sources:
            raise ingest.CorpusError(
                f"{root}: no input files match corpus.include {corpus['include']}; check corpus.root and the patterns"
            )
        chunk_bytes = int(corpus["chunk_mb"] * (1 << 20))
        pack_bytes = int(corpus["pack_mb"] * (1 << 20))
        chunks = ingest.plan_chunks(root, sources, chunk_bytes, corpus["text_unit"], pack_bytes)
        shards = config["shards"]
        parts = {"train": shards["train_files"], "dev": shards["heldout_files"], "test": shards["heldout_files"]}
        return cls(config, root, sources, chunks, parts, enabled_kinds(config["windows"]), Layout(config["build_dir"]))

    @property
    def chunk_keys(self) -> list[str]:
        return [c.key for c in self.chunks]

    def chunk(self, key: str) -> ingest.Chunk:
        return self._by_key[key]

    def __post_init__(self) -> None:
        self._by_key = {c.key: c for c in self.chunks}

    def options(self, rule: str) -> str:
        """The JSON configuration sections a rule reads."""
        return json.dumps({k: self.config[k] for k in RULE_SECTIONS[rule]}, sort_keys=True)

    def split_parts(self) -> list[tuple[str, int]]:
        return [(split, part) for split in SPLITS for part in range(self.parts[split])]

    def encoded_outputs(self, chunk: str) -> list[str]:
        return [self.layout.encoded(chunk, split, part) for split, part in self.split_parts()]

    def shard_files(self, split: str, part: int | str) -> dict[str, str]:
        return {kind: self.layout.shard(split, kind, part) for kind in self.kinds}

    def all_shards(self) -> list[str]:
        return [path for split, part in self.split_parts() for path in self.shard_files(split, part).values()]

    def manifest_plan(self, extra_files: list[str]) -> str:
        """What the manifest step needs to know, as JSON."""
        return json.dumps(
            {
                "root": self.root,
                "sources": self.sources,
                "build_dir": self.layout.root,
                "tallies": [self.layout.tally(c) for c in self.chunk_keys],
                "duplicates": self.layout.duplicates,
                "parts": [
                    {"split": s, "part": p, "stats": self.layout.shard_stats(s, p), "files": self.shard_files(s, p)}
                    for s, p in self.split_parts()
                ],
                "extra_files": extra_files,
            },
            sort_keys=True,
        )
