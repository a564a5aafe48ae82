"""`strata13 sql`: read-only SQL over the store's views, and nothing else.

A statement runs only if DuckDB's own parser says it is one SELECT (or EXPLAIN of one)
whose every table reference is one of the documented views (or a CTE of the statement)
and whose table functions are on a short list of harmless generators. On top of that the
connection has external access off, its configuration locked, a time limit and a row cap.
The store's catalog is never reachable: it is not a view, and file access is off.
"""

from __future__ import annotations

import json
import re
import threading
from dataclasses import dataclass
from typing import Any

from strata13.compile import interrupts

from strata13.errors import OptionError, QueryRefused

VIEWS = (
    "records",
    "sources",
    "localities",
    "sections",
    "samples",
    "quarantine",
    "regions",
    "chains",
    "settings",
    "commits",
    "runs",
    "age_ties",
    "age_draws",
    "screen_results",
    "run_qc",
    "corrections",
    "duplicates",
)
SAFE_TABLE_FUNCTIONS = {"range", "generate_series", "unnest"}
DEFAULT_TIMEOUT_S = 30.0
DEFAULT_ROW_CAP = 100_000
MAX_TIMEOUT_S = 3600.0
MAX_ROW_CAP = 10_000_000


@dataclass
class SqlResult:
    columns: list[str]
    rows: list[tuple[Any, ...]]
    truncated: bool


def _walk(node: Any, ctes: set[str], problems: list[str]) -> None:
    if isinstance(node, dict):
        cte_map = node.get("cte_map")
        if isinstance(cte_map, dict):
            for entry in cte_map.get("map", []):
                ctes.add(str(entry.get("key", "")).lower())
        t = node.get("type")
        if t == "BASE_TABLE":
            name = str(node.get("table_name", "")).lower()
            qualified = node.get("catalog_name") or node.get("schema_name")
            if qualified or (name not in VIEWS and name not in ctes):
                full = ".".join(
                    x
                    for x in (
                        node.get("catalog_name"),
                        node.get("schema_name"),
                        node.get("table_name"),
                    )
                    if x
                )
                problems.append(f"table {full!r} is not one of the views")
        elif t == "TABLE_FUNCTION":
            fn = node.get("function", {}).get("function_name", "")
            if str(fn).lower() not in SAFE_TABLE_FUNCTIONS:
                problems.append(f"table function {fn}() is not allowed")
        for v in node.values():
            _walk(v, ctes, problems)
    elif isinstance(node, list):
        for v in node:
            _walk(v, ctes, problems)


def check(con: Any, sql: str) -> str:
    """The statement to run (EXPLAIN kept), or QueryRefused with the reason."""
    text = sql.strip().rstrip(";").strip()
    if not text:
        raise QueryRefused(
            "the SQL statement is empty.", 'Example: strata13 sql "SELECT count(*) FROM records"'
        )
    import duckdb

    try:
        statements = con.extract_statements(text)
    except duckdb.Error as exc:
        raise QueryRefused(
            f"the statement does not parse: {str(exc).splitlines()[0]}", "Check the SQL syntax."
        ) from None
    if len(statements) > 1:
        raise QueryRefused("only one statement at a time is allowed.", "Remove the extra ';'.")
    kind = str(statements[0].type).rsplit(".", 1)[-1]
    if kind not in ("SELECT", "EXPLAIN"):
        raise QueryRefused(
            f"only SELECT (or EXPLAIN SELECT) statements are allowed, and this "
            f"one is of kind {kind}.",
            f"Query the views: {', '.join(VIEWS)}.",
        )
    explain = re.match(r"^\s*explain\s+(analyze\s+)?", text, re.IGNORECASE)
    body = text[explain.end() :] if explain else text
    tree = json.loads(con.execute("SELECT json_serialize_sql(?)", [body]).fetchone()[0])
    if tree.get("error"):
        raise QueryRefused(
            "only SELECT (or EXPLAIN SELECT) statements over the views are "
            "allowed, and this statement is not one.",
            f"Query the views: {', '.join(VIEWS)}.",
        )
    problems: list[str] = []
    _walk(tree.get("statements", []), set(), problems)
    if problems:
        raise QueryRefused(
            f"refused: {problems[0]}.", f"`sql` reads only the views {', '.join(VIEWS)}."
        )
    return text


def lock_down(con: Any, data_dir: str | None = None) -> None:
    """External access off (but for the store's own Parquet folder) and configuration
    locked, after the views exist."""
    if data_dir:
        con.execute("SET allowed_directories = ?", [[data_dir]])
    con.execute("SET enable_external_access = false")
    con.execute("SET lock_configuration = true")


def run_sql(
    con: Any,
    sql: str,
    timeout_s: float = DEFAULT_TIMEOUT_S,
    row_cap: int = DEFAULT_ROW_CAP,
    data_dir: str | None = None,
) -> SqlResult:
    import duckdb

    if not 0 < timeout_s <= MAX_TIMEOUT_S:
        raise OptionError(
            f"--timeout {timeout_s:g} is outside 0 … {MAX_TIMEOUT_S:g} s.", "Example: --timeout 60"
        )
    if not 1 <= row_cap <= MAX_ROW_CAP:
        raise OptionError(
            f"--max-rows {row_cap} is outside 1 … {MAX_ROW_CAP}.", "Example: --max-rows 1000"
        )
    statement = check(con, sql)
    lock_down(con, data_dir)
    fired = threading.Event()

    def stop() -> None:
        fired.set()
        con.interrupt()

    cancelled = threading.Event()

    def on_sigint(signum: int, frame: Any) -> None:
        cancelled.set()
        interrupts.pressed.set()
        con.interrupt()

    timer = threading.Timer(timeout_s, stop)
    previous = _swap_sigint(on_sigint)
    interrupts.check()
    timer.start()
    try:
        cur = con.execute(statement)
        columns = [d[0] for d in cur.description]
        rows = cur.fetchmany(row_cap + 1)
    except duckdb.InterruptException:
        if cancelled.is_set() or not fired.is_set():  # Ctrl-C, not our time limit
            raise KeyboardInterrupt from None
        raise QueryRefused(
            f"the query ran longer than {timeout_s:g} s and was stopped.",
            "Add a WHERE clause or a LIMIT, or raise --timeout.",
        ) from None
    except duckdb.Error as exc:
        raise QueryRefused(
            f"the query failed: {str(exc).splitlines()[0]}",
            f"Views: {', '.join(VIEWS)}; see DEVELOPERS.md for columns.",
        ) from None
    finally:
        timer.cancel()
        _swap_sigint(previous)
    if cancelled.is_set():
        raise KeyboardInterrupt
    return SqlResult(columns, rows[:row_cap], len(rows) > row_cap)


def _swap_sigint(handler: Any) -> Any:
    """Install ``handler`` for SIGINT (main thread only); return the previous one."""
    import signal

    if handler is None or threading.current_thread() is not threading.main_thread():
        return None
    return signal.signal(signal.SIGINT, handler)
