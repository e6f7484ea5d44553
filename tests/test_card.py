"""The model card: numbers exactly as in the artifacts, byte-identical rerenders, escaped and
laid-out hostile text, a fetcher that refuses everything outside the run folder, clear
errors for missing artifacts, every section and the cautions present."""

from __future__ import annotations

import hashlib
import json
import logging
import os
import re
import shutil
import subprocess
import sys
from pathlib import Path

import pytest
import yaml
from markupsafe import escape
from pypdf import PdfReader

from oddsmith import artifacts
from oddsmith.artifacts import evaluation_at_cutoff
from oddsmith.errors import ArtifactError
from oddsmith.fitting import selection
from oddsmith.reporting import card, card_findings, card_loader, formats
from oddsmith.reporting.card import CardError, render_card, render_pdf
from oddsmith.reporting.fetcher import RefusedFetch, RunFolderFetcher
from oddsmith.reporting.formats import clip, fmt_count, fmt_fixed, fmt_p, fmt_pct, fmt_sig
from oddsmith.stages.card import run_card

ROOT = Path(__file__).resolve().parent.parent
RUN = Path("results") / "lease_demo"


def _pdf_text(path) -> str:
    # pypdf interleaves NUL bytes when a font subset needs two-byte codes (many glyphs)
    return "\n".join(page.extract_text().replace("\x00", "") for page in PdfReader(str(path)).pages)


def _squash(text: str) -> str:
    """Text without whitespace, so line breaks chosen by the layout do not matter."""
    return "".join(text.split())


def _cautions() -> str:
    """The caution paragraph of DEVELOPERS.md, section "Cautions carried by every card"."""
    section = (ROOT / "DEVELOPERS.md").read_text(encoding="utf-8").split("## Cautions carried by every card")[1]
    return " ".join(line[2:] for line in section.splitlines() if line.startswith("> "))


# ---------------------------------------------------------------------------------------------
# number formats and small parts (no build needed)


def test_number_formats():
    assert fmt_fixed(0.7382910627, 3) == "0.738"
    assert fmt_fixed(-0.0242, 3) == "−0.024"
    assert fmt_fixed(-0.0001, 3) == "0.000"  # no negative zero
    assert fmt_fixed(667462.6865, 0) == "667,463"
    assert fmt_fixed(None) == "—" and fmt_fixed(float("nan")) == "—"
    assert fmt_sig(-0.007672288832) == "−0.007672"
    assert fmt_sig(1.41048932) == "1.410"
    assert fmt_sig(1544.13246) == "1,544"
    assert fmt_sig(3.2e-9) == "3.200e−09"
    assert fmt_pct(0.39054726) == "39.1%"
    assert fmt_count(12000) == "12,000"
    assert fmt_p(3.3e-41) == "< 0.001" and fmt_p(0.50575) == "0.506"


def test_clip_says_how_long_the_text_was():
    assert clip("short") == "short"
    long = "y" * 500
    out = clip(long, 50)
    assert len(out) < 100 and "[shortened; 500 characters in full]" in out
    assert str(formats.clip_html("<b>" + "z" * 40, 60)).startswith('<span class="long">&lt;b&gt;')


def test_fetcher_allows_only_data_urls_and_files_inside_the_run(tmp_path):
    run = tmp_path / "run"
    (run / "figures").mkdir(parents=True)
    inside = run / "figures" / "a.svg"
    inside.write_text("<svg/>")
    outside = tmp_path / "secret.txt"
    outside.write_text("secret")
    (run / "link.txt").symlink_to(outside)
    fetcher = RunFolderFetcher(run)
    assert fetcher.allows("data:image/svg+xml;base64,PHN2Zy8+")
    assert fetcher.allows(inside.as_uri())
    for url in ("http://example.invalid/x.png", "https://example.invalid/", "ftp://example.invalid/f",
                "file:///etc/passwd", outside.as_uri(), (run / "link.txt").as_uri(),
                (run / "figures" / ".." / ".." / "secret.txt").as_uri(), "file://otherhost" + str(inside),
                (run / "missing.svg").as_uri(), "javascript:alert(1)"):
        assert not fetcher.allows(url), url
        with pytest.raises(RefusedFetch, match="refused"):
            fetcher.fetch(url)
    assert len(fetcher.refused) == 10


