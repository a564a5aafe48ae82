"""What the CLI tells a user (errors, hints, notes) never sends them to the code: no Python
function, no module file, no DEVELOPERS.md. Read from the source, so a new message is
checked the day it is written."""

from __future__ import annotations

import ast
import builtins
import re
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
FOLDERS = ("cli", "compile", "schemas", "strata13")
# calls whose text a user reads: our error classes and the CLI's message functions
SAID = re.compile(r"(Error|Refused|Failed|Interrupted)$|^(error|message|note|warning|echo)$")
# Python's own exceptions are programming errors, not messages to a user
BUILTIN = {name for name in dir(builtins) if name.endswith("Error")} | {
    "Exception",
    "SystemExit",
}
CODE = [
    (re.compile(r"DEVELOPERS"), "names DEVELOPERS.md"),
    (re.compile(r"\b[A-Za-z_][A-Za-z0-9_.]*\(\)"), "names a Python function"),
    (re.compile(r"\b[a-z_/]+\.py\b"), "names a module file"),
    (re.compile(r"\w::\w"), "names a code object"),
]


def _name(func: ast.expr) -> str:
    if isinstance(func, ast.Name):
        return func.id
    if isinstance(func, ast.Attribute):
        return func.attr
    return ""


def _texts(node: ast.AST) -> list[str]:
    """The literal text of a message argument (f-string parts included)."""
    return [
        n.value for n in ast.walk(node) if isinstance(n, ast.Constant) and isinstance(n.value, str)
    ]


def messages() -> list[tuple[str, int, str]]:
    found = []
    for folder in FOLDERS:
        for path in sorted((ROOT / folder).rglob("*.py")):
            tree = ast.parse(path.read_text(encoding="utf-8"))
            for node in ast.walk(tree):
                if not isinstance(node, ast.Call):
                    continue
                name = _name(node.func)
                if not SAID.search(name) or name in BUILTIN:
                    continue
                for arg in [*node.args, *(k.value for k in node.keywords)]:
                    for text in _texts(arg):
                        found.append((f"{path.relative_to(ROOT)}", node.lineno, text))
    return found


def test_the_scan_sees_the_messages() -> None:
    """The scan reads the hints it is meant to read (it would pass on nothing otherwise)."""
    said = messages()
    assert len(said) > 300
    assert any("Example: --format csv" in t for _, _, t in said)  # cli/common.py's hint


def test_no_hint_sends_a_user_to_the_code() -> None:
    bad = [
        f"{where}:{line}: {why}: {text!r}"
        for where, line, text in messages()
        for pattern, why in CODE
        if pattern.search(text)
    ]
    assert not bad, "\n".join(bad)


def test_the_patterns_catch_what_they_name() -> None:
    samples = {
        "see DEVELOPERS.md for columns": "names DEVELOPERS.md",
        "use reconstruct() instead": "names a Python function",
        "listed in schemas/fields.py": "names a module file",
        "see Store::path": "names a code object",
    }
    for text, why in samples.items():
        assert [w for p, w in CODE if p.search(text)][:1] == [why], text
    assert not [w for p, w in CODE if p.search("Example: --out DIR (a folder), e.g. 0.5 s")]
