"""Measure what 1,000 chunks cost beyond their work: building the DAG and running the jobs.

- DAG build: wall time of `snakemake -n` (a dry run plans every job) for 1,000 chunks made two
  ways: one 2 MB file cut with a tiny corpus.chunk_mb, and 1,000 small files.
  The many small files are planned twice: one job per file (corpus.pack_mb 0) and packed
  (the default pack_mb).
- Scheduling overhead: the prepare stage of the same file cut into --run-chunks chunks (100 by
  default; running 1,000 one-second jobs takes minutes) run by Snakemake (`--until prepare`, N
  cores), against the same work done in one process (prepare_chunk per chunk).
  overhead per job = (run wall x cores - in-process work) / jobs, in core-seconds; it includes
  Snakemake's own bookkeeping and each job's interpreter start and imports, measured apart.
- Packing: the prepare stage of --run-chunks small files cut from the same text, one job per
  file against the default packing.

Usage: python bench/dag_overhead.py [--chunks 1000] [--run-chunks 100] [--cores 2]
Data goes to bench/data/dag/, results to bench/results/dag_overhead.json (both gitignored).
"""

from __future__ import annotations

import argparse
import json
import os
import re
import resource
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

REPO = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(REPO))
sys.path.insert(0, str(REPO / "bench"))

from corpusmill.ingest import plan_chunks, survey_corpus  # noqa: E402
from corpusmill.prepare import prepare_chunk  # noqa: E402
from pipeline import DATA, RESULTS, default_config, workflow_command, write_corpus  # noqa: E402


def snakemake(directory: Path, overrides: dict, *extra: str) -> tuple[float, float, str]:
    """Run Snakemake in `directory`; returns (wall seconds, CPU seconds of the tree, output)."""
    command = workflow_command(directory, overrides, *extra)
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    started = time.perf_counter()
    result = subprocess.run(command, capture_output=True, text=True)
    wall = time.perf_counter() - started
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    if result.returncode != 0:
        raise SystemExit(f"bench: snakemake failed in {directory}:\n{result.stdout[-3000:]}\n{result.stderr[-3000:]}")
    cpu = after.ru_utime + after.ru_stime - before.ru_utime - before.ru_stime
    return wall, cpu, result.stdout + result.stderr


def job_count(output: str) -> int:
    match = re.search(r"\ntotal\s+(\d+)", output)
    return int(match.group(1)) if match else 0


