"""Age ties, age models in the store, redating and the chronology commands (`stages`,
`agemodel`, `redate`, `--interval` by name): integration tests on the demo store and on
small invented sections.

Chart values are those of the ICS chart v2024/12 and of the ICS 2012 chart (as shipped in
schemas/data/timescales): Toarcian 184.2–174.7 Ma (±0.3 at 95 % on its base) on v2024/12,
182.7–174.1 Ma on 2012; Pliensbachian base 192.9 Ma (v2024/12), 190.8 Ma (2012). Every
section, sample and tie below is invented.
"""

from __future__ import annotations

import csv
import io
import json
import math
import re
import signal
from pathlib import Path

import numpy as np
import pytest
from strata13.compile import api
from strata13.compile.demo import SHEETS, TIES

from strata13.errors import DomainError
from tests.conftest import tree_bytes

# Chart values (ICS chart v2024/12; ICS 2012 chart)
TOARCIAN_2024 = (184.2, 174.7)
TOARCIAN_2012 = (182.7, 174.1)
PLIENSBACHIAN_BASE_2024 = 192.9
PLIENSBACHIAN_BASE_2012 = 190.8
TOARCIAN_BASE_SIGMA_2024 = 0.3 / 1.96  # ±0.3 Myr at 95 % -> 1σ (÷ 1.96, common practice)


def on_2024(age_2012: float | np.ndarray) -> np.ndarray:
    """Closed form: an age read on the 2012 chart keeps its relative position between the
    boundaries both charts share (Aalenian, Toarcian and Pliensbachian bases here)."""
    return np.interp(
        age_2012,
        [TOARCIAN_2012[1], TOARCIAN_2012[0], PLIENSBACHIAN_BASE_2012],
        [TOARCIAN_2024[1], TOARCIAN_2024[0], PLIENSBACHIAN_BASE_2024],
    )


def on_2012(age_2024: float | np.ndarray) -> np.ndarray:
    """The inverse of on_2024 (same closed form, charts swapped)."""
    return np.interp(
        age_2024,
        [TOARCIAN_2024[1], TOARCIAN_2024[0], PLIENSBACHIAN_BASE_2024],
        [TOARCIAN_2012[1], TOARCIAN_2012[0], PLIENSBACHIAN_BASE_2012],
    )


# ------------------------------------------------------------------------------- helpers


def cli(capsys: pytest.CaptureFixture[str], *args: object) -> tuple[int, str, str]:
    """Run the console entry point in-process: (exit code, stdout, stderr)."""
    from strata13.cli.app import main

    capsys.readouterr()
    old = signal.getsignal(signal.SIGINT)  # main() installs its own Ctrl-C handler
    try:
        with pytest.raises(SystemExit) as ended:
            main([str(a) for a in args])
    finally:
        signal.signal(signal.SIGINT, old)
    out = capsys.readouterr()
    return int(ended.value.code or 0), out.out, out.err


def csv_rows(text: str) -> list[dict[str, str]]:
    return list(csv.DictReader(io.StringIO(text)))


MAPPING = """
[source]
id = "{source_id}"
citation = "Invented, A. 2020. The {section} section (invented)."
year = 2020

[table]
file = "{file}"

[columns]
"Sample" = "sample_id"
"Height" = {{ field = "position", unit = "m" }}
"d13C" = {{ field = "d13c_carb", scale = "VPDB" }}
{columns}

[constants]
section_id = "{section}"
position_kind = "{kind}"
{constants}

[[localities]]
id = "tarnwick"
lat = 47.5
lon = 10.5
{ties}
"""


def write_section(
    folder: Path,
    rows: list[list[object]],
    ties: list[dict[str, object]] = (),
    *,
    columns: dict[str, str] | None = None,
    constants: dict[str, str] | None = None,
    source_id: str = "tarnwick-2020",
    section: str = "tarnwick-gully",
    kind: str = "height",
    extra: str = "",
) -> Path:
    """A one-section sheet (Sample, Height, d13C and ``columns``) with its mapping file,
    ``[[ties]]`` blocks and ``extra`` TOML (a [[sections]] block, say); returns the mapping's
    path."""
    columns = columns or {}
    folder.mkdir(parents=True, exist_ok=True)
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(["Sample", "Height", "d13C", *columns])
    w.writerows(rows)
    (folder / "sheet.csv").write_text(buf.getvalue(), encoding="utf-8")
    tie_text = "".join(
        "\n[[ties]]\n"
        + "".join(f"{k} = {json.dumps(v, ensure_ascii=False)}\n" for k, v in t.items())
        for t in ties
    )
    mapping = folder / "sheet.toml"
    mapping.write_text(
        MAPPING.format(
            source_id=source_id,
            section=section,
            kind=kind,
            file="sheet.csv",
            columns="".join(f'"{h}" = {spec}\n' for h, spec in columns.items()),
            constants="".join(f"{k} = {json.dumps(v)}\n" for k, v in (constants or {}).items()),
            ties=tie_text + extra,
        ),
        encoding="utf-8",
    )
    return mapping


def plain_rows(positions: list[float]) -> list[list[object]]:
    return [[f"tg-{i:02d}", p, round(1.0 + 0.1 * i, 2)] for i, p in enumerate(positions)]


def radiometric(
    position: float, age: float, tie_id: str | None = None, section: str = "tarnwick-gully"
) -> dict[str, object]:
    t: dict[str, object] = {
        "section": section,
        "position": position,
        "basis": "radiometric",
        "age": age,
        "uncertainty": 0.1,
    }
    if tie_id:
        t["id"] = tie_id
    return t


def records(store: api.Store, where: str = "") -> list[dict[str, object]]:
    res = api.sql(
        store,
        "SELECT record_id, source_id, section_id, position_m, position_kind, "
        "age_ma, age_sigma_ma, age_basis, age_status, age_chain, time_scale, "
        "age_reported_ma, age_reported_scale, age_reported_sigma_ma FROM records "
        f"{where} ORDER BY record_id",
    )
    return [dict(zip(res.columns, r, strict=True)) for r in res.rows]


