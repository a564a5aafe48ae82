"""The export package: every table opens with pandas and pyarrow, the data dictionary covers
every column, the BibTeX parses with a general-purpose parser (bibtexparser) and cites the
ties-only source, the re-published original and the chart, the manifest's sums and sizes
are the files', every table is restricted to the exported records, and the mapping's new
bibliographic [source] fields are checked."""

from __future__ import annotations

import csv
import hashlib
import json
import shutil
from pathlib import Path

import bibtexparser
import pandas as pd
import pyarrow.csv as pacsv
import pyarrow.parquet as pq
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from strata13.compile import api
from strata13.compile.integrity.corrections import Correction
from strata13.compile.read.mapping import load_mapping
from strata13.schemas.package_tables import dictionary
from strata13.schemas.records import TEXT

from strata13.errors import ConfigError

TIES_ONLY = "orvanne-ties-2023"  # demo_compilation/sheets/orvanne_ties_2023.toml: ties only


@pytest.fixture(scope="module")
def store_path(demo_store_session: Path, tmp_path_factory: pytest.TempPathFactory) -> Path:
    """The demo store with one correction and the re-published pairs confirmed."""
    dst = tmp_path_factory.mktemp("package") / "compilation"
    shutil.copytree(demo_store_session, dst)
    store = api.open_store(dst)
    rid = api.sql(
        store,
        "SELECT record_id FROM records WHERE source_id = 'ystrel-cores-2021' "
        "ORDER BY record_id LIMIT 1",
    ).rows[0][0]
    api.correct(store, [Correction(rid, "preservation", "good", "stated in the core log")])
    pairs = api.overlaps(store)
    decisions = dst.parent / "decisions.csv"
    with decisions.open("w", encoding="utf-8", newline="") as fh:
        w = csv.writer(fh, lineterminator="\n")
        w.writerow(["record_a", "record_b", "decision", "note"])
        for r in pairs.itertuples():
            w.writerow([r.record_a, r.record_b, "confirm", "re-published"])
    api.confirm_overlaps(store, decisions)
    return dst


@pytest.fixture(scope="module")
def package(store_path: Path) -> Path:
    out = store_path.parent / "export"
    api.export(api.open_store(store_path), out)
    return out


def _tables(folder: Path) -> list[str]:
    return sorted(p.stem for p in folder.glob("*.parquet"))


def test_every_table_opens_with_pandas_and_pyarrow(package: Path) -> None:
    manifest = json.loads((package / "manifest.json").read_text())
    names = _tables(package)
    assert names == sorted(
        [
            "records",
            "chains",
            "chain_parameters",
            "ties",
            "age_models",
            "screen_results",
            "runs",
            "run_qc",
            "corrections",
            "duplicate_decisions",
        ]
    )
    for name in names:
        arrow = pq.read_table(package / f"{name}.parquet")
        frame = pd.read_parquet(package / f"{name}.parquet")
        from_csv = pacsv.read_csv(package / f"{name}.csv")
        frame_csv = pd.read_csv(package / f"{name}.csv")
        assert arrow.num_rows == len(frame) == from_csv.num_rows == len(frame_csv), name
        assert arrow.column_names == list(frame_csv.columns) == from_csv.column_names, name
        assert manifest["counts"][name] == arrow.num_rows, name
    # the demo has something in every table but corrections, which this store was given
    for name in names:
        assert pq.read_table(package / f"{name}.parquet").num_rows > 0, name


def test_the_dictionary_covers_every_exported_column_and_nothing_else(package: Path) -> None:
    entries = pd.read_csv(package / "columns.csv", keep_default_na=False)
    assert list(entries.columns) == ["table", "column", "type", "unit", "meaning", "allowed_values"]
    exported = {
        (name, c)
        for name in _tables(package)
        for c in pq.read_schema(package / f"{name}.parquet").names
    }
    described = set(zip(entries["table"], entries["column"], strict=True))
    assert exported == described
    assert (entries["meaning"].str.strip() != "").all()
    # types agree with the Parquet files
    types = {"string": "text", "double": "float64", "int32": "int32", "int64": "int64"}
    for name in _tables(package):
        schema = pq.read_schema(package / f"{name}.parquet")
        for f in schema:
            row = entries[(entries.table == name) & (entries.column == f.name)]
            assert row.iloc[0]["type"] == types[str(f.type)], (name, f.name)
    # a closed set is given where the column has one
    screen = entries[(entries.table == "records") & (entries.column == "screen")].iloc[0]
    assert set(screen["allowed_values"].split("|")) == {"pass", "warn", "fail", "untested"}
    unit = entries[(entries.table == "records") & (entries.column == "age_ma")].iloc[0]["unit"]
    assert unit == "Ma"


