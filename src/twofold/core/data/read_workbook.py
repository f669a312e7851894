"""Reading XLSX workbooks for :func:`twofold.core.data.io.read_table`.

The cells are read by python-calamine, a compiled reader (the one behind
pandas' ``calamine`` engine), on a helper thread, so that progress reports
and cancelling go on while it parses.  It is called directly rather than
through ``pandas.read_excel`` because reading needs the raw rows (titles,
merged cells, the header found later) and progress between rows.

Before it parses, the sheet's XML is streamed once with :mod:`zipfile` to
find what the compiled reader does not say: how far the sheet's cells reach,
its merged ranges, formula cells without a saved result, and cells showing
an Excel error.  A sheet whose cells reach further than :data:`MAX_CELLS`
is refused with one sentence before it is parsed: the reader builds the
whole rectangle in memory, and one stray cell far down and to the right (or a
crafted file) would exhaust memory and end the program.

Values are given the types openpyxl gave them (whole numbers as ``int``,
empty cells as ``None``, error cells as their text), so everything after the
reading is unchanged.  openpyxl is still used for writing exports.
"""

from __future__ import annotations

import datetime as dt
import itertools
import math
import re
import threading
import time
import zipfile
import zlib
from dataclasses import dataclass, field
from pathlib import Path, PurePosixPath

from twofold.core.errors import DataFileError, Notice
from twofold.core.data.io import ReadCancelled, report_progress
from twofold.core.data.read_text import filled_count, header_after_gap, looks_like_names
from twofold.core.data.tidy import cell_text, plural, shorten, tidy_frame, unique_names

#: The most cells (last row x last column reached) a sheet may span: about 1,000,000 rows of 30 columns.
MAX_CELLS = 30_000_000
#: The most bytes a sheet's XML, or the workbook's shared text, may unpack to.
MAX_XML_BYTES = 3_000_000_000

_PREFIX = re.compile(rb"<(\w+:)?worksheet\b")
_REF = re.compile(rb"""\sr=["']([A-Z]+)(\d+)["']""")
_NS = {"m": "http://schemas.openxmlformats.org/spreadsheetml/2006/main",
       "r": "http://schemas.openxmlformats.org/officeDocument/2006/relationships",
       "p": "http://schemas.openxmlformats.org/package/2006/relationships"}


@dataclass
class SheetScan:
    """What a sheet's XML says beyond its cell values.

    ``rows`` and ``columns`` are how far its cells reach (1-based, counting
    formatted empty cells); ``merges`` its merged ranges as (col0, row0, col1,
    row1); ``formulas`` (row, column, formula text) of formula cells with no
    saved result; ``errors`` (row, column, text) of cells showing an error.
    """

    rows: int = 0
    columns: int = 0
    merges: list = field(default_factory=list)
    formulas: list = field(default_factory=list)
    errors: list = field(default_factory=list)
    #: Set by :func:`scan_reach` when no block of the rows holds a formula or an error cell: the part of
    #: the XML after the rows (where merged ranges are kept) and its patterns, so :func:`scan_details`
    #: need not read the sheet again.
    rest: tuple | None = field(default=None, repr=False)

    @property
    def cells(self) -> int:
        return self.rows * self.columns


