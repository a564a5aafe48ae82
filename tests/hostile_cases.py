"""A seeded generator of hostile ingests, and the runner that judges each one.

Every case is a folder of files (a sheet in CSV, xlsx or ods and its mapping) derived from
one small valid source by a mutation of the kinds a shared compilation receives: flipped,
cut or inserted bytes, random binary, other encodings, bare carriage returns and unclosed
quotes, workbooks with far cells, damaged numbers, missing or broken parts and repeated-
cell bombs, mappings with values of the wrong type, odd paths (a named pipe, a symlink
loop, a folder, a name too long). The same seed gives the same cases.

``judge`` runs one case through the command line's dispatch (in this process) and says what
an honest tool must: no traceback, no "internal error", exit 0, 1 or 2, and the store's
files unchanged unless the ingest committed a version. The suite runs a few hundred cases
(tests/test_fuzz.py); benchmarks/hostile.py runs thousands in worker processes and also
counts crashes and hangs.
"""

from __future__ import annotations

import io
import os
import random
import re
import time
import zipfile
from collections.abc import Callable, Iterator
from dataclasses import dataclass, field
from pathlib import Path

MAPPING = """[source]
id = "fuzz-source-2020"
citation = "Fuzz (invented)"

[table]
file = "{file}"
{table_extra}
[columns]
"Sample" = "sample_id"
"Height" = {{ field = "position", unit = "m" }}
"d13C" = {{ field = "d13c_carb", scale = "VPDB" }}

[constants]
section_id = "fz-1"
position_kind = "height"
"""
ROWS = [("F-1", 0.5, -1.2), ("F-2", 1.0, -0.8), ("F-3", 1.5, 0.3), ("F-4", 2.0, 1.1)]
HOSTILE_VALUES: list[object] = [
    5,
    -1,
    2.5,
    float("inf"),
    float("-inf"),
    float("nan"),
    True,
    [],
    ["permil"],
    {"x": 1},
    "",
    "\u00e9",
    "\u00a0",
    "\x00",
    "x" * 300,
    "../../etc/passwd",
    "/etc/passwd",
    "undefined",
    "punycode",
    "rot13",
    "A1:XFD1048576",
    "'; DROP TABLE records; --",
    "${HOME}",
    "\u202e",
]
PATHS = [
    ("table", "file"),
    ("table", "sheet"),
    ("table", "header_row"),
    ("table", "decimal"),
    ("table", "delimiter"),
    ("table", "encoding"),
    ("source", "id"),
    ("source", "citation"),
    ("source", "year"),
    ("source", "kind"),
    ("source", "republishes"),
    ("constants", "section_id"),
    ("constants", "position_kind"),
    ("constants", "d18o_carb_scale"),
    ("columns", "Height"),
    ("columns", "d13C"),
]


@dataclass
class Case:
    name: str
    files: dict[str, bytes]  # file name -> bytes, written into the case's folder
    args: list[str]  # the ingest command line after "ingest" (no --store)
    special: list[str] = field(default_factory=list)  # odd paths to make: pipe, loop, dir


@dataclass
class Outcome:
    name: str
    code: int
    seconds: float
    problems: list[str]  # empty: the case was answered honestly
    committed: bool


# ---------------------------------------------------------------- base files


def base_csv() -> bytes:
    lines = ["Sample,Height,d13C", *(f"{s},{h},{d}" for s, h, d in ROWS)]
    return ("\n".join(lines) + "\n").encode("utf-8")


_TEMPLATES: dict[str, bytes] = {}


def base_xlsx() -> bytes:
    if "xlsx" not in _TEMPLATES:
        import openpyxl

        wb = openpyxl.Workbook()
        ws = wb.active
        ws.title = "Data"
        ws.append(["Sample", "Height", "d13C"])
        for row in ROWS:
            ws.append(list(row))
        buf = io.BytesIO()
        wb.save(buf)
        _TEMPLATES["xlsx"] = _timeless(buf.getvalue())
    return _TEMPLATES["xlsx"]


def base_ods() -> bytes:
    if "ods" not in _TEMPLATES:
        from odf.opendocument import OpenDocumentSpreadsheet
        from odf.table import Table, TableCell, TableRow
        from odf.text import P

        doc = OpenDocumentSpreadsheet()
        table = Table(name="Data")
        for row in [("Sample", "Height", "d13C"), *ROWS]:
            tr = TableRow()
            for v in row:
                if isinstance(v, float):
                    cell = TableCell(valuetype="float", value=v)
                else:
                    cell = TableCell(valuetype="string")
                cell.addElement(P(text=str(v)))
                tr.addElement(cell)
            table.addElement(tr)
        doc.spreadsheet.addElement(table)
        buf = io.BytesIO()
        doc.write(buf)
        _TEMPLATES["ods"] = _timeless(buf.getvalue())
    return _TEMPLATES["ods"]