def test_an_undescribed_column_is_refused() -> None:
    with pytest.raises(ValueError, match="records.no_such_column"):
        dictionary({"records": [("record_id", TEXT), ("no_such_column", TEXT)]})


def _library(folder: Path) -> dict[str, dict[str, str]]:
    lib = bibtexparser.parse_string((folder / "bibliography.bib").read_text(encoding="utf-8"))
    assert not lib.failed_blocks, [b.error for b in lib.failed_blocks]
    assert len({e.key for e in lib.entries}) == len(lib.entries)
    return {
        e.key: {"type": e.entry_type, **{f.key: str(f.value) for f in e.fields}}
        for e in lib.entries
    }


def test_bibtex_parses_and_cites_the_ties_only_source_and_the_chart(package: Path) -> None:
    entries = _library(package)
    records = pd.read_parquet(package / "records.parquet")
    ties = pd.read_parquet(package / "ties.parquet")
    # the ties-only source dates exported records but has none of its own
    assert TIES_ONLY not in set(records.source_id) and TIES_ONLY in set(ties.tie_source_id)
    assert TIES_ONLY in entries and "ties only" in entries[TIES_ONLY]["note"]
    assert entries[TIES_ONLY]["type"] == "techreport"
    # every data source, with the fields its mapping gives
    assert set(records.source_id) <= set(entries)
    q = entries["quillar-2011"]
    assert q["type"] == "article"
    assert q["author"] == "Aldane, R. and Morrow, T."
    assert (q["journal"], q["volume"], q["pages"], q["year"]) == (
        "Invented Journal of Demo Geology",
        "4",
        "1--20",
        "2011",
    )
    assert q["doi"] == "10.0000/demo.quillar.2011"
    # the store's chart, with the citation its table's header gives
    chart = entries["chart-ics2024-12"]
    assert "v2024/12" in chart["title"] and chart["doi"] == "10.18814/epiiugs/2025/025001"
    # the other method references the records depend on
    assert entries["method-age-model"]["type"] == "article"
    assert "IUPAC-2014" in entries["vsmow-vpdb-iupac-2014"]["title"]
    assert any(k.startswith("rm-iaea-603") for k in entries)
    assert any(k.startswith("rule-") for k in entries)
    # the rotation model only when it placed records (this store has none; the demo's does)
    placed = int((records.paleo_status == "placed").sum())
    assert bool([k for k in entries if k.startswith("rotation-")]) == bool(placed)
    # nothing is cited that the records do not use: no curve, no LOESS
    assert "method-loess" not in entries
    text = (package / "bibliography.txt").read_text(encoding="utf-8")
    assert all(f"[{k}]" in text for k in entries)


def test_a_republished_original_is_cited(store_path: Path, tmp_path: Path) -> None:
    store = api.open_store(store_path)
    api.export(
        store,
        tmp_path / "x",
        api.Filters(source=["orvanne-compilation-2022"], keep_duplicates=True),
    )
    entries = _library(tmp_path / "x")
    assert "quillar-2011" in entries
    assert "re-published by orvanne-compilation-2022" in entries["quillar-2011"]["note"]


def test_the_manifest_lists_every_file_with_its_sum_and_size(package: Path) -> None:
    manifest = json.loads((package / "manifest.json").read_text())
    listed = {f["path"]: f for f in manifest["files"]}
    on_disk = {str(p.relative_to(package)) for p in package.rglob("*") if p.is_file()} - {
        "manifest.json"
    }
    assert set(listed) == on_disk
    for path, f in listed.items():
        data = (package / path).read_bytes()
        assert f["sha256"] == hashlib.sha256(data).hexdigest() and f["bytes"] == len(data)


