"""The coverage report page of a subword build (units: subword): the piece model described
instead of a word cutoff, by the one renderer of steps/report.py.

A small piece model (vocab_size 500) on the demo corpus, built with the default target, so the
report is part of `snakemake` with no target. coverage.json (itself checked against recounts of
the shards in test_subword) is the reference for the figures the page shows.
"""

from __future__ import annotations

import base64
import dataclasses
import html
import json
import re
import shutil
import tempfile
import urllib.request
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from conftest import require_file, run_workflow, scenario
from corpusmill.coverage import encoded_figures
from corpusmill.formats import Figures, ShardStats, read_vocabulary
from corpusmill.growth import growth_points, sightings, whitespace_words
from corpusmill.laws import ModelSize, PowerFit, fit_zipf
from corpusmill.report import growth_figure, main, read_growth, render
from corpusmill.summary import format_table
from tests.test_report import file_cells, png_chunks, png_size
from tests.test_report_browser import CHROMIUM, DevTools, start_chromium, websocket_module
from tests.test_shards import corpus_rows

OVERRIDES = scenario("subword")
# RE2's \s, which the piece encoder's word count uses, is ASCII whitespace only.
WORD = re.compile(r"[^\t\n\f\r ]+")


@pytest.fixture(scope="module")
def subword_run(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, str]:
    """The demo corpus built in subword mode with the default target; the build folder and the run's log."""
    directory = tmp_path_factory.mktemp("report-subword")
    result = run_workflow(directory, OVERRIDES)
    return directory / "build", result.stderr


def section(page: str, key: str) -> str:
    found = re.search(rf'<section id="{key}">(.*?)</section>', page, re.S)
    assert found, f"no section {key!r}"
    return found.group(1)


def rows(fragment: str) -> list[list[str]]:
    """Body rows of every table in an HTML fragment, cells as unescaped text."""
    cells = [[html.unescape(c) for c in re.findall(r"<td[^>]*>(.*?)</td>", row)] for row in re.findall(r"<tr[^>]*>(.*?)</tr>", fragment)]
    return [row for row in cells if row]


def read_json(path: Path) -> dict:
    return json.loads(path.read_text(encoding="utf-8"))


def options(build: Path) -> dict:
    """The options the report job of the build read (interim/plan/options/report.json)."""
    return read_json(build / "interim" / "plan" / "options" / "report.json")


def test_the_default_target_builds_the_report_in_subword_mode(subword_run: tuple[Path, str]) -> None:
    """Snakemake's own job log: rule all (no target given) ran the report job, and the page is the subword one."""
    build, log = subword_run
    assert re.search(r"^localrule report:", log, re.M) or re.search(r"^rule report:", log, re.M)
    page = (build / "report" / "index.html").read_text(encoding="utf-8")
    assert json.loads((build / "stats" / "coverage.json").read_text())["units"] == "subword"
    assert '<section id="lengths">' in page and '<section id="coverage">' not in page
    assert "<title>Vocabulary coverage report</title>" in page


def test_pieces_per_word_and_per_sentence_by_split_equal_coverage_json(subword_run: tuple[Path, str]) -> None:
    """coverage.json as the reference: each split's row holds its counts and ratios (three decimals)."""
    build, _ = subword_run
    page = (build / "report" / "index.html").read_text(encoding="utf-8")
    splits = json.loads((build / "stats" / "coverage.json").read_text())["splits"]
    expected = [
        [
            s,
            f"{f['documents']:,}",
            f"{f['sentences']:,}",
            f"{f['words']:,}",
            f"{f['tokens']:,}",
            f"{f['tokens_per_word']:.3f}",
            f"{f['tokens_per_sentence']:.3f}",
        ]
        for s, f in splits.items()
    ]
    assert sorted(rows(section(page, "lengths"))) == sorted(expected)


def test_unknown_rates_with_and_without_byte_fallback_equal_coverage_json(subword_run: tuple[Path, str]) -> None:
    """coverage.json as the reference; four decimals of a percentage are exactly its six decimals."""
    build, _ = subword_run
    page = (build / "report" / "index.html").read_text(encoding="utf-8")
    splits = json.loads((build / "stats" / "coverage.json").read_text())["splits"]
    by_split = {row[0]: row for row in rows(section(page, "unknown")) if row[0] in splits}
    for split, f in splits.items():
        assert by_split[split] == [
            split,
            f"{f['tokens']:,}",
            f"{f['unknown_tokens']:,}",
            f"{f['unknown_rate']:.4%}",
            f"{f['byte_pieces']:,}",
            f"{f['byte_piece_rate']:.4%}",
            f"{f['unknown_rate_without_byte_fallback']:.4%}",
        ]
        assert float(by_split[split][6].rstrip("%")) / 100 == pytest.approx(f["unknown_rate_without_byte_fallback"], abs=1e-9)
    assert any(f["byte_pieces"] for f in splits.values())  # the demo corpus exercises byte fallback


