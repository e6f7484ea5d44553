"""Snakemake script of the score rule: a later batch scored with the selected model, plus drift."""

import os

from oddsmith.runner import stage
from oddsmith.stages.score import run_score

sm = snakemake  # noqa: F821 (provided by Snakemake)
stage(sm, run_score, new_path=sm.params.batch["path"], recipe_path=sm.input.recipe, selected_path=sm.input.selected,
      model_paths=dict(zip(sm.params.candidates, sm.input.models)), choice_path=sm.input.choice,
      contract_path=sm.input.contract, data_path=sm.input.data, assignment_path=sm.input.assignment,
      data=sm.params.data, scoring=sm.params.scoring, monitoring=sm.params.monitoring,
      deliverable_path=sm.input.final[0] if sm.input.final else None,
      outputs={os.path.basename(path): path for key, path in sm.output.items() if key != "stamp"})
