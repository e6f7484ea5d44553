rule threshold:
    input:
        selected=artifact("comparison/selected.json"),
        oof=per_candidate("candidates/{candidate}/oof.parquet"),
    output:
        choice=artifact("threshold/choice.json"),
        curve=artifact("threshold/cost_curve.parquet"),
        stamp=artifact("provenance/threshold.json"),
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
