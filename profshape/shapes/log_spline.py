"""Monotone-safe cubic spline (PCHIP) in log10 through K nodes."""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import numpy as np

from ..exceptions import InputDataError
from ..profile import ProfileKind
from ._base import Parameter, ShapeFamily

__all__ = ["LogSpline", "pchip_evaluate"]


class LogSpline(ShapeFamily):
    """A shape-preserving cubic spline in log10 through K nodes.

    The interpolant is the piecewise-cubic Hermite interpolant of Fritsch and
    Carlson (SIAM J. Numer. Anal. 17, 1980) with the weighted-harmonic-mean
    slopes of Fritsch and Butland (1984), the same construction as
    :class:`scipy.interpolate.PchipInterpolator`: it never overshoots the node
    values, so the profile stays within the bounds of the levels and a
    monotone set of nodes gives a monotone profile. Outside the first and
    last node the profile is held constant.

    Coefficients, in order:

    - ``log10_level_0 … log10_level_{K-1}``: log10 of the profile at the nodes.
    - ``node_z_m_1 … node_z_m_{K-2}``: interior node positions [m] (only when
      ``free_nodes``); each moves within its own interval, so nodes never cross.

    Parameters
    ----------
    n_nodes : int, default=4
        Number of nodes K (at least 2).
    channel_length_m : float, default=0.025
        Channel length [m].
    domain_length_m : float, optional
        Last node position [m]; default 2.5 channel lengths.
    node_z_m : sequence of float, optional
        Fixed node positions [m], strictly increasing (overrides the default
        evenly spaced nodes from 0 to ``domain_length_m``).
    free_nodes : bool, default=False
        Make the interior node positions coefficients too.
    kind : {"bohm", "frequency"}, default="bohm"
    level_bounds : (float, float), optional
        Bounds of every log10 level; default (-4, 0) for Bohm-like coefficients.
    bounds : dict, optional
        Overrides of individual bounds, name → (lower, upper).
    """

    name = "log_spline"

    def __init__(
        self,
        n_nodes: int = 4,
        channel_length_m: float = 0.025,
        domain_length_m: float | None = None,
        node_z_m: Sequence[float] | None = None,
        free_nodes: bool = False,
        kind: ProfileKind = "bohm",
        level_bounds: tuple[float, float] | None = None,
        bounds: dict[str, tuple[float, float]] | None = None,
    ) -> None:
        self.kind = kind
        if node_z_m is not None:
            nodes = np.asarray(node_z_m, dtype=float)
            if nodes.ndim != 1 or nodes.size < 2 or not np.all(np.isfinite(nodes)):
                raise InputDataError(
                    f"log_spline: node_z_m must be at least 2 finite positions [m]; got {node_z_m!r}."
                )
            if np.any(np.diff(nodes) <= 0):
                raise InputDataError(
                    f"log_spline: node_z_m must be strictly increasing; got {nodes.tolist()}."
                )
            n_nodes = nodes.size
        else:
            if int(n_nodes) != n_nodes or n_nodes < 2:
                raise InputDataError(f"log_spline: n_nodes must be an integer >= 2; got {n_nodes!r}.")
            n_nodes = int(n_nodes)
            end = float(domain_length_m) if domain_length_m is not None else 2.5 * channel_length_m
            if not end > 0:
                raise InputDataError(f"log_spline: domain_length_m must be > 0; got {end!r}.")
            nodes = np.linspace(0.0, end, n_nodes)
        self.node_z_m = nodes
        self.free_nodes = bool(free_nodes) and n_nodes > 2
        unit = "log10(-)" if kind == "bohm" else "log10(1/s)"
        lb = level_bounds if level_bounds is not None else ((-4.0, 0.0) if kind == "bohm"
                                                            else (5.0, 8.5))
        params = [Parameter(f"log10_level_{k}", lb[0], lb[1], unit, f"level at node {k}")
                  for k in range(n_nodes)]
        if self.free_nodes:
            mids = 0.5 * (nodes[:-1] + nodes[1:])
            for k in range(1, n_nodes - 1):
                params.append(Parameter(f"node_z_m_{k}", mids[k - 1], mids[k], "m",
                                        f"position of node {k}"))
        super().__init__(params)
        if bounds:
            self._parameters = self.with_bounds(**bounds).parameters

    @property
    def n_nodes(self) -> int:
        """Number of nodes K."""
        return self.node_z_m.size

    def node_positions(self, coefficients: Any) -> np.ndarray:
        """Node positions [m] for coefficient vector(s), shape (K,) or (n, K)."""
        c = np.asarray(self.validate(coefficients))
        c2 = np.atleast_2d(c)
        x = np.broadcast_to(self.node_z_m, (c2.shape[0], self.n_nodes)).copy()
        if self.free_nodes:
            x[:, 1:-1] = c2[:, self.n_nodes:]
        return x if c.ndim == 2 else x[0]

    def _log10_values(self, c: Any, z: Any, xp: Any) -> Any:
        K = self.n_nodes
        y = c[:, :K]
        from ._xp import to_backend

        x = xp.broadcast(to_backend(self.node_z_m, c)[None, :], (c.shape[0], K))
        if self.free_nodes:
            x = xp.concat([x[:, :1], c[:, K:], x[:, -1:]], axis=1)
        return pchip_evaluate(x, y, z, xp)


