# Per-chunk reading, cleaning, segmentation and split; then corpus-wide duplicate removal, which
# first stops the run if any chunk found a file it could not read as configured (every such file
# is named at once). A chunk's files are named in its plan file (steps/plan.py), the job's input.

LEARNED = [L.abbreviations] if CONFIG["segment"]["learn_abbreviations"] else []


rule abbreviations:
    input:
        plans=[L.chunk_plan(c) for c in PLAN.chunk_keys],
    output:
        L.abbreviations,
    log:
        L.log("abbreviations"),
    params:
        options=PLAN.options("abbreviations"),
        code=code_hash("abbreviations"),
    threads: 1
    resources:
        mem_mb=CONFIG["resources"]["aggregate_mem_mb"],
        runtime=CONFIG["resources"]["runtime_min"],
    shell:
        step("segment", "--options {params.options:q} --output {output:q} {input.plans:q}")


rule prepare:
    input:
        plan=L.chunk_plan("{chunk}"),
        abbreviations=LEARNED,
    output:
        table=L.prepared("{chunk}"),
        tally=L.tally("{chunk}"),
        counts=L.counts("{chunk}"),
        drops=L.drop_log("{chunk}"),
    log:
        L.log("prepare", "{chunk}"),
    params:
        learned=lambda w, input: f"--abbreviations {shlex.quote(str(input.abbreviations))}" if LEARNED else "",
        options=PLAN.options("prepare"),
        code=code_hash("prepare"),
    threads: 1
    resources:
        mem_mb=CONFIG["resources"]["prepare_mem_mb"],
        runtime=CONFIG["resources"]["runtime_min"],
    shell:
        step("prepare", "--plan {input.plan:q} --options {params.options:q} {params.learned} "
             "--output {output.table:q} --tally {output.tally:q} --counts {output.counts:q} --drops {output.drops:q}")


rule deduplicate:
    input:
        tables=[L.prepared(c) for c in PLAN.chunk_keys],
        tallies=[L.tally(c) for c in PLAN.chunk_keys],
    output:
        duplicates=L.duplicates,
        removed_counts=L.removed_counts,
    log:
        L.log("deduplicate"),
    params:
        enabled=str(CONFIG["split"]["deduplicate"]).lower(),
        repeated_ids=CONFIG["corpus"]["repeated_ids"],
        code=code_hash("deduplicate"),
    threads: 1
    resources:
        mem_mb=CONFIG["resources"]["aggregate_mem_mb"],
        runtime=CONFIG["resources"]["runtime_min"],
    shell:
        step("split", "--enabled {params.enabled} --repeated-ids {params.repeated_ids} --output {output.duplicates:q} "
             "--removed-counts {output.removed_counts:q} {input.tables:q}")
