"""Predictions from stored artifacts only: a recipe JSON and a model JSON.

The one path from raw columns to probabilities used by test evaluation and by scoring, so
the card and later scoring can never disagree.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from oddsmith.data.recipe import apply_recipe, recipe_digest
from oddsmith.errors import ArtifactError
from oddsmith.fitting.models import linear_predictor, predict_from_dict


def model_design(recipe: dict, model: dict, df: pd.DataFrame) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Design matrix (the model's own columns, in order) and per-row recipe flags."""
    if model.get("status") != "ok":
        raise ArtifactError(f"model '{model.get('candidate')}' has no fit ({model.get('status')}: {model.get('reason')})")
    if model.get("recipe_digest") not in (None, recipe.get("digest")):
        raise ArtifactError("the model was fitted with another feature recipe (recipe digest differs)")
    X, flags = apply_recipe(recipe, df, standardise=bool(model.get("standardise")))
    return X[list(model["design_columns"])], flags


def predict_frame(recipe: dict, model: dict, df: pd.DataFrame) -> np.ndarray:
    """Probabilities of the event for the rows of ``df``."""
    X, _ = model_design(recipe, model, df)
    return predict_from_dict(model, X)


def log_odds_frame(recipe: dict, model: dict, df: pd.DataFrame) -> np.ndarray:
    """Linear predictor (log-odds for a logit link) for the rows of ``df``."""
    X, _ = model_design(recipe, model, df)
    return linear_predictor(model, X)


__all__ = ["model_design", "predict_frame", "log_odds_frame", "recipe_digest"]