def _edge_slope(h0: Any, h1: Any, m0: Any, m1: Any, xp: Any) -> Any:
    """One-sided three-point end slope, limited to keep the shape (as in scipy)."""
    d = ((2.0 * h0 + h1) * m0 - h0 * m1) / (h0 + h1)
    flip = xp.sign(d) != xp.sign(m0)
    big = (xp.sign(m0) != xp.sign(m1)) & (xp.abs(d) > 3.0 * xp.abs(m0))
    d = xp.where(flip, xp.zeros_like(d), d)
    return xp.where(~flip & big, 3.0 * m0, d)


def pchip_evaluate(x: Any, y: Any, z: Any, xp: Any) -> Any:
    """Evaluate PCHIP interpolants row by row, constant beyond the end nodes.

    Parameters
    ----------
    x, y : arrays of shape (n, K)
        Node positions (strictly increasing along each row) and values.
    z : array of shape (m,)
        Evaluation positions.
    xp : backend namespace (see ``profshape.shapes._xp``).

    Returns
    -------
    array of shape (n, m)
    """
    n, K = y.shape
    h = x[:, 1:] - x[:, :-1]
    m = (y[:, 1:] - y[:, :-1]) / h
    if K == 2:
        d = xp.concat([m, m], axis=1)
    else:
        sm = xp.sign(m)
        flat = (sm[:, 1:] != sm[:, :-1]) | (m[:, 1:] == 0) | (m[:, :-1] == 0)
        w1 = 2.0 * h[:, 1:] + h[:, :-1]
        w2 = h[:, 1:] + 2.0 * h[:, :-1]
        one = xp.zeros_like(m) + 1.0
        m_safe = xp.where(m == 0, one, m)
        whmean = (w1 / m_safe[:, :-1] + w2 / m_safe[:, 1:]) / (w1 + w2)
        whmean = xp.where(flat, xp.zeros_like(whmean) + 1.0, whmean)
        inner = xp.where(flat, xp.zeros_like(whmean), 1.0 / whmean)
        d0 = _edge_slope(h[:, :1], h[:, 1:2], m[:, :1], m[:, 1:2], xp)
        d1 = _edge_slope(h[:, -1:], h[:, -2:-1], m[:, -1:], m[:, -2:-1], xp)
        d = xp.concat([d0, inner, d1], axis=1)
    zz = xp.broadcast(z[None, :], (n, z.shape[0]))
    zc = xp.minimum(xp.maximum(zz, x[:, :1]), x[:, -1:])
    idx = xp.clip(xp.searchsorted(x, zc) - 1, 0, K - 2)
    x0 = xp.take_along(x, idx)
    x1 = xp.take_along(x, idx + 1)
    y0 = xp.take_along(y, idx)
    y1 = xp.take_along(y, idx + 1)
    d0 = xp.take_along(d, idx)
    d1 = xp.take_along(d, idx + 1)
    hh = x1 - x0
    t = (zc - x0) / hh
    t2 = t * t
    t3 = t2 * t
    h00 = 2 * t3 - 3 * t2 + 1
    h10 = t3 - 2 * t2 + t
    h01 = -2 * t3 + 3 * t2
    h11 = t3 - t2
    return h00 * y0 + h10 * hh * d0 + h01 * y1 + h11 * hh * d1
