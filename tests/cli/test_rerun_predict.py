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

from references import wound_top_influential_rows
from twofold import commands as outputs
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
    from twofold.core.outputs.summary import PATIENT_CAUTION

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


# ---- report options: --suppress-up-to and --report-records ------------------------------------------

WOUND = ROOT / "sample_studies" / "wound_infection_synthetic.csv"
WOUND_FIT = ["fit", WOUND, "--outcome", "infection", "--event", "yes"]


def usage(capsys, fn, *argv):
    """A command refused while reading its options (argparse exits): its exit code and standard error."""
    with pytest.raises(SystemExit) as info:
        fn([str(a) for a in argv])
    return info.value.code, capsys.readouterr().err


def _group_rows(html: str, column: str) -> dict:
    """The cross-tabulation of ``column`` in a report: {group: [events, non-events, total]} as shown."""
    import re

    table = next(t for t in re.findall(r"<table>.*?</table>", html, re.S) if f"<th>{column}</th>" in t)
    out = {}
    for row in re.findall(r"<tr>(.*?)</tr>", table, re.S)[1:]:
        cells = [re.sub(r"<[^>]+>", "", c) for c in re.findall(r"<t[dh][^>]*>(.*?)</t[dh]>", row, re.S)]
        out[cells[0].replace(" (reference)", "")] = cells[1:4]
    return out


def _pandas_counts(column: str) -> dict:
    """Outside reference: pandas crosstab of the wound sample, {group: [events, non-events, total]}."""
    frame = pd.read_csv(WOUND)
    tab = pd.crosstab(frame[column], frame.infection)
    return {str(g): [int(tab.loc[g, "yes"]), int(tab.loc[g, "no"]), int(tab.loc[g].sum())] for g in tab.index}


def test_suppress_up_to_sets_the_limit_of_the_report(tmp_path, capsys):
    predictors = ["--predictor", "age", "bmi", "diabetes", "antibiotic_timing"]
    for name, extra in (("default.html", []), ("three.html", ["--suppress-up-to", "3"])):
        code, _, err = run(capsys, main, *WOUND_FIT, *predictors, "--report", tmp_path / name, *extra)
        assert code == 0, err
    reports = {limit: (tmp_path / name).read_text(encoding="utf-8")
               for limit, name in ((10, "default.html"), (3, "three.html"))}
    shown_only_at_three = []
    for column in ("diabetes", "antibiotic_timing"):
        expected = _pandas_counts(column)
        for limit, html in reports.items():
            shown = _group_rows(html, column)
            assert set(expected) <= set(shown)
            for group, counts in expected.items():
                for count, text in zip(counts, shown[group]):
                    if 1 <= count <= limit:
                        assert text == "suppressed", (limit, column, group, count)
                    else:  # shown as counted, or hidden as a complement of a small one
                        assert text in (f"{count:,}", "suppressed"), (limit, column, group, count, text)
                    if limit == 3 and 4 <= count <= 10 and text == f"{count:,}":
                        shown_only_at_three.append((column, group, count))
    # diabetes: 10 infected of the 21 with diabetes, hidden by the default limit, shown with a limit of 3.
    assert ("diabetes", "yes", 10) in shown_only_at_three
    assert _group_rows(reports[10], "diabetes")["yes"][0] == "suppressed"
    assert _group_rows(reports[3], "diabetes")["yes"] == ["10", "11", "21"]
    # antibiotic_timing: 3 infected of the 18 given antibiotics after incision stay hidden with a limit of 3.
    assert _pandas_counts("antibiotic_timing")["after_incision"][0] == 3
    assert _group_rows(reports[3], "antibiotic_timing")["after_incision"][0] == "suppressed"
    assert "Counts of 1 to 3 people are shown as" in reports[3]
    assert "Counts of 1 to 10 people are shown as" in reports[10]


def test_report_records_lists_the_most_influential_rows(tmp_path, capsys):
    import re

    predictors = ["--predictor", "age", "bmi", "diabetes"]
    code, _, err = run(capsys, main, *WOUND_FIT, *predictors, "--report", tmp_path / "with.html", "--report-records")
    assert code == 0, err
    code, _, err = run(capsys, main, *WOUND_FIT, *predictors, "--report", tmp_path / "without.html")
    assert code == 0, err
    rows, cooks = wound_top_influential_rows()
    html = (tmp_path / "with.html").read_text(encoding="utf-8")
    table = next(t for t in re.findall(r"<table>.*?</table>", html, re.S) if "row of the data file" in t)
    listed = re.findall(r"<tr><td>(\d+)</td><td class=\"r\">([0-9.]+)</td>", table)
    assert [int(r) for r, _ in listed] == rows
    assert [float(c) for _, c in listed] == pytest.approx(cooks, abs=5e-5)  # shown to 4 decimals
    assert "asked for record numbers" in html and "point back to patients" in html
    without = (tmp_path / "without.html").read_text(encoding="utf-8")
    assert "row of the data file" not in without and "asked for record numbers" not in without
    assert not [r for r in rows if f"<tr><td>{r}</td><td class=\"r\">" in without]


