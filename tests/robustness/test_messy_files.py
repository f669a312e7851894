"""Messy real-world extracts: each gives a sensible table or one clear message, never a traceback.

The corpus is generated here, in a temporary folder, from seeded random
numbers; the values written are kept, so what Twofold reads back is compared
with what was written (the reference is the generator, not the reader).  Fits
on cleaned files are compared with statsmodels' ``Logit`` on the values as
generated.  Every file is also given to ``twofold fit`` in a child process:
the exit code is 0 or 2, standard error holds at most one line, and no
traceback ever reaches the user.
"""

from __future__ import annotations

import json
import os
import re
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm

from robust_support import run_cli
from twofold.core.errors import DataFileError, TwofoldError
from twofold.core.data.io import read_table
from twofold.core.data.roles import Role, describe_columns
from twofold.core.models.study import Study

RNG_SEED = 20240611


def _rng(k=0):
    return np.random.default_rng(RNG_SEED + k)


def _logistic_rows(n, k=0):
    """An age, a 0/1 outcome drawn from a known logistic model, and the linear predictor."""
    rng = _rng(k)
    age = np.round(rng.uniform(20, 90, n), 1)
    p = 1 / (1 + np.exp(-(-4 + 0.06 * age)))
    y = (rng.uniform(size=n) < p).astype(int)
    return age, y


def _write(path: Path, text: str, encoding="utf-8") -> Path:
    path.write_bytes(text.encode(encoding))
    return path


