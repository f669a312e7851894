"""Workbooks read by the compiled reader: the same cells as openpyxl, bad files in one sentence, the size cap.

Every workbook is written here (tmp_path) with openpyxl; the password-protected
one is encrypted with msoffcrypto-tool, as Excel encrypts it.  The reference
for the cells is pandas' own workbook reading through openpyxl, outside
Twofold's reader.
"""

from __future__ import annotations

import datetime as dt
import shutil
import zipfile
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from robust_support import run_cli
from twofold.core.data import read_workbook
from twofold.core.data.io import ReadCancelled, read_table
from twofold.core.errors import DataFileError


def _plain_workbook(path: Path, rows: int = 400, seed: int = 7) -> Path:
    """Numbers, whole numbers, text with gaps, dates, TRUE/FALSE and an outcome, from A1."""
    import openpyxl

    rng = np.random.default_rng(seed)
    wb = openpyxl.Workbook()
    ws = wb.active
    ws.title = "records (synthetic)"
    ws.append(["age", "visits", "ward", "admitted", "smoker", "died"])
    for i in range(rows):
        ws.append([round(float(rng.normal(60, 12)), 1), int(rng.integers(0, 9)),
                   None if i % 11 == 0 else f"ward {int(rng.integers(1, 5))}",
                   dt.datetime(2024, 1, 1) + dt.timedelta(days=int(rng.integers(0, 300))),
                   bool(rng.integers(0, 2)), "yes" if rng.random() < 0.3 else "no"])
    wb.save(path)
    return path


def test_cells_match_pandas_reading_through_openpyxl(tmp_path):
    path = _plain_workbook(tmp_path / "plain.xlsx")
    table = read_table(path)
    # Reference: pandas.read_excel with the openpyxl engine (not Twofold's reader).
    expected = pd.read_excel(path, engine="openpyxl")
    assert list(table.frame.columns) == list(expected.columns)
    np.testing.assert_allclose(table.frame["age"], expected["age"])
    assert table.frame["visits"].dtype.kind == "i" and (table.frame["visits"] == expected["visits"]).all()
    assert table.frame["ward"].isna().sum() == expected["ward"].isna().sum() == 37
    assert (table.frame["ward"].dropna() == expected["ward"].dropna()).all()
    assert (pd.to_datetime(table.frame["admitted"]) == expected["admitted"]).all()
    assert (table.frame["smoker"] == expected["smoker"]).all()
    assert (table.frame["died"] == expected["died"]).all()


def test_a_table_starting_at_c3_with_a_cached_formula(tmp_path):
    import openpyxl

    wb = openpyxl.Workbook()
    ws = wb.active
    ws["C3"], ws["D3"], ws["E3"] = "id", "dose", "doubled"
    for i in range(5):
        ws.cell(4 + i, 3, i + 1)
        ws.cell(4 + i, 4, 2.5 * i)
        ws.cell(4 + i, 5, f"=D{4 + i}*2")
    wb.save(tmp_path / "offset.xlsx")
    # Give every formula a saved result, as Excel does when it saves.
    with zipfile.ZipFile(tmp_path / "offset.xlsx") as z:
        items = {n: z.read(n) for n in z.namelist()}
    sheet = items["xl/worksheets/sheet1.xml"].decode()
    for i in range(5):
        sheet = sheet.replace(f"<f>D{4 + i}*2</f><v />", f"<f>D{4 + i}*2</f><v>{5.0 * i}</v>")
    items["xl/worksheets/sheet1.xml"] = sheet.encode()
    with zipfile.ZipFile(tmp_path / "cached.xlsx", "w") as z:
        for name, data in items.items():
            z.writestr(name, data)
    table = read_table(tmp_path / "cached.xlsx")
    assert list(table.frame.columns) == ["id", "dose", "doubled"]
    assert table.frame["id"].tolist() == [1, 2, 3, 4, 5]
    assert table.frame["doubled"].tolist() == [0, 5, 10, 15, 20]  # algebra: 2 x 2.5 i
    assert "formulas" not in {n.code for n in table.notices}
    uncached = read_table(tmp_path / "offset.xlsx")
    formulas = next(n for n in uncached.notices if n.code == "formulas")
    assert "5 cells" in formulas.message and "E4, =D4*2" in formulas.message


def test_progress_runs_from_zero_to_one_and_cancel_stops(tmp_path):
    path = _plain_workbook(tmp_path / "plain.xlsx", rows=12_000)
    seen = []
    table = read_table(path, progress=seen.append)
    assert seen[-1] == 1.0 and seen == sorted(seen) and all(0 <= x <= 1 for x in seen)
    assert len(table.frame) == 12_000

    calls = []

    def stop_at_second(fraction):
        calls.append(fraction)
        return len(calls) < 2

    with pytest.raises(ReadCancelled, match="stopped before the end"):
        read_table(path, progress=stop_at_second)