# ---------------------------------------------------------------- mutations


def flip(rng: random.Random, data: bytes) -> bytes:
    b = bytearray(data)
    for _ in range(rng.randint(1, 8)):
        if b:
            b[rng.randrange(len(b))] = rng.randrange(256)
    return bytes(b)


def cut(rng: random.Random, data: bytes) -> bytes:
    return data[: rng.randrange(max(len(data), 1))]


def insert(rng: random.Random, data: bytes) -> bytes:
    junk = rng.choice(
        [b"\x00", b"\r", b'"', b"\xff\xfe", b"\xef\xbb\xbf", b"\n\n\n", b",,,,", b";", b"\t"]
    )
    at = rng.randrange(len(data) + 1)
    return data[:at] + junk * rng.randint(1, 40) + data[at:]


def binary(rng: random.Random, data: bytes) -> bytes:
    return rng.randbytes(rng.randint(0, 6000))


BYTE_MUTATIONS: list[Callable[[random.Random, bytes], bytes]] = [flip, cut, insert, binary]


def csv_variant(rng: random.Random) -> bytes:
    text = base_csv().decode("utf-8")
    pick = rng.randrange(9)
    if pick == 0:
        return text.encode(rng.choice(["utf-16", "utf-16-le", "cp1252", "latin-1", "utf-32"]))
    if pick == 1:
        return text.replace("F-2", "F-2\r").encode()
    if pick == 2:
        return text.replace("F-3", '"F-3').encode()
    if pick == 3:
        return text.replace("\n", "\r").encode()
    if pick == 4:
        return (text + "x" * rng.choice([10, 10_000, 200_000]) + "\n").encode()
    if pick == 5:
        return text.replace(",", rng.choice([";", "\t", "|", ",,", '","'])).encode()
    if pick == 6:
        return text.replace("-1.2", rng.choice(["−1,2", "1e999", "nan", "--1", "<0.05"])).encode()
    if pick == 7:
        return ("Sample,Height,d13C\n" * rng.randint(1, 50)).encode()
    return rng.choice(BYTE_MUTATIONS)(rng, text.encode())


_EPOCH = (2020, 1, 1, 0, 0, 0)  # every zip entry's time: the same seed, the same bytes


def _rezip(data: bytes, part: str, change: Callable[[bytes], bytes | None]) -> bytes:
    out = io.BytesIO()
    with zipfile.ZipFile(io.BytesIO(data)) as zin, zipfile.ZipFile(out, "w") as zout:
        for info in zin.infolist():
            body = zin.read(info.filename)
            if info.filename == part:
                changed = change(body)
                if changed is None:
                    continue
                body = changed
            entry = zipfile.ZipInfo(info.filename, date_time=_EPOCH)
            zout.writestr(entry, body, compress_type=info.compress_type or zipfile.ZIP_DEFLATED)
    return out.getvalue()


def _timeless(data: bytes) -> bytes:
    """A workbook written now with its clock removed: entry times fixed and the document's
    own created/modified dates set to one date, so the corpus is the same on every run."""
    stamp = re.compile(
        rb"(<(?:dcterms:created|dcterms:modified|meta:creation-date|dc:date)"
        rb"[^>]*>)[^<]*(<)"
    )
    out = io.BytesIO()
    with zipfile.ZipFile(io.BytesIO(data)) as zin, zipfile.ZipFile(out, "w") as zout:
        for info in zin.infolist():
            body = stamp.sub(rb"\g<1>2020-01-01T00:00:00Z\g<2>", zin.read(info.filename))
            entry = zipfile.ZipInfo(info.filename, date_time=_EPOCH)
            zout.writestr(entry, body, compress_type=info.compress_type)
    return out.getvalue()


