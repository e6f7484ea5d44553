"""Load and check an oddsmith configuration: JSON Schema first, then the cross-key rules.

Every problem is collected and reported at once with the key path, what was expected and
what was found. Defaults from the schema are filled in so later stages never guess.
"""

from __future__ import annotations

import copy
import json
import math
from pathlib import Path

import jsonschema

from oddsmith.errors import ConfigError, quoted
from oddsmith.io import read_yaml
from oddsmith.resources import schema_file
from oddsmith.settings import (CV_ONLY, PENALISED_KINDS, candidate_defaults, config_schema, constrained_problem,
                               normalised_costs)

SCHEMA_PATH = schema_file("config.schema.yaml")
#: The schema read here (in the code fingerprint of every rule that runs this module).
RESOURCE_FILES = ("schemas/config.schema.yaml",)


def _with_defaults(validator_class):
    validate_properties = validator_class.VALIDATORS["properties"]

    def set_defaults(validator, properties, instance, schema):
        if isinstance(instance, dict):
            for name, sub in properties.items():
                if "default" in sub and name not in instance:
                    instance[name] = copy.deepcopy(sub["default"])
        yield from validate_properties(validator, properties, instance, schema)

    return jsonschema.validators.extend(validator_class, {"properties": set_defaults})


_Validator = _with_defaults(jsonschema.Draft202012Validator)


def load_schema() -> dict:
    """Return the configuration JSON Schema as a dict."""
    return config_schema()


def read_config_file(path: str | Path) -> dict:
    """Read a YAML configuration file, with a clear error if it is missing or not YAML."""
    loaded = read_yaml(path, what="configuration file", error=ConfigError)
    if not isinstance(loaded, dict):
        raise ConfigError(f"configuration file {path} must hold a mapping of keys, found {type(loaded).__name__}")
    return loaded


def check_config(raw: dict, *, project_dir: str | Path = ".") -> dict:
    """Validate a configuration and return a copy with every default filled in, normalised.

    Normalised once here, so no stage checks or converts a setting again: the ``costs``
    section holds the four costs under their configuration names whichever form the file
    used (:func:`oddsmith.settings.normalised_costs`), sensitive attributes are plain names
    (with ``bands``/``blank_groups`` beside them), and the intercept-only baseline is a
    candidate with the schema's defaults. The result is canonical: every number has the
    type the schema gives it and every mapping has sorted keys, so files that differ only
    in key order or in spelling a number (``1200`` / ``1200.0``) give equal results with
    equal ``repr`` (the rule params Snakemake compares).

    Parameters
    ----------
    raw : dict
        The configuration as read from YAML (not modified).
    project_dir : path
        Folder that relative paths are resolved against.

    Raises
    ------
    ConfigError
        Listing every schema violation, or every cross-key problem.
    """
    config = copy.deepcopy(raw)
    schema = load_schema()
    errors = sorted(_Validator(schema).iter_errors(config), key=lambda e: list(map(str, e.absolute_path)))
    if errors:
        raise ConfigError(
            f"the configuration has {len(errors)} problem(s)", [_describe_schema_error(e) for e in errors]
        )
    problems = _sensitive_bands(config["fairness"])
    # The file's own split section: a default filled in is not a request.
    raw_split = raw.get("split") if isinstance(raw.get("split"), dict) else {}
    problems += _cross_key_problems(config, Path(project_dir), raw_split)
    if problems:
        raise ConfigError(f"the configuration has {len(problems)} problem(s)", problems)
    _add_baseline(config)
    config["costs"] = normalised_costs(config["costs"])
    return keys_sorted(typed_as_schema(config, schema))


def typed_as_schema(value, schema: dict):
    """``value`` with every number in the type its schema gives it: a whole number where the
    schema says ``integer`` (``5.0`` → ``5``), a float where it says ``number`` (``1200`` →
    ``1200.0``). Two spellings of one setting then give one configuration, the same
    artifacts and the same rule params (Snakemake compares each param's ``repr``, in which
    ``1200`` and ``1200.0`` differ). Booleans and values the schema does not type are kept.

    Examples
    --------
    >>> schema = {"properties": {"cost": {"type": "number"}, "folds": {"type": ["integer", "null"]},
    ...                          "grid": {"type": "array", "items": {"type": "number"}}}}
    >>> typed_as_schema({"cost": 1200, "folds": 5.0, "grid": [1, 0.5], "flag": True}, schema)
    {'cost': 1200.0, 'folds': 5, 'grid': [1.0, 0.5], 'flag': True}
    """
    if isinstance(value, dict):
        properties, extra = schema.get("properties", {}), schema.get("additionalProperties")
        return {k: typed_as_schema(v, properties.get(k, extra if isinstance(extra, dict) else {}))
                for k, v in value.items()}
    if isinstance(value, list):
        items = schema.get("items")
        return [typed_as_schema(v, items if isinstance(items, dict) else {}) for v in value]
    types = schema.get("type", [])
    types = [types] if isinstance(types, str) else types
    if isinstance(value, bool):
        return value
    if isinstance(value, int) and "number" in types and "integer" not in types and abs(value) <= 2**53:
        return float(value)  # exactly: every whole number up to 2**53 is a float
    if isinstance(value, float) and "integer" in types and value.is_integer():
        return int(value)
    return value


