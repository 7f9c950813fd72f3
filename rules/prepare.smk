# Per-chunk reading, cleaning, segmentation and split; then corpus-wide duplicate removal.

LEARNED = [L.abbreviations] if CONFIG["segment"]["learn_abbreviations"] else []


rule abbreviations:
    input:
        sources=[os.path.join(PLAN.root, s) for s in PLAN.sources],
    output:
        L.abbreviations,
    log:
        L.log("abbreviations"),
    params:
        root=PLAN.root,
        sources=PLAN.sources,
        options=PLAN.options("abbreviations"),
        code=code_hash("abbreviations"),
    threads: 1
    resources:
        mem_mb=CONFIG["resources"]["aggregate_mem_mb"],
        runtime=CONFIG["resources"]["runtime_min"],
    shell:
        step("segment", "--root {params.root:q} --options {params.options:q} --output {output:q} {params.sources:q}")


rule prepare:
    input:
        sources=lambda w: [os.path.join(PLAN.root, s) for s in PLAN.chunk(w.chunk).sources],
        abbreviations=LEARNED,
    output:
        table=L.prepared("{chunk}"),
        tally=L.tally("{chunk}"),
        counts=L.counts("{chunk}"),
    log:
        L.log("prepare", "{chunk}"),
    params:
        root=PLAN.root,
        sources=lambda w: " ".join(f"--source {shlex.quote(s)}" for s in PLAN.chunk(w.chunk).sources),
        chunk_index=lambda w: PLAN.chunk(w.chunk).index,
        chunks=lambda w: PLAN.chunk(w.chunk).count,
        learned=lambda w, input: f"--abbreviations {input.abbreviations}" if LEARNED else "",
        options=PLAN.options("prepare"),
        code=code_hash("prepare"),
    threads: 1
    resources:
        mem_mb=CONFIG["resources"]["prepare_mem_mb"],
        runtime=CONFIG["resources"]["runtime_min"],
    shell:
        step("prepare", "--root {params.root:q} {params.sources} --chunk {params.chunk_index} "
             "--chunks {params.chunks} --options {params.options:q} {params.learned} --output {output.table:q} --tally {output.tally:q} --counts {output.counts:q}")


rule deduplicate:
    input:
        tables=[L.prepared(c) for c in PLAN.chunk_keys],
    output:
        duplicates=L.duplicates,
        removed_counts=L.removed_counts,
    log:
        L.log("deduplicate"),
    params:
        enabled=str(CONFIG["split"]["deduplicate"]).lower(),
        code=code_hash("deduplicate"),
    threads: 1
    resources:
        mem_mb=CONFIG["resources"]["aggregate_mem_mb"],
        runtime=CONFIG["resources"]["runtime_min"],
    shell:
        step("split", "--enabled {params.enabled} --output {output.duplicates:q} "
             "--removed-counts {output.removed_counts:q} {input.tables:q}")
