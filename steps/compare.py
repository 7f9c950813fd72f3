"""`corpusmill compare OLD NEW`: what a rebuild changed, and why.

Why: a corpus is rebuilt as it grows and its settings are tuned; before training on the new
build a user must know which documents came and went, which changed split and for what reason,
what was dropped, how the ids moved, how coverage moved and which shard files were rewritten.

What each part reads (every file through steps.layout; each name a manifest gives resolves,
symlinks followed, inside its build folder, as in steps.audit and steps.reader):
- manifest.json: configuration, input files, drops by reason, every shard file's SHA-256;
- the vocabulary file it names (checked against its SHA-256): words in and out, ids moved;
- stats/coverage.json (checked against the manifest): coverage and unknown rate per split;
- per document, the prepared chunk tables' identity columns (id, file, offset, content hash,
  split) less the documents deduplication removed (interim/prepared, interim/removed): a build
  keeps nothing else that names a document's content and split. Chunks are compared a group at
  a time: the chunks of both builds whose files' ranges (in path order) overlap, so memory holds
  the identities of one file or pack (of a run of packs when the builds pack files differently),
  not of the whole corpus.

A document is matched by id; a document whose id is gone but whose text (content hash) is
still in the same file is `moved` (an edit earlier in the file shifted the byte offset that
path:offset ids hold). A matched document that changed split gets a reason, checked by drawing
its split again (steps.split.assign_split): its text (or id) changed, the split settings
changed, or both; a split that neither explains is `unexplained`: a bug.
"""

from __future__ import annotations

import argparse
import json
import re
import sys
from collections import Counter
from collections.abc import Iterator, Sequence
from contextlib import contextmanager
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq

from .chunks import IDENTITY_SCHEMA, kept_identities
from .formats import FormatError, Vocabulary, file_sha256, read_vocabulary
from .layout import RELATIVE, SPLITS
from .reader import MANIFEST, MAX_MANIFEST_BYTES, MAX_VOCABULARY_BYTES, SHARD_FIELDS, file_problem, parse_manifest, resolve_inside, structure_problem
from .split import assign_split
from .storage import write_text

# Every manifest field the comparison reads, with its type (steps.reader.structure_problem).
MANIFEST_FIELDS = {
    "config": {"split": {"key": ("content", "id"), "salt": str}, "units": ("word", "subword")},
    "inputs": [{"path": str, "sha256": str}],
    "vocabulary": {"file": str, "sha256": str, "ids_sha256": str, "size": int},
    "splits": {"*": {"shards": [SHARD_FIELDS]}},
    "files": {"*": str},
    "accounting": {"read": int, "kept": int, "dropped": {"*": int}},
}
COVERAGE_FIELDS = {"splits": {"*": {"documents": int, "tokens": int, "unknown_tokens": int}}}
MAX_COVERAGE_BYTES = 256 << 20
CHUNK_KEY = re.compile(r"[A-Za-z0-9_.+-]+")
REBUILD = "rerun the workflow (snakemake) on that build folder, or restore it from an intact copy"
KEEP_INTERIM = "keep the whole build folder, interim/ included, of a build you mean to compare (copy it before rebuilding in place)"
EDITED, ID_CHANGED, SETTINGS, UNEXPLAINED = "text edited", "id changed", "split settings changed", "unexplained"
COUNTS = ("added", "removed", "changed", "moved", "unchanged")


class CompareError(ValueError):
    """A build folder that cannot be compared; the message names the file and what to do."""


@dataclass(frozen=True)
class SplitSettings:
    """What draws a document's split: its key (content or id), the salt and the fractions."""

    key: str
    salt: str
    fractions: tuple[tuple[str, float], ...]

    def draw(self, doc_id: str, fingerprint: bytes) -> str:
        key = fingerprint if self.key == "content" else doc_id.encode("utf-8")
        return assign_split(key, self.salt, dict(self.fractions))

    def differences(self, other: SplitSettings) -> list[str]:
        names: dict[str, tuple[object, object]] = {
            "split.key": (self.key, other.key), "split.salt": (self.salt, other.salt), "split.fractions": (self.fractions, other.fractions),
        }  # fmt: skip
        return [name for name, (mine, theirs) in names.items() if mine != theirs]


