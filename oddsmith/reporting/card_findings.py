"""What the model card says about a run beyond its numbers: each stored value checked against
a stated rule (rules of thumb and published thresholds, each named with its source), as the
findings of the card's caveats section, and the sentences on the flexible challenger's gap."""

from __future__ import annotations

from oddsmith.reporting.formats import clip, fmt_count, fmt_fixed, fmt_hash, fmt_p, fmt_pct
from oddsmith.reporting.plots import cost_unit

#: Calibration slope band treated as acceptable: common practice, not a statistical test.
CALIBRATION_SLOPE_BAND = (0.8, 1.2)
#: Events per estimated parameter below this draw a caveat (Peduzzi et al. 1996).
MIN_EVENTS_PER_PARAMETER = 10
#: Significance level for the Hosmer–Lemeshow caveat (common practice).
HL_ALPHA = 0.05


def code_state(git: dict) -> str:
    """The state of the code in plain words, from the manifest's ``git`` record."""
    commit = (git or {}).get("commit")
    if not commit:
        return "The code was not built from a git checkout: no commit identifies it."
    if git.get("dirty"):
        return (f"The code had uncommitted changes when this run was built (last commit {fmt_hash(commit)}); "
                "that commit alone does not reproduce these results.")
    return f"The code was committed, with no uncommitted changes: commit {fmt_hash(commit)}."


def _finding(status: str, check: str, basis: str, found: str, advice: str = "") -> dict:
    return {"status": status, "check": check, "basis": basis, "found": found, "advice": advice}


def findings(run: dict) -> list[dict]:
    """Checks of stored values against stated rules, in the order printed on the card.

    Each is ``{"status": "attention" | "note" | "ok", "check", "basis", "found", "advice"}``.
    """
    out = [_epv_finding(run), _test_size_finding(run), *_maturity_findings(run), *_calibration_findings(run), _subgroup_finding(run),
           *_group_size_findings(run), *_few_cases_findings(run), _failed_finding(run), _challenger_finding(run), _leak_finding(run), _vif_finding(run),
           _drift_finding(run), *_decision_findings(run)]
    diag = run["diagnostics"]
    if diag["correlations"]["pairs"]:
        pairs = "; ".join(f"{clip(p['a'])} and {clip(p['b'])} (r = {fmt_fixed(p['r'])})"
                          for p in diag["correlations"]["pairs"])
        out.append(_finding("note", "Strongly correlated design columns",
                            f"|r| above {fmt_fixed(diag['correlations']['threshold'], 2)}", pairs,
                            "Expected between a main effect and its interaction; otherwise read the two "
                            "coefficients together, not one by one."))
    warnings = [*run["report"].get("warnings", []), *run["split"].get("warnings", []),
                *run["model"].get("warnings", []), *run["metrics"]["overall"].get("notes", [])]
    if warnings:
        out.append(_finding("note", "Warnings recorded by the stages", "artifact warnings",
                            "; ".join(clip(w, 300) for w in warnings), "Read each warning in its artifact."))
    git = run["manifest"].get("git") or {}
    if git.get("dirty") or not git.get("commit"):
        out.append(_finding("attention", "Code state", "manifest git record", code_state(git),
                            "Commit the code and rebuild before this card is used for a decision."))
    return out


def _where(run) -> str:
    """Where the evaluation's figures come from, for the findings' labels."""
    return "out-of-fold" if run["metrics"].get("out_of_fold") else "test"


def _epv_finding(run):
    diag = run["diagnostics"]
    epv = diag["events_per_parameter"]
    found = f"{fmt_fixed(epv, 1)} ({fmt_count(diag['events'])} events, {fmt_count(diag['n_parameters'])} parameters)"
    if epv is not None and epv < MIN_EVENTS_PER_PARAMETER:
        return _finding("attention", "Events per parameter (training)", f"at least {MIN_EVENTS_PER_PARAMETER}",
                        found, "Too few events for the number of parameters: estimates may be unstable and "
                        "optimistic. Reduce the parameters or collect more events.")
    return _finding("ok", "Events per parameter (training)", f"at least {MIN_EVENTS_PER_PARAMETER}", found)


