# corpusmill: raw text folder → cleaned, tokenized, vocabulary-mapped, windowed, split Parquet shards.
# Stages, in order (rules/*.smk): prepare (per chunk: read, clean, segment, split, count) →
# deduplicate → vocabulary (for subword units: a sentencepiece model learned on train, then
# encode per chunk) → shard (per split part; word units map their tokens to ids here), and
# beside it growth (the vocabulary growth curve) → coverage → manifest → report. The logic of
# every stage lives in steps/; each rule runs one step through `python -m steps.run`.

import json
import shlex
import sys

from snakemake.utils import min_version

min_version("9.18")

sys.path.insert(0, workflow.basedir)
from steps import settings
from steps.ingest import CorpusError
from steps.plan import Plan, code_hash

configfile: os.path.join(workflow.basedir, "workflow_config", "config.yaml")

try:
    CONFIG = settings.resolve(config)
    PLAN = Plan.from_config(CONFIG)
except (settings.ConfigError, CorpusError) as error:
    sys.exit(f"corpusmill: {error}")

L = PLAN.layout
if workflow.is_main_process:
    PLAN.write_files([L.coverage])
    if os.path.exists(L.failed_jobs):
        os.remove(L.failed_jobs)


def literal(text):
    """Text for a shell command: quoted for the shell, braces doubled for Snakemake's formatting."""
    return shlex.quote(text).replace("{", "{{").replace("}", "}}")


PY = f"PYTHONPATH={literal(workflow.basedir)} {literal(sys.executable)}"


def step(name, args):
    """Shell command running steps.<name>; output goes to the job's log, whose end is shown on failure.
    Every value in `args` is quoted (`:q` or shlex.quote)."""
    failed = literal(L.failed_jobs)
    return (
        "{{ " + PY + " -m steps.run " + name + " " + args + " ; }} > {log:q} 2>&1 "
        "|| {{ tail -n 20 {log:q} >&2; echo {log:q} >> " + failed + "; exit 1; }}"
    )


wildcard_constraints:
    chunk=r"[^/]+",
    split=r"train|dev|test",
    part=r"\d{4}",

include: "rules/prepare.smk"
include: "rules/subword.smk"
include: "rules/vocabulary.smk"
include: "rules/shards.smk"
include: "rules/manifest.smk"
include: "rules/report.smk"


rule all:
    input:
        L.manifest,
        L.coverage,
        L.report,
    default_target: True


onsuccess:
    import threading

    from steps.summary import format_accounting, format_blocks, format_table

    # Snakemake starts a 1-second rate-limit timer after each scheduling round and Python waits
    # for it at exit; the run is over, so end it now (0.8-1 s sooner, measured).
    for thread in threading.enumerate():
        if isinstance(thread, threading.Timer):
            thread.cancel()

    from steps import tidy

    jobs = list(workflow.dag.jobs)
    if any(job.rule.name == "all" for job in jobs):
        current = [path for job in jobs for path in [*job.input, *job.output, *job.log]]
        removed = tidy.remove(tidy.stale_files(L.root, current))
        if removed:
            print(f"corpusmill: {removed}", file=sys.stderr)
    if os.path.exists(L.coverage):
        print(format_table(settings.read_json(L.coverage)), file=sys.stderr)
    if os.path.exists(L.manifest) and (blocks := format_blocks(settings.read_json(L.manifest))):
        print(blocks, file=sys.stderr)
    if os.path.exists(L.accounting):
        print(format_accounting(settings.read_json(L.accounting), settings.read_json(L.corpus_plan), L.dropped), file=sys.stderr)


onerror:
    from steps.summary import format_failures

    # After Snakemake's account of the failed jobs: each one's own message, so it is the last thing read.
    if os.path.exists(L.failed_jobs):
        print(format_failures(L.failed_jobs), file=sys.stderr)