def read_workbook(path: Path, sheet: str | None, progress):
    """Read one sheet of a workbook; returns (frame, sheet name, notices)."""
    book = _open_book(path)
    try:
        names = list(book.sheet_names)
        kinds = {m.name: str(m.typ) for m in book.sheets_metadata}
        if not names:
            raise _damaged(path)
        if sheet is None:
            sheet = names[0]
        elif sheet not in names:
            folded = {n.casefold().strip(): n for n in names}
            if sheet.casefold().strip() not in folded:
                raise DataFileError(
                    f"{path.name} has no sheet named '{sheet}'; its sheets are: {', '.join(names)}."
                )
            sheet = folded[sheet.casefold().strip()]
        if "Chart" in kinds.get(sheet, ""):
            raise DataFileError(f"The sheet '{sheet}' of {path.name} is a chart, not a table; choose another sheet.")
        part = sheet_parts(path).get(sheet)
        if part is None:
            raise _damaged(path)
        scan = scan_reach(path, part, progress)
        where = f"sheet '{sheet}' of {path.name}"
        if scan.cells > MAX_CELLS:
            raise DataFileError(
                f"The {where} reaches row {scan.rows:,} and column {column_letters(scan.columns)} "
                f"({scan.cells:,} cells), more than the {MAX_CELLS:,} Twofold reads from a workbook; delete the "
                "empty or unused rows and columns beyond the records, or save the sheet as CSV."
            )
        rows = _parse_rows(book, sheet, part, path, progress, scan)
    finally:
        try:
            book.close()
        except RuntimeError:  # a cancelled parse still holds it: the book closes when that thread is done
            pass
    for r, c, text in scan.errors:  # as openpyxl showed them: the error's text, read as missing later
        if r <= len(rows) and c <= len(rows[r - 1]):
            rows[r - 1][c - 1] = text
    notices: list[Notice] = []
    if scan.formulas:
        notices.append(_formulas_notice(path, sheet, scan.formulas))
    others = [n for n in names if n != sheet]
    hint = ("choose the sheet that holds the records (the others are: " + ", ".join(others) + ")") if others \
        else "put the records in it with a row of column names above them"
    frame, generated, shape_notices = frame_from_rows(rows, scan.merges, where, hint)
    notices.extend(shape_notices)
    frame, tidy_notices = tidy_frame(frame, where, "xlsx", generated)
    notices.extend(tidy_notices)
    report_progress(progress, 1.0, path)
    return frame, sheet, notices


def _damaged(path: Path) -> DataFileError:
    return DataFileError(
        f"{path.name} could not be opened as an Excel workbook (it may be damaged or not a workbook); "
        "open it in Excel and save it again as .xlsx, or export the sheet as CSV."
    )


def _open_book(path: Path):
    import python_calamine

    try:
        return python_calamine.CalamineWorkbook.from_path(str(path))
    except python_calamine.PasswordError:
        raise locked_workbook(path) from None
    except Exception:  # the reader raises several kinds for a damaged file
        raise _damaged(path) from None


def locked_workbook(path: Path) -> DataFileError:
    """The sentence for a workbook protected by a password to open (it is encrypted)."""
    return DataFileError(
        f"{path.name} is protected by a password, so Twofold cannot read it; open it in Excel, remove the "
        "password (File, Info, Protect Workbook), save it as a copy, and open the copy here."
    )


class _ParseFailed(Exception):
    """The compiled reader stopped with an error: the XML's second pass need not go on."""


def _parse_rows(book, sheet: str, part: str, path: Path, progress, scan: SheetScan) -> list:
    """The sheet's rows from A1, as lists; parsed on a helper thread so progress and cancel keep working.

    Meanwhile this thread reads what the compiled reader does not say into ``scan``
    (:func:`scan_details`): the reader parses without holding the interpreter lock, so the two
    run on two cores at once.
    """
    done = threading.Event()
    box: dict = {}

    def parse():
        try:
            box["sheet"] = book.get_sheet_by_name(sheet)
        except BaseException as exc:  # handed to the reading thread
            box["error"] = exc
        finally:
            done.set()

    threading.Thread(target=parse, name="twofold-workbook", daemon=True).start()
    # Progress while it parses: a guess from the sheet's size (about 40 MB of XML a second).
    expected = max(scan.cells * 40 / 40e6, 0.2)
    started = time.monotonic()

    def waited(stop_if_failed=True):
        if stop_if_failed and "error" in box:
            raise _ParseFailed
        elapsed = time.monotonic() - started
        report_progress(progress, 0.25 + 0.25 * (1 - math.exp(-elapsed / expected)), path)

    try:
        scan_details(path, part, scan, waited)
    except _ParseFailed:
        pass
    while not done.wait(0.1):
        waited(stop_if_failed=False)
    if "error" in box:
        exc = box["error"]
        if isinstance(exc, (KeyboardInterrupt, SystemExit, MemoryError)):
            raise exc
        raise DataFileError(
            f"The sheet '{sheet}' of {path.name} could not be read ({type(exc).__name__}); "
            "save the workbook again in Excel, or export the sheet as CSV."
        ) from None
    ws = box["sheet"]
    rows = []
    if not ws.height or ws.start is None:
        return rows
    # The reader's rows start at the first column holding a cell: pad them so they start at column A,
    # as merged ranges and cell references count from there.
    top, left = ws.start
    pad = [""] * left
    total = top + ws.height
    cells = ws.iter_rows()
    while batch := list(itertools.islice(cells, 5000)):
        rows.extend([pad + row for row in batch] if left else batch)
        report_progress(progress, 0.5 + 0.3 * min(len(rows) / total, 1.0), path)
    if len(rows) < total:  # rows above the first one holding a cell
        rows[:0] = [[] for _ in range(total - len(rows))]
    return rows


