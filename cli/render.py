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
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from strata13.numbers import readable, unit_of

FORMATS = ("table", "csv", "json", "parquet")


def _console(stderr: bool = True) -> Any:
    """A console on stderr (messages) or stdout; prose wraps at spaces in a terminal (at its
    width), never when piped (one message, one line)."""
    from rich.console import Console

    stream = sys.stderr if stderr else sys.stdout
    return Console(stderr=stderr, highlight=False, soft_wrap=not stream.isatty())


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


def _cell(v: Any, short: bool = False, column: str = "") -> str:
    """A value as text; ``short`` (the table format, for reading) rounds floats to their
    meaningful digits by the column's unit (``strata13.numbers``) and writes booleans as
    yes/no — csv, json and parquet keep every digit."""
    if short:
        return readable(v, unit=unit_of(column))
    if v is None or (isinstance(v, float) and math.isnan(v)):
        return ""
    if isinstance(v, float):
        return repr(v)
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
        cells = [
            [
                _cell(v, True, c).replace("\t", " ").replace("\n", " ")
                for v, c in zip(r, columns, strict=True)
            ]
            for r in rows
        ]
        if out is None and stream.isatty():
            from strata13.cli import layout

            con = _console(stderr=stderr)
            if title:
                con.print(title, style="bold", markup=False)
            lines, left_out = layout.lay_out(list(columns), cells, layout.terminal_width())
            for line, bold in lines:  # laid out already: never re-wrapped
                con.print(line, style="bold" if bold else None, markup=False, soft_wrap=True)
            if left_out:
                con.print(layout.left_out_note(left_out, len(columns)), style="dim", markup=False)
            return
        text = "".join("\t".join(r) + "\n" for r in [list(columns), *cells])
    if out is not None:
        out.write_text(text, encoding="utf-8")
    elif stderr:
        sys.stderr.write(text)
    else:
        sys.stdout.write(text)


@dataclass(frozen=True)
class Part:
    """One of several tables a command answers with: its name (a key in json, a file-name
    suffix), columns, rows and the title a terminal shows."""

    name: str
    columns: list[str]
    rows: list[list[Any]]
    title: str


def sibling(out: Path, part: str) -> Path:
    """Where a further table goes beside ``--out FILE``: ``FILE-<part>.<suffix>``."""
    return out.with_name(f"{out.stem}-{part}{out.suffix}")


def tables(parts: Sequence[Part], fmt: str, out: Path | None, elsewhere: str = "") -> None:
    """Several tables in the format asked for, all of them to stdout or files, none to
    stderr: in a terminal one after another; piped as tab-separated blocks with a blank
    line between; json as one object keyed by part; with ``--out FILE`` the first table
    to FILE and each further one to ``FILE-<part>``. Csv to stdout holds the first table
    only (one header row per stream), and stderr says where the others are: ``elsewhere``
    (e.g. an output folder), json, or ``--out``."""
    first, rest = parts[0], list(parts[1:])
    if fmt == "json" and rest:
        doc = {
            p.name: [dict(zip(p.columns, [_json(v) for v in r], strict=True)) for r in p.rows]
            for p in parts
        }
        text = json.dumps(doc, ensure_ascii=False, indent=1) + "\n"
        if out is not None:
            out.write_text(text, encoding="utf-8")
        else:
            sys.stdout.write(text)
        return
    if out is not None:
        from strata13.compile import api

        for p in rest:  # a folder or a device where a further table would go: refused first
            api.output_file(sibling(out, p.name), option="--out")
        table(first.columns, first.rows, fmt, out, title=first.title)
        for p in rest:
            table(p.columns, p.rows, fmt, sibling(out, p.name), title=p.title)
            message(f"{p.title}: {sibling(out, p.name)}")
        return
    if fmt == "table":
        for k, p in enumerate(parts):
            if k and not sys.stdout.isatty():
                sys.stdout.write("\n")
            table(p.columns, p.rows, "table", None, title=p.title)
        return
    table(first.columns, first.rows, fmt, None, title=first.title)
    for p in rest:
        where = elsewhere or f"--out FILE writes it to FILE-{p.name}"
        note(
            f"{p.title} ({plural(len(p.rows), 'row')}) is not in this {fmt}: {where}; "
            "--format json holds every table"
        )


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