@dataclass
class Side:
    """One build folder opened for comparison."""

    path: Path
    real_root: Path
    manifest: dict
    vocabulary: Vocabulary
    coverage: dict | None  # stats/coverage.json's splits, None when not kept
    coverage_problem: str | None = None

    @property
    def frozen(self) -> bool:
        """Whether the build reused a given vocabulary or subword model (vocabulary.frozen, subword.frozen)."""
        config = self.manifest["config"]
        return any(isinstance(config.get(section), dict) and config[section].get("frozen") for section in ("vocabulary", "subword"))

    @property
    def settings(self) -> SplitSettings:
        split = self.manifest["config"]["split"]
        return SplitSettings(split["key"], split["salt"], tuple(sorted(split["fractions"].items())))

    def inside(self, relative: str, limit: int | None = None) -> tuple[Path, str | None]:
        """A file of the build by its name relative to the folder, or why it may not be read."""
        target, problem = resolve_inside(self.real_root, relative)
        return target, problem or file_problem(target, limit)


def _fractions_problem(config: dict) -> str | None:
    fractions = config["split"].get("fractions")
    if not isinstance(fractions, dict) or set(fractions) != set(SPLITS):
        return "config.split.fractions: expected an object with train, dev and test"
    for name, value in fractions.items():
        if isinstance(value, bool) or not isinstance(value, (int, float)) or not 0 <= value <= 1:
            return f"config.split.fractions.{name}: expected a number from 0 to 1"
    return None


def open_side(path: str | Path) -> Side:
    """A build folder's manifest, vocabulary and coverage, each checked; CompareError otherwise."""
    root = Path(path)
    if not (root / MANIFEST).exists() and (root / "build" / MANIFEST).is_file():
        root = root / "build"  # the working folder of a build, as steps.reader.open_build accepts
    real_root = root.resolve()
    target, problem = resolve_inside(real_root, MANIFEST)
    problem = problem or file_problem(target, MAX_MANIFEST_BYTES)
    if problem == "missing":
        raise CompareError(f"{root / MANIFEST}: missing; name a finished build folder (the one holding manifest.json)")
    if problem is None:
        manifest, problem = parse_manifest(target.read_bytes(), MANIFEST_FIELDS)
        problem = problem or _fractions_problem(manifest["config"])
    if problem:
        raise CompareError(f"{root / MANIFEST}: {problem}; {REBUILD}")
    listed = manifest["vocabulary"]
    target, problem = resolve_inside(real_root, listed["file"])
    if problem := problem or file_problem(target, MAX_VOCABULARY_BYTES):
        raise CompareError(f"{root / MANIFEST}: vocabulary.file {json.dumps(listed['file'])} {problem}; {REBUILD}")
    if file_sha256(target) != listed["sha256"]:
        raise CompareError(f"{root / listed['file']}: its SHA-256 differs from manifest.json's; the file was replaced or edited; {REBUILD}")
    try:
        vocabulary = read_vocabulary(target)
    except (FormatError, UnicodeDecodeError) as error:
        raise CompareError(f"{error}; {REBUILD}") from None
    side = Side(root, real_root, manifest, vocabulary, None)
    side.coverage, side.coverage_problem = _read_coverage(side)
    return side


def _read_coverage(side: Side) -> tuple[dict | None, str | None]:
    """stats/coverage.json's per-split figures, checked against the manifest's SHA-256; or why not."""
    name = RELATIVE.coverage
    target, problem = side.inside(name, MAX_COVERAGE_BYTES)
    if problem:
        return None, f"{name} {problem}"
    recorded = side.manifest["files"].get(name)
    if recorded is not None and file_sha256(target) != recorded:
        return None, f"{name}: its SHA-256 differs from manifest.json's; the file was changed after the build"
    try:
        value = json.loads(target.read_bytes().decode("utf-8"))
    except (ValueError, RecursionError) as error:
        return None, f"{name}: not valid JSON ({str(error)[:80]})"
    if problem := structure_problem(value, COVERAGE_FIELDS):
        return None, f"{name}: {problem}"
    return value["splits"], None


# --- documents --------------------------------------------------------------------------------


