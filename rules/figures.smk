# The card's figures (SVG). Order: evaluate → model_figures; apply_cutoff → figures. They
# are split by what they depend on, so that a change of costs redraws only the four that
# show the cut-off.
MODEL_FIGURES = ["reliability", "coefficients"]
DECISION_FIGURES = ["roc", "cost_curve", "score_distribution", "subgroups"]
FIGURES = DECISION_FIGURES + MODEL_FIGURES


rule model_figures:
    input:
        probability_metrics="work/{run}/evaluation/probability_metrics.json",
        selected="work/{run}/comparison/selected.json",
        recipe="work/{run}/features/recipe.json",
        models=expand(
            "work/{{run}}/candidates/{candidate}/model.json", candidate=CANDIDATES
        ),
    output:
        reliability="work/{run}/figures/reliability.svg",
        coefficients="work/{run}/figures/coefficients.svg",
        stamp="work/{run}/provenance/model_figures.json",
    log:
        "logs/{run}/model_figures.log",
    benchmark:
        "benchmarks/{run}/model_figures.tsv"
    params:
        candidates=CANDIDATES,
        figures=MODEL_FIGURES,
        code=code(script="scripts/model_figures.py"),
    script:
        "../scripts/model_figures.py"


rule figures:
    input:
        predictions="work/{run}/evaluation/predictions.parquet",
        metrics="work/{run}/evaluation/metrics.json",
        subgroups="work/{run}/evaluation/subgroups.json",
        choice="work/{run}/threshold/choice.json",
        curve="work/{run}/threshold/cost_curve.parquet",
    output:
        roc="work/{run}/figures/roc.svg",
        cost_curve="work/{run}/figures/cost_curve.svg",
        score_distribution="work/{run}/figures/score_distribution.svg",
        subgroups="work/{run}/figures/subgroups.svg",
        stamp="work/{run}/provenance/figures.json",
    log:
        "logs/{run}/figures.log",
    benchmark:
        "benchmarks/{run}/figures.tsv"
    params:
        figures=DECISION_FIGURES,
        currency=CONFIG["costs"]["currency"],
        code=code(script="scripts/figures.py"),
    script:
        "../scripts/figures.py"
