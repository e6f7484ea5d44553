"""Feature recipe: learned on training rows, applied identically to any frame.

:func:`learn_recipe` reads only the rows it is given (the training part) and returns a JSON
document; :func:`apply_recipe` is the one function that turns a frame (a fold, the test part,
new data) into the design matrix. The document is plain data, readable without oddsmith.

Numeric features
    ``transform``: ``none``; ``log`` (values must be > 0); ``log1p`` (values must be > -1);
    ``spline``: a restricted (natural) cubic spline in the truncated-power basis of Harrell,
    *Regression Modeling Strategies* (2nd ed., 2015, section 2.4.5), with knots at the
    training quantiles Harrell recommends for 3 to 7 knots (his Table 2.3, numpy's default
    linear quantiles, without his small-sample rule for fewer than 100 rows). The columns
    are ``x`` and ``x_rcs1`` ... ``x_rcs{k-2}``; each nonlinear term is divided by
    ``(t_k - t_1)**2`` as Harrell does, for numerical conditioning. Beyond the outer knots
    the spline is linear, so new values outside the training range extrapolate linearly.
    ``bins``: training quantile edges (numpy method ``"lower"``, so each edge is an observed
    training value and no bin is empty); the outer bins are open-ended, the lowest bin is
    the reference and every other bin gets a 0/1 column.
Categorical features
    Values are matched by their text form (``str(value)``). Levels with fewer than
    ``min_count`` training rows are pooled into one level named ``"<other>"`` (made unique
    against the data's levels, so a data level literally named ``"other"`` stays a level of
    its own); the recipe lists them in ``merged`` and records ``pooled_level`` and
    ``pooled_rows``. A pool that would itself hold fewer than ``min_count`` training rows
    joins the reference level instead, so pooling never creates a level thinner than the
    stated minimum. The reference level is the configured one or else the most frequent
    training level other than the pool and ``"(missing)"`` (ties: first by sorted label);
    every other kept level gets a 0/1 column ``name=level``.
Missing values
    ``missing: reject`` makes a missing value an error, in training and at apply time.
    ``missing: indicator`` fills numeric values with the training median and adds a 0/1
    column ``name=(missing)``; for categoricals a missing value becomes the level
    ``"(missing)"`` (subject to ``min_count`` like any level), whose dummy is the indicator.
Unseen levels at apply time
    An error, unless the feature has ``missing: indicator`` and rare levels were pooled in
    training, in which case the row is mapped to the pooled level and flagged. A missing
    categorical value with no ``"(missing)"`` level learned is treated the same way.
Interactions
    ``[a, b]`` multiplies every value column of ``a`` by every value column of ``b`` (the
    transformed numeric columns, or the dummies) into columns ``col_a:col_b``. Missing
    indicators do not enter interactions.
Constant columns
    A design column constant on the training rows is left out of the design and listed in
    ``dropped`` with the reason; so is an interaction column built from a dropped column.

The document carries ``digest``, the SHA-256 of the canonical compact JSON of every other
key (``sort_keys``, separators ``(",", ":")``, UTF-8), so :func:`load_recipe` detects a
hand-edited file.
"""

from __future__ import annotations

import hashlib
import json
import os
import tempfile
from pathlib import Path

import numpy as np
import pandas as pd

from oddsmith.errors import RecipeError

FORMAT = "oddsmith-recipe/1"
MISSING_LEVEL = "(missing)"
#: Name of the level pooling rare levels (made unique against the data's own levels).
OTHER_LEVEL = "<other>"
#: The pooled level's name in recipes that do not record ``pooled_level``.
LEGACY_OTHER_LEVEL = "other"
TRANSFORMS = ("none", "log", "log1p", "spline", "bins")
# The training design file's column of cluster labels (inference.cluster_column), after the
# design columns: no design column is called this (they are feature names, 'name=level',
# 'a:b', 'name_rcsj', 'f(name)'), and a cluster column that is also a feature keeps its labels.
CLUSTER_LABELS = "<cluster>"
# Knot quantiles by number of knots: Harrell, Regression Modeling Strategies, 2nd ed. (2015),
# Table 2.3 (values reproduced from memory of that table).
KNOT_QUANTILES = {
    3: (0.10, 0.5, 0.90),
    4: (0.05, 0.35, 0.65, 0.95),
    5: (0.05, 0.275, 0.5, 0.725, 0.95),
    6: (0.05, 0.23, 0.41, 0.59, 0.77, 0.95),
    7: (0.025, 0.1833, 0.3417, 0.5, 0.6583, 0.8167, 0.975),
}
SPLINE_BASIS = (
    "restricted cubic spline, truncated-power basis of Harrell (Regression Modeling Strategies, "
    "2015), nonlinear terms divided by (last knot - first knot)^2"
)
_EXAMPLES = 5