def chunk_files(side: Side) -> tuple[list[tuple[str, Path, Path]], str | None]:
    """(chunk, prepared table, removed list) for every chunk the manifest's shards name, in
    manifest order; or the first reason the per-document records cannot be read."""
    chunks: list[str] = []
    for figures in side.manifest["splits"].values():
        for entry in figures["shards"]:
            if entry["chunk"] not in chunks:
                chunks.append(entry["chunk"])
    found = []
    for chunk in chunks:
        if not CHUNK_KEY.fullmatch(chunk):
            return [], f"manifest.json names the chunk {json.dumps(chunk[:80])}, which is not a chunk key; {REBUILD}"
        paths = []
        for name in (RELATIVE.prepared(chunk), RELATIVE.removed(chunk)):
            target, problem = side.inside(name)
            if problem:
                return [], f"{name} {problem}; the per-document comparison reads it: {KEEP_INTERIM}"
            paths.append(target)
        found.append((chunk, paths[0], paths[1]))
    return found, None


def _source_range(path: Path) -> tuple[str, str] | None:
    """The first and last file (in path order) a prepared table holds documents of; None if none."""
    with _readable(path):
        sources = pq.ParquetFile(path).read(columns=["source"], use_threads=False)["source"]
    if not len(sources):
        return None
    bounds = pc.min_max(sources).as_py()
    return bounds["min"], bounds["max"]


def chunk_groups(old: Sequence[tuple[str, Path, Path]], new: Sequence[tuple[str, Path, Path]]) -> Iterator[tuple[list, list]]:
    """The chunks of both builds in groups whose file ranges do not overlap another group's: a
    file's documents, in either build, all lie in one group, so each group compares alone."""
    spans = []
    for side, chunks in ((0, old), (1, new)):
        for chunk in chunks:
            if (span := _source_range(chunk[1])) is not None:
                spans.append((span[0], span[1], side, chunk))
    spans.sort(key=lambda item: (item[0], item[1], item[2], item[3][0]))
    group: tuple[list, list] = ([], [])
    last = ""
    for first, end, side, chunk in spans:
        if (group[0] or group[1]) and first > last:
            yield group
            group = ([], [])
        last = max(last, end) if group[0] or group[1] else end
        group[side].append(chunk)
    if group[0] or group[1]:
        yield group


def _identities(chunks: Sequence[tuple[str, Path, Path]]) -> pa.Table:
    """The kept documents' identities of some chunks."""
    tables = []
    for _, prepared, removed in chunks:
        with _readable(prepared, removed):
            tables.append(kept_identities(str(prepared), pq.ParquetFile(removed).read(use_threads=False)))
    return pa.concat_tables([IDENTITY_SCHEMA.empty_table(), *tables]).combine_chunks()


@contextmanager
def _readable(*paths: Path) -> Iterator[None]:
    """Turn a damaged Parquet file (or one lacking a column) into a CompareError naming the files."""
    try:
        yield
    except (pa.ArrowException, OSError, KeyError) as error:
        raise CompareError(f"{' or '.join(map(str, paths))} cannot be read ({error}); {REBUILD}") from None


