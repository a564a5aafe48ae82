"""`strata13 sql`: read-only SQL over the store's views, and nothing else.

Two independent walls:

1. **The statement.** DuckDB's own parser must say it is one SELECT (or EXPLAIN of one).
   Its JSON serialisation (``json_serialize_sql``) is walked level by level: a CTE name is
   visible only in the query that declares it, in the queries nested inside that one, and
   in the bodies of the CTEs declared after it (its own body only when it is recursive) —
   the rules DuckDB's binder follows, so a CTE declared in a sibling subquery cannot make
   a file name or a system view look like a CTE elsewhere. Every other table reference
   must be one of the views; table functions are a short list of generators; functions
   that read settings, the catalog or the session (``current_setting``, ``duckdb_*``,
   ``pg_*`` …) are refused; ``DESCRIBE``/``SUMMARIZE`` only of a query over the views.
2. **The connection.** External access off; the allowed paths are exactly the Parquet
   files of the pinned version (no folder), so even a statement that slipped past the
   first wall reads nothing the views do not read; a private temporary folder; a memory
   limit; configuration locked; a time limit; a cap on the rows *and the bytes* of the
   answer, which is streamed and cut when either cap is reached.
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
# functions that read settings, the catalog, the session or files, or run SQL from text
REFUSED_FUNCTION_PREFIXES = (
    "duckdb_",
    "pg_",
    "pragma_",
    "ducklake_",
    "sqlite_",
    "postgres_",
    "parquet_",
    "read_",
    "json_serialize",
    "json_execute",
    "json_deserialize",
    "iceberg_",
    "delta_",
)
REFUSED_FUNCTIONS = {
    "current_setting",
    "current_database",
    "current_catalog",
    "current_schema",
    "current_schemas",
    "current_query",
    "current_query_id",
    "current_connection_id",
    "current_transaction_id",
    "txid_current",
    "getvariable",
    "in_search_path",
    "get_block_size",
    "format_type",
    "write_log",
    "parse_duckdb_log_message",
    "which_secret",
    "glob",
    "query",
    "query_table",
}
QUERY_NODES = {"SELECT_NODE", "SET_OPERATION_NODE", "RECURSIVE_CTE_NODE"}
TABLE_REFS = {"BASE_TABLE", "SUBQUERY", "JOIN", "TABLE_FUNCTION", "EXPRESSION_LIST", "EMPTY"}
TABLE_REFS_CHECKED = {"PIVOT", "SHOW_REF"}
DEFAULT_TIMEOUT_S = 30.0
DEFAULT_ROW_CAP = 100_000
DEFAULT_MAX_MB = 64.0
MAX_TIMEOUT_S = 3600.0
MAX_ROW_CAP = 10_000_000
MAX_MB = 4096.0
MAX_STATEMENT_CHARS = 100_000
MEMORY_LIMIT = "2GB"  # of the sql connection; larger sorts spill to its private folder


@dataclass
class SqlResult:
    columns: list[str]
    rows: list[tuple[Any, ...]]
    truncated: bool  # cut at the row cap or the byte cap
    cut_by: str = ""  # "rows" or "bytes" when truncated


def _function_problem(node: dict[str, Any]) -> str | None:
    name = str(node.get("function_name", "")).lower()  # checked whatever schema names it
    if name in REFUSED_FUNCTIONS or name.startswith(REFUSED_FUNCTION_PREFIXES):
        return f"function {name}() is not allowed (it reads settings, the catalog or files)"
    return None


def _table_problem(node: dict[str, Any], scope: frozenset[str]) -> str | None:
    kind = node.get("type")
    if kind == "BASE_TABLE":
        name = str(node.get("table_name", ""))
        full = ".".join(
            str(x)
            for x in (node.get("catalog_name"), node.get("schema_name"), node.get("table_name"))
            if x
        )
        if node.get("catalog_name") or node.get("schema_name"):
            return f"table {full!r} is not one of the views"
        if node.get("at_clause"):
            return f"time travel (AT …) on {name!r}: the views already show one version"
        if name.lower() not in VIEWS and name.lower() not in scope:
            return f"table {full!r} is not one of the views"
    elif kind == "TABLE_FUNCTION":
        fn = (node.get("function") or {}).get("function_name", "")
        if str(fn).lower() not in SAFE_TABLE_FUNCTIONS:
            return f"table function {fn}() is not allowed"
    elif kind == "SHOW_REF":
        if node.get("show_type") not in ("DESCRIBE", "SUMMARY") or node.get("table_name"):
            return "SHOW lists the database's own objects; query the views instead"
    elif kind not in TABLE_REFS and kind not in TABLE_REFS_CHECKED:
        return f"a {str(kind).lower().replace('_', ' ')} reference is not allowed"
    return None


def _is_table_ref(node: dict[str, Any]) -> bool:
    """Table references carry an alias and a sample clause; expressions carry a class."""
    return (
        "class" not in node
        and "sample" in node
        and "alias" in node
        and isinstance(node.get("type"), str)
    )


def problems(tree: Any) -> list[str]:
    """Every reason to refuse a serialised statement, walking it with CTE scope per level.

    The walk keeps its own stack (no recursion limit for deeply nested statements).
    """
    found: list[str] = []
    stack: list[tuple[Any, frozenset[str]]] = [(tree, frozenset())]
    while stack:
        node, scope = stack.pop()
        if isinstance(node, list):
            stack.extend((v, scope) for v in node)
            continue
        if not isinstance(node, dict):
            continue
        kind = node.get("type")
        if isinstance(kind, str) and kind in QUERY_NODES and "cte_map" in node:
            declared: list[str] = []
            for entry in (node.get("cte_map") or {}).get("map") or []:
                name = str(entry.get("key", "")).lower()
                query = (entry.get("value") or {}).get("query")
                recursive = (
                    isinstance(query, dict)
                    and (query.get("node") or {}).get("type") == "RECURSIVE_CTE_NODE"
                )
                body = scope | set(declared) | ({name} if recursive else set())
                stack.append((query, frozenset(body)))
                declared.append(name)
            inner = scope | set(declared)
            stack.extend((v, inner) for k, v in node.items() if k != "cte_map")
            continue
        if "class" in node and "function_name" in node:
            problem = _function_problem(node)
            if problem:
                found.append(problem)
        elif _is_table_ref(node):
            problem = _table_problem(node, scope)
            if problem:
                found.append(problem)
        stack.extend((v, scope) for v in node.values())
    return found


def check(con: Any, sql: str) -> str:
    """The statement to run (EXPLAIN kept), or QueryRefused with the reason."""
    hint = f"`sql` reads only the views {', '.join(VIEWS)}."
    text = sql.strip().rstrip(";").strip()
    if not text:
        raise QueryRefused(
            "the SQL statement is empty.", 'Example: strata13 sql "SELECT count(*) FROM records"'
        )
    if len(text) > MAX_STATEMENT_CHARS:
        raise QueryRefused(
            f"the statement is {len(text):,} characters long; `sql` takes at most "
            f"{MAX_STATEMENT_CHARS:,}.",
            "Shorten it: use a WHERE clause or a CTE instead of long literal lists.",
        )
    if "\x00" in text:
        raise QueryRefused("the statement holds a NUL character.", "Remove it.")
    import duckdb

    try:
        statements = con.extract_statements(text)
    except duckdb.Error as exc:
        raise QueryRefused(
            f"the statement does not parse: {_first_sentence(exc)}", "Check the SQL syntax."
        ) from None
    if len(statements) != 1:
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
    try:
        row = con.execute("SELECT json_serialize_sql(?)", [body]).fetchone()
        tree = json.loads(row[0]) if row else {"error": True}
    except (duckdb.Error, RecursionError, ValueError):
        tree = {"error": True}
    if not isinstance(tree, dict) or tree.get("error"):
        raise QueryRefused(
            "only SELECT (or EXPLAIN SELECT) statements over the views are "
            "allowed, and this statement is not one.",
            f"Query the views: {', '.join(VIEWS)}.",
        )
    found = problems(tree.get("statements", []))
    if found:
        raise QueryRefused(f"refused: {found[0]}.", hint)
    return text


def lock_down(con: Any, allowed_paths: list[str], temp_dir: str | None = None) -> None:
    """External access off but for exactly ``allowed_paths`` (the pinned version's files),
    a private temporary folder and a memory limit, then configuration locked."""
    con.execute("SET allowed_directories = []")
    con.execute("SET allowed_paths = ?", [list(allowed_paths)])
    if temp_dir is not None:
        con.execute("SET temp_directory = ?", [temp_dir])
    con.execute(f"SET memory_limit = '{MEMORY_LIMIT}'")
    con.execute("SET enable_external_access = false")
    con.execute("SET lock_configuration = true")


def check_limits(timeout_s: float, row_cap: int, max_mb: float) -> None:
    """Refuse limits outside their documented ranges (an instruction error, exit 2)."""
    if not 0 < timeout_s <= MAX_TIMEOUT_S:
        raise OptionError(
            f"--timeout {timeout_s:g} is outside 0 … {MAX_TIMEOUT_S:g} s.", "Example: --timeout 60"
        )
    if not 1 <= row_cap <= MAX_ROW_CAP:
        raise OptionError(
            f"--max-rows {row_cap} is outside 1 … {MAX_ROW_CAP}.", "Example: --max-rows 1000"
        )
    if not 0 < max_mb <= MAX_MB:
        raise OptionError(
            f"--max-mb {max_mb:g} is outside 0 … {MAX_MB:g}.", "Example: --max-mb 256"
        )


class Sandbox:
    """A connection locked down once (``lock_down``) that runs checked statements; used
    as a context manager, which removes its private temporary folder at the end."""

    def __init__(self, con: Any, allowed_paths: list[str]) -> None:
        import tempfile

        self.con = con
        self.temp_dir = tempfile.mkdtemp(prefix="strata13-sql-")
        lock_down(con, allowed_paths, self.temp_dir)

    def __enter__(self) -> Sandbox:
        return self

    def __exit__(self, *exc: object) -> None:
        import shutil

        shutil.rmtree(self.temp_dir, ignore_errors=True)

    def run(
        self,
        sql: str,
        timeout_s: float = DEFAULT_TIMEOUT_S,
        row_cap: int = DEFAULT_ROW_CAP,
        max_mb: float = DEFAULT_MAX_MB,
    ) -> SqlResult:
        """Check ``sql`` and run it within the limits."""
        import duckdb

        check_limits(timeout_s, row_cap, max_mb)
        statement = check(self.con, sql)
        byte_cap = int(max_mb * 1024 * 1024)
        return _execute(self.con, statement, timeout_s, row_cap, byte_cap, duckdb)


def run_sql(
    con: Any,
    sql: str,
    timeout_s: float = DEFAULT_TIMEOUT_S,
    row_cap: int = DEFAULT_ROW_CAP,
    allowed_paths: list[str] | None = None,
    max_mb: float = DEFAULT_MAX_MB,
) -> SqlResult:
    """Lock ``con`` down to ``allowed_paths`` and run one checked statement on it."""
    check_limits(timeout_s, row_cap, max_mb)
    with Sandbox(con, allowed_paths or []) as box:
        return box.run(sql, timeout_s, row_cap, max_mb)


def _execute(
    con: Any, statement: str, timeout_s: float, row_cap: int, byte_cap: int, duckdb: Any
) -> SqlResult:
    """Run the checked statement, streaming its answer until a cap is reached."""
    fired = threading.Event()
    cancelled = threading.Event()

    def stop() -> None:
        fired.set()
        con.interrupt()

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
        rows, cut_by = _stream(cur, row_cap, byte_cap)
    except duckdb.InterruptException:
        if cancelled.is_set() or not fired.is_set():  # Ctrl-C, not our time limit
            raise KeyboardInterrupt from None
        raise _too_slow(timeout_s) from None
    except duckdb.Error as exc:
        if fired.is_set() and not cancelled.is_set():
            raise _too_slow(timeout_s) from None
        raise QueryRefused(
            f"the query failed: {_first_sentence(exc)}",
            f"Views: {', '.join(VIEWS)}; `strata13 sql 'DESCRIBE records'` lists a view's columns.",
        ) from None
    finally:
        timer.cancel()
        _swap_sigint(previous)
    if cancelled.is_set():
        raise KeyboardInterrupt
    return SqlResult(columns, rows, bool(cut_by), cut_by)


def _first_sentence(exc: BaseException) -> str:
    """DuckDB's message cut to its first sentence (its own hints may name SET or PRAGMA)."""
    line = (str(exc).splitlines() or [""])[0].strip()
    head = re.split(r"(?<=[.!?])\s+(?=[A-Z])", line, maxsplit=1)[0]
    return head if head.endswith((".", "!", "?")) else head + "."


def _too_slow(timeout_s: float) -> QueryRefused:
    return QueryRefused(
        f"the query ran longer than {timeout_s:g} s and was stopped.",
        "Add a WHERE clause or a LIMIT, or raise --timeout.",
    )


# DuckDB types whose Python values have a fixed size (counted as 8 bytes a value)
FIXED_TYPES = {
    "BOOLEAN", "TINYINT", "SMALLINT", "INTEGER", "BIGINT", "HUGEINT", "UTINYINT",
    "USMALLINT", "UINTEGER", "UBIGINT", "UHUGEINT", "FLOAT", "DOUBLE", "DATE", "TIME",
    "TIMESTAMP", "TIMESTAMP WITH TIME ZONE", "TIMESTAMP_S", "TIMESTAMP_MS", "TIMESTAMP_NS",
    "INTERVAL", "UUID", "TIME WITH TIME ZONE",
}  # fmt: skip


def _value_size(v: Any) -> int:
    if v is None:
        return 0
    if isinstance(v, (str, bytes)):
        return len(v)
    return len(str(v))


def _stream(cur: Any, row_cap: int, byte_cap: int) -> tuple[list[tuple[Any, ...]], str]:
    """The answer's rows up to ``row_cap`` rows and about ``byte_cap`` bytes of values, and
    what cut it ("", "rows" or "bytes"). The result is fetched a chunk at a time (DuckDB
    streams it), so an answer larger than the caps is never held whole."""
    fixed = [str(d[1]).upper() in FIXED_TYPES for d in cur.description]
    out: list[tuple[Any, ...]] = []
    size = 0
    while True:
        chunk = cur.fetchmany(min(2048, row_cap + 1 - len(out)))
        if not chunk:
            return out, ""
        sizes = [8 * len(chunk)] * len(fixed)
        for j, (col, is_fixed) in enumerate(zip(zip(*chunk, strict=True), fixed, strict=True)):
            if not is_fixed:
                sizes[j] = sum(map(_value_size, col))
        if size + sum(sizes) > byte_cap:
            for row in chunk:  # the rows that still fit, one by one
                row_size = sum(8 if f else _value_size(v) for v, f in zip(row, fixed, strict=True))
                if size + row_size > byte_cap or len(out) == row_cap:
                    break
                out.append(row)
                size += row_size
            return out, "bytes"
        out.extend(chunk)
        size += sum(sizes)
        if len(out) > row_cap:
            return out[:row_cap], "rows"


def _swap_sigint(handler: Any) -> Any:
    """Install ``handler`` for SIGINT (main thread only); return the previous one."""
    import signal

    if handler is None or threading.current_thread() is not threading.main_thread():
        return None
    return signal.signal(signal.SIGINT, handler)
