"""The committee report: aggregate figures only, self-contained, and figures that match outside references."""

from __future__ import annotations

import base64
import importlib.metadata as md
import platform
import re
import shutil
import subprocess
import zlib
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from sklearn.metrics import roc_auc_score

from twofold.core.analysis import AnalysisSpec, run_analysis
from twofold.core.errors import TwofoldError
from twofold.core.outputs.privacy import SUPPRESSED
from twofold.core.outputs.report import Table, build_report
from twofold.render.report_writer import write_report

ROOT = Path(__file__).resolve().parents[2]
READMIT = ROOT / "sample_studies" / "readmission_synthetic.csv"
WOUND = ROOT / "sample_studies" / "wound_infection_synthetic.csv"
PREDICTORS = ["age", "sex", "discharge_destination", "lives_alone", "comorbidity_score"]
LADDER = [["age"], ["age", "sex"], PREDICTORS]


@pytest.fixture(scope="module")
def result():
    return run_analysis(AnalysisSpec(data=str(READMIT), outcome="readmitted_30d", predictors=PREDICTORS,
                                     smaller=["age", "sex"], threshold=0.2))


@pytest.fixture(scope="module")
def written(result, tmp_path_factory):
    folder = tmp_path_factory.mktemp("report")
    html = write_report(result, folder / "report.html", ladder=LADDER)
    pdf = write_report(result, folder / "report.pdf", ladder=LADDER)
    return html, pdf


@pytest.fixture(scope="module")
def identifiers():
    frame = pd.read_csv(READMIT, dtype=str)
    return list(frame.admission_id), sorted(set(frame.admission_date))


def _pdf_literal(body: bytes) -> str:
    """One PDF literal string (PDF 1.7 reference, section 7.3.4.2), two-byte codes read as UTF-16."""
    out = bytearray()
    i = 0
    while i < len(body):
        c = body[i]
        if c == 0x5C and i + 1 < len(body):  # backslash escape
            nxt = body[i + 1]
            octal = re.match(rb"[0-7]{1,3}", body[i + 1:i + 4])
            if octal:
                out.append(int(octal.group(0), 8) & 0xFF)
                i += 1 + len(octal.group(0))
                continue
            out.append({0x6E: 10, 0x72: 13, 0x74: 9, 0x62: 8, 0x66: 12}.get(nxt, nxt))
            i += 2
            continue
        out.append(c)
        i += 1
    raw = bytes(out)
    if len(raw) % 2 == 0 and raw[:1] == b"\x00":
        return raw.decode("utf-16-be", errors="replace")
    return raw.decode("latin-1")


def _pdf_text(path: Path) -> str:
    """The PDF's text: pdftotext (poppler) when installed, else the strings shown by the content streams."""
    if shutil.which("pdftotext"):
        return subprocess.run(["pdftotext", str(path), "-"], capture_output=True, text=True, check=True).stdout
    raw = path.read_bytes()
    out = []
    for m in re.finditer(rb"stream\r?\n(.*?)\r?\nendstream", raw, re.S):
        try:
            content = zlib.decompress(m.group(1))
        except zlib.error:
            continue
        # Each shown string or kerned array (Tj / TJ) becomes one line.
        for shown in re.finditer(rb"(\[(?:[^\]\\]|\\.)*\]|\((?:[^()\\]|\\.)*\))\s*T[jJ]", content, re.S):
            pieces = re.findall(rb"\(((?:[^()\\]|\\.)*)\)", shown.group(1), re.S)
            out.append("".join(_pdf_literal(p) for p in pieces))
    return "\n".join(out)


def test_html_holds_no_identifiers_dates_scripts_or_links(written, identifiers):
    html = written[0].read_text(encoding="utf-8")
    ids, dates = identifiers
    assert not [i for i in ids if i in html]
    assert not [d for d in dates if d in html]
    low = html.lower()
    for banned in ("<script", "http://", "https://", "@font-face", "url(", "<link", "<iframe", "src=\"http"):
        assert banned not in low, banned
    images = re.findall(r'<img src="([^"]+)"', html)
    assert len(images) == 2 and all(src.startswith("data:image/png;base64,") for src in images)
    for src in images:
        png = base64.b64decode(src.split(",", 1)[1])
        assert png[:8] == b"\x89PNG\r\n\x1a\n"
        assert b"http" not in png  # no software link in the PNG's text chunks


def test_pdf_holds_no_identifiers_dates_or_links(written, identifiers):
    pdf = written[1]
    text = _pdf_text(pdf)
    assert "Area under the ROC curve" in text  # the extraction works
    ids, dates = identifiers
    assert not [i for i in ids if i in text]
    assert not [d for d in dates if d in text]
    assert b"http" not in pdf.read_bytes()


