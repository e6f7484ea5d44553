# The model card (HTML + PDF + card.sha256), after the manifest: the card prints the
# manifest's SHA-256.


rule card:
    input:
        manifest="work/{run}/manifest.json",
        report="work/{run}/validated/report.json",
        split="work/{run}/split/summary.json",
        recipe="work/{run}/features/recipe.json",
        diagnostics="work/{run}/features/diagnostics.json",
        models=expand(
            "work/{{run}}/candidates/{candidate}/model.json", candidate=CANDIDATES
        ),
        table="work/{run}/comparison/table.json",
        selected="work/{run}/comparison/selected.json",
        choice="work/{run}/threshold/choice.json",
        metrics="work/{run}/evaluation/metrics.json",
        subgroups="work/{run}/evaluation/subgroups.json",
        figures=expand("work/{{run}}/figures/{figure}.svg", figure=FIGURES),
        challenger=CHALLENGER_OUTPUTS,
        final=REFIT_OUTPUTS,
    output:
        html="work/{run}/card/model_card.html",
        pdf="work/{run}/card/model_card.pdf",
        sha256="work/{run}/card/card.sha256",
    log:
        "logs/{run}/card.log",
    benchmark:
        "benchmarks/{run}/card.tsv"
    params:
        code=code(script="scripts/card.py"),
    script:
        "../scripts/card.py"
