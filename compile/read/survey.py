"""A look at a workbook's own XML before any reader loads a sheet: where its filled cells
lie, whether it is damaged, and which formulas lack a cached value.

A spreadsheet reader builds a sheet as a dense grid from its first to its last filled cell,
so one stray cell at XFD1048576 in a 5 KB file asks for 17 billion cells (the process
aborts). The survey streams the sheet's XML (constant memory) and answers before that
grid exists: the used area (first and last filled row and column), how many cells hold
something, the cell that reaches furthest, and the formulas saved without a value. A
workbook that is not a zip archive, lacks the sheet's part, holds broken XML or declares
parts too large to unpack is refused here, in one sentence naming the file (and the cell
when known).

An xlsx sheet written the way spreadsheet programs write it (every cell tag starts
``<c r="A1"``, double-quoted attributes) is surveyed with byte patterns (about 1 s per
million cells); anything else, and the search for a damaged number, goes through an XML
parser that follows the file cell by cell (slower, exact). An .ods is read whole by the
reader, so all its tables are surveyed with the XML parser before the reader opens it.
"""

from __future__ import annotations

import posixpath
import re
import zipfile
import zlib
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import IO, Any

from strata13.errors import InputFileError

MAX_CELLS = 10_000_000  # rows × columns of a sheet's used area (about 1 GB to build)
SPARSE_CELLS = 1_000_000  # above this used area, at least 1 % of it must be filled
MIN_FILLED = 0.01
MAX_PART_BYTES = 1 << 30  # one part of the archive, unpacked
MAX_TOTAL_BYTES = 2 << 30  # all parts together, unpacked
_CHUNK = 1 << 22
_CELL_REF = re.compile(r"^\$?([A-Za-z]{1,4})\$?(\d{1,8})$")
# the canonical cell tag: its reference first, then the other attributes (and "/" if empty)
_FAST_CELL = re.compile(rb'<c r="([A-Z]{1,3})(\d{1,7})"([^<>]*)>')
_ODD_CELL = re.compile(rb"<[A-Za-z_][\w.-]*:c[\s/>]|<c[\t\n\r/>]")  # prefixed or unusual tags
_FORMULA = re.compile(rb"<f[\s/>]")


@dataclass
class Survey:
    """What a sheet holds, found without building it. Rows and columns are 0-based."""

    sheet: str
    filled: int = 0
    first_row: int = -1
    last_row: int = -1
    first_col: int = -1
    last_col: int = -1
    far_row_cell: str = ""  # the filled cell with the largest row
    far_col_cell: str = ""  # the filled cell with the largest column
    bad_number: tuple[str, str] | None = None  # (cell, text) of a numeric cell that is not one
    formulas: list[tuple[int, int, str]] = field(default_factory=list)  # without a value

    @property
    def rows(self) -> int:
        return self.last_row - self.first_row + 1 if self.filled else 0

    @property
    def cols(self) -> int:
        return self.last_col - self.first_col + 1 if self.filled else 0

    def add(self, row: int, col: int, n_rows: int = 1, n_cols: int = 1) -> None:
        """Count a filled block of ``n_rows`` × ``n_cols`` cells whose top-left is (row, col)."""
        self.filled += n_rows * n_cols
        self.span(row, col, row + n_rows - 1, col + n_cols - 1, col)

    def span(self, top: int, left: int, bottom: int, right: int, bottom_col: int) -> None:
        """Widen the used area to a block; ``bottom_col`` is the column of its lowest cell."""
        from strata13.compile.read.readers import col_letter

        if self.first_row < 0 or top < self.first_row:
            self.first_row = top
        if self.first_col < 0 or left < self.first_col:
            self.first_col = left
        if bottom > self.last_row:
            self.last_row, self.far_row_cell = bottom, f"{col_letter(bottom_col)}{bottom + 1}"
        if right > self.last_col:
            self.last_col, self.far_col_cell = right, f"{col_letter(right)}{top + 1}"


def _refuse(path: Path, reason: str, hint: str = "") -> InputFileError:
    return InputFileError(
        f"{path.name} could not be read as a spreadsheet: {reason}.",
        hint or "Open it in a spreadsheet program and save it again as .xlsx or .ods.",
    )


