rule split:
    input:
        data="work/{run}/validated/data.parquet",
        report="work/{run}/validated/report.json",
    output:
        assignment="work/{run}/split/assignment.parquet",
        summary="work/{run}/split/summary.json",
        stamp="work/{run}/provenance/split.json",
    log:
        "logs/{run}/split.log",
    benchmark:
        "benchmarks/{run}/split.tsv"
    params:
        data={k: CONFIG["data"][k] for k in ("id_column", "target", "date_column")},
        split=CONFIG["split"],
        cross_validation=CONFIG["cross_validation"],
        code=code(script="scripts/split.py"),
    script:
        "../scripts/split.py"
