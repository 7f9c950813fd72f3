"""Benchmark the whole workflow on real English text (Debian's dict-gcide, about 40 MB).

One run measures, on this machine:
- the floor F: one bare single-core pass of the default word segmenter over the 1x corpus
  (read each file, cut paragraphs, `Segmenter.segment`, discard) — the least any build must do;
- the full build on `--cores N` at 1x and 10x, as a ratio to F, in MB/s and tokens/s;
- the peak resident memory of every job, sampled from the process table (no rule changes);
- the rebuild after one of the 20 input files changed, as a share of the full build, and the
  same command once more with nothing to do (the least any rebuild costs);
- reading every train shard back into numpy arrays (ids/s).

- a hand-written script doing less (bench/handwritten_baseline.py: two worker processes, NFC,
  simple regular expressions for sentences and words, exact dedup, a Counter vocabulary,
  4-gram windows, Parquet) on the same 1x corpus in the same run: corpusmill's wall time over
  the script's, and the largest job's peak memory over the script's whole process tree;
- at the largest scale, appending one new file with a frozen vocabulary (the build's own
  vocabulary.tsv): the seconds, as a share of that scale's full build, and whether every shard
  file of the other chunks kept its bytes; then another new file with the baseline turned off,
  as a share of the full build less its baseline job.

The 10x corpus holds ten copies of every file, made one of two ways (`--copies`):
- `renamed` (the default): copy k > 0 gives about 30% of the word types (runs of letters,
  picked by a hash of k and the case-folded word) its own ending. A document of one copy then
  shares few word n-grams with its other copies, so deduplication and contamination meet text
  that grows as a real corpus does: new documents, a few near-duplicates, and a vocabulary
  about 3.7 times the 1x one, which is what Heaps' law V = K N^b gives for ten times the text
  with b = 0.57 (b from 0.4 to 0.6 for English text: from memory). The bench prints the
  measured growth.
- `numbered`: each paragraph of copy k starts with the token `copyk`; every document then has
  nine near-duplicates, the worst case for clustering and contamination, and the vocabulary
  barely grows.
Every scale runs with `near_duplicates.policy: off`: the clusters are found (the work is
measured) and nothing is dropped, so every scale holds ten times the documents of 1x. Shard
files follow the chunks (a chunk's job holds one chunk).

Usage: python bench/pipeline.py [--cores 2] [--scales 1 10] [--copies renamed|numbered] [--pack-mb MB] [--keep]   (needs `pip install -e '.[bench]'`)
Corpus and builds go to bench/data/, results to bench/results/pipeline.json (both gitignored).
"""

from __future__ import annotations

import argparse
import gzip
import json
import os
import platform
import re
import resource
import shutil
import subprocess
import sys
import threading
import time
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import psutil
import pyarrow as pa
import pyarrow.parquet as pq
import yaml

REPO = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(REPO))

from corpus_copies import LETTER_RUN, renamed  # noqa: E402

from corpusmill import plan, settings  # noqa: E402
from corpusmill.segment import Segmenter  # noqa: E402
from handwritten_baseline import run_script  # noqa: E402

GCIDE = Path("/usr/share/dictd/gcide.dict.dz")
DATA = REPO / "bench" / "data"
RESULTS = REPO / "bench" / "results"
FILES = 20
_PARAGRAPH_BREAK = re.compile(r"\n[ \t]*\n")


def default_config() -> dict:
    """The workflow's configuration with every default filled in (what a plain run uses)."""
    raw = yaml.safe_load((REPO / "workflow_config" / "config.yaml").read_text(encoding="utf-8"))
    return settings.resolve(raw)


COPY_STYLES = ("renamed", "numbered")