# ------------------------------------------------------------------ the corpus
def make_corpus(folder: Path) -> dict:
    """Write every messy file; returns name -> path, plus the values written under '_values'."""
    f = {}
    values = {}
    f["empty"] = folder / "empty.csv"
    f["empty"].write_bytes(b"")
    f["header_only"] = _write(folder / "header_only.csv", "age,died,sex\n")
    f["one_row"] = _write(folder / "one_row.csv", "age,died\n54,1\n")

    age, y = _logistic_rows(300, 1)
    values["age"], values["y"] = age, y
    lines = ["age,died"] + [f"{a},{b}" for a, b in zip(age, y)]
    f["bom"] = folder / "bom.csv"
    f["bom"].write_bytes(b"\xef\xbb\xbf" + ("\n".join(lines) + "\n").encode())

    towns = np.array(["Orl\xe9ans", "Li\xe8ge", "K\xf6ln"])[_rng(2).integers(0, 3, 300)]
    values["towns"] = towns
    f["latin1"] = _write(folder / "latin1.csv", "\xe2ge,ville,d\xe9c\xe8s\n" + "".join(
        f"{a},{t},{b}\n" for a, t, b in zip(age, towns, y)), "latin-1")
    f["cp1252"] = _write(folder / "cp1252.csv", "note,died\n" + "".join(
        f"\u201cseen\u201d {i % 3},{b}\n" for i, b in enumerate(y)), "cp1252")

    # A European export: semicolons, decimal commas, thousands dots.
    weight = np.round(_rng(3).normal(75, 15, 300), 2)
    charge = np.round(_rng(4).uniform(500, 25000, 300), 1)
    values["weight"], values["charge"] = weight, charge

    def eu(x, decimals):
        whole, _, frac = f"{x:,.{decimals}f}".partition(".")
        return whole.replace(",", ".") + ("," + frac if frac else "")
    f["decimal_comma"] = _write(folder / "decimal_comma.csv", "weight;charge;died\n" + "".join(
        f"{eu(w, 2)};{eu(c, 1)};{b}\n" for w, c, b in zip(weight, charge, y)))
    # Thousands separators in quoted fields of a comma file.
    f["thousands"] = _write(folder / "thousands.csv", "charge,died\n" + "".join(
        f"\"{c:,.1f}\",{b}\n" for c, b in zip(charge, y)))
    f["quoted_newlines"] = _write(folder / "quoted_newlines.csv", "id,note,age,died\n" + "".join(
        f"{i},\"line one\nline two of {i}\",{a},{b}\n" for i, (a, b) in enumerate(zip(age, y))))
    f["duplicate_names"] = _write(folder / "duplicate_names.csv", "age,age,,died\n" + "".join(
        f"{a},{a * 2},{i},{b}\n" for i, (a, b) in enumerate(zip(age, y))))
    long_name = "patient age in completed years at the time of admission " * 5
    values["long_name"] = long_name.strip()
    f["long_names"] = _write(folder / "long_names.csv", f"\"{long_name}\",\u4f53\u91cd (kg),died\n" + "".join(
        f"{a},{w},{b}\n" for a, w, b in zip(age, weight, y)))

    n = 10_000
    rng = _rng(5)
    f["identifier"] = _write(folder / "identifier.csv", "mrn,age,died\n" + "".join(
        f"MRN{i:06d},{rng.integers(20, 90)},{rng.integers(0, 2)}\n" for i in range(n)))
    f["all_missing"] = _write(folder / "all_missing.csv", "age,empty,died\n" + "".join(
        f"{a},,{b}\n" for a, b in zip(age, y)))
    f["constant"] = _write(folder / "constant.csv", "age,site,died\n" + "".join(
        f"{a},Leeds,{b}\n" for a, b in zip(age, y)))
    f["one_valued_outcome"] = _write(folder / "one_valued_outcome.csv", "age,died\n" + "".join(
        f"{a},0\n" for a in age))
    f["coded_1_2"] = _write(folder / "coded_1_2.csv", "age,died\n" + "".join(
        f"{a},{b + 1}\n" for a, b in zip(age, y)))
    spellings = np.array(["Yes", "yes", "YES", " yes "])
    noes = np.array(["No", "no", "NO "])
    ans = [spellings[i % 4] if b else noes[i % 3] for i, b in enumerate(y)]
    f["case_variants"] = _write(folder / "case_variants.csv", "age,died\n" + "".join(
        f"{a},{s}\n" for a, s in zip(age, ans)))
    f["true_false"] = _write(folder / "true_false.csv", "age,died,flag\n" + "".join(
        f"{a},{'TRUE' if b else 'FALSE'},{'' if i % 10 == 0 else ('TRUE' if i % 3 else 'FALSE')}\n"
        for i, (a, b) in enumerate(zip(age, y))))
    padded = [f" {a:g} " if i % 2 else f"{a:.1f}" for i, a in enumerate(np.round(age))]
    padded[5] = "   "
    values["padded"] = np.round(age)
    f["numbers_as_text"] = _write(folder / "numbers_as_text.csv", "age,died\n" + "".join(
        f"{a},{b}\n" for a, b in zip(padded, y)))
    dates = pd.Timestamp("2023-01-01") + pd.to_timedelta(_rng(6).integers(0, 365, 300), unit="D")
    f["dates"] = _write(folder / "dates.csv", "admitted,age,died\n" + "".join(
        f"{d:%Y-%m-%d},{a},{b}\n" for d, a, b in zip(dates, age, y)))
    mixed = [f"{a:g}" for a in np.round(age)]
    mixed[2], mixed[40] = "unknown", "see notes"
    f["mixed_numbers_words"] = _write(folder / "mixed_numbers_words.csv", "age,died\n" + "".join(
        f"{a},{b}\n" for a, b in zip(mixed, y)))
    f["ragged"] = _write(folder / "ragged.csv", "age,died\n54,1\n61,0,extra\n47,0\n")
    f["title_and_blank_lines"] = _write(folder / "title_and_blank_lines.csv",
                                        "Readmissions extract, run 2024-06-01\n\n,,\nage,died,\n" + "".join(
                                            f"{a},{b},\n" for a, b in zip(age, y)) + ",,\n")
    f["excel_sep_hint"] = _write(folder / "excel_sep_hint.csv", "sep=;\nage;died\n" + "".join(
        f"{a};{b}\n" for a, b in zip(age, y)))
    f["utf16_tab"] = folder / "utf16_tab.txt"
    f["utf16_tab"].write_bytes(("age\tdied\n" + "".join(f"{a}\t{b}\n" for a, b in zip(age, y))).encode("utf-16"))
    f["binary"] = folder / "binary.csv"
    f["binary"].write_bytes(b"\x89PNG\r\n\x1a\n\x00\x00\x00\rIHDR" + bytes(range(256)))
    f["old_xls"] = folder / "old.xls"
    f["old_xls"].write_bytes(b"\xd0\xcf\x11\xe0\xa1\xb1\x1a\xe1" + b"\x00" * 512)
    f["xlsx"] = _workbook(folder / "extract.xlsx", age, y)
    f["_values"] = values
    return f