@dataclass
class DocumentChanges:
    """Documents kept in the build (in its shards), old against new, per input file."""

    both_files: frozenset[str]  # files read by both builds: their added and removed ids are listed
    old_settings: SplitSettings
    new_settings: SplitSettings
    counts: dict[str, Counter[str]] = field(default_factory=dict)
    listed: dict[str, dict[str, list]] = field(default_factory=dict)
    split_changes: list[dict[str, str]] = field(default_factory=list)

    def _count(self, source: str, what: str, number: int) -> None:
        if source not in self.counts:
            self.counts[source] = Counter()
        self.counts[source][what] += number

    def _list(self, source: str, what: str, value: Any) -> None:
        """List an id (or a moved pair); added and removed ids only in files both builds read."""
        if what in ("changed", "moved") or source in self.both_files:
            self.listed.setdefault(source, {}).setdefault(what, []).append(value)

    def add_group(self, old: pa.Table, new: pa.Table) -> None:
        """Match one group's documents by id, then the rest by (file, content hash) in offset order."""
        self._match(old, new, old["doc_id"], new["doc_id"], by_id=True)

    def _match(self, old: pa.Table, new: pa.Table, old_keys: pa.ChunkedArray, new_keys: pa.ChunkedArray, by_id: bool) -> None:
        """Pair rows with equal keys (Arrow hash lookups; Python objects only for listed ids). By id: pairs
        are unchanged or changed, and the rest is matched again by text; by text: pairs are
        moved, and the rest is added and removed."""
        position = pc.index_in(new_keys, value_set=old_keys)
        paired = pc.is_valid(position)
        after = new.filter(paired)
        before = old.take(position.filter(paired))
        came = new.filter(pc.invert(paired))
        gone = old.filter(pc.invert(pc.is_in(old_keys, value_set=new_keys)))
        sources = after["source"]
        if by_id:
            same = pc.equal(before["fingerprint"], after["fingerprint"])
            for source, number in _value_counts(sources.filter(same)):
                self._count(source, "unchanged", number)
            edited = after.filter(pc.invert(same))
            self._count_all(edited, "changed")
        else:
            for source, number in _value_counts(sources):
                self._count(source, "moved", number)
            for source, earlier, later in zip(sources.to_pylist(), before["doc_id"].to_pylist(), after["doc_id"].to_pylist()):
                self._list(source, "moved", [earlier, later])
        differs = pc.not_equal(before["split"], after["split"])
        for old_row, new_row in zip(before.filter(differs).to_pylist(), after.filter(differs).to_pylist()):
            old_doc = (old_row["doc_id"], old_row["fingerprint"], old_row["split"])
            self._split_change(new_row["source"], old_doc, (new_row["doc_id"], new_row["fingerprint"], new_row["split"]))
        if by_id:
            gone, came = _ranked(gone), _ranked(came)
            self._match(gone, came, _text_keys(gone), _text_keys(came), by_id=False)
        else:
            self._count_all(gone, "removed")
            self._count_all(came, "added")

    def _count_all(self, table: pa.Table, what: str) -> None:
        """Count every row of `table` as `what` per file and list their ids (added and removed
        ones only in files both builds read)."""
        for source, number in _value_counts(table["source"]):
            self._count(source, what, number)
        if what in ("added", "removed"):
            table = table.filter(pc.is_in(table["source"], value_set=pa.array(sorted(self.both_files), pa.string())))
        for source, doc_id in zip(table["source"].to_pylist(), table["doc_id"].to_pylist()):
            self._list(source, what, doc_id)

    def _split_change(self, source: str, old_doc: tuple[str, bytes, str], new_doc: tuple[str, bytes, str]) -> None:
        reason = split_reason(old_doc, new_doc, self.old_settings, self.new_settings)
        self.split_changes.append({"doc_id": new_doc[0], "old_doc_id": old_doc[0], "source": source, "old": old_doc[2], "new": new_doc[2], "reason": reason})

    def to_json(self) -> dict:
        totals: Counter[str] = Counter()
        for counted in self.counts.values():
            totals.update(counted)
        files = {}
        for source in sorted(self.counts):
            entry: dict[str, Any] = {what: self.counts[source][what] for what in COUNTS}
            for what, values in sorted(self.listed.get(source, {}).items()):
                entry[f"{what}_ids"] = sorted(values)
            files[source] = entry
        changes = sorted(self.split_changes, key=lambda c: (c["source"], c["doc_id"]))
        return {
            "compared": True,
            "totals": {what: totals[what] for what in COUNTS},
            "files": files,
            "split_changes": {
                "total": len(changes),
                "by_reason": dict(sorted(Counter(c["reason"] for c in changes).items())),
                "documents": changes,
            },
        }


def _ranked(table: pa.Table) -> pa.Table:
    """The table ordered by (file, content hash, offset), with each row's `rank` among the rows
    of its file holding the same text (0 for the first by offset)."""
    ordered = table.sort_by([("source", "ascending"), ("fingerprint", "ascending"), ("offset", "ascending")])
    count = ordered.num_rows
    if count < 2:
        return ordered.append_column("rank", pa.array(np.zeros(count, np.int64)))
    same = pc.and_(
        pc.equal(ordered["source"].slice(1), ordered["source"].slice(0, count - 1)),
        pc.equal(ordered["fingerprint"].slice(1), ordered["fingerprint"].slice(0, count - 1)),
    ).to_numpy(zero_copy_only=False)
    starts = np.flatnonzero(np.concatenate([[True], ~same]))
    positions = np.arange(count)
    return ordered.append_column("rank", pa.array(positions - starts[np.searchsorted(starts, positions, side="right") - 1]))