def _maturity_findings(run):
    maturity = run["metrics"].get("outcome_maturity")
    if not maturity:
        return []
    basis = (f"test applications dated on or before {maturity['matured_through']}: the extraction date "
             f"{maturity['extraction_date']} ({maturity['extraction_date_source']}) minus the "
             f"{maturity['window_months']}-month outcome window")
    test, train, where = maturity["parts"]["test"], maturity["parts"]["train"], _where(run)
    check = f"Outcome window ({where})"
    rows = "test rows" if where == "test" else "rows (all evaluated out-of-fold)"
    if maturity["test_matured"]:
        return [_finding("ok", check, basis, f"all {fmt_count(test['rows'])} {rows} matured")]
    found = (f"outcomes of applications after {maturity['matured_through']} may not have matured: "
             f"{fmt_count(test['immature_rows'])} of {fmt_count(test['rows'])} {rows}"
             + (f" (and {fmt_count(train['immature_rows'])} training rows)" if train["immature_rows"] else ""))
    return [_finding("attention", check, basis, found,
                     "Some outcomes were still open at extraction: the event rate, the measured performance and the "
                     "cut-off may be understated for those rows. Re-evaluate once every window has closed.")]


def _calibration_findings(run):
    overall = run["metrics"]["overall"]
    low, high = CALIBRATION_SLOPE_BAND
    slope = overall["calibration_slope"]
    band = f"within [{fmt_fixed(low, 1)}, {fmt_fixed(high, 1)}]"
    slope_check, hl_check = f"Calibration slope ({_where(run)})", f"Hosmer–Lemeshow goodness of fit ({_where(run)})"
    if slope is None or not low <= slope <= high:
        slope_f = _finding("attention", slope_check, band, fmt_fixed(slope),
                           "Predicted risks are too spread out (slope below the band) or too compressed "
                           "(above it) on new data. Recalibrate on recent data before using the probabilities.")
    else:
        slope_f = _finding("ok", slope_check, band, fmt_fixed(slope))
    hl = run["metrics"]["hosmer_lemeshow"]
    found = f"C = {fmt_fixed(hl['statistic'], 2)}, df = {hl['df']}, p = {fmt_p(hl['p_value'])}"
    sample = hl.get("sample_check")  # absent from runs evaluated before the check existed
    if sample is not None and not sample["adequate"]:
        hl_f = _finding("note", hl_check, sample["rule"],
                        f"no p-value stated: {sample['below_1']} of {sample['cells']} expected counts below 1, "
                        f"{sample['below_5']} below 5",
                        "Too few cases per risk group for the test's p-value to mean anything; read the reliability "
                        "table and the calibration slope instead, or evaluate on more data.")
    elif hl["p_value"] is not None and hl["p_value"] < HL_ALPHA:
        hl_f = _finding("attention", hl_check, f"p at least {HL_ALPHA}", found,
                        "Observed and predicted rates differ across risk deciles; inspect the reliability table.")
    else:
        hl_f = _finding("ok", hl_check, f"p at least {HL_ALPHA}", found)
    return [slope_f, hl_f]


#: Events and non-events in the test part below which its estimates are imprecise: Collins,
#: Ogundimu & Altman, Statistics in Medicine 35 (2016) suggest at least 100 of each for a
#: validation (from memory).
MIN_TEST_EVENTS = 100


