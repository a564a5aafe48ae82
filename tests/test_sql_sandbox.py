"""`strata13 sql` against an adversarial corpus: no statement of it may read anything but the
views (0 successes), each refusal is one sentence, and the store is never changed. The
second wall — a connection allowed exactly the pinned version's files — is tested on its own,
with the first wall bypassed, and its file list is checked against DuckLake's own
``ducklake_list_files``."""

from __future__ import annotations

import re
from collections.abc import Iterator
from pathlib import Path

import pytest
from strata13.compile import api
from strata13.compile.query import sqlguard
from strata13.compile.store.files import version_files
from strata13.compile.store.lake import DATA

from strata13.errors import QueryRefused
from tests.conftest import run_cli, tree_bytes


def _one_sentence(text: str) -> bool:
    """One sentence: a single line ending in a full stop, no traceback."""
    return "\n" not in text.strip() and text.strip().endswith(".") and "Traceback" not in text


def corpus(store: Path, old_file: str) -> list[str]:
    """Statements that try to read past the views; {F} is a superseded Parquet file."""
    F, S = old_file, str(store)
    G = f"{S}/data/main/analyses/*.parquet"
    cat = f"{S}/catalog.sqlite"
    return [
        # CTE shadowing at every nesting level
        f"SELECT count(*) FROM (WITH \"{F}\" AS (SELECT 1) SELECT 1) a, '{F}' b",
        f"SELECT count(*) FROM (WITH \"{G}\" AS (SELECT 1) SELECT 1) a, '{G}' b",
        f'SELECT count(*) FROM (WITH "{G}" AS (SELECT 1) SELECT 1) a, "{G}" b',
        f"WITH x AS (SELECT * FROM (WITH \"{F}\" AS (SELECT 1) SELECT 1)) SELECT * FROM '{F}'",
        f"SELECT (SELECT count(*) FROM '{F}') FROM (WITH \"{F}\" AS (SELECT 1) SELECT 1)",
        f"(WITH \"{F}\" AS (SELECT 1) SELECT 1) UNION ALL SELECT count(*) FROM '{F}'",
        f"SELECT count(*) FROM '{F}' UNION ALL (WITH \"{F}\" AS (SELECT 1) SELECT 1)",
        f'WITH a AS (SELECT * FROM "{F}"), "{F}" AS (SELECT 1) SELECT * FROM a',
        f'WITH "{F}" AS (SELECT * FROM "{F}") SELECT * FROM "{F}"',
        f'WITH RECURSIVE "{F}" AS (SELECT * FROM "{F}") SELECT * FROM "{F}"',
        f"WITH a AS (WITH \"{F}\" AS (SELECT 1) SELECT 1) SELECT * FROM a, '{F}'",
        f'SELECT * FROM (SELECT * FROM (SELECT * FROM (WITH "{F}" AS (SELECT 1) SELECT 1))) a, '
        f"(SELECT * FROM (SELECT * FROM '{F}')) b",
        f"SELECT * FROM records r, LATERAL (WITH \"{F}\" AS (SELECT 1) SELECT 1) l, '{F}' f",
        f'SELECT list_transform([1], x -> (WITH "{F}" AS (SELECT 1) SELECT 1)), '
        f"(SELECT count(*) FROM '{F}')",
        f"SELECT * FROM records WHERE record_id IN (WITH \"{F}\" AS (SELECT '1') SELECT 1) "
        f"OR EXISTS (SELECT * FROM '{F}')",
        "SELECT * FROM (WITH duckdb_databases AS (SELECT 1) SELECT 1) a, duckdb_databases b",
        "SELECT * FROM (WITH pg_settings AS (SELECT 1) SELECT 1) a, pg_settings b",
        "SELECT * FROM (WITH duckdb_settings AS (SELECT 1) SELECT 1) a, duckdb_settings b",
        "WITH records AS (SELECT 1) SELECT * FROM (WITH x AS (SELECT 1) SELECT 1), duckdb_tables",
        # file names, quoted and not, and globs
        f"SELECT * FROM '{F}'",
        f'SELECT * FROM "{F}"',
        f"FROM '{F}'",
        f"SELECT * FROM '{G}'",
        f"SELECT * FROM '{S}/data/**/*.parquet'",
        "SELECT * FROM 'data/main/analyses/*.parquet'",
        f"SELECT * FROM '{cat}'",
        "SELECT * FROM '/etc/passwd'",
        f"SUMMARIZE '{F}'",
        f"DESCRIBE '{F}'",
        f"SELECT * FROM (VALUES (1)) t(x), '{F}'",
        # table functions
        f"SELECT * FROM read_parquet('{F}')",
        "SELECT * FROM read_csv('/etc/passwd')",
        "SELECT * FROM read_text('/etc/hostname')",
        f"SELECT * FROM read_blob('{cat}')",
        f"SELECT * FROM glob('{S}/*')",
        f"SELECT * FROM parquet_metadata('{F}')",
        f"SELECT * FROM sqlite_scan('{cat}', 'ducklake_snapshot')",
        "SELECT * FROM query('SELECT * FROM lake.analyses')",
        "SELECT * FROM query_table('lake.analyses')",
        "SELECT * FROM ducklake_snapshots('lake')",
        "SELECT * FROM ducklake_list_files('lake', 'analyses')",
        "SELECT * FROM duckdb_settings()",
        "SELECT * FROM duckdb_databases()",
        "SELECT * FROM pragma_database_list",
        "SELECT * FROM pragma_database_list()",
        "SELECT * FROM json_execute_serialized_sql(json_serialize_sql('SELECT 1'))",
        f"SELECT * FROM unnest((SELECT list(x) FROM '{F}' x))",
        f"SELECT * FROM range((SELECT count(*) FROM '{F}'))",
        # system views and catalogs
        "SELECT * FROM duckdb_databases",
        "SELECT * FROM duckdb_tables",
        "SELECT * FROM pg_settings",
        "SELECT * FROM information_schema.tables",
        "SELECT * FROM pg_catalog.pg_class",
        "SELECT * FROM sqlite_master",
        "SELECT * FROM lake.analyses",
        "SELECT * FROM lake.main.analyses",
        'SELECT * FROM "lake"."analyses"',
        "SELECT * FROM __ducklake_metadata_lake.ducklake_data_file",
        "SELECT * FROM temp.main.records",
        "SELECT * FROM records AT (VERSION => 1)",
        "DESCRIBE lake.analyses",
        "SHOW ALL TABLES",
        "SHOW DATABASES",
        "SHOW TABLES",
        # functions that read settings, the catalog or the session
        "SELECT current_setting('allowed_directories')",
        "SELECT current_setting('allowed_paths')",
        "SELECT system.main.current_setting('temp_directory')",
        "SELECT pg_get_viewdef(1)",
        "SELECT format_type(1, 1)",
        "SELECT get_block_size('lake')",
        "SELECT getvariable('x')",
        "SELECT current_database(), current_schemas(true)",
        "SELECT json_serialize_plan('SELECT * FROM lake.analyses')",
        "SELECT count(*) FROM records WHERE current_setting('threads') IS NOT NULL",
        "SELECT pg_sleep(1)",
        # comments, hidden statements, multiple statements
        f"-- a comment\nSELECT * FROM '{F}'",
        f"SELECT * FROM/**/'{F}'",
        f"/* x */ EXPLAIN SELECT * FROM '{F}'",
        f"EXPLAIN ANALYZE SELECT * FROM '{F}'",
        "SELECT 1 /* ; */; DROP TABLE records",
        "SELECT 1; SELECT 2",
        "SELECT 1;; SELECT 2",
        "SELECT 1 -- ;\n; ATTACH ':memory:' AS m",
        "SELECT '\x00' FROM records",
        # anything that is not a SELECT
        "PRAGMA database_list",
        "PRAGMA version",
        "SET enable_external_access = true",
        "RESET lock_configuration",
        "SET allowed_directories = ['/']",
        f"ATTACH '{cat}' AS c",
        "DETACH lake",
        "USE lake",
        "COPY records TO 'out.csv'",
        "COPY (SELECT 1) TO '/tmp/strata13-copy.csv'",
        "EXPORT DATABASE '/tmp/strata13-export'",
        "INSTALL httpfs",
        "LOAD httpfs",
        "CREATE TABLE t AS SELECT 1",
        "CREATE TEMP VIEW v AS SELECT 1",
        "CREATE MACRO m() AS TABLE SELECT * FROM lake.analyses",
        "DELETE FROM records",
        "UPDATE records SET d13c_carb = 0",
        "INSERT INTO records SELECT * FROM records",
        "DROP VIEW records",
        "CALL ducklake_delete_orphaned_files('lake')",
        "CHECKPOINT",
        "VACUUM",
        "PIVOT records ON component USING count(*)",
        "BEGIN TRANSACTION",
        # very long statements
        "SELECT " + " + ".join(["1"] * 40_000),
        "SELECT " + "(" * 5_000 + f"(SELECT count(*) FROM '{F}')" + ")" * 5_000,
        "SELECT " + "(SELECT " * 2_000 + f"count(*) FROM '{F}'" + ")" * 2_000,
        f"SELECT count(*) FROM records WHERE record_id IN ({', '.join(['1'] * 30_000)}) "
        f"OR EXISTS (FROM '{F}')",
    ]


