"""Session files: round trip, strict reading of hostile files, data checks, autosave."""

from __future__ import annotations

import json
import pickle
import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm

from twofold.core.outputs import session as ses
from twofold.core.analysis import AnalysisSpec, run_analysis
from twofold.core.errors import TwofoldError

ROOT = Path(__file__).resolve().parents[2]
READMIT = ROOT / "sample_studies" / "readmission_synthetic.csv"
PREDICTORS = ["age", "sex", "discharge_destination", "lives_alone", "comorbidity_score"]


@pytest.fixture(scope="module")
def result():
    spec = AnalysisSpec(data=str(READMIT), outcome="readmitted_30d", predictors=PREDICTORS, smaller=["age", "sex"])
    return run_analysis(spec)


@pytest.fixture(scope="module")
def saved(result, tmp_path_factory):
    path = tmp_path_factory.mktemp("sess") / "analysis.twofold.json"
    ses.save_session(ses.session_from_result(result), path)
    return path


def test_round_trip_gives_identical_numbers(result, saved):
    loaded = ses.load_session(saved)
    again = run_analysis(ses.spec_from_session(loaded))
    assert again.record == result.record
    # The spec's own fields are all there (a session is a superset of AnalysisSpec.as_dict()).
    assert set(result.spec.as_dict()) <= set(loaded)
    assert loaded["format"] == "twofold-session" and loaded["schema_version"] == 1
    assert loaded["chosen"] == 1 and loaded["ladder"] == [["age", "sex"], PREDICTORS]
    assert loaded["data_rows"] == 5000


def test_saved_model_matches_statsmodels(saved):
    # Outside reference: statsmodels Logit on the complete rows with the same indicator coding.
    model = ses.load_session(saved)["model"]
    frame = pd.read_csv(READMIT)[PREDICTORS + ["readmitted_30d"]].dropna()
    X = pd.DataFrame({"const": 1.0, "age": frame.age, "sex[M]": (frame.sex == "M").astype(float)})
    for lvl in ("home_with_support", "care_home", "other_hospital"):
        X[f"discharge_destination[{lvl}]"] = (frame.discharge_destination == lvl).astype(float)
    X["lives_alone[yes]"] = (frame.lives_alone == "yes").astype(float)
    X["comorbidity_score"] = frame.comorbidity_score
    ref = sm.Logit(frame.readmitted_30d, X).fit(disp=0)
    order = ["const"] + model["names"][1:]
    assert model["names"][1:] == list(X.columns[1:])
    np.testing.assert_allclose(model["coefficients"], ref.params[order].to_numpy(), rtol=1e-8)
    np.testing.assert_allclose(model["covariance"], ref.cov_params().loc[order, order].to_numpy(), rtol=1e-6)
    age = next(t for t in model["terms"] if t["column"] == "age")
    assert age["range"] == [frame.age.min(), frame.age.max()]


def test_save_is_atomic(result, tmp_path, monkeypatch):
    path = tmp_path / "s.json"
    session = ses.session_from_result(result)
    ses.save_session(session, path)
    before = path.read_bytes()
    assert [p.name for p in tmp_path.iterdir()] == ["s.json"]  # no temporary file left

    def broken(src, dst):
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(ses.os, "replace", broken)
    with pytest.raises(TwofoldError, match="Could not write"):
        ses.save_session(session, path)
    assert path.read_bytes() == before  # the old file is untouched
    assert [p.name for p in tmp_path.iterdir()] == ["s.json"]


def test_relative_data_path_moves_with_the_folder(result, tmp_path):
    folder = tmp_path / "project"
    folder.mkdir()
    data = folder / "extract.csv"
    shutil.copy(READMIT, data)
    spec = AnalysisSpec(data=str(data), outcome="readmitted_30d", predictors=["age", "sex"])
    res = run_analysis(spec)
    ses.save_session(ses.session_from_result(res), folder / "s.json")
    assert json.loads((folder / "s.json").read_text())["data"] == "extract.csv"
    moved = tmp_path / "elsewhere"
    shutil.move(str(folder), moved)
    loaded = ses.load_session(moved / "s.json")
    assert Path(loaded["data"]) == (moved / "extract.csv").resolve()
    assert ses.check_data(loaded) == []