def _workbook(path: Path, age, y) -> Path:
    """Several sheets; the data sheet has empty leading rows and columns, a merged title,
    a two-row header with merged cells, formulas without saved results, an error cell and
    numbers stored as text."""
    import datetime as dt

    import openpyxl

    wb = openpyxl.Workbook()
    notes = wb.active
    notes.title = "notes"
    notes["A1"] = "Data dictionary: see the extract sheet."
    ws = wb.create_sheet("extract")
    ws.merge_cells("B3:G3")
    ws["B3"] = "Readmissions extract 2024"
    ws["B5"] = "id"
    ws.merge_cells("B5:B6")
    ws["C5"] = "blood pressure"
    ws.merge_cells("C5:D5")
    ws["C6"], ws["D6"] = "systolic", "diastolic"
    ws["E5"], ws["F5"], ws["G5"], ws["H5"] = "admitted", "age", "ratio", "died"
    for i, (a, b) in enumerate(zip(age, y)):
        r = 7 + i
        ws.cell(r, 2, i + 1)
        ws.cell(r, 3, 110 + i % 40)
        ws.cell(r, 4, 70 + i % 25)
        ws.cell(r, 5, dt.datetime(2024, 1, 1) + dt.timedelta(days=i % 200))
        ws.cell(r, 6, str(a) if i % 7 == 0 else float(a))  # some numbers stored as text
        ws.cell(r, 7, f"=C{r}/D{r}")  # openpyxl saves no cached result
        ws.cell(r, 8, "yes" if b else "no")
    ws.cell(7 + 3, 6, "#N/A")
    other = wb.create_sheet("summary")
    other.append(["group", "n"])
    other.append(["all", len(age)])
    wb.save(path)
    return path


@pytest.fixture(scope="module")
def corpus(tmp_path_factory):
    return make_corpus(tmp_path_factory.mktemp("messy"))


# -------------------------------------------------------- the reading function
def test_empty_and_header_only_give_one_clear_message(corpus):
    with pytest.raises(DataFileError, match="is empty"):
        read_table(corpus["empty"])
    with pytest.raises(DataFileError, match="column names but no data rows"):
        read_table(corpus["header_only"])


def test_one_data_row_is_read(corpus):
    t = read_table(corpus["one_row"])
    assert t.frame.to_dict("list") == {"age": [54], "died": [1]}
    info = describe_columns(t.frame)
    assert info["died"].role == Role.EXCLUDED  # one value cannot be explained


def test_bom_is_not_part_of_the_first_name(corpus):
    t = read_table(corpus["bom"])
    assert list(t.frame.columns) == ["age", "died"]
    np.testing.assert_allclose(t.frame["age"].to_numpy(), corpus["_values"]["age"])
    assert t.notices == []


