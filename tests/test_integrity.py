"""The compilation's integrity on the demo store, through the command line: `overlaps`
(probable duplicates between sources, and stored decisions on them), `correct` and
`corrections` (a user's fixes to published values, kept as data), and `coverage`.

Everything is invented demo data. The demo's later compilation (orvanne-compilation-2022)
re-publishes twelve Quillar Ridge samples (quillar-2011 QR-05 … QR-16 as Q5 … Q16) with
heights in metres and δ18O on VPDB, and declares that lineage; its Q11 lost the minus sign
of its δ13C (1.47 instead of −1.47). The `demo_store` fixture holds neither the demo's
correction nor its confirmed pairs.

External bases: the haversine formula on a sphere of radius 6371.0 km (closed form, common
convention); the IUPAC/CIAAW VSMOW→VPDB δ18O relation δ18O_VPDB = 0.97001·δ18O_VSMOW −
29.99 ‰ (Brand et al. 2014, Pure Appl. Chem. 86:425); point-in-polygon by shapely on the
demo's regions GeoJSON; counts by a pandas groupby. Expected numbers are computed here
from what `strata13 query` prints, never read back from the code under test.
"""

from __future__ import annotations

import csv
import io
import json
import math
import shutil
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from strata13.compile.demo import demo_folder

from tests.conftest import Ran, tree_bytes
from tests.conftest import run_cli as run

ORIGINAL = "quillar-2011"
REPUB = "orvanne-compilation-2022"
N_RECORDS = 143  # records of the demo store built by conftest (5 sheets + ties)
TOARCIAN = (184.2, 174.7)  # ICS chart v2024/12 (the store's chart), Ma
SHARED = range(5, 17)  # QR-05 … QR-16 re-published as Q5 … Q16
POSITION_TOL_M, VALUE_TOL = 0.5, 0.15  # the documented default tolerances
CURVE_ARGS = ("--interval", "Toarcian", "--by", "region", "--min-sections", "3")
CONFIRMED_SAMPLES = (5, 9, 11, 16)  # pairs the decisions file below confirms
REJECTED_SAMPLE = 6


def ok(*args: object) -> Ran:
    r = run(*args)
    assert r.code == 0, r.err
    assert "Traceback" not in r.err
    return r


def refused(code: int | tuple[int, ...], *args: object) -> Ran:
    r = run(*args)
    codes = code if isinstance(code, tuple) else (code,)
    assert r.code in codes, (r.code, r.out, r.err)
    assert "Traceback" not in r.err
    assert r.err.strip(), "a refusal says why on stderr"
    return r


def csv_of(*args: object) -> pd.DataFrame:
    return pd.read_csv(io.StringIO(ok(*args, "--format", "csv").out))


def query(store: Path, *filters: str) -> pd.DataFrame:
    return csv_of("query", *filters, "--store", store)


def pairs(store: Path, *opts: str) -> pd.DataFrame:
    return csv_of("overlaps", *opts, "--store", store)


def versions(store: Path) -> list[int]:
    out = ok("history", "--store", store).out
    return [int(line.split("\t")[0]) for line in out.splitlines() if line.split("\t")[0].isdigit()]


def copy_store(src: Path, dst: Path) -> Path:
    shutil.copytree(src, dst)
    return dst


def ids_by_sample(records: pd.DataFrame) -> dict[tuple[str, str], str]:
    """(source, sample) → record id (the demo has one replicate per sample)."""
    assert not records.duplicated(["source_id", "sample_id"]).any()
    return {
        (s, x): r
        for s, x, r in zip(records.source_id, records.sample_id, records.record_id, strict=True)
    }


def shared_pair(ids: dict[tuple[str, str], str], n: int) -> tuple[str, str]:
    """(original record, re-published record) of Quillar Ridge sample n."""
    return ids[(ORIGINAL, f"QR-{n:02d}")], ids[(REPUB, f"Q{n}")]


def haversine_km(lat1: float, lon1: float, lat2: float, lon2: float) -> float:
    """Great-circle distance on a sphere of radius 6371.0 km (haversine, closed form)."""
    p1, p2 = math.radians(lat1), math.radians(lat2)
    dp, dl = p2 - p1, math.radians(lon2 - lon1)
    h = math.sin(dp / 2) ** 2 + math.cos(p1) * math.cos(p2) * math.sin(dl / 2) ** 2
    return 2 * 6371.0 * math.asin(math.sqrt(h))