# A fresh interpreter for each: the quick import happens once per process.
_LOAD = ("import ctypes.util, sys; original = ctypes.util.find_library; {prelude}"
         "import oddsmith.reporting.fetcher; import weasyprint.text.ffi as ffi; "
         "assert ctypes.util.find_library is original; assert ffi.pango is not None and ffi.fontconfig is not None; "
         "print('loaded')")


def test_weasyprint_loads_without_probing_for_compilers_and_restores_the_lookup():
    """On Linux the libraries load by the names the dynamic loader resolves; no ``gcc`` or
    ``ld`` is started (they cost 0.23 s of every render's start) and ``find_library`` is
    left as it was."""
    if not sys.platform.startswith("linux"):
        pytest.skip("the quick import applies on Linux only")
    probe = ("import subprocess; started = []; real = subprocess.Popen.__init__\n"
             "def spy(self, args, *a, **k):\n    started.append(args); real(self, args, *a, **k)\n"
             "subprocess.Popen.__init__ = spy\n")
    code = probe + _LOAD.format(prelude="") + "; print(started)"
    result = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, cwd=ROOT)
    assert result.returncode == 0, result.stderr
    assert result.stdout.split() == ["loaded", "[]"]


def test_weasyprint_is_imported_the_ordinary_way_where_only_the_lookup_finds_the_libraries():
    """A system where the loader knows the libraries only through ``find_library``: the quick
    import fails silently and the ordinary one succeeds, with no notice on the terminal."""
    if not sys.platform.startswith("linux"):
        pytest.skip("the quick import applies on Linux only")
    only_lookup = ("import cffi.api\n"
                   "def strict(backend, name, flags):\n"
                   "    import ctypes.util\n"
                   "    path = ctypes.util.find_library(name)\n"
                   "    if path is None: raise OSError(name)\n"
                   "    return backend.load_library(path, flags)\n"
                   "cffi.api._load_backend_lib = strict\n")
    result = subprocess.run([sys.executable, "-c", only_lookup + _LOAD.format(prelude="")],
                            capture_output=True, text=True, cwd=ROOT)
    assert result.returncode == 0, result.stderr
    assert result.stdout == "loaded\n"


@pytest.mark.parametrize("url", ["http://example.invalid/x.png", "file:///etc/passwd"])
def test_a_refused_fetch_stops_the_render(tmp_path, url):
    html = f'<html><body><p>x</p><img src="{url}"></body></html>'
    with pytest.raises(CardError, match="refused"):
        render_pdf(html, run_dir=tmp_path, epoch=0)


def test_weasyprint_warnings_reach_the_log(tmp_path, caplog):
    html = "<html><head><style>p { colour: red; } p { margin: banana; }</style></head><body><p>x</p></body></html>"
    with caplog.at_level(logging.WARNING, logger="oddsmith.card"):
        pdf = render_pdf(html, run_dir=tmp_path, epoch=0)
    assert pdf.startswith(b"%PDF")
    assert any(r.name == "oddsmith.card" and "weasyprint:" in r.getMessage() for r in caplog.records)


def test_bad_release_is_refused():
    for bad in ({"version": "1.0"}, {"released_at": "2026-01-01"}, {"version": "1", "released_at": "soon"}, "1.0"):
        with pytest.raises(CardError, match="release"):
            card._check_release(bad)
    assert card._check_release(None) is None


def test_code_state_in_plain_words():
    assert "uncommitted changes" in card_findings.code_state({"commit": "a" * 40, "dirty": True})
    assert "was committed, with no uncommitted changes" in card_findings.code_state({"commit": "a" * 40, "dirty": False})
    assert "not built from a git checkout" in card_findings.code_state(None)


