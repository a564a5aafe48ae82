"""The command line: exit codes, stdout/stderr split, light --help, every command's
refusals (subprocess, as a user runs it)."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest

from tests.conftest import tree_bytes

EXE = [sys.executable, "-m", "strata13"]


def run(*args: str, cwd: Path | None = None) -> subprocess.CompletedProcess[str]:
    return subprocess.run([*EXE, *args], capture_output=True, text=True, cwd=cwd, timeout=300)


def test_help_loads_no_heavy_library() -> None:
    code = (
        "import sys; sys.argv=['strata13','--help']\n"
        "from strata13.cli.app import main\n"
        "try:\n    main()\nexcept SystemExit:\n    pass\n"
        "heavy = [m for m in ('pandas','pandera','duckdb','pyarrow','matplotlib') "
        "if m in sys.modules]\nprint('HEAVY', heavy, file=sys.stderr)"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True)
    assert "HEAVY []" in out.stderr


@pytest.mark.parametrize(
    "args,code",
    [
        (["--version"], 0),
        (["query", "--no-such-option"], 2),
        (["query", "--format", "xml"], 2),
        (["ingest", "missing.csv", "--map", "missing.toml"], 2),
        (["sql", "DROP TABLE records"], 1),
        (["query", "--interval", "abc"], 2),
        (["query", "--region", "nowhere"], 2),
        (["export", "--out", "x", "--as-of", "999"], 1),
    ],
)
def test_exit_codes(demo_store: Path, args: list[str], code: int) -> None:
    res = run(*args, *([] if args == ["--version"] else ["--store", str(demo_store)]))
    assert res.returncode == code, res.stderr
    if code:
        assert "error:" in res.stderr and "Traceback" not in res.stderr


def test_not_a_store_is_refused_and_nothing_created(tmp_path: Path) -> None:
    target = tmp_path / "empty"
    target.mkdir()
    res = run("query", "--store", str(target))
    assert res.returncode == 1
    assert list(target.iterdir()) == []
    res = run("sources", "--store", str(tmp_path / "nope"))
    assert res.returncode == 1 and not (tmp_path / "nope").exists()


def test_query_piped_is_tab_separated_and_json_is_array(demo_store: Path) -> None:
    res = run(
        "query",
        "--interval",
        "183.5-182.5",
        "--region",
        "northern shelf",
        "--store",
        str(demo_store),
    )
    assert res.returncode == 0
    lines = res.stdout.splitlines()
    assert lines[0].split("\t")[0] == "record_id" and all("\t" in ln for ln in lines)
    res = run(
        "query",
        "--format",
        "json",
        "--paleolat" if False else "--screened",
        "all",
        "--store",
        str(demo_store),
    )
    rows = json.loads(res.stdout)
    assert isinstance(rows, list) and {"d13c_carb", "age_ma", "screen"} <= set(rows[0])


def test_empty_result_exits_zero_and_says_so(demo_store: Path) -> None:
    res = run("query", "--interval", "10-20", "--store", str(demo_store))
    assert res.returncode == 0 and "no records" in res.stderr


def test_broken_demo_sheet_report_and_unchanged_store(
    demo_store: Path, demo_sheets: Path, tmp_path: Path
) -> None:
    before = tree_bytes(demo_store)
    rep = tmp_path / "report.json"
    res = run(
        "ingest",
        str(demo_sheets / "harnholt_2016_broken.xlsx"),
        "--map",
        str(demo_sheets / "harnholt_2016_broken.toml"),
        "--report",
        str(rep),
        "--store",
        str(demo_store),
    )
    assert res.returncode == 1
    assert tree_bytes(demo_store) == before
    issues = json.loads(rep.read_text())["issues"]
    rules = {(i["cell"], i["rule"]) for i in issues if i["severity"] == "error"}
    for expected in [
        ("C3", "lithology vocabulary"),
        ("E4", "not a number"),
        ("A6", "duplicate record"),
        ("A7", "sample missing"),
        ("D9", "component vocabulary"),
        ("F10", "date in numeric column"),
        ("G11", "ambiguous comma"),
        ("H12", "superposition"),
        ("I13", "plausible latitude range"),
        ("E14", "formula without cached value"),
        ("E2:E13", "scale not stated"),
        ("E8", "plausible carbonate δ13C range"),
    ]:
        assert expected in rules


@pytest.mark.slow
def test_demo_runs_and_exports(tmp_path: Path) -> None:
    res = run("demo", "--out", str(tmp_path / "d"))
    assert res.returncode == 0, res.stderr
    manifest = json.loads((tmp_path / "d" / "export" / "manifest.json").read_text())
    assert manifest["counts"]["records"] > 100 and manifest["counts"]["sections"] >= 6
    # the package: dictionary, README with the invented-data warning, LOESS cited with the curve
    listed = {f["path"] for f in manifest["files"]}
    assert {"columns.csv", "README.txt", "chains.parquet", "ties.csv"} <= listed
    readme = (tmp_path / "d" / "export" / "README.txt").read_text(encoding="utf-8")
    assert "INVENTED DATA" in readme and "strata13 demo" in readme
    bib = (tmp_path / "d" / "export" / "bibliography.bib").read_text(encoding="utf-8")
    assert "@misc{method-loess," in bib and "@misc{rotation-orvanne-demo-2026," in bib


COMMANDS = [
    "demo",
    "init",
    "ingest",
    "sources",
    "history",
    "query",
    "sql",
    "export",
    "explain",
    "scales",
    "reharmonise",
]


@pytest.mark.parametrize("command", COMMANDS)
def test_every_command_has_help_and_refuses_bad_options_with_2(command: str) -> None:
    assert run(command, "--help").returncode == 0
    res = run(command, "--definitely-not-an-option")
    assert res.returncode == 2 and "Traceback" not in res.stderr


@pytest.mark.parametrize(
    "command", ["sources", "history", "query", "export --out x", "sql 'SELECT 1'"]
)
def test_every_reader_refuses_a_missing_store_with_1(tmp_path: Path, command: str) -> None:
    res = subprocess.run(
        " ".join([*EXE, command, "--store", str(tmp_path / "none")]),
        shell=True,
        capture_output=True,
        text=True,
        cwd=tmp_path,
    )
    assert res.returncode == 1 and "not" in res.stderr
    assert not (tmp_path / "none").exists()


@pytest.mark.slow
def test_ctrl_c_during_a_long_sql_query_exits_130(demo_store: Path) -> None:
    import signal
    import time

    proc = subprocess.Popen(
        [
            *EXE,
            "sql",
            "SELECT sum(a.range * b.range) FROM range(100000) a, range(100000) b",
            "--store",
            str(demo_store),
        ],
        stderr=subprocess.PIPE,
        text=True,
    )
    time.sleep(2.0)
    proc.send_signal(signal.SIGINT)
    _, err = proc.communicate(timeout=60)
    assert proc.returncode == 130 and "interrupted" in err and "Traceback" not in err


@pytest.mark.parametrize("args", [["--timeout", "0"], ["--timeout", "1e9"], ["--max-rows", "0"]])
def test_sql_limits_are_bounded(demo_store: Path, args: list[str]) -> None:
    res = run("sql", "SELECT 1", *args, "--store", str(demo_store))
    assert res.returncode == 2


@pytest.mark.parametrize("target", ["report.csv", "o.toml", "o.csv", "st/catalog.sqlite"])
def test_report_never_overwrites_inputs_or_the_store(tmp_path: Path, target: str) -> None:
    from tests.test_store import write_source

    m = write_source(tmp_path, [("a", 1, "1.0")])
    from strata13.compile import api

    api.init_store(tmp_path / "st")
    before = {
        p: p.read_bytes()
        for p in tmp_path.rglob("*")
        if p.is_file() and not p.name.endswith(("-wal", "-shm", ".lock"))
    }
    res = run(
        "ingest",
        str(tmp_path / "o.csv"),
        "--map",
        str(m),
        "--store",
        str(tmp_path / "st"),
        "--dry-run",
        "--report",
        str(tmp_path / target),
    )
    if target == "report.csv":
        assert res.returncode == 0 and (tmp_path / "report.csv").exists()
    else:
        assert res.returncode == 2, res.stderr
        after = {p: p.read_bytes() for p in before}
        assert after == before


def test_demo_refuses_to_replace_a_store_it_did_not_make(tmp_path: Path) -> None:
    from strata13.compile import api

    api.init_store(tmp_path / "compilation")
    res = run("demo", "--out", str(tmp_path))
    assert res.returncode == 1 and "not made by the demo" in res.stderr
    assert api.open_store(tmp_path / "compilation").latest_version() == 1


def test_unknown_source_is_refused_with_a_hint(demo_store: Path) -> None:
    res = run("query", "--source", "quillar-2012", "--store", str(demo_store))
    assert res.returncode == 2 and "quillar-2011" in res.stderr


def test_query_csv_neutralises_formula_text(tmp_path: Path) -> None:
    from strata13.compile import api

    from tests.test_store import write_source

    (tmp_path / "o.csv").write_text("Sample,Height,d13C\n=HYPERLINK(1),1,-3.2\n", encoding="utf-8")
    m = write_source(tmp_path, [])
    (tmp_path / "o.csv").write_text("Sample,Height,d13C\n=HYPERLINK(1),1,-3.2\n", encoding="utf-8")
    api.ingest(tmp_path / "st", None, m)
    res = run("query", "--format", "csv", "--store", str(tmp_path / "st"))
    assert "'=HYPERLINK(1)" in res.stdout and ",-3.2," in res.stdout


def test_explain_shows_each_step_with_numbers(demo_store: Path) -> None:
    from strata13.compile import api

    store = api.open_store(demo_store)
    row = (
        api.query(store, api.Filters(source=["quillar-2011"]))
        .dropna(subset=["d18o_carb_reported"])
        .iloc[0]
    )
    info = api.explain(store, row.record_id[:8])
    steps = info["isotopes"]["d18o_carb"]["steps"]
    assert [s["step"] for s in steps] == ["reported on VSMOW", "δ18O VSMOW → VPDB"]
    assert steps[0]["value_after"] == row.d18o_carb_reported
    # IUPAC relation (Brand et al. 2014): 0.97001 × reported − 29.99
    assert steps[1]["value_after"] == pytest.approx(0.97001 * row.d18o_carb_reported - 29.99)
    res = run("explain", row.record_id[:8], "--store", str(demo_store))
    assert (
        res.returncode == 0
        and "IUPAC-2014" in res.stdout
        and "normalisation not stated" in res.stdout
    )
    assert run("explain", "ffffffffff", "--store", str(demo_store)).returncode == 1
    assert run("explain", "ab", "--store", str(demo_store)).returncode == 2


def test_scales_lists_the_shipped_tables_without_a_store_and_marks_the_store(
    demo_store: Path, tmp_path: Path
) -> None:
    empty = tmp_path / "empty"
    empty.mkdir()
    res = subprocess.run(
        [*EXE, "scales", "--format", "json"], capture_output=True, text=True, cwd=empty
    )
    rows = json.loads(res.stdout)["materials"]  # one document: materials and relations
    assert res.returncode == 0 and not list(empty.iterdir())  # nothing created
    # IAEA-603 as assigned by its characterization paper: +2.460 ± 0.010, k = 1
    iaea603 = next(r for r in rows if r["material"] == "IAEA-603")
    assert (iaea603["d13c"], iaea603["d13c_unc"], iaea603["d13c_unc_kind"]) == (2.46, 0.01, "k=1")
    res = run("scales", "--store", str(demo_store))
    # both tables are data: on stdout (booleans read yes/no)
    assert res.returncode == 0 and "IUPAC-2014" in res.stdout and "\tyes" in res.stdout