def _local(name: str) -> str:
    return name.rsplit("}", 1)[-1].rsplit(":", 1)[-1]


def open_archive(path: Path) -> zipfile.ZipFile:
    """The workbook as a zip archive whose declared sizes are within the limits."""
    try:
        zf = zipfile.ZipFile(path)
    except (zipfile.BadZipFile, zipfile.LargeZipFile, OSError, ValueError) as exc:
        raise _refuse(path, f"it is not a valid zip archive ({exc})") from None
    infos = zf.infolist()
    total = sum(i.file_size for i in infos)
    big = max(infos, key=lambda i: i.file_size, default=None)
    if big is not None and (big.file_size > MAX_PART_BYTES or total > MAX_TOTAL_BYTES):
        zf.close()
        raise _refuse(
            path,
            f"it unpacks to {total / 2**30:.1f} GiB (part {big.filename} alone "
            f"{big.file_size / 2**30:.1f} GiB), more than strata13 reads",
            "Split the workbook, or export the table as CSV.",
        )
    return zf


def _open_part(zf: zipfile.ZipFile, part: str, path: Path) -> IO[bytes]:
    try:
        return zf.open(part)
    except KeyError:
        raise _refuse(path, f"its part {part} is missing") from None
    except (zipfile.BadZipFile, zlib.error, NotImplementedError, RuntimeError, OSError) as exc:
        raise _refuse(path, f"its part {part} cannot be unpacked ({exc})") from None
    except ValueError as exc:
        raise _refuse(path, f"its part {part} cannot be unpacked ({exc})") from None


def _chunks(zf: zipfile.ZipFile, part: str, path: Path) -> Any:
    """The unpacked bytes of ``part`` in chunks; a damaged stream becomes one sentence.

    The unpacked length is bounded by the size the archive declares and the checksum is
    verified at the end, so data longer than declared never get through.
    """
    with _open_part(zf, part, path) as fh:
        while True:
            try:
                chunk = fh.read(_CHUNK)
            except (zipfile.BadZipFile, zlib.error, EOFError, OSError, ValueError) as exc:
                raise _refuse(path, f"its part {part} is damaged ({exc})") from None
            if not chunk:
                return
            yield chunk


def check_parts(zf: zipfile.ZipFile, path: Path, parts: list[str]) -> None:
    """Unpack ``parts`` once to the end (their checksums are verified on the way)."""
    names = set(zf.namelist())
    for part in parts:
        if part in names:
            for _ in _chunks(zf, part, path):
                pass


def _parse(
    zf: zipfile.ZipFile,
    part: str,
    path: Path,
    start: Callable[[str, dict[str, str]], None],
    end: Callable[[str], None],
    text: Callable[[str], None] | None = None,
) -> None:
    """Feed ``part`` through an expat parser with the given handlers, chunk by chunk."""
    import xml.parsers.expat as expat

    p = expat.ParserCreate()
    p.buffer_text = True
    p.StartElementHandler = start
    p.EndElementHandler = end
    if text is not None:
        p.CharacterDataHandler = text
    try:
        for chunk in _chunks(zf, part, path):
            p.Parse(chunk, False)
        p.Parse(b"", True)
    except expat.ExpatError as exc:
        raise _refuse(path, f"the XML of {part} is broken ({exc})") from None


def precheck(path: Path) -> dict[str, Survey]:
    """Before a reader opens the workbook: a zip archive of bounded size whose shared parts
    (workbook, strings, styles) unpack cleanly. An .ods is read whole by the reader, so
    every one of its tables is surveyed (and checked) here; returns those surveys."""
    ods = path.suffix.lower() == ".ods"
    parts = (
        ["styles.xml", "meta.xml"]
        if ods
        else ["xl/workbook.xml", "xl/_rels/workbook.xml.rels", "xl/sharedStrings.xml"]
        + ["xl/styles.xml"]
    )
    with open_archive(path) as zf:
        check_parts(zf, path, parts)
    if not ods:
        return {}
    tables = survey_ods(path)
    for table in tables.values():
        verdict(path, table)
    return tables


