# The card's figures (SVG). Order: evaluate → model_figures; apply_cutoff → figures. They
# are split by what they depend on, so that a change of costs redraws only the four that
# show the cut-off.
MODEL_FIGURES = ["reliability", "coefficients"]
DECISION_FIGURES = ["roc", "cost_curve", "score_distribution", "subgroups"]
FIGURES = DECISION_FIGURES + MODEL_FIGURES


rule model_figures:
    input:
        probability_metrics=artifact("evaluation/probability_metrics.json"),
        selected=artifact("comparison/selected.json"),
        recipe=artifact("features/recipe.json"),
        models=per_candidate("candidates/{candidate}/model.json"),
    output:
        reliability=artifact("figures/reliability.svg"),
        coefficients=artifact("figures/coefficients.svg"),
        stamp=artifact("provenance/model_figures.json"),
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
        predictions=artifact("evaluation/predictions.parquet"),
        probability_metrics=artifact("evaluation/probability_metrics.json"),
        cutoff_metrics=artifact("evaluation/cutoff_metrics.json"),
        subgroups=artifact("evaluation/subgroups.json"),
        choice=artifact("threshold/choice.json"),
        curve=artifact("threshold/cost_curve.parquet"),
    output:
        roc=artifact("figures/roc.svg"),
        cost_curve=artifact("figures/cost_curve.svg"),
        score_distribution=artifact("figures/score_distribution.svg"),
        subgroups=artifact("figures/subgroups.svg"),
        stamp=artifact("provenance/figures.json"),
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
