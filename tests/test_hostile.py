"""A corpus of hostile inputs, tampers and kills, each ending the same way: a non-zero exit,
the column, key or file at fault named on the terminal, the input untouched and nothing
written (no new file under results/; a published result unchanged and verifying).

Cases already covered one by one elsewhere are not repeated here; they are counted in
``EXISTING`` so the corpus can be read as a whole. Everything is generated from the demo data
at test time. The cheap cases run through the package (``run_validate``, ``oddsmith.cli.main``
in this process); a few run through the real command line and Snakemake in CI, and the whole
data table does so under ``-m slow``, as do the kills.
"""

from __future__ import annotations

import os
import shutil
import signal
import subprocess
import time
from dataclasses import dataclass
from pathlib import Path
from typing import Callable

import pytest

from oddsmith.cli import main
from oddsmith.evidence.verify import verify_results
from oddsmith.io import sha256_file

from conftest import BIN, DEMO_CONFIG, ROOT, copy_project, small_build
from test_io import alias_bomb
from test_validate import _demo_frame, _expect_failure, _run, cfg  # noqa: F401 (cfg is a fixture)

# Cases of this corpus that live in other modules (module: test names), counted, not repeated.
EXISTING = {
    "test_validate": ["missing_file", "empty_file", "header_only", "wrong_delimiter", "missing_required_column",
                      "extra_column_rejected_or_ignored", "bad_target_values[2]", "bad_target_values[yes]",
                      "bad_target_values[blank]", "only_one_class", "all_problems_reported_at_once", "missing_id",
                      "utf8_bom_is_accepted", "latin1_refused_then_accepted_when_declared", "target_not_in_contract",
                      "workflow_stops_before_any_output_on_bad_data (duplicate id)", "alias bomb in a config file",
                      "workflow_refuses_bad_config", "sensitive_attribute_with_one_group",
                      "row_with_more_fields_than_the_header", "repeated_header_name", "a_huge_cell_is_quoted_cut",
                      "blank_sensitive_attribute", "five_rows_are_too_few", "more_folds_than_a_class_has",
                      "cutoff_date_outside_the_dates", "level_seen_only_in_the_test_part",
                      "more_parameters_than_rows", "numeric_sensitive_attribute_needs_bands"],
    "test_config": ["unknown_key", "wrong_type", "missing_required_key", "several_problems",
                    "data_path_outside_project", "bad_costs x4", "interaction_with_unknown_feature",
                    "split_fraction_outside_unit_interval", "read_config_file_errors", "bad_bands x6",
                    "long_values_are_cut"],
    "test_io": ["syntax_error_line_and_column", "contract_syntax_error", "anchors_and_aliases x2",
                "alias_bomb under 4 kinds of key"],
    "test_verify": ["missing/extra/changed", "stamp output hash", "input hash", "raw input hash",
                    "damaged manifests x7", "hand-edited manifest", "paths leaving the folder", "symlinks",
                    "card bound to another manifest", "unlisted files x5", "empty folders x3", "second name",
                    "never runs code", "flipped byte in each kind of artifact x12"],
    "test_publish": ["incomplete or unverified build x3", "interrupted swap", "bad config before Snakemake",
                     "no config / two configs x2"],
    "test_rebuild": ["killed during fit", "killed during the card", "broken data keeps the result",
                     "broken config keeps the result", "raw inputs differ from the record"],
    "test_score": ["bad batches", "bad batch writes nothing", "batch outside the project", "folder without a model",
                   "incompatible formats", "tampered folder (score)", "non-empty output folder"],
}


def _tree(folder: Path) -> dict:
    """Every file under ``folder`` with its hash (symlinks by target): the 'nothing changed' check."""
    if not folder.exists():
        return {}
    return {p.relative_to(folder).as_posix(): (os.readlink(p) if p.is_symlink() else sha256_file(p) if p.is_file() else "/")
            for p in sorted(folder.rglob("*"))}


# ============================================================================ bad data