def test_latin1_and_cp1252(corpus):
    t = read_table(corpus["latin1"])
    assert t.encoding == "latin-1"
    assert list(t.frame.columns) == ["\xe2ge", "ville", "d\xe9c\xe8s"]
    assert t.frame["ville"].tolist() == corpus["_values"]["towns"].tolist()
    assert [n.code for n in t.notices] == ["encoding"]
    t = read_table(corpus["cp1252"])
    assert t.encoding == "cp1252"  # curly quotes are 0x93/0x94 in Windows-1252
    assert t.frame["note"].iloc[0] == "\u201cseen\u201d 0"


def test_latin1_found_only_far_into_the_file(tmp_path):
    """The first 64 KB are plain ASCII; a Latin-1 letter near the end still decides the encoding."""
    rows = "".join(f"{i},town {i % 7},{i % 2}\n" for i in range(6000))
    path = tmp_path / "late.csv"
    path.write_bytes(("id,town,died\n" + rows + "6000,Orl\xe9ans,1\n").encode("latin-1"))
    assert path.stat().st_size > 70_000
    t = read_table(path)
    assert t.encoding == "latin-1" and t.frame["town"].iloc[-1] == "Orl\xe9ans" and len(t.frame) == 6001


def test_decimal_comma_in_a_semicolon_file(corpus):
    t = read_table(corpus["decimal_comma"])
    assert t.delimiter == ";"
    assert t.frame["weight"].dtype.kind == "f" and t.frame["charge"].dtype.kind == "f"
    # '1.234,5' is 1234.5: compared with the numbers written.
    np.testing.assert_allclose(t.frame["weight"], corpus["_values"]["weight"])
    np.testing.assert_allclose(t.frame["charge"], corpus["_values"]["charge"])
    note = next(n for n in t.notices if n.code == "decimal_comma")
    assert set(note.subjects) == {"weight", "charge"} and "1,5" in note.message


def test_thousands_separators_in_quoted_fields(corpus):
    t = read_table(corpus["thousands"])
    np.testing.assert_allclose(t.frame["charge"], corpus["_values"]["charge"])
    assert [n.subjects for n in t.notices if n.code == "thousands"] == [("charge",)]


def test_quoted_newlines_stay_inside_the_cell(corpus):
    t = read_table(corpus["quoted_newlines"])
    assert len(t.frame) == 300
    assert t.frame["note"].iloc[7] == "line one\nline two of 7"
    assert describe_columns(t.frame)["note"].role == Role.IDENTIFIER


def test_duplicate_and_blank_names_are_made_unique(corpus):
    t = read_table(corpus["duplicate_names"])
    assert list(t.frame.columns) == ["age", "age (2)", "column 3", "died"]
    codes = [n.code for n in t.notices]
    assert codes.count("column_names") == 2
    dup = next(n for n in t.notices if "same name" in n.message)
    assert "'age (2)'" in dup.message
    np.testing.assert_allclose(t.frame["age (2)"], 2 * t.frame["age"])


def test_long_and_non_ascii_names(corpus):
    t = read_table(corpus["long_names"])
    assert list(t.frame.columns) == [corpus["_values"]["long_name"], "\u4f53\u91cd (kg)", "died"]


def test_identifier_with_ten_thousand_levels(corpus):
    info = describe_columns(read_table(corpus["identifier"]).frame)["mrn"]
    assert info.role == Role.IDENTIFIER and info.n_levels == 10_000 and info.levels == ()


def test_all_missing_and_constant_columns_are_not_offered(corpus):
    st = Study.from_file(corpus["all_missing"])
    assert st.columns["empty"].role == Role.EXCLUDED and st.columns["empty"].n_missing == 300
    assert "empty" not in st.candidates()
    st = Study.from_file(corpus["constant"])
    assert st.columns["site"].role == Role.EXCLUDED
    assert st.columns["site"].levels == ("Leeds",)


