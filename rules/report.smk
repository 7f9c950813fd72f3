# The vocabulary coverage report: one self-contained HTML page, also shown by `snakemake --report`.
# Subword units (SUBWORD, rules/subword.smk) add the per-chunk encode statistics, for the <unk>
# rates by input file; the page reads the units from coverage.json.

rule report:
    input:
        coverage=L.coverage,
        manifest=L.manifest,
        token_counts=L.token_counts,
        duplicates=L.duplicates,
        prepared=[L.prepared(c) for c in PLAN.chunk_keys],
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
             "--token-counts {input.token_counts:q} --duplicates {input.duplicates:q} {params.encode_stats} "
             "--options {params.options:q} --output {output:q} {input.prepared:q}")
