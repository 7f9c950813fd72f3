# Subword units (units: subword): a seeded sample of train sentences, a sentencepiece model
# learned on it, and that model installed as build/subword.model. See steps/subword.py.
#
# The sample is a checkpoint whose key file names the model to use: models are cached under
# interim/subword/models/<key>.model, and `subword_train` reads the sample as ancient input, so
# it runs only for a key without a model, i.e. when train text or a training setting changed.
# An edit to a dev or test document reruns the sample (same content, same key) but not training.

from steps.subword import TRAIN_THREADS

SUBWORD = CONFIG["units"] == "subword"
SUBWORD_FROZEN = CONFIG["subword"]["frozen"]


checkpoint subword_sample:
    input:
        tables=[L.prepared(c) for c in PLAN.chunk_keys],
        duplicates=L.duplicates,
    output:
        sample=L.subword_sample,
        key=L.subword_key,
    log:
        L.log("subword_sample"),
    params:
        options=PLAN.options("subword_sample"),
        code=code_hash("subword_sample"),
    threads: 1
    resources:
        mem_mb=CONFIG["resources"]["aggregate_mem_mb"],
        runtime=CONFIG["resources"]["runtime_min"],
    shell:
        step("subword sample", "--options {params.options:q} --duplicates {input.duplicates:q} "
             "--sample {output.sample:q} --key {output.key:q} {input.tables:q}")


rule subword_train:
    input:
        sample=ancient(L.subword_sample),
    output:
        L.subword_trained("{key}"),
    log:
        L.log("subword_train", "{key}"),
    params:
        options=PLAN.options("subword_train"),
        code=code_hash("subword_train"),
    # Reserves cores only: training always runs TRAIN_THREADS threads, since the learned
    # pieces depend on sentencepiece's thread count.
    threads: TRAIN_THREADS
    resources:
        mem_mb=CONFIG["resources"]["aggregate_mem_mb"],
        runtime=CONFIG["resources"]["runtime_min"],
    shell:
        step("subword train", "--options {params.options:q} --sample {input.sample:q} --output {output:q}")


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
        step("subword install", "--model {params.model:q} --output {output:q}")
