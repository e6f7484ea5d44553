# Scoring a later batch with this build's selected model: scores with reason codes and a
# drift page. Defined only when scoring.data is set. The batch file enters through params
# (path + SHA-256): a changed file reruns the rule, and the job's stamp lists only files of
# the run folder (the summary records the batch's hash). The drift template and the card
# stylesheet are in the code fingerprint (RESOURCE_FILES of oddsmith/stages/score.py).
import os

SCORING = CONFIG["scoring"]
SCORING_OUTPUTS = []
# Path and SHA-256 (None while a file does not exist) of the files read through params,
# hashed once per change of the file's state (rules/common.smk, raw inputs).
SCORING_FILES = {
    name: {
        "path": path,
        "sha256": (
            sha256_remembered([path], cache=CACHE_PATH)[path]
            if os.path.isfile(path)
            else None
        ),
    }
    for name, path in (("batch", SCORING["data"]),)
    if path
}

if SCORING["data"]:
    SCORING_OUTPUTS = expand(artifact("scoring/summary.json"), run=RUN)

    rule score:
        input:
            recipe=artifact("features/recipe.json"),
            selected=artifact("comparison/selected.json"),
            models=per_candidate("candidates/{candidate}/model.json"),
            choice=artifact("threshold/choice.json"),
            contract=artifact("validated/contract.yaml"),
            data=artifact("validated/data.parquet"),
            assignment=artifact("split/assignment.parquet"),
            # The deliverable, when the selected model is refitted on all rows.
            final=REFIT_OUTPUTS,
        output:
            scores=artifact("scoring/scores.parquet"),
            csv=artifact("scoring/scores.csv"),
            summary=artifact("scoring/summary.json"),
            drift=artifact("scoring/drift.json"),
            html=artifact("scoring/drift.html"),
            pdf=artifact("scoring/drift.pdf"),
            stamp=artifact("provenance/score.json"),
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