def test_unknown_rates_by_source_add_up_to_the_split_totals(subword_run: tuple[Path, str]) -> None:
    """coverage.json's split totals: the per-file pieces, byte pieces, runs and
    unknown-without-fallback pieces sum to them; every input file has its figures."""
    build, _ = subword_run
    coverage = json.loads((build / "stats" / "coverage.json").read_text())
    splits, sources = coverage["splits"], coverage["sources"]
    assert sorted(sources) == sorted(entry["path"] for entry in json.loads((build / "manifest.json").read_text())["inputs"])
    for split, f in splits.items():
        for key in ("documents", "sentences", "tokens", "words", "byte_pieces", "byte_runs"):
            assert sum(s[split][key] for s in sources.values()) == f[key], key
        would_be_unknown = sum(
            s[split]["unknown_rate_without_byte_fallback"] * (s[split]["tokens"] - s[split]["byte_pieces"] + s[split]["byte_runs"]) for s in sources.values()
        )
        total = f["tokens"] - f["byte_pieces"] + f["byte_runs"]
        assert would_be_unknown / total == pytest.approx(f["unknown_rate_without_byte_fallback"], abs=1e-6)
    page = (build / "report" / "index.html").read_text(encoding="utf-8")
    table = {row[1]: row for row in rows(section(page, "unknown")) if len(row) > 1 and row[1] in sources}
    for name, figures in sources.items():
        assert table[name][3:5] == [f"{figures['train']['tokens']:,}", f"{figures['train']['unknown_rate_without_byte_fallback']:.4%}"]


def test_zipf_fit_and_model_sizing_use_the_pieces(subword_run: tuple[Path, str]) -> None:
    """Zipf's law fitted on the train counts of vocabulary.tsv (an independent reader of the same
    counts; <s> and </s>, counted once per document and sentence, are not pieces of the text);
    the sizing table with |V| = number of ids of the piece model."""
    build, _ = subword_run
    page = (build / "report" / "index.html").read_text(encoding="utf-8")
    vocabulary = read_vocabulary(build / "vocabulary.tsv")
    pieces = [c for t, c in zip(vocabulary.tokens, vocabulary.counts) if t not in ("<s>", "</s>")]
    fit, ranks, _ = fit_zipf(np.array(pieces))
    assert f"Zipf exponent s = {fit.exponent:.3f}" in section(page, "zipf")
    assert f"ranks of the {int(ranks.max()):,} pieces used in train" in page
    assert int(ranks.max()) == sum(1 for c in pieces if c > 0)
    report = options(build)["report"]
    for width in report["embedding_widths"]:
        size = ModelSize(vocabulary.size, width, options(build)["windows"]["ngram"]["n"] - 1, report["hidden_width"])
        assert f"{size.parameters:,} (" in section(page, "sizing") and f"{size.output_parameters:,} (" in page


def test_growth_counts_whitespace_words_of_the_train_sentences(subword_run: tuple[Path, str]) -> None:
    """Brute force: distinct words after each prefix of the kept train sentences in corpus order,
    counted with a Python set over re.findall (ASCII whitespace, as RE2's \\s); the total equals
    coverage.json's train words."""
    build, _ = subword_run
    removed = {(r["source"], r["offset"]) for r in pq.read_table(build / "interim" / "duplicates.parquet").to_pylist()}
    seen: set[str] = set()
    after = [0]
    for row in corpus_rows(build, ["split", "sentences"]):
        if row["split"] != "train" or (row["source"], row["offset"]) in removed:
            continue
        for word in (w for sentence in row["sentences"] for w in WORD.findall(sentence)):
            seen.add(word)
            after.append(len(seen))
    growth = json.loads((build / "stats" / "growth.json").read_text())
    assert growth["read"][-1] == len(after) - 1 == json.loads((build / "stats" / "coverage.json").read_text())["splits"]["train"]["words"]
    assert growth["distinct"] == [after[n] for n in growth["read"]]
    assert f"of {len(after) - 1:,} words; {len(seen):,} distinct words" in (build / "report" / "index.html").read_text(encoding="utf-8")


