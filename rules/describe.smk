# The build described for other tools and for people, from its manifest: Croissant metadata
# (steps/croissant.py) and a datasheet (steps/datasheet.py).

rule croissant:
    input:
        manifest=L.manifest,
        options=L.options("croissant"),
    output:
        description=L.croissant,
        vocabulary=L.vocabulary_parquet,
    log:
        L.log("croissant"),
    params:
        code=code_hash("croissant"),
    threads: 1
    resources:
        mem_mb=CONFIG["resources"]["aggregate_mem_mb"],
        runtime=CONFIG["resources"]["runtime_min"],
    shell:
        step("croissant")


rule datasheet:
    input:
        manifest=L.manifest,
        coverage=L.coverage,
        options=L.options("datasheet"),
    output:
        L.datasheet,
    log:
        L.log("datasheet"),
    params:
        code=code_hash("datasheet"),
    threads: 1
    resources:
        mem_mb=CONFIG["resources"]["aggregate_mem_mb"],
        runtime=CONFIG["resources"]["runtime_min"],
    shell:
        step("datasheet")
