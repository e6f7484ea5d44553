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
        cv=expand("work/{{run}}/candidates/{candidate}/cv.json", candidate=CANDIDATES),
        oof=expand(
            "work/{{run}}/candidates/{candidate}/oof.parquet", candidate=CANDIDATES
        ),
        models=expand(
            "work/{{run}}/candidates/{candidate}/model.json", candidate=CANDIDATES
        ),
    output:
        table="work/{run}/comparison/table.json",
        selected="work/{run}/comparison/selected.json",
        stamp="work/{run}/provenance/compare.json",
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