SLOW = [
    "SELECT count(*) FROM range(1000000000000)",
    "SELECT sum(a.range * b.range) FROM range(1000000) a, range(1000000) b",
    "SELECT sleep_ms(60000)",
    "WITH RECURSIVE r(n) AS (SELECT 1 UNION ALL SELECT n + 1 FROM r) SELECT count(*) FROM r",
]


@pytest.fixture(scope="module")
def store_files(demo_store_session: Path) -> tuple[Path, list[str], str]:
    """The demo store, the files its latest version reads, and one superseded file."""
    store = api.open_store(demo_store_session)
    con, version = store.reader()
    try:
        live = version_files(con, store.path / DATA, version)
    finally:
        con.close()
    every = sorted(str(p) for p in (store.path / DATA).rglob("*.parquet"))
    old = [p for p in every if p not in set(live) and "/analyses/" in p]
    assert old, "the demo store has superseded record files"
    return store.path, live, old[0]


@pytest.fixture()
def sandbox(store_files: tuple[Path, list[str], str]) -> Iterator[sqlguard.Sandbox]:
    """One locked-down reader connection, built the way api.sql builds it."""
    store = api.open_store(store_files[0])
    con, version = store.reader()
    try:
        with sqlguard.Sandbox(con, version_files(con, store.path / DATA, version)) as box:
            yield box
    finally:
        con.close()


