# Corpus-wide: exact duplicates, repeated ids, and files a prepare job could not read
# (steps/deduplicate.py), then near-duplicate clusters and contamination (steps/hygiene.py).
# A checkpoint: each chunk's later jobs read its own list of removed documents as an ancient
# input with the list's digest as a parameter, so a run reruns them only when that chunk's list
# changes (see rules/shards.smk).

checkpoint deduplicate:
    input:
        tables=[L.prepared(c) for c in PLAN.chunk_keys],
        tallies=[L.tally(c) for c in PLAN.chunk_keys],
        signatures=[L.signatures(c) for c in PLAN.chunk_keys],
        slots=[L.verification(c) for c in PLAN.chunk_keys],
        chunks=L.chunk_list,
        options=L.options("deduplicate"),
    output:
        duplicates=L.duplicates,
        # One folder, not a file per chunk: Snakemake expands a checkpoint's outputs on every
        # `get()` of it, which every later chunk job makes.
        removed=directory(L.removed_folder),
        removed_counts=L.removed_counts,
        hygiene_drops=L.hygiene_drops,
        hygiene=L.hygiene,
        clusters=L.clusters,
        contamination=L.contamination,
    log:
        L.log("deduplicate"),
    params:
        code=code_hash("deduplicate"),
    threads: module_constant("deduplicate", "THREADS")
    resources:
        mem_mb=CONFIG["resources"]["aggregate_mem_mb"],
        runtime=CONFIG["resources"]["runtime_min"],
    shell:
        step("deduplicate")
