"""steps.layout: every file of a build has its path there, and nowhere else.

Outside references: the build folder the real workflow wrote (os.walk over the demo build), and
the sources themselves, read with Python's ast and tokenize modules: no string a step or a rule
holds spells a build path by hand.
"""

from __future__ import annotations

import ast
import inspect
import io
import json
import os
import tokenize
from pathlib import Path, PurePosixPath

import pytest

from conftest import REPO
from corpusmill.formats import KINDS
from corpusmill.layout import SPLITS, Layout
from corpusmill.plan import RULES

ROOT = "ROOT"
# Placeholder arguments for Layout's methods, by parameter name.
PLACEHOLDERS = {"chunk": "CHUNK", "split": "train", "kind": "ngram", "rule": "RULE", "key": "KEY", "name": "NAME"}


def layout_paths(layout: Layout, values: dict[str, list[str]]) -> set[str]:
    """Every path the layout gives, each method called with every combination of `values`."""
    paths = set()
    for name, member in inspect.getmembers(Layout):
        if name.startswith("_") or name == "root":
            continue
        if isinstance(member, property):
            paths.add(getattr(layout, name))
            continue
        parameters = list(inspect.signature(member).parameters)[1:]
        combinations: list[list[str]] = [[]]
        for parameter in parameters:
            combinations = [done + [value] for done in combinations for value in values[parameter]]
        paths.update(getattr(layout, name)(*arguments) for arguments in combinations)
    return paths


def relative_parts() -> tuple[set[str], set[str]]:
    """(top-level folders, every folder and file name) of the layout's paths, without the
    placeholder parts."""
    paths = layout_paths(Layout(ROOT), {parameter: [value] for parameter, value in PLACEHOLDERS.items()})
    tops, names = set(), set()
    for path in paths:
        parts = PurePosixPath(path).relative_to(ROOT).parts
        if len(parts) > 1:
            tops.add(parts[0])
        names.update(part for part in parts if not any(value in part for value in PLACEHOLDERS.values()))
    return tops, names


TOPS, NAMES = relative_parts()
FILE_NAMES = {name for name in NAMES if "." in name}


def test_every_path_lies_in_the_build_folder_and_no_two_things_share_one() -> None:
    """Two different files (of two chunks, splits, kinds, rules) never get the same path."""
    layout = Layout(ROOT)
    values = {"chunk": ["a", "b"], "split": list(SPLITS), "kind": list(KINDS), "rule": ["prepare", "shards"], "key": ["k1", "k2"], "name": ["", "a"]}
    calls = []
    for name, member in inspect.getmembers(Layout):
        if name.startswith("_") or name == "root" or isinstance(member, property):
            continue
        parameters = list(inspect.signature(member).parameters)[1:]
        combinations: list[list[str]] = [[]]
        for parameter in parameters:
            combinations = [done + [value] for done in combinations for value in values[parameter]]
        calls += [(name, tuple(arguments), getattr(layout, name)(*arguments)) for arguments in combinations]
    calls += [(name, (), getattr(layout, name)) for name, member in inspect.getmembers(Layout) if isinstance(member, property)]
    # log(rule) is log(rule, rule): one file named two ways.
    distinct = {(name, args) if not (name == "log" and args[1] in ("", args[0])) else (name, (args[0],)): path for name, args, path in calls}
    assert len(set(distinct.values())) == len(distinct)
    assert all(PurePosixPath(path).is_relative_to(ROOT) and path != ROOT for path in distinct.values())


def test_every_file_of_a_real_build_is_a_layout_path(demo_build: Path) -> None:
    """os.walk over the demo build as reference: each file the workflow wrote is one the
    layout names for this build's chunks, splits, kinds and rules."""
    layout = Layout(str(demo_build))
    chunks = json.loads(Path(layout.chunk_list).read_text(encoding="utf-8"))
    values = {"chunk": chunks, "split": list(SPLITS), "kind": list(KINDS), "rule": list(RULES), "key": [], "name": ["", *chunks]}
    known = layout_paths(layout, values)
    written = {os.path.join(folder, name) for folder, _, files in os.walk(demo_build) for name in files}
    assert len(written) > 40 and written - known == set()