def test_word_growth_does_not_depend_on_how_the_stream_is_batched() -> None:
    """A Python set recount of the same words; batches of 1, 3 and all words give the same curve."""
    text = ["the tide the  quay", " a tide\tturned ", "", "quay of the harbour\nat dawn"]
    words = whitespace_words(pa.array(text))
    assert words.to_pylist() == [w for s in text for w in s.split()]
    seen: set[str] = set()
    after = [0]
    for word in words.to_pylist():
        seen.add(word)
        after.append(len(seen))
    for size in (1, 3, len(words)):
        table, length = sightings(words.slice(start, size) for start in range(0, len(words), size))
        positions, types = growth_points(np.sort(table["first"].to_numpy()), length)
        assert types.tolist() == [after[n] for n in positions]
    assert growth_points(np.zeros(0, np.int64), 0)[0].tolist() == []


def test_subword_page_is_self_contained_and_byte_identical_when_written_again(subword_run: tuple[Path, str], tmp_path: Path) -> None:
    """PNG specification (no text or time chunks) and determinism (project rule): the report
    step run again on a copy of the build writes the same bytes."""
    build, _ = subword_run
    original = (build / "report" / "index.html").read_bytes()
    page = original.decode("utf-8")
    assert not re.search(r"""(src|href)=["'](?!data:|#)""", page)
    images = re.findall(r'<img src="data:image/png;base64,([A-Za-z0-9+/=]+)"', page)
    assert len(images) == page.count("<img") == 3
    for encoded in images:
        assert not {b"tEXt", b"iTXt", b"zTXt", b"tIME"} & set(png_chunks(base64.b64decode(encoded)))
    copy = tmp_path / "build"
    shutil.copytree(build, copy)
    (copy / "report" / "index.html").unlink()
    main(["--build", str(copy)])
    assert (copy / "report" / "index.html").read_bytes() == original


def test_subword_page_renders_in_chromium_without_errors(subword_run: tuple[Path, str]) -> None:
    """Chromium as the reference renderer (skipped without it outside CI): no exceptions or console
    errors, every <img> decoded (naturalWidth > 0)."""
    require_file(CHROMIUM, "chromium")
    websocket = websocket_module()
    build, _ = subword_run
    profile = Path(tempfile.mkdtemp(prefix="corpusmill-chromium-"))
    process, port = start_chromium(profile)
    try:
        with urllib.request.urlopen(f"http://127.0.0.1:{port}/json/list", timeout=30) as response:
            target = next(t for t in json.load(response) if t["type"] == "page")
        tools = DevTools(target["webSocketDebuggerUrl"], websocket)
        try:
            for domain in ("Page", "Runtime", "Log"):
                tools.call(f"{domain}.enable")
            tools.call("Page.navigate", url=(build / "report" / "index.html").resolve().as_uri())
            tools.wait_for("Page.loadEventFired")
            images = tools.call("Runtime.evaluate", returnByValue=True, expression="Array.from(document.images, i => [i.complete, i.naturalWidth])")["result"][
                "value"
            ]
            headings = tools.call("Runtime.evaluate", returnByValue=True, expression="Array.from(document.querySelectorAll('h2'), h => h.textContent)")[
                "result"
            ]["value"]
        finally:
            tools.close()
    finally:
        process.kill()  # a throwaway profile: nothing to flush
        process.wait(timeout=10)
        shutil.rmtree(profile, ignore_errors=True)
    errors = [
        e
        for e in tools.events
        if e.get("method") == "Runtime.exceptionThrown"
        or (e.get("method") == "Runtime.consoleAPICalled" and e["params"]["type"] in ("error", "assert"))
        or (e.get("method") == "Log.entryAdded" and e["params"]["entry"]["level"] == "error")
    ]
    assert errors == []
    assert len(images) == 3 and all(complete and width > 0 for complete, width in images), images
    assert "Unknown tokens by split and source" in headings and "Pieces per word and per sentence" in headings
    assert "The subword model" in headings


