"""Readers: a spreadsheet or CSV file -> a table of text cells that keep their coordinates.

Every cell comes out as text (``None`` when empty) so that cleaning can report exactly
what the sheet said. Each data row keeps its row number in the spreadsheet's own
numbering and each column its letter, so a report can say ``D17``.

xlsx/ods are first surveyed from their own XML (``survey``: the used area, damage, formulas
without a cached value) so that a stray far cell is refused before a grid is built; then
python-calamine reads only the used area, and letters and row numbers keep the sheet's own
coordinates (an empty column A does not shift them); merged ranges are filled from their
top-left cell and reported; formulas without a cached value (calamine shows them as
empty) are reported. CSV/TSV: UTF-8 (with or without BOM), then cp1252, then Latin-1;
the delimiter is detected; pyarrow parses the body so a million rows stay columnar.
"""

from __future__ import annotations

import csv
import datetime as dt
import io
import re
import unicodedata
from collections.abc import Iterable
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

from strata13.compile.check.report import Issue

from strata13.errors import ConfigError, InputFileError

if TYPE_CHECKING:
    import numpy as np
    import pyarrow as pa

SHEET_HINT = "Check the path (relative paths in a mapping file start at its folder)."
SPREADSHEET_SUFFIXES = {".xlsx", ".xlsm", ".ods"}
TEXT_SUFFIXES = {".csv", ".tsv", ".txt"}
FOOTNOTE_START = re.compile(
    r"^\s*([*†‡§¶]|\(?[a-z]\)|notes?\b|source\b|n\.?d\.?\s*=|bdl\s*=)", re.IGNORECASE
)


def col_letter(index: int) -> str:
    """0-based column index -> spreadsheet letters (0 -> A, 26 -> AA)."""
    letters = ""
    index += 1
    while index:
        index, rem = divmod(index - 1, 26)
        letters = chr(65 + rem) + letters
    return letters


def norm_header(text: str) -> str:
    """Header text compared loosely: NFKC, case-folded, inner spaces collapsed."""
    return " ".join(unicodedata.normalize("NFKC", str(text)).casefold().split())


def strip_unit(text: str) -> tuple[str, str | None]:
    """'Height (ft)' -> ('Height', 'ft'); 'δ13C [‰ VPDB]' -> ('δ13C', '‰ VPDB')."""
    m = re.match(r"^(.*?)\s*[\(\[]([^\)\]]+)[\)\]]\s*$", str(text))
    if m and m.group(1).strip():
        return m.group(1).strip(), m.group(2).strip()
    return str(text).strip(), None


@dataclass
class RawTable:
    """The cells under a header row, as text, with their spreadsheet coordinates."""

    file: str
    sheet: str
    header_row: int
    headers: list[str]
    letters: list[str]
    table: pa.Table  # one string column per header, named c0, c1, …
    row_numbers: np.ndarray  # spreadsheet row number of each data row
    blank_rows: int = 0
    rejected_rows: int = 0  # rows the reader could not split into cells (counted, reported)
    issues: list[Issue] = field(default_factory=list)

    def column(self, index: int) -> pa.ChunkedArray:
        return self.table.column(index)

    @property
    def n_rows(self) -> int:
        return int(self.table.num_rows)


def read_table(
    path: Path,
    sheet: str | int | None = None,
    header_row: int | None = None,
    expected_headers: Iterable[str] = (),
    delimiter: str = "auto",
    encoding: str = "auto",
) -> RawTable:
    """Read one table from a spreadsheet or text file; see the module docstring."""
    from strata13.compile.read.inputs import check_file

    check_file(path, "sheet", SHEET_HINT)  # a missing file, a folder, a pipe, a loop …
    suffix = path.suffix.lower()
    expected = [norm_header(h) for h in expected_headers]
    if suffix in SPREADSHEET_SUFFIXES:
        return _read_spreadsheet(path, sheet, header_row, expected)
    if suffix in TEXT_SUFFIXES:
        return _read_text(path, header_row, expected, delimiter, encoding)
    raise InputFileError(
        f"{path.name} is not a spreadsheet strata13 reads ({suffix or 'no suffix'}).",
        "Use .xlsx, .ods, .csv or .tsv.",
    )


# ---------------------------------------------------------------- spreadsheets