# ---------------------------------------------------------------- xlsx


def xlsx_sheet_part(zf: zipfile.ZipFile, path: Path, sheet: str) -> str:
    """The archive part holding worksheet ``sheet`` (workbook.xml and its relationships)."""
    import xml.etree.ElementTree as ET

    def parse(part: str) -> Any:
        try:
            return ET.fromstring(zf.read(part))
        except KeyError:
            raise _refuse(path, f"its part {part} is missing") from None
        except (ET.ParseError, zipfile.BadZipFile, zlib.error, OSError, ValueError) as exc:
            raise _refuse(path, f"the XML of {part} is broken ({exc})") from None

    rid = None
    for elem in parse("xl/workbook.xml").iter():
        if _local(elem.tag) == "sheet" and elem.get("name") == sheet:
            rid = next((v for k, v in elem.attrib.items() if _local(k) == "id"), None)
            break
    if rid is None:
        raise _refuse(path, f"its workbook does not list the sheet {sheet!r}")
    for elem in parse("xl/_rels/workbook.xml.rels").iter():
        if _local(elem.tag) == "Relationship" and elem.get("Id") == rid:
            target = str(elem.get("Target", ""))
            part = posixpath.normpath(target[1:] if target.startswith("/") else f"xl/{target}")
            if part not in zf.namelist():
                raise _refuse(path, f"the sheet {sheet!r} has no worksheet part ({part})")
            return part
    raise _refuse(path, f"the sheet {sheet!r} has no worksheet part")


def survey_xlsx(path: Path, sheet: str, exact: bool = False) -> Survey:
    """Survey the worksheet part of ``sheet``: byte patterns when the sheet is written the
    canonical way (unless ``exact``), else the XML parser."""
    with open_archive(path) as zf:
        part = xlsx_sheet_part(zf, path, sheet)
        if not exact:
            fast = _fast_xlsx(zf, part, path, sheet)
            if fast is not None:
                return fast
        return _exact_xlsx(zf, part, path, sheet)


def _fast_xlsx(zf: zipfile.ZipFile, part: str, path: Path, sheet: str) -> Survey | None:
    """The survey from byte patterns, or None when the sheet is not written canonically.

    Each chunk is cut after its last ``</c>`` (``<`` never stands unescaped in XML text or
    attributes, so that is a real end tag). Every cell tag must match the canonical pattern
    (counted both ways) with no second ``r=`` and no single-quoted attribute.
    """
    out = Survey(sheet)
    carry = b""
    for chunk in _chunks(zf, part, path):
        data = carry + chunk
        cut = data.rfind(b"</c>")
        if cut < 0:
            if len(data) > 16 * _CHUNK:
                return None  # a cell larger than 64 MB: let the parser judge it
            carry = data
            continue
        carry, data = data[cut + 4 :], data[: cut + 4]
        if not _fast_chunk(data, out):
            return None
    if carry and (_ODD_CELL.search(carry) or b"<c " in carry):
        return None  # cells after the last </c>: unusual, let the parser judge them
    return out


def _fast_chunk(data: bytes, out: Survey) -> bool:
    if _ODD_CELL.search(data):
        return False
    cells = _FAST_CELL.findall(data)
    if len(cells) != data.count(b"<c "):
        return False
    rest = b"\x00".join(c[2] for c in cells)
    if b"r=" in rest or b"='" in rest:
        return False
    filled = [(letters, int(digits)) for letters, digits, more in cells if not more.endswith(b"/")]
    if filled:
        out.filled += len(filled)
        rows = [r for _, r in filled]
        low = max(range(len(filled)), key=rows.__getitem__)
        cols = {letters: _col_index(letters.decode()) for letters in {c for c, _ in filled}}
        right = max(cols, key=cols.__getitem__)
        right_row = next(r for c, r in filled if c == right)
        lowest_col = cols[filled[low][0]]
        out.span(min(rows) - 1, min(cols.values()), rows[low] - 1, -1, lowest_col)
        out.span(right_row - 1, cols[right], right_row - 1, cols[right], cols[right])
    if b"<f" in data:
        _fast_formulas(data, out)
    return True


