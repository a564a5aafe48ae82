"""Rendering: tables, messages, progress and errors. Data go to stdout, messages to stderr.

In a terminal, ``table`` output is a rich table; piped, it is tab-separated, one row per
line, no borders or wrapping. ``json`` is an array of objects, ``csv`` has a header row.
"""

from __future__ import annotations

import contextlib
import csv
import io
import json
import math
import sys
from collections.abc import Iterator, Sequence
from pathlib import Path
from typing import Any

FORMATS = ("table", "csv", "json", "parquet")


def _console(stderr: bool = True) -> Any:
    from rich.console import Console

    return Console(stderr=stderr, highlight=False, soft_wrap=True)


def message(text: str) -> None:
    """A message for the user, on stderr."""
    _console().print(text, markup=False)


def note(text: str) -> None:
    _console().print(f"[dim]{_escape(text)}[/dim]")


def warning(text: str) -> None:
    """A finding the user must not miss, on stderr: ``warning:`` in bold yellow."""
    _console().print(f"[bold yellow]warning:[/bold yellow] {_escape(text)}")


def _escape(text: str) -> str:
    from rich.markup import escape

    return escape(text)


def error(text: str, hint: str = "") -> None:
    con = _console()
    con.print(f"[bold red]error:[/bold red] {_escape(text)}")
    if hint:
        con.print(f"[yellow]hint:[/yellow] {_escape(hint)}")


def _cell(v: Any, short: bool = False) -> str:
    """A value as text; ``short`` (the table format, for reading) rounds floats to 6
    significant digits — csv, json and parquet keep every digit."""
    if v is None:
        return ""
    if isinstance(v, float):
        if math.isnan(v):
            return ""
        return f"{v:.6g}" if short else repr(v)
    return str(v)


def table(
    columns: Sequence[str],
    rows: Sequence[Sequence[Any]],
    fmt: str = "table",
    out: Path | None = None,
    title: str | None = None,
    stderr: bool = False,
) -> None:
    """Write rows in the chosen format to ``out`` or stdout (stderr for reports)."""
    if fmt == "parquet":
        if out is None:
            raise ValueError("parquet needs --out")
        import pyarrow as pa
        import pyarrow.parquet as pq

        pq.write_table(
            pa.Table.from_pylist([dict(zip(columns, r, strict=True)) for r in rows]), out
        )
        return
    if fmt == "json":
        text = (
            json.dumps(
                [dict(zip(columns, [_json(v) for v in r], strict=True)) for r in rows],
                ensure_ascii=False,
                indent=1,
            )
            + "\n"
        )
    elif fmt == "csv":
        buf = io.StringIO()
        w = csv.writer(buf, lineterminator="\n")
        w.writerow(columns)
        from strata13.compile.api import neutralise

        w.writerows([[neutralise(v) if isinstance(v, str) else _cell(v) for v in r] for r in rows])
        text = buf.getvalue()
    else:
        stream = sys.stderr if stderr else sys.stdout
        if out is None and stream.isatty():
            from rich.table import Table

            t = Table(title=title, show_lines=False, header_style="bold")
            for c in columns:
                t.add_column(c, overflow="fold")
            for r in rows:
                t.add_row(*[_escape(_cell(v, short=True)) for v in r])
            _console(stderr=stderr).print(t)
            return
        text = "".join(
            "\t".join(_cell(v, True).replace("\t", " ").replace("\n", " ") for v in r) + "\n"
            for r in [list(columns), *rows]
        )
    if out is not None:
        out.write_text(text, encoding="utf-8")
    elif stderr:
        sys.stderr.write(text)
    else:
        sys.stdout.write(text)


def _json(v: Any) -> Any:
    if isinstance(v, float) and math.isnan(v):
        return None
    if hasattr(v, "isoformat"):
        return v.isoformat()
    return v


def arrow_out(tbl: Any, fmt: str, out: Path | None) -> None:
    """Write an Arrow table of records in the chosen format."""
    if fmt == "parquet":
        import pyarrow.parquet as pq

        assert out is not None
        pq.write_table(tbl, out)
        return
    table(tbl.column_names, [tuple(r.values()) for r in tbl.to_pylist()], fmt, out)


@contextlib.contextmanager
def progress(enabled: bool = True) -> Iterator[Any]:
    """A status line on a terminal (stderr); nothing when piped."""
    if not (enabled and sys.stderr.isatty()):
        yield lambda _msg: None
        return
    con = _console()
    with con.status("working") as status:
        yield lambda msg: status.update(msg)


REPORT_LINES = 200


def report(rep: Any, limit_info: bool = False) -> None:
    """The validation report on stderr: errors and warnings (the first 200; --report PATH
    writes them all), info lines counted by the caller."""
    items = [i for i in rep.sorted() if limit_info is False or i.severity != "info"]
    cols = ["severity", "sheet", "cell", "column", "value", "rule", "hint"]
    table(
        cols,
        [[getattr(i, c) for c in cols] for i in items[:REPORT_LINES]],
        "table",
        None,
        title="validation report",
        stderr=True,
    )
    if len(items) > REPORT_LINES:
        message(f"… and {len(items) - REPORT_LINES} more lines; --report PATH writes them all.")


def plural(n: int, word: str) -> str:
    return f"{n} {word}" + ("" if n == 1 else "s")
