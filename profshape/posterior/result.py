"""The result of posterior sampling, and its save/load to a folder."""

from __future__ import annotations

import json
import math
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from ..atomic_write import atomic_write_bytes, atomic_write_text
from ..exceptions import InputDataError
from .check import PosteriorCheck

__all__ = ["META_FILE", "SAMPLES_FILE", "PosteriorResult"]

#: The result's metadata (names, MAP, diagnostics, settings) in its folder.
META_FILE = "posterior.json"
#: The samples (with ``log_posterior`` and ``realisation``) in its folder.
SAMPLES_FILE = "posterior_samples.parquet"


@dataclass
class PosteriorResult:
    """Posterior over the coefficients of a calibration problem.

    Attributes
    ----------
    names : tuple of str
        Parameter names (``problem.names``), in order.
    map_coefficients : dict of str to float
        Maximum a posteriori coefficients (physical units).
    map_log_likelihood : float
        Real (forward-model) log-likelihood at the MAP [nats].
    map_source : str
        ``"surrogate_optimum"``, ``"chain"`` or ``"best_trial"``: where the MAP came from.
    samples : DataFrame
        Posterior sample, one column per parameter name (physical units).
    unit_samples : ndarray of shape (n, d)
        The same sample in unit-cube coordinates.
    log_posterior : ndarray of shape (n,)
        Log posterior density of each sample under the target it was drawn
        from (surrogate realisation or exact), up to a constant [nats].
    realisation : ndarray of shape (n,)
        Index of the GP realisation each sample was drawn on (-1: GP mean or exact).
    diagnostics : dict
        Sampler diagnostics (see :func:`~profshape.posterior.sampler.combine_diagnostics`)
        plus ``method``, ``n_gp_trials``, ``n_forward_runs``, ``surrogate`` hyper-parameters.
    check : PosteriorCheck or None
        Posterior predictive check (None when ``n_check_draws == 0``).
    forward_runs : DataFrame
        Every forward run made here (refinement, MAP, check) in the trial-log
        layout, column ``source`` telling which; append them to the trial log.
    settings : dict
        The :class:`PosteriorSettings` used, as a dict.
    """

    names: tuple[str, ...]
    map_coefficients: dict[str, float]
    map_log_likelihood: float
    map_source: str
    samples: pd.DataFrame
    unit_samples: np.ndarray
    log_posterior: np.ndarray
    realisation: np.ndarray
    diagnostics: dict[str, Any]
    check: PosteriorCheck | None = None
    forward_runs: pd.DataFrame = field(default_factory=pd.DataFrame)
    settings: dict[str, Any] = field(default_factory=dict)
    surrogate: Any = field(default=None, repr=False)

    @property
    def map_vector(self) -> np.ndarray:
        """MAP coefficients as a vector in :attr:`names` order."""
        return np.array([self.map_coefficients[n] for n in self.names], dtype=float)

    def draw(self, n: int, seed: int | None = None, replace: bool = False) -> np.ndarray:
        """``n`` coefficient vectors picked at random from the sample, shape (n, d)."""
        rng = np.random.default_rng(seed)
        total = len(self.samples)
        if total == 0:
            raise InputDataError("posterior: the sample is empty; nothing to draw from.")
        idx = rng.choice(total, size=int(n), replace=replace or int(n) > total)
        return self.samples.to_numpy(dtype=float)[idx]

    def summary(self, levels: tuple[float, ...] = (0.68, 0.95)) -> pd.DataFrame:
        """Per-parameter mean, standard deviation, median, MAP and central intervals."""
        rows = []
        for name in self.names:
            x = self.samples[name].to_numpy(dtype=float)
            row: dict[str, Any] = {
                "name": name, "mean": float(np.mean(x)), "std": float(np.std(x, ddof=1)),
                "median": float(np.median(x)), "map": self.map_coefficients[name],
            }
            for lev in levels:
                lo, hi = np.quantile(x, [(1 - lev) / 2, (1 + lev) / 2])
                row[f"lower_{lev:g}"] = float(lo)
                row[f"upper_{lev:g}"] = float(hi)
            ess = self.diagnostics.get("effective_sample_size", {})
            row["effective_sample_size"] = float(ess.get(name, math.nan)) if isinstance(ess, dict) \
                else math.nan
            rows.append(row)
        return pd.DataFrame(rows)

    # ------------------------------------------------------------ persistence
    def save(self, folder: str | Path) -> Path:
        """Write the result to ``folder`` (samples as parquet, the rest as JSON).

        The surrogate itself is not saved; everything plots need is.
        """
        folder = Path(folder)
        folder.mkdir(parents=True, exist_ok=True)
        frame = self.samples.copy()
        frame["log_posterior"] = self.log_posterior
        frame["realisation"] = self.realisation
        atomic_write_bytes(folder / SAMPLES_FILE, lambda tmp: frame.to_parquet(tmp, index=False))
        runs = self.forward_runs
        if len(runs):
            atomic_write_bytes(folder / "posterior_forward_runs.parquet",
                               lambda tmp: runs.to_parquet(tmp, index=False))
        if self.check is not None:
            table = self.check.table
            atomic_write_bytes(folder / "posterior_check.parquet",
                               lambda tmp: table.to_parquet(tmp, index=False))
        meta = {
            "names": list(self.names),
            "map_coefficients": self.map_coefficients,
            "map_log_likelihood": _json_float(self.map_log_likelihood),
            "map_source": self.map_source,
            "diagnostics": _jsonable(self.diagnostics),
            "check": None if self.check is None else _jsonable(self.check.summary()),
            "settings": _jsonable(self.settings),
        }
        atomic_write_text(folder / META_FILE, json.dumps(meta, indent=2))
        return folder

    @classmethod
    def load(cls, folder: str | Path) -> PosteriorResult:
        """Read a result written by :meth:`save`.

        Raises
        ------
        InputDataError
            If ``posterior.json`` or ``posterior_samples.parquet`` is missing.
        """
        folder = Path(folder)
        meta_path = folder / META_FILE
        samples_path = folder / SAMPLES_FILE
        for p in (meta_path, samples_path):
            if not p.exists():
                raise InputDataError(
                    f"posterior folder {str(folder)!r}: missing {p.name}; save a result there "
                    "with PosteriorResult.save first."
                )
        meta = json.loads(meta_path.read_text())
        frame = pd.read_parquet(samples_path)
        names = tuple(meta["names"])
        samples = frame[list(names)].copy()
        check = None
        if meta.get("check") is not None and (folder / "posterior_check.parquet").exists():
            summary = dict(meta["check"])
            check = PosteriorCheck(table=pd.read_parquet(folder / "posterior_check.parquet"),
                                   **{k: v for k, v in summary.items()})
        runs_path = folder / "posterior_forward_runs.parquet"
        bounds = meta["settings"].get("_bounds")
        unit = np.full((len(samples), len(names)), np.nan)
        if bounds is not None:
            b = np.asarray(bounds, dtype=float)
            unit = (samples.to_numpy(dtype=float) - b[:, 0]) / (b[:, 1] - b[:, 0])
        return cls(
            names=names,
            map_coefficients={k: float(v) for k, v in meta["map_coefficients"].items()},
            map_log_likelihood=float(meta["map_log_likelihood"]),
            map_source=str(meta["map_source"]),
            samples=samples,
            unit_samples=unit,
            log_posterior=frame["log_posterior"].to_numpy(dtype=float),
            realisation=frame["realisation"].to_numpy(dtype=int),
            diagnostics=meta["diagnostics"],
            check=check,
            forward_runs=pd.read_parquet(runs_path) if runs_path.exists() else pd.DataFrame(),
            settings=meta["settings"],
        )


def _json_float(x: float) -> float | str:
    x = float(x)
    return x if math.isfinite(x) else str(x)


def _jsonable(obj: Any) -> Any:
    if isinstance(obj, dict):
        return {str(k): _jsonable(v) for k, v in obj.items()}
    if isinstance(obj, list | tuple):
        return [_jsonable(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return _jsonable(obj.tolist())
    if isinstance(obj, bool | np.bool_):
        return bool(obj)
    if isinstance(obj, int | np.integer):
        return int(obj)
    if isinstance(obj, float | np.floating):
        return _json_float(float(obj))
    return obj