def _cell_text(value: Any) -> str | None:
    if value is None or value == "":
        return None
    if isinstance(value, bool):
        return "TRUE" if value else "FALSE"
    if isinstance(value, float):
        return repr(int(value)) if value.is_integer() and abs(value) < 1e15 else repr(value)
    if isinstance(value, dt.datetime):
        return value.isoformat(sep=" ")
    if isinstance(value, (dt.date, dt.time, dt.timedelta)):
        return value.isoformat() if hasattr(value, "isoformat") else str(value)
    return str(value)


def _read_spreadsheet(
    path: Path, sheet: str | int | None, header_row: int | None, expected: list[str]
) -> RawTable:
    cells = sheet_cells(path, sheet)
    return _table_from_grid(
        path.name,
        cells.sheet,
        cells.grid,
        header_row,
        expected,
        cells.issues,
        cells.row_offset + 1,
        cells.col_offset,
    )


@dataclass
class SheetCells:
    """A workbook sheet's used area as text, where it starts, and what reading it found."""

    sheet: str
    grid: list[list[str | None]]
    row_offset: int  # 0-based sheet row of grid[0]
    col_offset: int  # 0-based sheet column of grid[r][0]
    issues: list[Issue]


def sheet_cells(path: Path, sheet: str | int | None) -> SheetCells:
    """The used area of one sheet of a workbook, surveyed first (a huge or damaged file is
    refused in one sentence), merged ranges filled, formulas without a value reported."""
    import python_calamine as pcal
    from strata13.compile.read.survey import precheck, survey

    known = precheck(path)  # a bounded, undamaged archive before the reader opens it
    try:
        wb = pcal.CalamineWorkbook.from_path(str(path))
        names = list(wb.sheet_names)
    except Exception as exc:  # calamine raises several types for a broken file
        raise InputFileError(
            f"{path.name} could not be read as a spreadsheet: {_calamine_reason(exc)}.",
            "Check that the file is a real .xlsx/.ods and not password protected or truncated.",
        ) from None
    if not names:
        raise InputFileError(
            f"{path.name} could not be read as a spreadsheet: it has no sheets.",
            "Open it in a spreadsheet program and save it again.",
        )
    name = _sheet_name(path, names, sheet)
    found = survey(path, name, known)  # refuses a used area too large to build, first
    try:
        ws = wb.get_sheet_by_name(name)
        grid = [list(r) for r in ws.to_python(skip_empty_area=True)]
        r_off, c_off = (int(x) for x in (getattr(ws, "start", None) or (0, 0)))
        merged = getattr(ws, "merged_cell_ranges", None) or []
    except Exception as exc:  # WorksheetNotFound, XmlError, a damaged cell …
        from strata13.compile.read.survey import damaged_cell

        bad = damaged_cell(path, name) if "float" in str(exc).lower() else None
        why = (
            f"cell {bad[0]} of sheet {name!r} is stored as a number but holds {bad[1]!r}"
            if bad
            else f"sheet {name!r}: {_calamine_reason(exc)}"
        )
        raise InputFileError(
            f"{path.name} could not be read as a spreadsheet: {why}.",
            "Open it in a spreadsheet program and save it again as .xlsx or .ods.",
        ) from None
    issues: list[Issue] = []
    width = max((len(r) for r in grid), default=0)
    for row in grid:
        row.extend([""] * (width - len(row)))
    # merged ranges (sheet coordinates): fill from the top-left cell and say so
    for (r0, c0), (r1, c1) in merged:
        top_r, top_c = r0 - r_off, c0 - c_off
        if not (0 <= top_r < len(grid) and 0 <= top_c < width):
            continue
        top = grid[top_r][top_c]
        for rr in range(top_r, min(r1 - r_off, len(grid) - 1) + 1):
            for cc in range(top_c, min(c1 - c_off, width - 1) + 1):
                grid[rr][cc] = top
        ref = f"{col_letter(c0)}{r0 + 1}:{col_letter(c1)}{r1 + 1}"
        issues.append(
            Issue(
                "info",
                name,
                f"{col_letter(c0)}{r0 + 1}",
                "",
                _cell_text(top) or "",
                "merged cell",
                f"merged range {ref} filled from its top-left cell",
            )
        )
    for r, c, formula in found.formulas:
        rr, cc = r - r_off, c - c_off
        if 0 <= rr < len(grid) and 0 <= cc < width and grid[rr][cc] not in ("", None):
            continue  # the reader found a value after all
        issues.append(
            Issue(
                "error",
                name,
                f"{col_letter(c)}{r + 1}",
                "",
                formula,
                "formula without cached value",
                "the cell holds a formula the file has no computed value for; "
                "open and save it in a spreadsheet program, or type the value",
            )
        )
    text_grid = [[_cell_text(v) for v in row] for row in grid]
    return SheetCells(name, text_grid, r_off, c_off, issues)