def fix_q11(store: Path, q11: str) -> None:
    """Restore Q11's lost minus sign through the CLI."""
    ok(
        "correct",
        q11,
        "d13c_carb",
        "-1.47",
        "--why",
        "minus sign lost in the compilation's table; the original gives -1.47",
        "--store",
        store,
    )


# ---------------------------------------------------------------------- shared fixtures


@pytest.fixture(scope="module")
def ro(demo_store_session: Path, tmp_path_factory: pytest.TempPathFactory) -> Path:
    """A private copy of the demo store for tests that only read (or must change nothing)."""
    return copy_store(demo_store_session, tmp_path_factory.mktemp("integrity_ro") / "c")


@pytest.fixture(scope="module")
def records(ro: Path) -> pd.DataFrame:
    """Every record of the demo store (record ids are stable across copies)."""
    return query(ro, "--keep-duplicates")


@pytest.fixture(scope="module")
def ids(records: pd.DataFrame) -> dict[tuple[str, str], str]:
    return ids_by_sample(records)


@pytest.fixture(scope="module")
def base_versions(ro: Path) -> list[int]:
    """The versions of the demo store as built (every copy starts with these)."""
    return versions(ro)


@pytest.fixture(scope="module")
def before_pairs(ro: Path) -> pd.DataFrame:
    return pairs(ro)


@pytest.fixture(scope="module")
def corrected(
    demo_store_session: Path,
    tmp_path_factory: pytest.TempPathFactory,
    ids: dict[tuple[str, str], str],
) -> tuple[Path, str, list[int], pd.DataFrame]:
    """A copy with Q11's minus sign restored: (store, Q11 id, versions after, records)."""
    store = copy_store(demo_store_session, tmp_path_factory.mktemp("integrity_fix") / "c")
    q11 = ids[(REPUB, "Q11")]
    fix_q11(store, q11)
    return store, q11, versions(store), query(store, "--keep-duplicates")


@pytest.fixture(scope="module")
def confirmed(
    corrected: tuple[Path, str, list[int], pd.DataFrame],
    tmp_path_factory: pytest.TempPathFactory,
    ids: dict[tuple[str, str], str],
) -> dict:
    """The corrected store, copied, with a decisions file stored: four pairs confirmed
    (one written with the re-publisher's record first) and one rejected; and what
    `query` prints then, with and without --keep-duplicates."""
    tmp = tmp_path_factory.mktemp("integrity_confirm")
    store = copy_store(corrected[0], tmp / "c")
    lines = ["record_a,record_b,decision,note"]
    for n in CONFIRMED_SAMPLES:
        a, b = shared_pair(ids, n)
        if n == 9:  # orientation in the file must not decide which record is left out
            a, b = b, a
        lines.append(f"{a},{b},confirm,same sample re-published")
    a, b = shared_pair(ids, REJECTED_SAMPLE)
    lines.append(f"{a},{b},Reject,kept apart on purpose")
    decisions = tmp / "decisions.csv"
    decisions.write_text("\n".join(lines) + "\n", encoding="utf-8")
    ran = ok("overlaps", "--confirm", decisions, "--store", store)
    return {
        "store": store,
        "ids": ids,
        "before": corrected[2],
        "after": versions(store),
        "ran": ran,
        "tmp": tmp,
        "default": query(store),
        "kept": query(store, "--keep-duplicates"),
    }


# --------------------------------------------------------------------------- 1. overlaps


