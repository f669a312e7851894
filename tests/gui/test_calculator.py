"""The risk calculator: one patient's predicted risk from the model shown, checked by hand.

Outside reference: statsmodels ``Logit`` fitted on a design built here with
pandas from the same CSV rows (complete rows of the predictors used), then
p = expit(x'b) with the 95% interval expit(x'b -/+ z sqrt(x'Vx)) on the logit
scale, z = scipy.stats.norm.ppf(0.975), using statsmodels' ``params`` and
``cov_params()``.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy.special import expit
from scipy.stats import norm

from gui_helpers import READMISSION, WAIT_MS, choose_outcome, idle, load, tick

OUTCOME = "readmitted_30d"


def _open_calculator(qtbot, window, predictors):
    c = window.open_calculator()
    qtbot.waitUntil(lambda: idle(window) and c.model is not None
                    and set(c.model.predictors) == set(predictors), timeout=WAIT_MS)
    return c


def _answer(qtbot, window, c):
    qtbot.waitUntil(lambda: idle(window) and (c.last_prediction is not None or bool(c.problem.text())),
                    timeout=WAIT_MS)
    return c.last_prediction


def _statsmodels_risk(X: pd.DataFrame, y, x: np.ndarray):
    """Risk and 95% interval for the design row x, by hand from statsmodels' fit of X."""
    import statsmodels.api as sm

    res = sm.Logit(y, X).fit(disp=0, method="newton", tol=1e-12, maxiter=100)
    b, V = res.params.to_numpy(), res.cov_params().to_numpy()
    eta = float(x @ b)
    se = float(np.sqrt(x @ V @ x))
    z = norm.ppf(0.975)
    return expit(eta), expit(eta - z * se), expit(eta + z * se)


@pytest.fixture
def fitted(qtbot, window):
    load(qtbot, window, READMISSION)
    choose_outcome(qtbot, window, OUTCOME)
    return window


def test_risk_matches_a_hand_computation_from_statsmodels(qtbot, fitted):
    window = fitted
    predictors = ["age", "sex", "discharge_destination"]
    tick(qtbot, window, predictors)
    c = _open_calculator(qtbot, window, predictors)
    assert set(c.fields) == set(predictors)
    sex, dest = c.model.term("sex"), c.model.term("discharge_destination")
    patient = {"age": 72, "sex": "M", "discharge_destination": "care_home"}
    for k, v in patient.items():
        c.set_value(k, v)
    got = _answer(qtbot, window, c)
    assert got is not None, c.problem.text()

    df = pd.read_csv(READMISSION)[predictors + [OUTCOME]].dropna()
    # Indicator columns against the model's reference groups, built here from the raw text.
    (sex_other,) = sex.levels
    others = [lvl for lvl in df["discharge_destination"].unique() if lvl != dest.reference]
    X = pd.DataFrame({"const": 1.0, "age": df["age"].astype(float),
                      "sex": (df["sex"].astype(str) == str(sex_other)).astype(float)})
    for lvl in others:
        X["dest_" + lvl] = (df["discharge_destination"] == lvl).astype(float)
    x = np.array([1.0, 72.0, float(sex_other == "M")] + [float(lvl == "care_home") for lvl in others])
    p, lo, hi = _statsmodels_risk(X, df[OUTCOME].astype(float), x)
    assert got.probability == pytest.approx(p, rel=1e-6)
    assert got.ci_low == pytest.approx(lo, rel=1e-6)
    assert got.ci_high == pytest.approx(hi, rel=1e-6)
    # What the user reads: the percentage, its interval, and the caution in the same panel.
    assert f"{100 * p:.1f}%" in c.result.text()
    assert f"{100 * lo:.1f}%" in c.interval.text() and f"{100 * hi:.1f}%" in c.interval.text()
    assert "not a clinical decision" in c.caution.label.text()
    assert "licensed clinicians and local policy" in c.caution.label.text()
    assert c.caution.isVisible() and c.result.isVisible()


def test_interaction_needs_no_field_and_matches_statsmodels(qtbot, fitted):
    window = fitted
    rid = window.session.set_predictors(("age", "sex", "age:sex"))
    qtbot.waitUntil(lambda: idle(window) and window.session.is_current("results", rid)
                    and window.results_pane.view is not None, timeout=WAIT_MS)
    c = _open_calculator(qtbot, window, ["age", "sex", "age:sex"])
    assert set(c.fields) == {"age", "sex"}  # the product is made from its two predictors
    ref = c.model.term("sex").reference
    other = "M" if ref == "F" else "F"
    c.set_value("age", 58.5)
    c.set_value("sex", other)
    got = _answer(qtbot, window, c)
    assert got is not None, c.problem.text()

    df = pd.read_csv(READMISSION)[["age", "sex", OUTCOME]].dropna()
    ind = (df["sex"].astype(str) == other).astype(float)
    X = pd.DataFrame({"const": 1.0, "age": df["age"].astype(float), "sex": ind, "product": df["age"] * ind})
    p, lo, hi = _statsmodels_risk(X, df[OUTCOME].astype(float), np.array([1.0, 58.5, 1.0, 58.5]))
    assert (got.probability, got.ci_low, got.ci_high) == pytest.approx((p, lo, hi), rel=1e-6)


