# Scoring a later batch with this build's selected model: scores with reason codes and a
# drift page. Defined only when scoring.data is set. The batch file, the drift template and
# the card stylesheet enter through params (path + SHA-256): a changed file reruns the rule,
# and the job's stamp lists only files of the results folder (the summary records the
# batch's hash).
import os

from oddsmith.io import sha256_file

SCORING = CONFIG["scoring"]
SCORING_OUTPUTS = []
# Path and SHA-256 (None while a file does not exist) of the files read through params.
SCORING_FILES = {
    name: {"path": path, "sha256": sha256_file(path) if os.path.isfile(path) else None}
    for name, path in (
        ("batch", SCORING["data"]),
        ("template", "reports/drift.html.j2"),
        ("stylesheet", "reports/model_card.css"),
    )
    if path
}

if SCORING["data"]:
    SCORING_OUTPUTS = expand("results/{run}/scoring/summary.json", run=RUN)

    rule score:
        input:
            recipe="results/{run}/features/recipe.json",
            selected="results/{run}/comparison/selected.json",
            models=expand(
                "results/{{run}}/candidates/{candidate}/model.json",
                candidate=CANDIDATES,
            ),
            choice="results/{run}/threshold/choice.json",
            contract="results/{run}/validated/contract.yaml",
            data="results/{run}/validated/data.parquet",
            assignment="results/{run}/split/assignment.parquet",
        output:
            scores="results/{run}/scoring/scores.parquet",
            csv="results/{run}/scoring/scores.csv",
            summary="results/{run}/scoring/summary.json",
            drift="results/{run}/scoring/drift.json",
            html="results/{run}/scoring/drift.html",
            pdf="results/{run}/scoring/drift.pdf",
            stamp="results/{run}/provenance/score.json",
        log:
            "logs/{run}/score.log",
        benchmark:
            "benchmarks/{run}/score.tsv"
        threads: RES["threads"]
        resources:
            mem_mb=RES["mem_mb"],
            runtime=RES["runtime"],
        params:
            candidates=CANDIDATES,
            batch=SCORING_FILES["batch"],
            template=SCORING_FILES["template"],
            stylesheet=SCORING_FILES["stylesheet"],
            data={
                k: CONFIG["data"][k]
                for k in ("id_column", "target", "encoding", "allow_outside_project")
            },
            scoring=SCORING,
            monitoring=CONFIG["monitoring"],
            code=code(
                "stages/score",
                "score",
                "drift",
                "predict",
                "models",
                "solvers",
                "recipe",
                "contract",
                "card",
                "plots",
                "resources",
                script="scripts/score.py",
            ),
        script:
            "../scripts/score.py"
