"""The analyst's serial script: the statistical work of an oddsmith build with the usual libraries' own solvers.

The same script as ``bench/serial.py`` (pandas, the 75/25 stratified split, five stratified
folds, statsmodels Newton for logit, probit and the cloglog GLM, refit on the whole training
part, one-standard-error pick on log loss, cost cut-off with a 300-resample stratified
bootstrap, test and segment scores), except the penalised candidates: here they are what an
analyst reaches for, scikit-learn's ``LogisticRegressionCV`` with its own solvers — saga for
L1 (liblinear would penalise the intercept, a different model), lbfgs for L2 — over the
config's grid with the same 3 stratified inner folds (scored by log loss), refitted on the
outer training rows at the chosen C.

The grid needs no conversion: oddsmith's ``grid`` holds C of scikit-learn's own objective,
``C · Σ log loss + penalty`` (``penalty = ‖w‖₁`` for L1, ``½‖w‖²`` for L2, intercept not
penalised; oddsmith/fitting/solvers.py minimises the same sum), so the values are passed as ``Cs``
as they are. Read as a penalty on the mean loss, each C is ``λ = 1 / (n · C)`` with ``n``
the rows of that fit (so λ differs between inner fits, outer fits and refit, equally in
both implementations). Solver settings: scikit-learn's default tolerance (1e-4) with
``max_iter`` raised to 1,000 so that saga is not stopped before it meets it; the number of
fits that still stopped early is reported.

Usage::

    python bench/serial_analyst.py --project bench/work/n100000 --out bench/work/n100000/analyst.json
"""

from __future__ import annotations

import json
import warnings

import numpy as np
from sklearn.exceptions import ConvergenceWarning
from sklearn.linear_model import LogisticRegressionCV
from sklearn.model_selection import StratifiedKFold

import serial

#: Fits (of all candidates) that stopped at max_iter before reaching the tolerance.
STOPPED_EARLY = []


def fit_penalised(X: np.ndarray, y: np.ndarray, *, grid: list[float], inner_folds: int,
                  l1_ratio: float, seed: int):
    """scikit-learn's cross-validated logistic regression over ``grid``, refitted at the best C."""
    inner = StratifiedKFold(n_splits=inner_folds, shuffle=True, random_state=seed)
    model = LogisticRegressionCV(Cs=sorted(grid), l1_ratios=[l1_ratio], cv=inner, scoring="neg_log_loss",
                                 solver="saga" if l1_ratio > 0 else "lbfgs", max_iter=1000, refit=True,
                                 use_legacy_attributes=False)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", ConvergenceWarning)
        model.fit(X, y)
    STOPPED_EARLY.extend(str(w.message) for w in caught if issubclass(w.category, ConvergenceWarning))

    def predict(Z):
        return model.predict_proba(Z)[:, 1]
    predict.C = float(np.ravel(model.C_)[0])  # reported beside the results
    return predict


if __name__ == "__main__":
    out = serial.main(penalised=fit_penalised, description=__doc__)
    summary = json.loads(out.read_text())
    summary["fits_stopped_at_max_iter"] = len(STOPPED_EARLY)
    out.write_text(json.dumps(summary, indent=1))