def _harrell_rcs(x: np.ndarray, knots: np.ndarray) -> np.ndarray:
    """Restricted cubic spline columns by Harrell's formula (Regression Modeling Strategies, 2nd ed.,
    2015, section 2.4.5): x itself, then for j = 1..k-2
    (x-t_j)+^3 - (x-t_{k-1})+^3 (t_k-t_j)/(t_k-t_{k-1}) + (x-t_k)+^3 (t_{k-1}-t_j)/(t_k-t_{k-1}).
    Any scaling of the columns gives the same predicted risks, so none is applied."""
    t = knots
    k = len(t)
    pos = lambda u: np.clip(u, 0, None) ** 3  # noqa: E731
    cols = [x]
    for j in range(k - 2):
        cols.append(pos(x - t[j]) - pos(x - t[k - 2]) * (t[k - 1] - t[j]) / (t[k - 1] - t[k - 2])
                    + pos(x - t[k - 1]) * (t[k - 2] - t[j]) / (t[k - 1] - t[k - 2]))
    return np.column_stack(cols)


def test_spline_matches_statsmodels_on_harrell_basis(qtbot, fitted):
    window = fitted

    def shape(ws):
        ws.set_predictors(("age", "sex"))
        ws.set_spline("age", 4)

    rid = window.session.run_modelling(shape)
    qtbot.waitUntil(lambda: idle(window) and window.session.is_current("results", rid)
                    and window.results_pane.view is not None, timeout=WAIT_MS)
    c = _open_calculator(qtbot, window, ["age", "sex"])
    term = c.model.term("age")
    assert term.kind == "spline" and set(c.fields) == {"age", "sex"}
    df = pd.read_csv(READMISSION)[["age", "sex", OUTCOME]].dropna()
    age = df["age"].to_numpy(float)
    # Harrell's default knot places for 4 knots: the 5th, 35th, 65th and 95th centiles (common practice).
    assert np.allclose(term.knots, np.quantile(age, [0.05, 0.35, 0.65, 0.95]), rtol=0, atol=1.0)
    knots = np.asarray(term.knots)
    ref = c.model.term("sex").reference
    c.set_value("age", 81)
    c.set_value("sex", ref)
    got = _answer(qtbot, window, c)
    assert got is not None, c.problem.text()

    basis = _harrell_rcs(age, knots)
    X = pd.DataFrame(basis, columns=[f"s{j}" for j in range(basis.shape[1])], index=df.index)
    X.insert(0, "const", 1.0)
    X["sex"] = (df["sex"].astype(str) != str(ref)).astype(float)
    x = np.concatenate([[1.0], _harrell_rcs(np.array([81.0]), knots)[0], [0.0]])
    p, lo, hi = _statsmodels_risk(X, df[OUTCOME].astype(float), x)
    assert (got.probability, got.ci_low, got.ci_high) == pytest.approx((p, lo, hi), rel=1e-5)


def test_values_outside_the_data_are_refused_beside_the_fields(qtbot, fitted):
    window = fitted
    tick(qtbot, window, ["age", "sex"])
    c = _open_calculator(qtbot, window, ["age", "sex"])
    c.set_value("sex", "F")
    assert c.last_prediction is None and "still empty: age" in c.problem.text()
    c.set_value("age", 140)
    _answer(qtbot, window, c)
    assert c.last_prediction is None
    assert "outside the range" in c.problem.text() and "140" in c.problem.text()
    assert not window.message.isVisible()  # the calculator's own message, not the window's problem strip


def test_fields_follow_the_model_shown(qtbot, fitted):
    window = fitted
    tick(qtbot, window, ["age"])
    c = _open_calculator(qtbot, window, ["age"])
    c.set_value("age", 60)
    _answer(qtbot, window, c)
    tick(qtbot, window, ["age", "lives_alone"])
    qtbot.waitUntil(lambda: idle(window) and set(c.fields) == {"age", "lives_alone"}, timeout=WAIT_MS)
    assert c.fields["age"].text() == "60"  # kept for the predictor the models share
    assert "lives_alone" in c.problem.text()
    window.model_pane.untick_all()  # the constant-only model: no field, one risk for everyone
    qtbot.waitUntil(lambda: idle(window) and c.model is not None and not c.model.predictors, timeout=WAIT_MS)
    got = _answer(qtbot, window, c)
    assert c.fields == {} and got is not None
    # An intercept-only logistic fit reproduces the share of events among its rows (the likelihood
    # equation for the intercept), here the rows complete for every predictor tried in the ladder.
    rows = pd.read_csv(READMISSION)[["age", "lives_alone", OUTCOME]].dropna()
    assert got.probability == pytest.approx(rows[OUTCOME].mean(), rel=1e-8)