def test_outcome_with_one_value_or_coded_1_2(corpus):
    st = Study.from_file(corpus["one_valued_outcome"])
    with pytest.raises(TwofoldError, match="only one value"):
        st.set_outcome("died")
    st = Study.from_file(corpus["coded_1_2"])
    with pytest.raises(TwofoldError, match="Say which value"):
        st.set_outcome("died", guess=False)
    assert st.set_outcome("died", "2") == 2


def test_case_variants_are_one_value(corpus):
    t = read_table(corpus["case_variants"])
    spelled = t.frame["died"].unique()
    assert len(spelled) == 2 and {v.casefold() for v in spelled} == {"no", "yes"}
    note = next(n for n in t.notices if n.code == "merged_values")
    assert "'YES'" in note.message and note.subjects == ("died",)
    st = Study(t)
    assert st.set_outcome("died").casefold() == "yes"  # the 'yes' of a yes/no pair, whatever its capitals
    fit = st.fit(["age"])
    # Outside reference: statsmodels on the values as generated (yes = 1).
    ref = sm.Logit(corpus["_values"]["y"], sm.add_constant(corpus["_values"]["age"])).fit(disp=0)
    np.testing.assert_allclose(fit.params, ref.params, rtol=1e-7)


def test_true_false(corpus):
    t = read_table(corpus["true_false"])
    assert t.frame["died"].dtype == bool
    assert t.frame["flag"].dtype == float and t.frame["flag"].isna().sum() == 30
    assert set(t.frame["flag"].dropna()) == {0.0, 1.0}
    assert any(n.code == "bool_missing" for n in t.notices)
    st = Study(t)
    assert st.set_outcome("died") is True or st.event == 1


def test_numbers_stored_as_text_become_numbers(corpus):
    t = read_table(corpus["numbers_as_text"])
    col = t.frame["age"]
    assert col.dtype.kind == "f" and col.isna().sum() == 1  # the blank cell
    expect = corpus["_values"]["padded"].copy()
    expect[5] = np.nan
    np.testing.assert_allclose(col, expect)
    assert [n.subjects for n in t.notices if n.code == "numbers_as_text"] == [("age",)]


def test_dates_are_not_predictors(corpus):
    st = Study.from_file(corpus["dates"])
    assert st.columns["admitted"].role == Role.DATE
    assert "admitted" not in st.candidates()


def test_mixed_numbers_and_words_says_where(corpus):
    info = describe_columns(read_table(corpus["mixed_numbers_words"]).frame)["age"]
    assert not info.is_number
    assert re.search(r"2 of 300 cells are not .*'unknown' in data row 3", info.reason)
    assert "recode" in info.reason


def test_ragged_rows_name_the_line(corpus):
    with pytest.raises(DataFileError, match=r"Line 3 of ragged.csv has 3 fields where the header has 2"):
        read_table(corpus["ragged"])


def test_title_blank_lines_and_trailing_delimiters(corpus):
    t = read_table(corpus["title_and_blank_lines"])
    assert list(t.frame.columns) == ["age", "died"]
    assert len(t.frame) == 300 and t.frame["died"].dtype.kind == "i"
    assert {"title_row", "empty_columns", "empty_rows"} <= {n.code for n in t.notices}
    t = read_table(corpus["excel_sep_hint"])
    assert t.delimiter == ";" and list(t.frame.columns) == ["age", "died"]


def test_utf16_tab_export(corpus):
    t = read_table(corpus["utf16_tab"])
    assert t.encoding == "utf-16" and t.delimiter == "\t"
    np.testing.assert_allclose(t.frame["age"], corpus["_values"]["age"])


def test_binary_and_old_excel_files(corpus):
    with pytest.raises(DataFileError, match="binary data"):
        read_table(corpus["binary"])
    with pytest.raises(DataFileError, match=r"Excel 97-2003 workbook \(\.xls\)"):
        read_table(corpus["old_xls"])