def section_draws(store: api.Store) -> dict[tuple[str, str], tuple[np.ndarray, np.ndarray]]:
    """(source, section) -> (positions, draws n_draws x positions) decoded from age_draws."""
    res = api.sql(
        store,
        "SELECT source_id, section_id, chunk, positions_json, n_draws, draws "
        "FROM age_draws ORDER BY source_id, section_id, chunk",
    )
    out: dict[tuple[str, str], tuple[list[float], list[np.ndarray]]] = {}
    for src, sec, _chunk, pos_json, n_draws, blob in res.rows:
        pos = json.loads(pos_json)
        assert len(blob) == 4 * n_draws * len(pos)  # float32, draws x positions
        block = np.frombuffer(blob, dtype="<f4").reshape(n_draws, len(pos))
        p, b = out.setdefault((src, sec), ([], []))
        p += pos
        b.append(block)
    return {k: (np.array(p), np.concatenate(b, axis=1)) for k, (p, b) in out.items()}


# ------------------------------------------------------- 1. the demo is dated by age models


def test_every_demo_sample_is_dated_by_an_age_model_with_its_tie_steps(demo_store: Path) -> None:
    store = api.open_store(demo_store)
    scale = store.settings()["time_scale"]
    assert scale == "ICS2024/12"
    rows = records(store)
    assert rows
    for r in rows:
        assert r["age_basis"] == "age model", r
        assert r["age_ma"] is not None and r["age_sigma_ma"] > 0, r
        assert r["time_scale"] == scale and r["age_chain"], r
    ties = api.sql(store, "SELECT source_id, section_id, count(*) FROM age_ties GROUP BY ALL")
    n_ties = {(s, c): n for s, c, n in ties.rows}
    chains = api.sql(
        store,
        "SELECT DISTINCT r.source_id, r.section_id, c.steps_json FROM "
        "records r JOIN chains c ON c.chain_id = r.age_chain",
    )
    sections = {(r["source_id"], r["section_id"]) for r in rows}
    assert {(s, c) for s, c, _ in chains.rows} == sections  # every chain is stored
    for src, sec, steps_json in chains.rows:
        model = [s for s in json.loads(steps_json) if s.get("step") == "age model"]
        assert len(model) == 1
        assert model[0]["parameters"]["time_scale"] == scale
        assert len(model[0]["ties"]) == n_ties[(src, sec)] >= 2  # every tie is named
        if (src, sec) == ("quillar-2011", "quillar-ridge"):
            steps = {t["tie"].split("'")[1]: t for t in model[0]["ties"]}
            for tie_id in ("crassus-base", "base-toarcian", "velmaria-top"):
                assert (steps[tie_id]["from"], steps[tie_id]["to"]) == ("ICS2012", "ICS2024/12")
            # biozone ties move with their chart (closed form, piecewise-linear):
            # 182.886 on 2012 lies in the Pliensbachian: 184.2 + 0.186/8.1 · 8.7
            assert steps["crassus-base"]["age_ma"] == pytest.approx(
                184.2 + 0.186 / 8.1 * 8.7, abs=1e-9
            )
            # 180.347 on 2012 lies in the Toarcian: 184.2 − 2.353/8.6 · 9.5
            assert steps["velmaria-top"]["age_ma"] == pytest.approx(
                184.2 - 2.353 / 8.6 * 9.5, abs=1e-9
            )
            assert steps["base-toarcian"]["age_ma"] == TOARCIAN_2024[0]


# ---------------------------------------------- 2. a chart-boundary tie read on the 2012 chart


