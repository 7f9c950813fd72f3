"""Where every file of a build lives, in one place, so the Snakefile, the steps and the docs agree."""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

SPLITS = ("train", "dev", "test")
KINDS = ("ngram", "block", "stream")
# The windows section that enables each kind.
KIND_SECTIONS = {"ngram": "ngram", "block": "blocks", "stream": "streams"}


def enabled_kinds(windows: dict) -> list[str]:
    return [kind for kind in KINDS if windows[KIND_SECTIONS[kind]]["enabled"]]


def _part(part: int | str) -> str:
    """Parts are four digits in file names; a string (e.g. a wildcard) is used as given."""
    return f"{part:04d}" if isinstance(part, int) else part


@dataclass(frozen=True)
class Layout:
    """Paths inside one build folder. Public results sit at the top; intermediates under interim/."""

    root: str

    def _join(self, *parts: str) -> str:
        return str(Path(self.root, *parts))

    # Public results.
    @property
    def manifest(self) -> str:
        return self._join("manifest.json")

    @property
    def vocabulary(self) -> str:
        return self._join("vocabulary.tsv")

    @property
    def subword_model(self) -> str:
        return self._join("subword.model")

    @property
    def coverage(self) -> str:
        return self._join("stats", "coverage.json")

    @property
    def token_counts(self) -> str:
        return self._join("stats", "token_counts.parquet")

    @property
    def growth(self) -> str:
        return self._join("stats", "growth.json")

    @property
    def accounting(self) -> str:
        return self._join("stats", "accounting.json")

    @property
    def dropped(self) -> str:
        return self._join("stats", "dropped.parquet")

    @property
    def report(self) -> str:
        return self._join("report", "index.html")

    def shard(self, split: str, kind: str, part: int | str) -> str:
        return self._join("shards", split, f"{kind}-{_part(part)}.parquet")

    def shards_dir(self) -> str:
        return self._join("shards")

    # The plan, written when the workflow is read: what each chunk reads, and the corpus survey.
    def chunk_plan(self, chunk: str) -> str:
        return self._join("interim", "plan", "chunks", f"{chunk}.json")

    @property
    def corpus_plan(self) -> str:
        return self._join("interim", "plan", "corpus.json")

    @property
    def manifest_plan(self) -> str:
        return self._join("interim", "plan", "manifest.json")

    # Intermediates, one set per input chunk.
    def prepared(self, chunk: str) -> str:
        return self._join("interim", "prepared", f"{chunk}.parquet")

    def tally(self, chunk: str) -> str:
        return self._join("interim", "prepared", f"{chunk}.tally.json")

    def drop_log(self, chunk: str) -> str:
        return self._join("interim", "dropped", f"{chunk}.parquet")

    def counts(self, chunk: str) -> str:
        return self._join("interim", "counts", f"{chunk}.parquet")

    def encoded(self, chunk: str, split: str, part: int | str) -> str:
        return self._join("interim", "encoded", chunk, f"{split}-{_part(part)}.parquet")

    def encode_stats(self, chunk: str) -> str:
        return self._join("interim", "encoded", chunk, "stats.json")

    def shard_stats(self, split: str, part: int | str) -> str:
        return self._join("interim", "shards", f"{split}-{_part(part)}.json")

    @property
    def removed_counts(self) -> str:
        return self._join("interim", "duplicates.counts.parquet")

    @property
    def duplicates(self) -> str:
        return self._join("interim", "duplicates.parquet")

    @property
    def abbreviations(self) -> str:
        return self._join("interim", "abbreviations.txt")

    @property
    def subword_sample(self) -> str:
        return self._join("interim", "subword", "train_sample.jsonl")

    @property
    def subword_key(self) -> str:
        return self._join("interim", "subword", "train_sample.key")

    def subword_trained(self, key: str) -> str:
        """A learned model, cached under the key of its sample and settings."""
        return self._join("interim", "subword", "models", f"{key}.model")

    def piece_counts(self, chunk: str) -> str:
        return self._join("interim", "encoded", chunk, "pieces.parquet")

    def log(self, rule: str, name: str = "") -> str:
        return self._join("logs", rule, f"{name or rule}.log")

    @property
    def failed_jobs(self) -> str:
        """The logs of the jobs that failed in the current run, one path a line."""
        return self._join("logs", "failed-jobs.txt")
