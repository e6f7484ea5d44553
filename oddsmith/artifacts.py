"""Every file a build writes in its run folder: its path, the rule that writes it, its kind.

A build writes under ``work/<run>/`` and publishes the same names to ``results/<run>/``. The
rules (``artifact(...)`` in ``rules/common.smk``), the card, ``oddsmith score``, diff, verify,
publish and release take their paths from :data:`ARTIFACTS` rather than spelling them out
(stages get theirs from their rule), so the layout is defined once. Each file has exactly one writing rule (``tests/test_artifacts.py``
compares the registry with the rules' outputs, both ways).

Paths are relative to the run folder, POSIX-style; ``{candidate}`` stands for a candidate's
name (one file per candidate). :func:`evaluation_at_cutoff` reads the test evaluation, which
two rules write in two files (evaluate and apply_cutoff), as the one record readers want.

>>> path("candidates/{candidate}/model.json", candidate="lasso")
'candidates/lasso/model.json'
>>> ARTIFACTS["evaluation/cutoff_metrics.json"].rule
'apply_cutoff'
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path, PurePosixPath
from string import Formatter

from oddsmith.errors import ArgumentError, ArtifactError

#: The folder of the jobs' provenance stamps.
STAMP_DIR = "provenance"
#: File kinds by suffix (what a reader of the folder needs to open the file).
KINDS = {".json": "json", ".parquet": "parquet", ".svg": "svg", ".pdf": "pdf", ".html": "html", ".csv": "csv",
         ".yaml": "yaml", ".txt": "text", ".sha256": "sha256sum"}


@dataclass(frozen=True)
class Artifact:
    """One file of a run folder.

    Attributes
    ----------
    path : str
        Relative to the run folder; may hold the ``{candidate}`` wildcard.
    rule : str
        The one Snakemake rule that writes it.
    what : str
        What it holds, in a few words.
    """

    path: str
    rule: str
    what: str

    @property
    def kind(self) -> str:
        """The file's format (json, parquet, svg, pdf, html, csv, yaml, text, sha256sum)."""
        return KINDS[PurePosixPath(self.path).suffix]

    @property
    def is_stamp(self) -> bool:
        """Whether this is a job's provenance stamp (written by :func:`oddsmith.runner.write_stamp`)."""
        return self.path.startswith(f"{STAMP_DIR}/")

    @property
    def wildcards(self) -> tuple[str, ...]:
        """Names of the wildcards in the path (``("candidate",)`` for per-candidate files)."""
        return tuple(name for _, name, _, _ in Formatter().parse(self.path) if name)