def test_figures_match_outside_references(result, written):
    html = written[0].read_text(encoding="utf-8")
    fit = result.fit
    # AUC: scikit-learn's roc_auc_score on the fitted risks.
    auc = roc_auc_score(fit.design.y, fit.fitted)
    assert f"Area under the ROC curve (c statistic) {auc:.3f}" in html
    # Odds ratios: statsmodels Logit on the complete rows.
    frame = pd.read_csv(READMIT)[PREDICTORS + ["readmitted_30d"]].dropna()
    X = pd.DataFrame({"const": 1.0, "age": frame.age, "M": (frame.sex == "M").astype(float)})
    for lvl in ("home_with_support", "care_home", "other_hospital"):
        X[lvl] = (frame.discharge_destination == lvl).astype(float)
    X["alone"] = (frame.lives_alone == "yes").astype(float)
    X["comorbidity_score"] = frame.comorbidity_score
    ref = sm.Logit(frame.readmitted_30d, X).fit(disp=0)
    assert result.record["rows_used"] == len(frame)
    for name, level in (("care_home", "care_home (compared with home)"), ("alone", "yes (compared with no)")):
        lo, hi = np.exp(ref.conf_int().loc[name])
        assert (f"<td>{level}</td><td class=\"r\">{np.exp(ref.params[name]):.3f}</td>"
                f"<td class=\"r\">{lo:.3f} to {hi:.3f}</td>") in html
    # Cross-tab of a categorical predictor by outcome: pandas crosstab on the rows used.
    tab = pd.crosstab(frame.discharge_destination, frame.readmitted_30d)
    for level in ("home_with_support", "care_home"):
        e, ne = int(tab.loc[level, 1]), int(tab.loc[level, 0])
        assert f"<td>{level}</td><td class=\"r\">{e:,}</td><td class=\"r\">{ne:,}</td>" in html
    # Influence summary: statsmodels' GLM Cook's distance, counted above 4/n (common practice).
    design = result.fit.design.X[:, result.fit.kept]
    glm = sm.GLM(result.fit.design.y, design, family=sm.families.Binomial()).fit()
    cooks = glm.get_influence().cooks_distance[0]
    above = int(np.sum(cooks > 4 / len(cooks)))
    assert f"{above:,} of the {len(cooks):,} records" in html
    assert "row of the data file" not in html  # no record numbers unless asked


def test_contents_a_committee_needs(result, written):
    html = written[0].read_text(encoding="utf-8")
    for needle in ("Models tried", "The chosen model", "odds ratio", "95% interval", "by construction",
                   "Hosmer-Lemeshow test", "Hosmer &amp; Lemeshow 1980", "DeLong et al. (1988)",
                   "Van Calster et al. 2016", "Peduzzi et al. (1996)", "Riley et al. (2020)", "statsmodels",
                   "Cook&#x27;s distance is above 4/n", "Warnings", "lives_alone", "suppressed",
                   "Centers for Medicare &amp; Medicaid Services"):
        assert needle in html, needle
    assert html.count("These figures describe statistical associations") == 2  # top and bottom
    # Software versions, from the installed packages' own metadata.
    assert f"<td>Python</td><td>{platform.python_version()}</td>" in html
    for name in ("numpy", "scipy", "pandas", "statsmodels"):
        assert f"<td>{name}</td><td>{md.version(name)}</td>" in html
    assert "<td>Twofold</td>" in html
    rep = build_report(result, ladder=LADDER)
    assert "*" not in rep.text()  # no significance stars
    warnings = [b for b in rep.blocks if getattr(b, "style", None) == "warning"]
    assert warnings and "lives_alone" in warnings[0].items[0]


@pytest.fixture(scope="module")
def rare(tmp_path_factory):
    """A made-up study where one ward has only six people (seeded)."""
    rng = np.random.default_rng(7)
    n = 900
    ward = np.array(["east"] * 500 + ["west"] * 394 + ["annex"] * 6)
    age = rng.normal(60, 12, n).round()
    y = (rng.random(n) < 1 / (1 + np.exp(-(-3 + 0.03 * age)))).astype(int)
    y[-6:] = [1, 0, 0, 1, 0, 0]
    path = tmp_path_factory.mktemp("rare") / "rare.csv"
    pd.DataFrame({"ward": ward, "age": age, "died": y}).to_csv(path, index=False)
    return run_analysis(AnalysisSpec(data=str(path), outcome="died", predictors=["age", "ward"]))


