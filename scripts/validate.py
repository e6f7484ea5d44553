"""Snakemake script of the validate rule: raw data + contract → typed snapshot and report."""

from oddsmith.data.validate import run_validate
from oddsmith.evidence.filehash import CACHE_PATH
from oddsmith.runner import stage

stage(
    snakemake,  # noqa: F821 (provided by Snakemake)
    run_validate,
    config=snakemake.params.config,  # noqa: F821
    data_path=snakemake.input.data,  # noqa: F821
    contract_path=snakemake.input.contract,  # noqa: F821
    out_data=snakemake.output.data,  # noqa: F821
    out_report=snakemake.output.report,  # noqa: F821
    out_summary=snakemake.output.summary,  # noqa: F821
    out_contract=snakemake.output.contract,  # noqa: F821
    hash_cache=CACHE_PATH,
)