def _text_keys(table: pa.Table) -> pa.ChunkedArray:
    """Per row, its file, content hash and rank as one binary key (a path holds no NUL byte and
    the hash has a fixed width, so the key is unambiguous)."""
    if not table.num_rows:
        return pa.chunked_array([], pa.binary())
    parts = [pc.cast(table["source"], pa.binary()), pc.cast(table["fingerprint"], pa.binary()), pc.cast(pc.cast(table["rank"], pa.string()), pa.binary())]
    return pc.binary_join_element_wise(*parts, b"\x00")


def _value_counts(column: pa.ChunkedArray | pa.Array) -> list[tuple[str, int]]:
    return [(entry["values"], entry["counts"]) for entry in pc.value_counts(column).to_pylist()]


def split_reason(old_doc: tuple[str, bytes, str], new_doc: tuple[str, bytes, str], old: SplitSettings, new: SplitSettings) -> str:
    """Why a document (id, content hash, split) changed split between two builds, found by
    drawing it again: the old document under the new settings landing where it did means the
    settings moved it; the new document under the old settings, its edit did. Splits that are
    not their own build's draw, or that nothing explains, are UNEXPLAINED."""
    if old.draw(old_doc[0], old_doc[1]) != old_doc[2] or new.draw(new_doc[0], new_doc[1]) != new_doc[2]:
        return UNEXPLAINED
    changed = old.differences(new)
    settings = f"{SETTINGS} ({', '.join(changed)})"
    edit = EDITED if old_doc[1] != new_doc[1] else ID_CHANGED if old_doc[0] != new_doc[0] else ""
    if changed and new.draw(old_doc[0], old_doc[1]) == new_doc[2]:
        return settings
    if edit and old.draw(new_doc[0], new_doc[1]) == new_doc[2]:
        return edit
    if changed and edit:
        return f"{edit} and {settings}"
    return UNEXPLAINED


def compare_documents(old: Side, new: Side) -> dict:
    """The per-document part of the comparison, or why it could not be made."""
    old_chunks, problem = chunk_files(old)
    new_chunks, other = chunk_files(new)
    if problem or other:
        return {"compared": False, "reason": f"{old.path if problem else new.path}: {problem or other}"}
    both_files = frozenset(i["path"] for i in old.manifest["inputs"]) & frozenset(i["path"] for i in new.manifest["inputs"])
    changes = DocumentChanges(both_files, old.settings, new.settings)
    try:
        for old_group, new_group in chunk_groups(old_chunks, new_chunks):
            changes.add_group(_identities(old_group), _identities(new_group))
    except CompareError as error:
        return {"compared": False, "reason": str(error)}
    return changes.to_json()


# --- the build-wide parts ---------------------------------------------------------------------


def _flatten(value: Any, prefix: str = "") -> dict[str, Any]:
    if isinstance(value, dict) and value:
        flat: dict[str, Any] = {}
        for key, inner in value.items():
            flat.update(_flatten(inner, f"{prefix}.{key}" if prefix else str(key)))
        return flat
    return {prefix: value}


def compare_config(old: dict, new: dict) -> dict[str, list]:
    """Every configuration option (dotted name) whose value differs: [old, new]; null when absent."""
    before, after = _flatten(old), _flatten(new)
    return {name: [before.get(name), after.get(name)] for name in sorted(set(before) | set(after)) if before.get(name) != after.get(name)}


def compare_inputs(old: list[dict], new: list[dict]) -> dict:
    """Input files added, removed and edited (SHA-256 differs), and how many are the same."""
    before, after = {i["path"]: i["sha256"] for i in old}, {i["path"]: i["sha256"] for i in new}
    return {
        "added": sorted(set(after) - set(before)),
        "removed": sorted(set(before) - set(after)),
        "edited": sorted(p for p in set(before) & set(after) if before[p] != after[p]),
        "unchanged": sum(1 for p in set(before) & set(after) if before[p] == after[p]),
    }


def compare_drops(old: dict, new: dict) -> dict:
    """Documents read, kept and dropped by reason, before and after (from the accountings)."""
    reasons = sorted(set(old["dropped"]) | set(new["dropped"]))
    return {
        "read": [old["read"], new["read"]],
        "kept": [old["kept"], new["kept"]],
        "dropped": {reason: [old["dropped"].get(reason, 0), new["dropped"].get(reason, 0)] for reason in reasons},
    }


