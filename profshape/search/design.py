"""Initial design: scrambled Sobol points and user-supplied starting shapes."""

from __future__ import annotations

import hashlib
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np
from scipy.stats import qmc

from ..exceptions import InputDataError

__all__ = ["derived_seed", "sobol_point", "sobol_points", "user_points_to_unit"]


def derived_seed(seed: int, *keys: int | str) -> int:
    """A 63-bit seed that depends only on ``seed`` and ``keys``.

    Proposal ``i`` of a search draws its randomness from
    ``derived_seed(seed, "proposal", i)``, so a resumed search reproduces the
    uninterrupted one.
    """
    text = ":".join(str(k) for k in (seed, *keys))
    return int.from_bytes(hashlib.sha256(text.encode()).digest()[:8], "little") >> 1


def sobol_points(n: int, dim: int, seed: int, start: int = 0) -> np.ndarray:
    """Points ``start .. start + n - 1`` of a scrambled Sobol sequence.

    Parameters
    ----------
    n : int
        Number of points.
    dim : int
        Dimension of the unit cube.
    seed : int
        Scrambling seed (Owen scrambling, ``scipy.stats.qmc.Sobol``).
    start : int, default=0
        Index of the first point in the sequence.

    Returns
    -------
    ndarray of shape (n, dim)
        Points in ``[0, 1)^dim``.
    """
    engine = qmc.Sobol(d=dim, scramble=True, seed=np.random.default_rng(seed))
    if start:
        engine.fast_forward(start)
    points: np.ndarray = engine.random(n)
    return points


def sobol_point(index: int, dim: int, seed: int) -> np.ndarray:
    """Point ``index`` of the scrambled Sobol sequence of :func:`sobol_points`."""
    point: np.ndarray = sobol_points(1, dim, seed, start=index)[0]
    return point


def user_points_to_unit(
    points: Sequence[Any], names: Sequence[str], to_unit: Any
) -> np.ndarray:
    """Convert user starting shapes to unit-cube rows.

    Parameters
    ----------
    points : sequence of dict or array_like
        Coefficients in physical units, as ``{name: value}`` dicts or arrays in
        ``names`` order.
    names : sequence of str
        Parameter names of the search space.
    to_unit : callable
        ``to_unit(coefficients (d,)) -> (d,)`` of the search space.

    Returns
    -------
    ndarray of shape (n_points, d)

    Raises
    ------
    InputDataError
        If a dict lacks or adds a name, an array has the wrong length, or a point
        lies outside the bounds.
    """
    rows = []
    d = len(names)
    for i, p in enumerate(points):
        if isinstance(p, Mapping):
            missing = [n for n in names if n not in p]
            extra = [k for k in p if k not in names]
            if missing or extra:
                raise InputDataError(
                    f"initial_points[{i}]: keys must be exactly {list(names)}; "
                    f"missing {missing}, unknown {extra}."
                )
            x = np.array([float(p[n]) for n in names])
        else:
            x = np.asarray(p, dtype=float).reshape(-1)
            if x.size != d:
                raise InputDataError(
                    f"initial_points[{i}]: expected {d} values in the order {list(names)}; "
                    f"got {x.size}."
                )
        if not np.all(np.isfinite(x)):
            raise InputDataError(f"initial_points[{i}]: values must be finite; got {x.tolist()}.")
        u = np.asarray(to_unit(x), dtype=float).reshape(-1)
        bad = np.flatnonzero((u < -1e-9) | (u > 1 + 1e-9))
        if bad.size:
            raise InputDataError(
                f"initial_points[{i}]: {[names[int(j)] for j in bad]} outside the search bounds "
                f"(unit-cube values {u[bad].round(4).tolist()}); move the point inside the "
                "bounds or widen them."
            )
        rows.append(np.clip(u, 0.0, 1.0))
    return np.array(rows).reshape(len(rows), d)
