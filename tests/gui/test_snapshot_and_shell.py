"""The snapshot command, a light start, the data table, recent files, keyboard and fonts."""

from __future__ import annotations

import subprocess
import sys

import pytest
from PySide6.QtCore import QSettings, Qt
from PySide6.QtGui import QImage, QKeySequence
from PySide6.QtWidgets import QWidget

from gui_helpers import READMISSION, REPO, SAMPLES, load
from twofold.core.errors import TwofoldError
from twofold.core.models.study import Study


def test_snapshot_writes_a_png_of_the_asked_size(qtbot, home, tmp_path, capsys):
    from twofold.gui.snapshot import run_snapshot

    out = tmp_path / "window.png"
    code = run_snapshot([str(READMISSION), "--outcome", "readmitted_30d", "--smaller", "age",
                         "--predictor", "age", "discharge_destination", "--out", str(out), "--size", "1200x800"])
    assert code == 0, capsys.readouterr().err
    image = QImage(str(out))
    assert not image.isNull()
    assert (image.width(), image.height()) == (1200, 800)


def test_snapshot_bad_input_gives_one_sentence_and_exit_2(qtbot, home, tmp_path, capsys):
    from twofold.gui.snapshot import run_snapshot

    out = tmp_path / "window.png"
    with pytest.raises(TwofoldError) as expected:
        Study.from_file(READMISSION).column("agee")
    code = run_snapshot([str(READMISSION), "--outcome", "readmitted_30d", "--predictor", "agee",
                         "--out", str(out)])
    err = capsys.readouterr().err
    assert code == 2
    assert err == f"twofold: {expected.value}\n"
    assert "Traceback" not in err and not out.exists()

    code = run_snapshot([str(tmp_path / "absent.csv"), "--outcome", "y", "--predictor", "x", "--out", str(out)])
    err = capsys.readouterr().err
    assert code == 2 and err.count("\n") == 1 and "does not exist" in err

    code = run_snapshot([str(READMISSION), "--outcome", "readmitted_30d", "--predictor", "age",
                         "--out", str(out), "--size", "big"])
    err = capsys.readouterr().err
    assert code == 2 and err.startswith("twofold: --size") and err.count("\n") == 1


def test_the_cli_dispatches_the_snapshot_command(home, tmp_path):
    out = tmp_path / "cli.png"
    env = {"QT_QPA_PLATFORM": "offscreen", "TWOFOLD_HOME": str(home), "PATH": "/usr/bin:/bin"}
    run = subprocess.run([sys.executable, "-m", "twofold.cli", "snapshot", str(READMISSION), "--outcome",
                          "readmitted_30d", "--predictor", "age", "--out", str(out), "--size", "900x600"],
                         capture_output=True, text=True, env=env, timeout=120, cwd=REPO)
    assert run.returncode == 0, run.stderr
    assert run.stderr == ""  # no Qt chatter, no traceback
    assert QImage(str(out)).size().width() == 900


def test_the_window_modules_import_only_qt_and_the_standard_library():
    code = ("import sys; import twofold.gui.app, twofold.gui.window, twofold.gui.snapshot; "
            "heavy = [m for m in ('numpy', 'pandas', 'scipy', 'statsmodels', 'matplotlib') if m in sys.modules]; "
            "print(','.join(heavy))")
    run = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=60)
    assert run.returncode == 0, run.stderr
    assert run.stdout.strip() == ""


class CountingColumn:
    """A stand-in for a column of a million cells that counts how many are read."""

    def __init__(self, n):
        self.n = n
        self.reads = 0

    def __len__(self):
        return self.n

    def __getitem__(self, i):
        self.reads += 1
        return float(i % 7) if i % 11 else float("nan")