def _fast_formulas(data: bytes, out: Survey) -> None:
    """Formulas whose cell has no cached value (an absent or empty <v>)."""
    for m in _FORMULA.finditer(data):
        start = data.rfind(b"<c ", 0, m.start())
        stop = data.find(b"</c>", m.start())
        if start < 0 or stop < 0:
            continue
        cell = data[start : stop + 4]
        ref = _FAST_CELL.match(cell)
        value = re.search(rb"<v>([^<]*)</v>", cell)
        if ref is None or (value is not None and value.group(1).strip()):
            continue
        text = re.search(rb"<f[^>]*>([^<]*)</f>", cell)
        formula = text.group(1).decode("utf-8", "replace") if text else ""
        out.formulas.append(
            (
                int(ref.group(2)) - 1,
                _col_index(ref.group(1).decode()),
                "=" + formula if formula else "= (shared formula)",
            )
        )


class _XlsxCells:
    """expat handlers that follow a worksheet cell by cell (exact, slower)."""

    def __init__(self, sheet: str) -> None:
        self.out = Survey(sheet)
        self.row, self.col = -1, -1
        self.kind: str | None = None  # the cell's t attribute
        self.content = False
        self.value: list[str] | None = None
        self.formula: list[str] | None = None
        self.into: list[str] | None = None  # where character data go

    def start(self, name: str, attrs: dict[str, str]) -> None:
        tag = _local(name)
        if tag == "row":
            r = _get(attrs, "r")
            self.row = int(r) - 1 if r and r.isdigit() else self.row + 1
            self.col = -1
        elif tag == "c":
            ref = _CELL_REF.match(_get(attrs, "r") or "")
            if ref:
                self.col, self.row = _col_index(ref.group(1)), int(ref.group(2)) - 1
            else:
                self.col += 1
            self.kind, self.content, self.value, self.formula = _get(attrs, "t"), False, None, None
        elif tag in ("v", "is"):
            self.content, self.value = True, self.value or []
            self.into = self.value
        elif tag == "f":
            self.content, self.formula = True, []
            self.into = self.formula

    def text(self, data: str) -> None:
        if self.into is not None:
            self.into.append(data)

    def end(self, name: str) -> None:
        from strata13.compile.read.readers import col_letter

        tag = _local(name)
        if tag in ("v", "f", "is"):
            self.into = None
        elif tag == "c" and self.content:
            out = self.out
            out.add(self.row, self.col)
            value = "".join(self.value or []).strip()
            if self.formula is not None and not value:
                text = "".join(self.formula)
                out.formulas.append(
                    (self.row, self.col, "=" + text if text else "= (shared formula)")
                )
            if value and self.kind in (None, "n") and out.bad_number is None:
                try:
                    float(value)
                except ValueError:
                    out.bad_number = (f"{col_letter(self.col)}{self.row + 1}", value[:40])


def _get(attrs: dict[str, str], name: str) -> str | None:
    """An attribute by local name, whatever its prefix."""
    if name in attrs:
        return attrs[name]
    return next((v for k, v in attrs.items() if _local(k) == name), None)


def _exact_xlsx(zf: zipfile.ZipFile, part: str, path: Path, sheet: str) -> Survey:
    cells = _XlsxCells(sheet)
    _parse(zf, part, path, cells.start, cells.end, cells.text)
    return cells.out


def _col_index(letters: str) -> int:
    n = 0
    for ch in letters.upper():
        n = n * 26 + ord(ch) - 64
    return n - 1


# ---------------------------------------------------------------- ods


