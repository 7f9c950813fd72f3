"""Accounting: what became of every document read, file by file, and a record of each one dropped.

A prepare job keeps a `Tally` of its chunk: per input file, documents read, pieces added by
splitting oversize documents, kept, truncated, byte sequences replaced, and dropped by reason;
every dropped document is also logged with its file, byte offset and reason. A problem that
the configuration says must stop the run (invalid UTF-8 under `stop`, a damaged compressed
file, …) is recorded per file instead of ending the job at once, so one run names every bad
file; the deduplicate job stops the run when any chunk has one.

The `accounting` job merges the chunks' tallies and drop logs with the removed duplicates, and
the near-duplicates and contaminated documents removed (steps.hygiene), into
`stats/accounting.json` (totals and per file) and `stats/dropped.parquet` (one row per dropped
document: source, offset, reason, sorted by source and offset). For every file and in total:
read + pieces_added = kept + sum(dropped).
"""

from __future__ import annotations

import json
from array import array
from collections import Counter
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path

from . import job

RULE = "accounting"
SECTIONS: tuple[str, ...] = ()
REASONS = (
    "invalid_utf8", "oversize", "bad_json", "no_text", "empty", "too_short", "few_letters", "no_tokens", "duplicate",
    "near_duplicate", "near_duplicate_other_split", "contaminated",
)  # fmt: skip
COUNTERS = ("read", "pieces_added", "kept", "truncated", "replaced_sequences")


@dataclass
class FileTally:
    """What happened to the documents of one input file (or of its part in one chunk)."""

    read: int = 0
    pieces_added: int = 0
    kept: int = 0
    truncated: int = 0
    replaced_sequences: int = 0
    dropped: Counter[str] = field(default_factory=Counter)

    def add(self, other: FileTally) -> None:
        for name in COUNTERS:
            setattr(self, name, getattr(self, name) + getattr(other, name))
        self.dropped.update(other.dropped)

    def balanced(self) -> bool:
        return self.read + self.pieces_added == self.kept + sum(self.dropped.values())

    def as_dict(self) -> dict:
        return {**{name: getattr(self, name) for name in COUNTERS}, "dropped": dict(sorted(self.dropped.items()))}

    @classmethod
    def from_dict(cls, value: dict) -> FileTally:
        return cls(**{name: value[name] for name in COUNTERS}, dropped=Counter(value["dropped"]))


class DropLog:
    """Every dropped document as (source, byte offset, reason), in compact arrays (13 bytes a
    document, not a Python tuple each)."""

    def __init__(self) -> None:
        self.sources: list[str] = []
        self._codes: dict[str, int] = {}
        self.source_codes = array("i")
        self.offsets = array("q")
        self.reasons = array("B")

    def add(self, source: str, offset: int, reason: str) -> None:
        code = self._codes.get(source)
        if code is None:
            code = self._codes[source] = len(self.sources)
            self.sources.append(source)
        self.source_codes.append(code)
        self.offsets.append(offset)
        self.reasons.append(REASONS.index(reason))

    def __len__(self) -> int:
        return len(self.offsets)

    def table(self):  # -> pa.Table; Arrow is imported here so that readers of tallies need none
        import numpy as np
        import pyarrow as pa

        sources = pa.array(self.sources, pa.string()).take(pa.array(np.frombuffer(self.source_codes, np.int32)))
        reasons = pa.array(REASONS, pa.string()).take(pa.array(np.frombuffer(self.reasons, np.uint8)))
        offsets = pa.array(np.frombuffer(self.offsets, np.int64))
        return pa.Table.from_arrays([sources, offsets, reasons], schema=dropped_schema())


def dropped_schema():  # -> pa.Schema
    """Columns of a drop log and of stats/dropped.parquet."""
    import pyarrow as pa

    return pa.schema([("source", pa.string()), ("offset", pa.int64()), ("reason", pa.string())])


