# One job per part of each split: gather that part from every chunk, cut rows, write shards.
# Word units read their part's slice of every prepared chunk and map it to ids here; subword
# units read the parts the encode jobs wrote (rules/vocabulary.smk).

rule shard:
    input:
        parts=lambda w: [L.encoded(c, w.split, w.part) for c in PLAN.chunk_keys] if SUBWORD else [L.prepared(c) for c in PLAN.chunk_keys],
        duplicates=[] if SUBWORD else [L.duplicates],
        vocabulary=L.vocabulary,
    output:
        **PLAN.shard_files("{split}", "{part}"),
        stats=L.shard_stats("{split}", "{part}"),
    log:
        L.log("shard", "{split}-{part}"),
    params:
        outputs=lambda w, output: " ".join(f"--output {shlex.quote(kind + '=' + getattr(output, kind))}" for kind in PLAN.kinds),
        duplicates=lambda w, input: " ".join(f"--duplicates {shlex.quote(p)}" for p in input.duplicates),
        options=PLAN.options("shard"),
        code=code_hash("shard"),
    threads: 1
    resources:
        mem_mb=CONFIG["resources"]["shard_mem_mb"],
        runtime=CONFIG["resources"]["runtime_min"],
    shell:
        step("shards", "--split {wildcards.split} --part {wildcards.part} --vocabulary {input.vocabulary:q} {params.duplicates} "
             "--options {params.options:q} --stats {output.stats:q} {params.outputs} {input.parts:q}")
