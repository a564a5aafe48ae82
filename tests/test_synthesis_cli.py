"""`strata13 curve`, `strata13 excursion` and `strata13 export --with-curve` on the demo
store: the files and their manifest, the bins against a pandas groupby of `strata13 query`,
the invented excursion's shape, byte-for-byte repeats, the seed, age draws and robustness,
the grouping (component · setting, region, organic δ13C, merged on request), the excursion
tables, and bad requests.

Everything here is invented demo data: at least six sections (at least three in 'northern
shelf', three cores in 'southern basin') across an invented negative δ13C excursion near
183.0 Ma, dipping from about +1.5 ‰ to about −2 ‰. The expected numbers are computed in the
tests with pandas, numpy and shapely (outside the project) from what `strata13 query`
prints; the rules they follow are the documented ones (replicates averaged first; bins hold
ages from the young edge, inclusive, to the old edge, exclusive, the oldest edge inclusive;
with ``--weight samples`` a bin's median is pandas' median; with ``--weight sections`` its
mean is the mean of the section means; the default excursion baseline is the median of the
oldest 20 % of a section's samples, at least three).
"""

from __future__ import annotations

import hashlib
import io
import json
import math
import re
import shutil
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from strata13.compile import api
from strata13.compile.demo import demo_folder

from tests.conftest import Ran, tree_bytes
from tests.conftest import run_cli as run

TOARCIAN = (184.2, 174.7)  # ICS chart v2024/12 (the store's chart), Ma
CURVE_FILES = {"bins.csv", "curve.csv", "curve.png", "curve.svg", "curve.pdf"}
REGION_ARGS = ("--interval", "Toarcian", "--by", "region", "--bin-myr", "0.25")
SEP = " · "  # the default group label: "component · setting"


def ok(*args: object) -> Ran:
    r = run(*args)
    assert r.code == 0, r.err
    assert "Traceback" not in r.err
    return r