def test_small_cells_are_suppressed_with_complements(rare):
    rep = build_report(rare)
    tab = next(b for b in rep.blocks if isinstance(b, Table) and b.headers[0] == "ward")
    rows = {r[0].split(" (")[0]: r for r in tab.rows}
    assert rows["annex"][1:4] == [SUPPRESSED] * 3  # 2 events, 4 non-events, 6 people
    # Subtraction from the column totals must not recover them: each column hides another cell.
    for j in (1, 2):
        assert sum(r[j] == SUPPRESSED for r in tab.rows[:-1]) >= 2
    assert rows["all rows used"][3] == "900"
    text = rep.text()
    assert "annex" in text
    off = build_report(rare, suppress_below=0)
    tab = next(b for b in off.blocks if isinstance(b, Table) and b.headers[0] == "ward")
    assert [r for r in tab.rows if r[0] == "annex"][0][1:4] == ["2", "4", "6"]


def test_records_only_when_asked(result, tmp_path):
    path = write_report(result, tmp_path / "r.html", include_records=True)
    html = path.read_text(encoding="utf-8")
    assert "row of the data file" in html
    top = result.assessment.influential(10)
    assert f"<td>{top[0]['row']}</td>" in html


def test_firth_methods_are_named(tmp_path):
    res = run_analysis(AnalysisSpec(data=str(WOUND), outcome="infection", event="yes",
                                    predictors=["age", "wound_class"], firth=True))
    html = write_report(res, tmp_path / "firth.html").read_text(encoding="utf-8")
    assert "Firth 1993" in html and "Heinze &amp; Schemper 2002" in html and "Puhr et al. 2017" in html


def test_suffix_and_data_file_are_refused(result):
    with pytest.raises(TwofoldError, match=r"\.html or \.pdf"):
        write_report(result, Path("report.docx"))
    before = READMIT.read_bytes()
    with pytest.raises(TwofoldError, match="data file itself"):
        write_report(result, READMIT)
    assert READMIT.read_bytes() == before


def test_rows_left_out_for_other_columns_are_explained():
    # A re-run of a window session keeps the ladder's rows: lives_alone decides the rows of a model without it.
    res = run_analysis(AnalysisSpec(data=str(READMIT), outcome="readmitted_30d", predictors=["age", "sex"],
                                    rows_complete_in=["age", "sex", "lives_alone"]))
    rep = build_report(res)
    text = rep.text()
    # Outside reference: pandas counts the rows missing lives_alone (the outcome is never missing here).
    frame = pd.read_csv(READMIT)
    missing = int(frame.lives_alone.isna().sum())
    assert frame.readmitted_30d.notna().all() and missing > 10
    records = next(b for b in rep.blocks if isinstance(b, Table) and b.headers == ["", "count"])
    rows = dict((r[0], r[1]) for r in records.rows)
    assert rows["Rows left out (no outcome, or a predictor missing)"] == f"{missing:,}"
    assert rows["Rows used by the model"] == f"{len(frame) - missing:,}"
    by_column = next(b for b in rep.blocks if isinstance(b, Table) and b.headers[0] == "predictor"
                     and "rows missing it" in b.headers[1])
    assert ["lives_alone", f"{missing:,}"] in by_column.rows
    assert f"{missing:,} rows were left out" in text and "outside the rows compared" not in text


def _table(rep, first_header, second=None):
    return next(b for b in rep.blocks if isinstance(b, Table) and b.headers[0] == first_header
                and (second is None or b.headers[1] == second))


def test_a_small_groups_coefficients_are_withheld_and_said_so(rare):
    # ESSnet output-checking rule (Eurostat 2015, common practice): no coefficient of a group below the limit.
    rep = build_report(rare)
    coef = _table(rep, "predictor", "group")
    rows = {r[0]: r for r in coef.rows}
    assert rows["ward"][1:3] == ["all its groups", "withheld"] and len([r for r in coef.rows if r[0] == "ward"]) == 1
    # The measured predictor keeps its figures: statsmodels' Logit on the same design gives its odds ratio.
    X = rare.fit.design.X
    ref = sm.Logit(rare.fit.design.y, X).fit(disp=0)
    assert rows["age"][2] == f"{np.exp(ref.params[1]):.3f}"
    text = rep.text()
    assert "What this report leaves out" in text and "'ward' (and of any interaction with it)" in text
    assert f"{np.exp(ref.params[2]):.3f}" not in text and f"{np.exp(ref.params[3]):.3f}" not in text
    # No ward row in the joint Wald tests either.
    assert not any(isinstance(b, Table) and b.headers[0].startswith("predictor (all") and
                   any(r[0] == "ward" for r in b.rows) for b in rep.blocks)