def test_template_carries_the_cautions_verbatim():
    template = (ROOT / "reports" / card.TEMPLATE).read_text(encoding="utf-8")
    assert _squash(_cautions()) in _squash(template)


def test_trivial_costs_are_priced_on_the_same_test_cases():
    # 339 events in 2,010 cases, c_FN 6,000, c_FP 1,200 (the demo's): flag none costs
    # 339 · 6,000 / 2,010 per case = 1,011,940.30 per 1,000; flag all 1,671 · 1,200 / 2,010 per case.
    costs = {"false_positive": 1200.0, "false_negative": 6000.0, "true_positive": 0.0, "true_negative": 0.0}
    got = card.trivial_costs_on_test({"n": 2010, "events": 339}, costs)
    assert got["flag_none"] == pytest.approx(339 * 6000 / 2010 * 1000)
    assert got["flag_all"] == pytest.approx(1671 * 1200 / 2010 * 1000)


# ---------------------------------------------------------------------------------------------
# the demo card (end to end)


@pytest.fixture(scope="session")
def demo_run(demo_build) -> Path:
    return demo_build / RUN


@pytest.fixture(scope="session")
def demo_text(demo_run) -> str:
    return _pdf_text(artifacts.in_folder(demo_run, "card/model_card.pdf"))


def _load(run: Path, rel: str, **wildcards):
    return json.loads(artifacts.in_folder(run, rel, **wildcards).read_text(encoding="utf-8"))


def _test_metrics(run: Path) -> dict:
    """The test part's evaluation as the card reads it: evaluate's and apply_cutoff's files joined."""
    return evaluation_at_cutoff(_load(run, "evaluation/probability_metrics.json"),
                                _load(run, "evaluation/cutoff_metrics.json"))


@pytest.mark.e2e
def test_card_files_and_sha256_list(demo_run):
    lines = artifacts.in_folder(demo_run, "card/card.sha256").read_text().splitlines()
    assert [line.split("  ")[1] for line in lines] == ["manifest.json", "card/model_card.html", "card/model_card.pdf"]
    for line in lines:
        digest, rel = line.split("  ")
        assert hashlib.sha256((demo_run / rel).read_bytes()).hexdigest() == digest, rel
    assert artifacts.in_folder(demo_run, "card/model_card.pdf").read_bytes().startswith(b"%PDF")
    log = (demo_run.parent.parent / "logs" / "lease_demo" / "card.log").read_text()
    assert "weasyprint:" not in log, "WeasyPrint warned while rendering the demo card:\n" + log


@pytest.mark.e2e
def test_pdf_shows_key_numbers_exactly_as_formatted_from_the_artifacts(demo_run, demo_text):
    metrics = _test_metrics(demo_run)
    selected = _load(demo_run, "comparison/selected.json")["candidate"]
    model = _load(demo_run, artifacts.MODEL, candidate=selected)
    text = _squash(demo_text)
    expected = [
        fmt_fixed(metrics["overall"]["auc"], 3),
        f"{fmt_fixed(metrics['auc_test_ci']['lower'], 3)}–{fmt_fixed(metrics['auc_test_ci']['upper'], 3)}",
        fmt_fixed(metrics["cutoff"], 4),
        *(fmt_count(metrics["confusion"][k]) for k in ("tp", "fp", "tn", "fn")),
        fmt_pct(metrics["confusion"]["flag_rate"]),
        fmt_fixed(metrics["cost_per_1000"], 0),
        fmt_fixed(metrics["overall"]["calibration_slope"], 3),
    ]
    if model["coef_table"]:
        row = next(r for r in model["coef_table"] if r["term"] == "credit_score")
        on_row = [fmt_sig(row["estimate"]), fmt_sig(row["std_error"])]
    else:  # a penalised selection: standardised coefficient, then per unit of the design column
        on_row = [fmt_sig(model["coefficients"]["credit_score"]),
                  fmt_sig(model["original_scale"]["coefficients"]["credit_score"])]
    for value in expected + on_row:
        assert _squash(value) in text, value
    # the coefficient sits on the credit_score row of the coefficient table
    assert _squash("credit_score " + " ".join(on_row)) in text


