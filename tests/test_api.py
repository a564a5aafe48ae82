"""The public API: `__all__` lists exactly the public names, each documented and typed."""

from __future__ import annotations

import inspect
import pathlib
import re
import typing

from strata13.compile import api

CLI = pathlib.Path(api.__file__).resolve().parents[1] / "cli"


def _public_names() -> set[str]:
    """Public callables and classes of the module: defined there or imported into it."""
    helpers = ("typing", "collections.abc", "pathlib", "__future__")
    names = set()
    for name, value in vars(api).items():
        if name.startswith("_") or inspect.ismodule(value) or name == "TYPE_CHECKING":
            continue
        if getattr(value, "__module__", None) in helpers:
            continue  # typing and language helpers the module itself uses
        if getattr(value, "__module__", None) == "strata13.errors":
            continue  # the error tree is public in strata13.errors
        names.add(name)
    return names


def test_all_lists_every_public_name() -> None:
    assert set(api.__all__) == _public_names()
    assert len(api.__all__) == len(set(api.__all__))


def test_every_listed_name_exists_and_is_documented() -> None:
    for name in api.__all__:
        assert hasattr(api, name), name
        value = getattr(api, name)
        if callable(value):
            doc = (value.__doc__ or "").strip()
            assert doc, f"{name} has no docstring"
            assert not doc.startswith(f"{name}("), f"{name} has only the generated docstring"


def test_no_public_function_returns_bare_any() -> None:
    for name in api.__all__:
        value = getattr(api, name)
        if not inspect.isfunction(value) or value.__module__ != api.__name__:
            continue
        ret = inspect.signature(value).return_annotation
        assert ret is not inspect.Signature.empty, f"{name} has no return type"
        assert str(ret) not in ("Any", "typing.Any", "object"), f"{name} returns {ret}"


def test_signatures_resolve() -> None:
    """Every annotation names a real type (the ones under TYPE_CHECKING included)."""
    from typing import Unpack

    import pandas as pd
    import pyarrow as pa
    from strata13.compile.ages.chronology import Interval, SectionModel
    from strata13.compile.derive.recompute import RecomputeResult
    from strata13.compile.export.artifact import Artifact
    from strata13.compile.integrity.corrections import CorrectResult
    from strata13.compile.integrity.overlaps import Tolerances
    from strata13.compile.query.regions import Region
    from strata13.compile.query.sqlguard import SqlResult
    from strata13.compile.read.propose import Proposal
    from strata13.compile.screening.evaluate import Screening
    from strata13.compile.store.lake import Compacted
    from strata13.compile.store.move import Moved
    from strata13.schemas.timescales import TimeScale

    local = {
        "pd": pd,
        "pa": pa,
        "Interval": Interval,
        "SectionModel": SectionModel,
        "RecomputeResult": RecomputeResult,
        "Artifact": Artifact,
        "CorrectResult": CorrectResult,
        "Region": Region,
        "SqlResult": SqlResult,
        "Compacted": Compacted,
        "Moved": Moved,
        "Proposal": Proposal,
        "Screening": Screening,
        "TimeScale": TimeScale,
        "Tolerances": Tolerances,
        "Unpack": Unpack,
    }
    checked = []
    for name in api.__all__:
        value = getattr(api, name)
        if inspect.isfunction(value) and value.__module__ == api.__name__:
            hints = typing.get_type_hints(value, localns=local)  # raises on an unknown name
            assert "return" in hints, f"{name} has no return annotation"
            checked.append(name)
    assert len(checked) > 30  # the public functions were all looked at


def test_the_cli_imports_only_the_api_of_the_library() -> None:
    pattern = re.compile(
        r"strata13\.compile\.(?!api\b)[\w.]+|from strata13\.compile import (?!api\b)"
    )
    for path in sorted(CLI.glob("*.py")):
        hits = pattern.findall(path.read_text(encoding="utf-8"))
        assert not hits, f"{path.name} imports {hits}"


def test_artifact_hashes_each_file_and_writes_the_manifest_once(tmp_path: pathlib.Path) -> None:
    import hashlib
    import json

    import pytest
    from strata13.compile.export.artifact import Artifact

    art = Artifact(tmp_path / "out")
    art.open()
    art.write_text("a.txt", "alpha\n")
    part = art.sub("curve", "curve_manifest.json")
    part.open()
    part.write_text("b.csv", "x\n1\n")
    part.finish({"what": "curve"})
    art.finish({"what": "export"})
    m = json.loads((tmp_path / "out" / "manifest.json").read_text(encoding="utf-8"))
    listed = {f["path"]: f["sha256"] for f in m["files"]}
    assert set(listed) == {"a.txt", "curve/b.csv"}  # the part's own manifest is not listed
    for path, digest in listed.items():
        assert hashlib.sha256((tmp_path / "out" / path).read_bytes()).hexdigest() == digest
    assert (tmp_path / "out" / "curve" / "curve_manifest.json").is_file()
    with pytest.raises(RuntimeError):
        art.write_text("late.txt", "after the manifest\n")
