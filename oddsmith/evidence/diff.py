"""What changed between two results (or release) folders, for a reviewer.

``compare_folders(a, b)`` reads both manifests and the handful of JSON artifacts a reviewer
looks at first and returns a JSON-ready record: configuration changes by key path, the data
hash, code fingerprints per rule and library versions, the selected candidate, its
coefficients (each change also in units of the first folder's standard error), test metrics,
the cut-off and the subgroup flags. ``format_text`` renders it for reading. Nothing in either
folder is run; files are parsed as JSON only.
"""

from __future__ import annotations

import hashlib
import json
import math
import stat
from pathlib import Path

from oddsmith import artifacts
from oddsmith.artifacts import AUC_INTERVAL_KEYS
from oddsmith.errors import ArtifactError, ManifestError
from oddsmith.evidence.verify import read_manifest, verify_results

#: Test metrics that do not depend on the cut-off.
THRESHOLD_FREE = ("auc", "gini", "ks", "log_loss", "brier", "calibration_intercept", "calibration_slope",
                  "hl_statistic", "hl_p_value", "n", "events")
#: Metrics at the adopted cut-off.
AT_CUTOFF = ("tp", "fp", "tn", "fn", "flag_rate", "sensitivity", "specificity", "ppv", "npv")


def compare_folders(a, b) -> dict:
    """The differences between results folders ``a`` and ``b`` (``b`` relative to ``a``)."""
    runs = [_load(Path(a)), _load(Path(b))]
    first, second = runs
    selected = {"a": first["selected"].get("candidate"), "b": second["selected"].get("candidate")}
    return {
        "a": str(a),
        "b": str(b),
        "verified": {"a": first["verified"], "b": second["verified"]},
        "manifest_sha256": {"a": first["manifest_sha256"], "b": second["manifest_sha256"]},
        "release": {"a": first["manifest"].get("release"), "b": second["manifest"].get("release")},
        "config": config_changes(first["manifest"]["config"], second["manifest"]["config"]),
        "data": _data(first, second),
        "code": _code(first["manifest"], second["manifest"]),
        "selected": selected | {"changed": selected["a"] != selected["b"],
                                "reason_b": second["selected"].get("reason")},
        "coefficients": [coefficient_changes(name, first["models"].get(name), second["models"].get(name))
                         for name in dict.fromkeys([selected["a"], selected["b"]]) if name],
        "metrics": _metrics(first["metrics"], second["metrics"]),
        "cutoff": _cutoff(first["choice"], second["choice"]),
        "subgroups": _subgroups(first["subgroups"], second["subgroups"]),
    }


def _load(folder: Path) -> dict:
    problems: list[str] = []
    raw, manifest = read_manifest(folder, problems)
    if manifest is None:
        raise ManifestError(f"cannot compare {folder}", problems)
    selected = _artifact(folder, artifacts.SELECTED)
    names = dict.fromkeys(n for n in [selected.get("candidate")] if n)
    return {
        "manifest": manifest,
        "manifest_sha256": hashlib.sha256(raw).hexdigest(),
        "verified": not verify_results(folder),
        "selected": selected,
        "models": {n: _artifact(folder, artifacts.MODEL, candidate=n) for n in names},
        "metrics": {"probability": _artifact(folder, "evaluation/probability_metrics.json"),
                    "cutoff": _artifact(folder, "evaluation/cutoff_metrics.json")},
        "choice": _artifact(folder, "threshold/choice.json"),
        "subgroups": _artifact(folder, "evaluation/subgroups.json"),
        "folder": folder,
    }


def _artifact(folder: Path, name: str, **wildcards: str) -> dict:
    """A JSON artifact of the folder (``name`` registered in :mod:`oddsmith.artifacts`); a
    missing one is an empty record, a symlink is refused."""
    rel = artifacts.path(name, **wildcards)
    path = folder
    for part in rel.split("/"):
        path = path / part
        try:
            mode = path.lstat().st_mode
        except FileNotFoundError:
            return {}
        if stat.S_ISLNK(mode):
            raise ArtifactError(f"{path} is a symlink; refused")
    if not stat.S_ISREG(mode):
        return {}
    try:
        value = json.loads(path.read_text(encoding="utf-8"))
    except (UnicodeDecodeError, ValueError) as exc:
        raise ArtifactError(f"{path} is not valid JSON: {exc}") from None
    return value if isinstance(value, dict) else {}


# ---- configuration ----

