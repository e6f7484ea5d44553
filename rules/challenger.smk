# A flexible challenger (gradient-boosted trees) fitted on the candidates' own folds, to show
# how much the interpretable models leave on the table. Never a candidate for adoption and
# never stored as a model: only its out-of-fold predictions and fold metrics, with its gap to
# the selected candidate. Defined only when challenger.enabled is true.
#
# Two jobs: challenger_fit needs only what the trees need (design, folds, recipe), so it runs
# beside the candidates' fits; challenger_gap, after compare, states the gap to the selected
# candidate from the fold metrics (a second or so).
CHALLENGER = CONFIG["challenger"]
CHALLENGER_OUTPUTS = []

# Above every fit kind (rules/common.smk, FIT_PRIORITY): the trees are the build's longest
# job, so they start first and the candidates' fits fill the other core (bench/README.md).
CHALLENGER_PRIORITY = max(FIT_PRIORITY.values()) + 1

if CHALLENGER["enabled"]:
    CHALLENGER_OUTPUTS = [artifact("challenger/cv.json")]

    rule challenger_fit:
        input:
            design=artifact("features/train_design.parquet"),
            assignment=artifact("split/assignment.parquet"),
            recipe=artifact("features/recipe.json"),
        output:
            folds=artifact("challenger/folds.json"),
            oof=artifact("challenger/oof.parquet"),
            stamp=artifact("provenance/challenger_fit.json"),
        log:
            "logs/{run}/challenger_fit.log",
        benchmark:
            "benchmarks/{run}/challenger_fit.tsv"
        priority: CHALLENGER_PRIORITY
        params:
            challenger=CHALLENGER,
            data={k: CONFIG["data"][k] for k in ("id_column", "target")},
            code=code(script="scripts/challenger_fit.py"),
        script:
            "../scripts/challenger_fit.py"

    rule challenger_gap:
        input:
            folds=artifact("challenger/folds.json"),
            selected=artifact("comparison/selected.json"),
            cv=per_candidate("candidates/{candidate}/cv.json"),
        output:
            cv=artifact("challenger/cv.json"),
            stamp=artifact("provenance/challenger_gap.json"),
        log:
            "logs/{run}/challenger_gap.log",
        benchmark:
            "benchmarks/{run}/challenger_gap.tsv"
        params:
            candidates=CANDIDATES,
            code=code(script="scripts/challenger_gap.py"),
        script:
            "../scripts/challenger_gap.py"