@dataclass(frozen=True)
class Bad:
    """One hostile data file: how to make it from the demo rows, and what the message must name."""

    name: str
    make: Callable[[Path], None]  # writes the file at the given path
    named: tuple[str, ...]
    cli: tuple[str, ...] = ()  # what the terminal names under the demo's own config, when it differs


def _frame_with(change) -> Callable[[Path], None]:
    def make(path: Path) -> None:
        frame = _demo_frame()
        change(frame)
        frame.to_csv(path, index=False)
    return make


def _set(column: str, rows, value) -> Callable[[Path], None]:
    def change(frame):
        frame.loc[rows, column] = value
    return _frame_with(change)


def _text_with(edit) -> Callable[[Path], None]:
    def make(path: Path) -> None:
        _demo_frame().to_csv(path, index=False)
        path.write_bytes(edit(path.read_bytes()))
    return make


def _bytes(data: bytes) -> Callable[[Path], None]:
    return lambda path: path.write_bytes(data)


def _assign(column: str, value) -> Callable[[Path], None]:
    return _frame_with(lambda frame: frame.__setitem__(column, value))


def _head(n: int) -> Callable[[Path], None]:
    return lambda path: _demo_frame(n).to_csv(path, index=False)


def _three_levels(frame):
    frame.loc[::3, "serious_delinquency"] = "2"  # many rows, not one stray value


def _short_row(text: bytes) -> bytes:
    lines = text.split(b"\n")
    lines[4] = lines[4].rsplit(b",", 2)[0]  # two fields missing on line 5
    return b"\n".join(lines)


def _header_renamed(old: str, new: str) -> Callable[[bytes], bytes]:
    return lambda text: text.replace(old.encode(), new.encode(), 1)


BAD_DATA = [
    # wrong types
    Bad("text_in_integer", _set("credit_score", [7], "excellent"), ("credit_score", "LA-000008='excellent'")),
    Bad("decimal_in_integer", _set("prior_late_payments", [3], "1.5"), ("prior_late_payments", "LA-000004='1.5'")),
    Bad("comma_decimal_in_float", _set("debt_service_ratio", [5], "0,45"), ("debt_service_ratio", "LA-000006='0,45'")),
    Bad("date_in_other_format", _set("application_date", [2], "01/03/2023"), ("application_date", "LA-000003='01/03/2023'")),
    Bad("impossible_date", _set("application_date", [9], "2023-02-30"), ("application_date", "LA-000010='2023-02-30'")),
    Bad("word_inf_in_float", _set("annual_revenue_k", [1], "inf"), ("annual_revenue_k", "LA-000002")),
    Bad("overflowing_number", _set("lease_amount_k", [1], "1e400"), ("lease_amount_k", "LA-000002")),
    # out of range
    Bad("above_maximum", _set("credit_score", [11, 12], "9999"), ("credit_score", "2 row(s)", "LA-000012")),
    Bad("negative_amount", _set("lease_amount_k", [0], "-5"), ("lease_amount_k", "LA-000001")),
    Bad("date_before_minimum", _set("application_date", [4], "1901-01-01"), ("application_date", "LA-000005")),
    # unknown levels
    Bad("unknown_region", _set("region", [6], "atlantis"), ("region", "LA-000007='atlantis'")),
    Bad("level_in_other_case", _set("equipment_type", [8], "Medical"), ("equipment_type", "LA-000009='Medical'")),
    Bad("formula_as_level", _set("region", [10], "=HYPERLINK(\"x\")"), ("region", "LA-000011")),
    Bad("unknown_sensitive_level", _set("owner_age_band", [3], "99+"), ("owner_age_band", "LA-000004='99+'")),
    Bad("target_as_decimal", _set("serious_delinquency", [2], "1.0"), ("serious_delinquency", "LA-000003='1.0'")),
    # blanks where refused
    Bad("blank_numeric", _set("credit_score", [5], ""), ("credit_score", "not empty", "LA-000006")),
    Bad("blank_category", _set("region", [6, 7], ""), ("region", "not empty", "2 row(s)")),
    Bad("blank_date", _set("application_date", [1], ""), ("application_date", "not empty", "LA-000002")),
    Bad("blank_id", _set("application_id", [3], ""), ("application_id",)),
    Bad("whitespace_cell", _set("credit_score", [5], "   "), ("credit_score", "LA-000006")),
    # file structure
    # a short row would read as blank trailing cells (pandas fills them); it is refused as a short row
    Bad("ragged_short_row", _text_with(_short_row), ("1 row(s) have fewer fields than the header's 14", "line 5 (12)")),
    Bad("unclosed_quote", _text_with(lambda t: t.replace(b"\nLA-000005,", b'\n"LA-000005,', 1)), ("line 6: a double quote opens a value that is never closed",)),
    Bad("header_with_spaces", _text_with(_header_renamed(",region,", ", region ,")), ("region",)),
    Bad("huge_header_name", _text_with(_header_renamed(",region,", "," + "r" * 200_000 + ",")), ("cut; 200,000 characters",)),
    Bad("nul_byte_in_cell", _text_with(lambda t: t.replace(b",coastal,", b",coa\x00stal,", 1)), ("region",)),
    Bad("binary_file", _bytes(bytes(range(256)) * 64), ("byte 0x80 at offset 128",)),
    Bad("gzip_file", _bytes(b"\x1f\x8b\x08\x00" + bytes(200)), ("byte 0x8b at offset 1",)),
    Bad("utf16_file", lambda p: p.write_bytes(_demo_frame(20).to_csv(index=False).encode("utf-16")), ("byte 0xff at offset 0",)),
    Bad("only_blank_lines", _bytes(b"\n\n\n"), ("empty",)),
    # the target
    Bad("target_three_levels", _frame_with(_three_levels), ("serious_delinquency", "isin(['0', '1'])")),
    Bad("all_events", _assign("serious_delinquency", "1"), ("only one class present",)),
    Bad("three_rows", _head(3), ("the data cannot support",),
        cli=("cutoff_date 2025-07-01 is outside the data's date range",)),
]


