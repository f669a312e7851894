"""Decision curves and the fuller frozen validation on the command line (``fit``/``rerun --net-benefit``,
``rerun --frozen``)."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy.special import expit

from twofold import commands as outputs
from twofold.cli import main

ROOT = Path(__file__).resolve().parents[2]
READMIT = ROOT / "sample_studies" / "readmission_synthetic.csv"
PREDICTORS = ["age", "prior_admissions", "lives_alone"]
OUTCOME = "readmitted_30d"


def run(capsys, fn, *argv):
    code = fn([str(a) for a in argv])
    out = capsys.readouterr()
    return code, out.out, out.err


def usage(capsys, fn, *argv):
    """A command refused while reading its options (argparse exits): its exit code, standard output and error."""
    with pytest.raises(SystemExit) as info:
        fn([str(a) for a in argv])
    out = capsys.readouterr()
    return info.value.code, out.out, out.err


def nb_by_hand(y, p, t):
    """Vickers & Elkin (2006, Med Decis Making 26:565): TP/n - FP/n * t/(1-t), treating those with risk >= t."""
    treat = p >= t
    n = len(y)
    return (treat & (y == 1)).sum() / n - (treat & (y == 0)).sum() / n * t / (1 - t)


def design(frame: pd.DataFrame):
    rows = frame[PREDICTORS + [OUTCOME]].dropna()
    X = np.column_stack([np.ones(len(rows)), rows.age.to_numpy(float), rows.prior_admissions.to_numpy(float),
                         (rows.lives_alone == "yes").to_numpy(float)])
    return rows[OUTCOME].to_numpy(), X


@pytest.fixture(scope="module")
def saved(tmp_path_factory):
    folder = tmp_path_factory.mktemp("useful")
    code = main(["fit", str(READMIT), "--outcome", OUTCOME, "--predictor", *PREDICTORS,
                 "--session-out", str(folder / "s.json"), "--json", str(folder / "fit.json")])
    assert code == 0
    return folder


def fit_json(capsys, *extra) -> dict:
    """``twofold fit`` of the usual model with ``extra`` options, its JSON read back."""
    code, out, err = run(capsys, main, "fit", READMIT, "--outcome", OUTCOME, "--predictor", *PREDICTORS, *extra,
                         "--json", "-")
    assert code == 0, err
    return json.loads(out)


def test_fit_net_benefit_matches_a_statsmodels_fit_counted_by_hand(capsys):
    rec = fit_json(capsys, "--net-benefit", "0.05:0.5:0.01")
    curve = rec["net_benefit"]
    assert len(curve) == 46 and all(set(e) == {"threshold", "model", "treat_all"} for e in curve)
    # The model's risks from statsmodels' own fit of the same design.
    y, X = design(pd.read_csv(READMIT))
    p = sm.Logit(y, X).fit(disp=0).predict(X)
    prevalence = y.mean()
    for e in curve:
        t = e["threshold"]
        # Away from a threshold that a risk sits on to the last digits, both fits treat the same records.
        if np.min(np.abs(p - t)) > 1e-9:
            assert e["model"] == pytest.approx(nb_by_hand(y, p, t), abs=1e-12)
        assert e["treat_all"] == pytest.approx(prevalence - (1 - prevalence) * t / (1 - t), abs=1e-12)
    ranges = rec["net_benefit_summary"]["useful_ranges"]
    assert ranges and "net benefit" in rec["net_benefit_summary"]["note"].lower()
    # The plain-text account prints the reading.
    code, out, _ = run(capsys, main, "fit", READMIT, "--outcome", OUTCOME, "--predictor", *PREDICTORS,
                       "--net-benefit", "0.05:0.5:0.01")
    assert code == 0 and "Decision curve" in out and rec["net_benefit_summary"]["reading"] in out


def test_validated_fit_adds_the_corrected_curve_and_keeps_the_validation(capsys):
    base = ["fit", READMIT, "--outcome", OUTCOME, "--predictor", *PREDICTORS, "--validate", "25", "--seed", "4",
            "--json", "-"]
    code, plain, err = run(capsys, main, *base)
    assert code == 0, err
    code, out, err = run(capsys, main, *base, "--net-benefit", "0.1:0.4:0.1")
    assert code == 0, err
    rec = json.loads(out)
    assert rec["validation"] == json.loads(plain)["validation"]  # the bootstrap's figures are unchanged
    curve = rec["net_benefit"]
    assert [e["threshold"] for e in curve] == [0.1, 0.2, 0.3, 0.4]
    assert all(set(e) == {"threshold", "model", "treat_all", "model_corrected"} for e in curve)
    # Optimism is small next to the net benefit itself on 5,000 rows and 4 parameters (common practice:
    # optimism shrinks with rows per parameter), and it is not exactly zero.
    assert all(abs(e["model"] - e["model_corrected"]) < 0.01 for e in curve)
    assert any(e["model"] != e["model_corrected"] for e in curve)
    assert "after correction for optimism" in rec["net_benefit_summary"]["reading"]


@pytest.mark.parametrize("value", ["0.5:0.1:0.01", "0.1:0.5", "0:0.5:0.1", "x:0.5:0.1", "0.1:0.5:-0.1"])
def test_bad_threshold_ranges_exit_2_in_one_line(saved, capsys, value):
    code, out, err = usage(capsys, main, "fit", READMIT, "--outcome", OUTCOME, "--predictor", "age",
                           "--net-benefit", value)
    assert code == 2 and out == "" and err.count("\n") == 1 and "--net-benefit" in err
    code, out, err = usage(capsys, outputs.run_rerun, saved / "s.json", "--frozen", "--net-benefit", value)
    assert code == 2 and out == "" and err.count("\n") == 1 and "--net-benefit" in err


def shifted(tmp_path) -> tuple[Path, pd.DataFrame]:
    """A made-up later extract where readmission became more common (seeded)."""
    frame = pd.read_csv(READMIT)
    rng = np.random.default_rng(2026)
    flip = (frame[OUTCOME] == 0) & (rng.random(len(frame)) < 0.2)
    frame.loc[flip, OUTCOME] = 1
    path = tmp_path / "later.csv"
    frame.to_csv(path, index=False)
    return path, frame


def saved_risks(session: dict, frame: pd.DataFrame):
    """The saved model's risks computed here from its coefficients, with pandas and numpy only."""
    y, X = design(frame)
    names = session["model"]["names"]
    assert names == ["intercept", "age", "prior_admissions", "lives_alone[yes]"]
    return y, expit(X @ np.array(session["model"]["coefficients"]))