def check_pairs(found: pd.DataFrame, records: pd.DataFrame, expected_samples: set[int]) -> None:
    """The pairs are exactly the re-published samples, checked against the records."""
    ids = ids_by_sample(records)
    assert len(found) == len(expected_samples)
    assert set(found.source_a) == {ORIGINAL} and set(found.source_b) == {REPUB}
    got = set(zip(found.record_a, found.record_b, strict=True))
    assert got == {shared_pair(ids, n) for n in expected_samples}
    # one-to-one: no record in two pairs
    assert found.record_a.is_unique and found.record_b.is_unique
    by_id = records.set_index("record_id")
    a, b = by_id.loc[found.record_a], by_id.loc[found.record_b]
    assert np.all(
        np.abs(a.position_m.to_numpy() - b.position_m.to_numpy()) <= POSITION_TOL_M + 1e-9
    )
    assert np.all(np.abs(a.d13c_carb.to_numpy() - b.d13c_carb.to_numpy()) <= VALUE_TOL + 1e-9)
    # the pair's printed positions and values are the records' own
    assert found.position_a_m.to_numpy() == pytest.approx(a.position_m.to_numpy())
    assert found.d13c_b.to_numpy() == pytest.approx(b.d13c_carb.to_numpy())
    for reason, (_, ra), (_, rb) in zip(found.reasons, a.iterrows(), b.iterrows(), strict=True):
        km = haversine_km(ra.lat, ra.lon, rb.lat, rb.lon)
        assert 0 < km < 5.0
        assert f"{km:.2f} km apart" in reason, reason
        assert f"declared lineage: {REPUB} re-publishes {ORIGINAL}" in reason, reason


def test_overlaps_before_the_minus_sign_is_fixed_leave_q11_out(
    ro: Path, records: pd.DataFrame, before_pairs: pd.DataFrame
) -> None:
    found = before_pairs
    check_pairs(found, records, set(SHARED) - {11})
    # Q11's published 1.47 is 2.94 ‰ from the original's −1.47: no pair, for a reason
    by = records.set_index(["source_id", "sample_id"])
    assert by.loc[(REPUB, "Q11"), "d13c_carb"] == pytest.approx(1.47)
    assert by.loc[(ORIGINAL, "QR-11"), "d13c_carb"] == pytest.approx(-1.47)
    # no other source takes part: asked for one, none is found (exit 0, said on stderr)
    assert "ystrel-cores-2021" in set(records.source_id)
    r = ok("overlaps", "--source", "ystrel-cores-2021", "--format", "csv", "--store", ro)
    assert len(pd.read_csv(io.StringIO(r.out))) == 0 and r.err.strip()


def test_overlaps_for_one_source_gives_the_same_pairs(ro: Path, before_pairs: pd.DataFrame) -> None:
    everything = before_pairs
    key = ["record_a", "record_b"]
    one = pairs(ro, "--source", ORIGINAL)
    assert sorted(map(tuple, one[key].to_numpy())) == sorted(map(tuple, everything[key].to_numpy()))


def test_overlaps_of_an_unknown_source_is_refused(ro: Path) -> None:
    before = tree_bytes(ro)
    r = refused((1, 2), "overlaps", "--source", "nope", "--store", ro)
    assert "nope" in r.err and r.out == ""
    assert tree_bytes(ro) == before


def test_overlaps_after_the_correction_pair_all_twelve(
    corrected: tuple[Path, str, list[int], pd.DataFrame],
) -> None:
    store, q11, _, recs = corrected
    found = pairs(store)
    check_pairs(found, recs, set(SHARED))
    assert q11 in set(found.record_b)
    assert (found.decision.isna() | (found.decision == "")).all()  # nothing decided yet


# ---------------------------------------------------------------- 2. confirmed duplicates


def test_confirm_stores_the_decisions_in_one_version(confirmed: dict) -> None:
    before, after = confirmed["before"], confirmed["after"]
    assert after[:-1] == before and len(after) == len(before) + 1
    assert "4 confirmed and 1 rejected" in confirmed["ran"].err
    # the listing shows each stored decision beside its pair
    listed = pairs(confirmed["store"])
    ids = confirmed["ids"]
    decided = {
        (a, b): d
        for a, b, d in zip(
            listed.record_a, listed.record_b, listed.decision.fillna(""), strict=True
        )
    }
    for n in SHARED:
        want = "confirm" if n in CONFIRMED_SAMPLES else "reject" if n == REJECTED_SAMPLE else ""
        assert decided[shared_pair(ids, n)] == want, n


