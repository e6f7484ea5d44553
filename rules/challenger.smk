# A flexible challenger (gradient-boosted trees) fitted on the candidates' own folds, to show
# how much the interpretable models leave on the table. Never a candidate for adoption and
# never stored as a model: only its out-of-fold predictions and fold metrics, with its gap to
# the selected candidate. Defined only when challenger.enabled is true.
CHALLENGER = CONFIG["challenger"]
CHALLENGER_OUTPUTS = []

if CHALLENGER["enabled"]:
    CHALLENGER_OUTPUTS = [artifact("challenger/cv.json")]

    rule challenger:
        input:
            design=artifact("features/train_design.parquet"),
            assignment=artifact("split/assignment.parquet"),
            recipe=artifact("features/recipe.json"),
            selected=artifact("comparison/selected.json"),
            cv=per_candidate("candidates/{candidate}/cv.json"),
        output:
            cv=artifact("challenger/cv.json"),
            oof=artifact("challenger/oof.parquet"),
            stamp=artifact("provenance/challenger.json"),
        log:
            "logs/{run}/challenger.log",
        benchmark:
            "benchmarks/{run}/challenger.tsv"
        params:
            candidates=CANDIDATES,
            challenger=CHALLENGER,
            data={k: CONFIG["data"][k] for k in ("id_column", "target")},
            code=code(script="scripts/challenger.py"),
        script:
            "../scripts/challenger.py"