class _OdsCells:
    """expat handlers for content.xml: every table, repeated rows and cells as blocks."""

    def __init__(self) -> None:
        self.found: dict[str, Survey] = {}
        self.out: Survey | None = None
        self.depth = 0  # nesting below the current table (a table inside a cell is skipped)
        self.row, self.col, self.row_rep = -1, 0, 1
        self.cell: tuple[int, bool] | None = None  # (columns repeated, filled so far)

    def start(self, name: str, attrs: dict[str, str]) -> None:
        tag = _local(name)
        if self.out is None:
            if tag == "table":
                label = _get(attrs, "name") or f"Sheet{len(self.found) + 1}"
                self.out = self.found[label] = Survey(label)
                self.row, self.col, self.depth = -1, 0, 0
            return
        self.depth += 1
        if tag == "table-row":
            self.row, self.col = self.row + 1, 0
            self.row_rep = _repeat(_get(attrs, "number-rows-repeated"))
        elif tag in ("table-cell", "covered-table-cell"):
            reps = _repeat(_get(attrs, "number-columns-repeated"))
            filled = tag == "table-cell" and _get(attrs, "value-type") is not None
            self.cell = (reps, filled)
        elif tag == "p" and self.cell is not None:
            self.cell = (self.cell[0], True)

    def text(self, data: str) -> None:
        if self.cell is not None and data.strip():
            self.cell = (self.cell[0], True)

    def end(self, name: str) -> None:
        if self.out is None:
            return
        tag = _local(name)
        if self.depth == 0:  # the table itself ends
            self.out = None
            return
        self.depth -= 1
        if tag == "table-row":
            self.row += self.row_rep - 1
        elif tag in ("table-cell", "covered-table-cell") and self.cell is not None:
            reps, filled = self.cell
            if filled and tag == "table-cell":
                self.out.add(self.row, self.col, self.row_rep, reps)
            self.col += reps
            self.cell = None


def survey_ods(path: Path) -> dict[str, Survey]:
    """Every table of an .ods (the reader loads them all at once)."""
    cells = _OdsCells()
    with open_archive(path) as zf:
        _parse(zf, "content.xml", path, cells.start, cells.end, cells.text)
    return cells.found


def _repeat(text: str | None) -> int:
    return int(text) if text and text.isdigit() and int(text) > 0 else 1


# ---------------------------------------------------------------- the verdict


def survey(path: Path, sheet: str, known: dict[str, Survey] | None = None) -> Survey:
    """The survey of ``sheet`` (from ``known`` when precheck made it), checked."""
    s = (known or {}).get(sheet) or (
        survey_ods(path).get(sheet, Survey(sheet))
        if path.suffix.lower() == ".ods"
        else survey_xlsx(path, sheet)
    )
    return verdict(path, s)


def damaged_cell(path: Path, sheet: str) -> tuple[str, str] | None:
    """The first numeric cell that is not a number (cell, text), found exactly; for
    naming the cell when the reader reports a damaged number."""
    if path.suffix.lower() == ".ods":
        return None
    try:
        return survey_xlsx(path, sheet, exact=True).bad_number
    except InputFileError:
        return None


def verdict(path: Path, s: Survey) -> Survey:
    """Refuse a sheet whose used area is too large to build or whose numbers are damaged."""
    area = s.rows * s.cols
    if area > MAX_CELLS:
        far = s.far_row_cell if s.rows >= s.cols else s.far_col_cell
        raise InputFileError(
            f"sheet {s.sheet!r} of {path.name} spans {s.rows:,} rows × {s.cols:,} columns "
            f"({area:,} cells, {s.filled:,} of them filled) because of cell {far}; strata13 "
            f"reads at most {MAX_CELLS:,} cells of a sheet.",
            f"Delete what lies far from the table (cell {far}) and save again, or copy the "
            "table to a new sheet.",
        )
    if area > SPARSE_CELLS and s.filled < MIN_FILLED * area:
        far = s.far_row_cell if s.rows >= s.cols else s.far_col_cell
        raise InputFileError(
            f"sheet {s.sheet!r} of {path.name} spans {s.rows:,} rows × {s.cols:,} columns "
            f"({area:,} cells) but only {s.filled:,} of them are filled, because of cell "
            f"{far}; strata13 reads a sheet this large only when at least "
            f"{MIN_FILLED:.0%} of it is filled.",
            f"Delete what lies far from the table (cell {far}) and save again, or copy the "
            "table to a new sheet.",
        )
    if s.bad_number is not None:
        cell, text = s.bad_number
        raise _refuse(
            path,
            f"cell {cell} of sheet {s.sheet!r} is stored as a number but holds {text!r}",
            "The file is damaged; open it in a spreadsheet program, fix the cell and save again.",
        )
    return s