def write_corpus(folder: Path, copies: int, style: str = "renamed") -> dict:
    """Split gcide into FILES .txt files of whole paragraphs (x copies, made as `style` says: see
    the module docstring); returns the bytes written and the word types (distinct case-folded
    letter runs: the growth `renamed` aims at)."""
    marker = folder / ".complete"
    made = {"copies": copies, "style": style if copies > 1 else "single"}
    try:
        record = json.loads(marker.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        record = {}  # none yet, or one from an older bench: made again
    if record.get("made") == made:
        return record["figures"]
    if folder.exists():
        shutil.rmtree(folder)
    folder.mkdir(parents=True)
    text = gzip.decompress(GCIDE.read_bytes()).decode("utf-8", "replace")  # 3 stray cp1252 bytes
    paragraphs = [p for p in _PARAGRAPH_BREAK.split(text) if p.strip()]
    sizes = np.cumsum([len(p) + 2 for p in paragraphs])
    bounds = np.searchsorted(sizes, sizes[-1] * np.arange(1, FILES) / FILES)
    groups = np.split(np.arange(len(paragraphs)), bounds)
    total, types = 0, set()
    for copy in range(copies):
        for number, rows in enumerate(groups):
            prefix = f"copy{copy} " if made["style"] == "numbered" else ""
            body = "\n\n".join(prefix + paragraphs[i] for i in rows) + "\n"
            if copy and made["style"] == "renamed":
                body = renamed(body, copy)
            types.update(word.casefold() for word in LETTER_RUN.findall(body))
            name = f"part-{number:02d}.txt" if copies == 1 else f"copy{copy}-part-{number:02d}.txt"
            data = body.encode("utf-8")
            total += (folder / name).write_bytes(data)
    figures = {"bytes": total, "word_types": len(types)}
    marker.write_text(json.dumps({"made": made, "figures": figures}), encoding="utf-8")
    return figures


def floor_pass(folder: Path, config: dict) -> dict:
    """Wall time of one bare single-core read + paragraph cut + default segmentation pass."""
    segmenter = Segmenter.from_config(config["segment"])
    tokens = 0
    load = os.getloadavg()[0]
    cpu = time.process_time()
    started = time.perf_counter()
    for path in sorted(folder.glob("*.txt")):
        for paragraph in _PARAGRAPH_BREAK.split(path.read_text(encoding="utf-8")):
            if paragraph.strip():
                tokens += sum(len(s) for s in segmenter.segment(paragraph))
    seconds = time.perf_counter() - started
    cpu = time.process_time() - cpu
    return {"seconds": round(seconds, 2), "cpu_seconds": round(cpu, 2), "tokens": tokens, "load_before": round(load, 2)}


@dataclass
class JobSampler:
    """Samples the resident memory of every step process under one Snakemake run."""

    root: int
    interval: float = 0.05
    peaks: dict[int, tuple[str, int]] = field(default_factory=dict)
    seen: dict[int, list[float]] = field(default_factory=dict)
    cpu: dict[int, float] = field(default_factory=dict)
    snakemake_peak: int = 0
    _stop: threading.Event = field(default_factory=threading.Event)

    def _rule(self, name: str, cmdline: list[str]) -> str | None:
        """The rule of a step process: a job the worker runs is named `cm-MODULE[_ENTRY]`
        (15 characters at most); a job run by itself is `python -m steps.run MODULE [ENTRY] --build …`."""
        if name.startswith("cm-") and name != "cm-worker":
            named = name[3:]
            return next((rule for rule in plan.RULES if rule == named or (len(named) == 12 and rule.startswith(named))), named)
        if "-m" not in cmdline or cmdline[cmdline.index("-m") + 1 :][:1] != ["steps.run"]:
            return None
        words = cmdline[cmdline.index("-m") + 2 :][:2]
        if not words:
            return None
        named = f"{words[0]}_{words[1]}" if len(words) > 1 else words[0]
        return named if named in plan.RULES else words[0]

    def run(self) -> None:
        try:
            parent = psutil.Process(self.root)
        except psutil.NoSuchProcess:
            return
        while not self._stop.is_set():
            try:
                self.snakemake_peak = max(self.snakemake_peak, parent.memory_info().rss)
                children = parent.children(recursive=True)
            except psutil.NoSuchProcess:
                return
            now = time.perf_counter()
            for child in children:
                try:
                    rule = self._rule(child.name(), child.cmdline())
                    if rule is not None and not child.name().startswith("cm-") and "CORPUSMILL_WORKER" in child.environ():
                        continue  # a job's client waiting for the worker, which runs the job itself
                    rss = child.memory_info().rss
                    times = child.cpu_times()
                except (psutil.NoSuchProcess, psutil.AccessDenied, psutil.ZombieProcess):
                    continue
                if rule is None:
                    continue
                _, peak = self.peaks.get(child.pid, (rule, 0))
                self.peaks[child.pid] = (rule, max(peak, rss))
                self.seen.setdefault(child.pid, [now, now])[1] = now
                self.cpu[child.pid] = times.user + times.system
            time.sleep(self.interval)

    def stop(self) -> None:
        self._stop.set()

    def by_rule(self, started: float) -> dict[str, dict]:
        """Per rule: jobs seen, peak RSS (MiB) of its largest job, summed sampled job wall and
        CPU seconds (both up to the last sample, so slightly low), and when its first job was
        first seen and its last job last seen, in seconds after `started`."""
        rules: dict[str, dict] = {}
        for pid, (rule, peak) in self.peaks.items():
            entry = rules.setdefault(
                rule, {"jobs": 0, "peak_rss_mib": 0.0, "job_seconds": 0.0, "cpu_seconds": 0.0, "first_seen_s": float("inf"), "last_seen_s": 0.0}
            )
            entry["jobs"] += 1
            entry["peak_rss_mib"] = round(max(entry["peak_rss_mib"], peak / 2**20), 1)
            first, last = self.seen[pid]
            entry["job_seconds"] = round(entry["job_seconds"] + last - first, 2)
            entry["cpu_seconds"] = round(entry["cpu_seconds"] + self.cpu.get(pid, 0.0), 2)
            entry["first_seen_s"] = round(min(entry["first_seen_s"], first - started), 2)
            entry["last_seen_s"] = round(max(entry["last_seen_s"], last - started), 2)
        return dict(sorted(rules.items()))


def workflow_command(directory: Path, overrides: dict, *extra: str) -> list[str]:
    """The Snakemake command that runs the workflow in `directory` with `overrides` (written
    beside it as override.yaml) and `extra` options."""
    directory.mkdir(parents=True, exist_ok=True)
    override = directory / "override.yaml"
    override.write_text(yaml.safe_dump(overrides), encoding="utf-8")
    return [sys.executable, "-m", "snakemake", "--snakefile", str(REPO / "Snakefile"), "--directory", str(directory), "--configfile", str(override), *extra]


def run_build(directory: Path, overrides: dict, cores: int) -> dict:
    """Run the workflow once; returns wall seconds, per-rule memory and the jobs Snakemake ran."""
    command = workflow_command(directory, overrides, "--cores", str(cores))
    load = os.getloadavg()[0]
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    started = time.perf_counter()
    process = subprocess.Popen(command, stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True)
    sampler = JobSampler(process.pid)
    thread = threading.Thread(target=sampler.run, daemon=True)
    thread.start()
    output, _ = process.communicate()
    seconds = time.perf_counter() - started
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    sampler.stop()
    thread.join()
    if process.returncode != 0:
        raise SystemExit(f"bench: workflow failed in {directory}:\n{output[-4000:]}")
    # The last progress line counts the jobs that ran; the first job table also lists jobs the
    # checkpoints later find they need not run.
    done = re.findall(r"^(\d+) of \d+ steps", output, re.M)
    return {
        "seconds": round(seconds, 2),
        "cpu_seconds": round(after.ru_utime + after.ru_stime - before.ru_utime - before.ru_stime, 2),
        "load_before": round(load, 2),
        "load_after": round(os.getloadavg()[0], 2),
        "jobs": int(done[-1]) if done else 0,
        "rules": sampler.by_rule(started),
        "snakemake_peak_rss_mib": round(sampler.snakemake_peak / 2**20, 1),
    }


def build_figures(build: Path) -> dict:
    """Token total and vocabulary size of a finished build, from its coverage statistics."""
    coverage = json.loads((build / "stats" / "coverage.json").read_text(encoding="utf-8"))
    return {
        "tokens": sum(coverage["splits"][s]["tokens"] for s in ("train", "dev", "test")),
        "vocabulary_size": coverage["vocabulary_size"],
    }


def id_array(column: pa.Array) -> np.ndarray:
    """The flat ids of a (possibly nested) id column, as a zero-copy numpy view."""
    while pa.types.is_list(column.type) or pa.types.is_fixed_size_list(column.type) or pa.types.is_large_list(column.type):
        column = column.flatten()
    return column.to_numpy()


def read_train_shards(build: Path) -> dict:
    """Read every train shard's id columns into numpy arrays on one thread (Parquet's threads
    only add overhead for these files); returns ids, wall and CPU seconds, and both rates."""
    paths = sorted((build / "shards" / "train").glob("*.parquet"))
    for path in paths:  # warm the page cache: the figure is decoding, not disk
        path.read_bytes()
    if paths:  # one untimed read pays the one-off start-up (imports, decoder set-up), ~0.3 s
        pq.read_table(min(paths, key=lambda p: p.stat().st_size), use_threads=False)
    ids = 0
    started, cpu = time.perf_counter(), time.process_time()
    for path in paths:
        table = pq.read_table(path, use_threads=False)
        for name in table.column_names:
            if name != "doc_id":
                ids += len(id_array(table[name].combine_chunks()))
    seconds, cpu = time.perf_counter() - started, time.process_time() - cpu
    return {
        "files": len(paths),
        "ids": ids,
        "seconds": round(seconds, 3),
        "cpu_seconds": round(cpu, 3),
        "ids_per_s": round(ids / seconds),
        "ids_per_cpu_s": round(ids / cpu),
    }


def change_one_file(folder: Path) -> str:
    """Edit one of the input files in place (reword one paragraph); returns its name."""
    path = sorted(folder.glob("*.txt"))[7]
    text = path.read_text(encoding="utf-8")
    path.write_text(text.replace("[1913 Webster]", "[1913 Webster, revised]", 1), encoding="utf-8")
    return path.name


def shard_hashes(build: Path) -> dict[str, str]:
    return {entry["file"]: entry["sha256"] for split in json.loads((build / "manifest.json").read_text())["splits"].values() for entry in split["shards"]}


def write_appended(corpus: Path, name: str, number: int, style: str, copies: int) -> Path:
    """A new 2 MB file, one more copy of the corpus's file `number`, made as the corpus's copies
    are (`renamed`: the next copy's endings; `numbered`: each paragraph after the token
    `appended`); its name sorts after the others, as new files of a growing corpus usually do."""
    source = sorted(corpus.glob("*.txt"))[number].read_text(encoding="utf-8")
    added = corpus / name
    if style == "renamed":
        added.write_text(renamed(source, copies), encoding="utf-8")
    else:
        added.write_text("\n\n".join(f"appended {paragraph}" for paragraph in _PARAGRAPH_BREAK.split(source)), encoding="utf-8")
    return added


def append_run(corpus: Path, directory: Path, overrides: dict, cores: int, full: dict, style: str, copies: int) -> dict:
    """Freeze the build's vocabulary, build once with it (the ids are the same: no shard job
    should run), then add one new 2 MB file and rebuild: the seconds, the jobs, and whether the
    shard files of every other chunk kept their bytes. Then the same with the baseline turned
    off (`baseline.enabled: false`, settled by a run of its own): another new file, against the
    full build less its baseline job, which ran alone at its end."""
    frozen = directory / "frozen-vocabulary.tsv"
    shutil.copy2(directory / "build" / "vocabulary.tsv", frozen)
    overrides = {**overrides, "vocabulary": {"frozen": str(frozen)}}
    settle = run_build(directory, overrides, cores)
    before = shard_hashes(directory / "build")
    added = write_appended(corpus, "zz-appended.txt", 3, style, copies)
    try:
        append = run_build(directory, overrides, cores)
        after = shard_hashes(directory / "build")
    finally:
        added.unlink()
    kept = [name for name, digest in before.items() if after.get(name) == digest]
    without = {**overrides, "baseline": {"enabled": False}}
    run_build(directory, without, cores)
    added = write_appended(corpus, "zz-appended-again.txt", 4, style, copies)
    try:
        bare = run_build(directory, without, cores)
    finally:
        added.unlink()
    bare_full = full["seconds"] - full["rules"]["baseline"]["job_seconds"]
    return {
        "first_frozen_build": {"seconds": settle["seconds"], "jobs": settle["jobs"]},
        "seconds": append["seconds"],
        "cpu_seconds": append["cpu_seconds"],
        "jobs": append["jobs"],
        "share_of_full_build": round(append["seconds"] / full["seconds"], 3),
        "shard_files_before": len(before),
        "shard_files_kept": len(kept),
        "new_shard_files": len(set(after) - set(before)),
        "rules": append["rules"],
        "without_baseline": {
            "seconds": bare["seconds"],
            "cpu_seconds": bare["cpu_seconds"],
            "jobs": bare["jobs"],
            "full_build_less_baseline_seconds": round(bare_full, 2),
            "share_of_full_build_less_baseline": round(bare["seconds"] / bare_full, 3),
            "rules": bare["rules"],
        },
    }


def scale_run(scale: int, cores: int, config: dict, append: bool, style: str) -> dict:
    """Build one scale from scratch; at 1x also rebuild after one file changed; with `append`,
    add one file with a frozen vocabulary."""
    corpus = DATA / f"x{scale}"
    made = write_corpus(corpus, scale, style)
    size = made["bytes"]
    directory = DATA / "runs" / f"x{scale}"
    if directory.exists():
        shutil.rmtree(directory)
    # Keep every near-duplicate (clusters are still found and measured), so every scale holds
    # ten times the documents of 1x.
    overrides = {"corpus": {"root": str(corpus), "pack_mb": config["corpus"]["pack_mb"]}, "near_duplicates": {"policy": "off"}}
    result = {"input_mb": round(size / 1e6, 2), "files": FILES * scale, "copies": style if scale > 1 else "single", "word_types": made["word_types"]}
    result["build"] = run_build(directory, overrides, cores)
    result.update(build_figures(directory / "build"))
    seconds = result["build"]["seconds"]
    result["mb_per_s"] = round(size / 1e6 / seconds, 2)
    result["tokens_per_s"] = round(result["tokens"] / seconds)
    result["read_train_shards"] = read_train_shards(directory / "build")
    if scale == 1:
        pristine = corpus.with_name("x1-pristine")
        shutil.rmtree(pristine, ignore_errors=True)
        shutil.copytree(corpus, pristine)
        try:
            changed = change_one_file(corpus)
            rebuild = run_build(directory, overrides, cores)
            # The same command once more, with nothing to do: what any rebuild costs before its first job.
            idle = run_build(directory, overrides, cores)
        finally:
            shutil.rmtree(corpus)
            pristine.rename(corpus)
        rebuild["changed_file"] = changed
        rebuild["share_of_full_build"] = round(rebuild["seconds"] / seconds, 3)
        result["rebuild"] = rebuild
        result["up_to_date_run"] = {
            "seconds": idle["seconds"],
            "cpu_seconds": idle["cpu_seconds"],
            "jobs": idle["jobs"],
            "share_of_full_build": round(idle["seconds"] / seconds, 3),
        }
    if append:
        result["append"] = append_run(corpus, directory, overrides, cores, result["build"], style, scale)
    return result


def handwritten_run(cores: int) -> dict:
    """The hand-written script on the 1x corpus (its own process; figures as it reports them)."""
    output = DATA / "runs" / "handwritten"
    shutil.rmtree(output, ignore_errors=True)
    try:
        return run_script(DATA / "x1", output, workers=cores)
    finally:
        shutil.rmtree(output, ignore_errors=True)


def machine() -> dict:
    return {
        "cpu": next(
            (line.split(":", 1)[1].strip() for line in Path("/proc/cpuinfo").read_text().splitlines() if line.startswith("model name")),
            platform.processor(),
        ),
        "cores": os.cpu_count(),
        "memory_gib": round(psutil.virtual_memory().total / 2**30, 1),
        "python": platform.python_version(),
        "platform": platform.platform(),
    }


def print_table(results: dict) -> None:
    floor = results["floor"]
    print(
        f"floor F (1 core, default segmenter only, 1x): {floor['seconds']:.1f} s wall, {floor['cpu_seconds']:.1f} s CPU, "
        f"{floor['tokens']:,} tokens (load average {floor['load_before']})"
    )
    print(
        f"{'scale':>5} {'MB':>6} {'build s':>8} {'/F':>6} {'CPU s':>7} {'CPU/F':>6} {'MB/s':>6} {'tokens/s':>10} {'jobs':>5} "
        f"{'peak RSS MiB (rule)':>22} {'read ids/s':>12} {'per CPU s':>12}"
    )
    for scale, run in results["scales"].items():
        build, rules, read = run["build"], run["build"]["rules"], run["read_train_shards"]
        worst = max(rules, key=lambda r: rules[r]["peak_rss_mib"])
        print(
            f"{scale:>5} {run['input_mb']:>6.1f} {build['seconds']:>8.1f} {build['seconds'] / floor['seconds']:>6.2f} "
            f"{build['cpu_seconds']:>7.1f} {build['cpu_seconds'] / floor['cpu_seconds']:>6.2f} {run['mb_per_s']:>6.2f} "
            f"{run['tokens_per_s']:>10,} {build['jobs']:>5} {rules[worst]['peak_rss_mib']:>13.0f} ({worst:>8}) "
            f"{read['ids_per_s']:>12,} {read.get('ids_per_cpu_s', 0):>12,}"
        )
    for scale, run in results["scales"].items():
        print(f"per rule at {scale} (peak RSS / summed job CPU s / seconds after the start: first job seen, last job seen):")
        for rule, v in run["build"]["rules"].items():
            print(
                f"  {rule:<12} {v['jobs']:>4} jobs {v['peak_rss_mib']:>7.0f} MiB {v['cpu_seconds']:>8.1f} CPU s "
                f"{v['first_seen_s']:>7.1f} {v['last_seen_s']:>7.1f}"
            )
        prepare = run["build"]["rules"].get("prepare")
        if prepare:
            tail = run["build"]["seconds"] - prepare["last_seen_s"]
            print(f"  after the last prepare job: {tail:.1f} s = {tail / floor['seconds']:.2f} x F (the corpus-wide stages)")
    script = results.get("handwritten")
    one = results["scales"].get("1x")
    if script and one:
        peak = max(v["peak_rss_mib"] for v in one["build"]["rules"].values())
        print(
            f"hand-written script (same corpus, {script.get('workers', 2)} workers): {script['outside_seconds']:.1f} s wall, "
            f"{script['cpu_seconds']:.1f} CPU s, {script['peak_rss_tree_mib']:.0f} MiB peak (process tree); corpusmill 1x / script: "
            f"{one['build']['seconds'] / script['outside_seconds']:.2f} (wall), {one['build']['cpu_seconds'] / script['cpu_seconds']:.2f} (CPU), "
            f"largest job's peak / script's: {peak / script['peak_rss_tree_mib']:.2f}"
        )
    for scale, run in results["scales"].items():
        if "append" in run:
            a = run["append"]
            print(
                f"append one file at {scale} with a frozen vocabulary: {a['seconds']:.1f} s = {a['share_of_full_build']:.1%} of the full build "
                f"({a['jobs']} jobs); shard files kept byte for byte: {a['shard_files_kept']} of {a['shard_files_before']}, "
                f"{a['new_shard_files']} new (first frozen build: {a['first_frozen_build']['seconds']:.1f} s, {a['first_frozen_build']['jobs']} jobs)"
            )
            bare = a["without_baseline"]
            print(
                f"  the same with baseline.enabled: false: {bare['seconds']:.1f} s = {bare['share_of_full_build_less_baseline']:.1%} of the full build "
                f"less its baseline job ({bare['full_build_less_baseline_seconds']:.1f} s), {bare['jobs']} jobs"
            )
    if one and "rebuild" in one:
        r = one["rebuild"]
        print(
            f"rebuild after changing {r['changed_file']}: {r['seconds']:.1f} s = {r['share_of_full_build']:.0%} of the full build "
            f"({r['jobs']} jobs, {r['cpu_seconds']:.1f} CPU s)"
        )
        idle = one["up_to_date_run"]
        print(
            f"the same command with nothing to do: {idle['seconds']:.1f} s = {idle['share_of_full_build']:.0%} of the full build "
            f"({idle['cpu_seconds']:.1f} CPU s)"
        )
    if "1x" in results["scales"] and "10x" in results["scales"]:
        one, ten = results["scales"]["1x"], results["scales"]["10x"]
        print(f"10x / 1x build time: {ten['build']['seconds'] / one['build']['seconds']:.2f}")
        growth = ten["word_types"] / one["word_types"]
        print(f"10x copies {ten['copies']}: {growth:.2f} times the word types of 1x ({ten['word_types']:,} / {one['word_types']:,})")


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description="Benchmark the workflow on Debian's dict-gcide text.")
    parser.add_argument("--cores", type=int, default=2)
    parser.add_argument("--scales", type=int, nargs="+", default=[1, 10])
    parser.add_argument("--keep", action="store_true", help="keep the build folders under bench/data/runs")
    parser.add_argument("--output", default=str(RESULTS / "pipeline.json"))
    parser.add_argument("--pack-mb", type=float, default=None, help="corpus.pack_mb (default: the configuration's; 0: a job per file)")
    parser.add_argument("--no-script", action="store_true", help="leave out the hand-written script")
    parser.add_argument("--copies", choices=COPY_STYLES, default="renamed", help="how the copies of a scale above 1x are made (see the module docstring)")
    args = parser.parse_args(argv)
    if not GCIDE.exists():
        raise SystemExit(f"bench: {GCIDE} is missing; install Debian's dict-gcide package (apt-get install -y dict-gcide)")
    config = default_config()
    if args.pack_mb is not None:
        config["corpus"]["pack_mb"] = args.pack_mb
    write_corpus(DATA / "x1", 1)
    results = {"machine": machine(), "cores": args.cores, "pack_mb": config["corpus"]["pack_mb"], "floor": floor_pass(DATA / "x1", config), "scales": {}}
    if not args.no_script:
        results["handwritten"] = handwritten_run(args.cores)
    for scale in args.scales:
        results["scales"][f"{scale}x"] = scale_run(scale, args.cores, config, scale == max(args.scales), args.copies)
        if not args.keep:
            shutil.rmtree(DATA / "runs" / f"x{scale}", ignore_errors=True)
    Path(args.output).parent.mkdir(parents=True, exist_ok=True)
    Path(args.output).write_text(json.dumps(results, indent=2, sort_keys=True) + "\n", encoding="utf-8")
    print_table(results)


if __name__ == "__main__":
    main()
