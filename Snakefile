# corpusmill: raw text folder → cleaned, tokenized, vocabulary-mapped, windowed, split Parquet shards.
# Stages, in order (rules/*.smk): prepare (per chunk: read, clean, segment, split, count) →
# deduplicate (exact and near-duplicates, contamination) → vocabulary (word cutoff, or a sentencepiece model learned on train) → shards (per
# chunk: ids, rows, files) → vocabulary table, accounting, growth, coverage → manifest → Croissant description,
# datasheet, report.
# Each rule runs one step of steps/ (`python -m steps.run MODULE [ENTRY] --build DIR`), which
# finds its files through steps/layout.py and its options in the rule's options file.

import atexit
import hashlib
import shlex
import sys

from snakemake.utils import min_version

min_version("9.18")

sys.path.insert(0, workflow.basedir)
from steps import plan, settings, worker
from steps.ingest import CorpusError

# The worker (steps/worker.py) starts importing now, while Snakemake reads the rest of the
# workflow and plans the jobs; `onstart` waits for it, or ends it when the jobs run elsewhere.
# Whatever ends this process ends it too.
LAUNCHED = worker.launch() if workflow.is_main_process and not os.environ.get("CORPUSMILL_NO_WORKER") else None
if LAUNCHED:
    atexit.register(worker.stop, LAUNCHED.process)

configfile: os.path.join(workflow.basedir, "workflow_config", "config.yaml")

try:
    CONFIG = settings.resolve(config)
    PLAN = plan.Plan.from_config(CONFIG)
except (settings.ConfigError, CorpusError) as error:
    sys.exit(f"corpusmill: {error}")

L = PLAN.layout
SUBWORD = CONFIG["units"] == "subword"  # ids from a sentencepiece model rather than a word cutoff
BASELINE = CONFIG["baseline"]["enabled"]
if workflow.is_main_process:
    PLAN.write_files()
    if os.path.exists(L.failed_jobs):
        os.remove(L.failed_jobs)
code_hash = plan.code_hash
module_constant = plan.module_constant


def literal(text):
    """Text for a shell command: quoted for the shell, braces doubled for Snakemake's formatting."""
    return shlex.quote(text).replace("{", "{{").replace("}", "}}")


PY = f"PYTHONPATH={literal(workflow.basedir)} {literal(sys.executable)}"


def step(rule, extra="", chunk=False):
    """The shell command of a rule: its step module (and entry) on the build folder, output to
    the job's log, whose end is shown on failure and whose path is noted for the run's end."""
    name = plan.module_of(rule)
    entry = rule[len(name) + 1 :]
    args = f"{name} {entry} --build {literal(L.root)}" + (" --chunk {wildcards.chunk}" if chunk else "") + (f" {extra}" if extra else "")
    return (
        "{{ " + PY + " -m steps.run " + args + " ; }} > {log:q} 2>&1 "
        "|| {{ tail -n 20 {log:q} >&2; echo {log:q} >> " + literal(L.failed_jobs) + "; exit 1; }}"
    )


def digest_of(*paths):
    """SHA-256 of files' contents: the parameter that reruns a job reading them as ancient inputs."""
    hasher = hashlib.sha256()
    for path in paths:
        with open(path, "rb") as handle:
            hasher.update(handle.read())
    return hasher.hexdigest()[:16]


wildcard_constraints:
    chunk=r"[^/]+",

include: "rules/prepare.smk"
include: "rules/deduplicate.smk"
include: "rules/vocabulary.smk"
include: "rules/shards.smk"
include: "rules/statistics.smk"
include: "rules/manifest.smk"
include: "rules/describe.smk"
include: "rules/report.smk"


rule all:
    input:
        L.manifest,
        L.coverage,
        [L.baseline] if BASELINE else [],
        L.croissant,
        L.datasheet,
        L.report,
    default_target: True


onstart:
    # Local jobs get this process's hard open-files limit (steps/worker.py); a cluster node has
    # limits of its own, which the deduplicate job checks there. Which executor runs the jobs is
    # known from here on, not while the Snakefile is read.
    if workflow.local_exec and (short := worker.too_few_open_files(len(PLAN.chunks), worker.open_files_limit(hard=True))):
        raise WorkflowError(f"corpusmill: {short}")
    # Jobs on this machine start with their imports done; a cluster's jobs never see the worker
    # and start as plain processes.
    if LAUNCHED and workflow.local_exec:
        worker.ready(LAUNCHED)
    elif LAUNCHED:
        worker.stop(LAUNCHED.process)


def end_rate_timers():
    """Snakemake arms a rate-limit timer after each scheduling round (profiles/default) and Python
    waits for the last one at exit; the run is over, so end them now."""
    import threading

    for thread in threading.enumerate():
        if isinstance(thread, threading.Timer):
            thread.cancel()


onsuccess:
    from steps import tidy
    from steps.summary import format_accounting, format_baseline, format_blocks, format_hygiene, format_table

    end_rate_timers()
    if LAUNCHED:
        worker.stop(LAUNCHED.process)
    jobs = list(workflow.dag.jobs)
    if any(job.rule.name == "all" for job in jobs):
        current = [path for job in jobs for path in [*job.input, *job.output, *job.log]] + [L.chunk_list, L.corpus_plan]
        current += [L.options(rule) for rule in plan.RULES]
        current += [L.baseline_totals] if BASELINE else []  # kept for the next run's baseline
        current += [] if SUBWORD else [L.chunk_counts_sum, L.removed_counts_by_chunk]  # kept for the next run's vocabulary and deduplicate
        removed = tidy.remove(tidy.stale_files(L.root, current), L.root)
        if removed:
            print(f"corpusmill: {removed}", file=sys.stderr)
    if os.path.exists(L.coverage):
        print(format_table(settings.read_json(L.coverage)), file=sys.stderr)
    if os.path.exists(L.manifest) and (blocks := format_blocks(settings.read_json(L.manifest))):
        print(blocks, file=sys.stderr)
    if BASELINE and os.path.exists(L.baseline):
        print(format_baseline(settings.read_json(L.baseline)), file=sys.stderr)
    if os.path.exists(L.accounting):
        print(format_accounting(settings.read_json(L.accounting), settings.read_json(L.corpus_plan), L.dropped), file=sys.stderr)
    if os.path.exists(L.hygiene):
        print(format_hygiene(settings.read_json(L.hygiene), L.root), file=sys.stderr)


onerror:
    from steps.summary import format_failures

    end_rate_timers()
    if LAUNCHED:
        worker.stop(LAUNCHED.process)
    # After Snakemake's account of the failed jobs: each one's own message, so it is the last thing read.
    if os.path.exists(L.failed_jobs):
        print(format_failures(L.failed_jobs), file=sys.stderr)
