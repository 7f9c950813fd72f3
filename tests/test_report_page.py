"""The vocabulary coverage report page (steps/report_page.py) of the demo build."""

from __future__ import annotations

import base64
import json
import re
import struct
from collections import Counter
from pathlib import Path

import numpy as np
import pyarrow.parquet as pq
import pytest

from steps.laws import ModelSize, fit_heaps, fit_zipf
from steps.report_page import coverage_curve, main, table

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"
OPTIONS = {"report": {"embedding_widths": [100, 300, 1000], "hidden_width": 100, "top_oov": 25}, "windows": {"ngram": {"n": 4}}}


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
    """Prepared chunk files in corpus order: by their first input file as listed in the manifest
    (a pack holds several), then chunk number."""
    inputs = [entry["path"] for entry in json.loads((build / "manifest.json").read_text())["inputs"]]

    def key(path: Path) -> tuple[int, str]:
        sources = set(pq.read_table(path, columns=["source"])["source"].to_pylist())
        return (min((inputs.index(s) for s in sources), default=-1), path.name.rsplit("-", 1)[-1])

    return [str(p) for p in sorted((build / "interim" / "prepared").glob("*.parquet"), key=key)]


def corpus_rows(build: Path, columns: list[str]) -> list[dict]:
    """Every prepared row (kept before deduplication) in corpus order: input file as listed in
    the manifest, then byte offset; prepared tables store rows by split and doc_hash."""
    inputs = [entry["path"] for entry in json.loads((build / "manifest.json").read_text())["inputs"]]
    rows = [row for path in (build / "interim" / "prepared").glob("*.parquet")
            for row in pq.read_table(path, columns=sorted({*columns, "source", "offset"})).to_pylist()]
    return sorted(rows, key=lambda r: (inputs.index(r["source"]), r["offset"]))


def page_arguments(build: Path, output: Path) -> list[str]:
    return [
        "--coverage", str(build / "stats" / "coverage.json"), "--manifest", str(build / "manifest.json"),
        "--token-counts", str(build / "stats" / "token_counts.parquet"), "--growth", str(build / "stats" / "growth.json"),
        "--options", json.dumps(OPTIONS), "--output", str(output),
    ]


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
    again = tmp_path / "again.html"
    main(page_arguments(demo_build, again))
    assert again.read_bytes() == (demo_build / "report" / "index.html").read_bytes()


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
        assert f"{stats['splits'][split]['oov_rate']:.2%}" in page
    for width in OPTIONS["report"]["embedding_widths"]:
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
    """coverage.json's size table (itself checked against a Counter recount in test_whatif) at the curve's sizes."""
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
