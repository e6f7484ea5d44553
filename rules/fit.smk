rule fit:
    input:
        design="results/{run}/features/train_design.parquet",
        assignment="results/{run}/split/assignment.parquet",
        recipe="results/{run}/features/recipe.json",
    output:
        model="results/{run}/candidates/{candidate}/model.json",
        cv="results/{run}/candidates/{candidate}/cv.json",
        oof="results/{run}/candidates/{candidate}/oof.parquet",
        stamp="results/{run}/provenance/fit-{candidate}.json",
    log:
        "logs/{run}/fit/{candidate}.log",
    benchmark:
        "benchmarks/{run}/fit/{candidate}.tsv"
    priority: lambda wc: fit_priority(wc.candidate)
    threads: RES["threads"]
    resources:
        mem_mb=RES["mem_mb"],
        runtime=RES["runtime"],
    params:
        candidate=lambda wc: candidate_settings(wc.candidate),
        data={k: CONFIG["data"][k] for k in ("id_column", "target")},
        seed=CONFIG["cross_validation"]["seed"],
        inference=CONFIG["inference"],
        code=code(
            "stages/fit",
            "models",
            "solvers",
            "metrics",
            "recipe",
            "split",
            script="scripts/fit.py",
        ),
    script:
        "../scripts/fit.py"


rule compare:
    input:
        cv=expand(
            "results/{{run}}/candidates/{candidate}/cv.json", candidate=CANDIDATES
        ),
        oof=expand(
            "results/{{run}}/candidates/{candidate}/oof.parquet", candidate=CANDIDATES
        ),
        models=expand(
            "results/{{run}}/candidates/{candidate}/model.json", candidate=CANDIDATES
        ),
    output:
        table="results/{run}/comparison/table.json",
        selected="results/{run}/comparison/selected.json",
        stamp="results/{run}/provenance/compare.json",
    log:
        "logs/{run}/compare.log",
    benchmark:
        "benchmarks/{run}/compare.tsv"
    threads: RES["threads"]
    resources:
        mem_mb=RES["mem_mb"],
        runtime=RES["runtime"],
    params:
        candidates=CANDIDATES,
        selection=CONFIG["selection"],
        code=code(
            "stages/compare",
            "selection",
            "metrics",
            "solvers",
            script="scripts/compare.py",
        ),
    script:
        "../scripts/compare.py"