def test_tables_are_restricted_to_the_exported_records(store_path: Path, tmp_path: Path) -> None:
    api.export(
        api.open_store(store_path), tmp_path / "y", api.Filters(source=["ystrel-cores-2021"])
    )
    out = tmp_path / "y"
    records = pd.read_parquet(out / "records.parquet")
    ids = set(records.record_id)
    sections = set(zip(records.source_id, records.section_id, strict=True))
    assert set(pd.read_parquet(out / "chains.parquet").record_id) == ids
    assert set(pd.read_parquet(out / "screen_results.parquet").record_id) == ids
    ties = pd.read_parquet(out / "ties.parquet")
    assert set(zip(ties.source_id, ties.section_id, strict=True)) <= sections and len(ties)
    models = pd.read_parquet(out / "age_models.parquet")
    assert set(zip(models.source_id, models.section_id, strict=True)) == sections
    assert models.n_records.sum() == len(records)
    assert len(pd.read_parquet(out / "runs.parquet")) == 0  # no in-house run in this source
    assert len(pd.read_parquet(out / "run_qc.parquet")) == 0
    assert set(pd.read_parquet(out / "corrections.parquet").record_id) <= ids
    assert len(pd.read_parquet(out / "corrections.parquet")) == 1
    assert len(pd.read_parquet(out / "duplicate_decisions.parquet")) == 0
    entries = _library(out)
    assert "quillar-2011" not in entries and "orvanne-lab-2024" not in entries


def test_chain_values_follow_the_published_relation(package: Path) -> None:
    """δ18O on VSMOW: the step's value after is 0.97001 × before − 29.99 (CIAAW/IUPAC
    relation, REFERENCE_VALUES.md §2), and each record's last step ends on its harmonised
    value."""
    chains = pd.read_parquet(package / "chains.parquet")
    records = pd.read_parquet(package / "records.parquet").set_index("record_id")
    step = chains[chains.step == "δ18O VSMOW → VPDB"]
    assert len(step) > 0
    assert ((step.value_after - (0.97001 * step.value_before - 29.99)).abs() < 1e-9).all()
    last = chains.sort_values("step_order").groupby(["record_id", "quantity"]).tail(1)
    for q in ("d13c_carb", "d18o_carb"):
        rows = last[last.quantity == q].set_index("record_id")
        harmonised = records.loc[rows.index, q]
        assert ((rows.value_after - harmonised).abs().fillna(0) < 1e-12).all()
    params = pd.read_parquet(package / "chain_parameters.parquet")
    ids = set(step.chain_id)
    got = params[params.chain_id.isin(ids) & (params.parameter == "a")]
    assert set(got.value) == {"0.97001"}


def test_age_model_summaries_obey_superposition(package: Path) -> None:
    """Per section: the base is older than the top in a height section and younger in a
    depth section (superposition), the 95 % widths are positive, and the counts are those
    of the exported records."""
    models = pd.read_parquet(package / "age_models.parquet")
    records = pd.read_parquet(package / "records.parquet")
    for m in models.itertuples():
        recs = records[(records.source_id == m.source_id) & (records.section_id == m.section_id)]
        assert m.n_records == len(recs) and m.n_ties >= 2 and m.n_draws > 0
        kind = set(recs.position_kind)
        older_low = m.age_at_min_position_ma > m.age_at_max_position_ma
        assert older_low == (kind == {"height"}), (m.section_id, kind)
        assert 0 < m.width95_median_myr <= m.width95_max_myr
        assert m.ties_used.count("tie '") == m.n_ties


def test_readme_names_every_file_and_leaves_the_licence_to_the_user(package: Path) -> None:
    text = (package / "README.txt").read_text(encoding="utf-8")
    manifest = json.loads((package / "manifest.json").read_text())
    for f in manifest["files"]:
        assert f"  {f['path']}: " in text
    assert "manifest.json: " in text
    assert "Licence: NOT CHOSEN" in text and "[FILL IN" in text
    assert "INVENTED DATA" in text  # every demo source says its data are invented


def test_the_package_is_byte_identical_for_the_same_version(
    store_path: Path, tmp_path: Path
) -> None:
    store = api.open_store(store_path)
    a = api.export(store, tmp_path / "a")
    b = api.export(store, tmp_path / "b", as_of=a.version)
    assert a.files == b.files
    for name in a.files:
        assert (tmp_path / "a" / name).read_bytes() == (tmp_path / "b" / name).read_bytes()
    assert (tmp_path / "a" / "manifest.json").read_bytes() == (
        tmp_path / "b" / "manifest.json"
    ).read_bytes()


@pytest.mark.parametrize(
    ("line", "words"),
    [
        ('entry_type = "paper"', "is not a BibTeX entry type"),
        ('pages = "fifty"', "is not a page or a page range"),
        ("authors = []", "at least one author"),
        ("volume = 1.5", "volume"),
    ],
)
def test_bad_bibliographic_fields_are_refused(tmp_path: Path, line: str, words: str) -> None:
    path = tmp_path / "m.toml"
    path.write_text(
        f'[source]\nid = "some-source"\ncitation = "X 2020."\n{line}\n\n'
        '[table]\nfile = "s.csv"\n\n[columns]\n"S" = "sample_id"\n',
        encoding="utf-8",
    )
    with pytest.raises(ConfigError, match=words):
        load_mapping(path)


