"""Snakemake script of the score rule: a later batch scored with the selected model, plus drift."""

from oddsmith.runner import stage
from oddsmith.stages.score import run_score

sm = snakemake  # noqa: F821 (provided by Snakemake)
stage(sm, run_score, new_path=sm.params.batch["path"], recipe_path=sm.input.recipe, selected_path=sm.input.selected,
      model_paths=dict(zip(sm.params.candidates, sm.input.models)), choice_path=sm.input.choice,
      contract_path=sm.input.contract, data_path=sm.input.data, assignment_path=sm.input.assignment,
      data=sm.params.data, scoring=sm.params.scoring, monitoring=sm.params.monitoring,
      deliverable_path=sm.input.final[0] if sm.input.final else None,
      outputs={"scores.parquet": sm.output.scores, "scores.csv": sm.output.csv, "summary.json": sm.output.summary,
               "drift.json": sm.output.drift, "drift.html": sm.output.html, "drift.pdf": sm.output.pdf})