def compare_vocabularies(old: Vocabulary, new: Vocabulary, old_frozen: bool, new_frozen: bool) -> dict:
    """Tokens entering and leaving; `moved`: tokens in both whose id differs; `remapped`: id
    values 0..max(|V|)-1 whose token differs (or that exist in one vocabulary only), i.e. the
    ids whose meaning an old shard would get wrong under the new vocabulary."""
    result: dict[str, Any] = {
        "units": [old.units, new.units],
        "size": [old.size, new.size],
        "frozen": [old_frozen, new_frozen],
        "same_ids": old.ids_digest == new.ids_digest,
    }
    if old.units != new.units:
        return {**result, "compared": False, "reason": f"units differ ({old.units} → {new.units}): ids of words and of pieces do not correspond"}
    before, after = old.index, new.index
    entered = sorted(set(after) - set(before), key=lambda t: (after[t], t))
    left = sorted(set(before) - set(after), key=lambda t: (before[t], t))
    moved = sum(1 for token, number in after.items() if before.get(token, number) != number)
    remapped = sum(1 for number in range(max(old.size, new.size)) if number >= old.size or number >= new.size or old.tokens[number] != new.tokens[number])
    return {**result, "compared": True, "entered": entered, "left": left, "moved": moved, "remapped": remapped}


def _coverage_figures(splits: dict | None) -> dict[str, dict]:
    out = {}
    for split, figures in (splits or {}).items():
        rate = figures["unknown_tokens"] / figures["tokens"] if figures["tokens"] else 0.0
        out[split] = {"documents": figures["documents"], "tokens": figures["tokens"], "unknown_tokens": figures["unknown_tokens"],
                      "unknown_rate": round(rate, 6), "coverage": round(1 - rate, 6)}  # fmt: skip
    return out


def compare_coverage(old: Side, new: Side) -> dict:
    """Per split: tokens, unknown tokens, unknown rate and coverage (1 - unknown rate), before and after."""
    problems = [f"{side.path}: {side.coverage_problem}" for side in (old, new) if side.coverage_problem]
    if problems:
        return {"compared": False, "reason": "; ".join(problems)}
    before, after = _coverage_figures(old.coverage), _coverage_figures(new.coverage)
    return {"compared": True, "splits": {s: {"old": before.get(s), "new": after.get(s)} for s in sorted(set(before) | set(after))}}


def compare_shards(old: dict, new: dict) -> dict:
    """Per split and kind, shard files (by name) unchanged, changed (SHA-256 differs), added, removed."""

    def files(manifest: dict) -> dict[tuple[str, str], dict[str, str]]:
        found: dict[tuple[str, str], dict[str, str]] = {}
        for split, figures in manifest["splits"].items():
            for entry in figures["shards"]:
                found.setdefault((split, entry["kind"]), {})[entry["file"]] = entry["sha256"]
        return found

    before, after = files(old), files(new)
    result: dict[str, dict] = {}
    for split, kind in sorted(set(before) | set(after)):
        a, b = before.get((split, kind), {}), after.get((split, kind), {})
        result.setdefault(split, {})[kind] = {
            "unchanged": sum(1 for f in set(a) & set(b) if a[f] == b[f]),
            "changed": sorted(f for f in set(a) & set(b) if a[f] != b[f]),
            "added": sorted(set(b) - set(a)),
            "removed": sorted(set(a) - set(b)),
        }
    return result


def compare_builds(old_path: str | Path, new_path: str | Path) -> dict:
    """The whole comparison as plain data (what --json writes)."""
    old, new = open_side(old_path), open_side(new_path)
    report = {
        "old": str(old_path),
        "new": str(new_path),
        "config": compare_config(old.manifest["config"], new.manifest["config"]),
        "inputs": compare_inputs(old.manifest["inputs"], new.manifest["inputs"]),
        "documents": compare_documents(old, new),
        "drops": compare_drops(old.manifest["accounting"], new.manifest["accounting"]),
        "vocabulary": compare_vocabularies(old.vocabulary, new.vocabulary, old.frozen, new.frozen),
        "coverage": compare_coverage(old, new),
        "shards": compare_shards(old.manifest, new.manifest),
    }
    report["changed"] = _changed(report, old.vocabulary.sha256 != new.vocabulary.sha256)
    return report


