# The vocabulary coverage report: one self-contained HTML page, also shown by `snakemake --report`.
# Its growth curve is measured by its own job, which needs only the prepared chunks, the duplicates
# and the token counts, so it runs beside the shard jobs. Subword units (SUBWORD,
# rules/subword.smk) add the per-chunk encode statistics, for the <unk> rates by input file; the
# page reads the units from coverage.json.

rule growth:
    input:
        prepared=[L.prepared(c) for c in PLAN.chunk_keys],
        duplicates=L.duplicates,
        token_counts=L.token_counts,
    output:
        L.growth,
    log:
        L.log("growth"),
    params:
        options=PLAN.options("growth"),
        code=code_hash("growth"),
    threads: 1
    resources:
        mem_mb=CONFIG["resources"]["aggregate_mem_mb"],
        runtime=CONFIG["resources"]["runtime_min"],
    shell:
        step("growth", "--token-counts {input.token_counts:q} --duplicates {input.duplicates:q} "
             "--options {params.options:q} --output {output:q} {input.prepared:q}")


rule report:
    input:
        coverage=L.coverage,
        manifest=L.manifest,
        token_counts=L.token_counts,
        growth=L.growth,
        encode_stats=[L.encode_stats(c) for c in PLAN.chunk_keys] if SUBWORD else [],
    output:
        report(L.report, category="Vocabulary coverage", labels={"page": "coverage report"}),
    log:
        L.log("report"),
    params:
        options=PLAN.options("report"),
        encode_stats=lambda w, input: " ".join(f"--encode-stats {shlex.quote(p)}" for p in input.encode_stats),
        code=code_hash("report"),
    threads: 1
    resources:
        mem_mb=CONFIG["resources"]["aggregate_mem_mb"],
        runtime=CONFIG["resources"]["runtime_min"],
    shell:
        step("report_page", "--coverage {input.coverage:q} --manifest {input.manifest:q} "
             "--token-counts {input.token_counts:q} --growth {input.growth:q} {params.encode_stats} "
             "--options {params.options:q} --output {output:q}")
