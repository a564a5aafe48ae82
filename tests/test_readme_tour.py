"""The README tour is real: every tour block's commands run in order in a fresh folder, and
each output must equal what the README shows, up to the documented normalisation (the rules
are in tools/readme_tour.py's docstring and in DEVELOPERS.md, "The README tour"):

1. the run's folder is shown as ``~/strata13``;
2. lines over 150 characters are cut to 149 and ``…``;
3. a shortened output shows its first lines and ``… (N more lines)``, N checked;
4. SHA-256 digests, durations and the strata13 version are not compared.

When it fails, ``python tools/readme_tour.py --write`` rewrites the README from a real run
(read the diff before committing it: a changed number may be a bug)."""

from __future__ import annotations

import importlib.util
import sys
from pathlib import Path
from types import ModuleType

import pytest

ROOT = Path(__file__).resolve().parents[1]


def tool() -> ModuleType:
    spec = importlib.util.spec_from_file_location("readme_tour", ROOT / "tools" / "readme_tour.py")
    assert spec is not None and spec.loader is not None
    module = importlib.util.module_from_spec(spec)
    sys.modules.setdefault("readme_tour", module)  # its dataclasses look themselves up there
    spec.loader.exec_module(module)
    return module


def test_the_normalisation_rules() -> None:
    t = tool()
    folder = Path("/tmp/run-xyz")
    raw = "created store /tmp/run-xyz/tour\n" + "x" * 160 + "\n" + "\n".join("abcde")
    assert t.shown_output(raw, folder, keep=3) == [
        "created store ~/strata13/tour",
        "x" * 149 + "…",
        "a",
        "… (4 more lines)",
    ]
    assert t.shown_output("one\ntwo\n", folder, keep=None) == ["one", "two"]
    forgiven = t.forgiven(["a.png  sha256 5946f0e8df4958ff…", "in 1.2 s", "strata13 0.1.0"])
    assert forgiven == ["a.png  sha256 <sha256>", "in <duration>", "strata13 <version>"]
    # record ids (20 hex digits) and numbers are data: compared
    assert t.forgiven(["8bca75c0a1396f347ae3  1.479"]) == ["8bca75c0a1396f347ae3  1.479"]


def test_a_changed_output_is_found() -> None:
    t = tool()
    text = "x\n<!-- tour -->\n```text\n$ echo one\none\n$ echo two\nthree\n```\n"
    found = t.differences(text, [[["one"], ["two"]]])
    assert len(found) == 1 and "$ echo two" in found[0] and "-three" in found[0]
    assert t.rewritten(text, [[["one"], ["two"]]]) == text.replace("three", "two")


@pytest.mark.slow
def test_the_readme_tour_shows_real_output(tmp_path: Path) -> None:
    t = tool()
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    assert len(t.blocks(text)) >= 2 and sum(len(b.steps) for b in t.blocks(text)) >= 25
    found = t.differences(text, t.run_tour(text, tmp_path))
    assert not found, "\n\n".join(found) + "\n\nrun: python tools/readme_tour.py --write"