def sheet_parts(path: Path) -> dict:
    """Each sheet's name and the path of its XML inside the workbook's zip package."""
    import xml.etree.ElementTree as ET

    try:
        with zipfile.ZipFile(path) as z:
            listed = set(z.namelist())

            def read(name):
                return ET.fromstring(z.read(name)) if name in listed else None

            def target(base: str, ref: str) -> str:
                if ref.startswith("/"):
                    return ref.lstrip("/")
                parts = []
                for piece in (PurePosixPath(base).parent / ref).parts:
                    if piece == "..":
                        if parts:
                            parts.pop()
                    elif piece != ".":
                        parts.append(piece)
                return "/".join(parts)

            root_rels = read("_rels/.rels")
            book_part = "xl/workbook.xml"
            if root_rels is not None:
                for rel in root_rels.findall("p:Relationship", _NS):
                    if rel.get("Type", "").endswith("/officeDocument"):
                        book_part = target("", rel.get("Target", ""))
            book = read(book_part)
            base = PurePosixPath(book_part)
            rels = read(str(base.parent / "_rels" / (base.name + ".rels")))
            if book is None or rels is None:
                return {}
            ids = {rel.get("Id"): target(book_part, rel.get("Target", "")) for rel in rels.findall("p:Relationship", _NS)}
            out = {}
            for node in book.iter(f"{{{_NS['m']}}}sheet"):
                rid = node.get(f"{{{_NS['r']}}}id")
                if node.get("name") is not None and ids.get(rid) in listed:
                    out[node.get("name")] = ids[rid]
            return out
    except (OSError, KeyError, ValueError, zipfile.BadZipFile, ET.ParseError):
        return {}


def column_letters(n: int) -> str:
    """The spreadsheet name of the n-th column (1 is A, 27 is AA)."""
    letters = ""
    while n > 0:
        n, rest = divmod(n - 1, 26)
        letters = chr(65 + rest) + letters
    return letters or "A"


def _column_number(letters: bytes) -> int:
    n = 0
    for ch in letters:
        n = n * 26 + ch - 64
    return n


class _Tags:
    """Patterns for one sheet's XML, with its namespace prefix written out (so each starts with a literal)."""

    def __init__(self, prefix: bytes):
        p = re.escape(prefix)
        self.prefix = prefix
        self.row_end = b"</" + prefix + b"row>"
        self.cell = b"<" + prefix + b'c r="'
        self.ref = re.compile(rb"<" + p + rb'c r="([A-Z]{1,3})(\d{1,7})"')
        self.formula_start = b"<" + prefix + b"f"
        self.formula = re.compile(rb"<" + p + rb"f\b[^>]*?(?:/>|>([^<]*)</" + p + rb"f>)")
        self.cell_start = re.compile(rb"<" + p + rb"c[\s>]")
        self.cell_end = re.compile(rb"</" + p + rb"c>|<" + p + rb"c[\s>]")
        self.value = re.compile(rb"<" + p + rb"v>([^<]+)</" + p + rb"v>")
        self.error_cell = re.compile(rb"<" + p + rb"""c\b[^>]*? t="e"[^>]*>""")
        self.merge = re.compile(rb"<" + p + rb"mergeCell\s+ref=\"\$?([A-Z]+)\$?(\d+)(?::\$?([A-Z]+)\$?(\d+))?\"")
        self._beyond: dict = {}

    def beyond(self, rows: int, columns: int):
        """A pattern for the cells that matter to the reach, given that it is at least (rows, columns) so far.

        It matches every cell element except those written the usual way (``<c r="B12"``, the
        reference first, in double quotes, capital letters then digits) within row ``rows`` and
        column ``columns``: so it matches a cell further down or right, and a cell written any
        other way.  A cell within the reach fails after a few characters (the possessive and
        ordered alternatives never step back), so one pass over a block costs little more than
        finding its cells.
        """
        key = (rows, columns)
        if key not in self._beyond:
            letters = column_letters(columns) if columns else ""
            digits = str(rows) if rows else ""
            fewer_letters = [f"[A-Z]{{1,{len(letters) - 1}}}+"] if len(letters) > 1 else []
            fewer_digits = [f"\\d{{1,{len(digits) - 1}}}+"] if len(digits) > 1 else []
            near = ("(?:" + "|".join(fewer_letters + _not_after(letters, _LETTERS)) + ")(?:"
                    + "|".join(fewer_digits + _not_after(digits, "0123456789")) + ')"')
            p = re.escape(self.prefix)
            self._beyond[key] = re.compile(rb"<" + p + rb'c(?! r="' + near.encode() + rb")[\s/>]")
        return self._beyond[key]