def test_report_options_are_saved_and_reused_by_rerun(tmp_path, capsys):
    # Without --report the options go into the session, for the reports of later re-runs.
    code, _, err = run(capsys, main, *WOUND_FIT, "--predictor", "age", "bmi", "diabetes",
                       "--session-out", tmp_path / "s.json", "--suppress-up-to", "3", "--report-records",
                       "--report-title", "Wound  infections, 2024", "--report-authors", "B. Osei",
                       "--report-question", "Which patients get a wound infection?")
    assert code == 0, err
    session = json.loads((tmp_path / "s.json").read_text())
    assert session["report"] == {"suppress_up_to": 3, "list_records": True, "title": "Wound infections, 2024",
                                 "authors": "B. Osei", "question": "Which patients get a wound infection?"}
    rows, _ = wound_top_influential_rows()
    code, _, err = run(capsys, outputs.run_rerun, tmp_path / "s.json", "--report", tmp_path / "again.html")
    assert code == 0, err
    html = (tmp_path / "again.html").read_text(encoding="utf-8")
    assert _group_rows(html, "diabetes")["yes"] == ["10", "11", "21"]  # pandas crosstab, as above
    # The first page: the title typed, the authors and the question, before any result.
    assert "<h1>Wound infections, 2024</h1>" in html
    first = html.index("<h2>")
    assert 0 < html.index("Authors: B. Osei") < first and 0 < html.index("Which patients get a wound") < first
    assert f"<tr><td>{rows[0]}</td>" in html and "row of the data file" in html
    # The rerun's own options win over the session's.
    code, _, err = run(capsys, outputs.run_rerun, tmp_path / "s.json", "--report", tmp_path / "over.html",
                       "--suppress-up-to", "10", "--no-report-records", "--report-title", "March extract")
    assert code == 0, err
    html = (tmp_path / "over.html").read_text(encoding="utf-8")
    assert "<h1>March extract</h1>" in html and "Authors: B. Osei" in html
    assert _group_rows(html, "diabetes")["yes"][0] == "suppressed" and "row of the data file" not in html
    # A frozen rerun keeps the limit and says that it lists no records.
    code, _, err = run(capsys, outputs.run_rerun, tmp_path / "s.json", "--frozen", "--report", tmp_path / "f.html",
                       "--report-records")
    assert code == 0 and "lists no influential records" in err
    assert "Counts of 1 to 3 people are shown as" in (tmp_path / "f.html").read_text(encoding="utf-8")


@pytest.mark.parametrize("argv, fragment", [
    (["--suppress-up-to", "0"], "from 1 to 1000"),
    (["--suppress-up-to", "-3"], "from 1 to 1000"),
    (["--suppress-up-to", "1001"], "from 1 to 1000"),
    (["--suppress-up-to", "ten"], "not a whole number"),
    (["--suppress-up-to", "2.5"], "not a whole number"),
])
def test_bad_suppression_limit_is_one_line(tmp_path, capsys, argv, fragment):
    code, err = usage(capsys, main, *WOUND_FIT, "--predictor", "age", "--report", tmp_path / "r.html", *argv)
    assert code == 2 and err.count("\n") == 1 and fragment in err and "--suppress-up-to" in err
    assert not (tmp_path / "r.html").exists()


def test_report_options_without_a_report_are_refused(fitted, tmp_path, capsys):
    for extra in (["--suppress-up-to", "5"], ["--report-records"], ["--suppress-up-to", "5", "--report-records"],
                  ["--report-title", "A title"], ["--report-question", "Why?"]):
        code, err = usage(capsys, main, *WOUND_FIT, "--predictor", "age", *extra)
        assert code == 2 and err.count("\n") == 1 and "only a report" in err and "--session-out" in err, err
        code, err = usage(capsys, outputs.run_rerun, fitted / "s.json", "--json", tmp_path / "r.json", *extra)
        assert code == 2 and err.count("\n") == 1 and "add --report PATH" in err, err
        assert not (tmp_path / "r.json").exists()


@pytest.mark.parametrize("report, fragment", [
    ({"suppress_up_to": -1, "list_records": False}, "outside 1 to 1000"),
    ({"suppress_up_to": 0, "list_records": False}, "outside 1 to 1000"),
    ({"suppress_up_to": 10 ** 9, "list_records": False}, "outside 1 to 1000"),
    ({"suppress_up_to": "3", "list_records": False}, "whole number"),
    ({"suppress_up_to": 3.0, "list_records": False}, "whole number"),
    ({"suppress_up_to": True, "list_records": False}, "whole number"),
    ({"suppress_up_to": 3, "list_records": "yes"}, "true or false"),
    ({"suppress_up_to": 3}, "'list_records' is missing"),
    ({"suppress_up_to": 3, "list_records": False, "run": "rm"}, "unknown field"),
    ({"suppress_up_to": 3, "list_records": False, "title": ["x"]}, "'title' should be text"),
    ({"suppress_up_to": 3, "list_records": False, "question": "q" * 5000}, "more than the 1,000 allowed"),
    ("all", "should be an object"),
])
def test_hostile_report_options_in_a_session_run_nothing(fitted, tmp_path, capsys, report, fragment):
    session = json.loads((fitted / "s.json").read_text())
    session["report"] = report
    session["data"] = str(READMIT)
    bad = tmp_path / "bad.json"
    bad.write_text(json.dumps(session))
    for extra in ([], ["--report", tmp_path / "r.html"], ["--frozen", "--report", tmp_path / "r.html"]):
        code, out, err = run(capsys, outputs.run_rerun, bad, *extra)
        assert code == 2 and out == "" and err.count("\n") == 1 and err.startswith("twofold: The session file")
        assert fragment in err, err
    assert not (tmp_path / "r.html").exists()


def test_hostile_rows_in_a_session_run_nothing(fitted, tmp_path, capsys):
    session = json.loads((fitted / "s.json").read_text())
    session["data"] = str(READMIT)
    for value, fragment in (("lives_alone", "list of column names"), ([1, 2], "column name"),
                            ([f"c{i}" for i in range(1000)], "more than the"), (["age", "age"], "twice")):
        bad = tmp_path / "bad.json"
        bad.write_text(json.dumps({**session, "rows_complete_in": value}))
        code, out, err = run(capsys, outputs.run_rerun, bad, "--json", "-")
        assert code == 2 and out == "" and err.count("\n") == 1 and fragment in err, err
