# Train-split counts per chunk, merged into the vocabulary; then ids per chunk.

rule count:
    input:
        table=L.prepared("{chunk}"),
        duplicates=L.duplicates,
    output:
        L.counts("{chunk}"),
    log:
        L.log("count", "{chunk}"),
    params:
        source=lambda w: PLAN.chunk(w.chunk).source,
        code=code_hash("count"),
    threads: 1
    resources:
        mem_mb=CONFIG["resources"]["prepare_mem_mb"],
        runtime=CONFIG["resources"]["runtime_min"],
    shell:
        step("vocab count", "--prepared {input.table:q} --source {params.source:q} "
             "--duplicates {input.duplicates:q} --output {output:q}")


rule vocabulary:
    input:
        counts=[L.counts(c) for c in PLAN.chunk_keys],
        frozen=[CONFIG["vocabulary"]["frozen"]] if CONFIG["vocabulary"]["frozen"] else [],
    output:
        vocabulary=L.vocabulary,
        token_counts=L.token_counts,
    log:
        L.log("vocabulary"),
    params:
        options=PLAN.options("vocabulary"),
        code=code_hash("vocabulary"),
    threads: 1
    resources:
        mem_mb=CONFIG["resources"]["aggregate_mem_mb"],
        runtime=CONFIG["resources"]["runtime_min"],
    shell:
        step("vocab build", "--options {params.options:q} --vocabulary {output.vocabulary:q} "
             "--token-counts {output.token_counts:q} {input.counts:q}")


rule encode:
    input:
        table=L.prepared("{chunk}"),
        duplicates=L.duplicates,
        vocabulary=L.vocabulary,
    output:
        parts=PLAN.encoded_outputs("{chunk}"),
        stats=L.encode_stats("{chunk}"),
    log:
        L.log("encode", "{chunk}"),
    params:
        source=lambda w: PLAN.chunk(w.chunk).source,
        options=PLAN.options("encode"),
        code=code_hash("encode"),
    threads: 1
    resources:
        mem_mb=CONFIG["resources"]["prepare_mem_mb"],
        runtime=CONFIG["resources"]["runtime_min"],
    shell:
        step("encode", "--prepared {input.table:q} --source {params.source:q} --duplicates {input.duplicates:q} "
             "--vocabulary {input.vocabulary:q} --options {params.options:q} --stats {output.stats:q} {output.parts:q}")