def test_frozen_rerun_net_benefit_on_a_new_extract(saved, tmp_path, capsys):
    new, frame = shifted(tmp_path)
    code, out, err = run(capsys, outputs.run_rerun, saved / "s.json", "--data", new, "--frozen",
                         "--net-benefit", "0.1:0.5:0.05", "--json", "-")
    assert code == 0, err
    rec = json.loads(out)
    y, p = saved_risks(json.loads((saved / "s.json").read_text()), frame)
    assert len(rec["net_benefit"]) == 9
    for e in rec["net_benefit"]:
        assert e["model"] == pytest.approx(nb_by_hand(y, p, e["threshold"]), abs=1e-12)
        assert "model_corrected" not in e
    code, out, _ = run(capsys, outputs.run_rerun, saved / "s.json", "--data", new, "--frozen",
                       "--net-benefit", "0.1:0.5:0.05")
    assert code == 0 and "Decision curve" in out


def test_a_session_with_a_bad_saved_range_runs_nothing(saved, tmp_path, capsys):
    session = json.loads((saved / "s.json").read_text())
    for bad in ("0.1:0.5:0.1", [0.5, 0.1, 0.1], ["a", 0.5, 0.1]):
        session["net_benefit"] = bad
        path = tmp_path / "bad.json"
        path.write_text(json.dumps(session))
        for extra in ([], ["--frozen"]):
            code, out, err = run(capsys, outputs.run_rerun, path, *extra)
            assert code == 2 and out == "" and err.count("\n") == 1, err


