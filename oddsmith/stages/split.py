"""The split stage: validated data → assignment (part and folds per id) and its summary."""

from __future__ import annotations

import logging

from oddsmith.data.split import assign_split, write_assignment
from oddsmith.io import parquet_columns, read_json, read_parquet, write_json

log = logging.getLogger("oddsmith.split")


def run_split(*, data_path: str, report_path: str, data: dict, split: dict, cross_validation: dict,
              out_assignment: str, out_summary: str) -> dict:
    """Assign rows to train/test and folds; the planned parameter count comes from the report."""
    # Only the columns the split looks at: at 1M rows the whole frame would be 4x the memory.
    wanted = [data["id_column"], data["target"], data["date_column"], split.get("group_column")]
    present = set(parquet_columns(data_path))
    df = read_parquet(data_path, columns=list(dict.fromkeys(c for c in wanted if c in present)))
    n_parameters = read_json(report_path)["planned_parameters"]
    assignment, summary = assign_split(
        df, id_column=data["id_column"], target=data["target"],
        split=split | {"date_column": data["date_column"]}, cross_validation=cross_validation,
        n_parameters=n_parameters,
    )
    for warning in summary.get("warnings", []):
        log.warning(warning)
    write_assignment(assignment, out_assignment)
    write_json(out_summary, summary)
    return summary
