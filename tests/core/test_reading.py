"""Reading files, inferring roles, and checking the outcome."""

from __future__ import annotations

import hashlib

import numpy as np
import pandas as pd
import pytest

from twofold.core.errors import ColumnError, DataFileError
from twofold.core.data.io import read_table
from twofold.core.data.roles import Role
from twofold.core.models.study import Study

ROWS = [
    ("P1", "2024-01-03", 54, "F", "home", "yes", 1),
    ("P2", "2024-01-04", 61, "M", "care_home", "no", 0),
    ("P3", "2024-01-05", 47, "F", "home", "NA", 0),
    ("P4", "2024-01-06", 72, "M", "home", "no", 1),
    ("P5", "2024-01-07", 66, "F", "other", ".", 0),
]
HEADER = ["patient", "seen_on", "age", "sex", "destination", "alone", "died"]


def write_text(path, sep, encoding="utf-8", bom=False):
    lines = [sep.join(HEADER)] + [sep.join(str(v) for v in r) for r in ROWS]
    data = "\n".join(lines) + "\n"
    raw = data.encode(encoding)
    if bom:
        raw = b"\xef\xbb\xbf" + raw
    path.write_bytes(raw)
    return path


@pytest.mark.parametrize("sep", [",", ";", "\t"])
def test_delimiters_are_sniffed(tmp_path, sep):
    t = read_table(write_text(tmp_path / "d.csv", sep))
    assert list(t.frame.columns) == HEADER
    assert t.delimiter == sep
    assert t.frame["age"].tolist() == [54, 61, 47, 72, 66]


def test_bom_is_dropped_and_missing_markers_are_missing(tmp_path):
    t = read_table(write_text(tmp_path / "d.csv", ",", bom=True))
    assert t.frame.columns[0] == "patient"
    assert t.frame["alone"].isna().tolist() == [False, False, True, False, True]
    assert not t.notices


def test_latin1_falls_back_and_says_so(tmp_path):
    path = tmp_path / "l.csv"
    path.write_bytes("name,outcome\nJos\xe9,1\nRen\xe9e,0\n".encode("latin-1"))
    t = read_table(path)
    assert t.encoding == "latin-1"
    assert t.frame["name"].tolist() == ["José", "Renée"]
    assert [n.code for n in t.notices] == ["encoding"]


def test_xlsx_first_and_named_sheet(tmp_path):
    path = tmp_path / "book.xlsx"
    frame = pd.DataFrame(ROWS, columns=HEADER)
    with pd.ExcelWriter(path, engine="openpyxl") as w:
        frame.to_excel(w, sheet_name="notes", index=False)
        frame.assign(age=frame.age + 1).to_excel(w, sheet_name="extract", index=False)
    assert read_table(path).frame["age"].tolist()[0] == 54
    assert read_table(path, sheet="extract").frame["age"].tolist()[0] == 55
    with pytest.raises(DataFileError, match="no sheet named 'nope'.*notes, extract"):
        read_table(path, sheet="nope")


def test_missing_and_empty_files(tmp_path):
    with pytest.raises(DataFileError, match="does not exist"):
        read_table(tmp_path / "absent.csv")
    empty = tmp_path / "empty.csv"
    empty.write_bytes(b"")
    with pytest.raises(DataFileError, match="empty"):
        read_table(empty)


def test_reading_never_changes_the_file(tmp_path):
    path = write_text(tmp_path / "d.csv", ",")
    before = hashlib.sha256(path.read_bytes()).hexdigest()
    st = Study.from_file(path)
    st.set_outcome("died")
    st.fit(["age"])
    assert hashlib.sha256(path.read_bytes()).hexdigest() == before


def test_roles_are_inferred(tmp_path):
    st = Study.from_file(write_text(tmp_path / "d.csv", ","))
    roles = {n: c.role for n, c in st.columns.items()}
    assert roles["seen_on"] == Role.DATE
    assert roles["age"] == Role.NUMERIC
    assert roles["sex"] == Role.BINARY
    assert roles["destination"] == Role.CATEGORICAL
    assert roles["alone"] == Role.BINARY
    assert "seen_on" not in st.candidates()