def test_frozen_rerun_reports_the_fuller_validation(saved, tmp_path, capsys):
    new, frame = shifted(tmp_path)
    code, out, err = run(capsys, outputs.run_rerun, saved / "s.json", "--data", new, "--frozen", "--json", "-")
    assert code == 0, err
    rec = json.loads(out)
    a = rec["assessment"]
    session = json.loads((saved / "s.json").read_text())
    y, p = saved_risks(session, frame)
    lp = np.log(p / (1 - p))
    # O/E from the saved model's risks computed here; more events than predicted in this extract.
    oe = a["observed_expected"]
    assert set(oe) == {"ratio", "ci_low", "ci_high", "observed", "expected"}
    assert oe["observed"] == y.sum() and oe["expected"] == pytest.approx(p.sum(), rel=1e-10)
    assert oe["ratio"] == pytest.approx(y.sum() / p.sum(), rel=1e-10) and oe["ci_low"] > 1
    # Calibration slope and calibration-in-the-large intervals: statsmodels' logistic fits of y on lp, and of y
    # with lp as offset (Van Calster et al. 2016, J Clin Epidemiol 74:167).
    slope = sm.Logit(y, sm.add_constant(lp)).fit(disp=0).conf_int()[1]
    large = sm.GLM(y, np.ones((len(y), 1)), family=sm.families.Binomial(), offset=lp).fit().conf_int()[0]
    assert a["calibration_slope_ci"] == pytest.approx(list(slope), abs=1e-6)
    assert a["calibration_intercept_ci"] == pytest.approx(list(large), abs=1e-6)
    assert 0 <= a["e50"] <= a["e90"] and a["ici"] > 0.01  # 20% of non-events turned into events: miscalibrated
    size = a["validation_sample_size"]
    assert size["n_available"] == len(y) and size["met"] is (len(y) >= size["n_required"])
    assert size["n_required"] == max(v for v in size["criteria"].values() if v is not None)
    # The coefficients applied are the saved ones, by name.
    assert rec["coefficients_applied"] == [{"name": n, "estimate": b} for n, b in
                                           zip(session["model"]["names"], session["model"]["coefficients"])]
    code, out, _ = run(capsys, outputs.run_rerun, saved / "s.json", "--data", new, "--frozen")
    assert code == 0 and "Observed/expected events" in out and "Coefficients applied" in out and "(ICI)" in out


# ---------------------------------------------------------------------------
# twofold units
# ---------------------------------------------------------------------------


@pytest.fixture(scope="module")
def wards(tmp_path_factory):
    """The synthetic extract with an invented ward per admission (seeded); ward W03 has extra readmissions."""
    frame = pd.read_csv(READMIT)
    rng = np.random.default_rng(318)
    frame["ward"] = rng.choice([f"W{i:02d}" for i in range(12)], size=len(frame))
    worse = (frame.ward == "W03") & (frame[OUTCOME] == 0) & (rng.random(len(frame)) < 0.3)
    frame.loc[worse, OUTCOME] = 1
    path = tmp_path_factory.mktemp("wards") / "wards.csv"
    frame.to_csv(path, index=False)
    return path, frame


def test_units_json_follows_the_contract_and_flags_the_ward(saved, wards, capsys):
    path, frame = wards
    code, out, err = run(capsys, main, "units", saved / "s.json", "--unit", "ward", "--data", path, "--json", "-")
    assert code == 0, err
    rec = json.loads(out)
    assert {"unit_column", "units", "limits", "overdispersion"} <= set(rec) and rec["unit_column"] == "ward"
    assert set(rec["limits"]) == {"95", "99.8"} and all(len(v) == 3 for v in rec["limits"]["99.8"])
    assert {"statistic", "df", "p_value", "factor"} <= set(rec["overdispersion"])
    for u in rec["units"]:
        assert {"unit", "observed", "expected", "ratio", "ci_low", "ci_high", "verdict"} <= set(u)
    # Expected events: the saved model's risks computed here, summed by ward with pandas (indirect standardisation).
    y, p = saved_risks(json.loads((saved / "s.json").read_text()), frame)
    complete = frame[PREDICTORS + [OUTCOME]].dropna().index  # the rows design() keeps
    sums = pd.DataFrame({"ward": frame.ward.loc[complete].to_numpy(), "y": y, "p": p}).groupby("ward").sum()
    got = {u["unit"]: u for u in rec["units"]}
    for ward, row in sums.iterrows():
        assert got[ward]["observed"] == row.y and got[ward]["expected"] == pytest.approx(row.p, rel=1e-10)
    assert "beyond what chance easily explains" in got["W03"]["verdict"]
    code, out, _ = run(capsys, main, "units", saved / "s.json", "--unit", "ward", "--data", path)
    assert code == 0 and "W03" in out and "Caution:" in out


