# The deliverable (evaluation.refit_all): after the evaluation, the selected candidate fitted
# again on all rows. The card's numbers describe the evaluated model (training part only);
# scoring uses this one. Defined only when evaluation.refit_all is true.
REFIT_OUTPUTS = []

if CONFIG["evaluation"]["refit_all"]:
    REFIT_OUTPUTS = expand("work/{run}/final/model.json", run=RUN)

    rule refit:
        input:
            data="work/{run}/validated/data.parquet",
            recipe="work/{run}/features/recipe.json",
            selected="work/{run}/comparison/selected.json",
            models=expand(
                "work/{{run}}/candidates/{candidate}/model.json", candidate=CANDIDATES
            ),
            probability_metrics="work/{run}/evaluation/probability_metrics.json",
        output:
            model="work/{run}/final/model.json",
            stamp="work/{run}/provenance/refit.json",
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