def test_bibliographic_fields_reach_the_store(store_path: Path) -> None:
    rows = api.sql(
        api.open_store(store_path),
        "SELECT entry_type, authors, title, journal, volume, pages FROM sources "
        "WHERE source_id = 'mossaret-fennoway-2018'",
    ).rows
    assert rows == [
        (
            "article",
            "Pell, I.|Sarrow, D.|Quint, A.",
            "Two sections across the Orvanne carbon-isotope excursion",
            "Invented Letters",
            "12",
            "55-70",
        )
    ]


text_st = st.text(
    alphabet=st.characters(codec="utf-8", exclude_categories=("Cs", "Cc")), min_size=1, max_size=40
)


@settings(max_examples=200, deadline=None)
@given(title=text_st, citation=text_st, author=text_st)
def test_any_source_text_gives_bibtex_that_parses(title: str, citation: str, author: str) -> None:
    """Whatever a mapping's text holds (braces, @, %, &, quotes, unicode), the entry
    parses as one entry and keeps its words (LaTeX escapes aside)."""
    from strata13.compile.export.bibliography import bibtex, source_entries

    source = {"source_id": "some-source", "citation": citation, "title": title, "year": 2020}
    source["authors"] = author.replace("|", " ")
    (entry,) = source_entries({"some-source": source}, {"some-source": ["data of 1"]}, {})
    lib = bibtexparser.parse_string(bibtex([entry]))
    assert not lib.failed_blocks and len(lib.entries) == 1
    got = {f.key: str(f.value) for f in lib.entries[0].fields}

    def plain(s: str) -> str:
        s = s.replace("\\textbackslash{}", "")
        return "".join(ch for ch in s.replace("\\", "") if ch not in "{} \t\n")

    assert plain(got["title"]) == plain(title)


def test_an_empty_export_is_a_package_too(store_path: Path, tmp_path: Path) -> None:
    res = api.export(api.open_store(store_path), tmp_path / "e", api.Filters(interval=(1.0, 2.0)))
    assert res.records == 0
    for name in _tables(tmp_path / "e"):
        assert pq.read_table(tmp_path / "e" / f"{name}.parquet").num_rows == 0
    _library(tmp_path / "e")  # parses (the chart and nothing else)
    assert "0 records" in (tmp_path / "e" / "README.txt").read_text(encoding="utf-8")


cell_text = st.text(
    alphabet=st.sampled_from(list("ab1.,\"'=+-@\t\r\n eE;") + ["δ", "‰"]), max_size=8
)


@settings(max_examples=80, deadline=None)
@given(
    rows=st.lists(
        st.tuples(
            st.none() | cell_text,
            st.none() | st.floats(allow_nan=True, allow_infinity=True),
            st.none() | st.integers(min_value=-(2**31), max_value=2**31 - 1),
        ),
        max_size=12,
    ),
    lone=st.booleans(),
)
def test_csv_writer_gives_the_bytes_of_pythons_csv_module(
    tmp_path_factory: pytest.TempPathFactory, rows: list, lone: bool
) -> None:
    """The column-at-a-time CSV writer against the standard library's csv module on the same
    cells (text neutralised, floats as repr, integers as digits, nulls empty): csv.reader
    reads back every cell, and the bytes are csv.writer's — except that a carriage return
    inside a cell is always quoted (Python 3.11's writer leaves it bare with a "\n"
    terminator, which breaks the row for other readers)."""
    import io

    import pyarrow as pa
    from strata13.compile.export.package import neutralise, write_csv

    schema = pa.schema([("t", pa.string()), ("x", pa.float64()), ("n", pa.int32())])
    table = pa.Table.from_pylist([dict(zip(schema.names, r, strict=True)) for r in rows], schema)
    if lone:
        table = table.select(["t"])
    cells = [table.column_names] + [
        [
            ""
            if v is None
            else neutralise(v)
            if k == "t"
            else repr(float(v))
            if k == "x"
            else str(int(v))
            for k, v in row.items()
        ]
        for row in table.to_pylist()
    ]
    path = tmp_path_factory.mktemp("csv") / "t.csv"
    write_csv(table, path)
    text = path.read_bytes().decode("utf-8")  # no newline translation
    assert list(csv.reader(io.StringIO(text, newline=""))) == cells
    if not any("\r" in c for r in cells for c in r):
        ref = io.StringIO(newline="")
        csv.writer(ref, lineterminator="\n").writerows(cells)
        assert text == ref.getvalue()
