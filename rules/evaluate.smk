# The test part is scored once, by evaluate, which measures what does not depend on the
# cut-off; apply_cutoff adds the decision figures. A change of costs reruns threshold and
# apply_cutoff, not evaluate. Neither threshold nor compare reads an evaluation artifact.
rule evaluate:
    input:
        data="work/{run}/validated/data.parquet",
        assignment="work/{run}/split/assignment.parquet",
        recipe="work/{run}/features/recipe.json",
        selected="work/{run}/comparison/selected.json",
        models=expand(
            "work/{{run}}/candidates/{candidate}/model.json", candidate=CANDIDATES
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