def keys_sorted(value):
    """``value`` with the keys of every mapping in sorted order (lists keep theirs).

    The order in which a file lists its keys carries no meaning, but Snakemake compares a
    dict param by its ``repr``, which follows the insertion order: sorted keys make a
    reordered file give the same params.

    Examples
    --------
    >>> keys_sorted({"b": [{"d": 1, "c": 2}], "a": 0})
    {'a': 0, 'b': [{'c': 2, 'd': 1}]}
    """
    if isinstance(value, dict):
        return {k: keys_sorted(value[k]) for k in sorted(value, key=str)}
    if isinstance(value, list):
        return [keys_sorted(v) for v in value]
    return value


def _sensitive_bands(fairness: dict) -> list[str]:
    """Split ``fairness.sensitive`` and ``fairness.segments`` into names and, for banded numeric
    attributes, a ``fairness.bands`` mapping (name → edges; present only when some attribute has
    bands) and a ``fairness.blank_groups`` mapping (name → label of the blank cells' group;
    present only when some attribute declares one), so every later stage reads plain names.
    Returns the problems of the lists."""
    bands, blank_groups, problems = {}, {}, []
    for key in ("sensitive", "segments"):
        names = []
        for i, entry in enumerate(fairness[key]):
            name = entry if isinstance(entry, str) else entry["name"]
            if name in names:
                problems.append(f"fairness.{key}.{i}: '{name}' is listed more than once; list each attribute once")
            names.append(name)
            if isinstance(entry, dict) and "blanks" in entry:
                blank_groups[name] = entry["blanks"]
            if isinstance(entry, dict) and "bands" in entry:
                edges = entry["bands"]
                bad = [e for e in edges if not math.isfinite(e)]
                rising = all(a < b for a, b in zip(edges, edges[1:]))
                if bad or not rising:
                    problems.append(
                        f"fairness.{key}.{i}.bands ('{name}'): expected strictly increasing finite numbers, "
                        f"found {quoted(edges)}"
                    )
                bands[name] = [float(e) for e in edges]  # numbers, typed as the schema types them
        fairness[key] = names
    both = sorted(set(fairness["sensitive"]) & set(fairness["segments"]))
    if both:
        problems.append(f"fairness.segments: {quoted(both)} also listed under fairness.sensitive; list each "
                        "attribute under one of them")
    if bands:
        fairness["bands"] = bands
    if blank_groups:
        fairness["blank_groups"] = blank_groups
    return problems


def _describe_schema_error(error) -> str:
    where = ".".join(str(p) for p in error.absolute_path) or "(top level)"
    if error.validator == "additionalProperties":
        allowed = sorted(error.schema.get("properties", {}))
        return f"{where}: {error.message}; allowed keys here: {', '.join(allowed)}"
    if error.validator == "required":
        return f"{where}: {error.message}"
    return f"{where}: expected {error.validator} {quoted(error.validator_value)}, found {quoted(error.instance)}"


def _cross_key_problems(config: dict, project_dir: Path, raw_split: dict) -> list[str]:
    data = config["data"]
    problems = []
    names = [f["name"] for f in config["features"]]
    roles = {data["id_column"]: "id_column", data["target"]: "target"}
    if data["date_column"]:
        roles[data["date_column"]] = "date_column"
    for name in sorted({n for n in names if names.count(n) > 1}):
        problems.append(f"features: '{name}' is listed {names.count(name)} times; list each feature once")
    for name in names:
        if name in roles:
            problems.append(f"features: '{name}' is the {roles[name]}; it cannot also be a model input")
    fairness = config["fairness"]
    for name in fairness["sensitive"]:
        if name in names and not fairness["use_sensitive_as_features"]:
            problems.append(
                f"features: '{name}' is a sensitive attribute (fairness.sensitive); using it as a model input "
                "needs the explicit opt-in fairness.use_sensitive_as_features: true"
            )
    problems += _feature_problems(config, names)
    problems += _candidate_problems(config, names)
    problems += _split_problems(config, raw_split)
    problems += _cost_problems(config["costs"])
    problems += _path_problems(data, project_dir)
    problems += _inference_problems(config)
    problems += _validation_file_problems(config)
    return problems


