"""profshape.cli as a package: its commands, entry points, and no argparse in the physics."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import profshape
from profshape.cli import EXIT_BAD_INPUT, _parser, main

PACKAGE = Path(profshape.__file__).parent


def test_every_command_is_registered():
    sub = next(a for a in _parser()._actions if a.dest == "command")
    assert set(sub.choices) == {"demo", "calibrate", "resume", "report", "init", "export",
                                "compare", "validate", "solve"}


def test_no_command_prints_help_and_says_bad_input(capsys):
    assert main([]) == EXIT_BAD_INPUT
    assert "COMMAND" in capsys.readouterr().out


def test_argparse_only_in_the_cli_package():
    users = sorted(str(p.relative_to(PACKAGE)) for p in PACKAGE.rglob("*.py")
                   if "argparse" in p.read_text(encoding="utf-8") and "cli" not in p.parts)
    assert users == []


def test_python_dash_m_profshape_and_profshape_cli():
    for module in ("profshape", "profshape.cli"):
        proc = subprocess.run([sys.executable, "-m", module, "--version"], capture_output=True,
                              text=True, timeout=120)
        assert proc.returncode == 0 and proc.stdout.startswith("profshape "), proc.stderr


def test_console_script_points_at_main():
    import tomllib

    pyproject = tomllib.loads((PACKAGE.parent / "pyproject.toml").read_text(encoding="utf-8"))
    assert pyproject["project"]["scripts"]["profshape"] == "profshape.cli:main"
