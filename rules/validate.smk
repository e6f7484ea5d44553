rule validate:
    input:
        data=CONFIG["data"]["path"],
        contract=CONFIG["data"]["contract"],
    output:
        data="work/{run}/validated/data.parquet",
        report="work/{run}/validated/report.json",
        summary="work/{run}/validated/summary.txt",
        contract="work/{run}/validated/contract.yaml",
        stamp="work/{run}/provenance/validate.json",
    log:
        "logs/{run}/validate.log",
    benchmark:
        "benchmarks/{run}/validate.tsv"
    threads: RES["threads"]
    resources:
        mem_mb=RES["mem_mb"],
        runtime=RES["runtime"],
    params:
        config={k: CONFIG[k] for k in ("data", "features", "interactions", "fairness")}
        | {"split": {"group_column": CONFIG["split"]["group_column"]}},
        code=code("validate", "contract", "config", script="scripts/validate.py"),
    script:
        "../scripts/validate.py"