def _calamine_reason(exc: BaseException) -> str:
    """A reader's error as a short clause (what the error kind means, then its words)."""
    text = " ".join(str(exc).split())[:200].rstrip(".")
    meaning = {
        "WorksheetNotFound": "its worksheet part is missing",
        "XmlError": "its XML is empty or broken",
        "ZipError": "it is not a valid zip archive",
        "PasswordError": "it is password protected",
    }.get(type(exc).__name__)
    if meaning:
        return f"{meaning} ({text})" if text else meaning
    return text or type(exc).__name__


def _sheet_name(path: Path, names: list[str], sheet: str | int | None) -> str:
    """The sheet the mapping names (a name, loosely matched, or a 1-based number)."""
    if sheet is None:
        return names[0]
    if isinstance(sheet, int):
        if not 1 <= sheet <= len(names):
            raise ConfigError(
                f"{path.name} has {len(names)} sheet{'s' * (len(names) != 1)}; "
                f"sheet {sheet} does not exist.",
                f"Sheets: {', '.join(names)}.",
            )
        return names[sheet - 1]
    loose = [n for n in names if norm_header(n) == norm_header(sheet)]
    if sheet in names:  # the exact name wins
        return sheet
    if len(loose) == 1:
        return loose[0]
    raise ConfigError(
        f"{path.name} has no sheet named {sheet!r}"
        + (" (several match loosely)." if loose else "."),
        "Sheets: " + ", ".join(repr(n) for n in names) + ".",
    )


def _find_header(rows: list[list[str | None]], expected: list[str], limit: int = 60) -> int:
    """0-based index of the row holding the mapped headers (most matches wins)."""
    best, best_hits = 0, -1
    want = set(expected)
    want_bare = {norm_header(strip_unit(e)[0]) for e in expected}
    for i, row in enumerate(rows[:limit]):
        cells = {norm_header(c) for c in row if c}
        bare = {norm_header(strip_unit(c)[0]) for c in row if c}
        hits = len(want & cells) + len(want_bare & bare) if want else len(cells)
        if hits > best_hits:
            best, best_hits = i, hits
        if want and len(want & cells) == len(want):
            return i
    return best


