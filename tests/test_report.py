"""The vocabulary coverage report page (steps/report.py) of the demo build."""

from __future__ import annotations

import base64
import html
import json
import re
import shutil
import struct
from collections import Counter
from pathlib import Path

import numpy as np
import pyarrow.parquet as pq
import pytest

from conftest import REPO
from corpusmill.coverage import derived
from corpusmill.formats import Figures
from corpusmill.laws import ModelSize, fit_heaps, fit_zipf
from corpusmill.layout import Layout
from corpusmill.report import coverage_curve, main, table
from corpusmill.summary import format_table

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"


def png_chunks(data: bytes) -> list[bytes]:
    """Chunk types of a PNG file, read by the layout of the PNG specification (length, type, data, CRC)."""
    assert data.startswith(PNG_SIGNATURE)
    kinds, offset = [], len(PNG_SIGNATURE)
    while offset < len(data):
        (length,) = struct.unpack(">I", data[offset : offset + 4])
        kinds.append(data[offset + 4 : offset + 8])
        offset += 12 + length
    return kinds


def corpus_order(build: Path) -> list[str]:
    """Prepared chunk files in corpus order: by their first document's place (its input file as
    listed in the manifest, then byte offset)."""
    inputs = [entry["path"] for entry in json.loads((build / "manifest.json").read_text())["inputs"]]

    def key(path: Path) -> tuple[int, int]:
        places = pq.read_table(path, columns=["source", "offset"]).to_pylist()
        return min(((inputs.index(row["source"]), row["offset"]) for row in places), default=(-1, -1))

    return [str(p) for p in sorted((build / "interim" / "prepared").glob("*.parquet"), key=key)]


def corpus_rows(build: Path, columns: list[str]) -> list[dict]:
    """Every prepared row (kept before deduplication) in corpus order: input file as listed in
    the manifest, then byte offset; prepared tables store rows by split and doc_hash."""
    inputs = [entry["path"] for entry in json.loads((build / "manifest.json").read_text())["inputs"]]
    rows = [
        row
        for path in (build / "interim" / "prepared").glob("*.parquet")
        for row in pq.read_table(path, columns=sorted({*columns, "source", "offset"})).to_pylist()
    ]
    return sorted(rows, key=lambda r: (inputs.index(r["source"]), r["offset"]))


def report_options(build: Path) -> dict:
    """The options the report step of `build` read (the configuration's defaults)."""
    return json.loads(Path(Layout(str(build)).options("report")).read_text(encoding="utf-8"))


def report_inputs(build: Path, target: Path) -> Path:
    """A build folder at `target` holding only what the report step reads from `build`."""
    source, copy = Layout(str(build)), Layout(str(target))
    for name in ("coverage", "manifest", "token_counts", "growth", "hygiene"):
        Path(getattr(copy, name)).parent.mkdir(parents=True, exist_ok=True)
        shutil.copy(getattr(source, name), getattr(copy, name))
    Path(copy.options("report")).parent.mkdir(parents=True, exist_ok=True)
    shutil.copy(source.options("report"), copy.options("report"))
    return target


def test_report_page_is_self_contained_with_plain_png_images(demo_build: Path) -> None:
    """PNG specification: every image is embedded, decodes as PNG and carries no text or time chunk."""
    page = (demo_build / "report" / "index.html").read_text(encoding="utf-8")
    assert not re.search(r"""(src|href)=["'](?!data:|#)""", page), "the page must not load anything from outside"
    assert "http://" not in page and "https://" not in page
    images = re.findall(r'<img src="data:image/png;base64,([A-Za-z0-9+/=]+)"', page)
    assert len(images) == page.count("<img") == 4
    for encoded in images:
        kinds = png_chunks(base64.b64decode(encoded))
        assert kinds[0] == b"IHDR" and kinds[-1] == b"IEND"
        assert not {b"tEXt", b"iTXt", b"zTXt", b"tIME"} & set(kinds)


def test_report_page_is_byte_identical_when_written_again(demo_build: Path, tmp_path: Path) -> None:
    """Determinism (project rule): the same build gives the same page bytes."""
    again = report_inputs(demo_build, tmp_path / "again")
    main(["--build", str(again)])
    assert (again / "report" / "index.html").read_bytes() == (demo_build / "report" / "index.html").read_bytes()