def test_confirmed_duplicates_leave_the_republished_records_out_of_queries(confirmed: dict) -> None:
    store, ids = confirmed["store"], confirmed["ids"]
    dropped = {shared_pair(ids, n)[1] for n in CONFIRMED_SAMPLES}
    default, kept = confirmed["default"], confirmed["kept"]
    assert len(kept) == N_RECORDS
    assert len(default) == N_RECORDS - len(CONFIRMED_SAMPLES)
    assert set(kept.record_id) - set(default.record_id) == dropped
    assert set(kept.set_index("record_id").loc[sorted(dropped), "source_id"]) == {REPUB}
    # the rejected pair drops nothing; the originals of confirmed pairs stay
    for n in (*CONFIRMED_SAMPLES, REJECTED_SAMPLE):
        assert shared_pair(ids, n)[0] in set(default.record_id)
    assert set(shared_pair(ids, REJECTED_SAMPLE)) <= set(default.record_id)
    # nothing is deleted: the records view over sql still holds every record
    n = csv_of("sql", "SELECT count(*) AS n FROM records", "--store", store)
    assert int(n.n.iloc[0]) == N_RECORDS


def test_confirmed_duplicates_leave_curves_and_exports(confirmed: dict) -> None:
    store, ids, tmp = confirmed["store"], confirmed["ids"], confirmed["tmp"]
    dropped = {shared_pair(ids, n)[1] for n in CONFIRMED_SAMPLES}
    kept = confirmed["kept"].set_index("record_id")
    older, younger = TOARCIAN  # so each dropped record counts in the Toarcian curve
    assert kept.loc[sorted(dropped), "age_ma"].between(younger, older).all()
    assert kept.loc[sorted(dropped), "d13c_carb"].notna().all()
    # (--boots only sets the band's bootstrap draws; kept small for speed)
    ok("curve", "--out", tmp / "once", *CURVE_ARGS, "--boots", "10", "--store", store)
    ok(
        "curve",
        "--out",
        tmp / "both",
        *CURVE_ARGS,
        "--boots",
        "10",
        "--keep-duplicates",
        "--store",
        store,
    )
    once = json.loads((tmp / "once" / "curve_manifest.json").read_text(encoding="utf-8"))
    both = json.loads((tmp / "both" / "curve_manifest.json").read_text(encoding="utf-8"))
    assert both["samples"] - once["samples"] == len(CONFIRMED_SAMPLES)
    assert once["filters"]["keep_duplicates"] is False
    assert both["filters"]["keep_duplicates"] is True
    ok("export", "--out", tmp / "export", "--store", store)
    exported = pd.read_csv(tmp / "export" / "records.csv")
    assert len(exported) == N_RECORDS - len(CONFIRMED_SAMPLES)
    assert not dropped & set(exported.record_id)
    assert set(exported.record_id) == set(confirmed["default"].record_id)


def test_decisions_naming_an_unknown_record_are_refused_and_change_nothing(
    ro: Path, records: pd.DataFrame, ids: dict[tuple[str, str], str], tmp_path: Path
) -> None:
    a, b = shared_pair(ids, 5)
    ghost = "0123456789abcdef0123"
    assert ghost not in set(records.record_id)
    f = tmp_path / "decisions.csv"
    f.write_text(
        f"record_a,record_b,decision,note\n{a},{b},confirm,\n{a},{ghost},confirm,\n",
        encoding="utf-8",
    )
    before = tree_bytes(ro)
    r = refused(1, "overlaps", "--confirm", f, "--store", ro)
    assert ghost in r.err
    assert tree_bytes(ro) == before


def test_a_bad_decision_word_is_exit_2_naming_the_line(
    ro: Path, ids: dict[tuple[str, str], str], tmp_path: Path
) -> None:
    f = tmp_path / "decisions.csv"
    (a, b), (c, d) = shared_pair(ids, 5), shared_pair(ids, 7)
    f.write_text(
        f"record_a,record_b,decision,note\n{a},{b},confirm,\n{c},{d},perhaps,\n", encoding="utf-8"
    )
    before = tree_bytes(ro)
    r = refused(2, "overlaps", "--confirm", f, "--store", ro)
    assert "line 3" in r.err and "perhaps" in r.err
    assert tree_bytes(ro) == before


# ---------------------------------------------------------------------- 3. corrections


def test_a_correction_is_one_version_and_keeps_the_published_value(
    corrected: tuple[Path, str, list[int], pd.DataFrame], base_versions: list[int]
) -> None:
    _, q11, after, recs = corrected
    assert after[:-1] == base_versions and len(after) == len(base_versions) + 1
    recs = recs[recs.source_id == REPUB].set_index("record_id")
    assert recs.loc[q11, "d13c_carb"] == pytest.approx(-1.47)
    assert recs.loc[q11, "d13c_carb_reported"] == pytest.approx(1.47)  # as published
    # the other re-published records are untouched
    others = recs.drop(index=q11)
    assert (others.d13c_carb == others.d13c_carb_reported).all()


