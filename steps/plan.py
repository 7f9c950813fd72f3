"""The build plan the Snakefile reads: inputs, chunks, shard parts and per-rule options.

Everything here is decided from the configuration and the corpus folder's listing and file
sizes, before any job runs. Corpus files are not handed to Snakemake as inputs: a file name may
hold characters Snakemake reads as wildcards (`{x}`) or path variables (`<x>`), and a pack of
thousands of small files would not fit on one command line. Instead the plan writes one small
JSON file per chunk (`Layout.chunk_plan`) naming its files with their size and modification
time; that file is the prepare job's input, so a changed file reruns its own chunk. It also
writes the corpus survey (`Layout.corpus_plan`): the files read, left unselected, excluded or
refused. Both are rewritten only when their content changes.
"""

from __future__ import annotations

import hashlib
import json
import os
import stat
from dataclasses import dataclass
from pathlib import Path

from . import ingest
from .layout import SPLITS, Layout, enabled_kinds

STEPS_DIR = Path(__file__).resolve().parent

# The step modules each rule runs; editing one reruns the rules that use it.
RULE_MODULES = {
    "prepare": ("ingest", "clean", "segment", "unicode_breaks", "split", "prepare", "vocab", "storage", "accounting", "progress"),
    "abbreviations": ("segment", "unicode_breaks", "clean", "ingest", "storage"),
    "deduplicate": ("split", "vocab", "storage", "accounting", "settings"),
    "subword_sample": ("subword", "split", "vocab", "storage"),
    "subword_train": ("subword", "vocab", "storage"),
    "subword_model": ("subword", "vocab", "storage"),
    "vocabulary": ("vocab", "storage"),
    "encode": ("encode", "vocab", "split", "storage"),
    "shard": ("shards", "windows", "vocab", "split", "encode", "storage"),
    "coverage": ("report", "summary", "vocab", "storage"),
    "manifest": ("manifest", "vocab", "settings", "storage"),
    "accounting": ("accounting", "storage"),
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
    "coverage": ("report", "units", "vocabulary"),
    "growth": ("units",),
    "report": ("report", "windows"),
}

# Largest file accepted as a frozen vocabulary or subword model: far above any real one, and
# low enough that a wrong path (a disk image, /dev/zero) stops with a message, not a hang.
MAX_FROZEN_BYTES = 1 << 30
VOCABULARY_HEADER = "id\ttoken\tcount\tkind"


def code_hash(rule: str) -> str:
    """SHA-256 over the source of the step modules a rule runs."""
    hasher = hashlib.sha256()
    for module in RULE_MODULES[rule]:
        path = STEPS_DIR / f"{module}.py"
        if path.exists():
            hasher.update(path.read_bytes())
    return hasher.hexdigest()[:16]


def frozen_file(field: str, value: str, header: str | None) -> str:
    """SHA-256 of a frozen vocabulary or model after checking, before any job, that it is a
    regular file of sane size (and, for a vocabulary, that it starts with the header); raise
    CorpusError naming the field and the fix. The digest reruns what depends on the file
    when its content changes."""
    fix = f"give the path (relative to the working directory) of an existing file, or set {field}: null"
    try:
        info = os.stat(value)
    except OSError as error:
        raise ingest.CorpusError(f"{field} = {value!r}: {error.strerror.lower()}; {fix}") from None
    if not stat.S_ISREG(info.st_mode):
        raise ingest.CorpusError(f"{field} = {value!r}: not a regular file; {fix}")
    if info.st_size > MAX_FROZEN_BYTES:
        raise ingest.CorpusError(f"{field} = {value!r}: {info.st_size:,} bytes, over the limit of {MAX_FROZEN_BYTES:,}; {fix}")
    hasher = hashlib.sha256()
    with open(value, "rb") as handle:
        first = handle.readline(len(header or "") + 2)
        if header is not None and first.rstrip(b"\r\n") != header.encode():
            raise ingest.CorpusError(
                f"{field} = {value!r}: line 1 is not the header {header!r}; is it the vocabulary.tsv of a corpusmill build?"
            )
        hasher.update(first)
        while block := handle.read(1 << 22):
            hasher.update(block)
    return hasher.hexdigest()