def xlsx_variant(rng: random.Random) -> bytes:
    data = base_xlsx()
    sheet = "xl/worksheets/sheet1.xml"
    far = rng.choice(["XFD1048576", "ZZ200000", "AAA1", "A1048576", "B99999999", "XFE1"])
    changes: list[Callable[[bytes], bytes | None]] = [
        lambda d: d.replace(b'r="C5"', f'r="{far}"'.encode(), 1),
        lambda d: d.replace(b"<v>-1.2</v>", b"<v>-1.2abc</v>"),
        lambda d: re.sub(rb' r="[A-Z]+\d+"', b"", d),
        lambda d: d.replace(
            b"</sheetData>", b'<row r="1048576"><c r="XFD1048576"><v>1</v></c></row></sheetData>'
        ),
        lambda d: d.replace(b"</sheetData>", b'<row><c r="B7"><f>1+</f></c></row></sheetData>'),
        lambda d: d[: rng.randrange(max(len(d), 1))],
        lambda d: b"",
        lambda d: None,
        lambda d: d.replace(b"<c ", b"<c foo='a>b' ", 1),
        lambda d: d.replace(
            b"</sheetData>",
            b"<row r='3'><c r='A3' t='inlineStr'><is><t>"
            + b"x" * 100_000
            + b"</t></is></c></row></sheetData>",
        ),
        lambda d: flip(rng, d),
    ]
    pick = rng.randrange(len(changes) + 3)
    if pick < len(changes):
        return _rezip(data, sheet, changes[pick])
    if pick == len(changes):
        return _rezip(
            data,
            rng.choice(
                [
                    "xl/workbook.xml",
                    "xl/sharedStrings.xml",
                    "xl/_rels/workbook.xml.rels",
                    "[Content_Types].xml",
                ]
            ),
            lambda d: rng.choice([None, b"", flip(rng, d)]),
        )
    return rng.choice(BYTE_MUTATIONS)(rng, data)


def ods_variant(rng: random.Random) -> bytes:
    data = base_ods()
    huge = str(rng.choice([2, 1000, 100_000, 10**9]))
    changes: list[Callable[[bytes], bytes | None]] = [
        lambda d: d.replace(
            b'office:value-type="float"',
            b'table:number-columns-repeated="' + huge.encode() + b'" office:value-type="float"',
            1,
        ),
        lambda d: d.replace(
            b"<table:table-row>",
            b'<table:table-row table:number-rows-repeated="' + huge.encode() + b'">',
            2,
        ),
        lambda d: d[: rng.randrange(max(len(d), 1))],
        lambda d: None,
        lambda d: flip(rng, d),
    ]
    pick = rng.randrange(len(changes) + 1)
    if pick < len(changes):
        return _rezip(data, "content.xml", changes[pick])
    return rng.choice(BYTE_MUTATIONS)(rng, data)


def _toml_value(v: object) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, float):
        return (
            "nan" if v != v else ("inf" if v > 0 else "-inf") if abs(v) == float("inf") else repr(v)
        )
    if isinstance(v, int):
        return str(v)
    if isinstance(v, list):
        return "[" + ", ".join(_toml_value(x) for x in v) + "]"
    if isinstance(v, dict):
        return "{ " + ", ".join(f"{k} = {_toml_value(x)}" for k, x in v.items()) + " }"
    text = str(v).replace("\\", "\\\\").replace('"', '\\"')
    text = "".join(c if c.isprintable() else f"\\u{ord(c):04x}" for c in text)
    return f'"{text}"'


def mapping_variant(rng: random.Random, file: str) -> str:
    text = MAPPING.format(file=file, table_extra="")
    pick = rng.randrange(6)
    if pick <= 2:  # one value of the wrong type or an odd value
        block, key = rng.choice(PATHS)
        value = _toml_value(rng.choice(HOSTILE_VALUES))
        lines = text.splitlines()
        header = f"[{block}]"
        start = lines.index(header)
        for i in range(start + 1, len(lines)):
            if lines[i].startswith("["):
                lines.insert(i, f'"{key}" = {value}')
                break
            m = re.match(r'^"?([^"=]+?)"?\s*=', lines[i])
            if m and m.group(1) == key:
                lines[i] = f'"{key}" = {value}'
                break
        else:
            lines.append(f'"{key}" = {value}')
        return "\n".join(lines) + "\n"
    if pick == 3:  # a block turned into a scalar or removed
        block = rng.choice(["source", "table", "columns", "constants"])
        out = re.sub(rf"\[{block}\]\n(?:[^\[].*\n?)*", "", text)
        return (
            f"{block} = {_toml_value(rng.choice(HOSTILE_VALUES))}\n" if rng.random() < 0.5 else ""
        ) + out
    if pick == 4:  # an unknown key or block
        return text + rng.choice(["[tabel]\nfile = 'x'\n", "[constants.x]\ny = 1\n", "zzz = 1\n"])
    return flip(rng, text.encode()).decode("utf-8", errors="replace")


def cases(seed: int, n: int) -> Iterator[Case]:
    """``n`` hostile cases from ``seed`` (the same seed, the same cases)."""
    rng = random.Random(seed)
    for i in range(n):
        kind = rng.choices(
            ["csv", "xlsx", "ods", "mapping", "path", "valid"], weights=[22, 27, 10, 28, 10, 3]
        )[0]
        name = f"{i:05d}-{kind}"
        for case in _case(rng, i, kind, name):
            if kind != "valid" and rng.random() < 0.85:  # most validate only: cheaper
                case.args.append("--dry-run")
            yield case