def test_explain_shows_reported_corrected_harmonised(
    corrected: tuple[Path, str, list[int], pd.DataFrame],
) -> None:
    store, q11, _, _ = corrected
    text = ok("explain", q11, "--store", store).out
    block = text[text.index("d13c_carb") :]
    block = block[: block.index("d18o_carb")] if "d18o_carb" in block else block
    block = block.replace("−", "-")
    head = block.splitlines()[0]
    # the headline: as published → the value in use
    assert "reported 1.47" in head and head.rstrip().split("→")[-1].lstrip().startswith("-1.47")
    assert "minus sign lost" in block  # the reason travels with the step
    lines = [ln.strip() for ln in block.splitlines()]
    steps = [ln.split(" ", 1)[1] for ln in lines if ln[:2] in {f"{k}." for k in range(1, 10)}]
    # the correction is the first step, applied to the published value
    assert len(steps) >= 2 and steps[0].startswith("correction")
    assert "1.47" in steps[0] and "-1.47" in steps[0]
    assert not any(s.startswith("correction") for s in steps[1:])


def test_corrections_listing(corrected: tuple[Path, str, list[int], pd.DataFrame]) -> None:
    store, q11, _, _ = corrected
    listed = csv_of("corrections", "--store", store)
    assert len(listed) == 1
    row = listed.iloc[0]
    assert row.record_id == q11 and row.field == "d13c_carb"
    assert float(row.published) == pytest.approx(1.47)
    assert float(row.corrected) == pytest.approx(-1.47)
    assert "minus sign lost" in row.why
    assert row.status == "applied" and row.sample_id == "Q11"
    assert len(csv_of("corrections", "--source", ORIGINAL, "--store", store)) == 0


def test_a_correction_survives_an_edited_reingest_and_is_orphaned_when_its_record_goes(
    demo_store: Path, demo_sheets: Path, ids: dict[tuple[str, str], str], tmp_path: Path
) -> None:
    q11 = ids[(REPUB, "Q11")]
    fix_q11(demo_store, q11)
    edited = tmp_path / "edited"
    edited.mkdir()
    for ext in ("csv", "toml"):
        shutil.copy(demo_sheets / f"orvanne_compilation_2022.{ext}", edited)
    sheet, mapping = (
        edited / "orvanne_compilation_2022.csv",
        edited / "orvanne_compilation_2022.toml",
    )
    rows = list(csv.reader(sheet.read_text(encoding="utf-8").splitlines()))
    head, body = rows[0], rows[1:]
    col = head.index("d13C (permil VPDB)")
    q12 = next(r for r in body if r[1] == "Q12")
    assert float(q12[col]) == pytest.approx(-1.55)
    q12[col] = "-1.65"  # the authors' erratum on another row

    def write(lines: list[list[str]]) -> None:
        buf = io.StringIO()
        csv.writer(buf, lineterminator="\n").writerows([head, *lines])
        sheet.write_text(buf.getvalue(), encoding="utf-8")

    write(body)
    ok("ingest", sheet, "--map", mapping, "--store", demo_store)
    recs = query(demo_store, "--source", REPUB).set_index("sample_id")
    assert recs.loc["Q12", "d13c_carb"] == pytest.approx(-1.65)  # the edit landed
    assert recs.loc["Q11", "record_id"] == q11
    assert recs.loc["Q11", "d13c_carb"] == pytest.approx(-1.47)  # the fix still applies
    assert recs.loc["Q11", "d13c_carb_reported"] == pytest.approx(1.47)
    assert list(csv_of("corrections", "--store", demo_store).status) == ["applied"]

    write([r for r in body if r[1] != "Q11"])  # the record vanishes
    r = ok("ingest", sheet, "--map", mapping, "--store", demo_store)
    assert "no longer" in r.err and "corrections" in r.err
    assert "Q11" not in set(query(demo_store, "--source", REPUB).sample_id)
    r = ok("corrections", "--format", "csv", "--store", demo_store)
    listed = pd.read_csv(io.StringIO(r.out))
    assert list(listed.record_id) == [q11] and list(listed.status) == ["orphaned"]
    assert "orphaned" in r.err