@pytest.mark.e2e
def test_pdf_has_every_section_the_cautions_and_the_fingerprint(demo_run, demo_text):
    text = _squash(demo_text)
    for _, heading in card.SECTIONS:
        assert _squash(heading) in text, heading
    assert _squash(_cautions()) in text
    fingerprint = hashlib.sha256(artifacts.in_folder(demo_run, artifacts.MANIFEST).read_bytes()).hexdigest()
    assert fingerprint[:12] in text
    assert "Mitchelletal." in text
    assert "Workingdraft" in text and "Release" not in demo_text.split("Working draft")[0]


@pytest.mark.e2e
def test_rerender_is_byte_identical_in_another_folder_time_and_hash_seed(demo_run, tmp_path):
    """Render again in a fresh interpreter (another PYTHONHASHSEED, another clock time, an
    unrelated SOURCE_DATE_EPOCH in the environment) from a copy of the run in another
    folder: HTML and PDF bytes equal the workflow's."""
    copy = tmp_path / "elsewhere" / "lease_demo"
    shutil.copytree(demo_run, copy, ignore=shutil.ignore_patterns("card"))
    env = dict(os.environ, PYTHONHASHSEED="987", SOURCE_DATE_EPOCH="86400")
    script = f"from oddsmith.reporting.card import render_card; render_card({str(copy)!r})"
    subprocess.run([sys.executable, "-c", script], check=True, cwd=tmp_path, env=env, capture_output=True)
    for name in ("model_card.html", "model_card.pdf", "card.sha256"):
        assert (copy / "card" / name).read_bytes() == (demo_run / "card" / name).read_bytes(), name


@pytest.mark.e2e
def test_the_card_reads_the_paths_it_is_given_not_the_folder_layout(demo_run, tmp_path):
    """The card rule passes its declared inputs: a figure and the cut-off file moved out of the
    run folder and named in the inputs give the same HTML; the folder's own copies are absent."""
    copy = tmp_path / "lease_demo"
    shutil.copytree(demo_run, copy, ignore=shutil.ignore_patterns("card"))
    inputs = card_loader.folder_inputs(copy)
    moved = {}
    for key, path in (("cutoff_metrics", inputs["cutoff_metrics"]), ("roc", inputs["figures"]["roc"])):
        moved[key] = tmp_path / "elsewhere" / path.name
        moved[key].parent.mkdir(exist_ok=True)
        path.rename(moved[key])
    inputs["cutoff_metrics"], inputs["figures"]["roc"] = moved["cutoff_metrics"], moved["roc"]
    run_card(inputs=inputs, **{f"out_{k}": copy / rel for k, rel in zip(("html", "pdf", "sha256"), card.CARD_FILES)})
    html = "card/model_card.html"
    assert artifacts.in_folder(copy, html).read_bytes() == artifacts.in_folder(demo_run, html).read_bytes()


def test_the_card_stage_refuses_outputs_outside_the_run_folders_card(tmp_path):
    run_dir = tmp_path / "run"
    inputs = {"manifest": artifacts.in_folder(run_dir, artifacts.MANIFEST)}
    with pytest.raises(CardError) as info:
        run_card(inputs=inputs, out_html=str(artifacts.in_folder(tmp_path, "card/model_card.html")),
                 out_pdf=str(artifacts.in_folder(run_dir, "card/model_card.pdf")),
                 out_sha256=str(artifacts.in_folder(run_dir, "card/card.sha256")))
    assert f"card/model_card.html: got {tmp_path / 'card' / 'model_card.html'}" in str(info.value)
    assert not (tmp_path / "card").exists() and not run_dir.exists()


