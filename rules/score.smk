# Scoring a later batch with this build's selected model: scores with reason codes and a
# drift page. Defined only when scoring.data is set. The batch file enters through params
# (path + SHA-256): a changed file reruns the rule, and the job's stamp lists only files of
# the run folder (the summary records the batch's hash). The drift template and the card
# stylesheet are in the code fingerprint (RESOURCE_FILES of oddsmith/stages/score.py).
import os

from oddsmith.io import sha256_file

SCORING = CONFIG["scoring"]
SCORING_OUTPUTS = []
# Path and SHA-256 (None while a file does not exist) of the files read through params.
SCORING_FILES = {
    name: {"path": path, "sha256": sha256_file(path) if os.path.isfile(path) else None}
    for name, path in (("batch", SCORING["data"]),)
    if path
}

if SCORING["data"]:
    SCORING_OUTPUTS = expand("work/{run}/scoring/summary.json", run=RUN)

    rule score:
        input:
            recipe="work/{run}/features/recipe.json",
            selected="work/{run}/comparison/selected.json",
            models=expand(
                "work/{{run}}/candidates/{candidate}/model.json",
                candidate=CANDIDATES,
            ),
            choice="work/{run}/threshold/choice.json",
            contract="work/{run}/validated/contract.yaml",
            data="work/{run}/validated/data.parquet",
            assignment="work/{run}/split/assignment.parquet",
            # The deliverable, when the selected model is refitted on all rows.
            final=REFIT_OUTPUTS,
        output:
            scores="work/{run}/scoring/scores.parquet",
            csv="work/{run}/scoring/scores.csv",
            summary="work/{run}/scoring/summary.json",
            drift="work/{run}/scoring/drift.json",
            html="work/{run}/scoring/drift.html",
            pdf="work/{run}/scoring/drift.pdf",
            stamp="work/{run}/provenance/score.json",
        log:
            "logs/{run}/score.log",
        benchmark:
            "benchmarks/{run}/score.tsv"
        params:
            candidates=CANDIDATES,
            batch=SCORING_FILES["batch"],
            data={
                k: CONFIG["data"][k]
                for k in ("id_column", "target", "encoding", "allow_outside_project")
            },
            scoring=SCORING,
            monitoring=CONFIG["monitoring"],
            code=code(script="scripts/score.py"),
        script:
            "../scripts/score.py"
