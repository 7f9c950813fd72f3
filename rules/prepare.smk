# Per chunk: read, clean, segment and split its documents, with their near-duplicate signatures
# and n-gram hashes (steps/prepare.py). A chunk's files
# are named in its plan file, the job's input, so a changed file reruns its own chunk. Learned
# abbreviations (segment.learn_abbreviations) come first and every chunk reads them.

LEARNED = [L.abbreviations] if CONFIG["segment"]["learn_abbreviations"] else []


rule abbreviations:
    input:
        plans=[L.chunk_plan(c) for c in PLAN.chunk_keys],
        options=L.options("abbreviations"),
    output:
        L.abbreviations,
    log:
        L.log("abbreviations"),
    params:
        code=code_hash("abbreviations"),
    threads: 1
    resources:
        mem_mb=CONFIG["resources"]["aggregate_mem_mb"],
        runtime=CONFIG["resources"]["runtime_min"],
    shell:
        step("abbreviations")


rule prepare:
    input:
        plan=L.chunk_plan("{chunk}"),
        abbreviations=LEARNED,
        options=L.options("prepare"),
    output:
        table=L.prepared("{chunk}"),
        tally=L.tally("{chunk}"),
        counts=L.counts("{chunk}"),
        drops=L.drop_log("{chunk}"),
        signatures=L.signatures("{chunk}"),
        slots=L.verification("{chunk}"),
    log:
        L.log("prepare", "{chunk}"),
    params:
        code=code_hash("prepare"),
    threads: 1
    resources:
        mem_mb=CONFIG["resources"]["prepare_mem_mb"],
        runtime=CONFIG["resources"]["runtime_min"],
    shell:
        step("prepare", chunk=True)
