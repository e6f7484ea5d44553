rule fit:
    input:
        design=artifact("features/train_design.parquet"),
        assignment=artifact("split/assignment.parquet"),
        recipe=artifact("features/recipe.json"),
    output:
        model=artifact("candidates/{candidate}/model.json"),
        cv=artifact("candidates/{candidate}/cv.json"),
        oof=artifact("candidates/{candidate}/oof.parquet"),
        stamp=artifact("provenance/fit-{candidate}.json"),
    log:
        "logs/{run}/fit/{candidate}.log",
    benchmark:
        "benchmarks/{run}/fit/{candidate}.tsv"
    priority: lambda wc: fit_priority(wc.candidate)
    params:
        candidate=lambda wc: candidate_settings(wc.candidate),
        data={k: CONFIG["data"][k] for k in ("id_column", "target")},
        seed=CONFIG["cross_validation"]["seed"],
        inference=CONFIG["inference"],
        code=code(script="scripts/fit.py"),
    script:
        "../scripts/fit.py"