def test_report_page_shows_the_build_figures(demo_build: Path) -> None:
    """The page states what coverage.json and the manifest hold, the sizing of the chosen |V|,
    and the Zipf and Heaps fits (steps.laws, checked against exact power laws in test_laws) of
    a Counter recount of the train tokens and of growth.json (checked against a set recount in
    test_growth)."""
    page = (demo_build / "report" / "index.html").read_text(encoding="utf-8")
    stats = json.loads((demo_build / "stats" / "coverage.json").read_text())
    manifest = json.loads((demo_build / "manifest.json").read_text())
    assert f"{stats['words']:,} words kept ({stats['vocabulary_size']:,} ids" in page
    assert f"{manifest['accounting']['read']:,}" in page
    for split in ("dev", "test"):
        assert f"{stats['splits'][split]['unknown_rate']:.2%}" in page
    assert report_options(demo_build)["report"]["embedding_widths"] == [100, 300, 1000]  # workflow_config/config.yaml
    for width in report_options(demo_build)["report"]["embedding_widths"]:
        size = ModelSize(stats["vocabulary_size"], width, 3, 100)
        assert f"{size.parameters:,} (" in page and f"{size.embedding_parameters:,} (" in page
    zipf, _, _ = fit_zipf(np.array(list(train_recount(demo_build).values())))
    growth = json.loads((demo_build / "stats" / "growth.json").read_text())
    heaps = fit_heaps(np.array(growth["read"]), np.array(growth["distinct"]))
    assert f"Zipf exponent s = {zipf.exponent:.3f}" in page and f"β = {heaps.exponent:.3f}" in page
    assert 0.5 < zipf.exponent < 2 and 0 < heaps.exponent < 1


def train_recount(build: Path) -> Counter:
    """collections.Counter of the train tokens of the kept documents, from the prepared chunks."""
    removed = {(r["source"], r["offset"]) for r in pq.read_table(build / "interim" / "duplicates.parquet").to_pylist()}
    counts: Counter = Counter()
    for row in corpus_rows(build, ["split", "tokens"]):
        if row["split"] == "train" and (row["source"], row["offset"]) not in removed:
            counts.update(token for sentence in row["tokens"] for token in sentence)
    return counts


def test_coverage_curve_agrees_with_the_size_table(demo_build: Path) -> None:
    """coverage.json's size table (itself checked against a Counter recount in test_cutoffs) at the curve's sizes."""
    counts = pq.read_table(demo_build / "stats" / "token_counts.parquet")
    curve = coverage_curve(counts, points=100000)
    stats = json.loads((demo_build / "stats" / "coverage.json").read_text())
    for row in stats["sizes"]:
        index = int(np.searchsorted(curve["size"], row["size"]))
        assert curve["size"][index] == row["size"]
        assert round(float(curve["train"][index]), 6) == row["train_coverage"]
        assert round(float(curve["dev"][index]), 6) == pytest.approx(row["dev_oov_rate"], abs=1e-6)


def test_table_cells_escape_html() -> None:
    """HTML escaping: tokens such as <b> or & show as text, never as markup."""
    cell = table(["word"], [["<b>&"]])
    assert "&lt;b&gt;&amp;" in cell and "<b>&" not in cell


def png_size(data: bytes) -> tuple[int, int]:
    """Width and height from the IHDR chunk, the first after the signature (PNG specification)."""
    assert png_chunks(data)[0] == b"IHDR"
    return struct.unpack(">II", data[16:24])


def page_with(build: Path, tmp_path: Path, **changes: object) -> str:
    """The page of `build` with some of coverage.json's keys replaced, written by the report step."""
    copy = report_inputs(build, tmp_path / "build")
    coverage = json.loads((copy / "stats" / "coverage.json").read_text())
    coverage.update(changes)
    (copy / "stats" / "coverage.json").write_text(json.dumps(coverage), encoding="utf-8")
    main(["--build", str(copy)])
    return (copy / "report" / "index.html").read_text(encoding="utf-8")


def word_source(train_tokens: int, train_oov: int, dev_tokens: int = 0, dev_oov: int = 0) -> dict:
    """One file's figures as coverage.json keeps them (coverage.derived); no test tokens."""
    figures = {"train": (train_tokens, train_oov), "dev": (dev_tokens, dev_oov), "test": (0, 0)}
    return {s: derived(Figures(tokens=t, unknown=o)) for s, (t, o) in figures.items()}


def file_cells(page: str, section: str = "unknown") -> list[str]:
    """The file names of one section's tables, read back as text."""
    found = re.search(rf'<section id="{section}">(.*?)</section>', page, re.S)
    assert found, f"no section {section!r}"
    return [html.unescape(cell) for cell in re.findall(r'<td class="file">(.*?)</td>', found.group(1))]


def test_file_names_with_markup_maths_braces_quotes_and_other_scripts_show_as_text(demo_build: Path, tmp_path: Path) -> None:
    """html.unescape (Python's standard library) as the reference: each name reads back as written,
    in order of unknown tokens; none becomes markup, and matplotlib never parses one as mathematics."""
    names = ["math$\\frac$.txt", "<script>alert(1)</script>.txt", "{wild}/a.txt", 'quote\'s "q".txt', "Москва/заметки.txt", "中文/笔记.txt"]
    sources = {name: word_source(100, 60 - 10 * rank, 10, rank) for rank, name in enumerate(names)}
    page = page_with(demo_build, tmp_path, sources=sources)
    assert file_cells(page) == names
    assert "<script>" not in page
    for encoded in re.findall(r'<img src="data:image/png;base64,([A-Za-z0-9+/=]+)"', page):
        assert png_chunks(base64.b64decode(encoded))[-1] == b"IEND"