def test_check_data_reports_change_and_missing_column(saved, tmp_path):
    session = ses.load_session(saved)
    frame = pd.read_csv(READMIT).drop(columns=["lives_alone"])
    changed = tmp_path / "changed.csv"
    frame.to_csv(changed, index=False)
    notices = ses.check_data(session, changed)
    codes = [n.code for n in notices]
    assert "data_changed" in codes
    assert "the data file changed since the session was saved" in notices[0].message.lower()
    missing = [n for n in notices if n.code == "column_missing"]
    assert [n.subjects for n in missing] == [("lives_alone",)]
    assert "'lives_alone'" in missing[0].message
    assert ses.check_data(session, READMIT) == []


def test_data_file_is_never_written(result, saved):
    digest = ses.file_sha256(READMIT)
    with pytest.raises(TwofoldError, match="data file itself"):
        ses.save_session(ses.load_session(saved), READMIT)
    assert ses.file_sha256(READMIT) == digest


# ---- hostile files ----------------------------------------------------------


def _good(saved) -> dict:
    return json.loads(saved.read_text())


def _write(tmp_path, payload) -> Path:
    path = tmp_path / "hostile.json"
    if isinstance(payload, bytes):
        path.write_bytes(payload)
    else:
        path.write_text(payload, encoding="utf-8")
    return path


def _edit(saved, **changes) -> str:
    d = _good(saved)
    for k, v in changes.items():
        d[k] = v
    return json.dumps(d)


class _Payload:
    """Unpickling this would create a file: proof that loading never unpickles."""

    def __init__(self, marker):
        self.marker = marker

    def __reduce__(self):
        return (open, (self.marker, "w"))


HOSTILE = {
    "predictors as text": (lambda s, t: _edit(s, predictors="age"), "should be a list of column names"),
    "huge whole number": (lambda s, t: _edit(s, data_rows=0).replace('"data_rows": 0', '"data_rows": ' + "9" * 400),
                          "far too large"),
    "huge float": (lambda s, t: _edit(s, threshold=0.5).replace('"threshold": 0.5', '"threshold": 1e400'),
                   "too large"),
    "NaN coefficient": (lambda s, t: _edit(s).replace('"coefficients": [', '"coefficients": [NaN, ', 1),
                        "not a number"),
    "deeply nested": (lambda s, t: '{"format": "twofold-session", "x": ' + "[" * 100000 + "]" * 100000 + "}",
                      "nests lists or objects"),
    "pickle payload": (lambda s, t: pickle.dumps(_Payload(str(t / "ran.txt"))), "pickle"),
    "old-style pickle text": (lambda s, t: pickle.dumps(_Payload(str(t / "ran.txt")), protocol=0),
                              "not valid JSON"),
    "not JSON": (lambda s, t: "format = twofold-session\n", "not valid JSON"),
    "newer schema": (lambda s, t: _edit(s, schema_version=2), "update Twofold"),
    "schema as text": (lambda s, t: _edit(s, schema_version="1"), "whole number"),
    "huge string": (lambda s, t: _edit(s, outcome="a" * 100000), "characters long"),
    "huge list": (lambda s, t: _edit(s, predictors=[f"c{i}" for i in range(100000)]), "more than the"),
    "non-string column names": (lambda s, t: _edit(s, predictors=[1, 2]), "should be a column name"),
    "path elsewhere: system file": (lambda s, t: _edit(s, data="/etc/passwd"), "not a data file"),
    "path elsewhere: device": (lambda s, t: _edit(s, data="/dev/zero"), "not a data file"),
    "path elsewhere: web address": (lambda s, t: _edit(s, data="http://example.org/x.csv"), "web address"),
    "unknown field": (lambda s, t: _edit(s, __reduce__="os.system"), "unknown field"),
    "duplicate key": (lambda s, t: _edit(s).replace('"firth": false', '"firth": false, "firth": true'), "twice"),
    "bool as index": (lambda s, t: _edit(s, chosen=True), "whole number"),
    "wrong format marker": (lambda s, t: _edit(s, format="other"), "not a Twofold session"),
    "top-level list": (lambda s, t: "[1, 2, 3]", "session object"),
    "empty": (lambda s, t: "", "empty"),
    "bad role": (lambda s, t: _edit(s, roles={"age": "python"}), "role of 'age'"),
    "covariance not square": (lambda s, t: json.dumps({**_good(s), "model": {**_good(s)["model"], "covariance": [[1]]}}),
                              "square table"),
    "negative suppression limit": (lambda s, t: _edit(s, report={"suppress_up_to": -5, "list_records": False}),
                                   "outside 1 to 1000"),
    "huge suppression limit": (lambda s, t: _edit(s, report={"suppress_up_to": 10 ** 15, "list_records": False}),
                               "outside 1 to 1000"),
    "suppression limit as text": (lambda s, t: _edit(s, report={"suppress_up_to": "10", "list_records": False}),
                                  "whole number"),
    "records flag as a number": (lambda s, t: _edit(s, report={"suppress_up_to": 10, "list_records": 1}),
                                 "true or false"),
    "report options as a list": (lambda s, t: _edit(s, report=[10, False]), "should be an object"),
    "rows columns as text": (lambda s, t: _edit(s, rows_complete_in="lives_alone"), "list of column names"),
}