def test_the_adversarial_corpus_has_no_success(
    store_files: tuple[Path, list[str], str], sandbox: sqlguard.Sandbox
) -> None:
    path, _, old = store_files
    before = tree_bytes(path)
    statements = corpus(path, old)
    successes, wordy = [], []
    for statement in statements:
        try:
            sandbox.run(statement, timeout_s=5)
        except QueryRefused as exc:
            if not _one_sentence(exc.message):
                wordy.append((statement[:80], exc.message))
        else:
            successes.append(statement[:120])
    assert successes == [] and wordy == []
    assert len(statements) >= 100
    assert tree_bytes(path) == before


@pytest.mark.parametrize("statement", SLOW)
def test_slow_statements_are_stopped_at_the_time_limit(
    sandbox: sqlguard.Sandbox, statement: str
) -> None:
    with pytest.raises(QueryRefused, match=r"ran longer than 1 s and was stopped\.$"):
        sandbox.run(statement, timeout_s=1)


def test_refusals_through_the_command_line_exit_1_and_change_nothing(
    store_files: tuple[Path, list[str], str],
) -> None:
    path, _, old = store_files
    before = tree_bytes(path)
    for statement in corpus(path, old)[:3] + ["SELECT current_setting('allowed_paths')"]:
        res = run_cli("sql", statement, "--store", path)
        assert res.code == 1, res.err
        first = res.err.splitlines()[0]
        assert first.startswith("error: refused: ") and first.endswith("."), res.err
        assert "Traceback" not in res.err and res.out == ""
    assert tree_bytes(path) == before