def _validation_file_problems(config: dict) -> list[str]:
    """Outcome window, extraction date and monitoring limits."""
    import datetime as dt

    data, monitoring, problems = config["data"], config["monitoring"], []
    if data["outcome_window_months"] and not data["date_column"]:
        problems.append("data.outcome_window_months: needs data.date_column (the date each outcome window starts)")
    if data["extraction_date"] is not None:
        try:
            dt.date.fromisoformat(data["extraction_date"])
        except ValueError:
            problems.append(f"data.extraction_date: expected a real ISO date, found '{data['extraction_date']}'")
    if monitoring["psi_warning"] >= monitoring["psi_action"]:
        problems.append(f"monitoring: psi_warning ({monitoring['psi_warning']}) must be below psi_action "
                        f"({monitoring['psi_action']})")
    return problems


def _inference_problems(config: dict) -> list[str]:
    inference, data = config["inference"], config["data"]
    column, how = inference["cluster_column"], inference["standard_errors"]
    if how == "cluster" and not column:
        return ["inference.standard_errors: cluster needs inference.cluster_column, a contract column naming "
                "each row's cluster"]
    if column and how != "cluster":
        return [f"inference.cluster_column: only used by standard_errors: cluster, not '{how}'"]
    if column in (data["id_column"], data["target"]):
        role = "id_column" if column == data["id_column"] else "target"
        return [f"inference.cluster_column: '{column}' is the {role}; clusters group rows by another column "
                "(for one cluster per row use standard_errors: robust)"]
    return []


def _feature_problems(config: dict, names: list[str]) -> list[str]:
    problems = []
    for f in config["features"]:
        if f["type"] == "categorical" and f["transform"] != "none":
            problems.append(f"features.{f['name']}: transform '{f['transform']}' applies to numeric features only")
    for i, pair in enumerate(config["interactions"]):
        for name in pair:
            if name not in names:
                problems.append(f"interactions.{i}: '{name}' is not a declared feature (declared: {', '.join(names)})")
        if pair[0] == pair[1]:
            problems.append(f"interactions.{i}: a feature cannot interact with itself ('{pair[0]}')")
    return problems


def _candidate_problems(config: dict, names: list[str]) -> list[str]:
    problems = []
    seen = [c["name"] for c in config["candidates"]]
    for name in sorted({n for n in seen if seen.count(n) > 1}):
        problems.append(f"candidates: the name '{name}' is used {seen.count(name)} times; names must be unique")
    if "baseline" in seen:
        problems.append("candidates: the name 'baseline' is reserved for the intercept-only model added automatically")
    for c in config["candidates"]:
        for name in c.get("features", []):
            if name not in names:
                problems.append(f"candidates.{c['name']}.features: '{name}' is not a declared feature")
        if c["kind"] in PENALISED_KINDS and "grid" not in c:
            problems.append(f"candidates.{c['name']}: kind '{c['kind']}' needs a 'grid' of penalty values C")
        if c["kind"] not in PENALISED_KINDS and "grid" in c:
            problems.append(f"candidates.{c['name']}: 'grid' applies to l1, l2 and elastic_net only, not '{c['kind']}'")
    return problems


def _split_problems(config: dict, raw_split: dict) -> list[str]:
    split, problems = config["split"], []
    if split["method"] == "out_of_time" and not config["data"]["date_column"]:
        problems.append("split.method: out_of_time needs data.date_column")
    if split["method"] == "grouped" and not split["group_column"]:
        problems.append("split.method: grouped needs split.group_column")
    if split["cutoff_date"] is not None and split["method"] != "out_of_time":
        problems.append(f"split.cutoff_date: only used by method out_of_time, not '{split['method']}'")
    if split["method"] == CV_ONLY:
        problems += _cv_only_problems(config, raw_split)
    return problems


