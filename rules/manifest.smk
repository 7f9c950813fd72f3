# Corpus-wide statistics, the record of every document (accounting) and the manifest that
# describes the build.

rule coverage:
    input:
        token_counts=L.token_counts,
        vocabulary=L.vocabulary,
        stats=[L.encode_stats(c) for c in PLAN.chunk_keys] if SUBWORD else [L.shard_stats(s, p) for s, p in PLAN.split_parts()],
    output:
        L.coverage,
    log:
        L.log("coverage"),
    params:
        options=PLAN.options("coverage"),
        code=code_hash("coverage"),
    threads: 1
    resources:
        mem_mb=CONFIG["resources"]["aggregate_mem_mb"],
        runtime=CONFIG["resources"]["runtime_min"],
    shell:
        step("report", "--token-counts {input.token_counts:q} --vocabulary {input.vocabulary:q} "
             "--options {params.options:q} --output {output:q} {input.stats:q}")


rule accounting:
    input:
        tallies=[L.tally(c) for c in PLAN.chunk_keys],
        drop_logs=[L.drop_log(c) for c in PLAN.chunk_keys],
        duplicates=L.duplicates,
    output:
        summary=L.accounting,
        dropped=L.dropped,
    log:
        L.log("accounting"),
    params:
        drop_logs=lambda w, input: " ".join(f"--drop-log {shlex.quote(path)}" for path in input.drop_logs),
        code=code_hash("accounting"),
    threads: 1
    resources:
        mem_mb=CONFIG["resources"]["aggregate_mem_mb"],
        runtime=CONFIG["resources"]["runtime_min"],
    shell:
        step("accounting", "--duplicates {input.duplicates:q} --summary {output.summary:q} "
             "--dropped {output.dropped:q} {params.drop_logs} {input.tallies:q}")


rule manifest:
    input:
        shards=PLAN.all_shards(),
        part_stats=[L.shard_stats(s, p) for s, p in PLAN.split_parts()],
        accounting=L.accounting,
        vocabulary=L.vocabulary,
        coverage=L.coverage,
        plan=L.manifest_plan,
        corpus=L.corpus_plan,
    output:
        L.manifest,
    log:
        L.log("manifest"),
    params:
        options=json.dumps(CONFIG, sort_keys=True),
        code=code_hash("manifest"),
    threads: 1
    resources:
        mem_mb=CONFIG["resources"]["aggregate_mem_mb"],
        runtime=CONFIG["resources"]["runtime_min"],
    shell:
        step("manifest", "--options {params.options:q} --plan {input.plan:q} --output {output:q}")