def small_files(folder: Path, source: Path, files: int) -> None:
    """`files` files of whole paragraphs cut from one source file (for the many-files plan)."""
    if (folder / ".complete").exists():
        return
    shutil.rmtree(folder, ignore_errors=True)
    folder.mkdir(parents=True)
    paragraphs = source.read_text(encoding="utf-8").split("\n\n")
    per_file = -(-len(paragraphs) // files)
    for number in range(files):
        (folder / f"f{number:04d}.txt").write_text("\n\n".join(paragraphs[number * per_file : (number + 1) * per_file]) + "\n", encoding="utf-8")
    (folder / ".complete").write_text("")


def startup_seconds(repeats: int = 5) -> float:
    """Median wall time of starting one step process (interpreter, imports, argument parsing)."""
    times = []
    for _ in range(repeats):
        started = time.perf_counter()
        subprocess.run([sys.executable, "-m", "steps.run", "prepare", "--help"], capture_output=True, check=True, env={**os.environ, "PYTHONPATH": str(REPO)})
        times.append(time.perf_counter() - started)
    return statistics.median(times)


def in_process_work(root: Path, chunk_bytes: int, config: dict) -> tuple[float, float, int]:
    """Wall and CPU seconds of preparing every chunk in this one process, with every file a
    prepare job writes (table, tally, counts, drops, signatures)."""
    chunks = plan_chunks(root, survey_corpus(root, ["*.txt"], []).sources, chunk_bytes, config["corpus"]["text_unit"])
    with tempfile.TemporaryDirectory() as scratch:
        started, cpu = time.perf_counter(), time.process_time()
        for chunk in chunks:
            stem = f"{scratch}/{chunk.key}"
            prepare_chunk(
                str(root), chunk, chunk_bytes, config, f"{stem}.parquet", f"{stem}.json", frozenset(),
                f"{stem}.counts.parquet", f"{stem}.drops.parquet", (f"{stem}.signatures.parquet", f"{stem}.slots"),
            )  # fmt: skip
        return time.perf_counter() - started, time.process_time() - cpu, len(chunks)


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description="Measure DAG build and per-job overhead with many chunks.")
    parser.add_argument("--chunks", type=int, default=1000)
    parser.add_argument("--run-chunks", type=int, default=100, help="chunks of the measured prepare stage")
    parser.add_argument("--cores", type=int, default=2)
    parser.add_argument("--output", default=str(RESULTS / "dag_overhead.json"))
    args = parser.parse_args(argv)
    base = DATA / "dag"
    write_corpus(DATA / "x1", 1)
    one = base / "one-file"
    one.mkdir(parents=True, exist_ok=True)
    shutil.copyfile(DATA / "x1" / "part-00.txt", one / "part-00.txt")
    size = (one / "part-00.txt").stat().st_size
    chunk_mb = size / args.chunks / (1 << 20) * 1.0001  # about `chunks` chunks (float rounding may add one)
    run_mb = size / args.run_chunks / (1 << 20) * 1.0001
    run_bytes = int(run_mb * (1 << 20))
    many = base / "many-files"
    small_files(many, one / "part-00.txt", args.chunks)
    few = base / "run-files"
    small_files(few, one / "part-00.txt", args.run_chunks)

    config = default_config()
    config["corpus"]["chunk_mb"] = run_mb
    results: dict = {"chunks": args.chunks, "cores": args.cores, "chunk_mb": chunk_mb, "input_mb": round(size / 1e6, 2)}
    for name, overrides in {
        "one_file_tiny_chunks": {"corpus": {"root": str(one), "chunk_mb": chunk_mb}},
        "many_small_files_unpacked": {"corpus": {"root": str(many), "pack_mb": 0}},
        "many_small_files_packed": {"corpus": {"root": str(many)}},
    }.items():
        directory = base / "runs" / name
        shutil.rmtree(directory, ignore_errors=True)
        wall, _, output = snakemake(directory, overrides, "-n", "--cores", str(args.cores))
        jobs = job_count(output)
        results[f"dry_run_{name}"] = {"seconds": round(wall, 2), "jobs": jobs, "ms_per_job": round(1000 * wall / jobs, 2)}
    directory = base / "runs" / "prepare_stage"
    shutil.rmtree(directory, ignore_errors=True)
    wall, cpu, output = snakemake(directory, {"corpus": {"root": str(one), "chunk_mb": run_mb}}, "--until", "prepare", "--cores", str(args.cores))
    jobs = job_count(output)
    work_wall, work_cpu, _ = in_process_work(one, run_bytes, config)
    startup = startup_seconds()
    results["prepare_stage"] = {
        "jobs": jobs,
        "snakemake_wall_s": round(wall, 2),
        "snakemake_cpu_s": round(cpu, 2),
        "in_process_wall_s": round(work_wall, 2),
        "in_process_cpu_s": round(work_cpu, 2),
        "overhead_core_s_per_job": round((wall * args.cores - work_wall) / jobs, 3),
        "overhead_cpu_s_per_job": round((cpu - work_cpu) / jobs, 3),
        "step_process_start_s": round(startup, 3),
        "load_average": round(os.getloadavg()[0], 2),
    }
    for name, pack in {"unpacked": {"pack_mb": 0}, "packed": {}}.items():
        directory = base / "runs" / f"small_files_{name}"
        shutil.rmtree(directory, ignore_errors=True)
        wall, cpu, output = snakemake(directory, {"corpus": {"root": str(few), **pack}}, "--until", "prepare", "--cores", str(args.cores))
        results[f"prepare_stage_small_files_{name}"] = {"files": args.run_chunks, "jobs": job_count(output), "wall_s": round(wall, 2), "cpu_s": round(cpu, 2)}
    Path(args.output).parent.mkdir(parents=True, exist_ok=True)
    Path(args.output).write_text(json.dumps(results, indent=2, sort_keys=True) + "\n", encoding="utf-8")
    for key in ("dry_run_one_file_tiny_chunks", "dry_run_many_small_files_unpacked", "dry_run_many_small_files_packed"):
        r = results[key]
        print(f"{key}: {r['jobs']} jobs planned in {r['seconds']:.1f} s ({r['ms_per_job']:.1f} ms/job)")
    p = results["prepare_stage"]
    print(
        f"prepare stage, {p['jobs']} jobs on {args.cores} cores: {p['snakemake_wall_s']:.1f} s wall; same work in one process "
        f"{p['in_process_wall_s']:.1f} s; overhead {p['overhead_core_s_per_job']:.3f} core-s/job wall-based, "
        f"{p['overhead_cpu_s_per_job']:.3f} CPU-s/job; "
        f"(step process start alone {p['step_process_start_s']:.3f} s)"
    )
    for name in ("unpacked", "packed"):
        r = results[f"prepare_stage_small_files_{name}"]
        print(f"prepare stage of {r['files']} small files, {name}: {r['jobs']} jobs, {r['wall_s']:.1f} s wall, {r['cpu_s']:.1f} CPU s")


if __name__ == "__main__":
    main()
