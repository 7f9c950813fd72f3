"""steps.plan: rerun triggers computed from the code and the configuration, not listed by hand.

Outside references: what the jobs of real builds imported (Python's own import-time report,
PYTHONPROFILEIMPORTTIME=1, in each job's log); what the Snakemake process's project code
imported (an import hook around Snakemake's own entry); and Snakemake's own dry run
(`-n --quiet rules`) for which jobs a changed option reruns.
"""

from __future__ import annotations

import copy
import json
import os
import re
import shutil
import subprocess
import sys
from collections.abc import Iterator
from pathlib import Path

import pytest
import yaml

from conftest import REPO, scenario
from corpusmill import plan, settings

# Runs Snakemake's own entry with every import statement executed by the project's code (the
# Snakefile, rules/*.smk, steps/*.py) recorded: (file, imported name, from-list, level, module).
DRIVER = """
import atexit, builtins, json, os, runpy, sys
project, record, seen = os.environ["PROJECT_DIR"], os.environ["IMPORT_RECORD"], []
original = builtins.__import__

def recording(name, globals=None, locals=None, fromlist=(), level=0):
    frame = sys._getframe(1)
    if frame.f_code.co_filename.startswith(project):
        seen.append([frame.f_code.co_filename, name, list(fromlist or ()), level, frame.f_globals.get("__name__")])
    return original(name, globals, locals, fromlist, level)

builtins.__import__ = recording
atexit.register(lambda: open(record, "w").write(json.dumps(seen)))
sys.argv = ["snakemake", *sys.argv[1:]]
runpy.run_module("snakemake", run_name="__main__", alter_sys=True)
"""
HEAVY = ("numpy", "pyarrow", "pandas")


def traced_run(directory: Path, overrides: dict, *extra: str) -> subprocess.CompletedProcess:
    """The workflow run as conftest.run_workflow runs it, its imports traced twice over."""
    directory.mkdir(parents=True, exist_ok=True)
    (directory / "override.yaml").write_text(yaml.safe_dump(overrides), encoding="utf-8")
    (directory / "driver.py").write_text(DRIVER, encoding="utf-8")
    command = [sys.executable, str(directory / "driver.py"), "--snakefile", str(REPO / "Snakefile"), "--directory", str(directory),
               "--cores", "2", "--configfile", str(directory / "override.yaml"), *extra]  # fmt: skip
    env = {**os.environ, "PYTHONHASHSEED": "0", "PYTHONPROFILEIMPORTTIME": "1", "PROJECT_DIR": str(REPO), "IMPORT_RECORD": str(directory / "imports.json")}
    result = subprocess.run(command, capture_output=True, text=True, env=env)
    assert result.returncode == 0, result.stderr[-4000:]
    return result


WORD = scenario("demo")
SUBWORD = scenario("subword", {"subword": {"max_sentences": 5000}, "segment": {"learn_abbreviations": True}})


@pytest.fixture(scope="module")
def traced(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Path]:
    """A word build, a copy of it built again with its own vocabulary frozen, and a subword
    build (learning abbreviations: every rule runs in one of them), each with its import traces."""
    base = tmp_path_factory.mktemp("traced")
    traced_run(base / "word", WORD)
    shutil.copytree(base / "word", base / "frozen", symlinks=True)
    (base / "frozen.tsv").write_bytes((base / "word" / "build" / "vocabulary.tsv").read_bytes())
    traced_run(base / "frozen", {**WORD, "vocabulary": {"frozen": str(base / "frozen.tsv")}})
    traced_run(base / "subword", SUBWORD)
    return {"word": base / "word", "frozen": base / "frozen", "subword": base / "subword"}


def job_imports(directory: Path) -> dict[str, set[str]]:
    """Per rule, the step modules its jobs loaded: the import-time lines of every job log
    (steps.x → x, the package → __init__), and steps/run.py and the rule's module, which every
    job's command runs (`python -m steps.run MODULE`: runpy and importlib load them without an
    import-time line)."""
    found: dict[str, set[str]] = {}
    for log in (directory / "build" / "logs").glob("*/*.log"):
        rule = log.parent.name
        names = re.findall(r"^import time:.*\|\s*steps(?:\.(\w+))?\s*$", log.read_text(encoding="utf-8"), re.M)
        found.setdefault(rule, {"run", plan.module_of(rule)}).update(name or "__init__" for name in names)
    return found