def flatten(value, prefix: str = "") -> dict:
    """Key paths of a config value: ``{"costs.false_positive": 1200, "candidates[lasso].grid": [...]}``.

    Lists of mappings that all carry a ``name`` are keyed by name; other lists are leaves.

    Examples
    --------
    >>> flatten({"costs": {"false_positive": 1}, "candidates": [{"name": "a", "kind": "logit"}]})
    {'candidates[a].kind': 'logit', 'costs.false_positive': 1}
    """
    if isinstance(value, dict) and value:
        out = {}
        for key in sorted(value):
            out |= flatten(value[key], f"{prefix}.{key}" if prefix else str(key))
        return out
    if isinstance(value, list) and value and all(isinstance(v, dict) and "name" in v for v in value):
        out = {}
        for item in value:
            rest = {k: v for k, v in item.items() if k != "name"}
            out |= flatten(rest, f"{prefix}[{item['name']}]") if rest else {f"{prefix}[{item['name']}]": {}}
        return out
    return {prefix: value}


def config_changes(a: dict, b: dict) -> list[dict]:
    """Changed, added and removed config key paths, sorted by key."""
    fa, fb = flatten(a), flatten(b)
    changes = []
    for key in sorted(set(fa) | set(fb)):
        if key not in fa:
            changes.append({"key": key, "change": "added", "b": fb[key]})
        elif key not in fb:
            changes.append({"key": key, "change": "removed", "a": fa[key]})
        elif fa[key] != fb[key]:
            changes.append({"key": key, "change": "changed", "a": fa[key], "b": fb[key]})
    return changes


# ---- data and code ----

def _data(first: dict, second: dict) -> dict:
    out = {}
    for side, run in (("a", first), ("b", second)):
        manifest = run["manifest"]
        path = str(manifest["config"].get("data", {}).get("path"))
        raw = manifest.get("raw_inputs", {}).get(path, {})
        snapshot = manifest.get("files", {}).get(artifacts.path("validated/data.parquet"), {})
        out[side] = {"path": path, "sha256": raw.get("sha256"), "snapshot_sha256": snapshot.get("sha256")}
    out["changed"] = (out["a"]["sha256"], out["a"]["snapshot_sha256"]) != (out["b"]["sha256"], out["b"]["snapshot_sha256"])
    return out


def _code(a: dict, b: dict) -> dict:
    rules = []
    ca, cb = _rule_code(a), _rule_code(b)
    for rule in sorted(set(ca) | set(cb)):
        if ca.get(rule) != cb.get(rule):
            rules.append({"rule": rule, "a": ca.get(rule), "b": cb.get(rule)})
    la = a.get("environment", {}).get("libraries", {})
    lb = b.get("environment", {}).get("libraries", {})
    libraries = [{"library": n, "a": la.get(n), "b": lb.get(n)} for n in sorted(set(la) | set(lb)) if la.get(n) != lb.get(n)]
    env = [{"key": k, "a": a.get("environment", {}).get(k), "b": b.get("environment", {}).get(k)}
           for k in ("python", "platform") if a.get("environment", {}).get(k) != b.get("environment", {}).get(k)]
    return {"rules": rules, "libraries": libraries, "environment": env,
            "git": {"a": a.get("git"), "b": b.get("git"), "changed": a.get("git") != b.get("git")}}


def _rule_code(manifest: dict) -> dict:
    out = {}
    for entry in manifest.get("files", {}).values():
        if isinstance(entry, dict) and entry.get("rule"):
            out[entry["rule"]] = entry.get("code_sha256")
    card = manifest.get("card_rule")
    if isinstance(card, dict):
        out["card"] = card.get("code_sha256")
    return out


# ---- model, metrics, cut-off, subgroups ----

def coefficient_changes(candidate: str, a: dict | None, b: dict | None) -> dict:
    """Per-term estimates in both folders; the change also in units of ``a``'s standard error."""
    ta = {row["term"]: row for row in (a or {}).get("coef_table", [])}
    tb = {row["term"]: row for row in (b or {}).get("coef_table", [])}
    terms = []
    for term in list(dict.fromkeys([*ta, *tb])):
        ea, eb = ta.get(term, {}).get("estimate"), tb.get(term, {}).get("estimate")
        se = ta.get(term, {}).get("std_error")
        change = eb - ea if _num(ea) and _num(eb) else None
        in_se = change / se if change is not None and _num(se) and se > 0 else None
        terms.append({"term": term, "a": ea, "b": eb, "change": change, "std_error_a": se, "change_in_se": in_se})
    changed = [t for t in terms if t["a"] != t["b"]]
    return {"candidate": candidate, "in_a": a is not None, "in_b": b is not None, "terms": terms,
            "n_changed": len(changed)}


def _num(x) -> bool:
    return isinstance(x, (int, float)) and not isinstance(x, bool) and math.isfinite(x)


def _changes(pairs) -> list[dict]:
    out = []
    for name, va, vb in pairs:
        if va != vb:
            row = {"name": name, "a": va, "b": vb}
            if _num(va) and _num(vb):
                row["change"] = vb - va
            out.append(row)
    return out