def test_ordinary_statements_still_run(sandbox: sqlguard.Sandbox) -> None:
    """CTEs in their scope, recursion, DESCRIBE of a view, set operations, lateral joins."""
    total = sandbox.run("SELECT count(*) FROM records").rows[0][0]
    assert total > 0
    ok = [
        ("WITH c AS (SELECT count(*) n FROM records) SELECT n FROM c", [(total,)]),
        ("WITH c AS (SELECT 1 v) SELECT (SELECT v FROM c), * FROM (SELECT * FROM c)", [(1, 1)]),
        ("WITH a AS (SELECT 1 v), b AS (SELECT v + 1 v FROM a) SELECT * FROM b", [(2,)]),
        ("WITH C AS (SELECT 3 v) SELECT * FROM c", [(3,)]),
        (
            "WITH RECURSIVE r(n) AS (SELECT 1 UNION ALL SELECT n + 1 FROM r WHERE n < 4) "
            "SELECT sum(n) FROM r",
            [(10,)],
        ),
        ("SELECT count(*) FROM (FROM records) UNION ALL SELECT 1 ORDER BY 1", [(1,), (total,)]),
        ("SELECT count(*) FROM records r, LATERAL (SELECT r.d13c_carb) x", [(total,)]),
        ("SELECT count(*) FROM unnest([1, 2, 3])", [(3,)]),
    ]
    for statement, want in ok:
        assert sandbox.run(statement).rows == want, statement
    described = sandbox.run("DESCRIBE records").rows
    assert {"record_id", "d13c_carb"} <= {r[0] for r in described}


def test_the_second_wall_allows_only_the_pinned_versions_files(
    store_files: tuple[Path, list[str], str], sandbox: sqlguard.Sandbox
) -> None:
    """Statements sent straight to the locked connection (the allow-list bypassed)."""
    import duckdb

    path, live, old = store_files
    con = sandbox.con
    current = next(p for p in live if "/analyses/" in p)
    assert con.execute(f"SELECT count(*) FROM read_parquet('{current}')").fetchone()[0] > 0
    for statement in [
        f"SELECT count(*) FROM read_parquet('{old}')",
        f"SELECT count(*) FROM '{path}/data/main/analyses/*.parquet'",
        f"SELECT * FROM read_text('{path}/catalog.sqlite')",
        "SELECT * FROM read_text('/etc/hostname')",
        "SET enable_external_access = true",
        f"SET allowed_directories = ['{path}']",
    ]:
        with pytest.raises(duckdb.Error):
            con.execute(statement).fetchall()
    assert sandbox.run("SELECT count(*) FROM records").rows[0][0] > 0  # the views still read


def test_version_files_match_ducklakes_own_listing(demo_store_session: Path) -> None:
    """Outside reference: DuckLake's ducklake_list_files at each version of the store."""
    from strata13.compile.store.relations import HIDDEN, READ_VIEWS, tables_at

    store = api.open_store(demo_store_session)
    con, latest = store.reader()
    try:
        for version in (1, latest // 2, latest):
            ours = version_files(con, store.path / DATA, version)
            theirs: set[str] = set()
            for table in tables_at(con, version) & {*READ_VIEWS, *HIDDEN}:
                rows = con.execute(
                    "SELECT data_file, delete_file FROM ducklake_list_files('lake', ?, "
                    "snapshot_version => ?)",
                    [table, version],
                ).fetchall()
                theirs |= {f for row in rows for f in row if f}
            assert set(ours) == theirs, version
    finally:
        con.close()


def test_answers_are_capped_in_bytes_as_well_as_rows(sandbox: sqlguard.Sandbox) -> None:
    """The issue's case: 100 000 rows of 20 000 characters (2 GB) stop at the byte cap."""
    res = sandbox.run("SELECT repeat('x', 20000) FROM range(100000)", max_mb=8)
    assert res.truncated and res.cut_by == "bytes"
    cap = 8 * 1024 * 1024
    assert 0 < len(res.rows) * 20_000 <= cap < (len(res.rows) + 1) * 20_000
    res = sandbox.run("SELECT range FROM range(10)", row_cap=4)
    assert res.rows == [(0,), (1,), (2,), (3,)] and res.cut_by == "rows"
    res = sandbox.run("SELECT range FROM range(4)", row_cap=4)
    assert len(res.rows) == 4 and not res.truncated


def test_cli_says_when_the_byte_cap_cut_the_answer(demo_store: Path) -> None:
    res = run_cli(
        "sql", "SELECT repeat('x', 1000) FROM range(5000)", "--max-mb", "1", "--store", demo_store
    )
    assert res.code == 0
    shown = len(res.out.splitlines()) - 1  # the header line
    assert re.search(rf"only the first {shown} rows are shown: .* 1 MiB \(--max-mb\)", res.err)
    bad = run_cli("sql", "SELECT 1", "--max-mb", "0", "--store", demo_store)
    assert bad.code == 2 and "--max-mb 0 is outside" in bad.err