@pytest.mark.parametrize("bad", BAD_DATA, ids=[b.name for b in BAD_DATA])
def test_bad_data_is_refused_naming_the_column_and_writing_nothing(bad, cfg, tmp_path):
    path = tmp_path / "data.csv"
    bad.make(path)
    message = _expect_failure(cfg, tmp_path, path, *bad.named)
    assert len(message) < 4_000, "the message must stay readable"


@pytest.mark.parametrize("make", [
    _text_with(lambda t: t.replace(b"\n", b"\r\n")),                      # CRLF line ends
    _text_with(lambda t: b"\xef\xbb\xbf" + t.replace(b"\n", b"\r\n")),   # BOM and CRLF
], ids=["crlf", "bom_and_crlf"])
def test_windows_line_ends_give_the_same_snapshot(make, cfg, tmp_path):
    plain, windows = tmp_path / "plain.csv", tmp_path / "windows.csv"
    _head(400)(plain)
    make(windows)
    _run(cfg, plain, tmp_path / "a")
    _run(cfg, windows, tmp_path / "b")
    assert sha256_file(tmp_path / "a" / "data.parquet") == sha256_file(tmp_path / "b" / "data.parquet")


# ---- the same table through the real command line: a few in CI, all with -m slow

def _demo_project(dest: Path) -> Path:
    return copy_project(dest)


def _build(project: Path, *args: str, timeout: float = 600) -> subprocess.CompletedProcess:
    env = dict(os.environ, SOURCE_DATE_EPOCH="1767225600")
    return subprocess.run([str(BIN / "oddsmith"), "build", *args], cwd=project, env=env, capture_output=True,
                          text=True, timeout=timeout)


FAST_CLI = {"binary_file", "ragged_short_row", "target_three_levels"}


def _cli_param(bad: Bad):
    return pytest.param(bad, id=bad.name, marks=() if bad.name in FAST_CLI else pytest.mark.slow)


