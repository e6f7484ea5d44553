rule apply_cutoff:
    input:
        scores="work/{run}/evaluation/scores.parquet",
        probability_metrics="work/{run}/evaluation/probability_metrics.json",
        choice="work/{run}/threshold/choice.json",
    output:
        metrics="work/{run}/evaluation/metrics.json",
        subgroups="work/{run}/evaluation/subgroups.json",
        predictions="work/{run}/evaluation/predictions.parquet",
        stamp="work/{run}/provenance/apply_cutoff.json",
    log:
        "logs/{run}/apply_cutoff.log",
    benchmark:
        "benchmarks/{run}/apply_cutoff.tsv"
    params:
        code=code(script="scripts/apply_cutoff.py"),
    script:
        "../scripts/apply_cutoff.py"