def test_workbook_layout_formulas_and_sheets(corpus):
    path = corpus["xlsx"]
    with pytest.raises(DataFileError, match="no data rows; choose the sheet .*extract, summary"):
        read_table(path)  # the first sheet holds only a note
    t = read_table(path, sheet="extract")
    assert list(t.frame.columns) == ["id", "blood pressure systolic", "blood pressure diastolic",
                                     "admitted", "age", "ratio", "died"]
    assert len(t.frame) == 300
    codes = {n.code for n in t.notices}
    assert {"title_row", "two_header_rows", "formulas", "numbers_as_text"} <= codes
    formulas = next(n for n in t.notices if n.code == "formulas")
    assert "300 cells" in formulas.message and "G7" in formulas.message
    age = corpus["_values"]["age"].copy()
    age[3] = np.nan  # the '#N/A' cell
    np.testing.assert_allclose(t.frame["age"], age)
    roles = {n: c.role for n, c in describe_columns(t.frame).items()}
    assert roles["admitted"] == Role.DATE and roles["ratio"] == Role.EXCLUDED
    assert read_table(path, sheet="Summary").frame.to_dict("list") == {"group": ["all"], "n": [300]}


def test_progress_reading_gives_the_same_table(corpus, tmp_path):
    """Chunked reading with a progress callback equals the one-go reading."""
    seen = []
    for name in ("identifier", "decimal_comma", "case_variants", "true_false", "mixed_numbers_words", "xlsx"):
        sheet = "extract" if name == "xlsx" else None
        a = read_table(corpus[name], sheet=sheet)
        b = read_table(corpus[name], sheet=sheet, progress=seen.append)
        pd.testing.assert_frame_equal(a.frame, b.frame)
        assert [n.message for n in a.notices] == [n.message for n in b.notices]
    assert seen and seen[-1] == 1.0 and all(0 <= x <= 1 for x in seen)


# ------------------------------------------------------------ the command line
def _cli_cases(c) -> dict:
    """name -> (argv, expected exit code, pattern the output must show)."""
    return {
        "empty": ([c["empty"], "--outcome", "died", "--predictor", "age"], 2, "is empty"),
        "header_only": ([c["header_only"], "--outcome", "died", "--predictor", "age"], 2, "no data rows"),
        "one_row": ([c["one_row"], "--outcome", "died", "--predictor", "age"], 2, "only one value"),
        "latin1": ([c["latin1"], "--outcome", "d\xe9c\xe8s", "--predictor", "\xe2ge", "ville"], 0, None),
        "decimal_comma": ([c["decimal_comma"], "--outcome", "died", "--predictor", "weight", "charge"], 0, None),
        "duplicate_names": ([c["duplicate_names"], "--outcome", "died", "--predictor", "age (2)"], 0, None),
        "long_names": ([c["long_names"], "--outcome", "died", "--predictor", c["_values"]["long_name"],
                        "\u4f53\u91cd (kg)"], 0, None),
        "identifier": ([c["identifier"], "--outcome", "died", "--predictor", "mrn"], 2, "identifier"),
        "all_missing": ([c["all_missing"], "--outcome", "died", "--predictor", "empty"], 2, "every cell is empty"),
        "constant": ([c["constant"], "--outcome", "died", "--predictor", "site"], 2, "same value in every row"),
        "one_valued_outcome": ([c["one_valued_outcome"], "--outcome", "died", "--predictor", "age"], 2,
                               "only one value"),
        "coded_1_2": ([c["coded_1_2"], "--outcome", "died", "--predictor", "age"], 2, "--event"),
        "coded_1_2_event": ([c["coded_1_2"], "--outcome", "died", "--event", "2", "--predictor", "age"], 0, None),
        "case_variants": ([c["case_variants"], "--outcome", "died", "--event", "YES", "--predictor", "age"], 0,
                          None),
        "true_false": ([c["true_false"], "--outcome", "died", "--predictor", "age", "flag"], 0, None),
        "dates": ([c["dates"], "--outcome", "died", "--predictor", "admitted"], 2, "date"),
        "mixed_numbers_words": ([c["mixed_numbers_words"], "--outcome", "died", "--predictor", "age"], 2,
                                "'unknown' in data row 3"),
        "ragged": ([c["ragged"], "--outcome", "died", "--predictor", "age"], 2, "Line 3"),
        "binary": ([c["binary"], "--outcome", "died", "--predictor", "age"], 2, "binary data"),
        "xlsx_first_sheet": ([c["xlsx"], "--outcome", "died", "--predictor", "age"], 2, "choose the sheet"),
        "xlsx_extract": ([c["xlsx"], "--sheet", "extract", "--outcome", "died", "--event", "yes",
                          "--predictor", "age", "blood pressure systolic"], 0, None),
        "xlsx_no_sheet": ([c["xlsx"], "--sheet", "nope", "--outcome", "died", "--predictor", "age"], 2,
                          "no sheet named 'nope'"),
    }


