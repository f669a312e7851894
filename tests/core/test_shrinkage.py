"""Uniform shrinkage by a bootstrap's corrected calibration slope, checked by hand computations."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
import statsmodels.api as sm
from scipy.optimize import brentq
from scipy.special import expit

from twofold.core.errors import TwofoldError
from twofold.core.models.updating import shrink_model, shrinkage_refusal
from twofold.core.outputs.predict import FrozenModel

SAMPLES = Path(__file__).resolve().parents[2] / "sample_studies"


def _simulated(seed=3, n=400):
    rng = np.random.default_rng(seed)
    X = np.column_stack([np.ones(n), rng.normal(size=n), rng.binomial(1, 0.4, n)])
    beta = np.array([-1.0, 0.8, 0.6])
    y = (rng.random(n) < expit(X @ beta)).astype(float)
    fit = sm.GLM(y, X, family=sm.families.Binomial()).fit()
    model = FrozenModel("y", 1, "maximum likelihood", ("intercept", "x", "g[1]"), np.asarray(fit.params),
                        np.asarray(fit.cov_params()), ())
    return X, y, model


def test_shrunk_coefficients_are_the_slope_times_the_fitted_ones_with_a_matching_intercept():
    X, y, model = _simulated()
    s = 0.83
    shrunk = shrink_model(model, X, y, s)
    b = model.coefficients
    # Van Houwelingen & Le Cessie (1990), Steyerberg (2019): slopes times the shrinkage factor.
    assert shrunk.model.coefficients[1:] == pytest.approx(s * b[1:], rel=1e-12)
    # Intercept, route 1: the binomial GLM of statsmodels with the shrunk slopes' linear predictor as an offset.
    offset = X[:, 1:] @ (s * b[1:])
    glm = sm.GLM(y, np.ones((len(y), 1)), family=sm.families.Binomial(), offset=offset).fit()
    assert shrunk.intercept == pytest.approx(float(glm.params[0]), abs=1e-7)
    # Route 2, independent of any regression code: the score equation sum(y - p) = 0 solved by scipy's brentq.
    root = brentq(lambda a: np.sum(y - expit(a + offset)), -20, 20, xtol=1e-12)
    assert shrunk.intercept == pytest.approx(root, abs=1e-7)
    # So the shrunk risks add up to the observed events (calibration-in-the-large kept).
    assert expit(X @ shrunk.model.coefficients).sum() == pytest.approx(y.sum(), rel=1e-8)
    assert shrunk.model.coefficients[0] == shrunk.intercept


def test_shrinking_pulls_risks_toward_the_average_and_keeps_their_order():
    X, y, model = _simulated(seed=5)
    before = expit(X @ model.coefficients)
    after = expit(X @ shrink_model(model, X, y, 0.7).model.coefficients)
    assert np.std(after) < np.std(before)
    assert np.array_equal(np.argsort(before, kind="stable"), np.argsort(after, kind="stable"))


@pytest.mark.parametrize("factor", [1.0, 1.2, 0.0, -0.3, float("nan"), None])
def test_a_factor_outside_zero_to_one_is_refused_in_one_sentence(factor):
    X, y, model = _simulated()
    assert shrinkage_refusal(factor) is not None
    with pytest.raises(TwofoldError) as err:
        shrink_model(model, X, y, factor)
    assert str(err.value).count(". ") == 0


def test_fit_shrink_saves_the_shrunk_model_that_predict_uses(tmp_path, capsys):
    from twofold.cli import main

    session = tmp_path / "s.json"
    data = SAMPLES / "wound_infection_synthetic.csv"
    code = main(["fit", str(data), "--outcome", "infection", "--event", "yes", "--predictor", "age", "diabetes",
                 "operation_minutes", "--validate", "60", "--seed", "1", "--shrink", "--session-out", str(session),
                 "--json", "-"])
    assert code == 0
    record = json.loads(capsys.readouterr().out)
    slope = record["validation"]["calibration_slope_corrected"]
    assert slope < 1
    sh = record["shrinkage"]
    assert sh["factor"] == pytest.approx(slope)
    fitted = {t["column"] + ("" if t["level"] is None else f"[{t['level']}]"): t["estimate"] for t in record["terms"]}
    for entry in sh["coefficients"][1:]:
        assert entry["estimate"] == pytest.approx(slope * fitted[entry["name"]], rel=1e-12)
    saved = json.loads(session.read_text())
    assert saved["model"]["coefficients"] == [e["estimate"] for e in sh["coefficients"]]
    # predict uses the shrunk model: its risk by hand from the shrunk coefficients.
    main(["predict", str(session), "--value", "age=60", "--value", "diabetes=no", "--value",
          "operation_minutes=100", "--json", "-"])
    out = json.loads(capsys.readouterr().out)
    c = {e["name"]: e["estimate"] for e in sh["coefficients"]}
    by_hand = expit(c["intercept"] + 60 * c["age"] + 100 * c["operation_minutes"])
    assert out["probability"] == pytest.approx(by_hand, rel=1e-12)


def test_shrink_without_validate_exits_2(capsys):
    from twofold.cli import main

    with pytest.raises(SystemExit) as e:
        main(["fit", str(SAMPLES / "wound_infection_synthetic.csv"), "--outcome", "infection", "--event", "yes",
              "--predictor", "age", "--shrink"])
    assert e.value.code == 2
    assert "--validate" in capsys.readouterr().err
