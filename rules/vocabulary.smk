# The chunks' counts (written by prepare) merged, duplicates subtracted, into the vocabulary;
# the shard jobs map words to ids (rules/shards.smk).
# Subword units (SUBWORD, rules/subword.smk): per-chunk encode jobs use the sentencepiece model
# and write piece ids and piece counts; the vocabulary is then the model's pieces with those counts.

rule vocabulary:
    input:
        counts=[L.piece_counts(c) if SUBWORD else L.counts(c) for c in PLAN.chunk_keys],
        model=[L.subword_model] if SUBWORD else [],
        removed=[] if SUBWORD else [L.removed_counts],
    output:
        vocabulary=L.vocabulary,
        token_counts=L.token_counts,
    log:
        L.log("vocabulary"),
    params:
        options=PLAN.options("vocabulary"),
        frozen=PLAN.frozen.get("vocabulary.frozen", ""),
        counts_from=f"--model {shlex.quote(L.subword_model)}" if SUBWORD else f"--removed {shlex.quote(L.removed_counts)}",
        code=code_hash("vocabulary"),
    threads: 1
    resources:
        mem_mb=CONFIG["resources"]["aggregate_mem_mb"],
        runtime=CONFIG["resources"]["runtime_min"],
    shell:
        step("vocab build", "--options {params.options:q} --vocabulary {output.vocabulary:q} "
             "--token-counts {output.token_counts:q} {params.counts_from} {input.counts:q}")


rule encode:
    input:
        table=L.prepared("{chunk}"),
        duplicates=L.duplicates,
        model=L.subword_model,
    output:
        parts=PLAN.encoded_outputs("{chunk}"),
        stats=L.encode_stats("{chunk}"),
        pieces=L.piece_counts("{chunk}"),
    log:
        L.log("encode", "{chunk}"),
    params:
        options=PLAN.options("encode"),
        code=code_hash("encode"),
    threads: 2
    resources:
        mem_mb=CONFIG["resources"]["prepare_mem_mb"],
        runtime=CONFIG["resources"]["runtime_min"],
    shell:
        step("encode", "--prepared {input.table:q} --duplicates {input.duplicates:q} "
             "--model {input.model:q} --pieces {output.pieces:q} --threads {threads} --options {params.options:q} "
             "--stats {output.stats:q} {output.parts:q}")
