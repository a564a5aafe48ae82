"""Synthetic, seeded benchmark data for strata13 (all values invented).

Two products, both under ``benchmarks/_data/`` (gitignored):

* an ingest sheet: an N-row, 20-column CSV with its mapping TOML, every row valid (unique
  section + sample + replicate, plausible values, ages that respect superposition), plus a
  200-row warm-up sheet of the same shape;
* a query store: a strata13 store holding N records, built cheaply by inserting Arrow tables
  with the full ``analyses`` schema in one ``Store.transaction()`` (the derived
  columns are filled the way derive would fill them: VPDB identity, reported ages, paleo
  pending, screens untested).

Products are cached: a ``stamp.json`` beside them records the generator version and the
parameters, and a product whose stamp matches is not rebuilt.

    python benchmarks/generate.py            # full sizes: 1 000 000 rows, 10 000 000 records
    python benchmarks/generate.py --quick    # 100 000 rows, 1 000 000 records
"""

from __future__ import annotations

import argparse
import json
import shutil
import sys
import time
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    import numpy as np
    import pyarrow as pa

GENERATOR_VERSION = "3"
HERE = Path(__file__).resolve().parent
DATA = HERE / "_data"
SEED = 13

FULL_ROWS, QUICK_ROWS = 1_000_000, 100_000
FULL_RECORDS, QUICK_RECORDS = 10_000_000, 1_000_000
WARMUP_ROWS = 200
RECORDS_PER_SECTION = 500  # query store: 250 samples x 2 replicates per section
STUDIED_SHARE = 0.15  # query store: share of sources inside STUDIED_BOX
STUDIED_BOX = (-20.0, 15.0, 45.0, 65.0)  # west, south, east, north (degrees)

# Invented vocabulary weights: every term is in the shipped vocabularies.
LITHOLOGIES = (
    ("limestone", 0.55),
    ("marl", 0.2),
    ("dolostone", 0.1),
    ("chalk", 0.1),
    ("calcareous shale", 0.05),
)
COMPONENTS = (("bulk", 0.7), ("micrite", 0.2), ("brachiopod", 0.07), ("belemnite", 0.03))
NOTES = (("", 0.96), ("re-run", 0.025), ("vein avoided", 0.01), ("weathered surface", 0.005))

# The sheet's 20 headers and how the mapping file maps each (all headers are invented).
SHEET_COLUMNS: tuple[tuple[str, str], ...] = (
    ("Section", '"section_id"'),
    ("Sample", '"sample_id"'),
    ("Rep", '"replicate"'),
    ("Height (m)", '{ field = "position", unit = "m" }'),
    ("d13C carb", '{ field = "d13c_carb", scale = "VPDB" }'),
    ("d18O carb", '{ field = "d18o_carb", scale = "VSMOW" }'),
    ("d13C org", '{ field = "d13c_org", scale = "VPDB" }'),
    ("Mn (ppm)", '{ field = "mn", unit = "ppm", detection_limit = 5 }'),
    ("Sr (ppm)", '{ field = "sr", unit = "ppm" }'),
    ("Fe (ppm)", '{ field = "fe", unit = "ppm" }'),
    ("Mg/Ca (mmol/mol)", '{ field = "mg_ca", unit = "mmol/mol" }'),
    ("CaCO3 (%)", '{ field = "caco3", unit = "%" }'),
    ("TOC (%)", '{ field = "toc", unit = "%" }'),
    ("Age (Ma)", '{ field = "age", unit = "Ma" }'),
    ("Lat", '"lat"'),
    ("Lon", '"lon"'),
    ("Lithology", '"lithology"'),
    ("Component", '"component"'),
    ("Unit", '"lithostrat_unit"'),
    ("Note", '"note"'),
)


@dataclass(frozen=True)
class Sheet:
    """One generated sheet: its CSV, its mapping file and its shape."""

    csv: Path
    mapping: Path
    rows: int
    columns: int


# ------------------------------------------------------------------ helpers


def _stamp_ok(folder: Path, params: dict[str, Any]) -> bool:
    stamp = folder / "stamp.json"
    if not stamp.is_file():
        return False
    try:
        return json.loads(stamp.read_text()) == params
    except json.JSONDecodeError:
        return False


def _write_stamp(folder: Path, params: dict[str, Any]) -> None:
    (folder / "stamp.json").write_text(json.dumps(params, indent=1) + "\n")


