"""Untrusted input: decompression bombs, pathological text for every regular expression on the
text path, configuration files that try to run code, and paths that try to leave the build.

Tests here assert output, never time: a shared machine's load would fail a test of code that is
right. That every text path stays linear in crafted text is measured by
`python bench/crafted_input.py` (growth as the input quadruples, and against ordinary prose),
which exits with status 1 when a path grows more than 10x or runs more than 25x slower.
"""

from __future__ import annotations

import json
import subprocess
import sys
import unicodedata
from collections import Counter
from pathlib import Path

import pyarrow.parquet as pq
import pytest
import regex
import yaml

from conftest import run_workflow
from corpusmill import abbreviations, unicode_breaks
from corpusmill.accounting import Tally
from corpusmill.clean import CleanOptions, clean_text
from corpusmill.ingest import Chunk, CorpusError, ReadOptions, _grapheme_cut, chunk_key, read_documents
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


# --- crafted text: every text path gives the output its rules define --------------------------
# Time is not asserted here: `python bench/crafted_input.py` measures every path on this text.

SIZE = 10_000  # above the 4,096 characters the cut looks back; plain \X is still fast on this many flags


def _regex_clusters(text: str) -> list[str]:
    """Grapheme clusters by the `regex` module's own \\X (UAX #29), without the flag spelling and
    the windows corpusmill adds to keep long runs linear."""
    return regex.findall(r"\X", text)


@pytest.mark.parametrize("case", sorted(hostile.PATHOLOGICAL))
def test_grapheme_pieces_of_crafted_text_are_the_regex_clusters_packed_greedily(case: str) -> None:
    """UAX #29 clusters (regex's \\X), each piece taking clusters while it holds at most 1,000
    characters (a cluster longer by itself is a piece of its own)."""
    text = hostile.PATHOLOGICAL[case](SIZE)
    expected, piece = [], ""
    for cluster in _regex_clusters(text):
        if piece and len(piece) + len(cluster) > 1000:
            expected.append(piece)
            piece = ""
        piece += cluster
    expected.append(piece)
    assert unicode_breaks.split_graphemes(text, 1000) == expected


@pytest.mark.parametrize("case", sorted(hostile.PATHOLOGICAL))
def test_the_oversize_cut_of_crafted_text_falls_where_its_last_regex_cluster_starts(case: str) -> None:
    """UAX #29 clusters (regex's \\X): the cut keeps every cluster but the last, which may go on in
    the next piece; a text of one cluster is kept whole."""
    text = hostile.PATHOLOGICAL[case](SIZE)
    head = text[: len(text) - len(_regex_clusters(text)[-1])]
    assert _grapheme_cut(text.encode("utf-8")) == (len(head.encode("utf-8")) or len(text.encode("utf-8")))


SEGMENTERS = [name for name in hostile.TEXT_FUNCTIONS if name.startswith("segment ")]


@pytest.mark.parametrize("case", sorted(hostile.PATHOLOGICAL))
def test_every_segmenter_keeps_every_visible_character_of_crafted_text(case: str) -> None:
    """Recount: the tokens of all sentences, joined, are the text with its whitespace (regex \\s)
    removed, for UAX #29 and pattern words, with and without splitting."""
    text = hostile.PATHOLOGICAL[case](SIZE)
    visible = regex.sub(r"\s+", "", text)
    lossy = [name for name in SEGMENTERS if "".join(t for sentence in hostile.TEXT_FUNCTIONS[name](text) for t in sentence) != visible]
    assert not lossy


