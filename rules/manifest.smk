# Corpus-wide statistics and the manifest that describes the build.

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


rule manifest:
    input:
        shards=PLAN.all_shards(),
        part_stats=[L.shard_stats(s, p) for s, p in PLAN.split_parts()],
        tallies=[L.tally(c) for c in PLAN.chunk_keys],
        duplicates=L.duplicates,
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
