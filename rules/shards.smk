# Per chunk: its documents as ids, cut into rows, written as shard files per split and kind
# (steps/shards.py). A chunk's job needs its own prepared table, its list of removed documents
# and the ids; the last two come from checkpoints (rules/deduplicate.smk,
# rules/vocabulary.smk) and are ancient inputs whose digests are parameters, so a change
# elsewhere in the corpus reruns this job only when it changes what the chunk removes or what
# the ids are. A frozen word vocabulary's ids come from `vocabulary_frozen`, which reads no
# count: the job waits for none.


def ids_checkpoint():
    return checkpoints.vocabulary_frozen if FROZEN_WORDS else checkpoints.vocabulary


def ids_input(wildcards):
    ids_checkpoint().get()
    return ancient(L.ids_table)


def ids_digest(wildcards):
    """The ids' own digest, not the file's: ids.tsv also holds counts, which do not change a shard."""
    ids_checkpoint().get()
    with open(L.ids_digest, encoding="utf-8") as handle:
        return handle.read().strip()


def removed_input(wildcards):
    checkpoints.deduplicate.get()
    return ancient(L.removed(wildcards.chunk))


def removed_digest(wildcards):
    checkpoints.deduplicate.get()
    return digest_of(L.removed(wildcards.chunk))


rule shards:
    input:
        table=L.prepared("{chunk}"),
        removed=removed_input,
        ids=ids_input,
        model=[L.subword_model] if SUBWORD else [],
        options=L.options("shards"),
    output:
        **PLAN.shards_of("{chunk}"),
        **PLAN.provenance_of("{chunk}"),
        stats=L.shard_stats("{chunk}"),
        id_counts=L.id_counts("{chunk}"),
        sightings=L.sightings("{chunk}"),
    log:
        L.log("shards", "{chunk}"),
    params:
        removed=removed_digest,
        ids=ids_digest,
        code=code_hash("shards"),
    threads: module_constant("shards", "THREADS") if SUBWORD else 1
    resources:
        mem_mb=CONFIG["resources"]["shard_mem_mb"],
        runtime=CONFIG["resources"]["runtime_min"],
    shell:
        step("shards", chunk=True)
