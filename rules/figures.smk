# The card's figures (SVG). Order: evaluate → model_figures; threshold + evaluate → figures
# (side by side with apply_cutoff); apply_cutoff → subgroup_figure. They are split by what
# they depend on, so that a change of costs redraws only the four that show the cut-off,
# and three of them while apply_cutoff runs.
MODEL_FIGURES = ["reliability", "coefficients"]
CUTOFF_FIGURES = ["roc", "cost_curve", "score_distribution"]
SUBGROUP_FIGURES = ["subgroups"]
DECISION_FIGURES = CUTOFF_FIGURES + SUBGROUP_FIGURES
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
        scores=artifact("evaluation/scores.parquet"),
        probability_metrics=artifact("evaluation/probability_metrics.json"),
        choice=artifact("threshold/choice.json"),
        curve=artifact("threshold/cost_curve.parquet"),
    output:
        roc=artifact("figures/roc.svg"),
        cost_curve=artifact("figures/cost_curve.svg"),
        score_distribution=artifact("figures/score_distribution.svg"),
        stamp=artifact("provenance/figures.json"),
    log:
        "logs/{run}/figures.log",
    benchmark:
        "benchmarks/{run}/figures.tsv"
    params:
        figures=CUTOFF_FIGURES,
        currency=CONFIG["costs"]["currency"],
        code=code(script="scripts/figures.py"),
    script:
        "../scripts/figures.py"


rule subgroup_figure:
    input:
        subgroups=artifact("evaluation/subgroups.json"),
    output:
        subgroups=artifact("figures/subgroups.svg"),
        stamp=artifact("provenance/subgroup_figure.json"),
    log:
        "logs/{run}/subgroup_figure.log",
    benchmark:
        "benchmarks/{run}/subgroup_figure.tsv"
    params:
        figures=SUBGROUP_FIGURES,
        code=code(script="scripts/subgroup_figure.py"),
    script:
        "../scripts/subgroup_figure.py"