@pytest.mark.parametrize("case", list(HOSTILE))
def test_hostile_session_files_give_one_sentence_and_run_nothing(case, saved, tmp_path):
    make, fragment = HOSTILE[case]
    path = _write(tmp_path, make(saved, tmp_path))
    with pytest.raises(ses.SessionFileError) as info:
        ses.load_session(path)
    message = str(info.value)
    assert fragment in message
    assert "\n" not in message and message.endswith(".") and message.count(". ") == 0
    assert not (tmp_path / "ran.txt").exists()


def test_payload_really_would_run_if_unpickled(tmp_path):
    # The pickle case above is only meaningful if unpickling it acts; check that here.
    marker = tmp_path / "ran.txt"
    pickle.loads(pickle.dumps(_Payload(str(marker)))).close()
    assert marker.exists()


# ---- autosave -----------------------------------------------------------------


@pytest.fixture
def home(tmp_path, monkeypatch):
    monkeypatch.setenv("TWOFOLD_HOME", str(tmp_path / "home"))
    return tmp_path / "home"


def _dead_pid() -> int:
    out = subprocess.run([sys.executable, "-c", "import os; print(os.getpid())"], capture_output=True, text=True)
    return int(out.stdout)


def test_autosave_and_recovery(home, saved):
    session = ses.load_session(saved)
    path = ses.autosave(session)
    assert path.parent == home / "autosave" and path.exists()
    assert ses.load_session(path)["predictors"] == PREDICTORS
    assert ses.recoverable() is None  # our own autosave is not a leftover
    # A process that died without a clean exit left its autosave and lock behind.
    pid = _dead_pid()
    left = ses.autosave_path(pid)
    shutil.copy(path, left)
    (home / "autosave" / f"running-{pid}.lock").write_text(json.dumps({"pid": pid}))
    assert ses.recoverable() == left
    # A live process's autosave (with its lock) is left alone.
    import os

    live = os.getppid()
    shutil.copy(path, ses.autosave_path(live))
    (home / "autosave" / f"running-{live}.lock").write_text(json.dumps({"pid": live}))
    assert ses.recoverable() == left
    ses.discard_autosave(left)
    assert ses.recoverable() is None and not left.exists()
    ses.clean_exit()
    assert not path.exists() and not ses.lock_path().exists()


def test_digest_is_reused_only_for_an_unchanged_file(tmp_path, monkeypatch):
    import hashlib
    import os

    from twofold.core.outputs import session as sess

    data = tmp_path / "d.csv"
    data.write_bytes(b"a,b\n1,2\n")
    # Reference: hashlib.sha256 over the bytes.
    assert sess.file_sha256(data) == hashlib.sha256(b"a,b\n1,2\n").hexdigest()
    reads = []
    real_open = open
    monkeypatch.setattr("builtins.open", lambda *a, **k: reads.append(a[0]) or real_open(*a, **k))
    assert sess.file_sha256(data, reuse=True) == hashlib.sha256(b"a,b\n1,2\n").hexdigest()
    assert reads == []  # unchanged file: not read again
    data.write_bytes(b"a,b\n1,3\n")
    st = os.stat(data)
    os.utime(data, ns=(st.st_atime_ns, st.st_mtime_ns + 1_000_000))  # a later change time
    assert sess.file_sha256(data, reuse=True) == hashlib.sha256(b"a,b\n1,3\n").hexdigest()
    assert reads  # changed: read again


# ---- rows decided by other columns, and the report's options ---------------------------------------------


