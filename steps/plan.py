"""The build plan the Snakefile reads: inputs, chunks, each rule's options and code hash.

Everything here is decided from the configuration and the corpus folder's listing and file
sizes, before any job runs. Corpus files are not handed to Snakemake as inputs: a file name may
hold characters Snakemake reads as wildcards (`{x}`) or path variables (`<x>`), and a pack of
thousands of small files would not fit on one command line. Instead the plan writes one small
JSON file per chunk (`Layout.chunk_plan`) naming its files with their size and modification
time; that file is the prepare job's input, so a changed file reruns its own chunk. It also
writes the chunk list, the corpus survey (`Layout.corpus_plan`: the files read, left
unselected, excluded or refused) and each rule's options file: the configuration sections its
step module declares it reads (SECTIONS), so changing an option reruns exactly the rules that
read it. Each is rewritten only when its content changes.

A rule's code hash covers the module it runs and every step module that one imports, found
from the sources' import statements, and the package, steps/run.py and its imports that every
job starts with: editing any of them reruns the rule. Nothing here imports
numpy or Arrow, as the Snakemake process runs it.
"""

from __future__ import annotations

import ast
import hashlib
import json
import os
import re
import stat
from dataclasses import dataclass
from pathlib import Path
from typing import cast

from . import ingest
from .formats import VOCABULARY_HEADER, enabled_kinds
from .layout import SPLITS, Layout

STEPS_DIR = Path(__file__).resolve().parent

# The rules of the workflow, each named after the step module it runs; a module with several
# entries runs as several rules named `<module>_<entry>` (rules/*.smk).
RULES = (
    "abbreviations", "prepare", "deduplicate", "subword_sample", "subword_train", "subword_model", "vocabulary", "vocabulary_frozen", "shards",
    "vocabulary_table", "accounting", "growth", "coverage", "baseline", "manifest", "croissant", "datasheet", "report",
)  # fmt: skip


def module_of(rule: str) -> str:
    """The step module a rule runs: its name, or the longest module name it starts with."""
    if (STEPS_DIR / f"{rule}.py").exists():
        return rule
    candidates = [name for name in _module_names() if rule.startswith(name + "_")]
    if not candidates:
        raise KeyError(f"no step module runs rule {rule!r}")
    return max(candidates, key=len)


def _module_names() -> list[str]:
    return sorted(path.stem for path in STEPS_DIR.glob("*.py"))


def _source(module: str) -> str:
    return (STEPS_DIR / f"{module}.py").read_text(encoding="utf-8")


# Relative imports at any depth of a file, parenthesised or not. A scan rather than a parse:
# every Snakemake start computes every rule's hash, and parsing each module's syntax tree cost
# most of that start. A line inside a string that reads like an import would only add a module.
_RELATIVE_IMPORT = re.compile(r"^[ \t]*from[ \t]+\.(\w*)(?:\.\w+)*[ \t]+import[ \t]+(\([^)]*\)|[^\n]*)", re.M)


def imports_of(module: str) -> set[str]:
    """The step modules `module` imports (relative imports, at any depth of the file)."""
    found = set()
    for package_module, names in _RELATIVE_IMPORT.findall(_source(module)):
        if package_module:
            found.add(package_module)
            continue
        for name in re.sub(r"#[^\n]*", "", names).strip("()").split(","):
            if name.strip():
                found.add(name.split()[0])
    found.discard(module)  # a usage example in its own docstring
    return found


def _top_level_constant(module: str, name: str) -> object:
    """The literal value assigned to `name` at the top level of a step module's source: the
    assignment's lines, parsed alone."""
    source = _source(module)
    match = re.search(rf"^{name}\b[^=\n]*=", source, re.M)
    if match:
        lines = source[match.start() :].splitlines()
        for end in range(1, len(lines) + 1):
            try:
                statement = ast.parse("\n".join(lines[:end])).body[0]
            except SyntaxError:
                continue
            if isinstance(statement, (ast.Assign, ast.AnnAssign)) and statement.value is not None:
                return ast.literal_eval(statement.value)
    raise KeyError(f"steps/{module}.py defines no {name}")


def import_closure(module: str) -> list[str]:
    """`module` and every step module it imports, directly or not, sorted."""
    seen, pending = set(), [module]
    while pending:
        name = pending.pop()
        if name not in seen:
            seen.add(name)
            pending.extend(imports_of(name) - seen)
    return sorted(seen)


Sections = tuple[str, ...] | str | dict[str, tuple[str, ...]]


def sections_of(module: str) -> Sections:
    """The configuration sections a step module declares it reads (its SECTIONS: for a module
    whose entries read different options, a dict by rule), read from its source, so the
    workflow process imports no step module's dependencies."""
    try:
        return cast(Sections, _top_level_constant(module, "SECTIONS"))
    except KeyError:
        raise KeyError(f"steps/{module}.py declares no SECTIONS") from None


def code_hash(rule: str) -> str:
    """SHA-256 over the source of the module a rule runs, every step module it imports, and
    what every job starts with (the package, steps/run.py and what it imports): editing any of
    them reruns the rule."""
    hasher = hashlib.sha256()
    for module in sorted({"__init__", *import_closure("run"), *import_closure(module_of(rule))}):
        hasher.update(module.encode() + b"\0" + (STEPS_DIR / f"{module}.py").read_bytes())
    return hasher.hexdigest()[:16]