@pytest.mark.parametrize("unit, fragment", [
    ("wardd", "no column 'wardd'"),
    ("age", "is a predictor"),
    (OUTCOME, "is the outcome"),
    ("admission_id", "different values"),
])
def test_units_refusals_are_one_line(saved, wards, capsys, unit, fragment):
    code, out, err = run(capsys, main, "units", saved / "s.json", "--unit", unit, "--data", wards[0])
    assert code == 2 and out == "" and err.count("\n") == 1 and fragment in err, err


def test_units_without_a_unit_option_or_on_the_session_data(saved, capsys):
    code, out, err = usage(capsys, main, "units", saved / "s.json")
    assert code == 2 and "--unit" in err and err.count("\n") == 1
    # The session's own extract has no ward column: named in one sentence.
    code, out, err = run(capsys, main, "units", saved / "s.json", "--unit", "ward")
    assert code == 2 and "'ward'" in err and err.count("\n") == 1


# ---------------------------------------------------------------------------
# twofold rerun --adapt
# ---------------------------------------------------------------------------


def test_rerun_adapt_chooses_and_saves_the_adapted_model(saved, tmp_path, capsys):
    new, frame = shifted(tmp_path)  # more events everywhere: the intercept moved
    out_session = tmp_path / "adapted.json"
    code, out, err = run(capsys, outputs.run_rerun, saved / "s.json", "--data", new, "--adapt",
                         "--session-out", out_session, "--json", "-")
    assert code == 0, err
    a = json.loads(out)["adaptation"]
    assert a["chosen"] in ("none", "intercept", "intercept_and_slope", "refit")
    assert all({"step", "g", "df", "p_value"} <= set(t) for t in a["tests"])
    assert a["tests"][0]["step"] == "refit_vs_none" and a["tests"][0]["df"] == 4
    # Recalibration in the large, checked with statsmodels' GLM: the new intercept alone.
    session = json.loads((saved / "s.json").read_text())
    y, p = saved_risks(session, frame)
    lp = np.log(p / (1 - p))
    a_alone = sm.GLM(y, np.ones((len(y), 1)), family=sm.families.Binomial(), offset=lp).fit().params[0]
    assert a["recalibration"]["intercept_alone"] == pytest.approx(a_alone, abs=1e-6)
    # The adapted session predicts with the adapted coefficients.
    adapted = json.loads(out_session.read_text())
    assert adapted["model"]["coefficients"] == pytest.approx([c["estimate"] for c in a["coefficients"]])
    code, out, err = run(capsys, main, "predict", out_session, "--value", "age=60", "--value", "prior_admissions=1",
                         "--value", "lives_alone=yes", "--json", "-")
    assert code == 0, err
    b = adapted["model"]["coefficients"]
    assert json.loads(out)["probability"] == pytest.approx(expit(b[0] + 60 * b[1] + b[2] + b[3]), rel=1e-12)
    code, out, _ = run(capsys, outputs.run_rerun, saved / "s.json", "--data", new, "--adapt")
    assert code == 0 and "Adapting the saved model" in out and a["reading"] in out
    # The report has the same tests, to the printed digit, and the choice; never the adapted coefficients.
    report = tmp_path / "adapt.html"
    code, _, err = run(capsys, outputs.run_rerun, saved / "s.json", "--data", new, "--adapt", "--report", report)
    assert code == 0, err
    html = report.read_text()
    assert "Adapting the saved model to these records" in html and a["reading"] in html
    assert f"{a['tests'][0]['g']:.2f}" in html
    assert f"{a['coefficients'][1]['estimate']:.4f}" not in html


def test_rerun_adapt_refusals(saved, tmp_path, capsys):
    code, out, err = usage(capsys, outputs.run_rerun, saved / "s.json", "--session-out", tmp_path / "x.json")
    assert code == 2 and "--adapt" in err and err.count("\n") == 1
    code, out, err = run(capsys, outputs.run_rerun, saved / "s.json", "--adapt", "--session-out", READMIT)
    assert code == 2 and "data file" in err and err.count("\n") == 1
    code, out, err = run(capsys, outputs.run_rerun, saved / "s.json", "--adapt", "--session-out", saved / "s.json")
    assert code == 2 and "session file being read" in err and err.count("\n") == 1


