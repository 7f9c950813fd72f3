"""Untrusted input: decompression bombs, pathological text for every regular expression on the
text path, configuration files that try to run code, and paths that try to leave the build.
"""

from __future__ import annotations

import gc
import json
import subprocess
import sys
import time
from collections.abc import Callable
from pathlib import Path

import pyarrow.parquet as pq
import pytest
import yaml

from conftest import run_workflow
from corpusmill import abbreviations, unicode_breaks
from corpusmill.accounting import Tally
from corpusmill.clean import CleanOptions, clean_text, rejection
from corpusmill.ingest import Chunk, CorpusError, ReadOptions, _grapheme_cut, chunk_key, read_documents
from corpusmill.segment import Segmenter
from corpusmill.vocabulary import unknown_class
from tests import hostile

REPO = Path(__file__).resolve().parent.parent

# --- decompression bombs ------------------------------------------------------------------------


@pytest.mark.parametrize("codec", [".gz", ".zst", ".bz2", ".xz"])
def test_a_decompression_bomb_stops_at_max_decompressed_mb_with_a_clear_error(tmp_path: Path, codec: str) -> None:
    """5 MiB of one repeated line packs to a few KiB; with corpus.max_decompressed_mb = 1 the read
    must stop past 1 MiB of text (common practice: cap expansion, not input size)."""
    packed = hostile.compress(b"all work and no play\n" * 250_000, codec)
    assert len(packed) < 100_000
    name = f"bomb.txt{codec}"
    (tmp_path / name).write_bytes(packed)
    tally = Tally()
    reader = read_documents(tmp_path, Chunk(chunk_key(name, 0), (name,)), 1 << 30, ReadOptions(max_decompressed_bytes=1 << 20), tally)
    with pytest.raises(CorpusError) as caught:
        for _ in reader:
            pass
    message = str(caught.value)
    assert str(tmp_path / name) in message and "corpus.max_decompressed_mb (1 MiB)" in message


def test_the_workflow_reports_a_bomb_as_a_failed_job_naming_the_file(tmp_path: Path) -> None:
    """Snakemake end to end: the prepare job fails, its log's last lines name the file and limit."""
    raw = tmp_path / "raw"
    raw.mkdir()
    (raw / "bomb.txt.zst").write_bytes(hostile.compress(b"all work and no play\n" * 250_000, ".zst"))
    run = run_workflow(tmp_path, {"corpus": {"root": str(raw), "max_decompressed_mb": 1}}, cores=1, check=False)
    assert run.returncode != 0
    assert "bomb.txt.zst: expands beyond corpus.max_decompressed_mb (1 MiB)" in run.stdout + run.stderr
    assert not (tmp_path / "build" / "manifest.json").exists()


# --- regular expressions run in linear time ------------------------------------------------------

SIZE = 30_000

