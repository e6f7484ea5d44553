rule features:
    input:
        data=artifact("validated/data.parquet"),
        assignment=artifact("split/assignment.parquet"),
    output:
        recipe=artifact("features/recipe.json"),
        diagnostics=artifact("features/diagnostics.json"),
        design=artifact("features/train_design.parquet"),
        stamp=artifact("provenance/features.json"),
    log:
        "logs/{run}/features.log",
    benchmark:
        "benchmarks/{run}/features.tsv"
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
        blas_threads=RES["threads"],
        code=code(script="scripts/features.py"),
    script:
        "../scripts/features.py"
