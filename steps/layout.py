"""Where every file of a build lives, in one place, so the Snakefile, the steps and the docs agree.

Public results sit at the top of the build folder; what the steps hand each other lies under
interim/, what the workflow decided before any job under interim/plan/, and one log per job
under logs/. Chunk keys (steps.ingest.chunk_key) hold only letters, digits and `_.+-`.
`RELATIVE` (a layout rooted at "") gives the paths relative to the build folder: the names the
manifest records and the reader resolves.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

SPLITS = ("train", "dev", "test")


@dataclass(frozen=True)
class Layout:
    """Paths inside one build folder."""

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
    def vocabulary_parquet(self) -> str:
        """vocabulary.tsv as a Parquet table, for readers that parse TSV with CSV conventions."""
        return self._join("vocabulary.parquet")

    @property
    def croissant(self) -> str:
        return self._join("croissant.json")

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
    def baseline(self) -> str:
        return self._join("stats", "baseline.json")

    @property
    def baseline_totals(self) -> str:
        """The baseline's train n-gram totals, kept for the next run (steps.formats.NgramTotals)."""
        return self._join("interim", "baseline", "train-ngram-totals.arrow")

    @property
    def baseline_overflow(self) -> str:
        """Where the baseline job puts the counts and windows it cannot hold (steps.ngram_buckets);
        emptied when the job ends."""
        return self._join("interim", "baseline", "overflow")

    @property
    def accounting(self) -> str:
        return self._join("stats", "accounting.json")

    @property
    def dropped(self) -> str:
        return self._join("stats", "dropped.parquet")

    @property
    def hygiene(self) -> str:
        """Near-duplicate and contamination figures: what the report, manifest and datasheet show."""
        return self._join("stats", "hygiene.json")

    @property
    def clusters(self) -> str:
        """Every member of a near-duplicate cluster: its cluster, place, split and fate."""
        return self._join("stats", "near_duplicates.parquet")

    @property
    def contamination(self) -> str:
        """Every measured dev and test document with its n-grams shared with train."""
        return self._join("stats", "contamination.parquet")

    @property
    def report(self) -> str:
        return self._join("report", "index.html")

    @property
    def datasheet(self) -> str:
        return self._join("report", "datasheet.md")

    @property
    def shards_dir(self) -> str:
        return self._join("shards")

    def shard(self, split: str, kind: str, chunk: str) -> str:
        return self._join("shards", split, f"{kind}-{chunk}.parquet")

    @property
    def provenance_dir(self) -> str:
        return self._join("provenance")

    def provenance(self, split: str, kind: str, chunk: str) -> str:
        """Where the rows of one shard file come from (steps.formats, provenance)."""
        return self._join("provenance", split, f"{kind}-{chunk}.parquet")

    def provenance_documents(self, split: str, chunk: str) -> str:
        """The documents of one chunk and split that its provenance tables point into."""
        return self._join("provenance", split, f"documents-{chunk}.parquet")

    # The plan, written when the workflow is read.
    @property
    def chunk_list(self) -> str:
        """The chunk keys in corpus order."""
        return self._join("interim", "plan", "chunks.json")

    def chunk_plan(self, chunk: str) -> str:
        """What one chunk reads: its files with size and time, its place in a cut file."""
        return self._join("interim", "plan", "chunks", f"{chunk}.json")

    @property
    def corpus_plan(self) -> str:
        """The corpus survey: files read, unselected, excluded, refused."""
        return self._join("interim", "plan", "corpus.json")

    def options(self, rule: str) -> str:
        """The configuration sections one rule reads."""
        return self._join("interim", "plan", "options", f"{rule}.json")

    # Per chunk.
    def prepared(self, chunk: str) -> str:
        return self._join("interim", "prepared", f"{chunk}.parquet")

    def tally(self, chunk: str) -> str:
        return self._join("interim", "prepared", f"{chunk}.tally.json")

    def drop_log(self, chunk: str) -> str:
        return self._join("interim", "dropped", f"{chunk}.parquet")

    def counts(self, chunk: str) -> str:
        return self._join("interim", "counts", f"{chunk}.parquet")

    @property
    def removed_folder(self) -> str:
        """Every chunk's list of removed documents: the deduplicate job writes the folder whole."""
        return self._join("interim", "removed")

    def removed(self, chunk: str) -> str:
        """The chunk's documents that deduplication removes."""
        return str(Path(self.removed_folder, f"{chunk}.parquet"))

    def signatures(self, chunk: str) -> str:
        """The chunk's band keys and n-gram hashes, a row per kept document (steps.signatures)."""
        return self._join("interim", "signatures", f"{chunk}.parquet")

    def verification(self, chunk: str) -> str:
        """The chunk's 16-bit signature slots, raw, in the rows of its signatures file."""
        return self._join("interim", "signatures", f"{chunk}.slots")

    def shard_stats(self, chunk: str) -> str:
        return self._join("interim", "shards", f"{chunk}.json")

    def sightings(self, chunk: str) -> str:
        """The distinct types of the chunk's train stream and where each first appears (steps/growth.py)."""
        return self._join("interim", "growth", f"{chunk}.parquet")

    def id_counts(self, chunk: str) -> str:
        """Occurrences of each id per split in the chunk's shards."""
        return self._join("interim", "shards", f"{chunk}.ids.parquet")

    # Corpus-wide intermediates.
    @property
    def duplicates(self) -> str:
        return self._join("interim", "duplicates.parquet")

    @property
    def hygiene_drops(self) -> str:
        """Documents removed as near-duplicates or as contaminated, with their reason."""
        return self._join("interim", "hygiene_drops.parquet")

    @property
    def removed_counts(self) -> str:
        return self._join("interim", "duplicates.counts.parquet")

    @property
    def removed_counts_by_chunk(self) -> str:
        """Each chunk's removed word counts, kept for the next run (steps.deduplicate)."""
        return self._join("interim", "deduplicate", "removed-counts-by-chunk.parquet")

    @property
    def ids(self) -> str:
        """The ids the shards use (vocabulary.tsv's format; counts as far as known then)."""
        return self._join("interim", "vocabulary", "ids.tsv")

    @property
    def ids_table(self) -> str:
        """The same ids as an Arrow IPC file, what the jobs that read them read (steps.formats)."""
        return self._join("interim", "vocabulary", "ids.arrow")

    @property
    def ids_digest(self) -> str:
        """The ids' SHA-256 (steps.formats.ids_digest): what reruns the shard jobs."""
        return self._join("interim", "vocabulary", "ids.sha256")

    @property
    def word_counts(self) -> str:
        """Every token's train, dev and test count (word units), before the shards."""
        return self._join("interim", "vocabulary", "counts.parquet")

    @property
    def chunk_counts_sum(self) -> str:
        """The chunks' token counts summed, kept for the next run (steps.vocabulary.merge_counts)."""
        return self._join("interim", "vocabulary", "chunk-counts-sum.parquet")

    @property
    def abbreviations(self) -> str:
        return self._join("interim", "abbreviations.txt")

    @property
    def subword_sample(self) -> str:
        return self._join("interim", "subword", "train_sample.jsonl")

    @property
    def subword_key(self) -> str:
        return self._join("interim", "subword", "train_sample.key")

    @property
    def subword_models(self) -> str:
        """The cache of learned models, kept although no current job may name them."""
        return self._join("interim", "subword", "models")

    def subword_trained(self, key: str) -> str:
        """A learned model, cached under the key of its sample and settings."""
        return str(Path(self.subword_models, f"{key}.model"))

    # Logs.
    @property
    def logs_dir(self) -> str:
        return self._join("logs")

    def log(self, rule: str, name: str = "") -> str:
        return str(Path(self.logs_dir, rule, f"{name or rule}.log"))

    @property
    def failed_jobs(self) -> str:
        """The logs of the jobs that failed in the current run, one path a line."""
        return self._join("logs", "failed-jobs.txt")


RELATIVE = Layout("")
