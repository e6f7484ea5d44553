rule apply_cutoff:
    input:
        scores=artifact("evaluation/scores.parquet"),
        probability_metrics=artifact("evaluation/probability_metrics.json"),
        choice=artifact("threshold/choice.json"),
    output:
        cutoff_metrics=artifact("evaluation/cutoff_metrics.json"),
        subgroups=artifact("evaluation/subgroups.json"),
        predictions=artifact("evaluation/predictions.parquet"),
        stamp=artifact("provenance/apply_cutoff.json"),
    log:
        "logs/{run}/apply_cutoff.log",
    benchmark:
        "benchmarks/{run}/apply_cutoff.tsv"
    params:
        code=code(script="scripts/apply_cutoff.py"),
    script:
        "../scripts/apply_cutoff.py"