def _table_from_grid(
    file: str,
    sheet: str,
    grid: list[list[str | None]],
    header_row: int | None,
    expected: list[str],
    issues: list[Issue],
    row_offset: int = 1,
    col_offset: int = 0,
) -> RawTable:
    """The table under the header; ``row_offset`` is the sheet row of ``grid[0]`` and
    ``col_offset`` the 0-based sheet column of its first column."""
    import numpy as np
    import pyarrow as pa

    if not grid:
        raise InputFileError(f"{file} ({sheet}) is empty.", "Check the sheet name and file.")
    if header_row is not None:
        last = row_offset + len(grid) - 1
        if not row_offset <= header_row <= last:
            raise ConfigError(
                f"header_row = {header_row} is outside {file} ({sheet}), whose cells "
                f"in use are on rows {row_offset} to {last}.",
                "Give the spreadsheet row of the header.",
            )
        h = header_row - row_offset
    else:
        h = _find_header(grid, expected)
    for i in range(h):
        if any(grid[i]):
            text = next(c for c in grid[i] if c)
            issues.append(
                Issue(
                    "info",
                    sheet,
                    f"{_first_col(grid[i], col_offset)}{i + row_offset}",
                    "",
                    text,
                    "title row",
                    "row above the header skipped",
                )
            )
    headers_raw = grid[h]
    keep = [j for j, v in enumerate(headers_raw) if v] or list(range(len(headers_raw)))
    headers = [headers_raw[j] or "" for j in keep]
    body = grid[h + 1 :]
    rows = [[r[j] if j < len(r) else None for j in keep] for r in body]
    numbers = list(range(h + 1 + row_offset, h + 1 + row_offset + len(rows)))
    # footnotes: trailing rows with a single text cell (or a footnote marker)
    end = len(rows)
    while end and not any(rows[end - 1]):
        end -= 1
    while end:
        filled = [c for c in rows[end - 1] if c]
        if len(filled) == 1 and (FOOTNOTE_START.match(filled[0]) or not _numberish(filled[0])):
            ref = f"{_first_col(body[end - 1], col_offset)}{numbers[end - 1]}"
            issues.append(
                Issue(
                    "info", sheet, ref, "", filled[0], "footnote row", "row below the data skipped"
                )
            )
            end -= 1
            while end and not any(rows[end - 1]):
                end -= 1
        else:
            break
    blank = 0
    kept_rows, kept_numbers = [], []
    for r, n in zip(rows[:end], numbers[:end], strict=True):
        if any(r):
            kept_rows.append(r)
            kept_numbers.append(n)
        else:
            blank += 1
    by_letter = {col_letter(j + col_offset): headers_raw[j] for j in keep}
    for k, issue in enumerate(issues):  # name the column of cell findings made before the header
        letter = "".join(ch for ch in issue.cell if ch.isalpha())
        if not issue.column and letter in by_letter and issue.rule != "title row":
            issues[k] = Issue(
                issue.severity,
                issue.sheet,
                issue.cell,
                by_letter[letter] or "",
                issue.value,
                issue.rule,
                issue.hint,
            )
    cols = {
        f"c{j}": pa.array([r[j] for r in kept_rows], type=pa.string()) for j in range(len(headers))
    }
    table = pa.table(cols) if cols else pa.table({})
    return RawTable(
        file,
        sheet,
        h + row_offset,
        headers,
        [col_letter(j + col_offset) for j in keep],
        table,
        np.asarray(kept_numbers, dtype=np.int64),
        blank,
        issues=issues,
    )


def _first_col(row: list[str | None], col_offset: int = 0) -> str:
    """Letter of the first filled cell of a full-width grid row."""
    for j, v in enumerate(row):
        if v:
            return col_letter(j + col_offset)
    return col_letter(col_offset)


def _numberish(text: str) -> bool:
    return bool(re.match(r"^\s*[-+−–]?\d", text))


# ---------------------------------------------------------------- text files


def decode_bytes(data: bytes, encoding: str = "auto") -> tuple[str, str]:
    """Decode as UTF-8 (BOM or not), else cp1252, else Latin-1; return (text, encoding)."""
    if encoding != "auto":
        try:
            return data.decode(encoding), encoding
        except (UnicodeError, LookupError, ValueError) as exc:
            raise ConfigError(
                f"the file cannot be decoded as {encoding} ({exc}).",
                'Set encoding = "auto" in the mapping file\'s [table].',
            ) from None
    for enc in ("utf-8-sig", "cp1252", "latin-1"):
        try:
            return data.decode(enc), ("utf-8" if enc == "utf-8-sig" else enc)
        except UnicodeDecodeError:
            continue
    raise AssertionError("latin-1 decodes every byte")  # pragma: no cover


def _is_utf8(data: bytes) -> bool:
    """UTF-8 check without building a Python string of the whole file."""
    import pyarrow as pa

    try:
        pa.array([data], type=pa.binary()).cast(pa.string())
        return True
    except (pa.ArrowInvalid, UnicodeDecodeError):
        return False


def sniff_delimiter(sample: str) -> str:
    lines = [ln for ln in sample.splitlines()[:50] if ln.strip()]
    best, best_score = ",", -1.0
    for d in (",", ";", "\t", "|"):
        counts = [ln.count(d) for ln in lines]
        if not counts or max(counts) == 0:
            continue
        common = max(set(counts), key=counts.count)
        score = counts.count(common) / len(counts) * (common > 0) + common * 1e-3
        if score > best_score:
            best, best_score = d, score
    return best