def test_a_position_correction_moves_the_record_and_its_age(
    demo_store: Path, records: pd.DataFrame
) -> None:
    recs = records[records.source_id == ORIGINAL].set_index("sample_id")
    qr11, qr12 = recs.loc["QR-11"], recs.loc["QR-12"]
    assert qr11.age_ma != pytest.approx(qr12.age_ma, abs=1e-3)
    # QR-11 put at QR-12's height: the section's age model must give it QR-12's age
    ok(
        "correct",
        qr11.record_id,
        "position",
        repr(float(qr12.position_m)),
        "--why",
        "height misprinted in the table; field notebook agrees with bed 12",
        "--store",
        demo_store,
    )
    after = query(demo_store, "--source", ORIGINAL).set_index("sample_id")
    assert after.loc["QR-11", "position_m"] == pytest.approx(qr12.position_m, abs=1e-9)
    assert after.loc["QR-11", "age_ma"] == pytest.approx(qr12.age_ma, abs=1e-9)
    assert after.loc["QR-12", "age_ma"] == pytest.approx(qr12.age_ma, abs=1e-9)
    assert after.loc["QR-11", "d13c_carb"] == pytest.approx(qr11.d13c_carb)  # only position


def test_corrections_from_a_file_land_in_one_version(
    demo_store: Path,
    records: pd.DataFrame,
    ids: dict[tuple[str, str], str],
    base_versions: list[int],
    tmp_path: Path,
) -> None:
    by = records.set_index("record_id")
    qr11, qr20 = ids[(ORIGINAL, "QR-11")], ids[(ORIGINAL, "QR-20")]
    q7 = ids[(REPUB, "Q7")]
    assert by.loc[qr11, "d18o_carb_scale"] == "VSMOW"
    assert by.loc[qr11, "d18o_carb_reported"] == pytest.approx(28.70)
    assert by.loc[q7, "lithology"] != "marl"
    f = tmp_path / "fixes.csv"
    f.write_text(
        "record_id,field,value,why\n"
        f"{qr11},d18o_carb,28.90,typing slip; lab notebook gives 28.90\n"
        f"{q7},lithology,marl,the compilation's note on Q7 says marl\n"
        f"{qr20},d13c_carb,2.26,digits swapped in the journal table\n",
        encoding="utf-8",
    )
    ok("correct", "--file", f, "--store", demo_store)
    assert versions(demo_store) == [*base_versions, base_versions[-1] + 1]
    after = query(demo_store, "--keep-duplicates").set_index("record_id")
    # reported (VSMOW, as published) → corrected (28.90 VSMOW) → harmonised (VPDB)
    assert after.loc[qr11, "d18o_carb_reported"] == pytest.approx(28.70)
    assert after.loc[qr11, "d18o_carb"] == pytest.approx(0.97001 * 28.90 - 29.99, abs=1e-9)
    assert after.loc[q7, "lithology"] == "marl"
    assert after.loc[qr20, "d13c_carb"] == pytest.approx(2.26)
    assert after.loc[qr20, "d13c_carb_reported"] == pytest.approx(by.loc[qr20, "d13c_carb"])
    text = ok("explain", qr11, "--store", demo_store).out
    block = text[text.index("d18o_carb") :]
    order = [block.index(w) for w in ("correction", "VSMOW → VPDB")]
    assert order == sorted(order)
    listed = csv_of("corrections", "--store", demo_store)
    assert set(zip(listed.record_id, listed.field, strict=True)) == {
        (qr11, "d18o_carb"),
        (q7, "lithology"),
        (qr20, "d13c_carb"),
    }
    assert set(listed.status) == {"applied"}


# ------------------------------------------------------------- 4. bad input for correct

WHY = "checked against the supplement"