_TABLE = (
    # validate
    ("validated/data.parquet", "validate", "typed snapshot of the data, checked against the contract"),
    ("validated/report.json", "validate", "quality profile and contract checks"),
    ("validated/summary.txt", "validate", "the report as text"),
    ("validated/contract.yaml", "validate", "copy of the data contract the snapshot was checked against"),
    ("provenance/validate.json", "validate", "provenance stamp"),
    # split
    ("split/assignment.parquet", "split", "train/test part and fold of every row"),
    ("split/summary.json", "split", "sizes and event rates of the parts and folds"),
    ("provenance/split.json", "split", "provenance stamp"),
    # features
    ("features/recipe.json", "features", "the feature recipe learnt on the training part"),
    ("features/diagnostics.json", "features", "collinearity, separation and leakage screens"),
    ("features/train_design.parquet", "features", "design matrix of the training part"),
    ("provenance/features.json", "features", "provenance stamp"),
    # fit, one job per candidate
    ("candidates/{candidate}/model.json", "fit", "the candidate refitted on the whole training part"),
    ("candidates/{candidate}/cv.json", "fit", "the candidate's fold metrics"),
    ("candidates/{candidate}/oof.parquet", "fit", "the candidate's out-of-fold predictions"),
    ("provenance/fit-{candidate}.json", "fit", "provenance stamp"),
    # compare
    ("comparison/table.json", "compare", "cross-validated comparison of the candidates and paired tests"),
    ("comparison/selected.json", "compare", "the selected candidate and why"),
    ("provenance/compare.json", "compare", "provenance stamp"),
    # challenger (when challenger.enabled): the trees beside the fits, the gap after compare
    ("challenger/folds.json", "challenger_fit", "the flexible challenger's fold metrics and settings"),
    ("challenger/oof.parquet", "challenger_fit", "the challenger's out-of-fold predictions"),
    ("provenance/challenger_fit.json", "challenger_fit", "provenance stamp"),
    ("challenger/cv.json", "challenger_gap", "the flexible challenger's fold metrics and its gap to the selected model"),
    ("provenance/challenger_gap.json", "challenger_gap", "provenance stamp"),
    # threshold
    ("threshold/choice.json", "threshold", "the adopted cut-off from the stated costs (out-of-fold only)"),
    ("threshold/cost_curve.parquet", "threshold", "expected cost per cut-off"),
    ("provenance/threshold.json", "threshold", "provenance stamp"),
    # evaluate: the one look at the test part
    ("evaluation/scores.parquet", "evaluate", "test-part probabilities with the group columns"),
    ("evaluation/probability_metrics.json", "evaluate", "test-part metrics that need no cut-off"),
    ("provenance/evaluate.json", "evaluate", "provenance stamp"),
    # apply_cutoff
    ("evaluation/cutoff_metrics.json", "apply_cutoff", "test-part figures at the adopted cut-off"),
    ("evaluation/subgroups.json", "apply_cutoff", "subgroup metrics and decision figures"),
    ("evaluation/predictions.parquet", "apply_cutoff", "test-part probabilities and decisions"),
    ("provenance/apply_cutoff.json", "apply_cutoff", "provenance stamp"),
    # refit (when evaluation.refit_all is true): the deliverable, fitted again on all rows
    ("final/model.json", "refit", "the selected candidate refitted on all rows (what scoring uses)"),
    ("provenance/refit.json", "refit", "provenance stamp"),
    # model_figures (do not depend on the cut-off)
    ("figures/reliability.svg", "model_figures", "reliability diagram"),
    ("figures/coefficients.svg", "model_figures", "coefficients with intervals"),
    ("provenance/model_figures.json", "model_figures", "provenance stamp"),
    # figures (show the cut-off)
    ("figures/roc.svg", "figures", "ROC curve with the operating point"),
    ("figures/cost_curve.svg", "figures", "expected cost per cut-off"),
    ("figures/score_distribution.svg", "figures", "score distribution by outcome"),
    ("provenance/figures.json", "figures", "provenance stamp"),
    # subgroup_figure (the cut-off's consequences per group, after apply_cutoff)
    ("figures/subgroups.svg", "subgroup_figure", "subgroup flag rates"),
    ("provenance/subgroup_figure.json", "subgroup_figure", "provenance stamp"),
    # score (when scoring.data is set); `oddsmith score` writes the same names into its folder
    ("scoring/scores.parquet", "score", "the later batch's scores and reason codes"),
    ("scoring/scores.csv", "score", "the same scores as CSV"),
    ("scoring/summary.json", "score", "counts, flag rate and the batch's hash"),
    ("scoring/drift.json", "score", "population stability of the batch against the training part"),
    ("scoring/drift.html", "score", "drift page"),
    ("scoring/drift.pdf", "score", "drift page as PDF"),
    ("provenance/score.json", "score", "provenance stamp"),
    # manifest, card
    ("manifest.json", "manifest", "hashes and provenance of every file, configuration, environment"),
    ("card/model_card.html", "card", "the model card"),
    ("card/model_card.pdf", "card", "the model card as PDF"),
    ("card/card.sha256", "card", "hashes binding the card to the manifest"),
)

#: relative path → :class:`Artifact`, in flow order.
ARTIFACTS: dict[str, Artifact] = {p: Artifact(p, rule, what) for p, rule, what in _TABLE}

#: Written by the publish rule beside the run folder (``work/<run>.published``), never published.
PUBLISHED_MARKER = "{run}.published"
#: The rule that writes :data:`PUBLISHED_MARKER`.
PUBLISH_RULE = "publish"

# Names used by several modules.
MANIFEST = "manifest.json"
CARD_HASHES = "card/card.sha256"
SELECTED = "comparison/selected.json"
MODEL = "candidates/{candidate}/model.json"


def template(name: str) -> str:
    """The registered path ``name`` with its wildcards left in (e.g. for a Snakemake rule).

    Raises
    ------
    ArgumentError
        When ``name`` is not a registered artifact (a typo, or a new file not yet added here).
    """
    if name not in ARTIFACTS:
        folder = PurePosixPath(name).parent
        near = [p for p in ARTIFACTS if PurePosixPath(p).parent == folder]
        raise ArgumentError(f"no artifact named {name!r} in oddsmith.artifacts (register a new file there); "
                            f"registered in {folder}/: {', '.join(near) or 'nothing'}")
    return name