def _read_text(
    path: Path, header_row: int | None, expected: list[str], delimiter: str, encoding: str
) -> RawTable:
    import numpy as np
    import pyarrow as pa
    import pyarrow.csv as pcsv
    from strata13.compile.read.inputs import read_bytes

    data = read_bytes(path, "sheet", SHEET_HINT)
    if not data.strip():
        raise InputFileError(f"{path.name} is empty.", "Check that the right file was named.")
    if data.startswith((b"\xff\xfe", b"\xfe\xff")) and encoding == "auto":
        encoding = "utf-16"  # "Unicode text" exports of spreadsheet programs
    if b"\x00" in data[:4096] and not encoding.lower().startswith("utf-16"):
        raise InputFileError(
            f"{path.name} is a binary file, not a CSV/TSV text table.",
            "Export the table as CSV or give the .xlsx/.ods file.",
        )
    if encoding == "auto" and _is_utf8(data):
        text, enc = "", "utf-8"
    else:
        text, enc = decode_bytes(data, encoding)
    issues: list[Issue] = []
    sheet = path.name
    if enc != "utf-8":
        issues.append(
            Issue("info", sheet, "", "", enc, "encoding", f"file is not UTF-8; decoded as {enc}")
        )
        data = text.encode("utf-8")
    elif data.startswith(b"\xef\xbb\xbf"):
        data = data[3:]
    del text  # work on the UTF-8 bytes from here: no Python object per line
    data, cr_lines = _bare_carriage_returns(data, issues, sheet)
    head_text = data[: 1 << 16].decode("utf-8", errors="replace")
    if delimiter == "auto":
        delim = "\t" if path.suffix.lower() == ".tsv" else sniff_delimiter(head_text)
    else:
        delim = {"tab": "\t", "\\t": "\t"}.get(delimiter, delimiter)
    head = list(csv.reader(io.StringIO("\n".join(head_text.split("\n")[:60])), delimiter=delim))
    head_rows = [[c if c.strip() else None for c in r] for r in head]
    h = header_row - 1 if header_row is not None else _find_header(head_rows, expected)
    buf = np.frombuffer(data, dtype=np.uint8)
    newlines = np.flatnonzero(buf == 10)
    quote_lines = _unclosed_quotes(data, buf, newlines, delim, h + 2)
    quote_texts = {}
    if quote_lines:  # each such row becomes empty cells for the parser, then is left out
        lines = data.split(b"\n")
        width = len(head[h]) if h < len(head) else 1
        for n in quote_lines:
            quote_texts[n] = lines[n - 1][:80].decode("utf-8", errors="replace")
            lines[n - 1] = delim.encode() * max(width - 1, 1)
        data = b"\n".join(lines)
        buf = np.frombuffer(data, dtype=np.uint8)
        newlines = np.flatnonzero(buf == 10)
    starts = np.concatenate([[0], newlines + 1])
    ends = np.concatenate([newlines, [len(data)]])
    if ends[-1] == starts[-1]:  # the file ends with a newline: no last line
        starts, ends = starts[:-1], ends[:-1]
    if h >= len(starts):
        raise ConfigError(
            f"header_row = {header_row} is past the end of {path.name}.",
            "Give the line number of the header.",
        )
    for i in range(min(h, len(head_rows))):
        if any(head_rows[i]):
            issues.append(
                Issue(
                    "info",
                    sheet,
                    f"A{i + 1}",
                    "",
                    next(c for c in head_rows[i] if c),
                    "title row",
                    "line above the header skipped",
                )
            )
    lengths = ends[h + 1 :] - starts[h + 1 :]
    cr_only = np.zeros(len(lengths), dtype=bool)
    one = np.flatnonzero(lengths == 1)
    cr_only[one] = buf[starts[h + 1 :][one]] == 13
    # pyarrow skips empty lines: keep the line numbers of the others
    nonempty = (lengths > 0) & ~cr_only
    line_numbers = np.nonzero(nonempty)[0] + h + 2
    body = memoryview(data)[int(starts[h]) :]

    def body_line(k: int) -> str:
        j = h + 1 + k
        return bytes(data[starts[j] : ends[j]]).decode("utf-8", errors="replace")

    bad_rows: list[tuple[int | None, str, int, int]] = []

    def on_invalid(row: Any) -> str:
        bad_rows.append((row.number, row.text, row.actual_columns, row.expected_columns))
        return "skip"

    try:
        table = pcsv.read_csv(
            pa.BufferReader(pa.py_buffer(body)),
            read_options=pcsv.ReadOptions(block_size=1 << 24),
            parse_options=pcsv.ParseOptions(
                delimiter=delim, newlines_in_values=False, invalid_row_handler=on_invalid
            ),
            convert_options=pcsv.ConvertOptions(
                # every cell stays text, exactly as written; cleaning parses it
                column_types={name: pa.string() for name in (head[h] if h < len(head) else [])},
                strings_can_be_null=True,
                quoted_strings_can_be_null=True,
                null_values=[""],
                check_utf8=False,
                auto_dict_encode=False,
                timestamp_parsers=[],
            ),
        )
    except pa.ArrowInvalid as exc:
        raise InputFileError(
            f"{path.name} is not a well-formed delimited table ({exc}).",
            "Check that every line has the same number of separators "
            f"({delim!r}) and that quotes are closed.",
        ) from None
    if bad_rows:
        skip_idx: list[int] = []
        for number, text_, actual, expected_n in bad_rows:
            # row.number counts the header as row 1 of the text pyarrow saw; when pyarrow
            # does not know it, find the line by its text
            idx = (number - 2) if number else _find_line(body_line, nonempty, text_, skip_idx)
            line = (
                int(line_numbers[idx]) if idx is not None and 0 <= idx < len(line_numbers) else None
            )
            is_last = idx is not None and idx >= len(line_numbers) - len(bad_rows)
            if actual == 1 and is_last:
                issues.append(
                    Issue(
                        "info",
                        sheet,
                        f"A{line or ''}",
                        "",
                        text_.strip(),
                        "footnote row",
                        "row below the data skipped",
                    )
                )
            else:
                issues.append(
                    Issue(
                        "error",
                        sheet,
                        f"A{line or ''}",
                        "",
                        text_[:80],
                        "row shape",
                        f"row has {actual} cells where the header "
                        f"has {expected_n}; fix the separators in this row",
                    )
                )
            if idx is not None:
                skip_idx.append(idx)
        line_numbers = np.delete(line_numbers, skip_idx)
    nonblank_numbers = line_numbers
    stripped = nonempty
    headers = [str(n) for n in table.column_names]
    table = table.rename_columns([f"c{j}" for j in range(len(headers))])
    table = pa.table(
        {
            n: table.column(n)
            if table.column(n).type == pa.string()
            else table.column(n).cast(pa.string())
            for n in table.column_names
        }
    )
    if table.num_rows != len(nonblank_numbers):  # quoted newlines: fall back to counting
        nonblank_numbers = np.arange(h + 2, h + 2 + table.num_rows)
    raw = RawTable(
        path.name,
        sheet,
        h + 1,
        headers,
        [col_letter(j) for j in range(len(headers))],
        table,
        nonblank_numbers.astype(np.int64),
        int(len(stripped) - stripped.sum()),
        issues=issues,
    )
    if cr_lines:
        _drop_lines(raw, _line_texts(data, cr_lines), "carriage return", CR_HINT)
    if quote_lines:
        _drop_lines(raw, quote_texts, "unclosed quote", QUOTE_HINT)
    raw.rejected_rows = sum(1 for i in issues if i.rule in REJECTING_RULES)
    _drop_blank_and_footnotes(raw)
    return raw