@pytest.mark.e2e
@pytest.mark.parametrize("bad", [_cli_param(b) for b in BAD_DATA])
def test_bad_data_through_oddsmith_build(bad, tmp_path):
    project = _demo_project(tmp_path / "project")
    data = project / "data_demo" / "lease_applications.csv"
    bad.make(data)
    before = sha256_file(data)
    done = _build(project, DEMO_CONFIG)
    terminal = done.stdout + done.stderr
    assert done.returncode == 1, terminal[-3000:]
    assert "oddsmith: rule validate stopped (" in terminal, terminal[-3000:]
    for fragment in bad.cli or bad.named:
        assert fragment in terminal, f"{fragment!r} not on the terminal:\n{terminal[-3000:]}"
    assert "Traceback" not in terminal
    assert "results/lease_demo holds no result yet" in terminal
    assert sha256_file(data) == before
    assert not (project / "results").exists()
    assert _tree(project / "work" / "lease_demo") == {}


# ============================================================================ bad configs

@dataclass(frozen=True)
class BadConfig:
    name: str
    edit: Callable[[str, Path], str]  # demo config text, project -> the hostile file's text
    named: tuple[str, ...]


def _demo_line(text: str) -> int:
    """The 1-based line of the demo config that holds ``text``."""
    lines = (ROOT / DEMO_CONFIG).read_text(encoding="utf-8").splitlines()
    return next(n for n, line in enumerate(lines, 1) if text in line)


def _replace(old: str, new: str) -> Callable[[str, Path], str]:
    def edit(text: str, project: Path) -> str:
        assert old in text, old
        return text.replace(old, new, 1)
    return edit


def _outside_data(text: str, project: Path) -> str:
    outside = project.parent / "elsewhere.csv"
    shutil.copy(project / "data_demo" / "lease_applications.csv", outside)
    return text.replace("path: data_demo/lease_applications.csv", f"path: {outside}", 1)


BAD_CONFIGS = [
    BadConfig("unknown_top_key", lambda t, p: t + "\nsurprise: 1\n", ("'surprise' was unexpected",)),
    BadConfig("unknown_nested_key", _replace("  false_positive: 1200", "  false_positive: 1200\n  fals_negative: 3"),
              ("costs", "'fals_negative' was unexpected")),
    BadConfig("wrong_type", _replace("false_positive: 1200", "false_positive: twelve"), ("costs.false_positive", "twelve")),
    BadConfig("scalar_for_mapping", _replace("costs:\n  false_positive", "costs: 5\nold_costs:\n  false_positive"),
              ("costs", "'old_costs' was unexpected")),
    BadConfig("yaml_syntax", _replace("  false_positive: 1200", "  false_positive: [1200"), ("line ", "column ")),
    BadConfig("tab_indent", _replace("  false_positive: 1200", "\tfalse_positive: 1200"), ("line ", "column ")),
    BadConfig("duplicate_key", _replace("  false_positive: 1200", "  false_positive: 1200\n  false_positive: 1"),
              (f"line {_demo_line('  false_positive: 1200') + 1}, column 3", "the key 'false_positive' appears twice")),
    BadConfig("empty_file", lambda t, p: "", ("config",)),
    BadConfig("not_a_mapping", lambda t, p: "- run: x\n", ("config",)),
    BadConfig("non_utf8", lambda t, p: t.replace("Equipment", "Equipm\udce9nt", 1), ("not UTF-8 text: byte 0xe9",)),
    BadConfig("alias_bomb_scalar", _replace("  title: Equipment-lease", f"  title: {alias_bomb()}\n  x: "), ("&a0",)),
    BadConfig("alias_bomb_list", lambda t, p: t + f"\nbomb_list:\n  - {alias_bomb()}\n", ("&a0",)),
    BadConfig("alias_bomb_nested", _replace("fairness:\n", f"fairness:\n  groups: {alias_bomb()}\n"), ("&a0",)),
    BadConfig("missing_data_file", _replace("path: data_demo/lease_applications.csv", "path: data_demo/gone.csv"),
              ("data.path", "data_demo/gone.csv", "is not a file")),
    BadConfig("missing_contract", _replace("contract: schemas/contracts/lease_applications.yaml",
                                           "contract: schemas/contracts/gone.yaml"), ("data.contract", "gone.yaml")),
    BadConfig("data_outside_project", _outside_data, ("data.path", "outside the project folder")),
    BadConfig("data_path_escapes", _replace("path: data_demo/lease_applications.csv", "path: ../../../etc/passwd"),
              ("data.path", "outside the project folder")),
    BadConfig("cost_zero", _replace("false_positive: 1200", "false_positive: 0"), ("costs.false_positive", "> 0")),
    BadConfig("cost_negative", _replace("false_positive: 1200", "false_positive: -3"), ("costs.false_positive",)),
    BadConfig("cost_infinite", _replace("false_positive: 1200", "false_positive: .inf"), ("costs.false_positive",)),
    BadConfig("folds_one", _replace("  folds: 5", "  folds: 1"), ("cross_validation.folds",)),
    BadConfig("test_fraction_one", _replace("  seed: 20261202", "  seed: 20261202\n  test_fraction: 1.0"),
              ("split.test_fraction",)),
    BadConfig("target_as_feature", _replace("  - {name: credit_score, type: numeric}",
                                            "  - {name: credit_score, type: numeric}\n  - {name: serious_delinquency, type: numeric}"),
              ("serious_delinquency", "target")),
]


