rule split:
    input:
        data="results/{run}/validated/data.parquet",
        report="results/{run}/validated/report.json",
    output:
        assignment="results/{run}/split/assignment.parquet",
        summary="results/{run}/split/summary.json",
        stamp="results/{run}/provenance/split.json",
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
        code=code("stages/split", "split", script="scripts/split.py"),
    script:
        "../scripts/split.py"


rule features:
    input:
        data="results/{run}/validated/data.parquet",
        assignment="results/{run}/split/assignment.parquet",
    output:
        recipe="results/{run}/features/recipe.json",
        diagnostics="results/{run}/features/diagnostics.json",
        design="results/{run}/features/train_design.parquet",
        stamp="results/{run}/provenance/features.json",
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
        code=code(
            "stages/features", "recipe", "diagnostics", script="scripts/features.py"
        ),
    script:
        "../scripts/features.py"
