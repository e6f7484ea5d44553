rule split:
    input:
        data=artifact("validated/data.parquet"),
        report=artifact("validated/report.json"),
    output:
        assignment=artifact("split/assignment.parquet"),
        summary=artifact("split/summary.json"),
        stamp=artifact("provenance/split.json"),
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