def test_page_and_its_largest_image_stay_small_with_8000_input_files(demo_build: Path, tmp_path: Path) -> None:
    """PNG specification (IHDR) for the pixels; sorted() over every file as the reference for which
    files are listed: the most unknown tokens first, then by name. The page says how many are left out
    and where all of them are."""
    sources = {
        f"a-folder-with-a-long-name-{i % 40:02d}/and-another-below-it/document-{i:05d}-of-the-archive.txt": word_source(200 + i % 13, i % 97, 20, i % 5)
        for i in range(8000)
    }
    page = page_with(demo_build, tmp_path, sources=sources)
    assert len(page.encode("utf-8")) < 1_000_000
    sizes = [png_size(base64.b64decode(e)) for e in re.findall(r'<img src="data:image/png;base64,([A-Za-z0-9+/=]+)"', page)]
    assert max(width * height for width, height in sizes) < 1_000_000
    expected = sorted(sources, key=lambda name: (-sum(f["unknown_tokens"] for f in sources[name].values()), name))
    assert file_cells(page) == expected[:100]
    assert "7,900 more input files are not listed; the figures of every file are in <code>stats/coverage.json</code>, key <code>sources</code>." in page


def test_rates_of_an_empty_split_show_a_dash_on_the_page_and_in_the_summary(demo_build: Path, tmp_path: Path) -> None:
    """0 of 0 tokens has no rate: coverage.json stores 0.0, the page and the summary show a dash."""
    coverage = json.loads((demo_build / "stats" / "coverage.json").read_text())
    splits = {**coverage["splits"], "test": {**derived(Figures()), "types": 0, "oov_types": 0, "top_oov": []}}
    sizes = [{**row, "test_oov_rate": 0.0} for row in coverage["sizes"]]
    sources = {"one.txt": word_source(100, 5)}
    page = page_with(demo_build, tmp_path, splits=splits, sizes=sizes, sources=sources, unknown_classes={**coverage["unknown_classes"], "test": {}})
    rows = [[html.unescape(c) for c in re.findall(r"<td[^>]*>(.*?)</td>", row)] for row in re.findall(r"<tr[^>]*>(.*?)</tr>", page)]
    assert ["test", "0", "0", "—", "0", "0"] in rows
    assert [row[3] for row in rows if len(row) == 4 and row[0].replace(",", "").isdigit()] == ["—"] * len(sizes)
    assert ["1", "one.txt", "5", "100", "5.0000%", "0", "—", "0", "—"] in rows
    assert "of dev and — of test tokens are out of vocabulary" in page
    classes = page.split('<section id="classes">')[1].split("</section>")[0]
    assert re.findall(r'<td class="n">([^<]*)</td></tr>', classes) == ["—"] * len({n for per in coverage["unknown_classes"].values() for n in per})
    summary = format_table({**coverage, "splits": {**splits, "dev": splits["test"]}, "sizes": sizes}).splitlines()
    for split in ("dev", "test"):
        assert next(line for line in summary if line.startswith(split)).split()[3] == "—"  # split tokens unknown rate …
    chosen = next(line for line in summary if line.endswith("<- chosen")).split()
    assert chosen[2] == "—" and chosen[1].endswith("%")


def test_zipf_note_states_the_law_without_naming_a_language(demo_build: Path) -> None:
    """The page describes any corpus: Zipf's law as stated for natural-language text in general."""
    page = (demo_build / "report" / "index.html").read_text(encoding="utf-8")
    note = page.split('<section id="zipf">')[1].split("</section>")[0]
    assert "exponents near 1 for the words of natural-language text" in note and "English" not in note


def test_the_heaps_range_the_page_and_readme_state_is_the_range_fitted(demo_build: Path) -> None:
    """numpy.polyfit on log–log axes over the growth points from a tenth of the stream to its end
    (an independent refit) gives the page's β; page and README state that range."""
    growth = json.loads((demo_build / "stats" / "growth.json").read_text())
    read, distinct = np.array(growth["read"], dtype=np.float64), np.array(growth["distinct"], dtype=np.float64)
    total = read.max()
    used = read >= total / 10
    slope, _ = np.polyfit(np.log(read[used]), np.log(distinct[used]), 1)
    note = (demo_build / "report" / "index.html").read_text(encoding="utf-8").split('<section id="growth">')[1].split("</section>")[0]
    assert f"β = {slope:.3f}," in note
    assert f"fitted from a tenth of the stream to its end, the last decade on the log axis (from {int(total / 10):,} of {int(total):,} tokens" in note
    readme = (REPO / "README.md").read_text(encoding="utf-8").split("## Coverage report")[1].split("\n## ")[0]
    assert "fitted from a tenth of the stream to its end (the last decade on the log axis" in readme
