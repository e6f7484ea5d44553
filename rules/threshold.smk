rule threshold:
    input:
        selected="work/{run}/comparison/selected.json",
        oof=expand(
            "work/{{run}}/candidates/{candidate}/oof.parquet", candidate=CANDIDATES
        ),
    output:
        choice="work/{run}/threshold/choice.json",
        curve="work/{run}/threshold/cost_curve.parquet",
        stamp="work/{run}/provenance/threshold.json",
    log:
        "logs/{run}/threshold.log",
    benchmark:
        "benchmarks/{run}/threshold.tsv"
    params:
        candidates=CANDIDATES,
        costs=CONFIG["costs"],
        code=code(script="scripts/threshold.py"),
    script:
        "../scripts/threshold.py"
