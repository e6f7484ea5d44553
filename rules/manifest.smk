rule manifest:
    input:
        stamps=lambda wildcards: stamps(wildcards.run),
        data=ancient(CONFIG["data"]["path"]),
        contract=ancient(CONFIG["data"]["contract"]),
        configs=config_files(),
        batches=ancient(scoring_batches()),
    output:
        manifest=artifact("manifest.json"),
    log:
        "logs/{run}/manifest.log",
    benchmark:
        "benchmarks/{run}/manifest.tsv"
    params:
        config=CONFIG,
        build=BUILD,
        environment=ENVIRONMENT,
        card_rule=lambda wildcards: rule_fingerprint("card"),
        # The raw inputs by content: a changed data file reaches the manifest even when
        # validate left no outputs to compare (Snakemake removes those of a failed job, and
        # would otherwise find the published build up to date and run nothing).
        raw=raw_content(),
        code=code(script="scripts/manifest.py"),
    script:
        "../scripts/manifest.py"