@pytest.mark.parametrize(
    ("code", "args", "words"),
    [
        (1, ("{unknown}", "d13c_carb", "-1.2", "--why", WHY), ["no record"]),
        (2, ("{rec}", "d13c_crab", "-1.2", "--why", WHY), ["Did you mean", "d13c_carb"]),
        (2, ("{rec}", "d13c_carb", "minus one", "--why", WHY), ["number"]),
        (2, ("{rec}", "d13c_carb", "99", "--why", WHY), ["plausible"]),
        (2, ("{rec}", "d13c_carb", "-1.2", "--why", ""), ["--why"]),
        (2, ("{rec}", "d13c_carb", "-1.2", "--why", "typo"), ["--why"]),
        (2, ("{rec}", "d13c_carb", "-1.2"), ["--why"]),
        (2, ("{rec}", "component", "brachiopd", "--why", WHY), ["Did you mean", "brachiopod"]),
    ],
    ids=[
        "unknown-record",
        "unknown-field",
        "text-for-number",
        "implausible",
        "empty-why",
        "short-why",
        "no-why",
        "unknown-term",
    ],
)
def test_bad_corrections_are_refused_and_change_nothing(
    ro: Path,
    records: pd.DataFrame,
    ids: dict[tuple[str, str], str],
    code: int,
    args: tuple[str, ...],
    words: list[str],
) -> None:
    rec = ids[(ORIGINAL, "QR-11")]
    unknown = "fedcba9876543210fedc"
    assert not any(r.startswith(unknown[:6]) for r in records.record_id)
    argv = [a.format(rec=rec, unknown=unknown) for a in args]
    before = tree_bytes(ro)
    r = refused(code, "correct", *argv, "--store", ro)
    for w in words:
        assert w in r.err, (w, r.err)
    assert tree_bytes(ro) == before


# -------------------------------------------------------------------------- 5. coverage


def region_of(df: pd.DataFrame) -> pd.Series:
    """The demo region of each record, by shapely on the demo's GeoJSON."""
    from shapely.geometry import Point, shape

    fc = json.loads((demo_folder() / "regions.geojson").read_text(encoding="utf-8"))
    polys = [(f["properties"]["name"], shape(f["geometry"])) for f in fc["features"]]

    def name(lon: float, lat: float) -> str:
        hits = [n for n, p in polys if p.contains(Point(lon, lat))]
        assert len(hits) == 1, (lon, lat, hits)
        return hits[0]

    return pd.Series(
        [name(x, y) for x, y in zip(df["lon"], df["lat"], strict=True)], index=df.index
    )


def bin_index(age: np.ndarray, edges: np.ndarray) -> np.ndarray:
    """Bin of each age for edges old → young: young edge inclusive, old edge exclusive,
    the oldest edge inclusive (the documented rule of the curves)."""
    idx = np.full(age.size, -1)
    for i in range(edges.size - 1):
        old, young = edges[i], edges[i + 1]
        inside = (age >= young) & ((age < old) | ((i == 0) & (age == old)))
        idx[inside & (idx < 0)] = i
    return idx


@pytest.fixture(scope="module")
def coverage_csv(ro: Path) -> pd.DataFrame:
    return csv_of("coverage", "--interval", "Toarcian", "--bin-myr", "0.5", "--store", ro)


def test_the_demo_regions_are_the_boxes_the_test_assumes() -> None:
    from shapely.geometry import box, shape

    fc = json.loads((demo_folder() / "regions.geojson").read_text(encoding="utf-8"))
    got = {f["properties"]["name"]: shape(f["geometry"]) for f in fc["features"]}
    assert got["northern shelf"].equals(box(8, 45.5, 14, 49.5))
    assert got["southern basin"].equals(box(9, -44, 15, -40))