# ---------------------------------------------------------------------------- public API


def learn_recipe(
    train_df: pd.DataFrame, *, features: list, interactions: list, target: str, id_column: str | None = None
) -> dict:
    """Learn the feature recipe from the training rows.

    Parameters
    ----------
    train_df : pandas.DataFrame
        Training rows only; nothing else is read.
    features : list of dict
        Feature declarations (``name``, ``type``, ``transform``, ``knots``, ``bins``,
        ``missing``, ``reference``, ``min_count``).
    interactions : list of [str, str]
        Pairs of feature names.
    target : str
        Outcome column; it may not be a feature.
    id_column : str, optional
        Column whose values name rows in error messages (default: the frame's index).

    Returns
    -------
    dict
        The recipe document (``format`` ``"oddsmith-recipe/1"``, see the module docstring).

    Raises
    ------
    RecipeError
        Listing every problem: unknown columns or features, a bad reference level, missing
        values under ``reject``, log of non-positive values, too few distinct values.
    """
    specs = [_with_defaults(spec) for spec in features]
    pairs = [list(pair) for pair in interactions]
    _raise_if(_spec_problems(specs, pairs, target, train_df), "the feature recipe cannot be learned:")
    ids = _row_ids(train_df, id_column)
    learned, problems = zip(*(_learn_feature(spec, train_df[spec["name"]], ids) for spec in specs))
    _raise_if([p for found in problems for p in found], "the feature recipe cannot be learned:")
    records = list(learned)
    inter_records = [_interaction_record(pair, records) for pair in pairs]
    _raise_if(_duplicate_column_problems(records, inter_records), "the feature recipe cannot be learned:")
    stats = _column_stats(records, inter_records, train_df, ids)
    recipe = _assemble(records, inter_records, stats, target, len(train_df))
    recipe["digest"] = recipe_digest(recipe)
    return recipe


