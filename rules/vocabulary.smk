# The ids the shards use (steps/vocabulary.py): word units cut the chunks' counts; subword units
# learn a sentencepiece model on a seeded sample of train sentences (steps/subword.py). The ids
# are a checkpoint like the duplicates (see rules/shards.smk). A frozen word vocabulary's ids
# come from their own checkpoint, `vocabulary_frozen`, which reads no count (it runs when the
# file or its options change), and `vocabulary` writes the build's word counts alone.
# After the shards, vocabulary.tsv gets the build's count of every id.
#
# Subword models are cached under interim/subword/models/<key>.model, the key a hash of the
# sample and the training settings; `subword_train` reads the sample as ancient input, so it runs
# only for a key without a model: an edit to a dev or test document redraws the same sample.

SUBWORD_FROZEN = CONFIG["subword"]["frozen"]
FROZEN_WORDS = "vocabulary.frozen" in PLAN.frozen  # a frozen word vocabulary: its ids need no count


def removed_lists(wildcards=None):
    """Every chunk's removed documents, ancient: their digest (`removed_digests`) is a parameter
    that reruns what reads them."""
    checkpoints.deduplicate.get()
    return [ancient(L.removed(c)) for c in PLAN.chunk_keys]


def removed_digests(wildcards=None):
    checkpoints.deduplicate.get()
    return digest_of(*[L.removed(c) for c in PLAN.chunk_keys])


checkpoint subword_sample:
    input:
        tables=[L.prepared(c) for c in PLAN.chunk_keys],
        removed=removed_lists,
        options=L.options("subword_sample"),
    output:
        sample=L.subword_sample,
        key=L.subword_key,
    log:
        L.log("subword_sample"),
    params:
        removed=removed_digests,
        code=code_hash("subword_sample"),
    threads: 1
    resources:
        mem_mb=CONFIG["resources"]["aggregate_mem_mb"],
        runtime=CONFIG["resources"]["runtime_min"],
    shell:
        step("subword_sample")


rule subword_train:
    input:
        sample=ancient(L.subword_sample),
        options=L.options("subword_train"),
    output:
        L.subword_trained("{key}"),
    log:
        L.log("subword_train", "{key}"),
    params:
        code=code_hash("subword_train"),
    # Reserves cores only: training always runs this many threads, since the learned pieces
    # depend on sentencepiece's thread count.
    threads: module_constant("subword", "TRAIN_THREADS")
    resources:
        mem_mb=CONFIG["resources"]["aggregate_mem_mb"],
        runtime=CONFIG["resources"]["runtime_min"],
    shell:
        step("subword_train", "--output {output:q}")


def learned_model(wildcards):
    """The cached model named by the current sample's key; none with a frozen model, which is
    not a Snakemake input (its name may hold wildcard characters) but reruns this rule through
    its content hash, a parameter."""
    if SUBWORD_FROZEN:
        return []
    with open(checkpoints.subword_sample.get().output.key, encoding="utf-8") as handle:
        return L.subword_trained(handle.read().strip())


rule subword_model:
    input:
        learned=learned_model,
        options=L.options("subword_model"),
    output:
        L.subword_model,
    log:
        L.log("subword_model"),
    params:
        model=lambda w, input: SUBWORD_FROZEN or input.learned,
        frozen=PLAN.frozen.get("subword.frozen", ""),
        code=code_hash("subword_model"),
    threads: 1
    resources:
        mem_mb=CONFIG["resources"]["prepare_mem_mb"],
        runtime=CONFIG["resources"]["runtime_min"],
    shell:
        step("subword_model", "--model {params.model:q}")


checkpoint vocabulary:
    input:
        counts=[] if SUBWORD else [L.counts(c) for c in PLAN.chunk_keys],
        removed_counts=[] if SUBWORD else [L.removed_counts],
        model=[L.subword_model] if SUBWORD else [],
        options=L.options("vocabulary"),
    output:
        ids=[] if FROZEN_WORDS else [L.ids],
        table=[] if FROZEN_WORDS else [L.ids_table],
        digest=[] if FROZEN_WORDS else [L.ids_digest],
        counts=[] if SUBWORD else [L.word_counts],
    log:
        L.log("vocabulary"),
    params:
        code=code_hash("vocabulary"),
    threads: 1
    resources:
        mem_mb=CONFIG["resources"]["aggregate_mem_mb"],
        runtime=CONFIG["resources"]["runtime_min"],
    shell:
        step("vocabulary_ids")


if FROZEN_WORDS:

    checkpoint vocabulary_frozen:
        input:
            options=L.options("vocabulary_frozen"),
        output:
            ids=L.ids,
            table=L.ids_table,
            digest=L.ids_digest,
        log:
            L.log("vocabulary_frozen"),
        params:
            frozen=PLAN.frozen["vocabulary.frozen"],
            code=code_hash("vocabulary_frozen"),
        threads: 1
        resources:
            mem_mb=CONFIG["resources"]["aggregate_mem_mb"],
            runtime=CONFIG["resources"]["runtime_min"],
        shell:
            step("vocabulary_frozen")


rule vocabulary_table:
    input:
        ids=L.ids_table,
        id_counts=[L.id_counts(c) for c in PLAN.chunk_keys],
        counts=[] if SUBWORD else [L.word_counts],
        options=L.options("vocabulary_table"),
    output:
        vocabulary=L.vocabulary,
        token_counts=L.token_counts,
    log:
        L.log("vocabulary_table"),
    params:
        code=code_hash("vocabulary_table"),
    threads: 1
    resources:
        mem_mb=CONFIG["resources"]["aggregate_mem_mb"],
        runtime=CONFIG["resources"]["runtime_min"],
    shell:
        step("vocabulary_table")