def test_rerun_adapt_on_too_few_rows_is_one_sentence(saved, tmp_path, capsys):
    tiny = tmp_path / "tiny.csv"
    pd.read_csv(READMIT).iloc[:12].to_csv(tiny, index=False)
    code, out, err = run(capsys, outputs.run_rerun, saved / "s.json", "--data", tiny, "--adapt")
    assert code == 2 and out == "" and err.count("\n") == 1 and "tiny.csv" in err


# ---------------------------------------------------------------------------
# twofold fit --subgroups
# ---------------------------------------------------------------------------


def test_fit_subgroups_in_the_json_and_the_account(capsys):
    rec = fit_json(capsys, "--subgroups", "followup_call")
    groups = rec["subgroups"]
    assert [g["group"] for g in groups] == ["no", "yes"]
    for g in groups:
        assert {"group", "rows", "auc", "auc_ci", "calibration_intercept", "calibration_slope"} <= set(g)
    # Rows: pandas counts among the complete rows; calibration-in-the-large: statsmodels on the group.
    frame = pd.read_csv(READMIT)
    complete = frame.loc[frame[PREDICTORS + [OUTCOME]].dropna().index]  # the rows design() keeps
    y, X = design(frame)
    lp = X @ sm.Logit(y, X).fit(disp=0).params
    for g in groups:
        m = (complete.followup_call == g["group"]).to_numpy()
        assert g["rows"] == m.sum()
        large = sm.GLM(y[m], np.ones((m.sum(), 1)), family=sm.families.Binomial(), offset=lp[m]).fit()
        assert g["calibration_intercept"] == pytest.approx(large.params[0], abs=1e-5)
    code, out, _ = run(capsys, main, "fit", READMIT, "--outcome", OUTCOME, "--predictor", *PREDICTORS,
                       "--subgroups", "followup_call")
    assert code == 0 and "Performance within groups" in out


@pytest.mark.parametrize("column, fragment", [("nope", "no column 'nope'"), ("admission_id", "different values")])
def test_fit_subgroups_refusals_are_one_line(capsys, column, fragment):
    code, out, err = run(capsys, main, "fit", READMIT, "--outcome", OUTCOME, "--predictor", "age",
                         "--subgroups", column)
    assert code == 2 and out == "" and err.count("\n") == 1 and fragment in err


def test_the_smaller_model_gets_its_own_net_benefit(capsys):
    rec = fit_json(capsys, "--smaller", "age", "--net-benefit", "0.1:0.3:0.1")
    # The smaller model (age alone) fitted by statsmodels on the same rows, counted by hand.
    y, X = design(pd.read_csv(READMIT))
    p = sm.Logit(y, X[:, :2]).fit(disp=0).predict(X[:, :2])
    for e in rec["net_benefit"]:
        assert e["smaller_model"] == pytest.approx(nb_by_hand(y, p, e["threshold"]), abs=1e-12)


def test_frozen_rerun_subgroups_on_a_new_extract(saved, tmp_path, capsys):
    new, frame = shifted(tmp_path)
    code, out, err = run(capsys, outputs.run_rerun, saved / "s.json", "--data", new, "--frozen",
                         "--subgroups", "sex", "--json", "-")
    assert code == 0, err
    groups = {g["group"]: g for g in json.loads(out)["subgroups"]}
    y, p = saved_risks(json.loads((saved / "s.json").read_text()), frame)
    complete = frame.loc[frame[PREDICTORS + [OUTCOME]].dropna().index]
    from sklearn.metrics import roc_auc_score

    for sex in ("F", "M"):
        m = (complete.sex == sex).to_numpy()
        assert groups[sex]["rows"] == m.sum()
        assert groups[sex]["auc"] == pytest.approx(roc_auc_score(y[m], np.round(p[m], 12)), abs=1e-10)
    code, out, err = run(capsys, outputs.run_rerun, saved / "s.json", "--data", new, "--frozen", "--subgroups", "sx")
    assert code == 2 and "'sx'" in err and err.count("\n") == 1
