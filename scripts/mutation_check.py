"""Mutation check of the core functions: mutmut's mutants, each run against the fast unit tests.

    python scripts/mutation_check.py                 # every module below
    python scripts/mutation_check.py split windows   # some of them

Needs mutmut (`pip install -e '.[mutation]'`); its settings (modules, test files, pytest
options) are in pyproject.toml under [tool.mutmut]. Starts from a fresh `mutants/` folder so
the test-to-function map always reflects the current tests, runs one mutant at a time (the
machine is shared), prints killed/total per module and every surviving mutant that
DEVELOPERS.md does not list as equivalent (with its diff), and exits 1 if there is one.
"""

from __future__ import annotations

import argparse
import datetime
import fnmatch
import os
import re
import shutil
import subprocess
import sys
from collections import Counter
from pathlib import Path

REPO = Path(__file__).resolve().parent.parent
# Functions under the check, per module of steps/; "Class.*" takes every method of a class.
SCOPE = {
    "split": ["fingerprint", "split_position", "assign_split", "doc_hash", "order_keys", "_mix"],
    "deduplicate": ["first_occurrences", "read_kept_counts", "write_kept_counts"],
    "windows": [
        "_segment_starts",
        "_within",
        "ngram_windows",
        "document_streams",
        "_block_starts",
        "document_blocks",
        "document_block_coverage",
        "CorpusBlocks.*",
    ],
    "vocabulary": ["choose_size", "build_vocabulary", "sort_by_frequency", "unknown_class", "merge_counts", "read_kept_sum", "build_counts"],
    "encoder": ["WordEncoder.__init__", "WordEncoder.ids"],
    "accounting": ["merge"],
    "reader": [
        "_worker_range",
        "_check_worker",
        "_single",
        "_numpy",
        "_Lists.*",
        "_Rows.*",
        "_Batcher.*",
        "Build._units",
        "Build._shuffled",
        "Build.tables",
        "Build.batches",
    ],
    "clean": ["normalize", "stream_safe", "clean_text", "rejection", "CleanOptions.*"],
    "chunks": ["chunk_schema", "row_weights", "removed_mask"],
    "formats": [
        "escape",
        "unescape",
        "_shown",
        "_lines",
        "_id_column",
        "Vocabulary.*",
        "read_vocabulary",
        "_raise_bad_line",
        "write_ids_table",
        "read_ids_table",
        "writing_ngram_totals",
        "read_ngram_totals",
        "KeptNgramTotals.*",
    ],
    "ngram_buckets": [
        "BucketStore.*",
        "next_to_last",
        "bucket_of",
        "records_of",
        "as_records",
        "as_totals",
        "merge_records",
        "add_records",
        "Counting.*",
        "hold_windows",
        "SplitTotals.*",
        "Group.*",
        "_written",
        "Part.*",
        "part_key",
        "split_bucket",
        "_save",
        "_load",
        "gather",
        "score",
    ],
    "ingest": ["is_blank_line", "blank_line_patterns", "_lines", "_complete_lines_end", "_each_line", "_line_runs", "_previous_line_blank"],
}
# Mutant names in DEVELOPERS.md's section "Equivalent mutants", each in backquotes.
LISTED = re.compile(r"`(steps\.[^`\s]+__mutmut_\d+)`")
DETECTED = {"killed", "timeout", "caught by type check"}
# Tests import the package as `corpusmill`, which an installed copy maps to the checkout's steps/;
# mutmut copies steps/ into mutants/, puts mutants/ first on the import path and names each
# mutant after its module there (steps.split.…). This package, written into mutants/, makes
# `corpusmill.X` that very module `steps.X`, so the tests call the mutated code under the names
# mutmut switches mutants by.
ALIAS = """import importlib
import pkgutil
import sys

import steps

for module in pkgutil.iter_modules(steps.__path__):
    sys.modules[f"corpusmill.{module.name}"] = importlib.import_module(f"steps.{module.name}")
sys.modules[__name__] = steps
"""


def patterns(module: str) -> list[str]:
    """mutmut's mutant-name globs for the functions of one module."""
    names = []
    for function in SCOPE[module]:
        if "." in function:
            owner, method = function.split(".")
            names.append(f"steps.{module}.xǁ{owner}ǁ{method}__mutmut_*")
        else:
            names.append(f"steps.{module}.x_{function}__mutmut_*")
    return names


def mutmut(*arguments: str, log: Path | None = None) -> str:
    """Run mutmut in the repository; its output goes to `log` when given, else is returned."""
    command = [sys.executable, "-m", "mutmut", *arguments]
    environment = {**os.environ, "HYPOTHESIS_PROFILE": "mutation"}
    if log is None:
        return subprocess.run(command, cwd=REPO, env=environment, check=True, capture_output=True, text=True).stdout
    with open(log, "w", encoding="utf-8") as handle:
        subprocess.run(command, cwd=REPO, env=environment, check=True, stdout=handle, stderr=subprocess.STDOUT)
    return ""


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description="Mutation check of corpusmill's core functions (mutmut).")
    parser.add_argument("modules", nargs="*", help=f"modules of steps/ to check: {', '.join(SCOPE)} (default: all)")
    parser.add_argument("--max-children", type=int, default=1, help="mutants run at once (default 1)")
    args = parser.parse_args(argv)
    unknown = sorted(set(args.modules) - set(SCOPE))
    if unknown:
        parser.error(f"unknown module {', '.join(unknown)}; choose from {', '.join(SCOPE)}")
    modules = args.modules or list(SCOPE)
    globs = [glob for module in modules for glob in patterns(module)]
    shutil.rmtree(REPO / "mutants", ignore_errors=True)
    (REPO / "mutants" / "corpusmill").mkdir(parents=True)
    (REPO / "mutants" / "corpusmill" / "__init__.py").write_text(ALIAS, encoding="utf-8")
    log = REPO / "mutants" / "run.log"
    print(f"mutmut run over {', '.join(modules)} (log: {log.relative_to(REPO)}) …", flush=True)
    mutmut("run", "--max-children", str(args.max_children), *globs, log=log)

    status = {}
    for line in mutmut("results", "--all", "true").splitlines():
        name, _, outcome = line.strip().rpartition(": ")
        if any(fnmatch.fnmatchcase(name, glob) for glob in globs):
            status[name] = outcome
    guide = (REPO / "DEVELOPERS.md").read_text(encoding="utf-8")
    equivalent = set(LISTED.findall(guide[guide.index("### Equivalent mutants") :]))
    today = datetime.date.today().isoformat()
    print(f"\n| module | killed | equivalent | other survivors | total | ({today}) |\n| --- | --- | --- | --- | --- | --- |")
    unexplained = []
    for module in modules:
        mine = {name: outcome for name, outcome in status.items() if name.startswith(f"steps.{module}.")}
        outcomes = Counter("killed" if o in DETECTED else "equivalent" if n in equivalent else "other" for n, o in mine.items())
        unexplained += sorted(n for n, o in mine.items() if o not in DETECTED and n not in equivalent)
        print(f"| {module} | {outcomes['killed']} | {outcomes['equivalent']} | {outcomes['other']} | {len(mine)} | |")
    stale = sorted(n for n in equivalent if n in status and status[n] in DETECTED)
    for name in unexplained:
        print(f"\n{status[name]}: {name}\n{mutmut('show', name).strip()}")
    for name in stale:
        print(f"\nlisted as equivalent in DEVELOPERS.md but now {status[name]}: {name}")
    return 1 if unexplained else 0


if __name__ == "__main__":
    raise SystemExit(main())
