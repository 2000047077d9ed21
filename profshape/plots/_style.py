"""Shared look of profshape figures and the save helper (private).

The scheme: a near-black ink for data, a deep blue-green for the best fit,
band fills taken from the light end of the cividis map at two lightness
steps, and misfit shading on cividis (sequential and readable in grey scale).
Lines differ in dash pattern as well as colour, markers in shape.
"""

from __future__ import annotations

from collections.abc import Iterable
from pathlib import Path
from typing import TYPE_CHECKING, Any, Literal

from ..exceptions import InputDataError

if TYPE_CHECKING:
    from matplotlib.typing import RcKeyType

__all__: list[str] = []

INK = "#1d1f24"
BEST = "#0f4c5c"
MEDIAN = "#5b6770"
BAND_FILLS = ("#c9c6a6", "#e9e6cf")  # inner (narrow level), outer (wide level)
FAIL = "#a23b2a"
REFERENCE = "#8a4f7d"  # a muted plum, apart from the best fit and the failures
POSTERIOR = "#2b2d42"
CMAP = "cividis"
CMAP_REVERSED = "cividis_r"  # low misfit bright, high misfit dark
PALETTE = ("#0f4c5c", "#b5651d", "#5b8e3e", "#8a4f7d", "#3a5f8f", "#7a6a3a")  # runs compared
MARKERS = ("o", "s", "^", "D", "v", "P", "X", "*")
DASHES = ("-", "--", "-.", ":")
RC: dict[RcKeyType, Any] = {
    "font.size": 9.0,
    "axes.titlesize": 9.5,
    "axes.labelsize": 9.0,
    "axes.spines.top": False,
    "axes.spines.right": False,
    "axes.grid": True,
    "grid.color": "#dcdcdc",
    "grid.linewidth": 0.5,
    "legend.frameon": False,
    "legend.fontsize": 8.0,
    "savefig.dpi": 150,
}


FigureLayout = Literal["constrained", "compressed", "tight"]


def new_figure(width_in: float, height_in: float,
               layout: FigureLayout | None = "constrained") -> Any:
    """A matplotlib Figure not attached to pyplot (headless; no global state)."""
    from matplotlib.figure import Figure

    return Figure(figsize=(width_in, height_in), layout=layout)


def style() -> Any:
    """Context manager applying :data:`RC`."""
    import matplotlib

    return matplotlib.rc_context(RC)


def save(fig: Any, paths: str | Path | Iterable[str | Path] | None) -> None:
    """Save ``fig`` to each path (format from the suffix, e.g. ``.png``, ``.svg``)."""
    if paths is None:
        return
    items = [paths] if isinstance(paths, str | Path) else paths
    path_list = [Path(p) for p in items]
    for path in path_list:
        if not path.suffix:
            raise InputDataError(
                f"plot path {str(path)!r} has no suffix; end it in .png, .svg or .pdf."
            )
    for k, path in enumerate(path_list):
        path.parent.mkdir(parents=True, exist_ok=True)
        with style():
            fig.savefig(path)
        if k == 0 and len(path_list) > 1 and fig.get_layout_engine() is not None:
            # the layout is solved; the other formats reuse it (constrained layout is the
            # slowest part of drawing a many-panel figure)
            fig.set_layout_engine("none")


def band_levels(columns: Iterable[str]) -> list[float]:
    """Levels present as ``lower_<level>`` columns, widest first."""
    levels = sorted({float(c.split("_", 1)[1]) for c in columns if c.startswith("lower_")},
                    reverse=True)
    return levels


def level_label(level: float) -> str:
    return f"{100 * level:g} % band"