def test_chart_boundary_tie_takes_the_base_on_the_store_chart(
    demo_store: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    code, out, err = cli(
        capsys, "agemodel", "quillar-ridge", "--format", "csv", "--store", demo_store
    )
    assert code == 0, err
    ties = {r["boundary"]: r for r in csv_rows(out)}
    assert len(ties) == 3
    toarcian = ties["Toarcian"]
    assert (toarcian["basis"], toarcian["chart"], toarcian["given_age_ma"]) == (
        "chart boundary",
        "ICS2012",
        "",
    )
    # the base of the Toarcian on v2024/12 (not 182.7 of the chart it was read on)
    assert float(toarcian["age_ma"]) == TOARCIAN_2024[0]
    assert float(toarcian["sigma_ma"]) == pytest.approx(TOARCIAN_BASE_SIGMA_2024, abs=1e-5)
    # 9.8 ft × 0.3048 m/ft (international foot, exact)
    assert float(toarcian["position_m"]) == pytest.approx(9.8 * 0.3048, abs=1e-9)
    # 95 % uncertainties as 1σ: ÷ 1.96 (common practice)
    crassus = ties["Orvannites crassus Zone base"]
    assert float(crassus["sigma_ma"]) == pytest.approx(0.4 / 1.96, abs=1e-9)
    assert float(crassus["given_age_ma"]) == 182.886
    assert "age model" in err and "draws" in err


# -------------------------------------------- 3. a biozone tie moves with its chart boundaries


def test_biozone_tie_in_the_toarcian_moves_piecewise_linearly(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    expected = 184.2 - (182.7 - 180.0) / 8.6 * 9.5  # closed form: 181.2174…
    assert expected == pytest.approx(181.217, abs=5e-4)
    m = write_section(
        tmp_path / "src",
        plain_rows([0.0, 2.0, 5.0, 8.0]),
        [
            {
                "id": "ellisk-base",
                "section": "tarnwick-gully",
                "position": 2.0,
                "basis": "biozone boundary",
                "boundary": "Ellisk Zone base",
                "age": 180.0,
                "uncertainty": 0.1,
                "chart": "ICS2012",
            },
            radiometric(8.0, 180.4, "ash-t8"),
        ],
    )
    store = api.init_store(tmp_path / "st")
    api.ingest(store, None, m)
    code, out, err = cli(
        capsys, "agemodel", "tarnwick-gully", "--format", "csv", "--store", store.path
    )
    assert code == 0, err
    zone = next(r for r in csv_rows(out) if r["boundary"] == "Ellisk Zone base")
    assert float(zone["given_age_ma"]) == 180.0 and zone["chart"] == "ICS2012"
    assert float(zone["age_ma"]) == pytest.approx(expected, abs=1e-9)
    at_tie = next(r for r in records(store) if r["position_m"] == 2.0)
    # the model's median at a tie is the tie's age within a fraction of its σ (0.1 Myr)
    assert at_tie["age_ma"] == pytest.approx(expected, abs=0.05)
    assert at_tie["age_basis"] == "age model"


# -------------------------------------------------------------- 4. --interval by stage name


def _ids(out: str) -> list[str]:
    return sorted(r["record_id"] for r in csv_rows(out))


def test_query_by_stage_names_and_ranges(
    demo_store: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    everything = api.query(api.open_store(demo_store))
    s = ("--store", demo_store)

    def ids_between(younger: float, older: float) -> list[str]:
        return sorted(everything.record_id[everything.age_ma.between(younger, older)])

    code, out, err = cli(capsys, "query", "--interval", "Toarcian", "--format", "csv", *s)
    assert code == 0, err
    toarcian = _ids(out)
    assert toarcian == ids_between(*TOARCIAN_2024[::-1])
    assert 0 < len(toarcian) < len(everything)  # the demo's oldest ties lie below the base

    # NAME..NAME in either order: Pliensbachian base to Toarcian top
    code, out, err = cli(
        capsys, "query", "--interval", "Pliensbachian..Toarcian", "--format", "csv", *s
    )
    assert code == 0, err
    span = _ids(out)
    assert span == ids_between(TOARCIAN_2024[1], PLIENSBACHIAN_BASE_2024)
    assert len(span) > len(toarcian)
    code, out, err = cli(
        capsys, "query", "--interval", "Toarcian..Pliensbachian", "--format", "csv", *s
    )
    assert code == 0 and _ids(out) == span

    # a misspelt name: wrong instructions, with a suggestion
    code, out, err = cli(capsys, "query", "--interval", "toarcain", *s)
    assert code == 2 and "Did you mean" in err and "Toarcian" in err and out == ""

    # A-B in either order: same rows; the younger-first form says it was normalised
    code, out_ab, err_ab = cli(capsys, "query", "--interval", "180-185", "--format", "csv", *s)
    code2, out_ba, err_ba = cli(capsys, "query", "--interval", "185-180", "--format", "csv", *s)
    assert code == code2 == 0
    assert _ids(out_ab) == _ids(out_ba) and _ids(out_ab)
    assert "185-180" in err_ab and "younger first" in err_ab
    assert "younger first" not in err_ba

    # the name read on the 2012 chart lands on the same boundaries of the store's chart
    code, out, err = cli(
        capsys, "query", "--interval", "Toarcian", "--time-scale", "ICS2012", "--format", "csv", *s
    )
    assert code == 0 and _ids(out) == toarcian
    assert "184.2" in err and "174.7" in err

    # --time-scale names the chart of --interval: alone it is refused
    code, out, err = cli(capsys, "query", "--time-scale", "ICS2012", *s)
    assert code == 2 and "--interval" in err and out == ""
    # an unknown chart version: refused with a suggestion
    code, out, err = cli(capsys, "query", "--interval", "Toarcian", "--time-scale", "ICS2021", *s)
    assert code == 2 and "Did you mean" in err and out == ""


# ------------------------------------------------------------------ 5. tie-only sources


def test_reingesting_a_tied_source_keeps_the_age_models_of_another_source(
    demo_store: Path, demo_sheets: Path, tmp_path: Path
) -> None:
    store = api.open_store(demo_store)
    where = "WHERE source_id = 'mossaret-fennoway-2018'"
    before = records(store, where)
    assert before and {r["age_basis"] for r in before} == {"age model"}
    draws_before = api.sql(
        store,
        "SELECT * FROM age_draws WHERE source_id = "
        "'mossaret-fennoway-2018' ORDER BY section_id, chunk",
    ).rows
    sheet, mapping = next(p for p in SHEETS if p[1] == "mossaret_fennoway_2018.toml")
    # the same sheet again: nothing to commit
    same = api.ingest(store, demo_sheets / sheet, demo_sheets / mapping)
    assert same.unchanged and same.version is None
    # a copy with an edited citation: a new version that re-derives the source's records
    copy = tmp_path / "copy"
    copy.mkdir()
    (copy / sheet).write_bytes((demo_sheets / sheet).read_bytes())
    text = (demo_sheets / mapping).read_text(encoding="utf-8")
    assert "Two sections" in text
    (copy / mapping).write_text(
        text.replace("Two sections", "Two measured sections"), encoding="utf-8"
    )
    again = api.ingest(store, copy / sheet, copy / mapping)
    assert again.version is not None and (again.added, again.removed, again.changed) == (0, 0, 0)
    after = records(store, where)
    # the ties of orvanne-ties-2023 still apply: same ages, same basis, same draws
    assert [(r["record_id"], r["age_ma"], r["age_sigma_ma"], r["age_basis"]) for r in after] == [
        (r["record_id"], r["age_ma"], r["age_sigma_ma"], r["age_basis"]) for r in before
    ]
    assert (
        api.sql(
            store,
            "SELECT * FROM age_draws WHERE source_id = "
            "'mossaret-fennoway-2018' ORDER BY section_id, chunk",
        ).rows
        == draws_before
    )


def test_editing_a_tie_only_source_redates_the_sections_it_ties(
    demo_store: Path, demo_sheets: Path, tmp_path: Path
) -> None:
    store = api.open_store(demo_store)
    cut = "WHERE section_id = 'Mossaret Cut'"
    before = {r["record_id"]: r["age_ma"] for r in records(store, cut)}
    copy = tmp_path / "ties"
    copy.mkdir()
    for name in (TIES, "orvanne_ties_fennoway.csv"):
        (copy / name).write_bytes((demo_sheets / name).read_bytes())
    text = (copy / TIES).read_text(encoding="utf-8")
    assert text.count("age = 181.80") == 1
    (copy / TIES).write_text(text.replace("age = 181.80", "age = 181.60"), encoding="utf-8")
    res = api.ingest(store, None, copy / TIES)
    assert res.version is not None and res.redated > 0
    after = records(store, cut)
    assert sum(before[r["record_id"]] != r["age_ma"] for r in after) > 0
    # the stored draws follow the new ties: their median is each record's age (definition)
    pos, d = section_draws(store)[("mossaret-fennoway-2018", "Mossaret Cut")]
    median = dict(zip(pos.tolist(), np.median(d.astype(np.float64), axis=0), strict=True))
    for r in after:
        assert median[r["position_m"]] == pytest.approx(r["age_ma"], abs=1e-4)


def test_a_tie_only_mapping_takes_no_sheet(
    demo_store: Path, demo_sheets: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    before = tree_bytes(demo_store)
    code, _, err = cli(
        capsys,
        "ingest",
        demo_sheets / "quillar_2011.xlsx",
        "--map",
        demo_sheets / TIES,
        "--store",
        demo_store,
    )
    assert code == 2 and "ties" in err and "Traceback" not in err
    assert tree_bytes(demo_store) == before


def test_a_tie_for_a_section_not_in_the_store_is_refused(demo_store: Path, tmp_path: Path) -> None:
    (tmp_path / "t.toml").write_text(
        '[source]\nid = "brannock-ties-2024"\ncitation = "Invented ties."\n'
        '[[ties]]\nsection = "mossaret-fennoway-2018/Nowhere Cut"\nposition = 1.0\n'
        'basis = "radiometric"\nage = 183.1\nuncertainty = 0.1\n'
        '[[ties]]\nsection = "mossaret-fennoway-2018/Nowhere Cut"\nposition = 4.0\n'
        'basis = "radiometric"\nage = 182.9\nuncertainty = 0.1\n',
        encoding="utf-8",
    )
    before = tree_bytes(demo_store)
    with pytest.raises(DomainError) as refused:  # a domain rule: exit 1
        api.ingest(api.open_store(demo_store), None, tmp_path / "t.toml")
    assert refused.value.exit_code == 1 and "Nowhere Cut" in refused.value.message
    assert tree_bytes(demo_store) == before


def test_the_cli_ingests_a_tie_only_mapping_without_a_sheet(
    demo_store: Path, demo_sheets: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    n_versions = len(api.history(api.open_store(demo_store)))
    code, _, err = cli(capsys, "ingest", "--map", demo_sheets / TIES, "--store", demo_store)
    assert code == 0, err  # the demo's ties are already in: nothing new to commit
    assert len(api.history(api.open_store(demo_store))) == n_versions


# --------------------------------------------------------- 6. superposition of ties at ingest


def test_inverted_ties_are_refused_naming_both_and_the_store_is_unchanged(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    store = api.init_store(tmp_path / "st")
    good = write_section(
        tmp_path / "a",
        plain_rows([1.0, 3.0, 5.0, 7.0]),
        [radiometric(2.0, 183.0, "ash-lower"), radiometric(8.0, 182.0, "ash-upper")],
    )
    api.ingest(store, None, good)
    before = tree_bytes(store.path)
    # an older ash above a younger one in a height section: superposition is violated
    bad = write_section(
        tmp_path / "b",
        plain_rows([1.0, 3.0, 5.0, 7.0]),
        [radiometric(2.0, 182.0, "ash-lower"), radiometric(8.0, 183.0, "ash-upper")],
    )
    code, _, err = cli(
        capsys, "ingest", bad.parent / "sheet.csv", "--map", bad, "--store", store.path
    )
    assert code == 1, err
    assert "ash-lower" in err and "ash-upper" in err and "Traceback" not in err
    assert tree_bytes(store.path) == before


def test_a_hiatus_two_ties_at_one_level_is_accepted(tmp_path: Path) -> None:
    m = write_section(
        tmp_path / "h",
        plain_rows([float(i) for i in range(11)]),
        [
            radiometric(0.0, 184.0),
            radiometric(5.0, 183.5),
            radiometric(5.0, 182.5),
            radiometric(10.0, 182.0),
        ],
    )
    store = api.init_store(tmp_path / "st")
    res = api.ingest(store, None, m)
    assert res.version is not None and not res.pending.get("age")
    age = {r["position_m"]: r["age_ma"] for r in records(store)}
    assert all(r["age_basis"] == "age model" for r in records(store))
    # a hiatus is a jump of its duration (1 Myr) between the levels just below and above;
    # elsewhere ~0.1 Myr per m (0.5 Myr over 5 m)
    assert age[4.0] - age[6.0] > 1.0
    assert all(0.0 < age[h] - age[h + 1] < 0.5 for h in (0.0, 1.0, 2.0, 6.0, 7.0, 8.0))
    # the level of the hiatus takes the older age (the top of the older part)
    assert age[5.0] == pytest.approx(183.5, abs=0.05)


# ---------------------------------------------------------------------- 7. stage-only ages


def test_stage_only_ages_are_the_stage_midpoint_with_a_uniform_sigma(tmp_path: Path) -> None:
    rows = [[f"st-{i}", float(i), 1.0, "Toarcian"] for i in range(3)]
    rows.append(["st-9", 9.0, 1.0, "Orvannian"])  # not a stage of any chart
    m = write_section(tmp_path / "s", rows, columns={"Stage": '"stage"'})
    store = api.init_store(tmp_path / "st")
    api.ingest(store, None, m)
    got = {r["position_m"]: r for r in records(store)}
    for h in (0.0, 1.0, 2.0):
        r = got[h]
        # uniform over 184.2–174.7 Ma: midpoint 179.45, σ = 9.5/√12 = 2.742 Myr (closed form)
        assert r["age_ma"] == pytest.approx(179.45, abs=1e-9)
        assert r["age_sigma_ma"] == pytest.approx(9.5 / math.sqrt(12), abs=1e-9)
        assert r["age_sigma_ma"] == pytest.approx(2.742, abs=5e-4)
        assert r["age_basis"] == "stage only" and "stage" in r["age_status"]
        assert r["time_scale"] == "ICS2024/12"
    assert got[9.0]["age_ma"] is None and got[9.0]["age_status"].startswith("pending")
    assert "Orvannian" in got[9.0]["age_status"]


# -------------------------------------------- 8. reported ages are moved between charts


def test_reported_ages_move_from_their_chart_and_keep_their_sigma(tmp_path: Path) -> None:
    # heights 1, 2, 3 m: 185.0, 180.0 and 179.5 Ma on the 2012 chart (younger upward)
    rows = [
        ["r-1", 1.0, 1.0, 185.0, 0.25],
        ["r-2", 2.0, 1.0, 180.0, 0.3],
        ["r-3", 3.0, 1.0, 179.5, ""],
    ]
    m = write_section(
        tmp_path / "r",
        rows,
        columns={"Age": '"age"', "Age sd": '"age_sigma"'},
        constants={"age_time_scale": "ICS2012"},
    )
    store = api.init_store(tmp_path / "st")
    api.ingest(store, None, m)
    got = {r["position_m"]: r for r in records(store)}
    # closed form: 184.2 − (182.7 − 180)/8.6 · 9.5 = 181.217 Ma
    assert got[2.0]["age_ma"] == pytest.approx(184.2 - 2.7 / 8.6 * 9.5, abs=1e-9)
    assert got[2.0]["age_ma"] == pytest.approx(181.217, abs=5e-4)
    assert got[3.0]["age_ma"] == pytest.approx(float(on_2024(179.5)), abs=1e-9)
    # in the Pliensbachian: 184.2 + (185 − 182.7)/8.1 · 8.7
    assert got[1.0]["age_ma"] == pytest.approx(184.2 + 2.3 / 8.1 * 8.7, abs=1e-9)
    assert got[2.0]["age_sigma_ma"] == 0.3 and got[1.0]["age_sigma_ma"] == 0.25
    assert got[3.0]["age_sigma_ma"] is None  # none given: none invented
    for r in got.values():
        assert r["age_basis"] == "reported" and r["time_scale"] == "ICS2024/12"
        assert r["age_reported_scale"] == "ICS2012"
    assert [got[h]["age_reported_ma"] for h in (1.0, 2.0, 3.0)] == [185.0, 180.0, 179.5]
    chain = api.sql(
        store, f"SELECT steps_json FROM chains WHERE chain_id = '{got[2.0]['age_chain']}'"
    ).rows[0][0]
    conv = [s for s in json.loads(chain) if s.get("step") == "time-scale conversion"]
    assert conv and conv[0]["parameters"]["from"] == "ICS2012"
    assert conv[0]["parameters"]["to"] == "ICS2024/12"


# ------------------------------------------------------------------------ 9. redate


def _changes(before: dict[str, float | None], after: dict[str, float | None]) -> tuple[int, float]:
    n, largest = 0, 0.0
    for rid, a in before.items():
        b = after[rid]
        if (a is None) != (b is None):
            n += 1
        elif a is not None and abs(a - b) > 1e-12:
            n += 1
            largest = max(largest, abs(a - b))
    return n, largest


TOARCIAN_BASE_SIGMA_2012 = 0.7 / 1.96  # ±0.7 Myr at 95 % on the 2012 chart -> 1σ


def _inverted_on_2012(store: api.Store) -> dict[str, float]:
    """Sections whose radiometric tie older than the 2012 Toarcian base (182.7 Ma) lies
    above their Toarcian chart-boundary tie, with how far beyond 2σ of the age difference
    the inversion goes (common practice: a contradiction only when positive)."""
    kinds = dict(
        ((s, c), k)
        for s, c, k in api.sql(
            store, "SELECT DISTINCT source_id, section_id, position_kind FROM records"
        ).rows
    )
    ties = api.sql(
        store,
        "SELECT source_id, section_id, position_m, basis, boundary, age_ma, age_sigma_ma "
        "FROM age_ties",
    ).rows
    out: dict[str, float] = {}
    for s, c, p_t, basis, boundary, _, _ in ties:
        if basis != "chart boundary" or boundary != "Toarcian":
            continue
        for s2, c2, p_r, basis2, _, age, sig in ties:
            if (s2, c2) != (s, c) or basis2 != "radiometric" or age <= TOARCIAN_2012[0]:
                continue
            above = p_r > p_t if kinds[(s, c)] == "height" else p_r < p_t
            if above:
                excess = age - TOARCIAN_2012[0] - 2 * math.hypot(sig, TOARCIAN_BASE_SIGMA_2012)
                out[f"{s}/{c}"] = max(out.get(f"{s}/{c}", -math.inf), excess)
    return out


def test_redate_to_2012_and_back(demo_store: Path, capsys: pytest.CaptureFixture[str]) -> None:
    store = api.open_store(demo_store)
    s = ("--store", demo_store)
    before = records(store)
    draws_before = api.sql(
        store, "SELECT * FROM age_draws ORDER BY source_id, section_id, chunk"
    ).rows
    n_versions = len(api.history(store))
    inverted = _inverted_on_2012(store)
    # the demo's 183.0 ± 0.1 Ma ashes lie above the 2012 Toarcian base (182.7 ± 0.36 Ma),
    # but only by 0.3 Myr, within 2σ of the difference (0.74 Myr): no contradiction, the
    # truncated draws keep them in order
    assert inverted and all(v < 0 for v in inverted.values())
    conflicts = {k for k, v in inverted.items() if v > 0}

    code, _, err = cli(capsys, "redate", "--time-scale", "ICS2012", *s)
    assert code == 0, err
    assert len(api.history(store)) == n_versions + 1
    assert store.settings()["time_scale"] == "ICS2012"
    after = records(store)
    n, largest = _changes(
        {r["record_id"]: r["age_ma"] for r in before}, {r["record_id"]: r["age_ma"] for r in after}
    )
    m = re.search(r"age_ma: (\d+) values changed; largest change ([0-9.eE+-]+) Myr", err)
    assert m, err
    assert int(m.group(1)) == n > 0
    # shown to 0.001 Myr (strata13.numbers): equal to half the last digit
    assert float(m.group(2)) == pytest.approx(largest, abs=5e-4)
    named = set(re.findall(r"no age model for ([^:]+):", err))
    assert named == conflicts
    for r in after:
        assert r["time_scale"] in ("ICS2012", None)
        if f"{r['source_id']}/{r['section_id']}" in conflicts:
            # their other ages stand: the reported age moved onto the 2012 chart
            if r["age_reported_ma"] is not None and r["age_reported_scale"] == "ICS2024/12":
                assert r["age_basis"] == "reported"
                assert r["age_ma"] == pytest.approx(float(on_2012(r["age_reported_ma"])), abs=1e-9)
            elif r["age_basis"] is None:
                assert "contradict" in r["age_status"]
        else:
            assert r["age_basis"] == "age model" and r["time_scale"] == "ICS2012"
    # the chart-boundary tie now sits at the Toarcian base of the 2012 chart
    code, out, err = cli(capsys, "agemodel", "quillar-ridge", "--format", "csv", *s)
    toarcian = next(r for r in csv_rows(out) if r["boundary"] == "Toarcian")
    assert float(toarcian["age_ma"]) == TOARCIAN_2012[0]

    # nothing left to change: no new version
    code, _, err = cli(capsys, "redate", "--time-scale", "ICS2012", *s)
    assert code == 0 and "0 changed" in err
    assert len(api.history(store)) == n_versions + 1

    # back to v2024/12: the same seed gives the same draws, so the same ages
    code, _, err = cli(capsys, "redate", "--time-scale", "ICS2024/12", *s)
    assert code == 0, err
    assert len(api.history(store)) == n_versions + 2
    assert records(store) == before
    assert (
        api.sql(store, "SELECT * FROM age_draws ORDER BY source_id, section_id, chunk").rows
        == draws_before
    )

    code, _, err = cli(capsys, "redate", "--time-scale", "ICS2021", *s)
    assert code == 2 and "Did you mean" in err


def _lost_section(tmp_path: Path) -> Path:
    """An invented height section whose ties agree on v2024/12 but contradict each other on
    the 2012 chart beyond their errors: the upper ash (183.9 ± 0.05 Ma, 8 m) lies above the
    Toarcian base tie (5 m), which is 184.2 Ma on v2024/12 but 182.7 ± 0.36 Ma on 2012 —
    older above by 1.2 Myr, more than 2·sqrt(0.05² + 0.36²) = 0.72 Myr. Its records: a
    reported age with its σ, a stage only, a reported age without σ in a named stage, and
    one with nothing but its position."""
    rows = [
        ["bc-3", 3.0, 1.0, 184.6, 0.2, ""],
        ["bc-4", 4.0, 1.1, "", "", "Pliensbachian"],
        ["bc-6", 6.0, 1.2, 184.0, "", "Toarcian"],
        ["bc-7", 7.0, 1.3, "", "", ""],
    ]
    ties = [
        radiometric(2.0, 185.0, "ash-low", section="brannock-cut") | {"uncertainty": 0.05},
        {
            "id": "toarcian-base",
            "section": "brannock-cut",
            "position": 5.0,
            "basis": "chart boundary",
            "boundary": "Toarcian",
            "chart": "ICS2024/12",
        },
        radiometric(8.0, 183.9, "ash-high", section="brannock-cut") | {"uncertainty": 0.05},
    ]
    return write_section(
        tmp_path / "bc",
        rows,
        ties,
        columns={"Age": '"age"', "Age sd": '"age_sigma"', "Stage": '"stage"'},
        constants={"age_time_scale": "ICS2024/12"},
        source_id="brannock-2019",
        section="brannock-cut",
    )


def _chain(store: api.Store, chain_id: str) -> list[dict[str, object]]:
    got = api.sql(store, f"SELECT steps_json FROM chains WHERE chain_id = '{chain_id}'").rows
    steps: list[dict[str, object]] = json.loads(got[0][0])
    return steps


def test_a_section_that_loses_its_model_keeps_the_sigma_it_can_state(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    store = api.init_store(tmp_path / "st")
    api.ingest(store, None, _lost_section(tmp_path))
    assert {r["age_basis"] for r in records(store)} == {"age model"}
    code, _, err = cli(capsys, "redate", "--time-scale", "ICS2012", "--store", store.path)
    assert code == 0, err
    assert "no age model for brannock-2019/brannock-cut" in err
    assert "ash-high" in err and "toarcian-base" in err and "beyond the ties' errors" in err
    got = {r["position_m"]: r for r in records(store)}
    for r in got.values():
        assert "no age model" in r["age_status"] and "contradict" in r["age_status"], r
    # the reported age moves to 2012 (closed form, piecewise-linear) and keeps its σ
    assert got[3.0]["age_basis"] == "reported"
    assert got[3.0]["age_ma"] == pytest.approx(float(on_2012(184.6)), abs=1e-9)
    assert got[3.0]["age_sigma_ma"] == 0.2
    # the stage only: the 2012 Pliensbachian 190.8–182.7 Ma, σ = 8.1/√12 (uniform)
    assert got[4.0]["age_basis"] == "stage only"
    assert got[4.0]["age_ma"] == pytest.approx((190.8 + 182.7) / 2, abs=1e-9)
    assert got[4.0]["age_sigma_ma"] == pytest.approx(8.1 / math.sqrt(12), abs=1e-9)
    # no reported error, but its stage holds it: the 2012 Toarcian's σ, 8.6/√12
    assert got[6.0]["age_basis"] == "reported"
    assert got[6.0]["age_sigma_ma"] == pytest.approx(8.6 / math.sqrt(12), abs=1e-9)
    assert "no uncertainty given" in got[6.0]["age_status"]
    # nothing else to go on: pending, never an age without a σ
    assert got[7.0]["age_ma"] is None and got[7.0]["age_status"].startswith("pending")
    for h in (3.0, 4.0, 6.0):
        steps = _chain(store, str(got[h]["age_chain"]))
        lost = [st for st in steps if st["step"] == "no age model"]
        assert len(lost) == 1 and "ash-high" in str(lost[0]["parameters"])
    # the agemodel command says why there is no model
    code, out, err = cli(
        capsys, "agemodel", "brannock-cut", "--format", "csv", "--store", store.path
    )
    assert code == 0 and len(csv_rows(out)) == 3
    assert "contradict" in err and "two or more are needed" not in err
    # back on v2024/12 the section has its model again
    code, _, err = cli(capsys, "redate", "--time-scale", "ICS2024/12", "--store", store.path)
    assert code == 0 and "no age model" not in err
    assert {r["age_basis"] for r in records(store)} == {"age model"}


def test_a_tie_the_chart_cannot_place_leaves_its_section_without_a_model(tmp_path: Path) -> None:
    # derive as a recompute does (strict=False): the section keeps its other ages and says
    # why; as an ingest does (strict), the tie is refused naming it
    from strata13.compile.ages.ties import ties_table
    from strata13.compile.check.validate import prepare
    from strata13.compile.derive.engine import derive
    from strata13.compile.derive.settings import Settings
    from strata13.compile.read.mapping import load_mapping

    rows = [["x-1", 1.0, 1.0, "Toarcian"], ["x-2", 2.0, 1.1, ""]]
    odd = {"section": "tarnwick-gully", "position": 3.0, "basis": "chart boundary"}
    odd |= {"boundary": "Orvannian", "chart": "ICS2024/12", "id": "odd-base"}
    m = write_section(
        tmp_path / "x", rows, [radiometric(0.0, 184.0), odd], columns={"Stage": '"stage"'}
    )
    mapping = load_mapping(m)
    prepared = prepare(mapping)
    ties = ties_table(mapping.ties)
    got = derive(prepared.records, Settings(), ties, strict=False, sections=prepared.sections)
    assert len(got.conflicts) == 1 and "Orvannian" in got.conflicts[0]
    by_pos = {r["position_m"]: r for r in got.table.to_pylist()}
    assert by_pos[1.0]["age_basis"] == "stage only"
    assert "cannot be placed" in by_pos[1.0]["age_status"]
    assert by_pos[2.0]["age_status"].startswith("pending: no age model: a tie of the section")
    with pytest.raises(DomainError, match="odd-base"):
        derive(prepared.records, Settings(), ties, sections=prepared.sections)


def test_a_section_with_one_tie_says_so(tmp_path: Path) -> None:
    rows = [["one-1", 1.0, 1.0, "Toarcian"], ["one-2", 2.0, 1.1, ""]]
    m = write_section(
        tmp_path / "one", rows, [radiometric(1.5, 183.0)], columns={"Stage": '"stage"'}
    )
    store = api.init_store(tmp_path / "st")
    api.ingest(store, None, m)
    got = {r["position_m"]: r for r in records(store)}
    reason = "no age model: the section has 1 age tie; an age model needs two"
    assert got[1.0]["age_basis"] == "stage only" and reason in got[1.0]["age_status"]
    assert got[1.0]["age_sigma_ma"] == pytest.approx(9.5 / math.sqrt(12), abs=1e-9)
    assert got[2.0]["age_ma"] is None and got[2.0]["age_status"] == f"pending: {reason}"


# ------------------------------------------------------- 9b. the accumulation prior


def _prior_section(tmp_path: Path, accumulation: str | None, name: str = "p") -> Path:
    """Two nearly exact ties 10 m apart (184.0 ± 0.01 Ma at 0 m, 183.0 ± 0.01 Ma at 10 m,
    height) and samples every metre; ``accumulation`` the [[sections]] block's value."""
    extra = (
        ""
        if accumulation is None
        else f'\n[[sections]]\nid = "tarnwick-gully"\naccumulation = {accumulation}\n'
    )
    ties = [radiometric(0.0, 184.0) | {"uncertainty": 0.01}]
    ties.append(radiometric(10.0, 183.0) | {"uncertainty": 0.01})
    rows = plain_rows([float(h) for h in range(11)])
    return write_section(tmp_path / name, rows, ties, extra=extra)


def _bridge_sigma(beta: float, w: float = 0.5, length: float = 10.0, s: float = 0.01) -> float:
    """σ of the age at w of an interval between two ties 1 Myr apart with errors s: law of
    total variance over the gamma bridge, Var = (1−w)²s² + w²s² + E[D²]·w(1−w)/(βL+1)
    (the Beta variance of the elapsed fraction; see test_agemodel)."""
    d2 = 1.0 + 2 * s**2
    return math.sqrt((1 - w) ** 2 * s**2 + w**2 * s**2 + d2 * w * (1 - w) / (beta * length + 1))


def _sigma_at(store: api.Store, height: float) -> tuple[float, dict[str, object]]:
    r = next(r for r in records(store) if r["position_m"] == height)
    model = next(st for st in _chain(store, str(r["age_chain"])) if st["step"] == "age model")
    return float(r["age_sigma_ma"]), model["parameters"]  # type: ignore[return-value]


def test_a_section_block_sets_its_own_accumulation_prior(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    # 1000 draws: the SE of σ is about 2.5 %, so 8 % is over 3 SE
    store = api.init_store(tmp_path / "st")
    api.ingest(store, None, _prior_section(tmp_path, "{ shape = 4.0 }"))
    sigma, params = _sigma_at(store, 5.0)
    assert params["accumulation_shape"] == 4.0 and params["segment_m"] == 1.0
    assert params["accumulation_from"] == "section"
    assert sigma == pytest.approx(_bridge_sigma(4.0), rel=0.08)  # 0.078 Myr
    code, _, err = cli(capsys, "agemodel", "tarnwick-gully", "--store", store.path)
    assert code == 0 and "shape 4 per 1 m segment (the section's)" in err
    # the store's prior moves; the section keeps its own
    api.redate(store, accumulation_shape=0.5)
    assert _sigma_at(store, 5.0)[0] == sigma
    # edited in the mapping, the re-ingest re-dates the source though no record changed
    res = api.ingest(store, None, _prior_section(tmp_path, "{ segment_m = 4.0 }"))
    assert res.version is not None and not res.unchanged
    sigma, params = _sigma_at(store, 5.0)
    # shape 0.5 (the store's) per 4 m: β = 0.125 per m, σ at mid-interval 0.33 Myr
    assert (params["accumulation_shape"], params["segment_m"]) == (0.5, 4.0)
    assert sigma == pytest.approx(_bridge_sigma(0.125), rel=0.08)


@pytest.mark.parametrize(
    "value,words",
    [
        ("{ shap = 4.0 }", "Did you mean 'shape'"),
        ("{ shape = -1.0 }", "is not a number from 0.01 to 1000"),
        ('{ segment_m = "1 m" }', "accumulation segment_m = '1 m' must be a finite number"),
        ("{ shape = true }", "accumulation shape = True must be a finite number"),
        ("3", "accumulation = 3 must be a table"),
    ],
)
def test_a_bad_accumulation_block_is_refused_in_one_sentence(
    tmp_path: Path, capsys: pytest.CaptureFixture[str], value: str, words: str
) -> None:
    store = api.init_store(tmp_path / "st")
    before = tree_bytes(store.path)
    m = _prior_section(tmp_path, value)
    code, _, err = cli(capsys, "ingest", "--map", m, "--store", store.path)
    assert code == 2 and words in err and "tarnwick-gully" in err, err
    assert "Traceback" not in err and tree_bytes(store.path) == before


def test_redate_changes_the_store_accumulation_prior(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    store = api.init_store(tmp_path / "st")
    api.ingest(store, None, _prior_section(tmp_path, None))
    sigma, params = _sigma_at(store, 5.0)
    assert params["accumulation_from"] == "store" and params["accumulation_shape"] == 1.0
    assert sigma == pytest.approx(_bridge_sigma(1.0), rel=0.08)  # 0.151 Myr
    from strata13.compile.derive.settings import Settings

    hash_before = Settings.from_stored(store.settings()).hashes()
    s = ("--store", store.path)
    code, _, err = cli(capsys, "redate", "--accumulation-shape", "4", *s)
    assert code == 0 and "accumulation shape: 1 → 4" in err, err
    assert "age_sigma_ma: 9 values changed" in err  # 1 … 9 m; the exact ties stay
    hash_after = Settings.from_stored(store.settings()).hashes()
    assert {k for k in hash_after if hash_after[k] != hash_before[k]} == {"age_accumulation_shape"}
    sigma, params = _sigma_at(store, 5.0)
    assert params["accumulation_from"] == "store" and params["accumulation_shape"] == 4.0
    assert sigma == pytest.approx(_bridge_sigma(4.0), rel=0.08)
    code, _, err = cli(capsys, "redate", "--accumulation-shape", "4", *s)
    assert code == 0 and "0 changed" in err
    before = tree_bytes(store.path)
    code, _, err = cli(capsys, "redate", "--accumulation-segment", "0", *s)
    assert code == 2 and "--accumulation-segment = 0.0 is not a number" in err
    assert tree_bytes(store.path) == before


# ----------------------------------------------------- 10. samples beyond the outermost ties


def test_samples_beyond_the_ties_wait_for_extrapolation(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    m = write_section(
        tmp_path / "x",
        plain_rows([float(i) for i in range(11)]),
        [radiometric(2.0, 183.0), radiometric(8.0, 182.0)],
    )
    store = api.init_store(tmp_path / "st")
    res = api.ingest(store, None, m)
    assert res.pending.get("age") == 4
    before = {r["position_m"]: r for r in records(store)}
    outside = (0.0, 1.0, 9.0, 10.0)
    for h in outside:
        assert before[h]["age_ma"] is None
        assert before[h]["age_status"].startswith("pending")
        assert "extrapolation is off" in before[h]["age_status"]
    n_versions = len(api.history(store))
    code, _, err = cli(capsys, "redate", "--extrapolate", "--store", store.path)
    assert code == 0, err
    assert re.search(r"age_ma: 4 values newly set", err), err
    after = {r["position_m"]: r for r in records(store)}
    for h in outside:
        assert after[h]["age_basis"] == "age model"
        assert "extrapolat" in after[h]["age_status"]
    for h in range(2, 9):  # between the ties nothing moves
        assert after[float(h)]["age_ma"] == before[float(h)]["age_ma"]
        assert "extrapolat" not in after[float(h)]["age_status"]
    # below the lower tie older, above the upper tie younger (superposition)
    age = {h: r["age_ma"] for h, r in after.items()}
    assert age[0.0] > age[1.0] > 183.0 - 0.3 and age[10.0] < age[9.0] < 182.0 + 0.3
    assert all(age[h] > age[h + 1] for h in np.arange(0.0, 10.0))
    # uncertainty grows away from the ties (common practice for extrapolation)
    sig = {h: r["age_sigma_ma"] for h, r in after.items()}
    assert sig[0.0] > sig[1.0] > sig[2.0] and sig[10.0] > sig[9.0] > sig[8.0]
    code, _, err = cli(capsys, "redate", "--extrapolate", "--store", store.path)
    assert code == 0 and "0 changed" in err
    assert len(api.history(store)) == n_versions + 1


# ---------------------------------------------------------------------- 11. agemodel --plot


def test_agemodel_plot_and_section_names(
    demo_store: Path, tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    from matplotlib import image

    png = tmp_path / "quillar.png"
    code, _, err = cli(capsys, "agemodel", "quillar-ridge", "--plot", png, "--store", demo_store)
    assert code == 0, err
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    pixels = image.imread(png)
    h, w = pixels.shape[:2]
    assert 300 <= h <= 4000 and 300 <= w <= 4000 and pixels.shape[2] in (3, 4)
    assert float(pixels[..., :3].std()) > 0.01  # not a blank canvas

    code, out, err = cli(capsys, "agemodel", "quillar-ridg", "--store", demo_store)
    assert code == 1 and "Did you mean" in err and "quillar-ridge" in err

    # the same section id in a second source: the command asks for SOURCE/SECTION
    m = write_section(
        tmp_path / "dup", plain_rows([1.0, 2.0]), source_id="brannock-2019", section="quillar-ridge"
    )
    api.ingest(api.open_store(demo_store), None, m)
    code, out, err = cli(capsys, "agemodel", "quillar-ridge", "--store", demo_store)
    assert code == 2 and "SOURCE/SECTION" in err
    assert "quillar-2011" in err and "brannock-2019" in err
    code, out, err = cli(
        capsys, "agemodel", "quillar-2011/quillar-ridge", "--format", "csv", "--store", demo_store
    )
    assert code == 0 and len(csv_rows(out)) == 3


# --------------------------------------------------------------------------- 12. stages


def _toarcian(out: str) -> tuple[float, float]:
    row = next(r for r in csv_rows(out) if r["name"] == "Toarcian")
    return float(row["base_ma"]), float(row["top_ma"])


def test_stages_without_a_store_on_a_named_chart_and_on_the_store_chart(
    tmp_path: Path, capsys: pytest.CaptureFixture[str], monkeypatch: pytest.MonkeyPatch
) -> None:
    empty = tmp_path / "empty"
    empty.mkdir()
    monkeypatch.chdir(empty)  # no ./compilation here
    monkeypatch.delenv("STRATA13_STORE", raising=False)
    code, out, err = cli(capsys, "stages", "--format", "csv")
    assert code == 0, err
    assert _toarcian(out) == TOARCIAN_2024
    assert list(empty.iterdir()) == []  # no store needed, nothing created

    code, out, err = cli(capsys, "stages", "--time-scale", "ICS2012", "--format", "csv")
    assert code == 0 and _toarcian(out) == TOARCIAN_2012

    store = api.init_store(tmp_path / "st2012", time_scale="ICS2012")
    code, out, err = cli(capsys, "stages", "--format", "csv", "--store", store.path)
    assert code == 0 and _toarcian(out) == TOARCIAN_2012
    assert "store's chart" in err
    code, out, err = cli(
        capsys, "stages", "--time-scale", "ICS2024/12", "--format", "csv", "--store", store.path
    )
    assert code == 0 and _toarcian(out) == TOARCIAN_2024

    code, out, err = cli(capsys, "stages", "--time-scale", "ICS2021")
    assert code == 2 and "Did you mean" in err


# ------------------------------------------------------------ 13. the stored draws themselves


def test_stored_draws_are_monotone_in_every_draw_and_summarise_to_the_ages(
    demo_store: Path,
) -> None:
    store = api.open_store(demo_store)
    sections = section_draws(store)
    rows = records(store)
    assert set(sections) == {(r["source_id"], r["section_id"]) for r in rows}
    for (src, sec), (pos, d) in sections.items():
        mine = [r for r in rows if (r["source_id"], r["section_id"]) == (src, sec)]
        kind = mine[0]["position_kind"]
        assert d.shape == (1000, len(pos)) and np.all(np.diff(pos) > 0)
        assert np.isfinite(d).all()
        step = np.diff(d.astype(np.float64), axis=1)
        # height: older below, so age falls upward; depth: age grows downward
        assert (step <= 0).all() if kind == "height" else (step >= 0).all(), (src, sec)
        assert d.std(axis=0).min() > 0  # draws differ: an uncertain model, not one line
        # each record's age is the median of the draws at its position, σ their SD (ddof=1)
        col = {p: i for i, p in enumerate(pos.tolist())}
        x = d.astype(np.float64)
        for r in mine:
            i = col[r["position_m"]]
            assert r["age_ma"] == pytest.approx(float(np.median(x[:, i])), abs=1e-4)
            assert r["age_sigma_ma"] == pytest.approx(float(x[:, i].std(ddof=1)), rel=1e-3)
