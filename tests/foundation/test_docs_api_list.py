"""docs/api.rst, the one list of documented modules, names every public module and no other."""

from __future__ import annotations

import re
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]


def _public_modules() -> set[str]:
    out = set()
    for path in (ROOT / "profshape").rglob("*.py"):
        parts = path.relative_to(ROOT).with_suffix("").parts
        if parts[-1] == "__init__":
            parts = parts[:-1]
        if any(p.startswith("_") for p in parts):
            continue  # private modules (and _version) are documented through their package
        out.add(".".join(parts))
    return out


def test_api_page_lists_every_public_module():
    listed = set(re.findall(r"^   (profshape[\w.]*)\s*$", (ROOT / "docs" / "api.rst").read_text(), re.M))
    public = _public_modules()
    assert public - listed == set(), f"add to docs/api.rst: {sorted(public - listed)}"
    assert listed - public == set(), f"no such module, remove from docs/api.rst: {sorted(listed - public)}"