@pytest.fixture(scope="module")
def cli_results(corpus, tmp_path_factory):
    """Every command-line case, run in child processes two or more at a time."""
    home = tmp_path_factory.mktemp("home")
    env = {**os.environ, "TWOFOLD_HOME": str(home), "HOME": str(home)}
    cases = _cli_cases(corpus)

    def one(item):
        name, (argv, _, _) = item
        return name, run_cli("fit", *argv, "--json", "-", env=env, timeout=300)

    with ThreadPoolExecutor(max_workers=max(2, min(4, os.cpu_count() or 2))) as pool:
        return dict(pool.map(one, cases.items()))


CLI_NAMES = ("empty", "header_only", "one_row", "latin1", "decimal_comma", "duplicate_names", "long_names",
             "identifier", "all_missing", "constant", "one_valued_outcome", "coded_1_2", "coded_1_2_event",
             "case_variants", "true_false", "dates", "mixed_numbers_words", "ragged", "binary", "xlsx_first_sheet",
             "xlsx_extract", "xlsx_no_sheet")


def test_every_command_line_case_is_checked(corpus):
    assert set(_cli_cases(corpus)) == set(CLI_NAMES)


@pytest.mark.parametrize("name", CLI_NAMES)
def test_command_line_answers_in_one_line(name, corpus, cli_results):
    argv, code, pattern = _cli_cases(corpus)[name]
    res = cli_results[name]
    assert "Traceback" not in res.stderr and "Traceback" not in res.stdout
    assert res.returncode == code, res.stderr
    if code == 0:
        out = json.loads(res.stdout)
        assert out["rows_used"] > 0
        # Warnings are notices in the JSON, never lines on standard error.
        assert res.stderr == "", res.stderr
    else:
        lines = res.stderr.strip().splitlines()
        assert len(lines) == 1 and lines[0].startswith("twofold: "), res.stderr
        assert re.search(pattern, lines[0]), lines[0]


def test_command_line_fit_on_a_decimal_comma_file_matches_statsmodels(corpus, cli_results):
    out = json.loads(cli_results["decimal_comma"].stdout)
    v = corpus["_values"]
    # Outside reference: statsmodels Logit on the numbers as generated.
    ref = sm.Logit(v["y"], sm.add_constant(np.column_stack([v["weight"], v["charge"]]))).fit(disp=0)
    assert out["log_likelihood"] == pytest.approx(ref.llf, rel=1e-9)
    est = {t["column"]: t["estimate"] for t in out["terms"]}
    assert est["weight"] == pytest.approx(ref.params[1], rel=1e-6)
    assert "decimal_comma" in {w["code"] for w in out["warnings"]}


def test_command_line_case_variant_event(corpus, cli_results):
    out = json.loads(cli_results["case_variants"].stdout)
    assert out["event"].casefold() == "yes"  # --event YES matched the one 'yes' value
    assert out["events"] == int(corpus["_values"]["y"].sum())