class Tally:
    """What happened to the documents of one chunk, per input file. `start(source)` names the
    file the following counts belong to (`file`)."""

    def __init__(self) -> None:
        self.files: dict[str, FileTally] = {}
        self.source = ""
        self.file = FileTally()
        self.drops = DropLog()
        self.problems: list[dict[str, str]] = []

    def start(self, source: str) -> None:
        self.source = source
        self.file = self.files.setdefault(source, FileTally())

    def drop(self, reason: str, offset: int) -> None:
        self.file.dropped[reason] += 1
        self.drops.add(self.source, offset, reason)

    def problem(self, message: str) -> None:
        """A reason to stop the run found in the current file; reading goes on with the next file."""
        self.problems.append({"source": self.source, "message": message})

    def total(self) -> FileTally:
        summed = FileTally()
        for figures in self.files.values():
            summed.add(figures)
        return summed

    def __getattr__(self, name: str) -> object:
        """The chunk's totals: tally.read, tally.dropped, … (the sum over its files)."""
        if name in COUNTERS or name == "dropped":
            return getattr(self.total(), name)
        raise AttributeError(name)

    def as_dict(self) -> dict:
        return {
            **self.total().as_dict(),
            "files": {source: figures.as_dict() for source, figures in sorted(self.files.items())},
            "problems": self.problems,
        }


def problems_message(tallies: Sequence[dict]) -> str | None:
    """The message that stops the run when any chunk recorded a problem: every bad file with
    what to do, or None."""
    problems = [problem for tally in tallies for problem in tally.get("problems", [])]
    if not problems:
        return None
    lines = [f"corpusmill: {len(problems)} input file(s) cannot be read as configured:"]
    lines += [f"  {problem['message']}" for problem in problems]
    return "\n".join(lines)


def merge(tallies: Sequence[dict], duplicates_by_file: dict[str, int], removed_by_file: dict[str, dict[str, int]] | None = None) -> dict:
    """The build's accounting from the chunks' tallies, the removed duplicates per file and the
    other removed documents per file and reason: totals, and the same figures per input file (a
    file cut into chunks is summed)."""
    files: dict[str, FileTally] = {}
    for tally in tallies:
        for source, figures in tally["files"].items():
            files.setdefault(source, FileTally()).add(FileTally.from_dict(figures))
    for source, count in duplicates_by_file.items():
        figures = files.setdefault(source, FileTally())
        figures.dropped["duplicate"] += count
        figures.kept -= count
    for source, reasons in (removed_by_file or {}).items():
        figures = files.setdefault(source, FileTally())
        figures.dropped.update(reasons)
        figures.kept -= sum(reasons.values())
    total = FileTally()
    for figures in files.values():
        total.add(figures)
    return {
        **total.as_dict(),
        "balanced": total.balanced() and all(figures.balanced() for figures in files.values()),
        "files": {source: figures.as_dict() for source, figures in sorted(files.items())},
    }


def main(argv: list[str] | None = None) -> None:
    import pyarrow as pa
    import pyarrow.compute as pc
    import pyarrow.parquet as pq

    from .storage import write_json, write_table

    run = job.start(argv, RULE, "Merge the chunks' tallies and drop logs with the removed duplicates.")
    layout, chunks = run.layout, run.chunks()
    tallies = [json.loads(Path(layout.tally(chunk)).read_text(encoding="utf-8")) for chunk in chunks]
    duplicates = pq.ParquetFile(layout.duplicates).read(columns=["source", "offset"], use_threads=False)
    per_file = pc.value_counts(duplicates["source"]).to_pylist() if duplicates.num_rows else []
    others = pq.ParquetFile(layout.hygiene_drops).read(columns=["source", "offset", "reason"], use_threads=False)
    removed_by_file: dict[str, dict[str, int]] = {}
    for group in others.group_by(["source", "reason"]).aggregate([("offset", "count")]).to_pylist():
        removed_by_file.setdefault(group["source"], {})[group["reason"]] = group["offset_count"]
    write_json(layout.accounting, merge(tallies, {entry["values"]: entry["counts"] for entry in per_file}, removed_by_file))
    logs = [pq.ParquetFile(layout.drop_log(chunk)).read(use_threads=False) for chunk in chunks]
    removed = pa.table({"source": duplicates["source"], "offset": duplicates["offset"], "reason": pa.array(["duplicate"] * duplicates.num_rows, pa.string())})
    dropped = pa.concat_tables([dropped_schema().empty_table(), *logs, removed.cast(dropped_schema()), others.cast(dropped_schema())])
    write_table(layout.dropped, dropped.sort_by([("source", "ascending"), ("offset", "ascending"), ("reason", "ascending")]))
    print(f"{dropped.num_rows} dropped documents recorded")


if __name__ == "__main__":
    main()
