# The vocabulary coverage report: one self-contained HTML page (steps/report.py), also shown by
# `snakemake --report`.

rule report:
    input:
        coverage=L.coverage,
        manifest=L.manifest,
        token_counts=L.token_counts,
        growth=L.growth,
        hygiene=L.hygiene,
        options=L.options("report"),
    output:
        report(L.report, category="Vocabulary coverage", labels={"page": "coverage report"}),
    log:
        L.log("report"),
    params:
        code=code_hash("report"),
    threads: 1
    resources:
        mem_mb=CONFIG["resources"]["aggregate_mem_mb"],
        runtime=CONFIG["resources"]["runtime_min"],
    shell:
        step("report")