@pytest.mark.e2e
def test_missing_artifacts_are_named_and_nothing_is_written(demo_run, tmp_path):
    copy = tmp_path / "lease_demo"
    shutil.copytree(demo_run, copy, ignore=shutil.ignore_patterns("card"))
    artifacts.in_folder(copy, "evaluation/cutoff_metrics.json").unlink()
    artifacts.in_folder(copy, "figures/roc.svg").unlink()
    with pytest.raises(ArtifactError) as info:
        render_card(copy)
    message = str(info.value)
    assert "evaluation/cutoff_metrics.json" in message and "figures/roc.svg" in message
    assert not (copy / "card").exists()


# ---------------------------------------------------------------------------------------------
# hostile text


HOSTILE = {
    "script": "<script>alert('x')</script>",
    "image": '<img src="http://example.invalid/track.png">',
    "file": '<a href="file:///etc/passwd">file:///etc/passwd</a>',
    "css": '<style>@import url("http://example.invalid/x.css");</style>',
    "long": "L" * 5000,
    "rtl": "ملف الاختبار שלום עולם",
    "cjk": "设备租赁违约模型 日本語のテキスト",
}


def _poison(run: Path) -> None:
    """Write hostile text into the config (via the manifest), labels, names and paths."""
    def edit(rel, change):
        path = run / rel
        data = json.loads(path.read_text(encoding="utf-8"))
        change(data)
        path.write_text(json.dumps(data, ensure_ascii=False), encoding="utf-8")

    def manifest(m):
        c = m["config"]["card"]
        c["title"] = HOSTILE["script"] + " " + HOSTILE["cjk"]
        c["owner"] = HOSTILE["rtl"] + " " + HOSTILE["image"]
        c["intended_use"] = HOSTILE["file"] + " " + HOSTILE["long"]
        c["out_of_scope"] = [HOSTILE["css"], HOSTILE["long"], HOSTILE["rtl"]]
        c["version"] = HOSTILE["image"]
        m["files"][HOSTILE["script"] + "/" + HOSTILE["long"]] = {"sha256": "0" * 64, "size": 1, "rule": HOSTILE["image"]}

    def subgroups(s):
        block = s["attributes"].pop("owner_age_band")
        for row, label in zip(block["rows"], (HOSTILE["script"], HOSTILE["image"], HOSTILE["long"], HOSTILE["cjk"])):
            row["group"] = label
            row["reference_group"] = HOSTILE["rtl"]
        s["attributes"][HOSTILE["file"]] = block

    def model(m):
        if m["coef_table"]:
            m["coef_table"][1]["term"] = HOSTILE["image"]
            m["coef_table"][2]["term"] = HOSTILE["long"]
        else:  # a penalised selection: rename two design columns everywhere the card reads them
            for index, label in ((0, HOSTILE["image"]), (1, HOSTILE["long"])):
                old = m["design_columns"][index]
                m["design_columns"][index] = label
                m["coefficients"][label] = m["coefficients"].pop(old)
                m["original_scale"]["coefficients"][label] = m["original_scale"]["coefficients"].pop(old)
        m["warnings"] = [HOSTILE["script"]]

    def diagnostics(d):
        d["leakage"]["features"][0]["feature"] = HOSTILE["css"]
        d["vif"]["values"][0]["column"] = HOSTILE["long"]
        d["correlations"]["pairs"][:0] = [{"a": HOSTILE["image"], "b": HOSTILE["long"], "r": 0.9}]

    def report(r):
        r["source"]["path"] = "file:///etc/passwd/" + HOSTILE["long"]
        r["warnings"] = [HOSTILE["image"]]

    edit("manifest.json", manifest)
    edit("evaluation/subgroups.json", subgroups)
    edit(f"candidates/{json.loads((run / 'comparison/selected.json').read_text())['candidate']}/model.json", model)
    edit("features/diagnostics.json", diagnostics)
    edit("validated/report.json", report)
    contract_path = artifacts.in_folder(run, "validated/contract.yaml")
    contract = yaml.safe_load(contract_path.read_text(encoding="utf-8"))
    contract["columns"][HOSTILE["script"] + HOSTILE["long"]] = {"type": "category", "levels": [HOSTILE["image"]],
                                                                "description": HOSTILE["rtl"]}
    contract_path.write_text(yaml.safe_dump(contract, allow_unicode=True), encoding="utf-8")


