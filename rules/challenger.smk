# A flexible challenger (gradient-boosted trees) fitted on the candidates' own folds, to show
# how much the interpretable models leave on the table. Never a candidate for adoption and
# never stored as a model: only its out-of-fold predictions and fold metrics, with its gap to
# the selected candidate. Defined only when challenger.enabled is true.
CHALLENGER = CONFIG["challenger"]
CHALLENGER_OUTPUTS = []

if CHALLENGER["enabled"]:
    CHALLENGER_OUTPUTS = expand("work/{run}/challenger/cv.json", run=RUN)

    rule challenger:
        input:
            design="work/{run}/features/train_design.parquet",
            assignment="work/{run}/split/assignment.parquet",
            recipe="work/{run}/features/recipe.json",
            selected="work/{run}/comparison/selected.json",
            cv=expand(
                "work/{{run}}/candidates/{candidate}/cv.json", candidate=CANDIDATES
            ),
        output:
            cv="work/{run}/challenger/cv.json",
            oof="work/{run}/challenger/oof.parquet",
            stamp="work/{run}/provenance/challenger.json",
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