N = SIZE
# (sentences, tokens) for the segmenters in SEGMENTERS' order: UAX #29 keep (abbreviations
# dr, e.g, etc), UAX #29 split, pattern+punctuation keep (the same abbreviations), pattern+punctuation split.
EXPECTED_SEGMENTS: dict[str, tuple[tuple[int, int], ...]] = {
    # one token per flag: WB15/WB16 pair them, and so do GB12/GB13 for the pattern words' clusters
    "regional_indicators": ((1, N // 2),) * 4,
    "combining_marks": ((1, 1),) * 4,  # one letter with all its marks (WB4, GB9)
    # "A." then a capital ends a sentence (SB11 and the punctuation rule); "a" is not listed
    "capital_initials": ((N // 3, 2 * (N // 3)),) * 4,
    # "dr." before a lowercase letter never ends one (SB8; the punctuation rule wants a capital)
    "abbreviations": ((1, N // 2),) * 4,
    "one_long_word_then_bang": ((2, 3),) * 4,
    # UAX #29 joins letters across a period (WB6/WB7) and goes on before a lowercase letter
    # (SB8); pattern words make every letter and period a token
    "letters_between_periods": ((1, 1), (1, 1), (1, N + 1), (1, N + 1)),
    "letters_between_periods_then_bang": ((2, 3), (2, 3), (2, N + 3), (2, N + 3)),
    # "Dr." is listed for the keep segmenters; unlisted, every "Dr. " before "A" ends a sentence
    "abbreviations_before_capitals": ((1, 3 * (N // 6)), (N // 6 + 1, 3 * (N // 6)), (1, 3 * (N // 6)), (N // 6 + 1, 3 * (N // 6))),
}


@pytest.mark.parametrize("case", sorted(EXPECTED_SEGMENTS))
def test_segmenters_give_the_sentences_and_tokens_their_rules_define_on_crafted_text(case: str) -> None:
    """UAX #29 sentence and word rules (as cited per case) and the punctuation rule, counted by hand
    for the inputs that once took time more than linear in their length."""
    text = hostile.PATHOLOGICAL[case](SIZE)
    counts = []
    for name in SEGMENTERS:
        sentences = hostile.TEXT_FUNCTIONS[name](text)
        counts.append((len(sentences), sum(map(len, sentences))))
    assert tuple(counts) == EXPECTED_SEGMENTS[case]


# The cleaned text's letters (marks count) against min_letters = 2 and min_letter_share = 0.5 of
# its visible characters: whitespace, controls and format characters leave nothing ("empty");
# half letters is enough.
EXPECTED_REJECTIONS = {
    "spaces_and_tabs": "empty", "carriage_returns": "empty", "controls": "empty", "zero_width_spaces": None,
    "combining_marks": None, "one_long_word_then_bang": None, "periods_between_letters": None,
    "capital_initials": None, "closing_quotes": "too_short", "abbreviations": None, "inner_periods": None,
    "hyphens_between_letters": None, "apostrophes_between_letters": None, "marks_before_hyphens": None,
    "closers_then_spaces": "few_letters", "digits_and_separators": "too_short", "only_periods": "too_short",
    "narrow_spaces_in_numbers": "too_short", "regional_indicators": "too_short", "letters_between_periods": None,
    "letters_between_periods_then_bang": None, "abbreviations_before_capitals": None,
}  # fmt: skip


@pytest.mark.parametrize("case", sorted(hostile.PATHOLOGICAL))
def test_cleaning_crafted_text_gives_the_rejection_the_filters_define(case: str) -> None:
    """Counted by hand from the filters (clean.rejection): see EXPECTED_REJECTIONS."""
    assert hostile.TEXT_FUNCTIONS["clean_text+rejection"](hostile.PATHOLOGICAL[case](SIZE)) == EXPECTED_REJECTIONS[case]


# The shape rules in order: a number anywhere; letter, hyphen, letter; only capitals (2 or more);
# a capital first; no letter or number at all; otherwise <unk>.
EXPECTED_UNKNOWN_CLASSES = {
    "spaces_and_tabs": "<unk-symbol>", "carriage_returns": "<unk-symbol>", "controls": "<unk-symbol>",
    "zero_width_spaces": "<unk>", "combining_marks": "<unk>", "one_long_word_then_bang": "<unk>",
    "periods_between_letters": "<unk>", "capital_initials": "<unk-title>", "closing_quotes": "<unk-symbol>",
    "abbreviations": "<unk>", "inner_periods": "<unk>", "hyphens_between_letters": "<unk-hyphenated>",
    "apostrophes_between_letters": "<unk>",
    "marks_before_hyphens": "<unk>",  # the marks stand between the letter and the hyphen
    "closers_then_spaces": "<unk>", "digits_and_separators": "<unk-digits>", "only_periods": "<unk-symbol>",
    "narrow_spaces_in_numbers": "<unk-digits>", "regional_indicators": "<unk-symbol>", "letters_between_periods": "<unk>",
    "letters_between_periods_then_bang": "<unk>", "abbreviations_before_capitals": "<unk-title>",
}  # fmt: skip


@pytest.mark.parametrize("case", sorted(hostile.PATHOLOGICAL))
def test_the_unknown_class_of_crafted_text_follows_the_shape_rules(case: str) -> None:
    """Counted by hand from the shape rules (vocabulary.SHAPE_CLASSES): see EXPECTED_UNKNOWN_CLASSES."""
    assert unknown_class(hostile.PATHOLOGICAL[case](SIZE)) == EXPECTED_UNKNOWN_CLASSES[case]


@pytest.mark.parametrize("case", sorted(hostile.PATHOLOGICAL))
def test_no_crafted_text_alone_teaches_an_abbreviation(case: str) -> None:
    """Kiss & Strunk (2006) as abbreviations.learn_abbreviations applies it: no crafted text holds a
    word that has a final period at least 3 times, appears without one, and is followed by a
    lowercase letter or digit a third of the time ("dr. dr. …" always has its period, so the
    likelihood ratio favours the overall period rate; "A. A. …" is followed by capitals; the
    letters and periods of "a.a.a…a" are one word)."""
    assert abbreviations.learn_abbreviations([hostile.PATHOLOGICAL[case](SIZE)]) == frozenset()


def test_stream_safe_normalization_puts_a_joiner_after_every_30_marks_of_a_100_000_mark_run() -> None:
    """UAX #15 §13 (Stream-Safe Text Format): U+034F after every 30 non-starters in a row, so NFC
    never reorders more than 30 marks (100,000 alternating marks took minutes without it). A
    Counter recount: joiners aside, the cleaned text's NFD holds every code point of the input
    (which has no precomposed letter, so its NFD would only reorder it)."""
    text = hostile.combining_run(100_000)
    cleaned = clean_text(text, CleanOptions())
    assert cleaned.count("\u034f") == 100_000 // 30
    assert max(map(len, regex.findall(r"\P{ccc=0}+", cleaned, regex.V1))) <= 30
    decomposed = Counter(unicodedata.normalize("NFD", cleaned))
    del decomposed["\u034f"]
    assert decomposed == Counter(text)


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
        "!!python/name:os.system",
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
