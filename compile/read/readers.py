"""Readers: a spreadsheet or CSV file -> a table of text cells that keep their coordinates.

Every cell comes out as text (``None`` when empty) so that cleaning can report exactly
what the sheet said. Each data row keeps its row number in the spreadsheet's own
numbering and each column its letter, so a report can say ``D17``.

xlsx/ods go through python-calamine with ``skip_empty_area=False`` (an empty column A does
not shift the letters); merged ranges are filled from their top-left cell and reported;
xlsx formulas without a cached value are found with openpyxl (calamine shows them as
empty) and reported. CSV/TSV: UTF-8 (with or without BOM), then cp1252, then Latin-1;
the delimiter is detected; pyarrow parses the body so a million rows stay columnar.
"""

from __future__ import annotations

import csv
import datetime as dt
import io
import re
import unicodedata
import zipfile
from collections.abc import Iterable
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

from strata13.compile.check.report import Issue

from strata13.errors import ConfigError, InputFileError

if TYPE_CHECKING:
    import numpy as np
    import pyarrow as pa

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
    if not path.exists():
        raise InputFileError(
            f"{path} does not exist.",
            "Check the path (relative paths in a mapping file start at the mapping file's folder).",
        )
    if path.is_dir():
        raise InputFileError(f"{path} is a folder, not a spreadsheet.", "Name a file.")
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
    import python_calamine as pcal

    try:
        wb = pcal.CalamineWorkbook.from_path(str(path))
    except Exception as exc:  # calamine raises several types for a broken file
        raise InputFileError(
            f"{path.name} could not be opened as a spreadsheet ({exc}).",
            "Check that the file is a real .xlsx/.ods and not password protected or truncated.",
        ) from None
    names = wb.sheet_names
    if sheet is None:
        name = names[0]
    elif isinstance(sheet, int):
        if not 1 <= sheet <= len(names):
            raise ConfigError(
                f"{path.name} has {len(names)} sheet{'s' * (len(names) != 1)}; "
                f"sheet {sheet} does not exist.",
                f"Sheets: {', '.join(names)}.",
            )
        name = names[sheet - 1]
    else:
        loose = [n for n in names if norm_header(n) == norm_header(sheet)]
        if sheet in names:  # the exact name wins
            name = sheet
        elif len(loose) == 1:
            name = loose[0]
        else:
            raise ConfigError(
                f"{path.name} has no sheet named {sheet!r}"
                + (" (several match loosely)." if loose else "."),
                "Sheets: " + ", ".join(repr(n) for n in names) + ".",
            )
    ws = wb.get_sheet_by_name(name)
    grid = [list(r) for r in ws.to_python(skip_empty_area=False)]
    issues: list[Issue] = []
    width = max((len(r) for r in grid), default=0)
    for row in grid:
        row.extend([""] * (width - len(row)))
    # merged ranges: fill from the top-left cell and say so
    for (r0, c0), (r1, c1) in getattr(ws, "merged_cell_ranges", None) or []:
        if r0 >= len(grid):
            continue
        top = grid[r0][c0]
        for rr in range(r0, min(r1, len(grid) - 1) + 1):
            for cc in range(c0, min(c1, width - 1) + 1):
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
    if path.suffix.lower() in {".xlsx", ".xlsm"}:
        for r, c, formula in _formulas_without_value(path, name, grid):
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
    return _table_from_grid(path.name, name, text_grid, header_row, expected, issues)


def _formulas_without_value(
    path: Path, sheet: str, grid: list[list[Any]]
) -> list[tuple[int, int, str]]:
    """Cells holding a formula that calamine read as empty (no cached value)."""
    try:
        with zipfile.ZipFile(path) as zf:
            has_formula = any(
                b"<f" in zf.read(n)
                for n in zf.namelist()
                if n.startswith("xl/worksheets/") and n.endswith(".xml")
            )
    except (zipfile.BadZipFile, KeyError, OSError):
        return []
    if not has_formula:
        return []
    import openpyxl

    out = []
    wb = openpyxl.load_workbook(path, read_only=True, data_only=False)
    try:
        ws = wb[sheet]
        for r, row in enumerate(ws.iter_rows(values_only=True)):
            for c, v in enumerate(row):
                if (
                    isinstance(v, str)
                    and v.startswith("=")
                    and r < len(grid)
                    and c < len(grid[r])
                    and grid[r][c] in ("", None)
                ):
                    out.append((r, c, v))
    finally:
        wb.close()
    return out


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
) -> RawTable:
    import numpy as np
    import pyarrow as pa

    if not grid:
        raise InputFileError(f"{file} ({sheet}) is empty.", "Check the sheet name and file.")
    if header_row is not None:
        if not 1 <= header_row <= len(grid):
            raise ConfigError(
                f"header_row = {header_row} is outside {file} ({sheet}), which has "
                f"{len(grid)} rows.",
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
                    f"{_first_col(grid[i])}{i + row_offset}",
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
            ref = f"{_first_col(body[end - 1])}{numbers[end - 1]}"
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
    by_letter = {col_letter(j): headers_raw[j] for j in keep}
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
        [col_letter(j) for j in keep],
        table,
        np.asarray(kept_numbers, dtype=np.int64),
        blank,
        issues=issues,
    )


def _first_col(row: list[str | None]) -> str:
    """Letter of the first filled cell of a full-width grid row."""
    for j, v in enumerate(row):
        if v:
            return col_letter(j)
    return "A"


def _numberish(text: str) -> bool:
    return bool(re.match(r"^\s*[-+−–]?\d", text))


# ---------------------------------------------------------------- text files


def decode_bytes(data: bytes, encoding: str = "auto") -> tuple[str, str]:
    """Decode as UTF-8 (BOM or not), else cp1252, else Latin-1; return (text, encoding)."""
    if encoding != "auto":
        try:
            return data.decode(encoding), encoding
        except (UnicodeDecodeError, LookupError) as exc:
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

    data = path.read_bytes()
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
    raw.rejected_rows = sum(1 for i in issues if i.rule == "row shape")
    _drop_blank_and_footnotes(raw)
    return raw


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
