"""The model card's run loader: which artifacts the card reads, where they lie in a run folder,
and reading them (every missing one named at once). It computes nothing statistical."""

from __future__ import annotations

from pathlib import Path

import yaml

from oddsmith import artifacts
from oddsmith.artifacts import evaluation_at_cutoff
from oddsmith.errors import ArtifactError
from oddsmith.io import read_json, sha256_file
from oddsmith.reporting.formats import fmt_count
from oddsmith.reporting.plots import FIGURE_NAMES

#: The card's inputs besides models, figures and the challenger: key → registered artifact.
ARTIFACTS = {
    "manifest": artifacts.MANIFEST,
    "report": "validated/report.json",
    "contract": "validated/contract.yaml",
    "split": "split/summary.json",
    "recipe": "features/recipe.json",
    "diagnostics": "features/diagnostics.json",
    "table": "comparison/table.json",
    "selected": artifacts.SELECTED,
    "choice": "threshold/choice.json",
    "probability_metrics": "evaluation/probability_metrics.json",
    "cutoff_metrics": "evaluation/cutoff_metrics.json",
    "subgroups": "evaluation/subgroups.json",
}
#: The flexible challenger's results, present when the run's config has challenger.enabled.
CHALLENGER_ARTIFACT = "challenger/cv.json"
#: The selected candidate refitted on all rows (evaluation.refit_all): the deliverable.
REFIT_ARTIFACT = "final/model.json"


def folder_inputs(run_dir) -> dict:
    """The card's inputs as they lie in a run folder (``work/<run>`` or ``results/<run>``),
    named by :mod:`oddsmith.artifacts`: for rendering a published folder again (a release)
    outside the workflow, whose card rule passes its declared inputs instead. Only the
    selected candidate's model is named (read from the folder's selection)."""
    run_dir = Path(run_dir)
    if not run_dir.is_dir():
        raise ArtifactError(f"run folder not found: {run_dir}")
    inputs = {key: artifacts.in_folder(run_dir, name) for key, name in ARTIFACTS.items()}
    selected_path = inputs["selected"]
    selected = read_json(selected_path)["candidate"] if selected_path.is_file() else None
    inputs["models"] = {} if selected is None else {
        selected: artifacts.in_folder(run_dir, artifacts.MODEL, candidate=str(selected))}
    inputs["figures"] = {name: run_dir / rel for name, rel in artifacts.figures().items()}
    inputs["challenger"] = artifacts.in_folder(run_dir, CHALLENGER_ARTIFACT)
    inputs["final"] = artifacts.in_folder(run_dir, REFIT_ARTIFACT)
    return inputs


def load_run(inputs: dict) -> dict:
    """Read every artifact the card needs from the paths in ``inputs``.

    ``inputs`` maps each key of :data:`ARTIFACTS` to a path, ``models`` to {candidate: path}
    (at least the selected one), ``figures`` to {name: path} for :data:`FIGURE_NAMES` and
    ``challenger`` to the challenger's cv.json (or None when the rule declares none); see
    :func:`folder_inputs`. The run folder is the manifest's.

    Raises
    ------
    ArtifactError
        Naming every missing or unreadable artifact at once.
    """
    wanted = {key: Path(inputs[key]) for key in ARTIFACTS} | {
        f"figure:{name}": Path(inputs["figures"][name]) for name in FIGURE_NAMES if name in inputs["figures"]}
    missing = [f"missing: {path}" for path in wanted.values() if not path.is_file()]
    missing += [f"missing: figure {name}" for name in FIGURE_NAMES if name not in inputs["figures"]]
    if missing:
        raise ArtifactError("the model card needs artifacts that are missing", missing)
    run = {"dir": wanted["manifest"].parent, "manifest_sha256": sha256_file(wanted["manifest"])}
    for key in ARTIFACTS:
        run[key] = _read_yaml(wanted[key]) if wanted[key].suffix == ".yaml" else read_json(wanted[key])
    run["metrics"] = evaluation_at_cutoff(run.pop("probability_metrics"), run.pop("cutoff_metrics"))
    run["figures"] = {name: wanted[f"figure:{name}"].read_bytes() for name in FIGURE_NAMES}
    selected = run["selected"]["candidate"]
    model_path = inputs["models"].get(selected)
    if model_path is None or not Path(model_path).is_file():
        raise ArtifactError(f"the model card needs the selected model {selected!r}, which is missing: "
                            f"{model_path or 'no path given'}")
    run["model"] = read_json(model_path)
    run["config"] = _manifest_config(run["manifest"], wanted["manifest"])
    run["challenger"] = _load_challenger(inputs.get("challenger"), run["config"])
    run["refit"] = _load_refit(inputs.get("final"), run["config"])
    return run


def _load_refit(path, config: dict) -> dict | None:
    """The refitted model when the run's configuration asked for it, else None."""
    return _load_optional(path, (config.get("evaluation") or {}).get("refit_all"), REFIT_ARTIFACT,
                          "the model refitted on all rows (evaluation.refit_all is true)")


def _load_optional(path, enabled, name: str, what: str) -> dict | None:
    """An optional rule's JSON output: None when the configuration did not enable the rule,
    else the file's content; a missing file is an error naming ``what``."""
    if not enabled:
        return None
    if not path or not Path(path).is_file():
        raise ArtifactError(f"the model card needs {what}, which is missing", [f"missing: {path or name}"])
    return read_json(path)


def deliverable_statement(run: dict) -> dict | None:
    """Which model the card's numbers describe and which one is delivered, when they are not
    simply the selected candidate's fit on the training part evaluated on the test part.

    Returns None for a plain test-part build; else ``{"evaluated", "delivered"}`` sentences.
    """
    name, metrics = run["selected"]["candidate"], run["metrics"]
    oof = metrics.get("out_of_fold")
    if oof:
        return {"evaluated": (f"the fold models of {name}: {oof['folds']}-fold cross-validation on all "
                              f"{fmt_count(metrics['n'])} rows, out-of-fold predictions (no held-out test part)"),
                "delivered": (f"{name} fitted on all {fmt_count(metrics['n'])} rows "
                              f"(candidates/{name}/model.json); scoring uses it")}
    refit = run.get("refit")
    if refit:
        return {"evaluated": (f"{name} fitted on the training part ({fmt_count(run['model'].get('n_obs'))} rows, "
                              f"candidates/{name}/model.json), assessed on the test part"),
                "delivered": (f"{name} refitted on all {fmt_count(refit['refit']['rows'])} rows after the evaluation "
                              f"({REFIT_ARTIFACT}; same kind, options and feature recipe); scoring uses it; its "
                              "performance is not measured separately")}
    return None


def _load_challenger(path, config: dict) -> dict | None:
    """The challenger's cv.json when the run's configuration enabled it, else None."""
    return _load_optional(path, (config.get("challenger") or {}).get("enabled"), CHALLENGER_ARTIFACT,
                          "the challenger's results (challenger.enabled is true)")


def _read_yaml(path: Path):
    try:
        return yaml.safe_load(path.read_text(encoding="utf-8"))
    except (yaml.YAMLError, UnicodeDecodeError) as exc:
        raise ArtifactError(f"artifact {path} is not valid YAML: {exc}") from None


def _manifest_config(manifest: dict, path: Path) -> dict:
    problems = [f"key '{k}' is missing" for k in ("config", "files", "environment", "git") if k not in manifest]
    config = manifest.get("config") or {}
    if "card" not in config:
        problems.append("key 'config.card' is missing")
    if problems:
        raise ArtifactError(f"manifest {path} cannot describe the run", problems)
    return config
