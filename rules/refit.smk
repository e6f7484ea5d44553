# The deliverable (evaluation.refit_all): after the evaluation, the selected candidate fitted
# again on all rows. The card's numbers describe the evaluated model (training part only);
# scoring uses this one. Defined only when evaluation.refit_all is true.
REFIT_OUTPUTS = []

if CONFIG["evaluation"]["refit_all"]:
    REFIT_OUTPUTS = expand(artifact("final/model.json"), run=RUN)

    rule refit:
        input:
            data=artifact("validated/data.parquet"),
            recipe=artifact("features/recipe.json"),
            selected=artifact("comparison/selected.json"),
            models=per_candidate("candidates/{candidate}/model.json"),
            probability_metrics=artifact("evaluation/probability_metrics.json"),
        output:
            model=artifact("final/model.json"),
            stamp=artifact("provenance/refit.json"),
        log:
            "logs/{run}/refit.log",
        benchmark:
            "benchmarks/{run}/refit.tsv"
        params:
            candidates=CANDIDATES,
            target=CONFIG["data"]["target"],
            seed=CONFIG["cross_validation"]["seed"],
            inference=CONFIG["inference"],
            code=code(script="scripts/refit.py"),
        script:
            "../scripts/refit.py"
