"""The layer rules of DEVELOPERS.md, checked by walking the imports of the source (Python's own
`ast` parser): the foundations and `provenance/` import nothing from the vision side, so a
recipient verifies a package with `cryptography` alone."""

from __future__ import annotations

import ast
import sys
from pathlib import Path

import pytest

import redact

ROOT = Path(redact.__file__).resolve().parent
FOUNDATIONS = ("redact.errors", "redact.jsonio", "redact.hashing", "redact.ranges", "redact.formats", "redact.fsio")
ALLOWED = {
    "formats": FOUNDATIONS,
    "provenance": FOUNDATIONS + ("redact.provenance",),
}
THIRD_PARTY = {"formats": set(), "provenance": {"cryptography"}}


def imports_of(path: Path, pkg: str | None = None) -> set[str]:
    """Every module a file imports, at the top or inside functions (relative imports resolved
    against `pkg`, by default the file's package under redact/)."""
    tree = ast.parse(path.read_text(encoding="utf-8"), str(path))
    if pkg is None:
        pkg = ".".join(path.relative_to(ROOT.parent).with_suffix("").parts[:-1])
    out: set[str] = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            out.update(a.name for a in node.names)
        elif isinstance(node, ast.ImportFrom):
            base = node.module or ""
            if node.level:
                base = ".".join(pkg.split(".")[: len(pkg.split(".")) - node.level + 1] + ([base] if base else []))
            if base == "redact":  # `from redact import jsonio`: the names are modules of ours
                out.update(f"redact.{a.name}" for a in node.names if a.name != "__version__")
            else:
                out.add(base)
    return out


@pytest.mark.parametrize("layer", sorted(ALLOWED))
def test_layer_imports_only_what_it_may(layer):
    files = sorted((ROOT / layer).rglob("*.py"))
    assert files
    bad = []
    for f in files:
        for mod in imports_of(f):
            top = mod.split(".")[0]
            if mod.startswith("redact"):
                if not any(mod == a or mod.startswith(a + ".") for a in ALLOWED[layer]):
                    bad.append(f"{f.relative_to(ROOT)} imports {mod}")
            elif top not in sys.stdlib_module_names and top not in THIRD_PARTY[layer] and top != "__future__":
                bad.append(f"{f.relative_to(ROOT)} imports {mod}")
    assert not bad, bad


def test_the_walker_sees_imports_inside_functions(tmp_path):
    """The check could fail: an import hidden in a function body is found."""
    f = ROOT / "provenance" / "verify.py"
    assert "redact.provenance.contents" in imports_of(f)
    src = tmp_path / "probe.py"
    src.write_text("def f():\n    import numpy\n    from redact.vision import pose\n    from ..media import video\n",
                   encoding="utf-8")
    assert {"numpy", "redact.vision", "redact.media"} <= imports_of(src, "redact.provenance")


def test_fsio_is_a_foundation():
    """redact.fsio (atomic writes, locks) is used by provenance/, so it imports only the standard
    library and the error hierarchy."""
    mods = imports_of(ROOT / "fsio.py", "redact")
    ours = {m for m in mods if m.startswith("redact")}
    assert ours == {"redact.errors"}
    assert all(m.split(".")[0] in sys.stdlib_module_names or m == "__future__" for m in mods - ours)