def subword_page(build: Path, stats: list[ShardStats], **changes: object) -> str:
    """The page of a subword build whose per-file figures come from the given shard statistics
    (summed per file by steps.coverage as the coverage step does), with some of coverage.json's
    other keys replaced."""
    coverage = read_json(build / "stats" / "coverage.json")
    coverage["sources"] = encoded_figures(stats, read_vocabulary(build / "vocabulary.tsv"))["sources"]
    coverage.update(changes)
    counts = pq.read_table(build / "stats" / "token_counts.parquet")
    return render(coverage, read_json(build / "manifest.json"), counts, read_growth(str(build / "stats" / "growth.json")), options(build))


def piece_source(pieces: int, byte_pieces: int, byte_runs: int) -> dict[str, Figures]:
    """One file's figures: all in train, none in dev or test."""
    train = Figures(documents=1, sentences=1, tokens=pieces, words=pieces // 2, byte_pieces=byte_pieces, byte_runs=byte_runs)
    return {"train": train, "dev": Figures(), "test": Figures()}


def chunk_stats(chunk: str, sources: dict[str, dict[str, Figures]]) -> ShardStats:
    return ShardStats(chunk, sources={name: {split: Figures(**dataclasses.asdict(f)) for split, f in per.items()} for name, per in sources.items()})


def test_subword_page_and_its_largest_image_stay_small_with_8000_input_files(subword_run: tuple[Path, str]) -> None:
    """PNG specification (IHDR) for the pixels; sorted() over every file as the reference for which
    are listed: the most pieces that would be <unk> without byte fallback first, then by name; files
    spread over two chunks' statistics count once, their figures added."""
    build, _ = subword_run
    sources = {
        f"a-folder-with-a-long-name-{i % 40:02d}/and-another-below-it/document-{i:05d}-of-the-archive.txt": piece_source(300 + i % 11, 2 * (i % 89), i % 89)
        for i in range(8000)
    }
    names = list(sources)
    halves = [chunk_stats("a", {n: sources[n] for n in names[:5000]}), chunk_stats("b", {n: sources[n] for n in names[4000:]})]
    page = subword_page(build, halves)
    assert len(page.encode("utf-8")) < 1_000_000
    sizes = [png_size(base64.b64decode(e)) for e in re.findall(r'<img src="data:image/png;base64,([A-Za-z0-9+/=]+)"', page)]
    assert max(width * height for width, height in sizes) < 1_000_000
    would_be_unknown = {n: (2 if 4000 <= i < 5000 else 1) * (i % 89) for i, n in enumerate(names)}
    assert file_cells(page, "unknown") == sorted(names, key=lambda n: (-would_be_unknown[n], n))[:100]
    assert "7,900 more input files are not listed; the figures of every file are in <code>stats/coverage.json</code>, key <code>sources</code>" in page


def test_subword_rates_of_an_empty_split_show_a_dash_on_the_page_and_in_the_summary(subword_run: tuple[Path, str]) -> None:
    """0 of 0 pieces has no rate: coverage.json stores 0.0, the page and the summary show a dash."""
    build, _ = subword_run
    coverage = json.loads((build / "stats" / "coverage.json").read_text())
    empty = {key: 0.0 if isinstance(value, float) else 0 for key, value in coverage["splits"]["test"].items()}
    splits = {**coverage["splits"], "test": empty}
    page = subword_page(build, [chunk_stats("a", {"one.txt": piece_source(40, 6, 2)})], splits=splits)
    assert ["test", "0", "0", "0", "0", "—", "—"] in rows(section(page, "lengths"))
    assert ["test", "0", "0", "—", "0", "—", "—"] in rows(section(page, "unknown"))
    assert ["1", "one.txt", "2", "40", "5.5556%", "0", "—", "0", "—"] in rows(section(page, "unknown"))
    assert ", test —); words are runs" in section(page, "lengths")
    line = next(line for line in format_table({**coverage, "splits": splits}).splitlines() if line.startswith("test"))
    assert line.split() == ["test", "0", "0", "—", "—", "—", "—"]


def test_growth_plot_names_the_unit_its_axis_counts_in_the_legend() -> None:
    """Subword mode counts words: the fit in the legend and the axis both say words, never tokens."""
    read = np.array([1, 10, 100, 1000])
    figure = growth_figure(read, np.array([1, 8, 50, 300]), PowerFit(0.8, 1.0, 100.0), "words", "whitespace-separated, corpus order")
    axes = figure.axes[0]
    texts = [t.get_text() for t in axes.get_legend().get_texts()] + [axes.get_xlabel()]
    assert "words$^{" in texts[1] and axes.get_xlabel().startswith("train words read")
    assert not [t for t in texts if "tokens" in t]