def sha(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def svg_text(path: Path) -> str:
    """The text drawn in an SVG: with text as paths, matplotlib keeps each string as a
    comment beside its glyphs; plain <text> elements are taken too."""
    raw = path.read_text(encoding="utf-8")
    return "\n".join(
        re.findall(r"<!-- (.*?) -->", raw) + re.findall(r"<text[^>]*>(.*?)</text>", raw)
    )


def folder_bytes(folder: Path) -> dict[str, bytes]:
    return {
        str(p.relative_to(folder)): p.read_bytes() for p in sorted(folder.rglob("*")) if p.is_file()
    }


def query(store: Path, *filters: str) -> pd.DataFrame:
    r = ok("query", *filters, "--format", "csv", "--store", store)
    return pd.read_csv(io.StringIO(r.out))


def samples(records: pd.DataFrame, value: str = "d13c_carb") -> pd.DataFrame:
    """One row per sample: the mean of its replicates' ``value`` (pandas)."""
    have = records[records[value].notna()]
    key = ["source_id", "section_id", "sample_id"]
    out = have.groupby(key, as_index=False).agg(
        value=(value, "mean"),
        age_ma=("age_ma", "first"),
        lon=("lon", "first"),
        lat=("lat", "first"),
        component=("component", "first"),
        setting=("setting", "first"),
        position_m=("position_m", "first"),
        position_kind=("position_kind", "first"),
    )
    return out[out["age_ma"].notna()].reset_index(drop=True)


def region_of(df: pd.DataFrame) -> pd.Series:
    """The demo region each sample lies in, by shapely on the demo's GeoJSON."""
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
    """Bin of each age for edges old -> young: young edge inclusive, old edge exclusive,
    the oldest edge inclusive."""
    idx = np.full(age.size, -1)
    for i in range(edges.size - 1):
        old, young = edges[i], edges[i + 1]
        inside = (age >= young) & ((age < old) | ((i == 0) & (age == old)))
        idx[inside & (idx < 0)] = i
    return idx


def manifest(folder: Path, name: str = "curve_manifest.json") -> dict:
    return json.loads((folder / name).read_text(encoding="utf-8"))


# ---------------------------------------------------------------------- shared fixtures


@pytest.fixture(scope="module")
def store(demo_store_session: Path, tmp_path_factory: pytest.TempPathFactory) -> Path:
    """One private copy of the demo store for the tests of this module that only read."""
    dst = tmp_path_factory.mktemp("synthesis") / "compilation"
    shutil.copytree(demo_store_session, dst)
    return dst


@pytest.fixture(scope="module")
def outs(tmp_path_factory: pytest.TempPathFactory) -> Path:
    return tmp_path_factory.mktemp("synthesis_out")


@pytest.fixture(scope="module")
def toarcian(store: Path) -> pd.DataFrame:
    """The Toarcian records as `strata13 query --format csv` prints them."""
    # the records a synthesis uses by default: failed and untested ones stay out
    return query(store, "--interval", "Toarcian", "--screened", "pass,warn")


@pytest.fixture(scope="module")
def region_curve(store: Path, outs: Path) -> tuple[Path, Ran]:
    """`curve --interval Toarcian --by region --bin-myr 0.25`, defaults otherwise."""
    out = outs / "region"
    return out, ok("curve", "--out", out, *REGION_ARGS, "--store", store)


@pytest.fixture(scope="module")
def banded(store: Path, outs: Path) -> tuple[Path, Ran]:
    """As region_curve with --min-sections 3 (the demo's southern basin has three cores, so
    the default of five hides its band) and --robustness."""
    out = outs / "banded"
    return out, ok(
        "curve", "--out", out, *REGION_ARGS, "--min-sections", "3", "--robustness", "--store", store
    )


# ------------------------------------------------------------------- 1. files, manifest


def test_curve_writes_its_files_and_a_manifest_of_every_parameter(
    store: Path, region_curve: tuple[Path, Ran]
) -> None:
    out, ran = region_curve
    assert {p.name for p in out.iterdir()} == CURVE_FILES | {"curve_manifest.json"}
    m = manifest(out)
    p = m["parameters"]
    assert (
        p["span"],
        p["boots"],
        p["seed"],
        p["weight"],
        p["bin_myr"],
        p["by"],
        p["age_draws"],
        p["min_sections"],
        p["isotope"],
        p["allow_mixed"],
    ) == (0.3, 200, 0, "sections", 0.25, "region", 0, 5, "carb", False)
    # the filters as given and as numbers on the store's chart
    iv = m["filters"]["interval"]
    assert iv["given"] == "Toarcian"
    assert (iv["older_ma"], iv["younger_ma"]) == pytest.approx(TOARCIAN)
    assert m["filters"]["screened"] == "pass,warn"  # syntheses leave failed data out
    # the store version, time scale and screening rule set of the store read
    s = api.open_store(store)
    settings = s.settings()
    assert m["store_version"] == api.history(s)[-1].version
    assert m["time_scale"] == settings["time_scale"] == "ICS2024/12"
    rules = m["screening_rules"]
    assert re.fullmatch(r"[0-9a-f]{64}", rules["sha256"])
    assert rules["sha256"] == settings["screen_rules_sha256"]
    # every file with its sha256, and the sums are those of the files
    listed = {f["path"]: f["sha256"] for f in m["files"]}
    assert set(listed) == CURVE_FILES
    for name, digest in listed.items():
        assert sha(out / name) == digest, name
    # the CLI says where it wrote and which version it read, on stderr; no data on stdout
    assert ran.out == ""
    assert f"store version {m['store_version']}" in ran.err


# ------------------------------------------------------------------- 2. bins vs pandas


def _expected_bins(smp: pd.DataFrame, edges: np.ndarray) -> pd.DataFrame:
    smp = smp.assign(group=region_of(smp), bin=bin_index(smp["age_ma"].to_numpy(float), edges))
    assert (smp["bin"] >= 0).all()
    return smp


def _edges_from(bins: pd.DataFrame, smp: pd.DataFrame, width: float) -> np.ndarray:
    """Round bins: the interval's ends (the Toarcian's base and top) and every multiple of
    ``width`` between them; each group's bins (those holding samples) are consecutive
    pairs of these edges (the CSV rounds them to 6 significant digits)."""
    older, younger = TOARCIAN
    inner = [k * width for k in range(int(younger / width) - 1, int(older / width) + 2)]
    edges = np.array(
        [older, *sorted((e for e in inner if younger < e < older), reverse=True), younger]
    )
    pairs = {(round(a, 3), round(b, 3)) for a, b in zip(edges[:-1], edges[1:], strict=True)}
    for g, part in bins.groupby("group"):
        got = {
            (round(a, 3), round(b, 3))
            for a, b in zip(part["age_old"], part["age_young"], strict=True)
        }
        assert got <= pairs, g
    assert smp["age_ma"].between(younger, older).all()
    return edges


def test_bins_count_samples_and_sections_like_a_pandas_groupby(
    region_curve: tuple[Path, Ran], toarcian: pd.DataFrame
) -> None:
    out, _ = region_curve
    bins = pd.read_csv(out / "bins.csv")
    smp = samples(toarcian)
    assert manifest(out)["samples"] == len(smp)
    edges = _edges_from(bins, smp, 0.25)
    smp = _expected_bins(smp, edges)
    assert set(bins["group"]) == set(smp["group"]) == {"northern shelf", "southern basin"}
    for g, part in bins.groupby("group"):
        mine = smp[smp["group"] == g]
        n = mine.groupby("bin").size().reindex(range(len(part)), fill_value=0)
        secs = (
            mine.groupby("bin")[["source_id", "section_id"]]
            .apply(lambda d: len(d.drop_duplicates()))
            .reindex(range(len(part)), fill_value=0)
        )
        assert part["n_samples"].tolist() == n.tolist(), g
        assert part["n_sections"].tolist() == secs.tolist(), g
        # sections weigh equally: a bin's mean is the mean of its section means
        sec_means = mine.groupby(["bin", "source_id", "section_id"])["value"].mean()
        mean = sec_means.groupby(level="bin").mean().reindex(range(len(part)))
        np.testing.assert_allclose(
            part["mean"].to_numpy(float), mean.to_numpy(float), rtol=1e-5, atol=1e-6
        )


def test_sample_weighted_bin_medians_are_pandas_medians(
    store: Path, outs: Path, toarcian: pd.DataFrame
) -> None:
    out = outs / "by_samples"
    ok("curve", "--out", out, *REGION_ARGS, "--weight", "samples", "--boots", "0", "--store", store)
    bins = pd.read_csv(out / "bins.csv")
    smp = samples(toarcian)
    smp = _expected_bins(smp, _edges_from(bins, smp, 0.25))
    for g, part in bins.groupby("group"):
        mine = smp[smp["group"] == g].groupby("bin")["value"]
        full = range(len(part))
        np.testing.assert_allclose(
            part["median"].to_numpy(float),
            mine.median().reindex(full).to_numpy(float),
            rtol=1e-5,
            atol=1e-6,
        )
        np.testing.assert_allclose(
            part["mean"].to_numpy(float),
            mine.mean().reindex(full).to_numpy(float),
            rtol=1e-5,
            atol=1e-6,
        )
        np.testing.assert_allclose(
            part["q75"].to_numpy(float),
            mine.quantile(0.75).reindex(full).to_numpy(float),
            rtol=1e-5,
            atol=1e-6,
        )
    assert manifest(out)["parameters"]["weight"] == "samples"


INVENTED_REPLICATES = """\
Section,Sample,Rep,Height (m),d13C,Age (Ma)
TR-1,TR-01,1,0.5,1.40,183.9
TR-1,TR-01,2,0.5,1.60,183.9
TR-1,TR-02,1,1.5,1.20,183.6
TR-1,TR-03,1,2.5,-1.00,183.1
TR-1,TR-03,2,2.5,-1.60,183.1
TR-1,TR-03,3,2.5,-1.30,183.1
TR-1,TR-04,1,3.5,0.50,182.7
TR-1,TR-05,1,4.5,1.90,182.3
TR-1,TR-05,2,4.5,2.10,182.3
"""

INVENTED_REPLICATES_MAP = """\
# Invented replicate analyses (a test fixture).
[source]
id = "test-replicates-2024"
citation = "Tester, T. 2024. Invented replicate analyses. Invented Test Reports 1."
year = 2024
kind = "in-house"

[table]
file = "reps.csv"

[columns]
"Section" = "section_id"
"Sample" = "sample_id"
"Rep" = "replicate"
"Height (m)" = { field = "position", unit = "m" }
"d13C" = { field = "d13c_carb", scale = "VPDB" }
"Age (Ma)" = "age"

[constants]
age_time_scale = "ICS2024/12"
position_kind = "height"
setting = "ramp"
component = "bulk"
lithology = "limestone"
locality_id = "test-hill"

[[sections]]
id = "TR-1"
locality = "test-hill"
datum = "base of section"

[[localities]]
id = "test-hill"
name = "Test hill (invented)"
lat = 47.0
lon = 10.0
"""


def test_replicates_are_averaged_before_binning(demo_store: Path, tmp_path: Path) -> None:
    """The demo has one analysis per sample, so a seventh invented section (in the northern
    shelf) brings replicates: a triplicate is one sample, and its value is their mean."""
    (tmp_path / "reps.csv").write_text(INVENTED_REPLICATES, encoding="utf-8")
    (tmp_path / "reps.toml").write_text(INVENTED_REPLICATES_MAP, encoding="utf-8")
    ok("ingest", tmp_path / "reps.csv", "--map", tmp_path / "reps.toml", "--store", demo_store)
    # the invented section has no screening evidence (untested): keep every record here
    records = query(demo_store, "--interval", "Toarcian")
    assert (records["replicate"] > 1).sum() == 4  # four extra analyses of three samples
    out = tmp_path / "curve"
    ok(
        "curve",
        "--out",
        out,
        *REGION_ARGS,
        "--weight",
        "samples",
        "--boots",
        "0",
        "--screened",
        "all",
        "--store",
        demo_store,
    )
    bins = pd.read_csv(out / "bins.csv")
    smp = samples(records)
    assert manifest(out)["samples"] == len(smp) == len(records) - 4
    smp = _expected_bins(smp, _edges_from(bins, smp, 0.25))
    for g, part in bins.groupby("group"):
        mine = smp[smp["group"] == g].groupby("bin")["value"]
        full = range(len(part))
        assert part["n_samples"].tolist() == mine.size().reindex(full, fill_value=0).tolist()
        np.testing.assert_allclose(
            part["median"].to_numpy(float),
            mine.median().reindex(full).to_numpy(float),
            rtol=1e-5,
            atol=1e-6,
        )
    # TR-03's three analyses (−1.0, −1.6, −1.3) are one sample of −1.3 ‰
    tr3 = smp[smp["sample_id"] == "TR-03"]
    assert tr3["value"].tolist() == pytest.approx([-1.3])


# ------------------------------------------------------------------- 3. the excursion


def test_each_region_dips_below_zero_near_183_ma_between_heavier_ends(
    region_curve: tuple[Path, Ran],
) -> None:
    out, _ = region_curve
    curve = pd.read_csv(out / "curve.csv")
    assert set(curve["group"]) == {"northern shelf", "southern basin"}
    for g, part in curve.groupby("group"):
        part = part.sort_values("age", ascending=False)
        low = part.loc[part["fit"].idxmin()]
        assert 182.7 <= low["age"] <= 183.3, (g, low["age"])
        assert low["fit"] < 0.0, g
        assert part["fit"].iloc[0] > 1.0, g  # the old end
        assert part["fit"].iloc[-1] > 1.0, g  # the young end
        # the curve stays inside the data and inside the Toarcian
        assert TOARCIAN[1] <= part["age"].min() and part["age"].max() <= TOARCIAN[0]


# ------------------------------------------------------------------- 4. repeats, seed


def test_the_same_command_writes_the_same_bytes_and_leaves_the_store_alone(
    store: Path, outs: Path, region_curve: tuple[Path, Ran]
) -> None:
    first, _ = region_curve
    before = tree_bytes(store)
    again = outs / "region_again"
    ok("curve", "--out", again, *REGION_ARGS, "--store", store)
    a, b = folder_bytes(first), folder_bytes(again)
    assert set(a) == set(b) == CURVE_FILES | {"curve_manifest.json"}
    for name in a:
        assert a[name] == b[name], name
    assert tree_bytes(store) == before  # a curve reads; it writes nothing in the store


def test_another_seed_moves_the_band_and_not_the_fit(
    store: Path, outs: Path, banded: tuple[Path, Ran]
) -> None:
    out0, _ = banded
    out7 = outs / "seed7"
    ok("curve", "--out", out7, *REGION_ARGS, "--min-sections", "3", "--seed", "7", "--store", store)
    c0, c7 = pd.read_csv(out0 / "curve.csv"), pd.read_csv(out7 / "curve.csv")
    assert c0[["group", "age"]].equals(c7[["group", "age"]])
    assert c0["fit"].equals(c7["fit"])
    shown = c0["band_shown"].to_numpy(bool)
    assert shown.sum() > 100 and (shown == c7["band_shown"].to_numpy(bool)).all()
    lo0, lo7 = c0["lo"].to_numpy(float)[shown], c7["lo"].to_numpy(float)[shown]
    hi0, hi7 = c0["hi"].to_numpy(float)[shown], c7["hi"].to_numpy(float)[shown]
    assert not np.allclose(lo0, lo7) and not np.allclose(hi0, hi7)
    assert (lo0 <= hi0).all() and (lo7 <= hi7).all()
    assert manifest(out7)["parameters"]["seed"] == 7
    # the bins do not depend on the seed
    assert (out0 / "bins.csv").read_bytes() == (out7 / "bins.csv").read_bytes()


# ------------------------------------------------------------------- 5. robustness, ages


def test_robustness_writes_its_tables_and_names_the_most_influential_sources(
    banded: tuple[Path, Ran], toarcian: pd.DataFrame
) -> None:
    out, ran = banded
    assert {"influence.csv", "robustness_curves.csv"} <= {p.name for p in out.iterdir()}
    listed = {f["path"] for f in manifest(out)["files"]}
    assert {"influence.csv", "robustness_curves.csv"} <= listed
    infl = pd.read_csv(out / "influence.csv")
    smp = samples(toarcian)
    smp["group"] = region_of(smp)
    for g, part in smp.groupby("group"):
        sections = {
            f"{a}/{b}"
            for a, b in part[["source_id", "section_id"]].drop_duplicates().itertuples(index=False)
        }
        sources = set(part["source_id"])
        mine = infl[infl["group"] == g]
        assert set(mine.loc[mine["leave"] == "section", "left_out"]) == sections
        # a source is left out only where the group has two or more
        assert set(mine.loc[mine["leave"] == "source", "left_out"]) == (
            sources if len(sources) > 1 else set()
        )
        # n_samples is what each left-out unit holds
        by_src = part.groupby("source_id").size()
        for r in mine[mine["leave"] == "source"].itertuples():
            assert r.n_samples == by_src[r.left_out]
    # max_abs_change is the largest |refit − fit| between robustness_curves.csv and curve.csv
    curve = pd.read_csv(out / "curve.csv")
    rob = pd.read_csv(out / "robustness_curves.csv")
    both = rob.merge(curve[["group", "age", "fit"]], on=["group", "age"], suffixes=("", "_all"))
    assert len(both) == len(rob)
    change = (
        (both["fit"] - both["fit_all"])
        .abs()
        .groupby([both["group"], both["leave"], both["left_out"]])
        .max()
    )
    for r in infl.itertuples():
        assert change[(r.group, r.leave, r.left_out)] == pytest.approx(r.max_abs_change, abs=5e-5)
    # the CLI names the sources, most influential first, with their largest change
    said = re.findall(r"influence \[(.+?)\] without (\S+): largest change ([0-9.]+)", ran.err)
    assert said, ran.err
    for g in {s[0] for s in said}:
        top = infl[(infl["group"] == g) & (infl["leave"] == "source")].sort_values(
            "max_abs_change", ascending=False
        )
        names = [s[1] for s in said if s[0] == g]
        assert names == top["left_out"].head(len(names)).tolist()
        assert float([s[2] for s in said if s[0] == g][0]) == pytest.approx(
            top["max_abs_change"].iloc[0],
            abs=5e-4,  # shown to 0.001 ‰
        )
    assert "northern shelf" in {s[0] for s in said}  # its two sources are listed


def test_age_draws_widen_the_band(store: Path, outs: Path, banded: tuple[Path, Ran]) -> None:
    fixed, _ = banded
    drawn = outs / "age_draws"
    ok(
        "curve",
        "--out",
        drawn,
        *REGION_ARGS,
        "--min-sections",
        "3",
        "--age-draws",
        "50",
        "--store",
        store,
    )
    assert manifest(drawn)["parameters"]["age_draws"] == 50
    a, b = pd.read_csv(fixed / "curve.csv"), pd.read_csv(drawn / "curve.csv")
    assert a["fit"].equals(b["fit"])  # the fit is of the ages as stored
    for g in ("northern shelf", "southern basin"):
        wa = a[(a["group"] == g) & a["band_shown"]]
        wb = b[(b["group"] == g) & b["band_shown"]]
        assert len(wa) > 50 and len(wb) > 50
        assert (wb["hi"] - wb["lo"]).mean() > (wa["hi"] - wa["lo"]).mean(), g


# ------------------------------------------------------------------- 6. grouping, isotopes


def test_default_groups_are_component_and_setting_and_never_mix(
    store: Path, outs: Path, toarcian: pd.DataFrame
) -> None:
    out = outs / "default_groups"
    ok("curve", "--out", out, "--interval", "Toarcian", "--store", store)
    smp = samples(toarcian)
    smp["group"] = smp["component"] + SEP + smp["setting"]
    expected = smp.groupby("group").size()
    assert len(expected) >= 4  # the demo: brachiopod, bulk and micrite in three settings
    curve, bins = pd.read_csv(out / "curve.csv"), pd.read_csv(out / "bins.csv")
    assert set(curve["group"]) <= set(expected.index)
    assert set(bins["group"]) == set(expected.index)
    assert manifest(out)["groups"] == sorted(expected.index)
    # every group holds exactly the samples of its component and setting
    assert (
        bins.groupby("group")["n_samples"].sum().sort_index().tolist()
        == expected.sort_index().tolist()
    )
    # without --bin-myr the bins are the chart's stages: all of these lie in the Toarcian
    assert (bins["age_old"] <= TOARCIAN[0] + 1e-9).all()
    assert (bins["age_young"] >= TOARCIAN[1] - 1e-9).all()
    assert "component" in svg_text(out / "curve.svg") and "bulk · basin" in svg_text(
        out / "curve.svg"
    )


def test_organic_carbon_is_drawn_and_labelled_as_such(
    store: Path, outs: Path, toarcian: pd.DataFrame
) -> None:
    out = outs / "org"
    ok("curve", "--out", out, "--interval", "Toarcian", "--isotope", "org", "--store", store)
    org = samples(toarcian, "d13c_org")
    assert set(org["source_id"]) == {"ystrel-cores-2021"}  # only the cores have it
    groups = set(org["component"] + SEP + org["setting"])
    bins = pd.read_csv(out / "bins.csv")
    assert set(bins["group"]) == groups
    assert bins["n_samples"].sum() == len(org)
    assert (bins["median"] < -20).all()  # organic δ13C, not carbonate
    text = svg_text(out / "curve.svg")
    # the mathtext label of organic δ13C (compile/plotting/style.py::math)
    assert r"\mathrm{C}_{\mathrm{org}}" in text and r"\mathrm{C}_{\mathrm{carb}}" not in text
    m = manifest(out)
    assert m["parameters"]["isotope"] == "org" and m["samples"] == len(org)


@pytest.fixture(scope="module")
def mixed(store: Path, outs: Path) -> Path:
    out = outs / "mixed"
    ok("curve", "--out", out, "--interval", "Toarcian", "--allow-mixed", "--store", store)
    return out


def test_allow_mixed_says_carbonate_and_organic_were_merged(mixed: Path) -> None:
    text = svg_text(mixed / "curve.svg")
    assert "merged" in text
    assert "carb and org" in text
    m = manifest(mixed)
    assert m["parameters"]["allow_mixed"] is True
    assert not any("nothing was merged" in n for n in m["notes"])


def test_allow_mixed_keeps_both_values_of_a_sample(mixed: Path, toarcian: pd.DataFrame) -> None:
    bins = pd.read_csv(mixed / "bins.csv")
    carb, org = samples(toarcian), samples(toarcian, "d13c_org")
    basin = bins[bins["group"] == "bulk" + SEP + "basin"]
    assert len(basin) == 1  # one stage bin: the Toarcian
    # the merged distribution holds the carbonate values and the organic values
    assert basin["p97_5"].iloc[0] > 0.0
    assert basin["p2_5"].iloc[0] < -20.0
    assert manifest(mixed)["samples"] == len(carb) + len(org)


# ------------------------------------------------------------------- 7. excursion


def _baseline_and_peak(part: pd.DataFrame) -> tuple[float, float, int]:
    """Default baseline (median of the oldest max(3, ⌈20 %⌉) samples, stratigraphically)
    and the negative peak among the others."""
    kind = part["position_kind"].iloc[0]
    order = part.sort_values("position_m", ascending=(kind == "height"), kind="stable")
    n = len(order)
    k = max(3, math.ceil(0.2 * n))
    base = float(order["value"].iloc[:k].median())
    return base, float(order["value"].iloc[k:].min()), n


def test_excursion_csv_has_one_negative_row_per_section_and_component(
    store: Path, toarcian: pd.DataFrame
) -> None:
    r = ok(
        "excursion",
        "--interval",
        "Toarcian",
        "--format",
        "csv",
        "--direction",
        "negative",
        "--store",
        store,
    )
    lines = r.out.splitlines()
    assert lines[0].startswith("source_id,section_id,")
    per = pd.read_csv(io.StringIO(r.out))
    smp = samples(toarcian)
    # one row per section and component: a section's bulk and micrite records are never
    # mixed into one excursion (the Ystrel cores alternate them)
    keys = set(smp[["source_id", "section_id", "component"]].itertuples(index=False, name=None))
    assert len(per) == len(lines) - 1 == len(keys) >= 6
    assert set(per[["source_id", "section_id", "group"]].itertuples(index=False, name=None)) == keys
    for row in per.itertuples():
        part = smp[
            (smp["source_id"] == row.source_id)
            & (smp["section_id"] == row.section_id)
            & (smp["component"] == row.group)
        ]
        base, peak, n = _baseline_and_peak(part)
        assert row.n_samples == n
        assert row.baseline == pytest.approx(base, abs=1e-9)
        assert row.peak_value == pytest.approx(peak, abs=1e-9)
        assert row.magnitude == pytest.approx(peak - base, abs=1e-9)
        if "no_departure" not in str(row.flags):  # sparse cores may never leave the baseline
            assert row.onset_age_ma > row.peak_age_ma  # onset is older than the peak
    # the invented dip of about −3 ‰ in the three northern sections
    north = per[per["section_id"].isin(["Fennoway Bluff", "Mossaret Cut", "quillar-ridge"])]
    assert len(north) == 3 and (north["magnitude"] < -2).all()
    assert north["peak_age_ma"].between(182.7, 183.3).all()


def test_excursion_out_writes_tables_and_figures_with_a_summary_per_region(
    store: Path, outs: Path, toarcian: pd.DataFrame
) -> None:
    out = outs / "excursion"
    r = ok(
        "excursion",
        "--interval",
        "Toarcian",
        "--by",
        "region",
        "--direction",
        "negative",
        "--out",
        out,
        "--store",
        store,
    )
    names = {p.name for p in out.iterdir()}
    assert {
        "excursion_sections.csv",
        "excursion_summary.csv",
        "excursion.png",
        "excursion.svg",
        "excursion.pdf",
    } <= names
    for name in ("excursion.png", "excursion.svg", "excursion.pdf"):
        assert (out / name).stat().st_size > 1000
        assert sha(out / name)[:16] in r.err  # the CLI names each file with its sum
    per = pd.read_csv(out / "excursion_sections.csv")
    smp = samples(toarcian)
    smp["group"] = region_of(smp)
    expected = smp.drop_duplicates(["source_id", "section_id"]).groupby("group").size()
    assert set(expected.index) == {"northern shelf", "southern basin"}
    assert (expected >= 3).all()
    assert per.groupby("group").size().to_dict() == expected.to_dict()
    summ = pd.read_csv(out / "excursion_summary.csv")
    groups = summ[summ["scope"] == "group"].set_index("group")
    assert set(groups.index) == {"northern shelf", "southern basin"}
    every = summ[summ["scope"] == "all"]
    assert len(every) == 1 and every["n_sections"].iloc[0] == len(per)
    for g, part in per.groupby("group"):
        assert groups.loc[g, "n_sections"] == len(part)
        assert groups.loc[g, "magnitude_mean"] == pytest.approx(part["magnitude"].mean(), rel=1e-5)
        assert groups.loc[g, "magnitude_sd"] == pytest.approx(
            part["magnitude"].std(ddof=1), rel=1e-5
        )
    assert every["magnitude_mean"].iloc[0] == pytest.approx(per["magnitude"].mean(), rel=1e-5)
    # the stdout table is the per-section table
    assert "Fennoway Bluff" in r.out and "southern basin" in r.out


# ------------------------------------------------------------------- 8. export --with-curve

EXPORT_ARGS = ("--interval", "Toarcian", "--with-curve", "--by", "region", "--bin-myr", "0.25")


@pytest.fixture(scope="module")
def exports(store: Path, outs: Path) -> tuple[Path, Path]:
    """The same `export --with-curve` twice."""
    a, b = outs / "export_a", outs / "export_b"
    ok("export", "--out", a, *EXPORT_ARGS, "--store", store)
    ok("export", "--out", b, *EXPORT_ARGS, "--store", store)
    return a, b


def test_export_with_curve_records_its_files_and_repeats_byte_for_byte(
    exports: tuple[Path, Path], region_curve: tuple[Path, Ran]
) -> None:
    a, b = exports
    assert {p.name for p in (a / "curve").iterdir()} == CURVE_FILES | {"curve_manifest.json"}
    m = manifest(a, "manifest.json")
    listed = {f["path"]: f["sha256"] for f in m["files"]}
    assert {f"curve/{n}" for n in CURVE_FILES} <= set(listed)
    for path, digest in listed.items():
        assert sha(a / path) == digest, path
    p = m["curve"]["parameters"]
    assert (p["by"], p["bin_myr"], p["span"], p["boots"], p["seed"], p["weight"]) == (
        "region",
        0.25,
        0.3,
        200,
        0,
        "sections",
    )
    assert m["curve"]["store_version"] == m["store_version"]
    assert m["curve"]["filters"]["interval"]["given"] == "Toarcian"
    # the curve beside the export is the one `strata13 curve` draws for the same request
    solo, _ = region_curve
    for name in ("bins.csv", "curve.csv"):
        assert (a / "curve" / name).read_bytes() == (solo / name).read_bytes(), name
    # same command, same bytes, every file
    fa, fb = folder_bytes(a), folder_bytes(b)
    assert set(fa) == set(fb)
    assert [n for n in fa if fa[n] != fb[n]] == []


def test_export_reproduce_line_names_the_filters_and_curve_options(
    exports: tuple[Path, Path],
) -> None:
    line = manifest(exports[0], "manifest.json")["reproduce"]
    assert "--interval Toarcian" in line
    assert "--by region" in line and "--bin-myr 0.25" in line


def test_a_refused_curve_leaves_no_half_export(store: Path, tmp_path: Path) -> None:
    out = tmp_path / "export"
    r = run(
        "export",
        "--out",
        out,
        "--interval",
        "Toarcian",
        "--with-curve",
        "--bin-myr",
        "5",
        "--store",
        store,
    )
    assert r.code == 2 and "--bin-myr" in r.err
    assert not (out / "manifest.json").exists()


# ------------------------------------------------------------------- 9. bad requests

BAD = [
    (("curve", "--interval", "Cambrian"), 1, "no records match"),
    (("curve", "--interval", "Toarcian", "--bin-myr", "20"), 2, "--bin-myr"),
    (("curve", "--interval", "Toarcian", "--span", "0"), 2, "--span"),
    (("curve", "--interval", "Toarcian", "--span", "1.5"), 2, "--span"),
    (("curve", "--interval", "Toarcian", "--boots", "-1"), 2, "--boots"),
    (("curve", "--interval", "Toarcian", "--by", "planet"), 2, "--by"),
    (("curve", "--interval", "Toarcian", "--isotope", "water"), 2, "--isotope"),
]


@pytest.mark.parametrize(
    ("args", "code", "words"),
    BAD,
    ids=[
        "empty-interval",
        "bin-wider",
        "span-0",
        "span-1.5",
        "boots-neg",
        "by-planet",
        "isotope-water",
    ],
)
def test_bad_curve_requests_are_refused_clearly(
    store: Path, tmp_path: Path, args: tuple[str, ...], code: int, words: str
) -> None:
    out = tmp_path / "curve"
    r = run(args[0], "--out", out, *args[1:], "--store", store)
    assert r.code == code, r.err
    assert words in r.err
    assert r.err.startswith("error:") and "hint:" in r.err
    assert "Traceback" not in r.err and "internal error" not in r.err
    assert r.out == ""
    assert not out.exists()  # nothing written for a refused request


def test_excursion_without_interval_is_refused(store: Path, tmp_path: Path) -> None:
    out = tmp_path / "ex"
    r = run("excursion", "--out", out, "--store", store)
    assert r.code == 2
    assert "--interval" in r.err and "Traceback" not in r.err
    assert not out.exists()


def test_curve_out_inside_the_store_is_refused_and_the_store_is_untouched(demo_store: Path) -> None:
    before = tree_bytes(demo_store)
    for target in (demo_store / "curves", demo_store):
        r = run("curve", "--out", target, "--interval", "Toarcian", "--store", demo_store)
        assert r.code == 2, r.err
        assert "store" in r.err and "Traceback" not in r.err
    assert not (demo_store / "curves").exists()
    assert tree_bytes(demo_store) == before
