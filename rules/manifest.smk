rule manifest:
    input:
        stamps=lambda wildcards: stamps(wildcards.run),
        data=CONFIG["data"]["path"],
        contract=CONFIG["data"]["contract"],
        configs=config_files(),
        batches=scoring_batches(),
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
        code=code(script="scripts/manifest.py"),
    script:
        "../scripts/manifest.py"