@pytest.mark.parametrize("bad", BAD_CONFIGS, ids=[b.name for b in BAD_CONFIGS])
def test_bad_config_is_refused_by_oddsmith_build_before_anything_runs(bad, tmp_path, monkeypatch, capsys):
    project = _demo_project(tmp_path / "project")
    path = project / "config" / "hostile.yaml"
    text = bad.edit((project / DEMO_CONFIG).read_text(encoding="utf-8"), project)
    path.write_bytes(text.encode("utf-8", errors="surrogateescape"))
    before = _tree(project)
    monkeypatch.chdir(project)
    started = time.monotonic()
    code = main(["build", "config/hostile.yaml"])
    seconds = time.monotonic() - started
    err = capsys.readouterr().err
    assert code == 1, err
    assert "config/hostile.yaml" in err and "nothing was built" in err, err
    for fragment in bad.named:
        assert fragment in err, f"{fragment!r} not in:\n{err}"
    assert len(err) < 4_000 and "Traceback" not in err
    assert _tree(project) == before, "a refused config must leave the project as it was"
    if bad.name.startswith("alias_bomb"):
        assert seconds < 2, f"the bomb took {seconds:.1f} s to refuse"


def test_every_config_case_starts_from_a_valid_demo_config(root, tmp_path, monkeypatch):
    from oddsmith.config import check_config, read_config_file

    project = _demo_project(tmp_path / "project")
    monkeypatch.chdir(project)
    check_config(read_config_file(DEMO_CONFIG), project_dir=".")  # the untouched file passes


def test_build_takes_exactly_one_config(tmp_path, monkeypatch, capsys):
    project = _demo_project(tmp_path / "project")
    monkeypatch.chdir(project)
    before = _tree(project)
    for argv in (["build"], ["build", DEMO_CONFIG, DEMO_CONFIG]):
        with pytest.raises(SystemExit) as stop:
            main(argv)
        assert stop.value.code == 2
    err = capsys.readouterr().err
    assert "the following arguments are required: config" in err and "unrecognized arguments" in err
    assert main(["build", "config/none.yaml"]) == 1
    assert "config/none.yaml" in capsys.readouterr().err
    assert _tree(project) == before


@pytest.mark.e2e
def test_a_feature_missing_from_the_contract_stops_at_validate(tmp_path):
    # the config alone cannot know the contract's columns: the validate job names the feature
    project = _demo_project(tmp_path / "project")
    text = (project / DEMO_CONFIG).read_text().replace("credit_score", "credit_scor")
    (project / "config" / "hostile.yaml").write_text(text)
    done = _build(project, "config/hostile.yaml")
    terminal = done.stdout + done.stderr
    assert done.returncode == 1
    assert "features: column 'credit_scor' is not declared in the data contract" in terminal, terminal[-3000:]
    assert not (project / "results").exists() and _tree(project / "work" / "lease_demo") == {}