_LETTERS = "ABCDEFGHIJKLMNOPQRSTUVWXYZ"


def _not_after(text: str, alphabet: str) -> list[str]:
    """Regular expressions for the strings as long as ``text``, over ``alphabet`` (in order), up to it."""
    out = []
    first = alphabet[0]
    for i, ch in enumerate(text):
        if ch != first:
            before = alphabet[alphabet.index(ch) - 1]
            rest = len(text) - i - 1
            tail = f"[{first}-{alphabet[-1]}]{{{rest}}}" if rest else ""
            out.append(re.escape(text[:i]) + f"[{first}-{before}]" + tail)
    out.append(re.escape(text))
    return out


def scan_sheet(path: Path, part: str, progress) -> SheetScan:
    """A sheet's reach, merged ranges, formulas without results and error cells (both passes, one after the other).

    :func:`read_workbook` runs the second pass (:func:`scan_details`) while the compiled reader parses.
    """
    scan = scan_reach(path, part, progress)
    scan_details(path, part, scan, None)
    return scan


def _unpacked(fh, ahead: bool):
    """The blocks of an open zip member; with ``ahead``, unpacked by a helper thread a block or two ahead.

    Unpacking lets go of the interpreter lock, so the helper unpacks the next block on another
    core while this thread searches the last one.  The helper stops when the blocks are no
    longer wanted; an error it meets is raised here.
    """
    if not ahead:
        yield from iter(lambda: fh.read(1 << 22), b"")
        return
    import queue

    blocks: queue.Queue = queue.Queue(maxsize=2)
    stop = threading.Event()

    def hand_on(item) -> None:
        while not stop.is_set():
            try:
                blocks.put(item, timeout=0.1)
                return
            except queue.Full:
                continue

    def unpack():
        try:
            while not stop.is_set():
                block = fh.read(1 << 22)
                hand_on(block)
                if not block:
                    return
        except BaseException as exc:  # handed to the reading thread
            hand_on(exc)

    helper = threading.Thread(target=unpack, name="twofold-unpack", daemon=True)
    helper.start()
    try:
        while True:
            block = blocks.get()
            if isinstance(block, BaseException):
                raise block
            if not block:
                return
            yield block
    finally:
        stop.set()
        helper.join()


def _sheet_blocks(path: Path, part: str, progress, share: float, ahead: bool = False):
    """The sheet's XML in blocks of whole rows, as (block, tags); the last block is the rest of the sheet.

    Progress runs from 0 to ``share`` as the XML is read; ``ahead`` unpacks on a helper thread
    (:func:`_unpacked`).  Raises a DataFileError when the XML unpacks to more than
    MAX_XML_BYTES or cannot be read.
    """
    try:
        with zipfile.ZipFile(path) as z:
            info = z.getinfo(part)
            shared = next((i for i in z.infolist() if i.filename.endswith("sharedStrings.xml")), None)
            if info.file_size > MAX_XML_BYTES or (shared is not None and shared.file_size > MAX_XML_BYTES):
                raise _too_big(path)
            read, tail, tags = 0, b"", None
            with z.open(info) as fh:
                for block in _unpacked(fh, ahead):
                    read += len(block)
                    if read > MAX_XML_BYTES:
                        raise _too_big(path)
                    data = tail + block if tail else block
                    if tags is None:
                        found = _PREFIX.search(data)
                        tags = _Tags(found.group(1) or b"" if found else b"")
                    # Work on whole rows: the rest waits for the next block.
                    cut = data.rfind(tags.row_end)
                    cut = cut + len(tags.row_end) if cut >= 0 else 0
                    if cut:
                        yield data[:cut], tags, False
                    tail = data[cut:]
                    if progress is not None:
                        report_progress(progress, share * min(read / max(info.file_size, 1), 1.0), path)
            if tags is not None:
                yield tail, tags, True
    except (DataFileError, ReadCancelled):
        raise
    except (KeyError, OSError, ValueError, EOFError, zipfile.BadZipFile, RuntimeError, zlib.error):
        raise _damaged(path) from None


