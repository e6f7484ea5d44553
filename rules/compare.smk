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
    params:
        candidates=CANDIDATES,
        selection=CONFIG["selection"],
        code=code(script="scripts/compare.py"),
    script:
        "../scripts/compare.py"