def frozen_digests(config: dict) -> dict[str, str]:
    """The checked frozen files the configuration names: field → SHA-256."""
    word, subword = config["vocabulary"]["frozen"], config["subword"]["frozen"]
    if config["units"] == "word":
        if subword:
            raise ingest.CorpusError("subword.frozen is set but units = word; set units: subword or subword.frozen: null")
        return {"vocabulary.frozen": frozen_file("vocabulary.frozen", word, VOCABULARY_HEADER)} if word else {}
    if word:
        raise ingest.CorpusError("vocabulary.frozen is set but units = subword; use subword.frozen for a piece model")
    return {"subword.frozen": frozen_file("subword.frozen", subword, None)} if subword else {}


@dataclass
class Plan:
    config: dict
    root: str
    survey: ingest.CorpusSurvey
    chunks: list[ingest.Chunk]
    parts: dict[str, int]
    kinds: list[str]
    layout: Layout
    frozen: dict[str, str]

    @classmethod
    def from_config(cls, config: dict) -> "Plan":
        corpus = config["corpus"]
        root = corpus["root"]
        survey = ingest.survey_corpus(root, corpus["include"], corpus["exclude"], corpus["outside_links"] == "follow")
        if not survey.sources:
            raise ingest.CorpusError(
                f"{root}: no input files match corpus.include {corpus['include']}; check corpus.root and the patterns"
            )
        chunk_bytes = int(corpus["chunk_mb"] * (1 << 20))
        pack_bytes = int(corpus["pack_mb"] * (1 << 20))
        chunks = ingest.plan_chunks(root, survey.sources, chunk_bytes, corpus["text_unit"], pack_bytes)
        shards = config["shards"]
        parts = {"train": shards["train_files"], "dev": shards["heldout_files"], "test": shards["heldout_files"]}
        layout = Layout(config["build_dir"])
        return cls(config, root, survey, chunks, parts, enabled_kinds(config["windows"]), layout, frozen_digests(config))

    @property
    def sources(self) -> list[str]:
        return self.survey.sources

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

    def corpus_record(self) -> dict:
        """The survey of the corpus folder, for the manifest and the report."""
        survey = self.survey
        return {
            "root": self.root,
            "sources": survey.sources,
            "unselected": survey.unselected,
            "excluded": survey.excluded,
            "refused": [{"path": path, "reason": reason} for path, reason in survey.refused],
        }

    def write_files(self, extra_files: list[str]) -> None:
        """Write the chunk plans, the corpus survey and the manifest's plan, each only when its
        content changed."""
        for chunk in self.chunks:
            write_if_changed(self.layout.chunk_plan(chunk.key), chunk_record(self.root, chunk))
        write_if_changed(self.layout.corpus_plan, self.corpus_record())
        write_if_changed(self.layout.manifest_plan, self.manifest_record(extra_files))

    def manifest_record(self, extra_files: list[str]) -> dict:
        """What the manifest step needs to know besides the corpus survey: every file of the
        build it lists."""
        return {
            "build_dir": self.layout.root,
            "corpus": self.layout.corpus_plan,
            "accounting": self.layout.accounting,
            "parts": [
                {"split": s, "part": p, "stats": self.layout.shard_stats(s, p), "files": self.shard_files(s, p)}
                for s, p in self.split_parts()
            ],
            "extra_files": extra_files,
        }


def chunk_record(root: str | Path, chunk: ingest.Chunk) -> dict:
    """What one prepare job reads: its files with size and modification time (so a changed
    file changes this record), and its place in a file cut into chunks."""
    files = []
    for source in chunk.sources:
        info = (Path(root) / source).stat()
        files.append([source, info.st_size, info.st_mtime_ns])
    return {"key": chunk.key, "index": chunk.index, "count": chunk.count, "files": files}


def write_if_changed(path: str | Path, value: dict) -> None:
    """Write JSON atomically unless the file already holds exactly it (its time then stays)."""
    text = json.dumps(value, indent=1, sort_keys=True, ensure_ascii=False) + "\n"
    target = Path(path)
    try:
        if target.read_text(encoding="utf-8") == text:
            return
    except (OSError, UnicodeDecodeError):
        pass
    target.parent.mkdir(parents=True, exist_ok=True)
    temporary = target.with_name(f".{target.name}.partial")
    temporary.write_text(text, encoding="utf-8")
    os.replace(temporary, target)