def _metrics(first: dict, second: dict) -> dict:
    """Changes of the test metrics: ``first``/``second`` hold evaluate's cut-off-free metrics
    (``probability``) and apply_cutoff's (``cutoff``)."""
    pa, pb = first["probability"], second["probability"]
    oa, ob = pa.get("overall", {}), pb.get("overall", {})
    free = _changes((k, oa.get(k), ob.get(k)) for k in THRESHOLD_FREE)
    free += _changes((f"{key}.{k}", pa.get(key, {}).get(k), pb.get(key, {}).get(k))
                     for key in AUC_INTERVAL_KEYS.values() for k in ("lower", "upper"))
    a, b = first["cutoff"], second["cutoff"]
    ca, cb = a.get("confusion", {}), b.get("confusion", {})
    at_cutoff = _changes([("cutoff", a.get("cutoff"), b.get("cutoff")),
                          ("cost_per_1000", a.get("cost_per_1000"), b.get("cost_per_1000"))]
                         + [(f"confusion.{k}", ca.get(k), cb.get(k)) for k in AT_CUTOFF])
    return {"threshold_free": free, "at_cutoff": at_cutoff}


def _cutoff(a: dict, b: dict) -> list[dict]:
    def pick(choice):
        return {
            "adopted": choice.get("adopted"), "adopted_cutoff": choice.get("adopted_cutoff"),
            "bayes.cutoff": choice.get("bayes", {}).get("cutoff"),
            "empirical.cutoff": choice.get("empirical", {}).get("cutoff"),
            "bootstrap.cutoff_low": (choice.get("bootstrap") or {}).get("cutoff_low"),
            "bootstrap.cutoff_high": (choice.get("bootstrap") or {}).get("cutoff_high"),
        } | {f"cost_per_1000.{k}": v for k, v in sorted((choice.get("cost_per_1000") or {}).items())} \
          | {f"costs.{k}": v for k, v in sorted((choice.get("costs") or {}).items())}
    pa, pb = pick(a), pick(b)
    return _changes((k, pa.get(k), pb.get(k)) for k in sorted(set(pa) | set(pb)))


def _flags(subgroups: dict) -> dict:
    out = {}
    for attribute, block in sorted((subgroups.get("attributes") or {}).items()):
        for row in block.get("rows", []):
            out[f"{attribute}={row.get('group')}"] = {"flag": row.get("adverse_impact_flag"),
                                                      "ratio": row.get("adverse_impact_ratio"),
                                                      "too_small": row.get("too_small")}
    return out


def _subgroups(a: dict, b: dict) -> dict:
    fa, fb = _flags(a), _flags(b)
    changed = [{"group": g, "a": fa.get(g, {}).get("flag"), "b": fb.get(g, {}).get("flag")}
               for g in sorted(set(fa) | set(fb)) if fa.get(g, {}).get("flag") != fb.get(g, {}).get("flag")]
    return {"flag_changes": changed,
            "flagged_a": sorted(g for g, v in fa.items() if v["flag"]),
            "flagged_b": sorted(g for g, v in fb.items() if v["flag"])}


# ---- text ----

def _v(x) -> str:
    if isinstance(x, float):
        return f"{x:.6g}"
    return json.dumps(x, ensure_ascii=False) if not isinstance(x, str) else x


def format_text(diff: dict) -> str:
    """The diff as readable text: one section per topic, 'unchanged' when nothing moved."""
    lines = [f"{side.upper()}: {diff[side]}  ({_describe_release(diff['release'][side])}, manifest "
             f"{diff['manifest_sha256'][side][:12]}, {'verified' if diff['verified'][side] else 'NOT verified'})"
             for side in ("a", "b")] + [""]
    lines += _section("config", [f"{c['key']}: {_v(c.get('a', '(absent)'))} -> {_v(c.get('b', '(absent)'))}"
                                 for c in diff["config"]])
    data = diff["data"]
    lines += _section("data", [f"{data['a']['path']}: sha256 {data['a']['sha256']} -> {data['b']['sha256']}; "
                               f"validated snapshot {data['a']['snapshot_sha256']} -> {data['b']['snapshot_sha256']}"]
                      if data["changed"] else [])
    code = diff["code"]
    lines += _section("code", [f"rule {r['rule']}: fingerprint {_v(r['a'])} -> {_v(r['b'])}" for r in code["rules"]]
                      + [f"library {r['library']}: {_v(r['a'])} -> {_v(r['b'])}" for r in code["libraries"]]
                      + [f"{r['key']}: {_v(r['a'])} -> {_v(r['b'])}" for r in code["environment"]]
                      + ([f"git: {_v(code['git']['a'])} -> {_v(code['git']['b'])}"] if code["git"]["changed"] else []))
    sel = diff["selected"]
    lines += _section("selected candidate", [f"{sel['a']} -> {sel['b']} ({sel['reason_b']})"] if sel["changed"] else [],
                      unchanged=f"unchanged ({sel['b']})")
    for block in diff["coefficients"]:
        rows = [f"{t['term']}: {_v(t['a'])} -> {_v(t['b'])}"
                + (f" (change {_v(t['change'])} = {t['change_in_se']:+.2f} SE)" if t["change_in_se"] is not None else "")
                for t in block["terms"] if t["a"] != t["b"]]
        lines += _section(f"coefficients of {block['candidate']}", rows,
                          unchanged=f"unchanged ({len(block['terms'])} terms)")
    lines += _section("test metrics (threshold-free)", _rows(diff["metrics"]["threshold_free"]))
    lines += _section("test metrics at the cut-off", _rows(diff["metrics"]["at_cutoff"]))
    lines += _section("cut-off", _rows(diff["cutoff"]))
    sub = diff["subgroups"]
    lines += _section("subgroup flags", [f"{c['group']}: flag {_v(c['a'])} -> {_v(c['b'])}" for c in sub["flag_changes"]],
                      unchanged=f"unchanged (flagged: {', '.join(sub['flagged_b']) or 'none'})")
    return "\n".join(lines).rstrip() + "\n"