def test_warnings_come_before_the_results_and_profile_intervals_are_explained():
    res = run_analysis(AnalysisSpec(data=str(WOUND), outcome="infection", event="yes",
                                    predictors=["age", "wound_class"], profile_ci=True))
    rep = build_report(res, suppress_below=0)  # suppression off: every figure is printed
    headings = [b.text for b in rep.blocks if hasattr(b, "level")]
    assert headings.index("Warnings") < headings.index("The records") < headings.index("The chosen model")
    first = next(b for b in rep.blocks if getattr(b, "style", None) == "warning")
    assert any("separat" in item for item in first.items)
    coef = _table(rep, "predictor", "group")
    assert "95% profile-likelihood interval" in coef.headers and "95% Wald interval" in coef.headers
    assert "always when a predictor separates the outcome, use the profile-likelihood interval" in coef.caption
    # Under separation the report gives profile-likelihood intervals even when they were not asked for.
    plain = run_analysis(AnalysisSpec(data=str(WOUND), outcome="infection", event="yes",
                                      predictors=["age", "wound_class"]))
    assert not any("or_pl_low" in t for t in plain.record["terms"])
    shown = _table(build_report(plain, suppress_below=0), "predictor", "group")
    assert "95% profile-likelihood interval" in shown.headers
    assert [r[4] for r in shown.rows] == [r[4] for r in coef.rows]  # the same intervals as when asked for
    assert not any("or_pl_low" in t for t in plain.record["terms"])  # the record itself is left alone
    # With the default limit wound_class's figures are withheld (its 'contaminated' group all had the event),
    # but the separation warning still comes first: it names the predictor, not the group.
    rep = build_report(res)
    first = next(b for b in rep.blocks if getattr(b, "style", None) == "warning")
    assert any("'wound_class'" in item and "separat" in item for item in first.items)
    assert [r for r in _table(rep, "predictor", "group").rows if r[0] == "wound_class"][0][2] == "withheld"


def test_small_study_calibration_shows_mean_risks_and_plain_counts():
    res = run_analysis(AnalysisSpec(data=str(WOUND), outcome="infection", event="yes", predictors=["age", "bmi"]))
    rep = build_report(res)
    cal = _table(rep, "risk group")
    groups = res.assessment.groups
    # The mean predicted risk is an average of predictions, not a count: shown for every group, and it is the
    # plain mean of the fitted probabilities within the group (numpy on statsmodels' fitted values).
    assert [r[2] for r in cal.rows[:-1]] == [f"{m:.3f}" for m in groups.mean_predicted]
    p = sm.Logit(res.fit.design.y, res.fit.design.X).fit(disp=0).predict()
    order = np.sort(p)
    assert float(groups.mean_predicted[0]) == pytest.approx(order[: int(groups.n[0])].mean(), rel=1e-6)
    assert any(r[3] == SUPPRESSED for r in cal.rows[:-1])
    text = rep.text()
    assert "Hosmer-Lemeshow test is withheld" in text
    assert "suppressed of" not in text
    assert re.search(r"Cook's distance is above 4/n = [0-9.]+ .*: (1 to 10|[0-9,]+) of the 120 records", text)


def test_a_rare_outcome_is_not_counted_and_its_model_not_described(tmp_path):
    # Six deaths among 300: the counts of 1 to 10 rule (CMS, common practice) covers the events total too, and
    # every model figure from the intercept on would give it back.
    rng = np.random.default_rng(4)
    age = rng.normal(60, 10, 300).round()
    died = np.zeros(300, dtype=int)
    died[rng.choice(300, 6, replace=False)] = 1
    path = tmp_path / "rare_outcome.csv"
    pd.DataFrame({"age": age, "died": died}).to_csv(path, index=False)
    res = run_analysis(AnalysisSpec(data=str(path), outcome="died", predictors=["age"]))
    assert res.record["events"] == 6 and res.record["events_per_parameter"] == pytest.approx(6.0)
    rep = build_report(res)
    rows = dict((r[0], r[1]) for r in _table(rep, "", "count").rows)
    assert rows["Events among them"] == SUPPRESSED == rows["Non-events among them"]
    text = re.sub(r"SHA-256 checksum [0-9a-f]+", "", rep.text())
    assert "The model's figures are withheld" in text and "294" not in text and "2.0%" not in text
    assert "6.0 of the rarer outcome" not in text and "Only 6.0" not in text
    assert not any(isinstance(b, Table) and b.headers[:2] == ["predictor", "group"] for b in rep.blocks)
