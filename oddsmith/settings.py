"""The settings vocabulary shared by the configuration check and the package: which model
kinds are penalised, the names of the four decision costs, the rule that a constrained
cut-off needs a limit, and the candidate defaults. Each is defined here once.

The defaults come from the configuration schema (``schemas/config.schema.yaml``), the single
source: a library call that leaves an option out gets the value a configuration file that
leaves it out gets. This module is light (no numerical libraries), so the configuration
check, run when the workflow loads, imports it without the cost of the models.
"""

from __future__ import annotations

import copy
import functools

import yaml

from oddsmith.resources import schema_file

#: The schema the candidate defaults are read from (in the code fingerprint of every rule
#: that runs this module).
RESOURCE_FILES = ("schemas/config.schema.yaml",)

#: The split method that keeps no test part: every evaluation figure is out-of-fold.
CV_ONLY = "cross_validation_only"
#: Kinds fitted with a penalty (standardised design, inner cross-validation of the grid).
PENALISED_KINDS = ("l1", "l2", "elastic_net")
#: Costs of the four decisions, per case, in the configuration's words and order.
COST_KEYS = ("false_positive", "false_negative", "true_positive", "true_negative")
#: Settings of the ``costs`` section besides the four costs (passed on unchanged).
COST_OPTIONS = ("currency", "adopt", "max_flag_rate", "min_sensitivity", "bootstrap", "seed")


def constrained_problem(adopt: str, max_flag_rate, min_sensitivity) -> str | None:
    """Why the cut-off options cannot be used together, or None.

    Examples
    --------
    >>> constrained_problem("constrained", None, None)
    "adopt 'constrained' needs max_flag_rate or min_sensitivity"
    >>> constrained_problem("constrained", 0.2, None) is None
    True
    """
    if adopt == "constrained" and max_flag_rate is None and min_sensitivity is None:
        return "adopt 'constrained' needs max_flag_rate or min_sensitivity"
    return None


#: libyaml's parser where PyYAML was built with it (the pure-Python one parses the schema in
#: about 0.1 s, once for every Snakemake start and job that reads it); the same document.
_SCHEMA_LOADER = getattr(yaml, "CSafeLoader", yaml.SafeLoader)


@functools.lru_cache(maxsize=1)
def _parsed_schema() -> dict:
    return yaml.load(schema_file("config.schema.yaml").read_text(encoding="utf-8"),  # noqa: S506
                     Loader=_SCHEMA_LOADER)


def config_schema() -> dict:
    """The configuration JSON Schema (``schemas/config.schema.yaml``), parsed once in a
    process; each call returns its own copy, free to change."""
    return copy.deepcopy(_parsed_schema())


@functools.lru_cache(maxsize=1)
def feature_default(name: str):
    """Schema default of one option of a feature entry (``min_count``, ``missing``, ...).

    >>> feature_default("min_count")
    20
    """
    schema = _parsed_schema()
    return schema["properties"]["features"]["items"]["properties"][name]["default"]


@functools.lru_cache(maxsize=1)
def candidate_defaults() -> dict:
    """Schema defaults of a candidate's fit options (``inner_folds``, ``l1_ratio``, ``max_iter``).

    Examples
    --------
    >>> sorted(candidate_defaults())
    ['inner_folds', 'l1_ratio', 'max_iter']
    """
    schema = _parsed_schema()
    properties = schema["properties"]["candidates"]["items"]["properties"]
    return {name: spec["default"] for name, spec in properties.items()
            if name in ("inner_folds", "l1_ratio", "max_iter")}


def normalised_costs(costs: dict) -> dict:
    """The checked ``costs`` section in the one form every stage reads.

    The four costs under their configuration names (the ratio form ``ratio_fn_to_fp: r``
    becomes ``false_positive: 1, false_negative: r``), the correct-decision costs as given or
    0, and the other cost settings unchanged. Values keep their type (no float conversion),
    so a configuration already in this form is returned equal.

    Examples
    --------
    >>> normalised_costs({"ratio_fn_to_fp": 5, "currency": "unit", "adopt": "empirical",
    ...                   "max_flag_rate": None, "min_sensitivity": None, "bootstrap": 0, "seed": 1})
    ... # doctest: +NORMALIZE_WHITESPACE
    {'false_positive': 1, 'false_negative': 5, 'true_positive': 0, 'true_negative': 0,
     'currency': 'unit', 'adopt': 'empirical', 'max_flag_rate': None, 'min_sensitivity': None,
     'bootstrap': 0, 'seed': 1}
    """
    if "ratio_fn_to_fp" in costs:
        pair = {"false_positive": 1, "false_negative": costs["ratio_fn_to_fp"]}
    else:
        pair = {k: costs[k] for k in ("false_positive", "false_negative")}
    correct = {k: costs.get(k, 0) for k in ("true_positive", "true_negative")}
    return pair | correct | {k: costs[k] for k in COST_OPTIONS}