def _changed(report: dict, vocabulary_file_differs: bool) -> list[str]:
    """The parts of the comparison (other than the configuration) that differ, or that could not
    be compared (then no one-line "no change" is claimed)."""
    parts = []
    inputs = report["inputs"]
    if inputs["added"] or inputs["removed"] or inputs["edited"]:
        parts.append("inputs")
    documents = report["documents"]
    if not documents["compared"]:
        parts.append("documents (not compared)")
    elif any(documents["totals"][w] for w in ("added", "removed", "changed", "moved")):
        parts.append("documents")
    if documents["compared"] and documents["split_changes"]["total"]:
        parts.append("splits")
    drops = report["drops"]
    if any(a != b for a, b in [drops["read"], drops["kept"], *drops["dropped"].values()]):
        parts.append("drops")
    if vocabulary_file_differs:
        parts.append("vocabulary")
    coverage = report["coverage"]
    if not coverage["compared"]:
        parts.append("coverage (not compared)")
    elif any(s["old"] != s["new"] for s in coverage["splits"].values()):
        parts.append("coverage")
    if any(k["changed"] or k["added"] or k["removed"] for kinds in report["shards"].values() for k in kinds.values()):
        parts.append("shards")
    return parts


# --- the account a person reads --------------------------------------------------------------


def _shown(values: Sequence[Any], limit: int) -> str:
    text = ", ".join(str(v) for v in values[:limit])
    return text + (f", … (+{len(values) - limit:,} more)" if len(values) > limit else "")


def _pair(values: Sequence[Any]) -> str:
    a, b = values
    return f"{a:,}" if a == b else f"{a:,} → {b:,}"


def render(report: dict, limit: int = 10) -> str:
    """The comparison as plain text: one line when nothing differs, else one block per part."""
    config = report["config"]
    options = f" (configuration differs in {_shown(list(config), limit)})" if config else ""
    if not report["changed"]:
        return f"no change: {report['old']} and {report['new']} hold the same documents, splits, drops, ids, coverage and shard files{options}"
    lines = [f"compare {report['old']} (old) → {report['new']} (new); differs in: {', '.join(report['changed'])}"]
    if config:
        lines.append("configuration:")
        lines += [f"  {name}: {json.dumps(a)} → {json.dumps(b)}" for name, (a, b) in list(config.items())[:limit]]
        if len(config) > limit:
            lines.append(f"  … (+{len(config) - limit} more options)")
    inputs = report["inputs"]
    counted = ", ".join(f"{len(inputs[what])} {what}" for what in ("added", "removed", "edited"))
    lines.append(f"input files: {counted}, {inputs['unchanged']} unchanged")
    for what in ("added", "removed", "edited"):
        if inputs[what]:
            lines.append(f"  {what}: {_shown(inputs[what], limit)}")
    lines += _render_documents(report["documents"], limit)
    drops = report["drops"]
    lines.append(f"documents read {_pair(drops['read'])}, kept {_pair(drops['kept'])}; dropped by reason (old → new):")
    lines += [f"  {reason:<14} {a:,} → {b:,}" for reason, (a, b) in drops["dropped"].items()] or ["  none"]
    lines += _render_vocabulary(report["vocabulary"], limit)
    coverage = report["coverage"]
    if coverage["compared"]:
        lines.append("coverage (share of tokens in the vocabulary) and unknown rate per split, old → new:")
        for split, sides in coverage["splits"].items():
            a, b = (sides[k] or {"coverage": 0.0, "unknown_rate": 0.0, "tokens": 0} for k in ("old", "new"))
            lines.append(f"  {split:<5} coverage {a['coverage']:.4%} → {b['coverage']:.4%}, unknown {a['unknown_rate']:.4%} → "
                         f"{b['unknown_rate']:.4%}, tokens {_pair([a['tokens'], b['tokens']])}")  # fmt: skip
    else:
        lines.append(f"coverage: not compared: {coverage['reason']}")
    lines.append("shard files (by SHA-256 in the manifests):")
    for split, kinds in report["shards"].items():
        for kind, files in kinds.items():
            parts = [f"{files['unchanged']} unchanged"] + [f"{len(files[w])} {w}" for w in ("changed", "added", "removed") if files[w]]
            lines.append(f"  {split:<5} {kind:<6} {', '.join(parts)}")
    return "\n".join(lines)


