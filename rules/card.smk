# The model card (HTML + PDF + card.sha256), after the manifest: the card prints the
# manifest's SHA-256.


rule card:
    input:
        manifest=artifact("manifest.json"),
        report=artifact("validated/report.json"),
        contract=artifact("validated/contract.yaml"),
        split=artifact("split/summary.json"),
        recipe=artifact("features/recipe.json"),
        diagnostics=artifact("features/diagnostics.json"),
        models=per_candidate("candidates/{candidate}/model.json"),
        table=artifact("comparison/table.json"),
        selected=artifact("comparison/selected.json"),
        choice=artifact("threshold/choice.json"),
        probability_metrics=artifact("evaluation/probability_metrics.json"),
        cutoff_metrics=artifact("evaluation/cutoff_metrics.json"),
        subgroups=artifact("evaluation/subgroups.json"),
        figures=[artifact(f"figures/{name}.svg") for name in FIGURES],
        challenger=CHALLENGER_OUTPUTS,
        final=REFIT_OUTPUTS,
    output:
        html=artifact("card/model_card.html"),
        pdf=artifact("card/model_card.pdf"),
        sha256=artifact("card/card.sha256"),
    log:
        "logs/{run}/card.log",
    benchmark:
        "benchmarks/{run}/card.tsv"
    params:
        candidates=CANDIDATES,
        figures=FIGURES,
        code=code(script="scripts/card.py"),
    script:
        "../scripts/card.py"