@pytest.mark.e2e
def test_hostile_text_is_escaped_laid_out_and_never_fetched_in_a_release_copy(demo_run, tmp_path, monkeypatch):
    copy = tmp_path / "lease_demo"
    shutil.copytree(demo_run, copy, ignore=shutil.ignore_patterns("card"))
    _poison(copy)
    seen = []
    original = RunFolderFetcher.fetch

    def spy(self, url, headers=None):
        seen.append(url)
        return original(self, url, headers)

    monkeypatch.setattr(RunFolderFetcher, "fetch", spy)
    out = tmp_path / "release"  # a release copy outside the run folder, as a release tool writes it
    hashes = render_card(copy, out_dir=out, release={"version": "2.0<b>", "released_at": "2026-02-01"})
    assert list(hashes) == ["manifest.json", "../release/model_card.html", "../release/model_card.pdf"]
    assert not (copy / "card").exists()
    html = (out / "model_card.html").read_text(encoding="utf-8")
    assert all(url.startswith("data:image/svg+xml;base64,") for url in seen), [u[:80] for u in seen]
    body = html.split("</style>", 1)[1]
    assert "<script" not in body and "<img src=\"http" not in body and "<a href" not in body
    assert "@import" not in html.split("</style>", 1)[0]
    assert "&lt;script&gt;" in body and "&lt;img src=&#34;http://example.invalid/track.png&#34;&gt;" in body
    assert "[shortened; 5,000 characters in full]" in body
    assert HOSTILE["rtl"] in body and HOSTILE["cjk"] in body
    assert "L" * 1300 not in body, "very long text is shortened"
    head = html.split("<body>", 1)[0]
    assert head.count("<meta ") == 5 and "<span" not in head, "attributes stay intact"
    text = _pdf_text(out / "model_card.pdf")
    assert "<script>alert('x')</script>" in text, "hostile text is printed as text"
    assert "Release 2.0<b>" in text and "released 2026-02-01" in text and "Working draft" not in text
    reader = PdfReader(str(out / "model_card.pdf"))
    assert len(reader.pages) < 20
    for page in reader.pages:  # nothing is laid out beyond the page edge
        width = float(page.mediabox.width)
        boxes = []
        page.extract_text(visitor_text=lambda t, cm, tm, fd, fs: boxes.append((tm[4] * cm[0] + cm[4], t)))
        assert all(x <= width + 1 for x, t in boxes if t.strip()), [t for x, t in boxes if x > width + 1][:3]


@pytest.mark.e2e
def test_caveats_are_generated_from_the_findings(demo_run, tmp_path):
    copy = tmp_path / "lease_demo"
    shutil.copytree(demo_run, copy, ignore=shutil.ignore_patterns("card"))
    run = card_loader.load_run(card_loader.folder_inputs(copy))
    run["diagnostics"]["events_per_parameter"] = 6.5  # Peduzzi et al. (1996): below 10
    run["metrics"]["overall"]["calibration_slope"] = 0.71  # outside [0.8, 1.2]
    first = run["table"]["rows"][0]
    failed_cv = {k: first[k] for k in ("candidate", "kind", "n_parameters")} | {
        "status": "failed", "reason": "quasi-complete separation on <x>", "folds": [], "pooled": None}
    run["table"]["rows"][0] = selection.comparison_row(failed_cv) | {"selected": False}  # exactly as compare writes it
    assert "log_loss_mean" not in run["table"]["rows"][0]
    run["diagnostics"]["leakage"]["suspected"] = [{"feature": "days_past_due_at_review", "auc": 0.99}]
    run["diagnostics"]["vif"]["flagged"] = [{"column": "credit_score", "vif": 14.2}]
    run["split"]["base_rate_test"]["p_value"] = 0.0004
    run["manifest"]["git"] = {"commit": "f" * 40, "dirty": True}
    attention = {f["check"]: f for f in card_findings.findings(run) if f["status"] == "attention"}
    assert "6.5" in attention["Events per parameter (training)"]["found"]
    assert attention["Calibration slope (test)"]["found"] == "0.710"
    assert "quasi-complete separation" in attention["Candidates that could not be fitted"]["found"]
    assert "days_past_due_at_review" in attention["Suspected leaks"]["found"]
    assert "credit_score" in attention["Variance inflation"]["found"]
    assert "< 0.001" in attention["Base-rate drift between training and test"]["found"]
    assert "uncommitted changes" in attention["Code state"]["found"]
    young = next(r for r in run["subgroups"]["attributes"]["owner_age_band"]["rows"] if r["group"] == "18-34")
    assert f"18-34 ({fmt_fixed(young['adverse_impact_ratio'])})" in attention["Groups below the four-fifths screen"]["found"]
    assert all(f["advice"] for f in attention.values())
    html = card.render_html(card.build_context(run, release=None))
    for f in attention.values():
        assert str(escape(f["advice"])) in html
    # the reason spans the metric columns; the status column says only "failed"
    assert "the candidate could not be fitted: quasi-complete separation on &lt;x&gt;</td>" in html
    assert '<td class="failed"><b>failed</b></td>' in html