def _render_documents(documents: dict, limit: int) -> list[str]:
    if not documents["compared"]:
        return [f"documents: not compared: {documents['reason']}"]
    totals = documents["totals"]
    lines = ["documents kept in the build, per input file: added, removed, changed (same id, other text), "
             "moved (same text, other id), unchanged",  # fmt: skip
             f"  {'(all files)':<40} +{totals['added']:,} -{totals['removed']:,} ~{totals['changed']:,} "
             f"moved {totals['moved']:,} same {totals['unchanged']:,}"]  # fmt: skip
    for source, entry in documents["files"].items():
        if entry["added"] or entry["removed"] or entry["changed"] or entry["moved"]:
            lines.append(f"  {source:<40} +{entry['added']:,} -{entry['removed']:,} ~{entry['changed']:,} moved {entry['moved']:,} same {entry['unchanged']:,}")
            if entry.get("changed_ids"):
                lines.append(f"    changed: {_shown(entry['changed_ids'], limit)}")
    changes = documents["split_changes"]
    lines.append(f"documents whose split changed: {changes['total']:,}")
    for reason, number in changes["by_reason"].items():
        lines.append(f"  {reason}: {number:,}")
    for change in changes["documents"][:limit]:
        lines.append(f"    {change['doc_id']}: {change['old']} → {change['new']} ({change['reason']})")
    if changes["total"] > limit:
        lines.append(f"    … (+{changes['total'] - limit:,} more; --json lists all)")
    return lines


def _render_vocabulary(vocabulary: dict, limit: int) -> list[str]:
    units = vocabulary["units"]
    frozen = ["frozen" if f else "counted" for f in vocabulary["frozen"]]
    head = f"vocabulary: {units[0]} units, {frozen[0]}, {vocabulary['size'][0]:,} ids → {units[1]} units, {frozen[1]}, {vocabulary['size'][1]:,} ids"
    if not vocabulary["compared"]:
        return [head, f"  not compared id by id: {vocabulary['reason']}"]
    return [
        head + ("; the ids are the same" if vocabulary["same_ids"] else ""),
        f"  entered: {len(vocabulary['entered']):,}" + (f" ({_shown(vocabulary['entered'], limit)})" if vocabulary["entered"] else ""),
        f"  left: {len(vocabulary['left']):,}" + (f" ({_shown(vocabulary['left'], limit)})" if vocabulary["left"] else ""),
        f"  moved (same token, other id): {vocabulary['moved']:,}",
        f"  remapped (ids whose token differs, or that one vocabulary lacks): {vocabulary['remapped']:,}",
    ]


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(
        prog="corpusmill compare",
        description="What changed between two builds: documents, splits, drops, vocabulary ids, coverage and shard files.",
    )
    parser.add_argument("old", help="the earlier build folder (holding manifest.json)")
    parser.add_argument("new", help="the later build folder")
    parser.add_argument("--json", metavar="PATH", help="also write the comparison as JSON to PATH ('-': print the JSON instead of the text)")
    parser.add_argument("--show", type=int, default=10, metavar="K", help="list at most K items (ids, words, files) per line of the text (default 10)")
    args = parser.parse_args(argv)
    try:
        report = compare_builds(args.old, args.new)
    except CompareError as error:
        raise SystemExit(f"corpusmill: {error}") from None
    text = json.dumps(report, indent=2, sort_keys=True, ensure_ascii=False)
    if args.json == "-":
        print(text)
    else:
        print(render(report, max(args.show, 0)))
        if args.json:
            write_text(args.json, text + "\n")
    documents = report["documents"]
    unexplained = documents["split_changes"]["by_reason"].get(UNEXPLAINED, 0) if documents["compared"] else 0
    if unexplained:
        print(
            f"corpusmill: BUG: {unexplained} document(s) changed split with neither an edit nor a split setting to explain it "
            "(or a split that is not its build's own draw); please report it with both manifests",
            file=sys.stderr,
        )
        raise SystemExit(3)


if __name__ == "__main__":
    main()