def _describe_release(record) -> str:
    if not record:
        return "working results"
    return f"release {record.get('version')} of {record.get('released_at')}"


def _rows(changes: list[dict]) -> list[str]:
    return [f"{c['name']}: {_v(c['a'])} -> {_v(c['b'])}" + (f" ({c['change']:+.6g})" if "change" in c else "")
            for c in changes]


def _section(title: str, rows: list[str], *, unchanged: str = "unchanged") -> list[str]:
    if not rows:
        return [f"{title}: {unchanged}"]
    return [f"{title}:"] + [f"  {row}" for row in rows]


# ---- command line ----

#: Exit statuses of ``oddsmith diff``, as diff(1): same, different, trouble.
SAME, DIFFERENT, TROUBLE = 0, 1, 2

DIFF_DESCRIPTION = """\
Show what changed between two results folders (results/<run>) or releases
(releases/<run>/<version>), B relative to A: configuration keys, the data file's hash,
code fingerprints and library versions, the selected candidate, its coefficients (each
change also in standard errors of A), test metrics, the cut-off and subgroup flags.
Both folders are verified against their manifests first; nothing in them is run or changed.

exit status: 0 the results are the same, 1 they differ, 2 either folder cannot be read or
does not verify (the differences are still shown when both could be read).

example:
  oddsmith diff releases/lease_demo/1.0.0 results/lease_demo"""


def differs(diff: dict) -> bool:
    """Whether a :func:`compare_folders` record shows any difference in what it compares."""
    code, coefficients = diff["code"], diff["coefficients"]
    return bool(diff["config"] or diff["data"]["changed"] or code["rules"] or code["libraries"]
                or code["environment"] or code["git"]["changed"] or diff["selected"]["changed"]
                or any(b["n_changed"] or not (b["in_a"] and b["in_b"]) for b in coefficients)
                or diff["metrics"]["threshold_free"] or diff["metrics"]["at_cutoff"] or diff["cutoff"]
                or diff["subgroups"]["flag_changes"])


def register(sub) -> None:
    """Add ``oddsmith diff`` to the command line."""
    import argparse

    p = sub.add_parser("diff", help="what changed between two results or release folders "
                                    "(exit 0 same, 1 differ, 2 unverifiable)",
                       description=DIFF_DESCRIPTION, formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("a", metavar="A", help="the reference folder, e.g. a release")
    p.add_argument("b", metavar="B", help="the folder to compare with it, e.g. the current results")
    p.add_argument("--json", action="store_true", help="print the differences as one JSON record")
    p.set_defaults(func=_cmd_diff)


def _cmd_diff(args) -> int:
    import sys

    from oddsmith.errors import OddsmithError

    try:
        diff = compare_folders(args.a, args.b)
    except OddsmithError as exc:
        print(f"oddsmith diff: {exc}", file=sys.stderr)
        return TROUBLE
    if args.json:
        print(json.dumps(diff, indent=2, sort_keys=True, ensure_ascii=False, allow_nan=False))
    else:
        print(format_text(diff), end="")
    unverified = [diff[side] for side in ("a", "b") if not diff["verified"][side]]
    if unverified:
        print(f"oddsmith diff: {' and '.join(unverified)} did not verify against its manifest; the differences "
              "shown are not trustworthy (run `oddsmith verify` on it for the details)", file=sys.stderr)
        return TROUBLE
    return DIFFERENT if differs(diff) else SAME
