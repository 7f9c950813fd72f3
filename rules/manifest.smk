# The manifest that describes the build completely (steps/manifest.py).

rule manifest:
    input:
        stats=[L.shard_stats(c) for c in PLAN.chunk_keys],
        tallies=[L.tally(c) for c in PLAN.chunk_keys],
        accounting=L.accounting,
        hygiene=L.hygiene,
        vocabulary=L.vocabulary,
        coverage=L.coverage,
        baseline=[L.baseline] if BASELINE else [],
        corpus=L.corpus_plan,
        model=[L.subword_model] if SUBWORD else [],
        options=L.options("manifest"),
    output:
        L.manifest,
    log:
        L.log("manifest"),
    params:
        code=code_hash("manifest"),
    threads: 1
    resources:
        mem_mb=CONFIG["resources"]["aggregate_mem_mb"],
        runtime=CONFIG["resources"]["runtime_min"],
    shell:
        step("manifest")
