"""Peak memory and page size of the report job as the number of input files grows.

Builds the demo corpus once per unit (word, and subword with 500 ids), then copies the files the
report step reads from that build into a build folder of its own whose coverage.json's `sources`
hold N input files, each with a long path and its own OOV (word units) or byte-piece (subword
units) counts. Runs the report rule's command (`python -m steps.run report --build DIR`) under
`/usr/bin/time` and records its peak resident memory, wall time, the page's bytes and its largest image in pixels.
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
import shutil
import struct
import subprocess
import sys
from pathlib import Path

REPO = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(REPO))
sys.path.insert(0, str(REPO / "bench"))

from corpusmill.coverage import derived  # noqa: E402
from corpusmill.formats import Figures  # noqa: E402
from corpusmill.layout import SPLITS, Layout  # noqa: E402
from corpusmill.worker import ENV  # noqa: E402
from pipeline import DATA, RESULTS, machine, run_build  # noqa: E402

TIME = "/usr/bin/time"
UNITS = {"word": {}, "subword": {"units": "subword", "subword": {"vocab_size": 500}}}


def path_of(index: int) -> str:
    return f"section-{index % 40:02d}-with-a-rather-long-folder-name/subsection-{index // 40 % 20:02d}/document-{index:05d}-of-the-archive.txt"


def word_sources(count: int) -> dict[str, dict]:
    """coverage.json's per-file figures, word units: 200-212 train tokens and 20 dev tokens, a few OOV."""
    sources = {}
    for i in range(count):
        figures = {"train": (200 + i % 13, i % 97), "dev": (20, i % 5), "test": (0, 0)}
        sources[path_of(i)] = {s: derived(Figures(documents=1, sentences=10, tokens=t, unknown=o, words=t)) for s, (t, o) in figures.items()}
    return sources


def piece_sources(count: int) -> dict[str, dict]:
    """coverage.json's per-file figures, subword units: 300-310 train pieces, some of them byte pieces."""
    sources = {}
    for i in range(count):
        train = Figures(documents=1, sentences=10, tokens=300 + i % 11, words=150, byte_pieces=2 * (i % 89), byte_runs=i % 89)
        sources[path_of(i)] = {"train": derived(train), **{s: derived(Figures()) for s in SPLITS if s != "train"}}
    return sources


def report_build(build: Path, unit: str, count: int, target: Path) -> Layout:
    """A build folder holding what the report job reads, copied from the finished `build`, with
    coverage.json's `sources` replaced by `count` synthetic input files."""
    source, layout = Layout(str(build)), Layout(str(target))
    for name in ("manifest", "token_counts", "growth", "hygiene"):
        if Path(getattr(source, name)).exists():
            Path(getattr(layout, name)).parent.mkdir(parents=True, exist_ok=True)
            shutil.copyfile(getattr(source, name), getattr(layout, name))
    Path(layout.options("report")).parent.mkdir(parents=True, exist_ok=True)
    shutil.copyfile(source.options("report"), layout.options("report"))
    coverage = json.loads(Path(source.coverage).read_text())
    coverage["sources"] = word_sources(count) if unit == "word" else piece_sources(count)
    Path(layout.coverage).write_text(json.dumps(coverage))
    return layout


def report_job(build: Path, unit: str, count: int, code: Path, folder: Path) -> dict:
    """The report rule's command on the demo build's statistics with `count` input files."""
    if folder.exists():
        shutil.rmtree(folder)
    layout = report_build(build, unit, count, folder / "build")
    command = [TIME, "-f", "%M %e", sys.executable, "-m", "steps.run", "report", "--build", layout.root]
    load = os.getloadavg()[0]
    # Run from the output folder: `python -m` puts the working directory first on the import path.
    # Without a worker's name in the environment the job runs in the measured process.
    environment = {key: value for key, value in os.environ.items() if key != ENV}
    result = subprocess.run(command, capture_output=True, text=True, cwd=folder, env={**environment, "PYTHONPATH": str(code)})
    if result.returncode != 0:
        raise SystemExit(f"bench: the report job failed:\n{result.stderr[-3000:]}")
    peak_kib, wall = result.stderr.strip().splitlines()[-1].split()
    text = Path(layout.report).read_text(encoding="utf-8")
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