def _case(rng: random.Random, i: int, kind: str, name: str) -> Iterator[Case]:
    """The one case of ``kind`` (a generator, so each branch reads as one yield)."""
    if kind == "csv":
        yield Case(name, {"o.csv": csv_variant(rng), "o.toml": _map("o.csv")}, ["--map", "o.toml"])
    elif kind == "xlsx":
        yield Case(
            name, {"o.xlsx": xlsx_variant(rng), "o.toml": _map("o.xlsx")}, ["--map", "o.toml"]
        )
    elif kind == "ods":
        yield Case(name, {"o.ods": ods_variant(rng), "o.toml": _map("o.ods")}, ["--map", "o.toml"])
    elif kind == "mapping":
        sheet = rng.choice(["o.csv", "o.xlsx"])
        body = base_csv() if sheet == "o.csv" else base_xlsx()
        files = {sheet: body, "o.toml": mapping_variant(rng, sheet).encode("utf-8")}
        yield Case(name, files, ["--map", "o.toml"])
    elif kind == "path":
        odd = rng.choice(["pipe.csv", "loop.csv", "dir.csv", "x" * 300 + ".csv", "missing.csv"])
        where = rng.choice(["arg", "mapping", "map"])
        if where == "arg":
            yield Case(
                name,
                {"o.toml": _map("o.csv"), "o.csv": base_csv()},
                [odd, "--map", "o.toml"],
                [odd],
            )
        elif where == "mapping":
            yield Case(name, {"o.toml": _map(odd)}, ["--map", "o.toml"], [odd])
        else:
            yield Case(name, {}, ["--map", odd], [odd])
    else:
        rows = base_csv() + f"F-{i + 10},{3 + i % 7},{-1 + (i % 5) / 10}\n".encode()
        yield Case(name, {"o.csv": rows, "o.toml": _map("o.csv")}, ["--map", "o.toml"])


def _map(file: str) -> bytes:
    return MAPPING.format(file=file, table_extra="").encode("utf-8")


# ---------------------------------------------------------------- judging


def prepare(case: Case, folder: Path) -> None:
    folder.mkdir(parents=True, exist_ok=True)
    for name, data in case.files.items():
        (folder / name).write_bytes(data)
    for odd in case.special:
        target = folder / odd
        if odd.startswith("pipe"):
            os.mkfifo(target)
        elif odd.startswith("loop"):
            target.symlink_to(target)
        elif odd.startswith("dir"):
            target.mkdir()


def version(store: Path) -> int:
    """The store's newest version, read straight from its catalog file (cheap, read-only)."""
    import sqlite3

    con = sqlite3.connect(f"file:{store / 'catalog.sqlite'}?mode=ro", uri=True, timeout=30)
    try:
        return int(con.execute("SELECT max(snapshot_id) FROM ducklake_snapshot").fetchone()[0])
    finally:
        con.close()


def judge(
    case: Case, folder: Path, store: Path, tree: Callable[[Path], dict[str, bytes]]
) -> Outcome:
    """Run one case and list what an honest answer would not contain.

    A real ingest goes into ``store``, whose files must stay as they were unless a version
    landed; a dry run names a store folder that does not exist, which must still not exist
    afterwards (a dry run creates nothing)."""
    from tests.conftest import run_cli

    prepare(case, folder)
    dry = "--dry-run" in case.args
    target = folder / "no-store-here" if dry else store
    before, was = ({}, 0) if dry else (tree(store), version(store))
    cwd = os.getcwd()
    os.chdir(folder)
    start = time.monotonic()
    try:
        res = run_cli("ingest", *case.args, "--store", target)
    finally:
        os.chdir(cwd)
    seconds = time.monotonic() - start
    problems = []
    if "Traceback" in res.err or "Traceback" in res.out:
        problems.append("traceback")
    if "internal error" in res.err:
        problems.append("internal error: " + res.err.splitlines()[0][:200])
    if res.code not in (0, 1, 2):
        problems.append(f"exit {res.code}")
    committed = False
    if dry:
        if target.exists():
            problems.append("a dry run created the store folder")
    else:
        committed = version(store) > was
        if not committed and tree(store) != before:
            problems.append("store changed without a commit")
        if committed and res.code != 0:
            problems.append(f"a version landed but the exit code is {res.code}")
    return Outcome(case.name, res.code, seconds, problems, committed)
