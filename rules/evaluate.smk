# The test part is scored once, by evaluate, which measures what does not depend on the
# cut-off; apply_cutoff adds the decision figures. A change of costs reruns threshold and
# apply_cutoff, not evaluate. Neither threshold nor compare reads an evaluation artifact.
# With split.method cross_validation_only there is no test part: evaluate measures the
# selected candidate's out-of-fold predictions on all rows instead.
CV_ONLY_SPLIT = CONFIG["split"]["method"] == "cross_validation_only"


rule evaluate:
    input:
        data="work/{run}/validated/data.parquet",
        assignment="work/{run}/split/assignment.parquet",
        recipe="work/{run}/features/recipe.json",
        selected="work/{run}/comparison/selected.json",
        models=expand(
            "work/{{run}}/candidates/{candidate}/model.json", candidate=CANDIDATES
        ),
        # Without a test part the evaluation reads the out-of-fold predictions.
        oof=(
            expand(
                "work/{{run}}/candidates/{candidate}/oof.parquet", candidate=CANDIDATES
            )
            if CV_ONLY_SPLIT
            else []
        ),
    output:
        scores="work/{run}/evaluation/scores.parquet",
        probability_metrics="work/{run}/evaluation/probability_metrics.json",
        stamp="work/{run}/provenance/evaluate.json",
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
        code=code(script="scripts/evaluate.py"),
    script:
        "../scripts/evaluate.py"
