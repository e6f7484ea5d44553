rule threshold:
    input:
        selected="results/{run}/comparison/selected.json",
        oof=expand(
            "results/{{run}}/candidates/{candidate}/oof.parquet", candidate=CANDIDATES
        ),
    output:
        choice="results/{run}/threshold/choice.json",
        curve="results/{run}/threshold/cost_curve.parquet",
        stamp="results/{run}/provenance/threshold.json",
    log:
        "logs/{run}/threshold.log",
    benchmark:
        "benchmarks/{run}/threshold.tsv"
    threads: RES["threads"]
    resources:
        mem_mb=RES["mem_mb"],
        runtime=RES["runtime"],
    params:
        candidates=CANDIDATES,
        costs=CONFIG["costs"],
        code=code(
            "stages/threshold",
            "threshold",
            "metrics",
            "solvers",
            script="scripts/threshold.py",
        ),
    script:
        "../scripts/threshold.py"


# The test part is scored once, by evaluate, which measures what does not depend on the
# cut-off; apply_cutoff adds the decision figures. A change of costs reruns threshold and
# apply_cutoff, not evaluate. Neither threshold nor compare reads an evaluation artifact.
rule evaluate:
    input:
        data="results/{run}/validated/data.parquet",
        assignment="results/{run}/split/assignment.parquet",
        recipe="results/{run}/features/recipe.json",
        selected="results/{run}/comparison/selected.json",
        models=expand(
            "results/{{run}}/candidates/{candidate}/model.json", candidate=CANDIDATES
        ),
    output:
        scores="results/{run}/evaluation/scores.parquet",
        probability_metrics="results/{run}/evaluation/probability_metrics.json",
        stamp="results/{run}/provenance/evaluate.json",
    log:
        "logs/{run}/evaluate.log",
    benchmark:
        "benchmarks/{run}/evaluate.tsv"
    threads: RES["threads"]
    resources:
        mem_mb=RES["mem_mb"],
        runtime=RES["runtime"],
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
        code=code(
            "stages/evaluate",
            "metrics",
            "fairness",
            "predict",
            "models",
            "recipe",
            "solvers",
            "threshold",
            script="scripts/evaluate.py",
        ),
    script:
        "../scripts/evaluate.py"


rule apply_cutoff:
    input:
        scores="results/{run}/evaluation/scores.parquet",
        probability_metrics="results/{run}/evaluation/probability_metrics.json",
        choice="results/{run}/threshold/choice.json",
    output:
        metrics="results/{run}/evaluation/metrics.json",
        subgroups="results/{run}/evaluation/subgroups.json",
        predictions="results/{run}/evaluation/predictions.parquet",
        stamp="results/{run}/provenance/apply_cutoff.json",
    log:
        "logs/{run}/apply_cutoff.log",
    benchmark:
        "benchmarks/{run}/apply_cutoff.tsv"
    threads: RES["threads"]
    resources:
        mem_mb=RES["mem_mb"],
        runtime=RES["runtime"],
    params:
        code=code(
            "stages/apply_cutoff",
            "fairness",
            "threshold",
            "metrics",
            "solvers",
            script="scripts/apply_cutoff.py",
        ),
    script:
        "../scripts/apply_cutoff.py"