def test_damaged_workbook_one_sentence(tmp_path):
    good = _plain_workbook(tmp_path / "plain.xlsx")
    data = good.read_bytes()
    cut = tmp_path / "cut.xlsx"
    cut.write_bytes(data[: len(data) // 2])
    with pytest.raises(DataFileError, match=r"^cut\.xlsx could not be opened as an Excel workbook .* as CSV\.$"):
        read_table(cut)
    # A zip package that is no workbook (a zipped CSV named .xlsx).
    zipped = tmp_path / "zipped.xlsx"
    with zipfile.ZipFile(zipped, "w") as z:
        z.writestr("records.csv", "a,b\n1,2\n")
    with pytest.raises(DataFileError, match="could not be opened as an Excel workbook"):
        read_table(zipped)
    res = run_cli("fit", cut, "--outcome", "died", "--predictor", "age")
    assert res.returncode == 2 and len(res.stderr.strip().splitlines()) == 1
    assert "could not be opened as an Excel workbook" in res.stderr and "Traceback" not in res.stderr


def test_password_protected_workbook_one_sentence(tmp_path):
    msoffcrypto = pytest.importorskip("msoffcrypto", reason="msoffcrypto-tool (test extra) encrypts the workbook")
    from msoffcrypto.format.ooxml import OOXMLFile

    plain = _plain_workbook(tmp_path / "plain.xlsx")
    locked = tmp_path / "locked.xlsx"
    with open(plain, "rb") as src, open(locked, "wb") as out:
        OOXMLFile(src).encrypt("s3cret", out)
    assert msoffcrypto.OfficeFile(open(locked, "rb")).is_encrypted()
    with pytest.raises(DataFileError, match=r"^locked\.xlsx is protected by a password, so Twofold cannot read it"):
        read_table(locked)
    res = run_cli("fit", locked, "--outcome", "died", "--predictor", "age")
    assert res.returncode == 2 and "protected by a password" in res.stderr
    assert len(res.stderr.strip().splitlines()) == 1


def test_a_csv_named_xlsx_is_read_as_text_and_binary_junk_is_refused(tmp_path):
    fake = tmp_path / "export.xlsx"
    fake.write_text("age,died\n61,yes\n70,no\n55,no\n", encoding="utf-8")
    table = read_table(fake)
    assert table.frame["age"].tolist() == [61, 70, 55]
    assert table.notices[0].code == "renamed" and "read as text" in table.notices[0].message
    junk = tmp_path / "junk.xlsx"
    junk.write_bytes(bytes(range(256)) * 20)
    with pytest.raises(DataFileError, match="named like an Excel workbook but is not one"):
        read_table(junk)


def test_a_workbook_named_csv_is_read_as_a_workbook(tmp_path):
    real = _plain_workbook(tmp_path / "plain.xlsx")
    named_csv = tmp_path / "export.csv"
    shutil.copy(real, named_csv)
    a, b = read_table(real), read_table(named_csv)
    pd.testing.assert_frame_equal(a.frame, b.frame)
    assert b.sheet == "records (synthetic)"


def test_a_sheet_reaching_too_far_is_refused_before_it_is_parsed(tmp_path):
    import openpyxl

    wb = openpyxl.Workbook()
    ws = wb.active
    ws.append(["age", "died"])
    ws.append([60, "yes"])
    ws.cell(1_048_576, 16_384, "stray")  # XFD1048576: the reader would build 17 billion cells
    wb.save(tmp_path / "far.xlsx")
    # In a child process: past the cap the compiled reader would abort the whole program.
    res = run_cli("fit", tmp_path / "far.xlsx", "--outcome", "died", "--predictor", "age")
    assert res.returncode == 2, res.stderr
    assert "reaches row 1,048,576 and column XFD (17,179,869,184 cells), more than the 30,000,000" in res.stderr
    assert len(res.stderr.strip().splitlines()) == 1


def test_the_cap_counts_rows_times_columns(tmp_path, monkeypatch):
    path = _plain_workbook(tmp_path / "plain.xlsx", rows=99)  # 100 rows x 6 columns = 600 cells
    monkeypatch.setattr(read_workbook, "MAX_CELLS", 599)
    with pytest.raises(DataFileError, match=r"reaches row 100 and column F \(600 cells\), more than the 599"):
        read_table(path)
    monkeypatch.setattr(read_workbook, "MAX_CELLS", 600)
    assert len(read_table(path).frame) == 99


def test_a_workbook_unpacking_beyond_the_byte_cap_is_refused(tmp_path, monkeypatch):
    path = _plain_workbook(tmp_path / "plain.xlsx", rows=2000)
    monkeypatch.setattr(read_workbook, "MAX_XML_BYTES", 50_000)
    with pytest.raises(DataFileError, match="unpacks to more than"):
        read_table(path)


def _rewritten(tmp_path: Path, name: str, change) -> Path:
    """A copy of a small workbook with its sheet's XML changed by ``change`` (the way a crafted file might be)."""
    import openpyxl

    wb = openpyxl.Workbook()
    ws = wb.active
    for row in (["age", "died"], [60, "yes"], [61, "no"], [62, "no"]):
        ws.append(row)
    wb.save(tmp_path / "plain.xlsx")
    with zipfile.ZipFile(tmp_path / "plain.xlsx") as z:
        items = {n: z.read(n) for n in z.namelist()}
    sheet = items["xl/worksheets/sheet1.xml"].decode()
    changed = change(sheet)
    assert changed != sheet
    items["xl/worksheets/sheet1.xml"] = changed.encode()
    with zipfile.ZipFile(tmp_path / name, "w") as z:
        for n, data in items.items():
            z.writestr(n, data)
    return tmp_path / name


# Cells placed where the compiled reader places them, however the sheet's XML writes them: a reference that
# disagrees with its row's number, a reference that is not the first attribute or is in single quotes or in
# small letters, a cell element with a namespace prefix, a '>' inside another attribute, and rows and cells
# without references (placed after the ones before).
_CRAFTED = {
    "reference_beyond_its_row": lambda s: s.replace('<c r="A3"', '<c r="A{far}"'),
    "reference_not_first": lambda s: s.replace('<c r="A3" t="n"', '<c t="n" r="A{far}"'),
    "single_quotes": lambda s: s.replace('<c r="A3"', "<c r='A{far}'"),
    "small_letters": lambda s: s.replace('<c r="A3"', '<c r="a{far}"'),
    "prefixed_cell": lambda s: s.replace(
        '<c r="A3" t="n"><v>61</v></c>',
        '<x:c xmlns:x="http://schemas.openxmlformats.org/spreadsheetml/2006/main" r="A{far}" t="n"><x:v>61</x:v>'
        '</x:c>'),
    "angle_in_attribute": lambda s: s.replace('<c r="A3" t="n"', '<c foo=">" r="A{far}" t="n"'),
    "row_number_only": lambda s: s.replace('<row r="3"', '<row r="{far}"').replace('<c r="A3" t="n">', '<c t="n">')
    .replace('<c r="B3" t="inlineStr">', '<c t="inlineStr">'),
    "column_far_right": lambda s: s.replace('<c r="B3"', '<c r="{col}{row}"'),
}


@pytest.mark.parametrize("kind", sorted(_CRAFTED))
def test_the_reach_is_where_the_compiled_reader_puts_cells(tmp_path, kind):
    import python_calamine

    # Reference: python-calamine's own placing of the cells (its sheet's last row and column), on a sheet small
    # enough for it to build.
    path = _rewritten(tmp_path, f"{kind}.xlsx", lambda s: _CRAFTED[kind](s).format(far=300, col="KZ", row=30))
    scan = read_workbook.scan_reach(path, "xl/worksheets/sheet1.xml", None)
    book = python_calamine.CalamineWorkbook.from_path(str(path))
    end = book.get_sheet_by_name(book.sheet_names[0]).end
    assert (scan.rows, scan.columns) == (end[0] + 1, end[1] + 1)


@pytest.mark.parametrize("kind", sorted(_CRAFTED))
def test_a_crafted_far_cell_is_refused_before_it_is_parsed(tmp_path, kind):
    path = _rewritten(tmp_path, f"{kind}.xlsx", lambda s: _CRAFTED[kind](s).format(far=40_000_000, col="XFD", row=3000))
    # In a child process: past the cap the compiled reader would abort the whole program.
    res = run_cli("fit", path, "--outcome", "died", "--predictor", "age")
    assert res.returncode == 2, res.stderr
    assert "more than the 30,000,000 Twofold reads from a workbook" in res.stderr
    assert len(res.stderr.strip().splitlines()) == 1


def test_the_reach_of_randomly_placed_cells_matches_the_compiled_reader(tmp_path):
    import random
    import re

    import python_calamine

    # Reference: python-calamine's own placing. Sheets written the usual way (references first, rows in
    # order) but with cells at random places, some just beyond the furthest cell seen before them, some far
    # below or right, some within.
    rng = random.Random(19)
    for trial in range(25):
        rows = []
        for r in range(1, rng.randint(2, 40)):
            cells = [(r, c) for c in range(1, rng.randint(1, 30))]
            if rng.random() < 0.3:
                cells.append((rng.choice([r, r + 1, rng.randint(1, 3000)]), rng.choice([1, 27, rng.randint(1, 80)])))
            rows.append((r, cells))
        data = "".join(
            f'<row r="{r}">' + "".join(f'<c r="{read_workbook.column_letters(c)}{rr}"><v>1</v></c>' for rr, c in cells)
            + "</row>" for r, cells in rows)
        path = _rewritten(tmp_path, f"random{trial}.xlsx",
                          lambda s, data=data: re.sub(r"<sheetData>.*</sheetData>", f"<sheetData>{data}</sheetData>", s))
        scan = read_workbook.scan_reach(path, "xl/worksheets/sheet1.xml", None)
        book = python_calamine.CalamineWorkbook.from_path(str(path))
        end = book.get_sheet_by_name(book.sheet_names[0]).end
        assert (scan.rows, scan.columns) == (end[0] + 1, end[1] + 1), trial