def scan_reach(path: Path, part: str, progress) -> SheetScan:
    """How far a sheet's cells reach: the last row and column holding a cell, counting formatted empty ones.

    The compiled reader places a cell by its reference (``r="B12"``), or, without one, after the
    cell before it in its row; so the reach is the furthest reference, whatever row element the
    cell sits in.  Sheets whose cells all start with their reference (what Excel, LibreOffice and
    the usual libraries write) are read with one pattern per block (:meth:`_Tags.beyond`); any
    other sheet is walked element by element as the reader walks it (:func:`_reach_walked`).
    """
    scan = SheetScan()
    walked = details = False
    for chunk, tags, last in _sheet_blocks(path, part, progress, 0.25, ahead=True):
        if tags.prefix or _PREFIXED_CELL.search(chunk):  # the reader takes cells with any prefix as cells
            walked = True
            break
        if not _reach_of_chunk(chunk, tags, scan):
            walked = True
            break
        # Most sheets hold no formula and no error cell: noticing that here spares a second pass.
        details = details or tags.formula_start in chunk or b't="e"' in chunk
        if last and not details:
            scan.rest = (chunk, tags)
    if walked:
        scan.rows, scan.columns = _reach_walked(path, part)
        scan.rest = None
    return scan


def _reach_of_chunk(chunk: bytes, tags: _Tags, scan: SheetScan) -> bool:
    """Widen ``scan``'s reach by the cells in a block; False when a cell is not written the usual way."""
    # Start from cells that are likely the furthest (the block's last cell, the first row's last cell),
    # so that few cells lie beyond.
    for at in (chunk.rfind(tags.cell), chunk.rfind(tags.cell, 0, max(chunk.find(tags.row_end), 0))):
        m = tags.ref.match(chunk, at) if at >= 0 else None
        if m:
            scan.rows = max(scan.rows, int(m.group(2)))
            scan.columns = max(scan.columns, _column_number(m.group(1)))
    pattern = tags.beyond(scan.rows, scan.columns)
    rows, columns = scan.rows, scan.columns
    for m in pattern.finditer(chunk):
        ref = tags.ref.match(chunk, m.start())
        if ref is None:  # written some other way
            return False
        rows = max(rows, int(ref.group(2)))
        columns = max(columns, _column_number(ref.group(1)))
    scan.rows, scan.columns = rows, columns
    return True


_PREFIXED_CELL = re.compile(rb":c[\s/>]")
_TOKEN = re.compile(rb"""<(/?)(?:[^\s<>/=:!?"']+:)?(row|c)((?:\s+[^\s<>/="']+\s*=\s*(?:"[^"]*"|'[^']*'))*)\s*(/?)>""")
_R_ATTRIBUTE = re.compile(rb"""\sr\s*=\s*(?:"([^"]*)"|'([^']*)')""")


def _reach_walked(path: Path, part: str) -> tuple[int, int]:
    """The reach, walking every row and cell element as the compiled reader does (sheets written unusually).

    Rows and cells without a reference take the place after the one before; a row element
    without one counts on from the row before.  Where the reader might read a reference two
    ways, the larger place is taken, so the reach is never underestimated.
    """
    rows = columns = 0
    row = col = 0  # where a cell without a reference goes, 0-based
    opened = 0  # row elements opened so far
    tail = b""
    try:
        with zipfile.ZipFile(path) as z, z.open(part) as fh:
            for block in iter(lambda: fh.read(1 << 22), b""):
                data = tail + block
                cut = data.rfind(b"<")  # an element never holds '<', so all before the last one are whole
                cut = max(0, cut)
                for m in _TOKEN.finditer(data, 0, cut):
                    closing, name, attributes, empty = m.groups()
                    ref = _R_ATTRIBUTE.search(b" " + attributes)
                    ref = ref and (ref.group(1) if ref.group(1) is not None else ref.group(2))
                    if name == b"row":
                        if closing:
                            row, col = row + 1, 0
                        elif not empty:
                            opened += 1
                            at = _place(ref) if ref else None
                            row = max(row, opened - 1) if at is None else at[0]
                        continue
                    if closing:
                        continue
                    at = _place(ref) if ref else None
                    r, c = (max(row, opened - 1, 0), col) if at is None else at
                    col = c + 1
                    rows, columns = max(rows, r + 1), max(columns, c + 1)
                tail = data[cut:]
    except (KeyError, OSError, ValueError, EOFError, zipfile.BadZipFile, RuntimeError, zlib.error):
        return rows, columns
    return rows, columns