def _test_size_finding(run):
    metrics = run["metrics"]
    if metrics.get("out_of_fold"):
        return _out_of_fold_size_finding(metrics)
    events, non_events = metrics["events"], metrics["n"] - metrics["events"]
    basis = (f"at least {MIN_TEST_EVENTS} events and {MIN_TEST_EVENTS} non-events (Collins, Ogundimu & Altman 2016; "
             "from memory)")
    found = f"{fmt_count(events)} events, {fmt_count(non_events)} non-events in {fmt_count(metrics['n'])} test cases"
    if min(events, non_events) < MIN_TEST_EVENTS:
        return _finding("attention", "Size of the test part", basis, found,
                        "Too few test events for precise estimates: the intervals are wide, the calibration measures "
                        "unstable and small differences meaningless. Evaluate on more data, or by repeated "
                        "cross-validation when no more data exist.")
    return _finding("ok", "Size of the test part", basis, found)


def _out_of_fold_size_finding(metrics):
    events, non_events = metrics["events"], metrics["n"] - metrics["events"]
    basis = (f"at least {MIN_TEST_EVENTS} events and {MIN_TEST_EVENTS} non-events (Collins, Ogundimu & Altman 2016; "
             "from memory)")
    found = (f"no held-out test part; {fmt_count(events)} events, {fmt_count(non_events)} non-events, every row "
             f"evaluated out-of-fold")
    return _finding("attention" if min(events, non_events) < MIN_TEST_EVENTS else "note",
                    "Evaluation without a test part", basis, found,
                    "Every figure is out-of-fold on all rows and the cut-off was chosen and assessed on the same "
                    "predictions (optimistic). Confirm on new data before relying on the cut-off.")


#: Fewest events (or non-events) behind a rate or an interval below which the card says it
#: rests on few cases: the same count of 5 as the Hosmer–Lemeshow expected-count rule
#: (common practice).
MIN_CLASS_COUNT = 5


def _few_cases_findings(run):
    """Group TPR/FPR and bootstrap intervals that rest on very few events or non-events."""
    out, metrics = [], run["metrics"]
    thin = [f"{clip(attr)}: {clip(row['group'])} ({fmt_count(row['events'])} events, "
            f"{fmt_count(row['n'] - row['events'])} non-events)"
            for attr, block in run["subgroups"]["attributes"].items() for row in block["rows"]
            if not row["too_small"] and min(row["events"], row["n"] - row["events"]) < MIN_CLASS_COUNT]
    if thin:
        out.append(_finding("note", "Group error rates on few cases",
                            f"at least {MIN_CLASS_COUNT} events and non-events per assessed group (common practice)",
                            "; ".join(thin), "The TPR (per event) or FPR (per non-event) of these groups rests on "
                            "fewer than 5 cases: read their intervals, not the point values."))
    events = metrics["events"]
    if metrics.get("bootstrap") and min(events, metrics["n"] - events) < 2 * MIN_CLASS_COUNT:
        out.append(_finding("note", "Bootstrap intervals on few cases",
                            f"at least {2 * MIN_CLASS_COUNT} events and non-events (a project choice)",
                            f"{fmt_count(events)} events, {fmt_count(metrics['n'] - events)} non-events",
                            "Resampling so few cases gives ragged, too-narrow intervals; treat them as rough."))
    return out


def _subgroup_finding(run):
    flagged = [f"{clip(attr)}: {clip(row['group'])} ({fmt_fixed(row['adverse_impact_ratio'])})"
               for attr, block in run["subgroups"]["attributes"].items() for row in block["rows"]
               if row.get("adverse_impact_flag")]
    basis = "adverse-impact ratio at least 4/5 (a US employment-selection guideline, applied here by analogy)"
    if flagged:
        return _finding("attention", "Groups below the four-fifths screen", basis, "; ".join(flagged),
                        "Investigate why these groups are flagged more often: differences in the inputs, in "
                        "the outcome, or in how the model treats them. Do not adjust the model automatically.")
    return _finding("ok", "Groups below the four-fifths screen", basis, "none")