# ============================================================================ tampers

def _victim(run_dir: Path) -> str:
    """A listed artifact: the cut-off of a real build, a candidate's record in the small one."""
    return "threshold/choice.json" if (run_dir / "threshold").is_dir() else "candidates/a/cv.json"


def _flip(run_dir: Path) -> str:
    path = run_dir / _victim(run_dir)
    data = bytearray(path.read_bytes())
    data[0] ^= 0x01
    path.write_bytes(bytes(data))
    return f"changed: {_victim(run_dir)}"


def _delete(run_dir: Path) -> str:
    (run_dir / _victim(run_dir)).unlink()
    return _victim(run_dir)


def _add(run_dir: Path) -> str:
    (run_dir / "candidates" / "notes.txt").write_text("mine\n")
    return "extra file not in the manifest: candidates/notes.txt"


def _part(run_dir: Path) -> str:
    (run_dir / "validated" / ".data.x9.part").write_bytes(b"half")
    return "validated/.data.x9.part"


def _dotfile(run_dir: Path) -> str:
    (run_dir / ".DS_Store").write_bytes(b"\x00")
    return ".DS_Store"


def _symlink(run_dir: Path) -> str:
    (run_dir / "candidates" / "alias.json").symlink_to(run_dir / _victim(run_dir))
    return "candidates/alias.json is a symlink"


def _empty_folder(run_dir: Path) -> str:
    (run_dir / "candidates" / "spare").mkdir()
    return "candidates/spare/"


def _edit_manifest(run_dir: Path) -> str:
    path = run_dir / "manifest.json"
    path.write_text(path.read_text().replace('"run": "', '"run": "x', 1))
    return "manifest.json"


def _rebind_card(run_dir: Path) -> str:
    path = run_dir / "card" / "card.sha256"
    path.write_text(path.read_text().replace(sha256_file(run_dir / "manifest.json"), "b" * 64))
    return "card.sha256 was rendered from a different manifest"


def _swap_card(run_dir: Path) -> str:
    (run_dir / "card" / "model_card.pdf").write_bytes(b"%PDF-1.7 another card\n")
    return "changed: card/model_card.pdf"


TAMPERS = [_flip, _delete, _add, _part, _dotfile, _symlink, _empty_folder, _edit_manifest, _rebind_card, _swap_card]
TAMPER_IDS = [t.__name__.strip("_") for t in TAMPERS]


@pytest.fixture()
def published(tmp_path) -> Path:
    """results/demo of a small hand-made build, published as the workflow publishes it."""
    project = tmp_path / "project"
    run_dir = project / "results" / "demo"
    shutil.copytree(small_build(project, "demo"), run_dir)
    assert verify_results(run_dir) == []
    return run_dir


@pytest.mark.parametrize("tamper", TAMPERS, ids=TAMPER_IDS)
def test_a_tampered_result_fails_verify_naming_the_file(tamper, published, capsys):
    named = tamper(published)
    before = _tree(published.parent)
    assert main(["verify", str(published)]) == 1
    out = capsys.readouterr()
    assert named in out.out, out
    assert _tree(published.parent) == before, "checking a folder must not change it"


def test_verify_through_the_command_line_exits_1_on_a_tamper(published):
    named = _flip(published)
    done = subprocess.run([str(BIN / "oddsmith"), "verify", str(published)], capture_output=True, text=True)
    assert done.returncode == 1 and named in done.stdout