def test_nothing_typed_is_kept_anywhere(qtbot, fitted, home, tmp_path, monkeypatch):
    """Typed values never reach a saved analysis, the autosave, the settings or the log."""
    window = fitted
    window.sessions.enable_autosave()
    tick(qtbot, window, ["age", "discharge_destination"])
    c = _open_calculator(qtbot, window, ["age", "discharge_destination"])
    typed_ok, typed_far = "66.6061", "213.625"
    c.set_value("discharge_destination", "other_hospital")
    c.set_value("age", typed_ok)
    assert _answer(qtbot, window, c) is not None
    c.set_value("age", typed_far)  # refused, with a message that quotes it
    _answer(qtbot, window, c)
    assert typed_far in c.problem.text()

    # An unexpected failure is logged, but without its message (it could quote a value).
    import twofold.core.outputs.predict as core_predict

    def broken(model, values):
        raise ValueError(f"cannot use {values}")

    real = core_predict.predict
    monkeypatch.setattr(core_predict, "predict", broken)
    c.set_value("age", typed_ok)
    qtbot.waitUntil(lambda: idle(window) and "Something unexpected" in c.problem.text(), timeout=WAIT_MS)
    monkeypatch.setattr(core_predict, "predict", real)

    saved = []
    window.sessions.finished.connect(lambda tag, payload: saved.append((tag, payload)))
    window.sessions.save_to(tmp_path / "analysis.json")
    tick(qtbot, window, ["age"])  # a new result: autosaved while the values are still typed
    qtbot.waitUntil(lambda: idle(window) and {"saved", "autosaved"} <= {t for t, _ in saved}, timeout=WAIT_MS)
    window.settings.sync()
    logs = list(home.rglob("*.log"))
    assert logs and "risk calculator" in "".join(p.read_text(encoding="utf-8") for p in logs)

    def everything() -> str:
        files = [p for p in list(home.rglob("*")) + list(tmp_path.rglob("*")) if p.is_file()]
        assert any(p.name.startswith("session-") for p in files) and any(p.suffix == ".ini" for p in files)
        return "\n".join(p.read_bytes().decode("utf-8", errors="replace") for p in files)

    text = everything()
    assert typed_ok not in text and typed_far not in text
    # Closing the panel empties it: the next person sees no earlier patient's values.
    c.close()
    c = window.open_calculator()
    qtbot.waitUntil(lambda: idle(window) and c.model is not None, timeout=WAIT_MS)
    assert all((w.text() == "" if hasattr(w, "text") else w.currentData() is None) for w in c.fields.values())


def test_a_decimal_comma_typed_in_the_calculator_is_read_as_a_decimal(qtbot, fitted):
    # Reference: statsmodels' risk at age 72.5 (hand computation as above); the user types "72,5".
    from PySide6.QtCore import Qt

    window = fitted
    tick(qtbot, window, ["age"])
    c = _open_calculator(qtbot, window, ["age"])
    qtbot.waitUntil(lambda: idle(window), timeout=WAIT_MS)
    box = c.fields["age"]
    box.clear()
    qtbot.keyClicks(box, "72,5")
    qtbot.keyClick(box, Qt.Key.Key_Return)  # Enter works the risk out (and clears nothing)
    qtbot.waitUntil(lambda: idle(window) and (c.last_prediction is not None or "72" in c.problem.text()),
                    timeout=WAIT_MS)
    assert c.last_prediction is not None, (box.text(), c.problem.text())
    got = c.last_prediction
    df = pd.read_csv(READMISSION)[["age", OUTCOME]].dropna()
    X = pd.DataFrame({"const": 1.0, "age": df["age"].astype(float)})
    p, _, _ = _statsmodels_risk(X, df[OUTCOME].astype(float), np.array([1.0, 72.5]))
    assert got.probability == pytest.approx(p, rel=1e-6)
    # An ambiguous "1,250" is refused in words that suit the window (no command-line syntax).
    box.clear()
    qtbot.keyClicks(box, "1,250")
    qtbot.keyClick(box, Qt.Key.Key_Return)
    qtbot.waitUntil(lambda: "could mean 1250 or 1.250" in c.problem.text(), timeout=WAIT_MS)
    assert "=" not in c.problem.text()


def test_an_unexpected_failure_never_says_details_are_in_none(monkeypatch):
    # When Twofold's own folder cannot be written, the log cannot be kept: the sentence says so instead of
    # naming a file that does not exist ("details in None").
    from twofold.core.outputs import predict as predict_module
    from twofold.gui import calculator, worker

    def broken(model, values):
        raise RuntimeError("something inside went wrong with 72.5")

    monkeypatch.setattr(predict_module, "predict", broken)
    monkeypatch.setattr(worker, "log_exception", lambda exc: None)
    message = calculator._predict_job(object(), {"age": "72.5"})
    assert "None" not in message and "could not be kept" in message
    assert "72.5" not in message  # nothing typed by the user is repeated