# Inputs that make backtracking engines (or quadratic algorithms) slow: long runs without a
# break, terminators everywhere, marks, quotes, abbreviations, hyphens and apostrophes, and
# runs of regional indicators (\X pairs each by counting back to the run's start).
PATHOLOGICAL: dict[str, Callable[[int], str]] = {
    "spaces_and_tabs": lambda n: " \t" * (n // 2),
    "carriage_returns": lambda n: "\r" * n,
    "controls": lambda n: "\x01" * n,
    "zero_width_spaces": lambda n: "a\u200b" * (n // 2),
    "combining_marks": lambda n: "e" + "\u0301\u0316" * (n // 2),
    "one_long_word_then_bang": lambda n: "x" * n + "! A",
    "periods_between_letters": lambda n: "a." * (n // 2),
    "capital_initials": lambda n: "A. " * (n // 3),
    "closing_quotes": lambda n: ".\"')]" * (n // 5),
    "abbreviations": lambda n: "dr. " * (n // 4),
    "inner_periods": lambda n: "e.g." * (n // 4),
    "hyphens_between_letters": lambda n: "a-" * (n // 2),
    "apostrophes_between_letters": lambda n: "a'" * (n // 2),
    "marks_before_hyphens": lambda n: ("a" + "\u0301" * 50 + "-") * (n // 52),
    "closers_then_spaces": lambda n: "a." + ")" * (n // 2) + " " * (n // 2) + "b",
    "digits_and_separators": lambda n: "1,1." * (n // 4),
    "only_periods": lambda n: "." * n,
    "narrow_spaces_in_numbers": lambda n: "1\u202f" * (n // 2),
    "regional_indicators": lambda n: "\U0001F1E6" * n,
    "letters_between_periods": lambda n: "a." * (n // 2) + "a",
    "letters_between_periods_then_bang": lambda n: "a." * (n // 2) + "a! A",
    "abbreviations_before_capitals": lambda n: "Dr. A " * (n // 6),
}

ABBREVIATIONS = frozenset({"dr", "e.g", "etc"})
TEXT_FUNCTIONS: dict[str, Callable[[str], object]] = {
    "clean_text+rejection": lambda text: rejection(clean_text(text, CleanOptions()), CleanOptions()),
    "segment uax29 keep": Segmenter(abbreviations=ABBREVIATIONS).segment,
    "segment uax29 split": Segmenter(apostrophes="split", hyphens="split").segment,
    "segment pattern+punctuation keep": Segmenter(sentences_mode="punctuation", words_mode="pattern", abbreviations=ABBREVIATIONS).segment,
    "segment pattern+punctuation split": Segmenter(sentences_mode="punctuation", words_mode="pattern", apostrophes="split", hyphens="split").segment,
    "learn_abbreviations": lambda text: abbreviations.learn_abbreviations([text]),
    "split_graphemes": lambda text: unicode_breaks.split_graphemes(text, 1000),
    "oversize document cut": lambda text: _grapheme_cut(text.encode("utf-8")),
    "unknown_class": unknown_class,
}


def _seconds(function: Callable[[str], object], text: str) -> float:
    """Best of three wall-clock runs with the garbage collector paused (the minimum is the least
    disturbed by other processes; a collection pass would charge one run for older garbage)."""
    best = float("inf")
    gc.collect()
    gc.disable()
    try:
        for _ in range(3):
            start = time.perf_counter()
            function(text)
            best = min(best, time.perf_counter() - start)
    finally:
        gc.enable()
    return best


@pytest.mark.parametrize("function_name", sorted(TEXT_FUNCTIONS))
def test_every_text_path_regex_runs_in_linear_time_on_pathological_input(function_name: str) -> None:
    """Growth test (common practice for ReDoS): quadrupling the input multiplies the time by about
    4 when linear and by 16 when quadratic; allow up to 10 (a shared machine adds noise). And against ordinary prose of the same
    size, no input may be more than 25 times slower (sentence-dense text pays a per-sentence cost)."""
    function = TEXT_FUNCTIONS[function_name]
    normal = _seconds(function, hostile.prose(4 * SIZE).decode("utf-8"))
    floor = 5e-3  # below a few milliseconds, timer noise and allocator effects dominate a ratio
    slow = []
    for case, make in PATHOLOGICAL.items():
        small, large = make(SIZE), make(4 * SIZE)
        seconds = _seconds(function, large)
        if seconds <= floor:
            continue
        growth = seconds / max(_seconds(function, small), floor / 4)
        if growth > 10:  # a busy machine can only make a try look slower: take the best of three
            growth = min(growth, *(_seconds(function, large) / max(_seconds(function, small), floor / 4) for _ in range(2)))
        if growth > 10:
            slow.append(f"{case}: {growth:.1f}x the time for 4x the input")
        if seconds / max(normal, floor) > 25:
            slow.append(f"{case}: {seconds * 1e3:.1f} ms vs {normal * 1e3:.1f} ms for ordinary prose of the same size")
    assert not slow, "; ".join(slow)


def test_stream_safe_normalization_keeps_a_100_000_mark_run_fast() -> None:
    """UAX #15 §13 (Stream-Safe Text Format): NFC of 100,000 alternating marks took minutes before."""
    start = time.perf_counter()
    cleaned = clean_text(hostile.combining_run(100_000), CleanOptions())
    assert time.perf_counter() - start < 2.0
    assert cleaned.count("\u034f") == 100_000 // 30


# --- configuration never runs code; paths never leave the build --------------------------------


def _snakemake(workdir: Path, override: Path, *extra: str) -> subprocess.CompletedProcess[str]:
    return subprocess.run(
        [sys.executable, "-m", "snakemake", "--snakefile", str(REPO / "Snakefile"), "--directory", str(workdir),
         "--cores", "1", "--configfile", str(override), *extra],
        capture_output=True, text=True, timeout=300,
    )  # fmt: skip


@pytest.mark.parametrize(
    "tag",
    [
        '!!python/object/apply:os.system ["touch {marker}"]',
        '!!python/object/new:os.system ["touch {marker}"]',
        '!!python/name:os.system',
    ],
    ids=["apply", "new", "name"],
)
def test_a_python_tag_in_a_config_file_is_refused_and_runs_nothing(tmp_path: Path, tag: str) -> None:
    """PyYAML loaders: Snakemake reads config files with yaml.FullLoader (via yte), which does not
    build arbitrary Python objects; the marker file proves no command ran."""
    marker = tmp_path / "code-ran"
    override = tmp_path / "evil.yaml"
    override.write_text(f"corpus: {{root: {REPO / 'demo_raw'}}}\nclean: {tag.format(marker=marker)}\n")
    run = _snakemake(tmp_path, override, "-n")
    assert run.returncode != 0
    assert not marker.exists()
    assert not (tmp_path / "build").exists()


@pytest.mark.parametrize("build_dir", ["../outside", "/tmp/corpusmill-absolute-build"])
def test_a_build_dir_outside_the_working_directory_is_refused_by_the_real_workflow(tmp_path: Path, build_dir: str) -> None:
    """POSIX path semantics: '..' and absolute paths would write outside --directory."""
    workdir = tmp_path / "work"
    workdir.mkdir()
    override = tmp_path / "over.yaml"
    override.write_text(f"build_dir: {build_dir}\ncorpus: {{root: {REPO / 'demo_raw'}}}\n")
    run = _snakemake(workdir, override)
    assert run.returncode != 0
    assert f"build_dir = {json.dumps(build_dir)}: allowed: a relative path without '..'" in run.stdout + run.stderr
    assert not (tmp_path / "outside").exists() and not Path(build_dir).exists()
    assert sorted(p.name for p in workdir.iterdir()) in ([], [".snakemake"])


@pytest.mark.parametrize("build_dir", ["b$(touch marker)", "x;touch marker;#", "~"])
def test_a_build_dir_that_would_run_a_command_or_reach_home_is_refused_and_runs_nothing(tmp_path: Path, build_dir: str) -> None:
    """POSIX shell command substitution and ';', and tilde expansion: the value never reaches a
    shell; the marker file and an empty working directory prove nothing ran or was written."""
    workdir = tmp_path / "work"
    workdir.mkdir()
    override = tmp_path / "over.yaml"
    override.write_text(yaml.safe_dump({"build_dir": build_dir, "corpus": {"root": str(REPO / "demo_raw")}}))
    run = subprocess.run(
        [sys.executable, "-m", "snakemake", "--snakefile", str(REPO / "Snakefile"), "--directory", str(workdir),
         "--cores", "1", "--configfile", str(override)],
        capture_output=True, text=True, timeout=300, cwd=workdir,
    )  # fmt: skip
    assert run.returncode != 0 and "build_dir = " in run.stdout + run.stderr
    assert not (workdir / "marker").exists() and not (tmp_path / "marker").exists()
    assert sorted(p.name for p in workdir.iterdir()) in ([], [".snakemake"])
# Names a POSIX file system allows that are special to a shell, to argument parsing, to
# Snakemake's {wildcard} and <pathvar> patterns, to matplotlib's $math$ text, or to HTML.
AWKWARD_NAMES = [
    "-rf.txt", "--source=evil.txt", "{wild}.txt", "<script>.txt", "<results>.txt", "math$\\frac$.txt",
    "it's \"quoted\".txt", "two  spaces.txt", "$(touch marker).txt", "é ü 語.txt", "semi;colon&amp.txt",
]  # fmt: skip


def test_any_file_name_and_folder_name_builds_and_every_file_is_read(tmp_path: Path) -> None:
    """Every name above, in a corpus root whose path holds a space, quotes, '$' and non-ASCII
    letters, built into a build_dir with a space and a non-ASCII letter: each file's one
    document (distinct text) reaches the dev/test/train streams under its own id, no command
    runs (marker), and the accounting balances."""
    root = tmp_path / "raw 'dir' $HOME é"
    root.mkdir()
    for number, name in enumerate(AWKWARD_NAMES):
        (root / name).write_text(f"Document number {number} talks about the file {name!r} at length.\n", encoding="utf-8")
    run = run_workflow(tmp_path / "work", {"corpus": {"root": str(root)}, "build_dir": "out dir/é"}, cores=1)
    build = tmp_path / "work" / "out dir" / "é"
    manifest = json.loads((build / "manifest.json").read_text(encoding="utf-8"))
    assert [entry["path"] for entry in manifest["inputs"]] == sorted(AWKWARD_NAMES)
    assert manifest["accounting"]["balanced"] and manifest["accounting"]["kept"] == len(AWKWARD_NAMES)
    doc_ids = [d for path in build.glob("shards/*/stream-*.parquet") for d in pq.read_table(path)["doc_id"].to_pylist()]
    assert sorted(d.rsplit(":", 1)[0] for d in doc_ids) == sorted(AWKWARD_NAMES)
    assert not (tmp_path / "work" / "marker").exists() and not list(tmp_path.rglob("marker"))
    assert f"documents: read {len(AWKWARD_NAMES)}, kept {len(AWKWARD_NAMES)}, dropped 0" in run.stderr  # the end-of-run summary