def _bare_carriage_returns(data: bytes, issues: list[Issue], sheet: str) -> tuple[bytes, list[int]]:
    """Carriage returns without a line feed: a file with no line feed at all uses them as
    line breaks (classic Mac); elsewhere each one is a space for the parser and its line is
    returned (1-based) to be reported and left out, never split into two rows."""
    import numpy as np

    buf = np.frombuffer(data, dtype=np.uint8)
    cr = np.flatnonzero(buf == 13)
    if not cr.size:
        return data, []
    after = np.append(buf, 0)[cr + 1]
    bare = cr[after != 10]
    if not bare.size:
        return data, []
    newlines = np.flatnonzero(buf == 10)
    if not newlines.size:
        issues.append(
            Issue("info", sheet, "", "", "CR", "line endings", "lines end in CR only; read as such")
        )
        return data.replace(b"\r", b"\n"), []
    fixed = buf.copy()
    fixed[bare] = 32
    lines = sorted({int(i) + 1 for i in np.searchsorted(newlines, bare)})
    return fixed.tobytes(), lines


CR_HINT = (
    "a carriage return without a line feed sits inside this row (a cell pasted with a "
    "line break?); remove it, or quote the cell"
)
QUOTE_HINT = 'a cell of this row opens a quote (") and never closes it; close or remove it'
REJECTING_RULES = ("row shape", "carriage return", "unclosed quote")


