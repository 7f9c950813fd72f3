"""Peak memory and page size of the report job as the number of input files grows.

Builds the demo corpus once per unit (word, and subword with 500 ids), then gives the report step
statistics for N input files: coverage.json's `sources` (word units) or one encode-statistics file
per 1,000 input files (subword units), each file with a long path and its own OOV or byte counts.
Runs the report rule's command (`python -m steps.run report_page …`) under `/usr/bin/time` and
records its peak resident memory, wall time, the page's bytes and its largest image in pixels.
`--code DIR` runs the step from another checkout (PYTHONPATH=DIR), to compare before and after.

Usage: python bench/report_files.py [--files 100 1000 8000] [--code DIR]
Builds go to bench/data/report_files/, results to bench/results/report_files.json.
"""

from __future__ import annotations

import argparse
import base64
import json
import os
import re
import struct
import subprocess
import sys
from pathlib import Path

REPO = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(REPO))
sys.path.insert(0, str(REPO / "bench"))

from corpusmill.layout import SPLITS  # noqa: E402
from corpusmill.plan import RULE_SECTIONS  # noqa: E402
from pipeline import DATA, RESULTS, default_config, machine, run_build  # noqa: E402

TIME = "/usr/bin/time"
UNITS = {"word": {}, "subword": {"units": "subword", "subword": {"vocab_size": 500}}}
STATS_FILES_PER = 1000


def path_of(index: int) -> str:
    return f"section-{index % 40:02d}-with-a-rather-long-folder-name/subsection-{index // 40 % 20:02d}/document-{index:05d}-of-the-archive.txt"


def word_sources(count: int) -> dict[str, dict]:
    """coverage.json's per-file figures: 200-212 train tokens and 20 dev tokens, a few OOV."""
    sources = {}
    for i in range(count):
        figures = {"train": (200 + i % 13, i % 97), "dev": (20, i % 5), "test": (0, 0)}
        sources[path_of(i)] = {s: {"tokens": t, "oov_tokens": o, "oov_rate": round(o / t, 6) if t else 0.0} for s, (t, o) in figures.items()}
    return sources


def piece_sources(start: int, stop: int) -> dict[str, dict]:
    """Encode statistics per file: 300-310 train pieces, some of them byte pieces."""
    sources = {}
    for i in range(start, stop):
        train = {"tokens": 300 + i % 11, "words": 150, "oov_tokens": 0, "byte_pieces": 2 * (i % 89), "byte_runs": i % 89, "documents": 1, "sentences": 10}
        sources[path_of(i)] = {"train": train, **{s: dict.fromkeys(train, 0) for s in SPLITS if s != "train"}}
    return sources


def report_job(build: Path, unit: str, count: int, code: Path, folder: Path) -> dict:
    """The report rule's command on the demo build's statistics with `count` input files."""
    folder.mkdir(parents=True, exist_ok=True)
    coverage = json.loads((build / "stats" / "coverage.json").read_text())
    stats_arguments: list[str] = []
    if unit == "word":
        coverage["sources"] = word_sources(count)
    else:
        for start in range(0, count, STATS_FILES_PER):
            path = folder / f"encode-stats-{start}.json"
            path.write_text(json.dumps({"units": "subword", "sources": piece_sources(start, min(count, start + STATS_FILES_PER))}))
            stats_arguments += ["--encode-stats", str(path)]
    (folder / "coverage.json").write_text(json.dumps(coverage))
    config = default_config()
    options = json.dumps({k: config[k] for k in RULE_SECTIONS["report"]}, sort_keys=True)
    page = folder / "index.html"
    command = [
        TIME,
        "-f",
        "%M %e",
        sys.executable,
        "-m",
        "steps.run",
        "report_page",
        "--coverage",
        str(folder / "coverage.json"),
        "--manifest",
        str(build / "manifest.json"),
        "--token-counts",
        str(build / "stats" / "token_counts.parquet"),
        "--growth",
        str(build / "stats" / "growth.json"),
        *stats_arguments,
        "--options",
        options,
        "--output",
        str(page),
    ]
    load = os.getloadavg()[0]
    # Run from the output folder: `python -m` puts the working directory first on the import path.
    result = subprocess.run(command, capture_output=True, text=True, cwd=folder, env={**os.environ, "PYTHONPATH": str(code)})
    if result.returncode != 0:
        raise SystemExit(f"bench: the report job failed:\n{result.stderr[-3000:]}")
    peak_kib, wall = result.stderr.strip().splitlines()[-1].split()
    text = page.read_text(encoding="utf-8")
    pixels = [struct.unpack(">II", base64.b64decode(e)[16:24]) for e in re.findall(r"data:image/png;base64,([A-Za-z0-9+/=]+)", text)]
    width, height = max(pixels, key=lambda size: size[0] * size[1])
    return {
        "peak_rss_mib": round(int(peak_kib) / 1024, 1),
        "wall_seconds": float(wall),
        "load_before": round(load, 2),
        "page_bytes": len(text.encode("utf-8")),
        "largest_image": f"{width}x{height}",
        "largest_image_pixels": width * height,
    }


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description="Peak memory and page size of the report job with many input files.")
    parser.add_argument("--files", type=int, nargs="+", default=[100, 1000, 8000])
    parser.add_argument("--units", nargs="+", choices=sorted(UNITS), default=sorted(UNITS))
    parser.add_argument("--code", type=Path, default=REPO, help="checkout whose steps/ runs the report job")
    parser.add_argument("--output", default=str(RESULTS / "report_files.json"))
    args = parser.parse_args(argv)
    if not Path(TIME).exists():
        raise SystemExit(f"bench: {TIME} is missing; install Debian's time package (apt-get install -y time)")
    folder = DATA / "report_files"
    results: dict = {"machine": machine(), "code": str(args.code.resolve()), "runs": {}}
    for unit in args.units:
        directory = folder / unit
        if not (directory / "build" / "manifest.json").exists():
            run_build(directory, {"corpus": {"root": str(REPO / "demo_raw")}, **UNITS[unit]}, cores=2)
        for count in args.files:
            run = report_job(directory / "build", unit, count, args.code.resolve(), folder / f"{unit}-{count}")
            results["runs"][f"{unit} {count}"] = run
            print(
                f"{unit:>7} {count:>6,} files: peak RSS {run['peak_rss_mib']:>7.0f} MiB, {run['wall_seconds']:>6.1f} s, "
                f"page {run['page_bytes']:>11,} bytes, largest image {run['largest_image']} (load {run['load_before']})"
            )
    Path(args.output).parent.mkdir(parents=True, exist_ok=True)
    Path(args.output).write_text(json.dumps(results, indent=2, sort_keys=True) + "\n", encoding="utf-8")


if __name__ == "__main__":
    main()