def test_identifier_like_columns_are_not_offered():
    frame = pd.DataFrame({
        "record_id": np.arange(1, 101),
        "code": [f"X{i:04d}" for i in range(100)],
        "ward": [f"W{i % 40}" for i in range(100)],
        "y": [i % 2 for i in range(100)],
    })
    from twofold.core.data.io import LoadedTable
    from pathlib import Path

    st = Study(LoadedTable(frame, Path("m.csv")))
    roles = {n: c.role for n, c in st.columns.items()}
    assert roles["record_id"] == Role.IDENTIFIER
    assert roles["code"] == Role.IDENTIFIER
    assert roles["ward"] == Role.IDENTIFIER  # 40 text levels: too many groups
    assert st.candidates() == ["y"]


def test_outcome_must_have_two_values(tmp_path):
    st = Study.from_file(write_text(tmp_path / "d.csv", ","))
    with pytest.raises(ColumnError, match="3 different values .*'home' \\(3 rows\\)"):
        st.set_outcome("destination", "home")
    st.frame["same"] = 1
    st._columns = __import__("twofold.core.data.roles", fromlist=["x"]).describe_columns(st.frame)
    with pytest.raises(ColumnError, match="only one value"):
        st.set_outcome("same", 1)


def test_numeric_event_compares_as_number(tmp_path):
    st = Study.from_file(write_text(tmp_path / "d.csv", ","))
    assert st.set_outcome("died", "1.0") == 1
    assert st.set_outcome("died", "1") == 1
    assert st.set_outcome("died") == 1
    with pytest.raises(ColumnError, match="does not occur"):
        st.set_outcome("died", "2")


def test_text_outcome_needs_event_unless_guessing(tmp_path):
    st = Study.from_file(write_text(tmp_path / "d.csv", ","))
    with pytest.raises(ColumnError, match="Say which value"):
        st.set_outcome("sex", None, guess=False)
    assert st.set_outcome("sex", "m") == "M"  # case-insensitive match for text
    assert st.set_outcome("alone") == "yes"  # guessed for a yes/no pair
    # Rows with a missing outcome are dropped and counted.
    fit = st.fit(["age"])
    assert fit.account.missing_outcome == 2
    assert fit.n_used == 3


def test_reference_level_default_and_choice(tmp_path):
    st = Study.from_file(write_text(tmp_path / "d.csv", ","))
    st.set_outcome("died")
    assert st.reference("destination") == "home"  # most frequent
    assert st.reference("alone") == "no"  # the 'no' of a yes/no pair
    st.set_reference("destination", "care_home")
    assert st.block("destination").levels == ("home", "other")
    with pytest.raises(ColumnError, match="does not occur"):
        st.set_reference("destination", "hospice")


def test_unknown_column_suggests_close_names(tmp_path):
    st = Study.from_file(write_text(tmp_path / "d.csv", ","))
    with pytest.raises(ColumnError, match="did you mean 'age'"):
        st.column("agee")


def test_spaces_around_identifiers_are_stripped(tmp_path):
    # A column whose values all differ takes the one-pass path; a stray space
    # before or after an identifier must still go, and empty cells stay missing.
    ids = [f"A{k:04d}" for k in range(300)]
    written = list(ids)
    written[7] = " " + ids[7]
    written[250] = ids[250] + "\t"
    written[100] = ""
    lines = ["ref,age"] + [f"{w},{k % 90}" for k, w in enumerate(written)]
    path = tmp_path / "ids.csv"
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    col = read_table(path).frame["ref"]
    assert col[7] == ids[7] and col[250] == ids[250]
    assert col.isna().sum() == 1 and pd.isna(col[100])
    # Reference: the same cells stripped by Python's str.strip, blank as missing.
    expected = pd.Series([w.strip() or np.nan for w in written], dtype="str", name="ref")
    pd.testing.assert_series_equal(col, expected, check_index=False)


def test_large_frames_are_described_as_column_by_column():
    # Past a size, numeric columns are described on a second thread; the
    # descriptions must be those of describing each column alone.
    from twofold.core.data.roles import _THREAD_CELLS, describe_column, describe_columns

    rng = np.random.default_rng(7)
    n = _THREAD_CELLS // 4 + 1
    frame = pd.DataFrame({
        "record_no": np.arange(n),
        "age": rng.integers(18, 99, n),
        "weight": np.where(rng.random(n) < 0.05, np.nan, rng.normal(75, 12, n).round(1)),
        "flag": rng.integers(0, 2, n).astype(float),
        "ward": pd.Series(rng.choice(["east", "west", "north"], n), dtype="str"),
        "code": pd.Series(np.char.add("K", rng.integers(0, 10 * n, n).astype(str)), dtype="str"),
    })
    together = describe_columns(frame)
    assert list(together) == list(frame.columns)
    for name in frame.columns:
        assert together[name] == describe_column(name, frame[name])