def _place(ref: bytes):
    """(row, column), 0-based, of a reference as the compiled reader reads it (column 0 without letters)."""
    m = re.fullmatch(rb"([A-Za-z]*)(\d+)", ref)
    if m is None:
        return None  # the reader refuses such a reference, so the sheet is not read at all
    letters = m.group(1).upper()
    return max(int(m.group(2)) - 1, 0), max(_column_number(letters) - 1, 0)


def scan_details(path: Path, part: str, scan: SheetScan, progress_at) -> None:
    """Fill in ``scan``'s merged ranges, formulas without a saved result and error cells.

    When :func:`scan_reach` found no formula and no error cell (``scan.rest``), only the part
    after the rows is searched, for merged ranges.

    ``progress_at`` (or None) is called after each block, to report progress and to give a
    chance to cancel.
    """
    merges = set()
    blocks = [(*scan.rest, True)] if scan.rest is not None else _sheet_blocks(path, part, None, 0.0)
    for chunk, tags, last in blocks:
        _details_of_chunk(chunk, tags, scan, merges if last else None)
        if progress_at is not None:
            progress_at()
    scan.merges = sorted(merges)
    scan.rest = None


def _too_big(path: Path) -> DataFileError:
    return DataFileError(
        f"{path.name} unpacks to more than {MAX_XML_BYTES / 1e9:.3g} GB, more than Twofold reads from a "
        "workbook; save the sheet as CSV, or split the records over several files."
    )


def _details_of_chunk(chunk: bytes, tags: _Tags, scan: SheetScan, merges: set | None) -> None:
    """Formulas without results and error cells of whole rows of XML into ``scan`` (merged ranges into
    ``merges``, given with the part after the rows, where a sheet keeps them)."""
    if not chunk:
        return
    if tags.formula_start in chunk:
        for m in tags.formula.finditer(chunk):
            cell = _cell_around(chunk, m.start(), tags)
            if cell is not None and not _has_value(cell, tags):
                ref = _REF.search(cell)
                if ref:
                    text = (m.group(1) or b"").decode("utf-8", "replace")
                    scan.formulas.append((int(ref.group(2)), _column_number(ref.group(1)), text))
    if b't="e"' in chunk:
        for m in tags.error_cell.finditer(chunk):
            end = tags.cell_end.search(chunk, m.end())
            value = tags.value.search(chunk, m.end(), end.start() if end is not None else len(chunk))
            ref = _REF.search(m.group(0))
            if value and ref:
                scan.errors.append((int(ref.group(2)), _column_number(ref.group(1)),
                                    value.group(1).decode("utf-8", "replace")))
    for m in tags.merge.finditer(chunk) if merges is not None else ():  # merged ranges follow the rows
        c0, r0, c1, r1 = m.groups()
        merges.add((_column_number(c0), int(r0), _column_number(c1 or c0), int(r1 or r0)))


def _has_value(cell: bytes, tags: _Tags) -> bool:
    """Whether a formula cell holds a saved result (an empty text result counts)."""
    return bool(tags.value.search(cell)) or (b't="str"' in cell and b"v>" in cell)


def _cell_around(chunk: bytes, at: int, tags: _Tags) -> bytes | None:
    """The XML of the cell element holding position ``at``."""
    start = None
    for m in tags.cell_start.finditer(chunk, max(0, at - 400), at):
        start = m.start()
    if start is None:
        return None
    end = tags.cell_end.search(chunk, at)
    return chunk[start:end.end()] if end is not None else chunk[start:]