def _cv_only_problems(config: dict, raw_split: dict) -> list[str]:
    """Keys that contradict a split without a test part."""
    problems = []
    if "test_fraction" in raw_split:
        problems.append(f"split.test_fraction: {quoted(raw_split['test_fraction'])} asks for a test part, but "
                        f"split.method {CV_ONLY} keeps none; remove test_fraction or choose another method")
    if config["split"]["group_column"]:
        problems.append(f"split.group_column: {CV_ONLY} makes stratified folds, not grouped ones, so rows of one "
                        "group could straddle folds; use method grouped (with a test part) or remove group_column")
    if config["evaluation"]["refit_all"]:
        problems.append(f"evaluation.refit_all: with split.method {CV_ONLY} the selected candidate is already "
                        "fitted on all rows (its candidates/<name>/model.json is the deliverable); remove refit_all")
    return problems


def _cost_problems(costs: dict) -> list[str]:
    problems = []
    has_pair = "false_positive" in costs or "false_negative" in costs
    if has_pair and "ratio_fn_to_fp" in costs:
        problems.append("costs: give either false_positive and false_negative, or ratio_fn_to_fp, not both")
    elif not has_pair and "ratio_fn_to_fp" not in costs:
        problems.append("costs: missing; give false_positive and false_negative (or ratio_fn_to_fp)")
    elif has_pair and not ("false_positive" in costs and "false_negative" in costs):
        problems.append("costs: give both false_positive and false_negative")
    for key in ("false_positive", "false_negative", "ratio_fn_to_fp"):
        value = costs.get(key)
        if value is not None and (not math.isfinite(value) or value <= 0):
            problems.append(f"costs.{key}: must be a finite number > 0, got {value}")
    for key in ("true_positive", "true_negative"):
        value = costs.get(key)
        if not math.isfinite(value) or value < 0:
            problems.append(f"costs.{key}: must be a finite number >= 0, got {value}")
    for key in ("max_flag_rate", "min_sensitivity"):
        value = costs.get(key)
        if value is not None and not 0 < value <= 1:
            problems.append(f"costs.{key}: must lie in (0, 1], got {value}")
    problem = constrained_problem(costs["adopt"], costs["max_flag_rate"], costs["min_sensitivity"])
    if problem:
        problems.append(f"costs.{problem}")
    return problems


def _path_problems(data: dict, project_dir: Path) -> list[str]:
    problems = []
    root = project_dir.resolve()
    for key in ("path", "contract"):
        target = (project_dir / data[key]).resolve()
        if root not in target.parents and not (key == "path" and data["allow_outside_project"]):
            problems.append(
                f"data.{key}: '{data[key]}' resolves to {target}, outside the project folder {root}; "
                "copy the file into the project"
                + (" or set data.allow_outside_project: true if you mean it" if key == "path" else "")
            )
    return problems


def _add_baseline(config: dict) -> None:
    config["candidates"] = [c for c in config["candidates"]] + [
        {"name": "baseline", "kind": "baseline"} | candidate_defaults()
    ]


def candidate(config: dict, name: str) -> dict:
    """Return the settings of candidate ``name`` (raises ConfigError naming the known ones)."""
    for c in config["candidates"]:
        if c["name"] == name:
            return c
    known = ", ".join(c["name"] for c in config["candidates"])
    raise ConfigError(f"unknown candidate '{name}'; configured: {known}")


def _type_text(spec: dict) -> str:
    kind = spec.get("type", "")
    text = " or ".join(kind) if isinstance(kind, list) else kind
    if "enum" in spec:
        text += ": " + " \\| ".join(f"`{v}`" for v in spec["enum"])
    if spec.get("type") == "array" and isinstance(spec.get("items"), dict) and "type" in spec["items"]:
        text += f" of {_type_text(spec['items'])}"
    return text


def _reference_rows(props: dict, prefix: str, required: list) -> list[str]:
    rows = []
    for name, spec in props.items():
        key = f"{prefix}{name}"
        default = "required" if name in required else (
            f"`{json.dumps(spec['default'])}`" if "default" in spec else "optional")
        rows.append(f"| `{key}` | {_type_text(spec)} | {default} | {spec.get('description', '')} |")
        if spec.get("type") == "object" and "properties" in spec:
            rows += _reference_rows(spec["properties"], key + ".", spec.get("required", []))
        items = spec.get("items", {})
        if spec.get("type") == "array" and isinstance(items, dict) and "properties" in items:
            rows += _reference_rows(items["properties"], key + "[].", items.get("required", []))
    return rows


def schema_reference_markdown() -> str:
    """The key reference table of config/README.md, generated from the JSON Schema."""
    schema = load_schema()
    header = ["| key | type | default | meaning |", "|---|---|---|---|"]
    return "\n".join(header + _reference_rows(schema["properties"], "", schema["required"])) + "\n"