def _unclosed_quotes(data: bytes, buf: Any, newlines: Any, delim: str, first: int) -> list[int]:
    """Lines (1-based, from ``first``) where a quoted cell is never closed: lines with an
    odd number of quote marks, confirmed by the csv module's strict reading of the line."""
    import numpy as np

    quotes = np.flatnonzero(buf == 34)
    if not quotes.size:
        return []
    per_line = np.bincount(np.searchsorted(newlines, quotes))
    odd = np.flatnonzero(per_line % 2 == 1) + 1
    starts = np.concatenate([[0], newlines + 1])
    out = []
    for line in odd[odd >= first][:10_000]:
        end = int(newlines[line - 1]) if line - 1 < len(newlines) else len(data)
        text = data[int(starts[line - 1]) : end].decode("utf-8", errors="replace").rstrip("\r")
        try:
            list(csv.reader([text], delimiter=delim, strict=True))
        except csv.Error as exc:
            if "end of data" in str(exc):
                out.append(int(line))
    return out


def _line_texts(data: bytes, lines: list[int]) -> dict[int, str]:
    text = data.split(b"\n")
    return {n: text[n - 1][:80].decode("utf-8", errors="replace") for n in lines if n <= len(text)}


def _drop_lines(raw: RawTable, texts: dict[int, str], rule: str, hint: str) -> None:
    """Report and leave out the data rows on the lines of ``texts`` (one error each)."""
    import numpy as np
    import pyarrow as pa

    for line, text in sorted(texts.items()):
        raw.issues.append(Issue("error", raw.sheet, f"A{line}", "", text, rule, hint))
    keep = ~np.isin(raw.row_numbers, np.asarray(sorted(texts), dtype=np.int64))
    if not keep.all():
        raw.table = raw.table.filter(pa.array(keep))
        raw.row_numbers = raw.row_numbers[keep]


def _find_line(body_line: Any, nonempty: Any, text: str, taken: list[int]) -> int | None:
    """Index (among non-empty lines) of the first not-yet-taken line equal to ``text``."""
    k = -1
    for j, ok in enumerate(nonempty):
        if ok:
            k += 1
            if k not in taken and body_line(j).rstrip("\r") == text.rstrip("\r"):
                return k
    return None


def _drop_blank_and_footnotes(raw: RawTable) -> None:
    """Rows whose cells are all empty are blank; trailing one-cell text rows are footnotes."""
    import pyarrow as pa
    import pyarrow.compute as pc

    if raw.n_rows == 0 or raw.table.num_columns == 0:
        return
    filled = None
    for name in raw.table.column_names:
        col = raw.table.column(name)
        f = pc.and_(pc.is_valid(col), pc.not_equal(pc.utf8_trim_whitespace(col), ""))
        f = pc.fill_null(f, False)
        f = pc.cast(f, pa.int32())
        filled = f if filled is None else pc.add(filled, f)
    counts = pc.cast(filled, pa.int32()).to_numpy(zero_copy_only=False)
    keep = counts > 0
    end = len(counts)
    while end and counts[end - 1] <= 1:
        if counts[end - 1] == 1:
            row = raw.table.slice(end - 1, 1).to_pylist()[0]
            text = next(v for v in row.values() if v and v.strip())
            if _numberish(text) and not FOOTNOTE_START.match(text):
                break
            raw.issues.append(
                Issue(
                    "info",
                    raw.sheet,
                    f"A{raw.row_numbers[end - 1]}",
                    "",
                    text,
                    "footnote row",
                    "row below the data skipped",
                )
            )
            keep[end - 1] = False
        end -= 1
    raw.blank_rows += int((counts == 0).sum())
    if not keep.all():
        raw.table = raw.table.filter(pa.array(keep))
        raw.row_numbers = raw.row_numbers[keep]
