# The test part is scored once, by evaluate, which measures what does not depend on the
# cut-off; apply_cutoff adds the decision figures. A change of costs reruns threshold and
# apply_cutoff, not evaluate. Neither threshold nor compare reads an evaluation artifact.
rule evaluate:
    input:
        data=artifact("validated/data.parquet"),
        assignment=artifact("split/assignment.parquet"),
        recipe=artifact("features/recipe.json"),
        selected=artifact("comparison/selected.json"),
        models=per_candidate("candidates/{candidate}/model.json"),
    output:
        scores=artifact("evaluation/scores.parquet"),
        probability_metrics=artifact("evaluation/probability_metrics.json"),
        stamp=artifact("provenance/evaluate.json"),
    log:
        "logs/{run}/evaluate.log",
    benchmark:
        "benchmarks/{run}/evaluate.tsv"
    params:
        candidates=CANDIDATES,
        data={
            k: CONFIG["data"][k]
            for k in (
                "id_column",
                "target",
                "date_column",
                "outcome_window_months",
                "extraction_date",
            )
        },
        fairness=CONFIG["fairness"],
        feature_names=[f["name"] for f in CONFIG["features"]],
        evaluation=CONFIG["evaluation"],
        split_method=CONFIG["split"]["method"],
        code=code(script="scripts/evaluate.py"),
    script:
        "../scripts/evaluate.py"