def _pick(rng: np.random.Generator, choices: tuple[tuple[str, float], ...], n: int) -> pa.Array:
    """n strings drawn from weighted choices, as an Arrow string array."""
    import numpy as np
    import pyarrow as pa

    terms = pa.array([t for t, _ in choices], pa.string())
    p = np.array([w for _, w in choices])
    idx = rng.choice(len(choices), size=n, p=p / p.sum())
    return terms.take(pa.array(idx))


def _num_text(values: np.ndarray, decimals: int) -> pa.Array:
    """Rounded numbers as cell text ('1.25', '600'); NaN becomes an empty cell."""
    import numpy as np
    import pyarrow as pa

    v = np.round(values, decimals)
    if decimals == 0:
        arr = pa.array(v, from_pandas=True).cast(pa.int64())
    else:
        arr = pa.array(v, from_pandas=True)
    return arr.cast(pa.string())


def _int_ids(index: np.ndarray, salt: int) -> pa.Array:
    """Distinct int64 values from distinct integers (a content-hash stand-in, like the
    record's row_hash): an odd multiplier modulo 2**64 is a bijection."""
    import numpy as np
    import pyarrow as pa

    with np.errstate(over="ignore"):
        x = (index.astype(np.uint64) + np.uint64(salt)) * np.uint64(0x9E3779B97F4A7C15)
    return pa.array(x.view(np.int64), type=pa.int64())


def _hex_ids(index: np.ndarray, width: int, salt: int) -> pa.Array:
    """Unique lowercase hex strings of ``width`` ≤ 16 digits from distinct integers.

    Multiplying by an odd constant modulo 2**64 is a bijection, so distinct indices give
    distinct ids (for width 16); shorter widths are hash-like and merely rarely equal.
    """
    import numpy as np
    import pyarrow as pa

    x = (index.astype(np.uint64) + np.uint64(salt)) * np.uint64(0x9E3779B97F4A7C15)
    x ^= x >> np.uint64(29)
    shifts = np.arange(width - 1, -1, -1, dtype=np.uint64) * np.uint64(4)
    nibbles = ((x[:, None] >> shifts[None, :]) & np.uint64(0xF)).astype(np.uint8)
    digits = np.frombuffer(b"0123456789abcdef", dtype=np.uint8)[nibbles]
    raw = np.ascontiguousarray(digits).view(f"S{width}").ravel()
    return pa.array(raw, pa.binary(width)).cast(pa.string())


# ------------------------------------------------------------------ the ingest sheet