def test_coverage_counts_equal_a_pandas_groupby(
    records: pd.DataFrame, coverage_csv: pd.DataFrame
) -> None:
    # `query --format csv` of the whole store, cut to the Toarcian here (both ends inside)
    older, younger = TOARCIAN
    # coverage, like every synthesis, counts only records that passed their screens
    used = records.screen.isin(["pass", "warn"])
    recs = records[used & records.d13c_carb.notna() & records.age_ma.between(younger, older)]
    assert len(recs) < len(records)  # the cut does cut
    assert recs.source_id.nunique() >= 4 and len(recs) > 100
    # one row per sample: replicates averaged (their ages too)
    samp = recs.groupby(["source_id", "section_id", "sample_id"], as_index=False).agg(
        age_ma=("age_ma", "mean"),
        lon=("lon", "first"),
        lat=("lat", "first"),
        component=("component", "first"),
    )
    samp["group"] = region_of(samp)
    # round bins: the interval's ends and every multiple of 0.5 Myr between them
    inner = [k * 0.5 for k in range(int(younger / 0.5) - 1, int(older / 0.5) + 2)]
    edges = np.array(
        [older, *sorted((e for e in inner if younger < e < older), reverse=True), younger]
    )
    assert edges[1] == 184.0 and edges[-2] == 175.0
    samp["bin"] = bin_index(samp.age_ma.to_numpy(), edges)
    assert (samp.bin >= 0).all()
    samp["section"] = samp.source_id + "/" + samp.section_id
    want = samp.groupby(["bin", "group", "component"]).agg(
        n_samples=("sample_id", "size"), n_sections=("section", "nunique")
    )

    got = coverage_csv.copy()
    assert list(got.columns) == [
        "age_old",
        "age_young",
        "group",
        "component",
        "n_samples",
        "n_sections",
    ]
    # every (bin, region, component) cell is there, once, empty ones as zeros
    regions, comps = {"northern shelf", "southern basin"}, set(samp.component)
    assert set(got.group) == regions and set(got.component) == comps
    assert len(got) == (len(edges) - 1) * len(regions) * len(comps)
    assert not got.duplicated(["age_old", "group", "component"]).any()
    assert sorted(set(got.age_old)) == pytest.approx(sorted(edges[:-1]))
    width = dict(zip(edges[:-1], edges[:-1] - edges[1:], strict=True))
    assert np.allclose(got.age_old - got.age_young, got.age_old.map(width), atol=1e-6)
    got["bin"] = [int(np.argmin(np.abs(edges[:-1] - a))) for a in got.age_old]
    got = got.set_index(["bin", "group", "component"])
    full = want.reindex(got.index, fill_value=0)
    assert len(want) <= len(got) and set(want.index) <= set(got.index)
    assert (got.n_samples.to_numpy() == full.n_samples.to_numpy()).all()
    assert (got.n_sections.to_numpy() == full.n_sections.to_numpy()).all()
    assert got.n_samples.sum() == len(samp)
    assert (got.n_samples == 0).any() and (got.n_sections >= 3).any()


def test_coverage_writes_table_and_heatmap(
    ro: Path, coverage_csv: pd.DataFrame, tmp_path: Path
) -> None:
    import matplotlib.image

    out = tmp_path / "cov"
    r = ok("coverage", "--interval", "Toarcian", "--bin-myr", "0.5", "--out", out, "--store", ro)
    names = {p.name for p in out.iterdir()}
    assert {"coverage.csv", "coverage.png", "coverage.svg", "coverage.pdf"} <= names
    written = pd.read_csv(out / "coverage.csv")
    pd.testing.assert_frame_equal(
        written.reset_index(drop=True), coverage_csv.reset_index(drop=True), check_exact=False
    )
    img = matplotlib.image.imread(out / "coverage.png")
    assert img.ndim == 3 and img.shape[0] > 100 and img.shape[1] > 100
    assert float(np.ptp(img[..., :3])) > 0.5  # not a blank picture
    assert (out / "coverage.svg").read_text(encoding="utf-8").lstrip().startswith("<?xml")
    assert "coverage.png" in r.err


def test_coverage_by_an_unknown_grouping_is_exit_2(ro: Path) -> None:
    r = refused(2, "coverage", "--interval", "Toarcian", "--by", "planet", "--store", ro)
    assert "planet" in r.err


def test_confirmed_duplicates_are_counted_once_in_coverage(
    confirmed: dict, coverage_csv: pd.DataFrame
) -> None:
    # coverage_csv: the same store before any decision (Q11's fix moves no count)
    once = csv_of(
        "coverage", "--interval", "Toarcian", "--bin-myr", "0.5", "--store", confirmed["store"]
    )
    assert coverage_csv.n_samples.sum() - once.n_samples.sum() == len(CONFIRMED_SAMPLES)
    diff = coverage_csv.n_samples.to_numpy() - once.n_samples.to_numpy()
    assert (diff >= 0).all()


def test_coverage_keeps_every_store_region_when_a_filter_empties_one(ro: Path) -> None:
    got = csv_of(
        "coverage",
        "--interval",
        "Toarcian",
        "--bin-myr",
        "0.5",
        "--component",
        "brachiopod",
        "--store",
        ro,
    )
    assert set(got.group) == {"northern shelf", "southern basin"}
    assert (got[got.group == "southern basin"].n_samples == 0).all()