def rule_options(config: dict, rule: str) -> dict:
    """The configuration a rule's module reads: whole sections, or single options named
    `section.option` (so another option of that section does not rerun the rule)."""
    sections = sections_of(module_of(rule))
    if isinstance(sections, dict):
        sections = sections[rule]
    if sections == "all":
        return dict(config)
    options: dict = {}
    for name in sections:
        section, _, option = name.partition(".")
        if option:
            options.setdefault(section, {})[option] = config[section][option]
        else:
            options[section] = config[section]
    return options


# Largest file accepted as a frozen vocabulary or subword model: far above any real one, and
# low enough that a wrong path (a disk image, /dev/zero) stops with a message, not a hang.
MAX_FROZEN_BYTES = 1 << 30


def frozen_file(field: str, value: str, header: str | None) -> str:
    """SHA-256 of a frozen vocabulary or model after checking, before any job, that it is a
    regular file of sane size (and, for a vocabulary, that it starts with the header); raise
    CorpusError naming the field and the fix. The digest reruns what depends on the file
    when its content changes."""
    fix = f"give the path (relative to the working directory) of an existing file, or set {field}: null"
    try:
        info = os.stat(value)
    except OSError as error:
        raise ingest.CorpusError(f"{field} = {value!r}: {(error.strerror or str(error)).lower()}; {fix}") from None
    if not stat.S_ISREG(info.st_mode):
        raise ingest.CorpusError(f"{field} = {value!r}: not a regular file; {fix}")
    if info.st_size > MAX_FROZEN_BYTES:
        raise ingest.CorpusError(f"{field} = {value!r}: {info.st_size:,} bytes, over the limit of {MAX_FROZEN_BYTES:,}; {fix}")
    hasher = hashlib.sha256()
    with open(value, "rb") as handle:
        first = handle.readline(len(header or "") + 2)
        if header is not None and first.rstrip(b"\r\n") != header.encode():
            raise ingest.CorpusError(f"{field} = {value!r}: line 1 is not the header {header!r}; is it the vocabulary.tsv of a corpusmill build?")
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
    kinds: list[str]
    layout: Layout
    frozen: dict[str, str]

    @classmethod
    def from_config(cls, config: dict) -> Plan:
        corpus = config["corpus"]
        root = corpus["root"]
        survey = ingest.survey_corpus(root, corpus["include"], corpus["exclude"], corpus["outside_links"] == "follow")
        if not survey.sources:
            raise ingest.CorpusError(f"{root}: no input files match corpus.include {corpus['include']}; check corpus.root and the patterns")
        chunk_bytes = int(corpus["chunk_mb"] * (1 << 20))
        pack_bytes = int(corpus["pack_mb"] * (1 << 20))
        chunks = ingest.plan_chunks(root, survey.sources, chunk_bytes, corpus["text_unit"], pack_bytes)
        layout = Layout(config["build_dir"])
        return cls(config, root, survey, chunks, enabled_kinds(config["windows"]), layout, frozen_digests(config))

    @property
    def sources(self) -> list[str]:
        return self.survey.sources

    @property
    def chunk_keys(self) -> list[str]:
        return [c.key for c in self.chunks]

    def shards_of(self, chunk: str) -> dict[str, str]:
        """The shard files one chunk's job writes, by `<split>_<kind>` (Snakemake output names)."""
        return {f"{split}_{kind}": self.layout.shard(split, kind, chunk) for split in SPLITS for kind in self.kinds}

    def provenance_of(self, chunk: str) -> dict[str, str]:
        """The provenance tables one chunk's shard job writes beside its shard files."""
        tables = {f"{split}_documents": self.layout.provenance_documents(split, chunk) for split in SPLITS}
        return tables | {f"{split}_{kind}_provenance": self.layout.provenance(split, kind, chunk) for split in SPLITS for kind in self.kinds}

    def all_shards(self) -> list[str]:
        return [path for chunk in self.chunk_keys for path in self.shards_of(chunk).values()]

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

    def write_files(self) -> None:
        """Write the chunk list and plans, the corpus survey and every rule's options, each only
        when its content changed (so its time, a rerun trigger, stays)."""
        write_if_changed(self.layout.chunk_list, self.chunk_keys)
        for chunk in self.chunks:
            write_if_changed(self.layout.chunk_plan(chunk.key), chunk_record(self.root, chunk))
        write_if_changed(self.layout.corpus_plan, self.corpus_record())
        for rule in RULES:
            write_if_changed(self.layout.options(rule), rule_options(self.config, rule))


def chunk_record(root: str | Path, chunk: ingest.Chunk) -> dict:
    """What one prepare job reads: its files with size and modification time (so a changed
    file changes this record), and its place in a file cut into chunks."""
    files = []
    for source in chunk.sources:
        info = (Path(root) / source).stat()
        files.append([source, info.st_size, info.st_mtime_ns])
    return {"key": chunk.key, "index": chunk.index, "count": chunk.count, "files": files}


def write_if_changed(path: str | Path, value: object) -> None:
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


def module_constant(module: str, name: str) -> object:
    """A constant a step module defines (e.g. the threads a step runs), read from its source."""
    return _top_level_constant(module, name)