def string_constants(path: Path) -> list[tuple[int, str, bool]]:
    """(line, text, used as a path) of every string in a Python file but its docstrings: f-string
    pieces included; `used as a path` when it is an operand of `/` or an argument of Path,
    PurePath, os.path.join, open or with_name."""
    tree = ast.parse(path.read_text(encoding="utf-8"))
    docstrings = {
        id(node.body[0].value)
        for node in ast.walk(tree)
        if isinstance(node, (ast.Module, ast.FunctionDef, ast.AsyncFunctionDef, ast.ClassDef))
        and node.body and isinstance(node.body[0], ast.Expr) and isinstance(node.body[0].value, ast.Constant)
    }  # fmt: skip
    in_paths = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.BinOp) and isinstance(node.op, ast.Div):
            in_paths.update(id(side) for side in (node.left, node.right))
        if isinstance(node, ast.Call):
            function = node.func.attr if isinstance(node.func, ast.Attribute) else getattr(node.func, "id", "")
            if function in ("Path", "PurePath", "PurePosixPath", "join", "open", "with_name"):
                in_paths.update(id(argument) for argument in node.args)
    return [
        (node.lineno, node.value, id(node) in in_paths)
        for node in ast.walk(tree)
        if isinstance(node, ast.Constant) and isinstance(node.value, str) and id(node) not in docstrings
    ]


def rule_strings(path: Path) -> list[tuple[int, str, bool]]:
    """(line, text, False) of every string token of a Snakemake file (comments are not tokens)."""
    found = []
    for token in tokenize.generate_tokens(io.StringIO(path.read_text(encoding="utf-8")).readline):
        if token.type == tokenize.STRING:
            try:
                text = ast.literal_eval(token.string)
            except (ValueError, SyntaxError):  # an f-string: its text as written
                text = token.string.lstrip("rbfRBF").strip("\"'")
            found.append((token.start[0], text, False))
        elif token.type == getattr(tokenize, "FSTRING_MIDDLE", None):
            found.append((token.start[0], token.string, False))
    return found


def spells_a_build_path(text: str, used_as_path: bool) -> bool:
    """A build folder's top-level folder followed by a slash (anywhere in a path), a layout
    file name (alone or ending a path), or any layout name used as a path piece."""
    if any(segment in TOPS for segment in text.split("/")[:-1]):
        return True
    if text in FILE_NAMES or any(text.endswith("/" + name) for name in FILE_NAMES):
        return True
    return used_as_path and text.strip("/") in NAMES


SOURCES = sorted(p for p in (REPO / "steps").glob("*.py") if p.name != "layout.py")
RULE_FILES = [REPO / "Snakefile", *sorted((REPO / "rules").glob("*.smk"))]


@pytest.mark.parametrize("path", SOURCES + RULE_FILES, ids=lambda p: p.relative_to(REPO).as_posix())
def test_no_step_or_rule_spells_a_build_path_by_hand(path: Path) -> None:
    """Every path a rule or a step reads or writes comes from steps/layout.py; a string such
    as "interim/…", "stats/…", "manifest.json" or `root / "shards"` elsewhere would let the
    two drift apart."""
    strings = string_constants(path) if path.suffix == ".py" else rule_strings(path)
    found = [f"line {line}: {text!r}" for line, text, as_path in strings if spells_a_build_path(text, as_path)]
    assert found == []


def test_the_scan_finds_paths_spelled_by_hand() -> None:
    """The scan itself: each way of spelling a build path is caught, and names that only look
    like one (a rule or config section called "shards", a message) are not."""
    assert TOPS >= {"interim", "stats", "shards", "logs", "report"} and {"manifest.json", "vocabulary.tsv"} <= FILE_NAMES
    assert spells_a_build_path("interim/prepared/x.parquet", False) and spells_a_build_path("stats/", False)
    assert spells_a_build_path("/logs/report.txt", False) and not spells_a_build_path("in <code>stats/coverage.json</code>", False)
    assert spells_a_build_path("manifest.json", False) and spells_a_build_path("build/vocabulary.tsv", False)
    assert spells_a_build_path("shards", True) and spells_a_build_path("logs", True)
    assert not spells_a_build_path("shards", False) and not spells_a_build_path("see the manifest for details", False)
    source = 'root = Path(x)\nA = root / "stats"\nB = f"shards/{split}"\nC = "shards"\n'
    probe = REPO / "tests" / ".layout-probe.py"
    try:
        probe.write_text(source, encoding="utf-8")
        flagged = [text for _, text, as_path in string_constants(probe) if spells_a_build_path(text, as_path)]
    finally:
        probe.unlink()
    assert flagged == ["stats", "shards/"]