def edited_copy(tmp_path: Path) -> Path:
    copied = tmp_path / "steps"
    shutil.copytree(REPO / "steps", copied, ignore=shutil.ignore_patterns("__pycache__"))
    return copied


def test_every_rule_ran_in_the_traced_builds(traced: dict[str, Path]) -> None:
    ran = {rule for build in traced.values() for rule in job_imports(build)}
    assert ran == set(plan.RULES)


def test_editing_any_module_a_job_imported_changes_its_rules_code_hash(traced: dict[str, Path], tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    """Each module a rule's jobs loaded, edited in a copy of steps/ (a comment appended), gives
    that rule another code hash; the hash of the unedited copy is the repository's."""
    observed: dict[str, set[str]] = {}
    for build in traced.values():
        for rule, modules in job_imports(build).items():
            observed.setdefault(rule, set()).update(modules)
    original = {rule: plan.code_hash(rule) for rule in plan.RULES}
    copied = edited_copy(tmp_path)
    monkeypatch.setattr(plan, "STEPS_DIR", copied)
    assert {rule: plan.code_hash(rule) for rule in plan.RULES} == original
    for rule, modules in sorted(observed.items()):
        assert len(modules) > 3, rule
        for module in sorted(modules):
            path = copied / f"{module}.py"
            text = path.read_text(encoding="utf-8")
            path.write_text(text + "\n# edited\n", encoding="utf-8")
            try:
                assert plan.code_hash(rule) != original[rule], f"editing steps/{module}.py leaves rule {rule}'s code hash"
            finally:
                path.write_text(text, encoding="utf-8")


@pytest.mark.parametrize(("rule", "module"), [("prepare", "report"), ("report", "prepare"), ("accounting", "shards"), ("growth", "encoder")])
def test_editing_a_module_a_rule_never_imports_leaves_its_code_hash(rule: str, module: str, tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    """The hash is not the whole package's: editing the report renderer reruns no prepare job."""
    before = plan.code_hash(rule)
    copied = edited_copy(tmp_path)
    monkeypatch.setattr(plan, "STEPS_DIR", copied)
    (copied / f"{module}.py").write_text((copied / f"{module}.py").read_text(encoding="utf-8") + "\n# edited\n", encoding="utf-8")
    assert plan.code_hash(rule) == before


def test_the_import_scan_finds_every_form_of_relative_import(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    """Parenthesised lists over several lines with comments, aliases, imports inside functions and
    submodule imports all count; absolute imports, the module itself and names in comments do not."""
    (tmp_path / "sample.py").write_text(
        "import numpy\n"
        "from .alpha import thing\n"
        "from . import beta, gamma as renamed  # not delta\n"
        "from . import (\n    epsilon,  # the first\n    zeta as z,\n)\n"
        "from .eta.sub import other\n"
        "def later():\n    from .theta import x\n"
        '"""Example:\n    from .sample import later\n"""\n',
        encoding="utf-8",
    )
    monkeypatch.setattr(plan, "STEPS_DIR", tmp_path)
    assert plan.imports_of("sample") == {"alpha", "beta", "gamma", "epsilon", "zeta", "eta", "theta"}


def test_the_workflow_process_imports_neither_numpy_nor_pyarrow(traced: dict[str, Path]) -> None:
    """Snakemake's process reads the Snakefile and runs its onsuccess handler; Snakemake itself
    may load pandas (its SLURM executor plugin does), so what counts is what the project's code
    there imports. Every import statement it executed, in both builds, is recorded; none names
    numpy, pyarrow or pandas, and importing all of them again in a fresh interpreter (module-level
    imports of the step modules included) loads neither numpy nor pyarrow."""
    statements = [entry for build in traced.values() for entry in json.loads((build / "imports.json").read_text())]
    files = {Path(file).relative_to(REPO).as_posix() for file, *_ in statements}
    assert {"Snakefile", "steps/plan.py", "steps/summary.py", "steps/tidy.py"} <= files
    named = {name.split(".")[0] for _, name, _, level, _ in statements if level == 0}
    assert not named & set(HEAVY), sorted(named & set(HEAVY))
    steps = sorted({module for *_, module in statements if module and module.startswith("steps")})
    others = sorted(named - {"steps", "snakemake"} - set(sys.stdlib_module_names))
    probe = (
        "import importlib, sys\n"
        + f"for name in {steps + others!r}:\n    importlib.import_module(name)\n"
        + f"print(sorted(n for n in {HEAVY!r} if n in sys.modules))"
    )
    loaded = subprocess.run([sys.executable, "-c", probe], capture_output=True, text=True, cwd=REPO, env={**os.environ, "PYTHONPATH": str(REPO)})
    assert loaded.returncode == 0, loaded.stderr
    assert "steps.plan" in steps and loaded.stdout.strip() == "[]", (steps, others, loaded.stdout)


# Option → the rules whose steps read it (a hand-kept table, from reading each step's code);
# the manifest records the whole configuration, so it reads every option.
READERS = [
    ("report", "hidden_width", 50, {"report", "manifest"}),
    ("report", "top_oov", 20, {"coverage", "report", "manifest"}),
    ("shards", "compression", "snappy", {"shards", "manifest"}),
    ("vocabulary", "min_count", 3, {"vocabulary", "manifest"}),
    ("vocabulary", "unknown", "single", {"vocabulary", "vocabulary_frozen", "shards", "manifest"}),
    ("split", "deduplicate", False, {"deduplicate", "manifest"}),
    ("near_duplicates", "policy", "same_split", {"deduplicate", "manifest"}),
    ("near_duplicates", "threshold", 0.9, {"deduplicate", "manifest"}),
    ("near_duplicates", "permutations", 64, {"prepare", "manifest"}),
    ("contamination", "drop", True, {"deduplicate", "manifest"}),
    ("contamination", "ngram_words", 8, {"prepare", "deduplicate", "manifest"}),
    ("corpus", "exclude", ["matches/nothing/**"], {"manifest"}),
    ("resources", "runtime_min", 30, {"manifest"}),
]
OPTION_IDS = [f"{section}.{option}" for section, option, *_ in READERS]


def changed(base: dict, section: str, option: str, value: object) -> dict:
    overrides = copy.deepcopy(base)
    overrides.setdefault(section, {})[option] = value
    return overrides


@pytest.mark.parametrize(("section", "option", "value", "readers"), READERS, ids=OPTION_IDS)
def test_changing_an_option_changes_the_options_file_of_exactly_the_rules_that_read_it(section: str, option: str, value: object, readers: set[str]) -> None:
    """The options files the plan writes (settings.resolve, then plan.rule_options per rule)."""
    before, after = (settings.resolve(copy.deepcopy(o)) for o in (WORD, changed(WORD, section, option, value)))
    assert {rule for rule in plan.RULES if plan.rule_options(before, rule) != plan.rule_options(after, rule)} == readers


def planned(result: subprocess.CompletedProcess) -> dict[str, int]:
    """Jobs per rule from Snakemake's `-n --quiet rules` table."""
    rows = [line.split() for line in result.stdout.splitlines()]
    return {row[0]: int(row[1]) for row in rows if len(row) == 2 and row[1].isdigit() and row[0] != "total"}


@pytest.fixture
def kept_plan(traced: dict[str, Path]) -> Iterator[Path]:
    """The word build, its plan files (options included) put back with their times after each
    test: Snakemake reruns a job whose input is newer than its output."""
    folder = traced["word"] / "build" / "interim" / "plan"
    saved = {path: (path.read_bytes(), path.stat()) for path in folder.rglob("*") if path.is_file()}
    yield traced["word"]
    for path, (data, status) in saved.items():
        path.write_bytes(data)
        os.utime(path, ns=(status.st_atime_ns, status.st_mtime_ns))


def dry_run(directory: Path, overrides: dict, *extra: str) -> dict[str, int]:
    from conftest import run_workflow

    return planned(run_workflow(directory, overrides, "-n", "--quiet", "rules", *extra))


@pytest.mark.parametrize(("section", "option", "value", "readers"), READERS, ids=OPTION_IDS)
def test_changing_an_option_reruns_exactly_the_rules_that_read_it(kept_plan: Path, section: str, option: str, value: object, readers: set[str]) -> None:
    """Snakemake's dry run after the change lists the same jobs as its dry run of the unchanged
    build with the reading rules forced to rerun (--forcerun: those rules and everything
    downstream of them), so no other rule reruns."""
    readers = readers - {"vocabulary_frozen"}  # a rule of frozen vocabularies alone, not of this build
    assert dry_run(kept_plan, WORD) == {}
    forced = dry_run(kept_plan, WORD, "--forcerun", *sorted(readers))
    assert set(readers) <= set(forced)
    assert dry_run(kept_plan, changed(WORD, section, option, value)) == forced
