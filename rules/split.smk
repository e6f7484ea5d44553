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
    threads: RES["threads"]
    resources:
        mem_mb=RES["mem_mb"],
        runtime=RES["runtime"],
    params:
        data={k: CONFIG["data"][k] for k in ("id_column", "target", "date_column")},
        split=CONFIG["split"],
        cross_validation=CONFIG["cross_validation"],
        code=code(script="scripts/split.py"),
    script:
        "../scripts/split.py"


rule features:
    input:
        data="work/{run}/validated/data.parquet",
        assignment="work/{run}/split/assignment.parquet",
    output:
        recipe="work/{run}/features/recipe.json",
        diagnostics="work/{run}/features/diagnostics.json",
        design="work/{run}/features/train_design.parquet",
        stamp="work/{run}/provenance/features.json",
    log:
        "logs/{run}/features.log",
    benchmark:
        "benchmarks/{run}/features.tsv"
    threads: RES["threads"]
    resources:
        mem_mb=RES["mem_mb"],
        runtime=RES["runtime"],
    params:
        **(
            {"cluster_column": CONFIG["inference"]["cluster_column"]}
            if CONFIG["inference"]["cluster_column"]
            else {}
        ),
        features=CONFIG["features"],
        interactions=CONFIG["interactions"],
        target=CONFIG["data"]["target"],
        id_column=CONFIG["data"]["id_column"],
        diagnostics=CONFIG["diagnostics"],
        code=code(script="scripts/features.py"),
    script:
        "../scripts/features.py"