def path(name: str, **wildcards: str) -> str:
    """The relative path of artifact ``name`` with its wildcards filled in.

    Raises
    ------
    ArgumentError
        When ``name`` is not registered or a wildcard is missing or unknown.
    """
    artifact = ARTIFACTS[template(name)]
    if set(wildcards) != set(artifact.wildcards):
        raise ArgumentError(f"artifact {name!r} takes the wildcards {list(artifact.wildcards)}, "
                            f"got {sorted(wildcards)}")
    return name.format(**wildcards)


def in_folder(folder, name: str, **wildcards: str) -> Path:
    """Where artifact ``name`` lies in a run folder (``work/<run>`` or ``results/<run>``)."""
    return Path(folder) / path(name, **wildcards)


def written_by(rule: str) -> list[Artifact]:
    """The artifacts ``rule`` writes, in registry order."""
    return [a for a in ARTIFACTS.values() if a.rule == rule]


def outputs_of(rule: str) -> tuple[str, ...]:
    """File names (no folder) of what ``rule`` writes besides its stamp, e.g. the names
    ``oddsmith score`` writes into its own output folder."""
    return tuple(PurePosixPath(a.path).name for a in written_by(rule) if not a.is_stamp)


def figures() -> dict[str, str]:
    """Figure name → relative path of every figure of the card (``figures/<name>.svg``)."""
    return {PurePosixPath(p).stem: p for p in ARTIFACTS if p.startswith("figures/")}


# ---------------------------------------------------------------------------------------------
# reading the test evaluation, written by two rules, as one record

#: The keys of ``evaluation/cutoff_metrics.json`` that join the cut-off-free evaluation.
CUTOFF_KEYS = ("cutoff", "adopted", "confusion", "cost_per_1000", "cutoff_table")


#: The key of the AUC's DeLong interval in ``evaluation/probability_metrics.json``: measured on
#: the test part, or on out-of-fold predictions when the split keeps no test part.
AUC_INTERVAL_KEYS = {False: "auc_test_ci", True: "auc_out_of_fold_ci"}


def auc_interval_key(out_of_fold: bool) -> str:
    """The name under which evaluate stores the AUC interval (see :data:`AUC_INTERVAL_KEYS`)."""
    return AUC_INTERVAL_KEYS[bool(out_of_fold)]


def auc_interval(probability_metrics: dict) -> dict:
    """The AUC's DeLong interval from evaluate's metrics, whichever part it was measured on.

    >>> auc_interval({"auc_out_of_fold_ci": {"lower": 0.6}})
    {'lower': 0.6}
    """
    for key in AUC_INTERVAL_KEYS.values():
        if key in probability_metrics:
            return probability_metrics[key]
    raise ArtifactError("the evaluation holds no AUC interval", [f"expected one of {sorted(AUC_INTERVAL_KEYS.values())}"])


def evaluation_at_cutoff(probability_metrics: dict, cutoff_metrics: dict) -> dict:
    """The test part's evaluation as one record: the cut-off-free metrics (evaluate's
    ``probability_metrics.json``, subgroups left out) joined with the figures at the adopted
    cut-off (apply_cutoff's ``cutoff_metrics.json``); each period row gains its flag rate.

    Raises
    ------
    ArtifactError
        When the two files describe different candidates or periods.
    """
    problems = []
    if probability_metrics.get("candidate") != cutoff_metrics.get("candidate"):
        problems.append(f"probability metrics of {probability_metrics.get('candidate')!r}, cut-off metrics of "
                        f"{cutoff_metrics.get('candidate')!r}")
    periods, rates = probability_metrics.get("periods"), cutoff_metrics.get("period_flag_rates")
    if (periods is None) != (rates is None) or (
            periods is not None and [r["period"] for r in periods] != [r["period"] for r in rates]):
        problems.append("the period rows of the two files differ")
    if problems:
        raise ArtifactError("the test part's cut-off-free and cut-off metrics do not belong together", problems)
    joined = {k: v for k, v in probability_metrics.items() if k != "subgroups"}
    # Readers of the joined record find the interval under one name, whichever part was measured.
    joined["auc_interval"] = auc_interval(probability_metrics)
    joined |= {k: cutoff_metrics[k] for k in CUTOFF_KEYS}
    if periods is not None:
        joined["periods"] = [row | {"flag_rate": rate["flag_rate"]} for row, rate in zip(periods, rates)]
    return joined