def apply_recipe(
    recipe: dict, df: pd.DataFrame, *, standardise: bool = False, id_column: str | None = None
) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Turn a frame into the design matrix the recipe describes.

    Parameters
    ----------
    recipe : dict
        A document from :func:`learn_recipe` or :func:`load_recipe`.
    df : pandas.DataFrame
        Any frame holding the raw feature columns.
    standardise : bool, default False
        Subtract the training mean and divide by the training SD of every design column.
    id_column : str, optional
        Column whose values name rows in error messages (default: the frame's index).

    Returns
    -------
    X : pandas.DataFrame
        float64 design columns in the recipe's order, same index as ``df``; no intercept.
    flags : pandas.DataFrame
        Booleans, same index: ``<feature>:filled`` (a missing value was filled, features with
        ``missing: indicator``) and ``<feature>:unseen`` (a categorical value unseen in
        training, or missing without a learned ``"(missing)"`` level, was mapped to the
        pooled level).

    Raises
    ------
    RecipeError
        A missing column, a missing value under ``reject``, an unseen level that cannot be
        mapped, a non-numeric or non-finite numeric value, log of a non-positive value.
    """
    if recipe.get("format") != FORMAT:
        raise RecipeError(f"not an oddsmith recipe: format is {recipe.get('format')!r}, expected {FORMAT!r}")
    absent = [r["name"] for r in recipe["features"] if r["name"] not in df.columns]
    _raise_if([f"column {name!r} is missing from the data" for name in absent], "the recipe cannot be applied:")
    ids = _row_ids(df, id_column)
    values, flags, problems = _produce(recipe["features"], recipe["interactions"], df, ids)
    _raise_if(problems, "the recipe cannot be applied:")
    X = pd.DataFrame({c: values[c] for c in recipe["columns"]}, index=df.index, dtype=np.float64)
    if standardise:
        means = np.array([recipe["means"][c] for c in recipe["columns"]], dtype=np.float64)
        sds = np.array([recipe["sds"][c] for c in recipe["columns"]], dtype=np.float64)
        X = (X - means) / sds
    return X, pd.DataFrame(flags, index=df.index, dtype=bool)


def design_columns(recipe: dict, features: list | None = None) -> list[str]:
    """Return the design columns that belong to a subset of the features, in recipe order.

    A feature owns its value columns and its missing indicator; an interaction column
    belongs to the subset when both of its features do. ``None`` means every feature.

    Raises
    ------
    RecipeError
        If a name is not a feature of the recipe.
    """
    if features is None:
        return list(recipe["columns"])
    known = [r["name"] for r in recipe["features"]]
    unknown = [name for name in features if name not in known]
    _raise_if([f"feature {name!r} is not in the recipe (features: {', '.join(known)})" for name in unknown],
              "cannot select design columns:")
    owned = [c for r in recipe["features"] if r["name"] in features for c in r["columns"]]
    owned += [c for r in recipe["interactions"] if all(f in features for f in r["features"]) for c in r["columns"]]
    return [c for c in recipe["columns"] if c in owned]


def dump_recipe(recipe: dict, path) -> None:
    """Write the recipe as canonical JSON (sorted keys, indent 2, UTF-8, trailing newline).

    The recipe is checked first (see :func:`recipe_problems`); nothing is written if it
    fails. The file is written under a temporary name and renamed.
    """
    _raise_if(recipe_problems(recipe), "refusing to write an inconsistent recipe:")
    text = json.dumps(recipe, sort_keys=True, indent=2, ensure_ascii=False, allow_nan=False) + "\n"
    path = Path(path)
    handle, tmp = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.", suffix=".tmp")
    try:
        with os.fdopen(handle, "w", encoding="utf-8", newline="\n") as stream:
            stream.write(text)
        os.replace(tmp, path)
    finally:
        if os.path.exists(tmp):
            os.remove(tmp)


def load_recipe(path) -> dict:
    """Read a recipe and check its digest and internal consistency.

    Raises
    ------
    RecipeError
        If the file is not JSON, its digest does not match its content, or its parts
        disagree (reference not among the levels, column list not what the features
        produce, an SD that is not > 0, ...).
    """
    try:
        recipe = json.loads(Path(path).read_text(encoding="utf-8"))
    except (OSError, ValueError) as exc:
        raise RecipeError(f"cannot read recipe {str(path)!r}: {exc}") from exc
    _raise_if(recipe_problems(recipe), f"recipe {str(path)!r} is inconsistent (edited by hand?):")
    return recipe


def recipe_digest(recipe: dict) -> str:
    """Return the SHA-256 of the canonical compact JSON of the recipe without ``digest``."""
    body = {key: value for key, value in recipe.items() if key != "digest"}
    text = json.dumps(body, sort_keys=True, separators=(",", ":"), ensure_ascii=False, allow_nan=False)
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def recipe_problems(recipe) -> list[str]:
    """Return every inconsistency found in a recipe document (empty when it is sound)."""
    if not isinstance(recipe, dict):
        return [f"a recipe must be a JSON object, got {type(recipe).__name__}"]
    if recipe.get("format") != FORMAT:
        return [f"format is {recipe.get('format')!r}, expected {FORMAT!r}"]
    try:
        problems = _digest_problems(recipe) + _feature_consistency(recipe["features"])
        problems += _column_consistency(recipe)
    except (KeyError, TypeError, ValueError, IndexError, AttributeError) as exc:
        return [f"malformed recipe: {type(exc).__name__}: {exc}"]
    return problems


# ---------------------------------------------------------------------------- declarations


def _with_defaults(spec: dict) -> dict:
    full = {"transform": "none", "knots": 4, "bins": 5, "missing": "reject", "reference": None, "min_count": 20}
    full.update(spec)
    return full


def _spec_problems(specs: list, pairs: list, target: str, df: pd.DataFrame) -> list[str]:
    problems, names = [], [spec.get("name") for spec in specs]
    for name in sorted({n for n in names if names.count(n) > 1}):
        problems.append(f"feature {name!r} is declared more than once")
    for spec in specs:
        problems += _one_spec_problems(spec, target, df)
    for pair in pairs:
        unknown = [name for name in pair if name not in names]
        if unknown:
            problems.append(f"interaction {pair} names unknown feature(s) {', '.join(map(repr, unknown))}")
        elif len(pair) != 2 or pair[0] == pair[1]:
            problems.append(f"interaction {pair} must name two different features")
    keys = [tuple(sorted(pair)) for pair in pairs]
    for key in sorted({k for k in keys if keys.count(k) > 1}):
        problems.append(f"interaction {list(key)} is declared more than once")
    if len(df) == 0:
        problems.append("the training frame has no rows")
    return problems


def _one_spec_problems(spec: dict, target: str, df: pd.DataFrame) -> list[str]:
    name, problems = spec.get("name"), []
    if name == target:
        problems.append(f"feature {name!r} is the target: the outcome cannot be a model input")
    if name not in df.columns:
        problems.append(f"feature {name!r} is not a column of the training data")
    if spec.get("type") not in ("numeric", "categorical"):
        problems.append(f"feature {name!r}: type must be numeric or categorical, got {spec.get('type')!r}")
    if spec["transform"] not in TRANSFORMS:
        problems.append(f"feature {name!r}: transform must be one of {', '.join(TRANSFORMS)}, got {spec['transform']!r}")
    elif spec.get("type") == "categorical" and spec["transform"] != "none":
        problems.append(f"feature {name!r}: transform {spec['transform']!r} applies to numeric features only")
    if spec["transform"] == "spline" and spec["knots"] not in KNOT_QUANTILES:
        problems.append(f"feature {name!r}: knots must be 3 to 7, got {spec['knots']!r}")
    if spec["transform"] == "bins" and (not isinstance(spec["bins"], int) or spec["bins"] < 2):
        problems.append(f"feature {name!r}: bins must be an integer >= 2, got {spec['bins']!r}")
    if spec["missing"] not in ("reject", "indicator"):
        problems.append(f"feature {name!r}: missing must be reject or indicator, got {spec['missing']!r}")
    return problems


# ---------------------------------------------------------------------------- learning


def _learn_feature(spec: dict, values: pd.Series, ids: pd.Series) -> tuple[dict, list[str]]:
    if spec["type"] == "numeric":
        record, problems = _learn_numeric(spec, values, ids)
    else:
        record, problems = _learn_categorical(spec, values, ids)
    if not problems:
        record["columns"] = _feature_columns(record)
    return record, problems


def _learn_numeric(spec: dict, values: pd.Series, ids: pd.Series) -> tuple[dict, list[str]]:
    name = spec["name"]
    record = {"name": name, "type": "numeric", "transform": spec["transform"], "missing": spec["missing"]}
    x, problems = _numeric_values(name, values, ids)
    missing = np.isnan(x)
    record["training_missing"] = int(missing.sum())
    if missing.all() and not problems:
        problems.append(f"feature {name!r} has no non-missing training values")
    if problems:
        return record, problems
    if missing.any() and spec["missing"] == "reject":
        problems.append(_missing_message(name, missing, ids))
    observed = x[~missing]
    record["fill_value"] = float(np.median(observed)) if spec["missing"] == "indicator" else None
    parameters, found = _transform_parameters(spec, observed)
    record["parameters"] = parameters
    return record, problems + found


def _transform_parameters(spec: dict, observed: np.ndarray) -> tuple[dict, list[str]]:
    name, transform = spec["name"], spec["transform"]
    if transform == "spline":
        quantiles = KNOT_QUANTILES[spec["knots"]]
        knots = [float(v) for v in np.quantile(observed, quantiles)]
        if np.any(np.diff(knots) <= 0):
            return {}, [
                f"feature {name!r}: {spec['knots']} spline knots at training quantiles are not distinct "
                f"({', '.join(f'{k:g}' for k in knots)}); use fewer knots or bins"
            ]
        return {"basis": SPLINE_BASIS, "knot_quantiles": list(quantiles), "knots": knots}, []
    if transform == "bins":
        edges = np.quantile(observed, np.linspace(0, 1, spec["bins"] + 1), method="lower")
        inner = [float(e) for e in np.unique(edges[1:-1]) if e > observed.min()]
        if not inner:
            return {}, [f"feature {name!r}: all training values are equal ({observed.min():g}); no bins can be made"]
        return {"bins_requested": spec["bins"], "edges": inner, "labels": _bin_labels(inner)}, []
    return {}, []


def _bin_labels(edges: list[float]) -> list[str]:
    for digits in (6, 17):
        text = [format(e, f".{digits}g") for e in edges]
        if len(set(text)) == len(text):
            break
    bounds = ["-inf"] + text + ["inf"]
    return [f"{'(' if i == 0 else '['}{bounds[i]}, {bounds[i + 1]})" for i in range(len(bounds) - 1)]


def _learn_categorical(spec: dict, values: pd.Series, ids: pd.Series) -> tuple[dict, list[str]]:
    name, problems = spec["name"], []
    text, missing = _as_text(values)
    if missing.any() and spec["missing"] == "reject":
        problems.append(_missing_message(name, missing, ids))
    text[missing] = MISSING_LEVEL
    labels, counts = np.unique(text.astype(str), return_counts=True)
    count_of = dict(zip(labels.tolist(), counts.tolist()))
    rare = [lv for lv in labels.tolist() if count_of[lv] < spec["min_count"]]
    kept = [lv for lv in labels.tolist() if lv not in rare]
    pooled_rows = sum(count_of[lv] for lv in rare)
    # The pool gets a level of its own only when it holds min_count training rows (or nothing
    # else is left); otherwise its rows join the reference level, so no level is thinner than
    # the stated minimum.
    own_level = bool(rare) and (pooled_rows >= spec["min_count"] or not kept)
    pool = pool_level_name(labels.tolist()) if own_level else None
    if pool is not None:
        count_of[pool] = pooled_rows
    reference, found = _reference_level(spec, kept + ([pool] if pool else []), rare, count_of, pool=pool)
    if pool is not None:
        kept.append(pool)
    record = {
        "name": name, "type": "categorical", "missing": spec["missing"], "min_count": spec["min_count"],
        "levels": kept, "reference": reference, "merged": rare,
        "level_counts": {lv: int(count_of[lv]) for lv in kept},
        "training_missing": int(missing.sum()),
    }
    if rare and reference is not None:
        record["pooled_level"] = pool or reference
        record["pooled_rows"] = int(pooled_rows)
        if pool is None:
            record["level_counts"][reference] += int(pooled_rows)
    return record, problems + found


def pool_level_name(levels: list[str]) -> str:
    """Name of the level that pools rare levels: ``"<other>"``, made unique against ``levels``.

    Angle brackets keep it apart from ordinary data labels; should the data hold that label
    too, a number is added (``"<other 2>"``, ...).

    Examples
    --------
    >>> pool_level_name(["a", "other"]), pool_level_name(["<other>", "b"])
    ('<other>', '<other 2>')
    """
    taken, name, k = set(levels), OTHER_LEVEL, 1
    while name in taken:
        k += 1
        name = f"<other {k}>"
    return name


def pooled_level(record: dict) -> str | None:
    """The level rare training levels were mapped to (None when nothing was pooled).

    Recipes written before ``pooled_level`` was recorded pooled into ``"other"``.
    """
    if not record.get("merged"):
        return None
    return record.get("pooled_level", LEGACY_OTHER_LEVEL)


def _reference_level(spec: dict, kept: list, rare: list, count_of: dict, *, pool: str | None) -> tuple[str | None, list[str]]:
    name, wanted = spec["name"], spec["reference"]
    if wanted is not None:
        wanted = str(wanted)
        if wanted in kept and wanted != pool:
            return wanted, []
        if wanted in rare:
            return None, [
                f"feature {name!r}: reference level {wanted!r} has {count_of[wanted]} training rows, fewer than "
                f"min_count {spec['min_count']}, and was pooled with the other rare levels"
            ]
        shown = ", ".join(map(repr, [lv for lv in kept if lv != pool][:10]))
        return None, [f"feature {name!r}: reference level {wanted!r} is not present in the training rows (levels: {shown})"]
    ordinary = [lv for lv in kept if lv not in (pool, MISSING_LEVEL)] or kept
    most = max(count_of[lv] for lv in ordinary)
    return next(lv for lv in ordinary if count_of[lv] == most), []


def _interaction_record(pair: list, records: list) -> dict:
    by_name = {r["name"]: r for r in records}
    first, second = (_value_columns(by_name[name]) for name in pair)
    return {"features": list(pair), "columns": [f"{a}:{b}" for a in first for b in second]}


def _duplicate_column_problems(records: list, inter_records: list) -> list[str]:
    names = [c for r in records for c in r["columns"]] + [c for r in inter_records for c in r["columns"]]
    repeated = sorted({c for c in names if names.count(c) > 1})
    return [f"design column name {c!r} would be produced twice; rename a feature" for c in repeated]


# Rows per piece when the produced columns are summarised while learning: memory stays at
# one piece of the design, whatever the number of training rows.
_STATS_CHUNK_ROWS = 131_072


def _column_stats(records: list, inter_records: list, df: pd.DataFrame, ids: pd.Series) -> dict:
    """Minimum, maximum, mean and population SD of every produced column over all rows.

    The columns are produced piece by piece and the pieces' means and sums of squared
    deviations are combined exactly (Chan et al.'s pairwise update), so the whole design is
    never held here. If any piece has a problem, the whole frame is produced once more so the
    error lists every problem with its counts and examples.
    """
    stats = {}
    for start in range(0, max(len(df), 1), _STATS_CHUNK_ROWS):
        piece = df.iloc[start:start + _STATS_CHUNK_ROWS]
        values, _, problems = _produce(records, inter_records, piece, ids.iloc[start:start + _STATS_CHUNK_ROWS])
        if problems:
            problems = _produce(records, inter_records, df, ids)[2]
            _raise_if(problems, "the feature recipe cannot be learned from these training rows:")
        for column, v in values.items():
            v = np.asarray(v, dtype=np.float64)
            if v.size == 0:
                continue
            n, mean = v.size, float(np.mean(v))
            m2 = float(np.sum((v - mean) ** 2))
            low, high, first = float(v.min()), float(v.max()), float(v[0])
            if column not in stats:
                stats[column] = {"n": n, "mean": mean, "m2": m2, "min": low, "max": high, "first": first}
                continue
            old = stats[column]
            total = old["n"] + n
            delta = mean - old["mean"]
            old["m2"] += m2 + delta * delta * old["n"] * n / total
            old["mean"] += delta * n / total
            old["n"], old["min"], old["max"] = total, min(old["min"], low), max(old["max"], high)
    return stats


def _assemble(records: list, inter_records: list, stats: dict, target: str, n_rows: int) -> dict:
    produced = [c for r in records for c in r["columns"]] + [c for r in inter_records for c in r["columns"]]
    dropped = _constant_columns(produced, stats)
    dropped += _interactions_of_dropped(records, inter_records, {d["column"] for d in dropped})
    gone = {d["column"] for d in dropped}
    dropped += _single_level_notes(records)
    columns = [c for c in produced if c not in gone]
    return {
        "format": FORMAT,
        "target": target,
        "n_training_rows": int(n_rows),
        "features": records,
        "interactions": inter_records,
        "columns": columns,
        "dropped": dropped,
        "means": {c: stats[c]["mean"] for c in columns},
        "sds": {c: float(np.sqrt(stats[c]["m2"] / stats[c]["n"])) for c in columns},
        "standardisation": "mean and population SD (ddof=0) of each design column over the training rows",
    }


def _constant_columns(produced: list, stats: dict) -> list[dict]:
    dropped = []
    for column in produced:
        if stats[column]["max"] == stats[column]["min"]:
            dropped.append({"column": column,
                            "reason": f"constant on the training rows (every value {stats[column]['first']:g})"})
    return dropped


def _single_level_notes(records: list) -> list[dict]:
    notes = []
    for r in records:
        if r["type"] == "categorical" and len(r["levels"]) < 2:
            notes.append({"feature": r["name"], "reason": f"categorical with the single training level {r['levels'][0]!r}: no design column"})
    return notes


def _interactions_of_dropped(records: list, inter_records: list, gone: set) -> list[dict]:
    dropped = []
    for record in inter_records:
        first, second = (_value_columns(_record_named(records, name)) for name in record["features"])
        for a in first:
            for b in second:
                component = a if a in gone else b if b in gone else None
                if component is not None and f"{a}:{b}" not in gone:
                    dropped.append({"column": f"{a}:{b}", "reason": f"built from the dropped column {component!r}"})
    return dropped


# ---------------------------------------------------------------------------- column names


def _value_columns(record: dict) -> list[str]:
    name = record["name"]
    if record["type"] == "categorical":
        return [f"{name}={lv}" for lv in record["levels"] if lv != record["reference"]]
    transform, parameters = record["transform"], record["parameters"]
    if transform in ("log", "log1p"):
        return [f"{transform}({name})"]
    if transform == "spline":
        return [name] + [f"{name}_rcs{j}" for j in range(1, len(parameters["knots"]) - 1)]
    if transform == "bins":
        return [f"{name}={label}" for label in parameters["labels"][1:]]
    return [name]


def _feature_columns(record: dict) -> list[str]:
    columns = _value_columns(record)
    if record["type"] == "numeric" and record["missing"] == "indicator":
        columns.append(f"{record['name']}={MISSING_LEVEL}")
    return columns


# ---------------------------------------------------------------------------- production


def _produce(records: list, inter_records: list, df: pd.DataFrame, ids: pd.Series):
    """Compute every produced (pre-drop) column; return (values, flags, problems)."""
    values, flags, problems = {}, {}, []
    for record in records:
        produce = _produce_numeric if record["type"] == "numeric" else _produce_categorical
        columns, feature_flags, found = produce(record, df[record["name"]], ids)
        values.update(columns)
        flags.update(feature_flags)
        problems += found
    if problems:
        return values, flags, problems
    for record in inter_records:
        first, second = (_value_columns(_record_named(records, name)) for name in record["features"])
        for a in first:
            for b in second:
                values[f"{a}:{b}"] = values[a] * values[b]
    return values, flags, problems


def _record_named(records: list, name: str) -> dict:
    return next(r for r in records if r["name"] == name)


def _produce_numeric(record: dict, values: pd.Series, ids: pd.Series):
    name = record["name"]
    x, problems = _numeric_values(name, values, ids)
    if problems:
        return {}, {}, problems
    missing = np.isnan(x)
    flags = {f"{name}:filled": missing} if record["missing"] == "indicator" else {}
    if missing.any() and record["missing"] == "reject":
        return {}, flags, [_missing_message(name, missing, ids)]
    x = np.where(missing, record["fill_value"] if record["fill_value"] is not None else np.nan, x)
    transformed, problems = _transform(record, x, ids, missing)
    if problems:
        return {}, flags, problems
    columns = dict(zip(_value_columns(record), transformed))
    if record["missing"] == "indicator":
        columns[f"{name}={MISSING_LEVEL}"] = missing.astype(np.float64)
    return columns, flags, []


def _transform(record: dict, x: np.ndarray, ids: pd.Series, missing: np.ndarray):
    name, transform, parameters = record["name"], record["transform"], record["parameters"]
    if transform in ("log", "log1p"):
        floor = 0.0 if transform == "log" else -1.0
        bad = x <= floor
        if bad.any():
            shown = ", ".join(f"{v:g}" for v in x[bad][:_EXAMPLES])
            where = " (filled missing values included)" if (bad & missing).any() else ""
            return [], [
                f"feature {name!r}: {transform} needs values > {floor:g}; {int(bad.sum())} rows{where} have "
                f"{shown}, e.g. ids {_examples(ids, bad)}"
            ]
        return [np.log(x) if transform == "log" else np.log1p(x)], []
    if transform == "spline":
        return _spline_basis(x, parameters["knots"]), []
    if transform == "bins":
        which = np.searchsorted(np.asarray(parameters["edges"]), x, side="right")
        return [(which == j).astype(np.float64) for j in range(1, len(parameters["labels"]))], []
    return [x], []


def _spline_basis(x: np.ndarray, knots: list) -> list[np.ndarray]:
    """Harrell's restricted cubic spline basis: x and k - 2 nonlinear terms."""
    t = np.asarray(knots, dtype=np.float64)
    scale = (t[-1] - t[0]) ** 2
    span = t[-1] - t[-2]
    tail_low = np.maximum(x - t[-2], 0.0) ** 3
    tail_high = np.maximum(x - t[-1], 0.0) ** 3
    terms = [x]
    for t_j in t[:-2]:
        term = np.maximum(x - t_j, 0.0) ** 3 - tail_low * (t[-1] - t_j) / span + tail_high * (t[-2] - t_j) / span
        terms.append(term / scale)
    return terms


def _produce_categorical(record: dict, values: pd.Series, ids: pd.Series):
    name = record["name"]
    mapped, unseen, missing, problems = _map_levels(record, values, ids)
    flags = {}
    if record["missing"] == "indicator":
        flags = {f"{name}:filled": missing, f"{name}:unseen": unseen}
    if problems:
        return {}, flags, problems
    columns = {f"{name}={lv}": (mapped == lv).astype(np.float64) for lv in record["levels"] if lv != record["reference"]}
    return columns, flags, []


def _map_levels(record: dict, values: pd.Series, ids: pd.Series):
    """Map raw values to learned levels; return (mapped, unseen, missing, problems)."""
    name, levels = record["name"], record["levels"]
    text, missing = _as_text(values)
    lookup = {lv: lv for lv in levels}
    pool = pooled_level(record)
    lookup.update({lv: pool for lv in record["merged"]})
    if missing.any() and record["missing"] == "reject":
        return text, np.zeros(len(text), bool), missing, [_missing_message(name, missing, ids)]
    text[missing] = MISSING_LEVEL
    mapped = np.array([lookup.get(v) for v in text.tolist()], dtype=object)
    unseen = np.array([m is None for m in mapped.tolist()], dtype=bool)
    if unseen.any() and record["missing"] == "indicator" and pool is not None:
        mapped[unseen] = pool
    elif unseen.any():
        return mapped, unseen, missing, [_unseen_message(record, text, unseen, ids)]
    return mapped, unseen, missing, []


def _unseen_message(record: dict, text: np.ndarray, unseen: np.ndarray, ids: pd.Series) -> str:
    found = sorted(set(text[unseen].tolist()))
    shown = ", ".join(map(repr, found[:_EXAMPLES])) + (", ..." if len(found) > _EXAMPLES else "")
    why = (
        "the feature has missing: reject" if record["missing"] == "reject"
        else "no rare levels were pooled in training, so there is no pooled level to map it to"
    )
    return (
        f"feature {record['name']!r}: {len(found)} level(s) unseen in training ({shown}) in "
        f"{int(unseen.sum())} rows, e.g. ids {_examples(ids, unseen)}; {why}"
    )


# ---------------------------------------------------------------------------- values and messages


def _numeric_values(name: str, values: pd.Series, ids: pd.Series) -> tuple[np.ndarray, list[str]]:
    if not (pd.api.types.is_numeric_dtype(values) or pd.api.types.is_bool_dtype(values)):
        return np.array([]), [f"feature {name!r} is numeric but the column has dtype {values.dtype}"]
    x = values.to_numpy(dtype=np.float64, na_value=np.nan)
    infinite = np.isinf(x)
    if infinite.any():
        return x, [f"feature {name!r} has {int(infinite.sum())} infinite values, e.g. ids {_examples(ids, infinite)}"]
    return x, []


def _as_text(values: pd.Series) -> tuple[np.ndarray, np.ndarray]:
    missing = values.isna().to_numpy()
    text = np.array([None if m else str(v) for v, m in zip(values.tolist(), missing)], dtype=object)
    return text, missing


def _row_ids(df: pd.DataFrame, id_column: str | None) -> pd.Series:
    if id_column is not None and id_column in df.columns:
        return df[id_column].reset_index(drop=True)
    return pd.Series(df.index, dtype=object)


def _missing_message(name: str, missing: np.ndarray, ids: pd.Series) -> str:
    return (
        f"feature {name!r} has {int(missing.sum())} missing values and missing: reject, "
        f"e.g. ids {_examples(ids, missing)}"
    )


def _examples(ids: pd.Series, mask: np.ndarray) -> str:
    return ", ".join(repr(v) for v in ids[np.asarray(mask)].head(_EXAMPLES).tolist())


def _raise_if(problems: list[str], message: str) -> None:
    if problems:
        raise RecipeError(message, problems)


# ---------------------------------------------------------------------------- consistency


def _digest_problems(recipe: dict) -> list[str]:
    stored, actual = recipe.get("digest"), recipe_digest(recipe)
    if stored != actual:
        return [f"digest {stored!r} does not match the content (sha256 {actual})"]
    return []


def _feature_consistency(records: list) -> list[str]:
    problems = []
    for r in records:
        name = r["name"]
        if r["type"] == "categorical":
            problems += _categorical_consistency(r)
        elif r["transform"] == "spline" and (
            len(r["parameters"]["knots"]) not in KNOT_QUANTILES or np.any(np.diff(r["parameters"]["knots"]) <= 0)
        ):
            problems.append(f"feature {name!r}: spline knots must be 3 to 7 increasing values")
        elif r["transform"] == "bins" and (
            np.any(np.diff(r["parameters"]["edges"]) <= 0) or len(r["parameters"]["labels"]) != len(r["parameters"]["edges"]) + 1
        ):
            problems.append(f"feature {name!r}: bin edges must increase and match the labels")
        if r["columns"] != _feature_columns(r):
            problems.append(f"feature {name!r}: stored columns {r['columns']} differ from what it produces {_feature_columns(r)}")
    return problems


def _categorical_consistency(r: dict) -> list[str]:
    problems, name = [], r["name"]
    if len(r["levels"]) != len(set(r["levels"])):
        problems.append(f"feature {name!r}: levels repeat")
    if r["reference"] not in r["levels"]:
        problems.append(f"feature {name!r}: reference level {r['reference']!r} is not among its levels {r['levels']}")
    pool = pooled_level(r)
    if set(r["merged"]) & set(r["levels"]):
        problems.append(f"feature {name!r}: a level is both kept and pooled")
    if pool is not None and pool not in r["levels"]:
        problems.append(f"feature {name!r}: levels were pooled into {pool!r}, which is not among its levels")
    return problems


def _column_consistency(recipe: dict) -> list[str]:
    problems = []
    records, inter_records = recipe["features"], recipe["interactions"]
    for record in inter_records:
        expected = _interaction_record(record["features"], records)["columns"]
        if record["columns"] != expected:
            problems.append(f"interaction {record['features']}: columns {record['columns']} differ from {expected}")
    produced = [c for r in records for c in r["columns"]] + [c for r in inter_records for c in r["columns"]]
    gone = {d["column"] for d in recipe["dropped"] if "column" in d}
    expected = [c for c in produced if c not in gone]
    if recipe["columns"] != expected:
        problems.append(f"column list {recipe['columns']} differs from what the features produce {expected}")
    for key in ("means", "sds"):
        if sorted(recipe[key]) != sorted(recipe["columns"]):
            problems.append(f"{key} do not cover exactly the design columns")
    bad_sd = [c for c, sd in recipe["sds"].items() if not (isinstance(sd, (int, float)) and np.isfinite(sd) and sd > 0)]
    problems += [f"SD of column {c!r} must be a finite number > 0, got {recipe['sds'][c]!r}" for c in sorted(bad_sd)]
    return problems