def test_rows_complete_in_other_columns_match_statsmodels():
    # Outside reference: statsmodels Logit on the rows that pandas finds complete in age, lives_alone and the outcome.
    spec = AnalysisSpec(data=str(READMIT), outcome="readmitted_30d", predictors=["age"],
                        rows_complete_in=["age", "lives_alone"])
    res = run_analysis(spec)
    frame = pd.read_csv(READMIT)
    rows = frame[["age", "lives_alone", "readmitted_30d"]].dropna()
    ref = sm.Logit(rows.readmitted_30d, sm.add_constant(rows[["age"]].astype(float))).fit(disp=0)
    rec = res.record
    assert rec["rows_used"] == len(rows) < len(frame)
    assert rec["intercept"]["estimate"] == pytest.approx(ref.params["const"], rel=1e-7)
    assert rec["terms"][0]["estimate"] == pytest.approx(ref.params["age"], rel=1e-7)
    assert rec["terms"][0]["std_error"] == pytest.approx(ref.bse["age"], rel=1e-6)
    # The rows left out are explained: pandas counts the missing lives_alone values among rows with an outcome.
    missing = int(frame.loc[frame.readmitted_30d.notna(), "lives_alone"].isna().sum())
    assert rec["rows_read"] - rec["rows_used"] == missing + rec["rows_missing_outcome"]
    assert rec["missing_by_column"] == {"age": 0, "lives_alone": missing}
    (note,) = [w for w in rec["warnings"] if w["code"] == "rows_dropped"]
    assert f"{missing} missing 'lives_alone'" in note["message"]
    # Without the field, the rows complete for the model alone (as before).
    alone = run_analysis(AnalysisSpec(data=str(READMIT), outcome="readmitted_30d", predictors=["age"]))
    assert alone.record["rows_used"] == int(frame.readmitted_30d.notna().sum())
    # A nested test uses the same rows for both models.
    both = run_analysis(AnalysisSpec(data=str(READMIT), outcome="readmitted_30d", predictors=["age", "sex"],
                                     smaller=["age"], rows_complete_in=["lives_alone"]))
    assert both.record["nested"]["rows"] == len(rows) == both.record["rows_used"]
    small = sm.Logit(rows.readmitted_30d, sm.add_constant(rows[["age"]].astype(float))).fit(disp=0)
    large = sm.Logit(rows.readmitted_30d, sm.add_constant(pd.DataFrame(
        {"age": rows.age.astype(float), "M": (frame.loc[rows.index, "sex"] == "M").astype(float)}))).fit(disp=0)
    assert both.record["nested"]["g"] == pytest.approx(2 * (large.llf - small.llf), rel=1e-6)


def test_round_trip_keeps_rows_and_report_options(tmp_path):
    spec = AnalysisSpec(data=str(READMIT), outcome="readmitted_30d", predictors=["age", "sex"],
                        rows_complete_in=["age", "sex", "comorbidity_score"])
    res = run_analysis(spec)
    texts = {"title": "Readmissions", "authors": "Quality team", "question": "Who comes back within 30 days?"}
    path = ses.save_session(ses.session_from_result(res, report={"suppress_up_to": 4, "list_records": True,
                                                                 **texts}), tmp_path / "s.json")
    loaded = ses.load_session(path)
    assert loaded["report"] == {"suppress_up_to": 4, "list_records": True, **texts}
    # A session saved before reports had a title, authors and a question reads them as empty.
    older = json.loads(path.read_text(encoding="utf-8"))
    for key in texts:
        older["report"].pop(key)
    (tmp_path / "older.json").write_text(json.dumps(older), encoding="utf-8")
    assert ses.load_session(tmp_path / "older.json")["report"] == {"suppress_up_to": 4, "list_records": True,
                                                                    "title": "", "authors": "", "question": ""}
    assert loaded["rows_complete_in"] == ["age", "sex", "comorbidity_score"]
    assert "comorbidity_score" in ses.session_columns(loaded)  # so a later extract without it is noticed
    again = run_analysis(ses.spec_from_session(loaded))
    assert again.record == res.record
    assert again.record["rows_used"] == len(pd.read_csv(READMIT)[["age", "sex", "comorbidity_score"]].dropna())


def test_a_session_saved_before_the_new_fields_still_loads(saved, result, tmp_path):
    old = _good(saved)
    for key in ("rows_complete_in", "report"):
        old.pop(key)
    path = tmp_path / "old.json"
    path.write_text(json.dumps(old), encoding="utf-8")
    loaded = ses.load_session(path)
    assert loaded["report"] == {"suppress_up_to": 10, "list_records": False, "title": "", "authors": "",
                                "question": ""} and loaded["rows_complete_in"] == []
    assert run_analysis(ses.spec_from_session(loaded)).record == result.record