@pytest.mark.e2e
@pytest.mark.parametrize("tamper", TAMPERS, ids=TAMPER_IDS)
def test_score_and_rescore_refuse_a_tampered_result(tamper, demo_build, tmp_path, capsys):
    run_dir = shutil.copytree(demo_build / "results" / "lease_demo", tmp_path / "results" / "lease_demo", symlinks=True)
    assert verify_results(run_dir) == []
    named = tamper(run_dir)
    before = _tree(tmp_path / "results")
    batch = str(demo_build / "data_demo" / "lease_applications_2026q1.csv")
    scored = tmp_path / "scored"
    assert main(["score", str(run_dir), batch, "-o", str(scored)]) == 1
    err = capsys.readouterr().err
    assert "manifest" in err and named in err, err
    assert main(["rescore", str(run_dir), "--row", "LB-000002", "--data", batch, "--set", "debt_service_ratio=0.3"]) == 1
    err = capsys.readouterr()
    assert "manifest" in err.err and named in err.err and err.out == "", err
    assert not scored.exists()
    assert _tree(tmp_path / "results") == before, "a refused folder must not change"


# ============================================================================ kills (slow)

def _kill_after(project: Path, log: str, env: dict, *extra: str) -> None:
    """``oddsmith build`` in its own process group, SIGKILLed once the job writing ``log`` starts."""
    started = time.time()
    process = subprocess.Popen([str(BIN / "oddsmith"), "build", DEMO_CONFIG, "--", *extra], cwd=project,
                               env=dict(os.environ) | env, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
                               start_new_session=True)
    try:
        while time.time() - started < 600:
            if (project / log).exists() and (project / log).stat().st_mtime >= started:
                time.sleep(0.3)
                break
            assert process.poll() is None, f"the build ended before {log} was written"
            time.sleep(0.02)
    finally:
        os.killpg(process.pid, signal.SIGKILL)
        process.wait()


def _readme_resume(project: Path, env: dict) -> None:
    """The README's commands after a kill: unlock, then build with --rerun-incomplete."""
    full = dict(os.environ) | env
    unlock = subprocess.run([str(BIN / "snakemake"), "--unlock", "--configfile", DEMO_CONFIG], cwd=project,
                            env=full, capture_output=True, text=True)
    assert unlock.returncode == 0, unlock.stderr[-3000:]
    done = subprocess.run([str(BIN / "oddsmith"), "build", DEMO_CONFIG, "--", "--rerun-incomplete"], cwd=project,
                          env=full, capture_output=True, text=True)
    assert done.returncode == 0, done.stderr[-4000:]


KILL_ENV = {"SOURCE_DATE_EPOCH": "1767225600"}


@pytest.fixture(scope="module")
def built(tmp_path_factory) -> Path:
    project = copy_project(tmp_path_factory.mktemp("built") / "project")
    done = subprocess.run([str(BIN / "oddsmith"), "build", DEMO_CONFIG], cwd=project,
                          env=dict(os.environ) | KILL_ENV, capture_output=True, text=True)
    assert done.returncode == 0, done.stderr[-4000:]
    return project


@pytest.mark.slow
@pytest.mark.e2e
@pytest.mark.parametrize("rule, log", [
    ("validate", "logs/lease_demo/validate.log"),
    ("compare", "logs/lease_demo/compare.log"),
    ("evaluate", "logs/lease_demo/evaluate.log"),
    ("manifest", "logs/lease_demo/manifest.log"),
    ("publish", "logs/lease_demo/publish.log"),
])
def test_a_killed_build_keeps_the_result_and_resumes_to_the_same_card(rule, log, built, tmp_path):
    from test_rebuild import _hashes

    project = shutil.copytree(built, tmp_path / "project", symlinks=True)
    env, run_dir = KILL_ENV, project / "results" / "lease_demo"
    before = _hashes(run_dir)
    _kill_after(project, log, env, "--forcerun", rule)
    assert verify_results(run_dir) == [] and _hashes(run_dir) == before, "a killed build touched results/<run>"
    assert not list((project / "results").glob(".*")) or rule == "publish"
    _readme_resume(project, env)
    assert verify_results(run_dir) == []
    assert (run_dir / "card" / "model_card.pdf").read_bytes() == (built / "results/lease_demo/card/model_card.pdf").read_bytes()
    assert _hashes(run_dir) == before
    assert sorted(p.name for p in (project / "results").iterdir()) == ["lease_demo"]
