# The card's figures (SVG) and the model card itself (HTML + PDF + card.sha256).
# Order: evaluate → model_figures; apply_cutoff → figures; then manifest → card (the card
# prints the manifest's SHA-256). The figures are split by what they depend on, so that a
# change of costs redraws only the four that show the cut-off.
from glob import glob

MODEL_FIGURES = ["reliability", "coefficients"]
DECISION_FIGURES = ["roc", "cost_curve", "score_distribution", "subgroups"]
FIGURES = DECISION_FIGURES + MODEL_FIGURES


rule model_figures:
    input:
        probability_metrics="results/{run}/evaluation/probability_metrics.json",
        selected="results/{run}/comparison/selected.json",
        recipe="results/{run}/features/recipe.json",
        models=expand(
            "results/{{run}}/candidates/{candidate}/model.json", candidate=CANDIDATES
        ),
    output:
        reliability="results/{run}/figures/reliability.svg",
        coefficients="results/{run}/figures/coefficients.svg",
        stamp="results/{run}/provenance/model_figures.json",
    log:
        "logs/{run}/model_figures.log",
    benchmark:
        "benchmarks/{run}/model_figures.tsv"
    threads: RES["threads"]
    resources:
        mem_mb=RES["mem_mb"],
        runtime=RES["runtime"],
    params:
        candidates=CANDIDATES,
        figures=MODEL_FIGURES,
        code=code("stages/figures", "plots", script="scripts/model_figures.py"),
    script:
        "../scripts/model_figures.py"


rule figures:
    input:
        predictions="results/{run}/evaluation/predictions.parquet",
        metrics="results/{run}/evaluation/metrics.json",
        subgroups="results/{run}/evaluation/subgroups.json",
        choice="results/{run}/threshold/choice.json",
        curve="results/{run}/threshold/cost_curve.parquet",
    output:
        roc="results/{run}/figures/roc.svg",
        cost_curve="results/{run}/figures/cost_curve.svg",
        score_distribution="results/{run}/figures/score_distribution.svg",
        subgroups="results/{run}/figures/subgroups.svg",
        stamp="results/{run}/provenance/figures.json",
    log:
        "logs/{run}/figures.log",
    benchmark:
        "benchmarks/{run}/figures.tsv"
    threads: RES["threads"]
    resources:
        mem_mb=RES["mem_mb"],
        runtime=RES["runtime"],
    params:
        figures=DECISION_FIGURES,
        currency=CONFIG["costs"]["currency"],
        code=code("stages/figures", "plots", script="scripts/figures.py"),
    script:
        "../scripts/figures.py"


rule card:
    input:
        manifest="results/{run}/manifest.json",
        report="results/{run}/validated/report.json",
        split="results/{run}/split/summary.json",
        recipe="results/{run}/features/recipe.json",
        diagnostics="results/{run}/features/diagnostics.json",
        models=expand(
            "results/{{run}}/candidates/{candidate}/model.json", candidate=CANDIDATES
        ),
        table="results/{run}/comparison/table.json",
        selected="results/{run}/comparison/selected.json",
        choice="results/{run}/threshold/choice.json",
        metrics="results/{run}/evaluation/metrics.json",
        subgroups="results/{run}/evaluation/subgroups.json",
        figures=expand("results/{{run}}/figures/{figure}.svg", figure=FIGURES),
        challenger=CHALLENGER_OUTPUTS,
    output:
        html="results/{run}/card/model_card.html",
        pdf="results/{run}/card/model_card.pdf",
        sha256="results/{run}/card/card.sha256",
    log:
        "logs/{run}/card.log",
    benchmark:
        "benchmarks/{run}/card.tsv"
    threads: RES["threads"]
    resources:
        mem_mb=RES["mem_mb"],
        runtime=RES["runtime"],
    params:
        code=code("stages/card", "card", "plots", "resources", script="scripts/card.py"),
        templates=code_fingerprint(
            (), extra_files=sorted(glob("reports/*.j2") + glob("reports/*.css"))
        ),
    script:
        "../scripts/card.py"