def _formulas_notice(path: Path, sheet: str, formulas: list) -> Notice:
    """A notice for formula cells with no saved result (files written by programs that do not calculate)."""
    missing = len(formulas)
    r, c, text = formulas[0]
    example = f"{column_letters(c)}{r}, {shorten('=' + text, 30)}"
    one = missing == 1
    return Notice("formulas", f"In sheet '{sheet}' of {path.name}, {plural(missing, 'cell')} "
                  f"{'holds a formula' if one else 'hold formulas'} with no saved result "
                  f"(for example {example}), so {'it was' if one else 'they were'} read as empty; "
                  "open the file in Excel, save it, and open it here again.")


def _blank(v) -> bool:
    return v is None or (isinstance(v, str) and not v.strip())


def _as_openpyxl_gave(v):
    """One cell as openpyxl gave it: empty as None, whole numbers as int, dates as datetimes."""
    if isinstance(v, str) and v == "":
        return None
    if type(v) is float and v.is_integer() and abs(v) < 2**53:
        return int(v)
    if type(v) is dt.date:
        return dt.datetime(v.year, v.month, v.day)
    return v


def _column_values(values):
    """A column of cells (an object array, changed in place) as the table gets it, the whole column at once.

    The cells take the types openpyxl gave them (empty as None, whole numbers as int, dates as
    datetimes), and a column that is all numbers or all text is handed on in the form
    :func:`~twofold.core.data.tidy.tidy_frame` would turn it into anyway, so that it need not look
    at each cell again: numbers as a number array (whole numbers with no gap as integers, other
    numbers as floats with gaps and infinities as NaN), text as categories in order of first
    appearance (what tidying a column of text cells starts from).
    """
    import numpy as np
    import pandas as pd

    kind = pd.api.types.infer_dtype(values, skipna=True)
    if kind == "string":  # text, empty cells (empty text) among it: numbered, with the empty text as missing
        codes, uniques = pd.factorize(values)
        empty = np.flatnonzero(uniques == "")
        if len(empty):
            codes = np.where(codes == empty[0], -1, codes - (codes > empty[0]))
            uniques = np.delete(uniques, empty[0])
        if len(uniques):
            return pd.Categorical.from_codes(codes, categories=pd.Index(np.asarray(uniques, dtype=object)))
        values[:] = None
        return values
    if kind not in ("floating", "integer", "mixed-integer-float", "empty", "boolean", "datetime", "date"):
        values[values == ""] = None  # empty cells come as empty text; a column of numbers has none
        kind = pd.api.types.infer_dtype(values, skipna=True)
    if kind in ("floating", "integer", "mixed-integer-float"):
        numbers = values.astype(float)
        finite = np.isfinite(numbers)
        if finite.all() and (numbers == np.trunc(numbers)).all() and (np.abs(numbers) < 2**53).all():
            return numbers.astype(np.int64)
        numbers[~finite] = np.nan
        return numbers
    if kind == "string":
        codes, uniques = pd.factorize(values)
        return pd.Categorical.from_codes(codes, categories=pd.Index(np.asarray(uniques, dtype=object)))
    if kind == "date":  # dates without a time come as dates; openpyxl gave datetimes
        date = dt.date
        values[:] = [dt.datetime(v.year, v.month, v.day) if type(v) is date else v for v in values]
    elif kind not in ("empty", "boolean", "datetime", "time"):  # numbers, text and dates mixed
        values[:] = [_as_openpyxl_gave(v) for v in values]
    return values


