# What the build holds: the record of every document (steps/accounting.py), the vocabulary growth
# curve (steps/growth.py), the coverage statistics (steps/coverage.py) and the n-gram baseline
# (steps/baseline.py).

rule accounting:
    input:
        tallies=[L.tally(c) for c in PLAN.chunk_keys],
        drop_logs=[L.drop_log(c) for c in PLAN.chunk_keys],
        duplicates=L.duplicates,
        hygiene_drops=L.hygiene_drops,
        options=L.options("accounting"),
    output:
        summary=L.accounting,
        dropped=L.dropped,
    log:
        L.log("accounting"),
    params:
        code=code_hash("accounting"),
    threads: 1
    resources:
        mem_mb=CONFIG["resources"]["aggregate_mem_mb"],
        runtime=CONFIG["resources"]["runtime_min"],
    shell:
        step("accounting")


rule growth:
    input:
        sightings=[L.sightings(c) for c in PLAN.chunk_keys],
        options=L.options("growth"),
    output:
        L.growth,
    log:
        L.log("growth"),
    params:
        code=code_hash("growth"),
    threads: 1
    resources:
        mem_mb=CONFIG["resources"]["aggregate_mem_mb"],
        runtime=CONFIG["resources"]["runtime_min"],
    shell:
        step("growth")


rule coverage:
    input:
        stats=[L.shard_stats(c) for c in PLAN.chunk_keys],
        vocabulary=L.vocabulary,
        token_counts=L.token_counts,
        options=L.options("coverage"),
    output:
        L.coverage,
    log:
        L.log("coverage"),
    params:
        code=code_hash("coverage"),
    threads: 1
    resources:
        mem_mb=CONFIG["resources"]["aggregate_mem_mb"],
        runtime=CONFIG["resources"]["runtime_min"],
    shell:
        step("coverage")


rule baseline:
    input:
        stats=[L.shard_stats(c) for c in PLAN.chunk_keys],
        ids=ids_input,  # only its size is read; the shards' statistics change with the ids
        options=L.options("baseline"),
    output:
        L.baseline,
    log:
        L.log("baseline"),
    params:
        code=code_hash("baseline"),
    # The longest of the jobs after the shards: started first, it ends the run soonest. On this
    # machine it reserves one core, not the THREADS it runs (they overlap only part of the time),
    # so that it starts beside a one-core job still running rather than waiting for two free cores.
    priority: 1
    threads: lambda wildcards: 1 if workflow.local_exec else module_constant("baseline", "THREADS")
    resources:
        mem_mb=CONFIG["resources"]["aggregate_mem_mb"],
        runtime=CONFIG["resources"]["runtime_min"],
    shell:
        step("baseline")
