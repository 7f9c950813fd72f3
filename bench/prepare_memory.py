"""Peak memory of one prepare job on one compressed file as the file grows.

A compressed file cannot be cut into chunks, so one prepare job reads it whole; it must still
hold at most about RUN_FACTOR x corpus.chunk_mb of rows at a time (steps/prepare.py). This
script gzips 1, 2 and 4 copies of Debian's dict-gcide text (about 40, 80 and 160 MB; each
paragraph of copy k prefixed with `copyk`, as in bench/pipeline.py) into one `.txt.gz` each, runs
the prepare step on it exactly as the workflow's rule does (`python -m steps.run prepare --build
DIR --chunk KEY`, default configuration, in a build folder holding only the chunk's plan and the
rule's options) and records its peak resident memory (`/usr/bin/time -f %M`) and CPU time.

Usage: python bench/prepare_memory.py [--copies 1 2 4] [--chunk-mb 32]
Corpus and outputs go to bench/data/prepare_memory/, results to bench/results/prepare_memory.json.
"""

from __future__ import annotations

import argparse
import gzip
import json
import os
import shutil
import subprocess
import sys
from pathlib import Path

REPO = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(REPO))
sys.path.insert(0, str(REPO / "bench"))

from corpusmill.ingest import Chunk, chunk_key  # noqa: E402
from corpusmill.layout import Layout  # noqa: E402
from corpusmill.plan import chunk_record, rule_options, write_if_changed  # noqa: E402
from corpusmill.worker import ENV  # noqa: E402
from pipeline import DATA, GCIDE, RESULTS, default_config, write_corpus  # noqa: E402

TIME = "/usr/bin/time"


def compressed_corpus(folder: Path, copies: int) -> tuple[Path, int]:
    """One gzipped .txt of `copies` copies of the gcide text; returns its path and text bytes."""
    source = DATA / f"x{copies}"
    write_corpus(source, copies)
    parts = sorted(source.glob("*.txt"))
    target = folder / f"gcide-x{copies}.txt.gz"
    if not target.exists():
        folder.mkdir(parents=True, exist_ok=True)
        with gzip.open(target.with_suffix(".partial"), "wb", compresslevel=1) as out:
            for path in parts:
                out.write(path.read_bytes() + b"\n")
        target.with_suffix(".partial").rename(target)
    return target, sum(path.stat().st_size + 1 for path in parts)


def run_prepare(path: Path, config: dict, build: Path) -> dict:
    """The prepare rule's command on one file in build folder `build` (its chunk's plan and the
    rule's options, what the workflow writes before any job); returns peak RSS (MiB) and CPU seconds."""
    config = {**config, "corpus": {**config["corpus"], "root": str(path.parent)}}
    layout = Layout(str(build))
    chunk = Chunk(chunk_key(path.name, 0), (path.name,))
    write_if_changed(layout.options("prepare"), rule_options(config, "prepare"))
    write_if_changed(layout.chunk_plan(chunk.key), chunk_record(path.parent, chunk))
    command = [TIME, "-f", "%M %U %S %e", sys.executable, "-m", "steps.run", "prepare", "--build", str(build), "--chunk", chunk.key]
    # Without a worker's name in the environment the job runs in the measured process.
    environment = {key: value for key, value in os.environ.items() if key != ENV}
    result = subprocess.run(command, capture_output=True, text=True, env={**environment, "PYTHONPATH": str(REPO)})
    if result.returncode != 0:
        raise SystemExit(f"bench: prepare failed:\n{result.stderr[-3000:]}")
    peak_kib, user, system, wall = result.stderr.strip().splitlines()[-1].split()
    tally = json.loads(Path(layout.tally(chunk.key)).read_text())
    return {
        "peak_rss_mib": round(int(peak_kib) / 1024, 1),
        "cpu_seconds": round(float(user) + float(system), 2),
        "wall_seconds": float(wall),
        "documents_kept": tally["kept"],
    }


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description="Peak memory of a prepare job on one growing compressed file.")
    parser.add_argument("--copies", type=int, nargs="+", default=[1, 2, 4])
    parser.add_argument("--chunk-mb", type=float, default=None, help="corpus.chunk_mb (default: the configuration's)")
    parser.add_argument("--output", default=str(RESULTS / "prepare_memory.json"))
    args = parser.parse_args(argv)
    if not GCIDE.exists():
        raise SystemExit(f"bench: {GCIDE} is missing; install Debian's dict-gcide package (apt-get install -y dict-gcide)")
    if not Path(TIME).exists():
        raise SystemExit(f"bench: {TIME} is missing; install Debian's time package (apt-get install -y time)")
    config = default_config()
    if args.chunk_mb is not None:
        config["corpus"]["chunk_mb"] = args.chunk_mb
    folder = DATA / "prepare_memory"
    results = {"chunk_mb": config["corpus"]["chunk_mb"], "runs": {}}
    for copies in args.copies:
        path, text_bytes = compressed_corpus(folder, copies)
        run = run_prepare(path, config, folder / f"build-x{copies}")
        run["text_mb"] = round(text_bytes / 1e6, 1)
        results["runs"][f"{copies}x"] = run
        shutil.rmtree(folder / f"build-x{copies}")
        print(
            f"{copies}x: {run['text_mb']:.0f} MB of text in one .txt.gz: peak RSS {run['peak_rss_mib']:.0f} MiB, "
            f"{run['cpu_seconds']:.1f} CPU s, {run['documents_kept']:,} documents kept"
        )
    Path(args.output).parent.mkdir(parents=True, exist_ok=True)
    Path(args.output).write_text(json.dumps(results, indent=2, sort_keys=True) + "\n", encoding="utf-8")


if __name__ == "__main__":
    main()