def frame_from_rows(rows, merges, where: str, hint: str):
    """The table in a sheet's rows: header at the first non-empty row, titles skipped, empty edges trimmed.

    ``rows`` are lists from A1 (they may be changed in place).  Returns
    (frame of columns typed as :func:`_column_values` says, names made up for blank names, notices).
    """
    import numpy as np
    import pandas as pd

    blank = _blank
    notices: list[Notice] = []
    width = max(map(len, rows), default=0)
    if min(map(len, rows), default=width) == width and set(map(type, rows)) <= {list}:
        filled = rows  # the compiled reader's rows: lists, all as wide as the sheet's reach
    else:
        filled = [r if len(r) == width and isinstance(r, list) else list(r) + [None] * (width - len(r))
                  for r in rows]
    # A merged block shows its top-left value over the whole block.
    for c0, r0, c1, r1 in merges:
        if r0 > len(filled) or c0 > width:
            continue
        value = filled[r0 - 1][c0 - 1]
        for r in range(r0 - 1, min(r1, len(filled))):
            for c in range(c0 - 1, min(c1, width)):
                if filled[r][c] is None or filled[r][c] == "":
                    filled[r][c] = value
    # The first non-empty rows are all the header search looks at (titles, a gap, the names, a row below).
    nonempty = list(itertools.islice((i for i, r in enumerate(filled) if any(not blank(v) for v in r)), 40))
    if not nonempty:
        raise DataFileError(f"The {where} is empty; {hint}.")
    # The rows down to the header are few: give their cells openpyxl's types one by one.
    for i in range(0, min(len(filled), nonempty[min(len(nonempty), 8) - 1] + 3)):
        filled[i] = [_as_openpyxl_gave(v) for v in filled[i]]
    # Titles: one value, or one merged block across the top, above a row of names.
    merged_across = {r0 for c0, r0, c1, r1 in merges if c1 > c0}

    def lone(i):
        values = {str(v) for v in filled[i] if not blank(v)}
        return len(values) == 1 and (filled_count(filled[i]) == 1 or i + 1 in merged_across)

    k = 0
    while k + 1 < len(nonempty) and lone(nonempty[k]) and filled_count(filled[nonempty[k + 1]]) >= 2 \
            and looks_like_names(filled[nonempty[k + 1]]):
        k += 1
    k = header_after_gap(filled, nonempty, k)
    if k:
        title = " ".join(dict.fromkeys(cell_text(v).strip() for v in filled[nonempty[k - 1]] if not blank(v)))
        notices.append(Notice("title_row", f"Row {nonempty[k - 1] + 1} of {where} ({shorten(str(title))!r}) looks "
                              f"like a title, so the column names were taken from row {nonempty[k] + 1}."))
    h = nonempty[k]
    header, data = filled[h], filled[h + 1:]
    header_rows = 1
    # Two header rows: a name merged across columns above their sub-names,
    # told apart from data because the row below it holds numbers or dates.
    spans = [(c0 - 1, min(c1, width)) for c0, r0, c1, r1 in merges if r0 == h + 1 and r1 == r0 and c1 > c0]
    if spans and len(data) >= 2 and looks_like_names(data[0]) and not looks_like_names(data[1]) \
            and all(any(isinstance(data[0][c], str) for c in range(a, b)) for a, b in spans):
        under = {c for a, b in spans for c in range(a, b)}
        sub = data[0]
        header = [
            f"{cell_text(top)} {cell_text(low)}" if j in under and not blank(low) and not blank(top)
            and str(top).strip() != str(low).strip()
            else (cell_text(top) if not blank(top) else cell_text(low))
            for j, (top, low) in enumerate(zip(header, sub))
        ]
        data = data[1:]
        header_rows = 2
        notices.append(Notice("two_header_rows", f"The column names in {where} take two rows, the upper one "
                              f"merged across columns, so each name joins the two (e.g. {header[spans[0][0]]!r})."))
    if any(r1 > h + header_rows and (r1 > r0 or c1 > c0) for c0, r0, c1, r1 in merges):
        notices.append(Notice("merged_cells", f"Some cells of {where} are merged; each merged block's value was "
                              "copied into every cell it covers."))
    # Trim empty edges: trailing rows, and columns empty in the header and below.
    while data and all(blank(v) for v in data[-1]):
        data.pop()
    grid = np.empty((len(data), width), dtype=object)
    if data:
        grid[:] = data
    used = [j for j in range(width) if not blank(header[j]) or _any_filled(grid[:, j])]
    if not used:
        raise DataFileError(f"The {where} has no columns; {hint}.")
    first, last = used[0], used[-1]
    raw_names = ["" if blank(header[j]) else cell_text(header[j]) for j in range(first, last + 1)]
    # A blank name is numbered by its spreadsheet column, so 'column 3' is column C.
    names, generated, name_notices = unique_names(raw_names, where, list(range(first + 1, last + 2)))
    notices.extend(name_notices)
    if not data:
        raise DataFileError(f"The {where} has column names but no data rows; {hint}.")
    block = grid[:, first:last + 1]
    columns = {name: _column_values(block[:, j]) for j, name in enumerate(names)}
    return pd.DataFrame(columns, copy=False), generated, notices


def _any_filled(values) -> bool:
    """Whether a column of cells holds anything other than blanks."""
    return any(not _blank(v) for v in values)
