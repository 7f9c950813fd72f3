"""Peak memory of the growth and deduplicate jobs on two crafted corpora beside ordinary text.

Both jobs read every prepared chunk; they must hold a bounded slice of a chunk, not the
chunk, however large one chunk is (a compressed file or a one-line file is one chunk):
- `one-line`: one `.txt` file of N MB on a single line (one paragraph: split into pieces of
  corpus.max_document_bytes, all in one chunk);
- `duplicates`: one `.txt.gz` of N MB of text in which every paragraph occurs four times;
- `ordinary`: the same N MB of dict-gcide paragraphs in files of 2 MB (the default chunking).
The workflow builds each up to the growth curve (`stats/growth.json`), then the deduplicate and
growth steps are run again exactly as their rules run them, under `/usr/bin/time -f %M`.

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

import yaml

REPO = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(REPO))
sys.path.insert(0, str(REPO / "bench"))

from pipeline import _PARAGRAPH_BREAK, DATA, GCIDE, RESULTS  # noqa: E402

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
    (work / "over.yaml").write_text(yaml.safe_dump({"corpus": {"root": str(root)}}))
    build = work / "build"
    subprocess.run(
        [sys.executable, "-m", "snakemake", "build/stats/growth.json", "--snakefile", str(REPO / "Snakefile"),
         "--directory", str(work), "--cores", "2", "--configfile", str(work / "over.yaml")],
        check=True, capture_output=True,
    )  # fmt: skip
    prepared = sorted(str(p) for p in (build / "interim" / "prepared").glob("*.parquet"))
    step = [sys.executable, "-m", "steps.run"]
    scratch = work / "scratch"
    scratch.mkdir(exist_ok=True)
    figures = {
        "deduplicate": peak([*step, "split", "--enabled", "true", "--output", str(scratch / "d.parquet"),
                             "--removed-counts", str(scratch / "r.parquet"), *prepared], REPO),
        "growth": peak([*step, "growth", "--token-counts", str(build / "stats" / "token_counts.parquet"), "--duplicates",
                        str(build / "interim" / "duplicates.parquet"), "--options", '{"units": "word"}',
                        "--output", str(scratch / "g.json"), *prepared], REPO),
    }  # fmt: skip
    figures["chunks"] = len(prepared)
    accounting = build / "stats" / "accounting.json"
    figures["documents_removed"] = json.loads(accounting.read_text())["dropped"].get("duplicate", 0) if accounting.exists() else None
    print(name, figures, flush=True)
    return figures


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description="Peak memory of growth and deduplicate on crafted corpora.")
    parser.add_argument("--mb", type=int, default=200, help="text per corpus, MB")
    args = parser.parse_args(argv)
    roots = make_corpora(args.mb * 1_000_000)
    results = {"mb": args.mb, **{name: measure(name, root) for name, root in roots.items()}}
    RESULTS.mkdir(parents=True, exist_ok=True)
    (RESULTS / "aggregate_memory.json").write_text(json.dumps(results, indent=2) + "\n")


if __name__ == "__main__":
    main()