def _group_size_findings(run):
    out = []
    min_size = run["subgroups"]["min_group_size"]
    small = [f"{clip(attr)}: {clip(row['group'])} (n = {fmt_count(row['n'])})"
             for attr, block in run["subgroups"]["attributes"].items() for row in block["rows"] if row.get("too_small")]
    if small:
        out.append(_finding("attention", "Groups too small to assess", f"at least {fmt_count(min_size)} test cases",
                            "; ".join(small), "These groups were not screened; assess them on more data."))
    used = [clip(attr) for attr, block in run["subgroups"]["attributes"].items()
            if block["kind"] == "sensitive" and block.get("used_as_feature")]
    if used:
        out.append(_finding("attention", "Sensitive attribute used as a model input", "not used", ", ".join(used),
                            "Confirm that using it is lawful and justified, and record who approved it."))
    return out


def _failed_finding(run):
    failed = [r for r in run["table"]["rows"] if r.get("status") != "ok"]
    if failed:
        return _finding("attention", "Candidates that could not be fitted", "none failed",
                        "; ".join(f"{clip(r['candidate'])}: {clip(r.get('reason'), 300)}" for r in failed),
                        "Read the reasons (separation, non-convergence); the comparison excludes these candidates.")
    return _finding("ok", "Candidates that could not be fitted", "none failed", "none")


CHALLENGER_CHECK = "Flexible challenger (gradient-boosted trees, not for adoption)"
#: How each gap is worded and formatted: (label, word when the challenger is better, when worse, format).
_GAP_WORDS = {"log_loss": ("log loss", "lower", "higher", lambda x: fmt_fixed(x, 4)),
              "auc": ("AUC", "higher", "lower", lambda x: fmt_fixed(x, 3))}


def challenger_gap_sentence(gap: dict, *, selected: str) -> str:
    """One metric's gap between the flexible challenger and the selected candidate, in words.

    ``gap`` is an entry of the challenger's ``gap`` record (:func:`oddsmith.fitting.challenger.gap_interval`):
    ``advantage`` is how much better the challenger does, with its interval ``lower``–``upper``.

    Examples
    --------
    >>> g = {"metric": "log_loss", "advantage": 0.012, "lower": 0.004, "upper": 0.02, "level": 0.95,
    ...      "relative": 0.03}
    >>> challenger_gap_sentence(g, selected="logit_main")
    "The flexible challenger's cross-validated log loss is 0.0120 lower than that of the selected candidate, logit_main (95% interval 0.0040 to 0.0200; 3.0% of the selected candidate's log loss)."
    """
    label, better, worse, fmt = _GAP_WORDS[gap["metric"]]
    if gap.get("advantage") is None:
        return f"The gap in {label} cannot be stated: {clip(gap.get('note'), 300)}."
    advantage, low, high = gap["advantage"], gap["lower"], gap["upper"]
    word = better if advantage >= 0 else worse
    if advantage < 0:  # state the size of the shortfall, its interval turned the same way
        advantage, low, high = -advantage, -high, -low
    share = "" if gap.get("relative") is None else f"; {fmt_pct(abs(gap['relative']))} of the selected candidate's {label}"
    return (f"The flexible challenger's cross-validated {label} is {fmt(advantage)} {word} than that of the selected "
            f"candidate, {clip(selected)} ({fmt_fixed(100 * gap['level'], 0)}% interval {fmt(low)} to {fmt(high)}{share}).")


def challenger_sentences(challenger: dict | None) -> list[str]:
    if challenger is None:
        return []
    gap = challenger["gap"]
    return [challenger_gap_sentence(gap[metric], selected=gap["selected"]) for metric in _GAP_WORDS]


def _challenger_finding(run):
    check = CHALLENGER_CHECK
    challenger = run.get("challenger")
    if challenger is None:
        found = ("not run: challenger.enabled is false" if "challenger" in run["config"]
                 else "not run: this run's configuration has no challenger section")
        return _finding("note", check, "cross-validated on the candidates' folds", found,
                        "Nothing shows how much a flexible model would gain over the interpretable candidates; "
                        "enable the challenger to measure it.")
    gap = challenger["gap"]
    basis = (f"log-loss gap not clearly above 0, or at most {fmt_pct(gap['relative_limit'])} of the selected "
             "log loss (a project choice)")
    found = challenger_gap_sentence(gap["log_loss"], selected=gap["selected"])
    if gap["large"]:
        return _finding("attention", check, basis, found,
                        "The interpretable candidates may miss non-linear effects or interactions that the trees "
                        "find: look for them (transforms, bins, splines or interactions in the recipe) and refit.")
    return _finding("ok", check, basis, found)