@pytest.mark.e2e
def test_a_penalised_selection_shows_its_penalty_instead_of_wald_intervals(demo_run, tmp_path):
    copy = tmp_path / "lease_demo"
    shutil.copytree(demo_run, copy, ignore=shutil.ignore_patterns("card"))
    artifacts.in_folder(copy, "comparison/selected.json").write_text(json.dumps({"candidate": "lasso", "reason": "test"}))
    run = card_loader.load_run(card_loader.folder_inputs(copy))
    html = card.render_html(card.build_context(run, release=None))
    penalty = run["model"]["penalty"]
    assert f"C = {penalty['C']:g} chosen from" in html and "Standardised coefficient" in html
    assert "Odds ratio" not in html


@pytest.mark.e2e
def test_card_states_its_definitions_units_and_the_deciding_numbers(demo_run, demo_text):
    text = _squash(demo_text)
    choice, metrics = _load(demo_run, "threshold/choice.json"), _test_metrics(demo_run)
    selected, table = _load(demo_run, "comparison/selected.json"), _load(demo_run, "comparison/table.json")
    assert _squash("Kolmogorov–Smirnov statistic (KS): the largest gap between the cumulative score distributions "
                   "of events and non-events") in text
    assert _squash("(29 CFR 1607.4(D)). The four-fifths rule comes from US employment-selection guidelines and is "
                   "applied here to lending and clinical decisions by analogy.") in text
    # the Hosmer–Lemeshow grouping rule, with the number of groups of this run
    groups = len(metrics["hosmer_lemeshow"]["groups"])
    assert _squash(f"Its groups: rows sorted by predicted probability and cut before sorted positions ⌊n·k/g⌋ "
                   f"(k = 1 … g − 1, g = {groups} here), each cut moved up past tied predictions") in text
    # costs carry their unit (the demo declares no currency), and the tile compares like with like
    assert _squash("Cost per 1,000 cases (cost units)") in text and _squash("Cost per case (cost units)") in text
    flag_none = card.trivial_costs_on_test(metrics, choice["costs"])["flag_none"]
    assert _squash(f"flag none on the same test cases: {fmt_fixed(flag_none, 0)} cost units") in text
    assert _squash(f"flag none: {fmt_fixed(choice['cost_per_1000']['flag_none'], 0)} (training)") not in text
    # the reason with its numbers, and the baseline's calibration shown as not applicable
    decision = selected["decision"]
    assert _squash(f"one standard error {decision['standard_error']:.5f}") in text
    assert "notapplicable" in text and "-4.001" not in demo_text and "−4.001" not in demo_text
    baseline = next(r for r in table["rows"] if r["candidate"] == "baseline")
    assert baseline["calibration_slope_pooled"] is None and baseline["not_applicable"]["calibration_slope"]
