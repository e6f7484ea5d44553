rule fit:
    input:
        design="work/{run}/features/train_design.parquet",
        assignment="work/{run}/split/assignment.parquet",
        recipe="work/{run}/features/recipe.json",
    output:
        model="work/{run}/candidates/{candidate}/model.json",
        cv="work/{run}/candidates/{candidate}/cv.json",
        oof="work/{run}/candidates/{candidate}/oof.parquet",
        stamp="work/{run}/provenance/fit-{candidate}.json",
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
