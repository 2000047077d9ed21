"""The package list in pyproject.toml covers every subpackage (so installs are complete)."""

from __future__ import annotations

import tomllib
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]


def test_every_subpackage_is_listed():
    config = tomllib.loads((ROOT / "pyproject.toml").read_text())["tool"]["setuptools"]
    listed = set(config["packages"])
    found = {".".join(p.parent.relative_to(ROOT).parts)
             for p in (ROOT / "profshape").rglob("__init__.py")}
    assert found <= listed, f"add {sorted(found - listed)} to [tool.setuptools] packages"
    assert config["package-dir"]["profshape.demo_data"] == "data_demo"
    for data_file in ("operating_points.csv", "ion_velocity.csv", "scalars.csv", "demo.toml", "README.md"):
        assert (ROOT / "data_demo" / data_file).exists(), data_file


def test_readme_has_the_two_setup_commands():
    text = (ROOT / "README.md").read_text()
    for marker in ("<!-- setup:demo -->", "<!-- setup:test -->"):
        block = text.split(marker, 1)[1].split("```", 2)[1]
        assert "-c constraints.txt" in block, marker
    assert "torch==2.13.0" in (ROOT / "constraints.txt").read_text()
