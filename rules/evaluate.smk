# The test part is scored once, by evaluate, which measures what does not depend on the
# cut-off; apply_cutoff adds the decision figures. A change of costs reruns threshold and
# apply_cutoff, not evaluate. Neither threshold nor compare reads an evaluation artifact.
# With split.method cross_validation_only there is no test part: evaluate measures the
# selected candidate's out-of-fold predictions on all rows instead.
CV_ONLY_SPLIT = CONFIG["split"]["method"] == "cross_validation_only"


rule evaluate:
    input:
        data=artifact("validated/data.parquet"),
        assignment=artifact("split/assignment.parquet"),
        recipe=artifact("features/recipe.json"),
        selected=artifact("comparison/selected.json"),
        models=per_candidate("candidates/{candidate}/model.json"),
        # Without a test part the evaluation reads the out-of-fold predictions.
        oof=per_candidate("candidates/{candidate}/oof.parquet") if CV_ONLY_SPLIT else [],
    output:
        scores=artifact("evaluation/scores.parquet"),
        probability_metrics=artifact("evaluation/probability_metrics.json"),
        stamp=artifact("provenance/evaluate.json"),
    log:
        "logs/{run}/evaluate.log",
    benchmark:
        "benchmarks/{run}/evaluate.tsv"
    params:
        **({"cross_validation": CONFIG["cross_validation"]} if CV_ONLY_SPLIT else {}),
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
        # refit_all acts after the evaluation (rules/refit.smk), not on it.
        evaluation={k: v for k, v in CONFIG["evaluation"].items() if k != "refit_all"},
        split_method=CONFIG["split"]["method"],
        blas_threads=RES["threads"],
        code=code(script="scripts/evaluate.py"),
    script:
        "../scripts/evaluate.py"