def test_the_data_table_reads_only_the_cells_it_shows(qtbot):
    from PySide6.QtWidgets import QTableView

    from twofold.gui.tables import CellsModel
    from twofold.gui.views import ColumnView, StudyView

    n = 1_000_000
    cols = [CountingColumn(n) for _ in range(5)]
    view = StudyView("big.csv", "big.csv", n,
                     tuple(ColumnView(f"c{k}", "numeric", "number", "numeric", True, 7, 0) for k in range(5)),
                     (), arrays=tuple(cols), numeric=(True,) * 5)
    model = CellsModel()
    table = QTableView()
    qtbot.addWidget(table)
    table.setModel(model)
    model.set_study(view)
    table.resize(600, 400)
    table.show()
    table.grab()
    table.scrollToBottom()
    table.grab()
    assert model.rowCount() == n
    assert model.data(model.index(n - 2, 0)) == str((n - 2) % 7)
    assert model.data(model.index(0, 0)) == "missing"  # row 0 is a missing cell (0 % 11 == 0)
    assert sum(c.reads for c in cols) < 20_000  # a screenful or two, never every row


def test_recent_files_and_sample_studies(qtbot, home, tmp_path):
    from twofold.gui.window import MainWindow, sample_files

    assert {p.name for p in sample_files()} >= {"readmission_synthetic.csv", "wound_infection_synthetic.csv"}
    assert all(p.parent == SAMPLES for p in sample_files())
    settings = QSettings(str(tmp_path / "recent.ini"), QSettings.Format.IniFormat)
    first = MainWindow(settings=settings)
    qtbot.addWidget(first)
    names = [a.text() for a in first.sample_menu.actions()]
    assert "readmission_synthetic.csv" in names
    load(qtbot, first, READMISSION)
    assert first.recent_files() == [str(READMISSION)]
    first.close()
    second = MainWindow(settings=QSettings(str(tmp_path / "recent.ini"), QSettings.Format.IniFormat))
    qtbot.addWidget(second)
    assert any("readmission_synthetic.csv" in a.text() for a in second.recent_menu.actions())


def test_keyboard_shortcuts_accessible_names_and_system_fonts(qtbot, window):
    assert window.open_action.shortcut() == QKeySequence(QKeySequence.StandardKey.Open)
    for w in (window.model_pane.outcome_combo, window.model_pane.event_combo, window.model_pane.list,
              window.results_pane.table, window.ladder_pane.table, window.data_pane.table,
              window.data_pane.columns, window.data_pane.role_combo, window.data_pane.reference_combo,
              window.ladder_pane.compare_button, window.results_pane.caution):
        assert w.accessibleName(), f"{w!r} has no accessible name"
    # Tab moves from the predictor list onwards to the results, then the ladder.
    m, r = window.model_pane, window.results_pane
    assert m.clear_button.nextInFocusChain() is r.table or r.table in _chain_after(m.clear_button, 6)
    for w in window.findChildren(QWidget):
        assert w.font().pixelSize() == -1, f"{w!r} has a font set in pixels"
    align = window.results_pane.coefficients.headerData(1, Qt.Orientation.Horizontal, Qt.ItemDataRole.TextAlignmentRole)
    assert align & int(Qt.AlignmentFlag.AlignRight)


def _chain_after(widget, n):
    out, w = [], widget
    for _ in range(n):
        w = w.nextInFocusChain()
        out.append(w)
    return out


def test_dropping_a_data_file_opens_it(qtbot, window):
    from PySide6.QtCore import QMimeData, QPointF, QUrl
    from PySide6.QtGui import QDropEvent

    mime = QMimeData()
    mime.setUrls([QUrl.fromLocalFile(str(READMISSION))])
    event = QDropEvent(QPointF(20, 20), Qt.DropAction.CopyAction, mime, Qt.MouseButton.NoButton,
                       Qt.KeyboardModifier.NoModifier)
    window.dropEvent(event)
    qtbot.waitUntil(lambda: window.data_pane.study is not None and not window.session.busy, timeout=20_000)
    assert window.data_pane.study.source == READMISSION.name
    assert window.data_pane.cells.rowCount() == 5000
    other = QMimeData()
    other.setUrls([QUrl.fromLocalFile(str(REPO / "notes.pdf"))])
    assert window._dropped_path(other) is None


def test_the_window_command_explains_when_there_is_no_screen(monkeypatch, capsys):
    from twofold.gui.app import main

    for name in ("DISPLAY", "WAYLAND_DISPLAY", "QT_QPA_PLATFORM"):
        monkeypatch.delenv(name, raising=False)
    assert main([]) == 3
    err = capsys.readouterr().err
    assert err.startswith("twofold: no screen") and err.count("\n") == 1
    assert main(["a.csv", "b.csv"]) == 2
