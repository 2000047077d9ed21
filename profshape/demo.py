"""Where the bundled demo scenario lives (installed package or source tree)."""

from __future__ import annotations

from importlib import resources
from pathlib import Path

__all__ = ["demo_data_folder"]


def demo_data_folder() -> Path:
    """The folder of the demo data set and its calibration file ``demo.toml``.

    Installed, it is the package ``profshape.demo_data`` (the repository's
    ``data_demo/`` folder); run from a source checkout, ``data_demo/`` itself.
    """
    try:
        folder = Path(str(resources.files("profshape.demo_data")))
    except ModuleNotFoundError:
        folder = Path(__file__).resolve().parent.parent / "data_demo"
    if not (folder / "demo.toml").exists():  # pragma: no cover - broken install
        raise FileNotFoundError(f"the demo scenario is missing from {folder}; reinstall profshape.")
    return folder
