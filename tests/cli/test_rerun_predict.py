"""``twofold fit --session-out/--report/--table-out``, ``twofold rerun`` and ``twofold predict``."""

from __future__ import annotations

import hashlib
import json
import pickle
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from scipy.special import expit
from sklearn.metrics import roc_auc_score

from twofold import outputs
from twofold.cli import main

ROOT = Path(__file__).resolve().parents[2]
READMIT = ROOT / "sample_studies" / "readmission_synthetic.csv"
PREDICTORS = ["age", "sex", "discharge_destination", "lives_alone"]


def digest(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


@pytest.fixture(scope="module")
def fitted(tmp_path_factory):
    """One ``twofold fit`` run as a user would, in its own process, writing every output."""
    folder = tmp_path_factory.mktemp("cli")
    before = digest(READMIT)
    res = subprocess.run([sys.executable, "-m", "twofold.cli", "fit", str(READMIT), "--outcome", "readmitted_30d",
                          "--predictor", *PREDICTORS, "--smaller", "age", "sex",
                          "--session-out", str(folder / "s.json"), "--report", str(folder / "r.html"),
                          "--table-out", str(folder / "t.xlsx"), "--json", str(folder / "fit.json")],
                         capture_output=True, text=True, timeout=120)
    assert res.returncode == 0, res.stderr
    assert digest(READMIT) == before  # the data file is never written
    return folder


def run(capsys, fn, *argv):
    code = fn([str(a) for a in argv])
    out = capsys.readouterr()
    return code, out.out, out.err


def test_fit_wrote_every_output(fitted):
    for name in ("s.json", "r.html", "t.xlsx", "fit.json"):
        assert (fitted / name).stat().st_size > 0
    session = json.loads((fitted / "s.json").read_text())
    assert session["format"] == "twofold-session" and session["predictors"] == PREDICTORS


def test_rerun_on_the_same_data_equals_fit(fitted, capsys):
    code, out, err = run(capsys, outputs.run_rerun, fitted / "s.json", "--json", "-")
    assert code == 0, err
    assert err == ""
    assert json.loads(out) == json.loads((fitted / "fit.json").read_text())
    # The same through the fit command in this process (the same code version as the rerun).
    code, fit_out, _ = run(capsys, main, "fit", READMIT, "--outcome", "readmitted_30d", "--predictor", *PREDICTORS,
                           "--smaller", "age", "sex", "--json", "-")
    assert code == 0 and json.loads(fit_out) == json.loads(out)


def _saved_predictions(session: dict, frame: pd.DataFrame):
    """The saved model's risks computed here from its coefficients, with pandas and numpy only."""
    m = session["model"]
    rows = frame[PREDICTORS + ["readmitted_30d"]].dropna()
    cols = {"intercept": np.ones(len(rows)), "age": rows.age.to_numpy(dtype=float)}
    for t in m["terms"]:
        for lvl in t["levels"]:
            cols[f"{t['column']}[{lvl}]"] = (rows[t["column"]] == lvl).to_numpy(dtype=float)
    X = np.column_stack([cols[n] for n in m["names"]])
    return rows.readmitted_30d.to_numpy(), expit(X @ np.array(m["coefficients"]))


def test_frozen_rerun_on_the_same_data(fitted, capsys):
    code, out, err = run(capsys, outputs.run_rerun, fitted / "s.json", "--frozen", "--json", "-")
    assert code == 0, err
    rec = json.loads(out)
    a = rec["assessment"]
    assert rec["frozen"] is True
    fit = json.loads((fitted / "fit.json").read_text())
    assert set(fit["assessment"]) <= set(a)  # the same assessment fields
    assert (rec["rows_read"], rec["rows_used"], rec["events"]) == (fit["rows_read"], fit["rows_used"], fit["events"])
    # On the fitting rows the ML score equations force slope 1 and calibration-in-the-large 0.
    assert a["calibration_slope"] == pytest.approx(1.0, abs=1e-6)
    assert a["calibration_intercept"] == pytest.approx(0.0, abs=1e-6)
    # AUC: scikit-learn on risks computed here from the saved coefficients.
    y, p = _saved_predictions(json.loads((fitted / "s.json").read_text()), pd.read_csv(READMIT))
    # Records with the same values tie; rounding to 12 decimals keeps sklearn from splitting such ties
    # on last-digit noise of the matrix product (Twofold's AUC rounds before ranking too).
    assert a["auc"] == pytest.approx(roc_auc_score(y, np.round(p, 12)), abs=1e-12)
    assert a["brier"] == pytest.approx(np.mean((p - y) ** 2), rel=1e-10)
    groups = a["calibration_groups"]
    assert sum(groups["n"]) == rec["rows_used"]


def test_frozen_rerun_on_a_shifted_extract(fitted, tmp_path, capsys):
    # A made-up later extract where readmission became more common (seeded).
    frame = pd.read_csv(READMIT)
    rng = np.random.default_rng(12345)
    flip = (frame.readmitted_30d == 0) & (rng.random(len(frame)) < 0.25)
    frame.loc[flip, "readmitted_30d"] = 1
    new = tmp_path / "later.csv"
    frame.to_csv(new, index=False)
    report = tmp_path / "later.html"
    code, out, err = run(capsys, outputs.run_rerun, fitted / "s.json", "--data", new, "--frozen",
                         "--json", "-", "--report", report)
    assert code == 0, err
    a = json.loads(out)["assessment"]
    lo, hi = a["calibration_intercept_ci"]
    assert a["calibration_intercept"] > 0 and lo > 0  # risks now predicted too low on average
    y, p = _saved_predictions(json.loads((fitted / "s.json").read_text()), frame)
    # Records with the same values tie; rounding to 12 decimals keeps sklearn from splitting such ties
    # on last-digit noise of the matrix product (Twofold's AUC rounds before ranking too).
    assert a["auc"] == pytest.approx(roc_auc_score(y, np.round(p, 12)), abs=1e-12)
    html = report.read_text(encoding="utf-8")
    assert "applied" in html and "A000001" not in html
    # Without --json: plain text with the caution.
    code, out, _ = run(capsys, outputs.run_rerun, fitted / "s.json", "--data", new, "--frozen")
    assert code == 0 and "Calibration slope" in out and "Caution:" in out


def test_rerun_refit_on_a_new_extract(fitted, tmp_path, capsys):
    frame = pd.read_csv(READMIT).iloc[:3000]
    new = tmp_path / "first3000.csv"
    frame.to_csv(new, index=False)
    code, out, err = run(capsys, outputs.run_rerun, fitted / "s.json", "--data", new, "--json", "-")
    assert code == 0, err
    rec = json.loads(out)
    assert rec["rows_read"] == 3000 and rec["predictors"] == PREDICTORS
    assert set(rec) == set(json.loads((fitted / "fit.json").read_text()))


def test_rerun_errors_are_one_line(fitted, tmp_path, capsys):
    frame = pd.read_csv(READMIT)
    missing = tmp_path / "no_lives_alone.csv"
    frame.drop(columns=["lives_alone"]).to_csv(missing, index=False)
    code, out, err = run(capsys, outputs.run_rerun, fitted / "s.json", "--data", missing)
    assert code == 2 and out == "" and err.count("\n") == 1 and "'lives_alone'" in err
    # A role that no longer fits: age now holds text.
    texty = tmp_path / "age_text.csv"
    bad = frame.astype({"age": object})
    bad.loc[5, "age"] = "unknown"
    bad.to_csv(texty, index=False)
    for extra in ([], ["--frozen"]):
        code, out, err = run(capsys, outputs.run_rerun, fitted / "s.json", "--data", texty, *extra)
        assert code == 2 and err.count("\n") == 1 and "'age'" in err and "text" in err
    # A group the saved model never saw, for a frozen rerun.
    unseen = tmp_path / "unseen.csv"
    other = frame.copy()
    other.loc[7, "discharge_destination"] = "hospice"
    other.to_csv(unseen, index=False)
    code, _, err = run(capsys, outputs.run_rerun, fitted / "s.json", "--data", unseen, "--frozen")
    assert code == 2 and "hospice" in err
    code, _, err = run(capsys, outputs.run_rerun, fitted / "nothing.json")
    assert code == 2 and err.count("\n") == 1


def test_every_output_path_equal_to_the_data_file_is_refused(fitted, tmp_path, capsys):
    data = tmp_path / "data.csv"
    data.write_bytes(READMIT.read_bytes())
    # A session of this copy, so that the copy is "the data file" of the session.
    code, _, err = run(capsys, main, "fit", data, "--outcome", "readmitted_30d", "--predictor", "age",
                       "--session-out", tmp_path / "copy.json")
    assert code == 0, err
    before = digest(data)
    attempts = [
        (main, ["fit", data, "--outcome", "readmitted_30d", "--predictor", "age", "--session-out", data]),
        (main, ["fit", data, "--outcome", "readmitted_30d", "--predictor", "age", "--report", data]),
        (main, ["fit", data, "--outcome", "readmitted_30d", "--predictor", "age", "--table-out", data]),
        (outputs.run_rerun, [tmp_path / "copy.json", "--report", data]),
        (outputs.run_rerun, [tmp_path / "copy.json", "--json", data]),
        (outputs.run_rerun, [tmp_path / "copy.json", "--frozen", "--json", data]),
        (outputs.run_predict, [tmp_path / "copy.json", "--value", "age=60", "--json", data]),
    ]
    for fn, argv in attempts:
        code, _, err = run(capsys, fn, *argv)
        assert code == 2 and "data file itself" in err, (argv, err)
        assert digest(data) == before


def test_write_fit_outputs_refuses_the_data_file(tmp_path):
    from twofold.core.analysis import AnalysisSpec, run_analysis
    from twofold.core.errors import TwofoldError

    data = tmp_path / "data.csv"
    data.write_bytes(READMIT.read_bytes())
    res = run_analysis(AnalysisSpec(data=str(data), outcome="readmitted_30d", predictors=["age"]))
    before = digest(data)
    for kwargs in ({"session": data}, {"report": data}, {"table": data}):
        with pytest.raises(TwofoldError, match="data file itself"):
            outputs.write_fit_outputs(res, **kwargs)
    assert digest(data) == before
    with pytest.raises(TwofoldError, match=r"\.html or \.pdf"):
        outputs.write_fit_outputs(res, session=tmp_path / "s.json", report=tmp_path / "r.doc")
    assert not (tmp_path / "s.json").exists()  # nothing half written


def test_predict_json_matches_a_hand_computation(fitted, capsys):
    values = {"age": "81", "sex": "F", "discharge_destination": "care_home", "lives_alone": "yes"}
    argv = [fitted / "s.json"] + [a for k, v in values.items() for a in ("--value", f"{k}={v}")]
    code, out, err = run(capsys, outputs.run_predict, *argv, "--json", "-")
    assert code == 0, err
    got = json.loads(out)
    m = json.loads((fitted / "s.json").read_text())["model"]
    x = np.zeros(len(m["names"]))
    for i, name in enumerate(m["names"]):
        x[i] = {"intercept": 1.0, "age": 81.0, "discharge_destination[care_home]": 1.0,
                "lives_alone[yes]": 1.0}.get(name, 0.0)
    b, V = np.array(m["coefficients"]), np.array(m["covariance"])
    eta, se = x @ b, np.sqrt(x @ V @ x)
    assert got["probability"] == pytest.approx(expit(eta), rel=1e-12)
    assert got["ci_low"] == pytest.approx(expit(eta - 1.959963984540054 * se), rel=1e-12)
    assert got["ci_high"] == pytest.approx(expit(eta + 1.959963984540054 * se), rel=1e-12)
    # The one-patient caution travels with the risk, in JSON and in text (the window shows the same words).
    from twofold.core.summary import PATIENT_CAUTION

    assert got["caution"] == PATIENT_CAUTION and "not a clinical decision" in PATIENT_CAUTION
    code, out, _ = run(capsys, outputs.run_predict, *argv)
    assert code == 0 and "Predicted risk" in out and f"Caution: {PATIENT_CAUTION}" in out


def test_predict_refusals_are_one_line(fitted, capsys):
    s = fitted / "s.json"
    for argv, fragment in (
        (["--value", "age=60"], "No value was given"),
        (["--value", "age=200", "--value", "sex=F", "--value", "discharge_destination=home",
          "--value", "lives_alone=no"], "outside the range"),
        (["--value", "age=60", "--value", "sex=X", "--value", "discharge_destination=home",
          "--value", "lives_alone=no"], "not a group"),
        (["--value", "age"], "COLUMN=VALUE"),
    ):
        code, out, err = run(capsys, outputs.run_predict, s, *argv)
        assert code == 2 and out == "" and err.count("\n") == 1 and fragment in err, err


class _Payload:
    def __init__(self, marker):
        self.marker = marker

    def __reduce__(self):
        return (open, (self.marker, "w"))


def test_hostile_sessions_run_nothing(tmp_path, capsys):
    marker = tmp_path / "ran.txt"
    cases = {
        "pickle.json": pickle.dumps(_Payload(str(marker))),
        "deep.json": ("[" * 50000 + "]" * 50000).encode(),
        "huge.json": b'{"format": "twofold-session", "schema_version": 1' + b', "data_rows": ' + b"9" * 400 + b"}",
    }
    for name, payload in cases.items():
        (tmp_path / name).write_bytes(payload)
        for fn, extra in ((outputs.run_rerun, []), (outputs.run_predict, ["--value", "age=60"])):
            code, out, err = run(capsys, fn, tmp_path / name, *extra)
            assert code == 2 and out == "" and err.count("\n") == 1 and err.startswith("twofold: The session file")
    assert not marker.exists()
    # And through the real command, in its own process.
    res = subprocess.run([sys.executable, "-m", "twofold.cli", "predict", str(tmp_path / "pickle.json"),
                          "--value", "age=60"], capture_output=True, text=True, timeout=60)
    assert res.returncode == 2 and "pickle" in res.stderr and not marker.exists()
