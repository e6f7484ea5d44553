rule validate:
    input:
        data=ancient(CONFIG["data"]["path"]),
        contract=ancient(CONFIG["data"]["contract"]),
    output:
        data=artifact("validated/data.parquet"),
        report=artifact("validated/report.json"),
        summary=artifact("validated/summary.txt"),
        contract=artifact("validated/contract.yaml"),
        stamp=artifact("provenance/validate.json"),
    log:
        "logs/{run}/validate.log",
    benchmark:
        "benchmarks/{run}/validate.tsv"
    params:
        # What validate checks ahead of the later stages; no seed, so a new seed alone
        # does not rerun it.
        config={k: CONFIG[k] for k in ("data", "features", "interactions", "fairness")}
        | {
            "split": {
                k: CONFIG["split"][k]
                for k in ("method", "test_fraction", "cutoff_date", "group_column")
            },
            "cross_validation": {"folds": CONFIG["cross_validation"]["folds"]},
            "candidates": [
                {k: c[k] for k in ("name", "kind", "features") if k in c}
                for c in CONFIG["candidates"]
            ],
        }
        # Only when set, so that configurations without clusters keep their params.
        | (
            {"inference": {"cluster_column": CONFIG["inference"]["cluster_column"]}}
            if CONFIG["inference"]["cluster_column"]
            else {}
        ),
        raw=raw_content(),
        code=code(script="scripts/validate.py"),
    script:
        "../scripts/validate.py"
