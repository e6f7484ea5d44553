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