def _leak_finding(run):
    leak = run["diagnostics"]["leakage"]
    basis = f"single-feature AUC at most {fmt_fixed(leak['threshold'], 2)}"
    if leak["suspected"]:
        names = "; ".join(clip(s["feature"] if isinstance(s, dict) else s) for s in leak["suspected"])
        return _finding("attention", "Suspected leaks", basis, names,
                        "Check that these inputs are known before the outcome; remove them if not.")
    return _finding("ok", "Suspected leaks", basis, "none")


def _vif_finding(run):
    vif = run["diagnostics"]["vif"]
    basis = f"VIF at most {fmt_fixed(vif['threshold'], 0)} (rule of thumb)"
    bad = [*(clip(v["column"] if isinstance(v, dict) else v) for v in vif["flagged"]),
           *(clip(v) + " (perfectly collinear)" for v in vif.get("perfectly_collinear", []))]
    if bad:
        return _finding("attention", "Variance inflation", basis, "; ".join(bad),
                        "Coefficients of these columns are imprecise; do not read them one by one.")
    return _finding("ok", "Variance inflation", basis, "none above the threshold")


def _drift_finding(run):
    parts, test = run["split"]["parts"], run["split"]["base_rate_test"]
    if test is None:
        return _finding("note", "Base-rate drift between training and test", "a test part to compare with",
                        "no test part (split.method cross_validation_only): nothing to compare")
    found = (f"training {fmt_pct(parts['train']['base_rate'])}, test {fmt_pct(parts['test']['base_rate'])}; "
             f"p = {fmt_p(test['p_value'])}")
    basis = f"no difference at level {test['alpha']}"
    if test["p_value"] is not None and test["p_value"] < test["alpha"]:
        return _finding("attention", "Base-rate drift between training and test", basis, found,
                        "The event rate changed between the parts: check the calibration-in-the-large on recent "
                        "data and recalibrate the intercept if needed.")
    return _finding("ok", "Base-rate drift between training and test", basis, found)


def _decision_findings(run):
    out, metrics, choice = [], run["metrics"], run["choice"]
    if metrics["auc_interval"]["lower"] is not None and metrics["auc_interval"]["lower"] <= 0.5:
        out.append(_finding("attention", f"Discrimination above chance ({_where(run)})", "AUC interval above 0.5",
                            f"{fmt_fixed(metrics['auc_interval']['lower'])}–{fmt_fixed(metrics['auc_interval']['upper'])}",
                            "The model does not rank cases better than chance with confidence; do not deploy."))
    if choice["adopted_cutoff"] is None:
        out.append(_finding("attention", "Adopted cut-off", "flags some cases", "flags no case",
                            "At these costs the model never pays for a review; revisit the costs or the model."))
    costs = choice["cost_per_1000"]
    trivial = min(costs["flag_none"], costs["flag_all"])
    if costs["adopted"] is not None and costs["adopted"] >= trivial:
        out.append(_finding("attention", "Cost against trivial rules (training, out-of-fold)",
                            "below flag-none and flag-all, on the same out-of-fold predictions",
                            f"{fmt_fixed(costs['adopted'], 0)} {cost_unit((run['config'].get('costs') or {}).get('currency'))} "
                            f"per 1,000 cases",
                            "The model does not lower the expected cost of decisions; it adds no value at these costs."))
    if run["selected"]["candidate"] == "baseline" or run["model"].get("kind") == "baseline":
        out.append(_finding("attention", "Selected candidate", "a model with inputs", "the intercept-only baseline",
                            "No candidate beat the baseline; the inputs carry no usable signal as specified."))
    return out