def _sheet_table(
    n_rows: int, seed: int, prefix: str
) -> tuple[pa.Table, list[dict[str, Any]], list[dict[str, Any]]]:
    """The sheet as an Arrow table of cell texts, plus its localities and sections."""
    import numpy as np
    import pyarrow as pa
    import pyarrow.compute as pc

    rng = np.random.default_rng(seed)
    n_sections = max(2, n_rows // 2500)
    n_localities = max(1, n_sections // 2)
    loc_lat = np.round(rng.uniform(-60, 70, n_localities), 4)
    loc_lon = np.round(rng.uniform(-180, 180, n_localities), 4)
    sec_loc = np.arange(n_sections) % n_localities

    # samples with 1–3 replicates, until there are enough rows
    n_samples = int(n_rows / 1.5) + n_sections + 10
    reps = rng.choice([1, 2, 3], size=n_samples, p=[0.6, 0.3, 0.1])
    while reps.sum() < n_rows:  # pragma: no cover - the estimate above is generous
        reps = np.concatenate([reps, rng.choice([1, 2, 3], size=n_samples)])
        n_samples = len(reps)
    sample_sec = np.arange(n_samples) * n_sections // n_samples
    first = np.searchsorted(sample_sec, np.arange(n_sections))
    sample_k = np.arange(n_samples) - first[sample_sec] + 1
    step = np.round(rng.uniform(0.05, 0.4, n_samples), 2)
    height = np.cumsum(step)
    height = np.round(height - (height[first] - step[first])[sample_sec], 2)  # from 0 per section

    # one row per analysis (sample repeated by its replicates), cut to n_rows
    row_sample = np.repeat(np.arange(n_samples), reps)[:n_rows]
    row_start = np.repeat(np.cumsum(reps) - reps, reps)[:n_rows]
    replicate = np.arange(n_rows) - row_start + 1
    sec = sample_sec[row_sample]
    h = height[row_sample]

    # ages: younger upwards in every section, so superposition holds
    max_h = np.maximum.reduceat(height, first)
    rate = rng.uniform(0.002, 0.03, n_sections)  # Ma per metre
    base_age = max_h * rate + rng.uniform(1.0, 500.0, n_sections)
    age_sample = np.round(base_age[sample_sec] - height * rate[sample_sec], 3)
    age = age_sample[row_sample]

    phase = rng.uniform(0, 2 * np.pi, n_sections)
    level = rng.normal(1.0, 1.0, n_sections)
    d13c = level[sec] + 1.2 * np.sin(h / 40.0 + phase[sec]) + rng.normal(0, 0.15, n_rows)
    d13c = np.clip(d13c, -8, 8)
    d18o_vpdb = np.clip(rng.normal(-4.0, 1.2, n_rows), -12, 2)
    d18o_vsmow = 1.03092 * d18o_vpdb + 30.92  # the usual VPDB -> VSMOW conversion
    d13c_org = np.where(rng.random(n_rows) < 0.4, rng.normal(-27.0, 1.5, n_rows), np.nan)
    mn = np.exp(rng.normal(np.log(120), 0.8, n_rows))
    sr = np.exp(rng.normal(np.log(600), 0.5, n_rows))
    fe = np.exp(rng.normal(np.log(1500), 0.9, n_rows))
    mg_ca = np.clip(np.exp(rng.normal(np.log(15), 0.6, n_rows)), 0.1, 1500)
    caco3 = np.clip(100 - np.exp(rng.normal(np.log(8), 0.8, n_rows)), 5, 99.9)
    toc = np.where(
        rng.random(n_rows) < 0.5,
        np.clip(np.exp(rng.normal(np.log(0.3), 0.9, n_rows)), 0.01, 20),
        np.nan,
    )

    mn_text = _num_text(mn, 1)
    u = rng.random(n_rows)
    mn_text = pc.if_else(
        pa.array(u < 0.03),
        pa.scalar("<5"),
        pc.if_else(pa.array(u > 0.99), pa.scalar("bdl"), mn_text),
    )

    sec_names = pa.array([f"{prefix}{s + 1:04d}" for s in range(n_sections)], pa.string())
    sec_text = sec_names.take(pa.array(sec))
    sample_text = pc.binary_join_element_wise(
        sec_text, pc.cast(pa.array(sample_k[row_sample]), pa.string()), "-"
    )
    unit_names = pa.array(
        [f"Unit {chr(65 + i % 26)}{i // 26 + 1}" for i in range(26 * 4)], pa.string()
    )
    unit_idx = (sec * 7 + np.minimum((h // 60).astype(np.int64), 3)) % len(unit_names)
    lat_text = pa.array(loc_lat[sec_loc[sec]]).cast(pa.string())
    lon_text = pa.array(loc_lon[sec_loc[sec]]).cast(pa.string())

    cells = [
        sec_text,
        sample_text,
        pa.array(replicate).cast(pa.string()),
        _num_text(h, 2),
        _num_text(d13c, 2),
        _num_text(d18o_vsmow, 2),
        _num_text(d13c_org, 2),
        mn_text,
        _num_text(sr, 0),
        _num_text(fe, 0),
        _num_text(mg_ca, 2),
        _num_text(caco3, 1),
        _num_text(toc, 2),
        _num_text(age, 3),
        lat_text,
        lon_text,
        _pick(rng, LITHOLOGIES, n_rows),
        _pick(rng, COMPONENTS, n_rows),
        unit_names.take(pa.array(unit_idx)),
        _pick(rng, NOTES, n_rows),
    ]
    table = pa.table(cells, names=[h_ for h_, _ in SHEET_COLUMNS])
    localities = [
        {
            "id": f"{prefix.lower()}loc-{i + 1:03d}",
            "lat": float(loc_lat[i]),
            "lon": float(loc_lon[i]),
        }
        for i in range(n_localities)
    ]
    sections = [
        {
            "id": f"{prefix}{s + 1:04d}",
            "locality": localities[sec_loc[s]]["id"],
            "position_kind": "height",
            "datum": "base of section",
        }
        for s in range(n_sections)
    ]
    return table, localities, sections


def _mapping_text(
    source_id: str,
    csv_name: str,
    localities: list[dict[str, Any]],
    sections: list[dict[str, Any]],
    rows: int,
) -> str:
    lines = [
        "# Synthetic benchmark sheet made by benchmarks/generate.py; every value is invented.",
        "[source]",
        f'id = "{source_id}"',
        f'citation = "Synthetic benchmark data set, {rows} rows (invented, no real samples)."',
        "year = 2026",
        'kind = "in-house"',
        "",
        "[table]",
        f'file = "{csv_name}"',
        "header_row = 1",
        'decimal = "."',
        'delimiter = ","',
        "",
        "[columns]",
    ]
    lines += [f'"{h}" = {spec}' for h, spec in SHEET_COLUMNS]
    lines += [
        "",
        "[constants]",
        'age_time_scale = "ICS2024/12"',
        'mineralogy = "calcite"',
        'mn_basis = "leach"',
        'sr_basis = "leach"',
        'fe_basis = "leach"',
        "",
    ]
    for loc in localities:
        lines += [
            "[[localities]]",
            f'id = "{loc["id"]}"',
            f"lat = {loc['lat']}",
            f"lon = {loc['lon']}",
            "",
        ]
    for s in sections:
        lines += [
            "[[sections]]",
            f'id = "{s["id"]}"',
            f'locality = "{s["locality"]}"',
            f'position_kind = "{s["position_kind"]}"',
            f'datum = "{s["datum"]}"',
            "",
        ]
    return "\n".join(lines)


def make_sheet(
    n_rows: int, folder: Path, name: str = "sheet", seed: int = SEED, force: bool = False
) -> Sheet:
    """Write ``<folder>/<name>.csv`` and ``<name>.toml`` (cached by stamp)."""
    import pyarrow.csv as pcsv

    params = {
        "kind": "sheet",
        "version": GENERATOR_VERSION,
        "rows": n_rows,
        "seed": seed,
        "name": name,
    }
    folder.mkdir(parents=True, exist_ok=True)
    sheet = Sheet(folder / f"{name}.csv", folder / f"{name}.toml", n_rows, len(SHEET_COLUMNS))
    stamp_dir = folder / f".{name}"
    if (
        not force
        and _stamp_ok(stamp_dir, params)
        and sheet.csv.is_file()
        and sheet.mapping.is_file()
    ):
        return sheet
    prefix = "W" if name.startswith("warm") else "S"
    table, localities, sections = _sheet_table(n_rows, seed, prefix)
    with sheet.csv.open("wb") as fh:  # a plain header line, as a spreadsheet exports it
        fh.write((",".join(table.column_names) + "\n").encode("utf-8"))
        pcsv.write_csv(table, fh, pcsv.WriteOptions(include_header=False, quoting_style="none"))
    source_id = f"bench-{name}-{n_rows}".replace("_", "-")
    sheet.mapping.write_text(
        _mapping_text(source_id, sheet.csv.name, localities, sections, n_rows), encoding="utf-8"
    )
    stamp_dir.mkdir(exist_ok=True)
    _write_stamp(stamp_dir, params)
    return sheet


def ingest_inputs(n_rows: int, force: bool = False) -> tuple[Sheet, Sheet]:
    """The benchmark sheet of ``n_rows`` rows and the small warm-up sheet."""
    folder = DATA / f"ingest_{n_rows}"
    return (
        make_sheet(n_rows, folder, "sheet", force=force),
        make_sheet(WARMUP_ROWS, folder, "warmup", seed=SEED + 1, force=force),
    )


# ------------------------------------------------------------------ the query store


def _store_chunk(
    start: int,
    stop: int,
    rps: int,
    sec_lat: np.ndarray,
    sec_lon: np.ndarray,
    sec_age: np.ndarray,
    sec_rate: np.ndarray,
    sections_per_source: int,
    rng: np.random.Generator,
) -> pa.Table:
    """Records ``start``…``stop`` as an Arrow table with the full analyses schema."""
    import numpy as np
    import pyarrow as pa
    import pyarrow.compute as pc
    from strata13.compile.derive.steps import chain_id
    from strata13.schemas.records import ANALYSES, arrow_schema

    schema = arrow_schema(ANALYSES)
    n = stop - start
    r = np.arange(start, stop, dtype=np.int64)
    sec = r // rps
    src = sec // sections_per_source
    within = r % rps
    sample_k = within // 2 + 1
    replicate = within % 2 + 1
    height = np.round(sample_k * 0.25, 2)
    age = np.round(sec_age[sec] - height * sec_rate[sec], 3)

    def const(value: Any) -> pa.Array:
        return pa.array([value]).take(pa.array(np.zeros(n, dtype=np.int32)))

    def named(prefix: str, idx: np.ndarray, width: int) -> pa.Array:
        fmt = pc.utf8_lpad(pc.cast(pa.array(idx), pa.string()), width, "0")
        return pc.binary_join_element_wise(pa.scalar(prefix), fmt, "")

    sec_id = named("Q", sec + 1, 5)
    d13c = np.round(1.0 + 1.5 * np.sin(age / 3.0 + sec) + rng.normal(0, 0.2, n), 2)
    d18o = np.round(rng.normal(-4.0, 1.2, n), 2)
    vpdb_chain, _ = chain_id(
        [
            {
                "step": "reported on VPDB",
                "method": "identity (no correction)",
                "parameters": {},
                "source": "the authors' statement of scale",
                "size_permil": 0.0,
            }
        ]
    )
    cols: dict[str, pa.Array] = {
        "record_id": _hex_ids(r, 16, 0x51),
        "source_id": named("bench-q-", src + 1, 4),
        "locality_id": named("qloc-", sec + 1, 5),
        "section_id": sec_id,
        "sample_id": pc.binary_join_element_wise(
            sec_id, pc.cast(pa.array(sample_k), pa.string()), "-"
        ),
        "replicate": pa.array(replicate),
        "lat": pa.array(sec_lat[sec]),
        "lon": pa.array(sec_lon[sec]),
        "position_m": pa.array(height),
        "position_kind": const("height"),
        "lithology": _pick(rng, LITHOLOGIES, n),
        "component": _pick(rng, COMPONENTS, n),
        "mineralogy": const("calcite"),
        "d13c_carb_reported": pa.array(d13c),
        "d13c_carb_scale": const("VPDB"),
        "d13c_carb": pa.array(d13c),
        "d13c_carb_chain": const(vpdb_chain),
        "d13c_carb_status": const("harmonised"),
        "d18o_carb_reported": pa.array(d18o),
        "d18o_carb_scale": const("VPDB"),
        "d18o_carb": pa.array(d18o),
        "d18o_carb_chain": const(vpdb_chain),
        "d18o_carb_status": const("harmonised"),
        "mn_ppm": pa.array(np.round(np.exp(rng.normal(np.log(120), 0.8, n)), 1)),
        "mn_basis": const("leach"),
        "sr_ppm": pa.array(np.round(np.exp(rng.normal(np.log(600), 0.5, n)), 0)),
        "sr_basis": const("leach"),
        "age_reported_ma": pa.array(age),
        "age_reported_scale": const("ICS2024/12"),
        "age_ma": pa.array(age),
        "age_basis": const("reported"),
        "time_scale": const("ICS2024/12"),
        "age_status": const("dated"),
        "paleo_status": const("pending: no rotation model in the store"),
        "screen": const("untested"),
        "sheet": const("synthetic.csv"),
        "sheet_row": pa.array(within + 2),
        "row_hash": _int_ids(r, 0x77),
    }
    arrays = [cols[f.name].cast(f.type) if f.name in cols else pa.nulls(n, f.type) for f in schema]
    return pa.Table.from_arrays(arrays, schema=schema)


def make_store(
    n_records: int,
    folder: Path | None = None,
    seed: int = SEED,
    force: bool = False,
    log: Any = None,
) -> Path:
    """A strata13 store of ``n_records`` synthetic records, committed in one transaction."""
    import numpy as np
    import pyarrow as pa
    from strata13.compile import api
    from strata13.schemas.fields import SCHEMA_VERSION
    from strata13.schemas.records import SOURCES, arrow_schema

    say = log or (lambda _msg: None)
    folder = folder or DATA / f"store_{n_records}"
    params = {"kind": "store", "version": GENERATOR_VERSION, "records": n_records, "seed": seed}
    stamp_dir = folder.parent / f".{folder.name}"
    if not force and _stamp_ok(stamp_dir, params) and (folder / "strata13-store.json").is_file():
        return folder
    if folder.exists():
        shutil.rmtree(folder)
    shutil.rmtree(stamp_dir, ignore_errors=True)
    rng = np.random.default_rng(seed)
    rps, sections_per_source = RECORDS_PER_SECTION, 10
    n_sections = -(-n_records // rps)
    n_sources = -(-n_sections // sections_per_source)
    # each source works one region and one age window; its sections scatter around it.
    # A share of the sources cluster in one well-studied (invented) box, as compilations do.
    src_lat = rng.uniform(-60, 70, n_sources)
    src_lon = rng.uniform(-180, 180, n_sources)
    studied = rng.random(n_sources) < STUDIED_SHARE
    src_lat[studied] = rng.uniform(STUDIED_BOX[1], STUDIED_BOX[3], studied.sum())
    src_lon[studied] = rng.uniform(STUDIED_BOX[0], STUDIED_BOX[2], studied.sum())
    src_age = rng.uniform(5, 540, n_sources)
    owner = np.arange(n_sections) // sections_per_source
    sec_lat = np.round(np.clip(src_lat[owner] + rng.normal(0, 3, n_sections), -89, 89), 4)
    sec_lon = np.round((src_lon[owner] + rng.normal(0, 4, n_sections) + 180) % 360 - 180, 4)
    sec_rate = rng.uniform(0.005, 0.02, n_sections)  # Ma per metre; top ≥ 0 Ma below
    sec_age = src_age[owner] + rng.uniform(0, 15, n_sections) + (rps // 2) * 0.25 * sec_rate

    store = api.init_store(folder)
    chunk = 1_000_000
    t0 = time.perf_counter()
    with store.transaction("ingest", "benchmark store") as tx:
        for start in range(0, n_records, chunk):
            stop = min(n_records, start + chunk)
            table = _store_chunk(
                start, stop, rps, sec_lat, sec_lon, sec_age, sec_rate, sections_per_source, rng
            )
            tx.insert("analyses", table)
            say(f"  store: {stop:,} / {n_records:,} records ({time.perf_counter() - t0:.0f} s)")
        counts = np.bincount(
            np.arange(n_records) // rps // sections_per_source, minlength=n_sources
        )
        sources = pa.Table.from_pylist(
            [
                {
                    "source_id": f"bench-q-{j + 1:04d}",
                    "citation": "Synthetic benchmark source (invented).",
                    "year": 2026,
                    "kind": "in-house",
                    "file_name": "synthetic.csv",
                    "n_records": int(counts[j]),
                    "ingested_version": 2,
                    "schema_version": SCHEMA_VERSION,
                }
                for j in range(n_sources)
            ],
            schema=arrow_schema(SOURCES),
        )
        tx.insert("sources", sources)
        tx.record({"records": n_records, "sources": n_sources}, "synthetic")
    stamp_dir.mkdir(parents=True, exist_ok=True)
    _write_stamp(stamp_dir, params)
    return folder


# ------------------------------------------------------------------ command line


def main(argv: list[str] | None = None) -> int:
    """Generate the benchmark inputs (full or --quick sizes)."""
    p = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    p.add_argument("--quick", action="store_true", help="smaller sizes for a smoke run")
    p.add_argument("--what", default="sheet,store", help="sheet, store or both (comma list)")
    p.add_argument("--force", action="store_true", help="rebuild even when cached")
    args = p.parse_args(argv)
    what = {w.strip() for w in args.what.split(",") if w.strip()}
    rows = QUICK_ROWS if args.quick else FULL_ROWS
    records = QUICK_RECORDS if args.quick else FULL_RECORDS
    if "sheet" in what:
        t = time.perf_counter()
        sheet, _ = ingest_inputs(rows, force=args.force)
        print(
            f"sheet: {sheet.csv} ({sheet.rows:,} rows x {sheet.columns} columns, "
            f"{sheet.csv.stat().st_size / 1e6:.0f} MB) in {time.perf_counter() - t:.1f} s"
        )
    if "store" in what:
        t = time.perf_counter()
        path = make_store(records, force=args.force, log=print)
        print(f"store: {path} ({records:,} records) in {time.perf_counter() - t:.1f} s")
    return 0


if __name__ == "__main__":
    sys.exit(main())
