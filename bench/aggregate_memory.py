"""Peak memory of the deduplicate and growth jobs, and of the shard job of the largest chunk, on
two crafted corpora beside ordinary text.

The deduplicate job reads every prepared chunk, a shard job one (and records the chunk's
sightings for the growth curve, which the growth job merges); they must hold a bounded slice of
a chunk, not the chunk, however large one chunk is (a compressed file or a one-line file is one
chunk):
- `one-line`: one `.txt` file of N MB on a single line (one paragraph: split into pieces of
  corpus.max_document_bytes, all in one chunk);
- `duplicates`: one `.txt.gz` of N MB of text in which every paragraph occurs four times;
- `ordinary`: the same N MB of dict-gcide paragraphs in files of 2 MB (the default chunking).
The workflow builds each, then the three steps are run again exactly as their rules run them,
under `/usr/bin/time -f %M`.

Usage: python bench/aggregate_memory.py [--mb 200]
Corpus and builds go to bench/data/aggregate_memory/, results to bench/results/aggregate_memory.json.
"""

from __future__ import annotations

import argparse
import gzip
import json
import subprocess
import sys
from pathlib import Path

REPO = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(REPO))
sys.path.insert(0, str(REPO / "bench"))

from pipeline import _PARAGRAPH_BREAK, DATA, GCIDE, RESULTS, workflow_command  # noqa: E402

TIME = "/usr/bin/time"
FOLDER = DATA / "aggregate_memory"


def text_of(size: int) -> list[bytes]:
    """Paragraphs of dict-gcide, repeated with a copy number until they hold `size` bytes."""
    text = gzip.decompress(GCIDE.read_bytes()).decode("utf-8", "replace")
    paragraphs = [p.encode() for p in _PARAGRAPH_BREAK.split(text) if p.strip()]
    out, held, copy = [], 0, 0
    while held < size:
        for paragraph in paragraphs:
            line = f"copy{copy} ".encode() + paragraph
            out.append(line)
            held += len(line) + 2
            if held >= size:
                break
        copy += 1
    return out


def make_corpora(size: int) -> dict[str, Path]:
    roots = {name: FOLDER / name / "raw" for name in ("one-line", "duplicates", "ordinary")}
    if not (FOLDER / f"ready-{size}").exists():
        paragraphs = text_of(size)
        for root in roots.values():
            root.mkdir(parents=True, exist_ok=True)
        (roots["one-line"] / "line.txt").write_bytes(b" ".join(p.replace(b"\n", b" ") for p in paragraphs) + b"\n")
        quarter = paragraphs[: len(paragraphs) // 4]
        with gzip.open(roots["duplicates"] / "repeated.txt.gz", "wb", compresslevel=1) as out:
            for _ in range(4):
                out.write(b"\n\n".join(quarter) + b"\n\n")
        for number in range(0, len(paragraphs), 20_000):
            (roots["ordinary"] / f"part-{number:08d}.txt").write_bytes(b"\n\n".join(paragraphs[number : number + 20_000]) + b"\n")
        (FOLDER / f"ready-{size}").touch()
    return roots


def peak(command: list[str], cwd: Path) -> dict:
    result = subprocess.run([TIME, "-f", "%M %U %S %e", *command], capture_output=True, text=True, cwd=cwd)
    if result.returncode != 0:
        raise SystemExit(f"bench: {command[3]} failed:\n{result.stderr[-3000:]}")
    kib, user, system, wall = result.stderr.strip().splitlines()[-1].split()
    return {"peak_rss_mib": round(int(kib) / 1024, 1), "cpu_seconds": round(float(user) + float(system), 2), "wall_seconds": float(wall)}


def measure(name: str, root: Path) -> dict:
    work = root.parent
    subprocess.run(workflow_command(work, {"corpus": {"root": str(root)}}, "--cores", "2"), check=True, capture_output=True)
    build = work / "build"
    chunks = json.loads((build / "interim" / "plan" / "chunks.json").read_text())
    largest = max(chunks, key=lambda chunk: (build / "interim" / "prepared" / f"{chunk}.parquet").stat().st_size)
    step = [sys.executable, "-m", "steps.run"]
    figures = {
        "deduplicate": peak([*step, "deduplicate", "--build", str(build)], REPO),
        "shards_of_largest_chunk": peak([*step, "shards", "--build", str(build), "--chunk", largest], REPO),
        "growth": peak([*step, "growth", "--build", str(build)], REPO),
    }
    figures["chunks"] = len(chunks)
    accounting = build / "stats" / "accounting.json"
    figures["documents_removed"] = json.loads(accounting.read_text())["dropped"].get("duplicate", 0) if accounting.exists() else None
    print(name, figures, flush=True)
    return figures


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description="Peak memory of deduplicate, growth and the largest shard job on crafted corpora.")
    parser.add_argument("--mb", type=int, default=200, help="text per corpus, MB")
    args = parser.parse_args(argv)
    roots = make_corpora(args.mb * 1_000_000)
    results = {"mb": args.mb, **{name: measure(name, root) for name, root in roots.items()}}
    RESULTS.mkdir(parents=True, exist_ok=True)
    (RESULTS / "aggregate_memory.json").write_text(json.dumps(results, indent=2) + "\n")


if __name__ == "__main__":
    main()
