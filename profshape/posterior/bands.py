"""Credible bands from posterior draws: profile, ion velocity and scalar outputs.

Bands are pointwise central intervals: at each position the ``(1 - level) / 2``
and ``(1 + level) / 2`` quantiles of the draws. Ion-velocity and scalar bands
come from forward runs of posterior draws; draws whose run failed are counted
and listed in :attr:`PosteriorBands.draws`, never averaged in.
"""

from __future__ import annotations

import functools
import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from ..atomic_write import atomic_write_bytes
from ..exceptions import InputDataError
from ._evaluate import DrawRun, evaluate_many
from .protocol import PosteriorProblem
from .result import PosteriorResult
from .settings import check_levels

__all__ = [
    "BAND_TABLES",
    "PosteriorBands",
    "band_columns",
    "band_file",
    "emulated_bands",
    "posterior_bands",
    "profile_band",
    "quantile_band",
]

#: The tables of :class:`PosteriorBands`, each saved as :func:`band_file` of its name.
BAND_TABLES = ("profile", "ion_velocity", "scalars", "draws")


def band_file(table: str) -> str:
    """The file name of a band table in a bands folder, e.g. ``bands_profile.parquet``."""
    return f"bands_{table}.parquet"


def _to_parquet(table: pd.DataFrame, path: str) -> None:
    table.to_parquet(path, index=False)


#: Emulator draws start at this many and double until the band's quantiles are stable.
EMULATED_DRAWS_START = 1000
#: Most emulator draws.
EMULATED_DRAWS_MAX = 32000
#: The quantiles are stable when doubling the draws moves none of them by more than
#: this fraction of the widest band's width (common practice, no source).
QUANTILE_STABILITY = 0.02


def band_columns(levels: Sequence[float]) -> list[str]:
    """Column names ``lower_<level>`` / ``upper_<level>`` of the given levels."""
    out = []
    for lev in levels:
        out += [f"lower_{lev:g}", f"upper_{lev:g}"]
    return out


def quantile_band(values: np.ndarray, levels: Sequence[float]) -> dict[str, np.ndarray]:
    """Median and central intervals over axis 0 of ``values`` (n_draws, n), ignoring NaN."""
    v = np.asarray(values, dtype=float)
    out = {"median": np.nanmedian(v, axis=0)}
    for lev in levels:
        lo, hi = np.nanquantile(v, [(1 - lev) / 2, (1 + lev) / 2], axis=0)
        out[f"lower_{lev:g}"] = lo
        out[f"upper_{lev:g}"] = hi
    return out


def profile_band(
    profile_values: Callable[[np.ndarray], np.ndarray] | np.ndarray,
    z_m: np.ndarray,
    levels: Sequence[float] = (0.68, 0.95),
    best: np.ndarray | None = None,
) -> pd.DataFrame:
    """Pointwise credible band of a profile along z.

    Parameters
    ----------
    profile_values : ndarray of shape (n_draws, n_z)
        Profile values of each posterior draw at ``z_m``.
    z_m : ndarray of shape (n_z,)
        Axial positions [m].
    levels : sequence of float
    best : ndarray of shape (n_z,), optional
        The best-fit (MAP) profile, added as column ``map``.

    Returns
    -------
    DataFrame
        Columns ``z_m``, ``median``, ``lower_<level>``, ``upper_<level>`` (and ``map``).
    """
    levels = check_levels(levels, "levels")
    values = np.atleast_2d(np.asarray(profile_values, dtype=float))
    z = np.asarray(z_m, dtype=float)
    if values.shape[1] != z.shape[0]:
        raise InputDataError(
            f"profile_band: values have {values.shape[1]} columns but z_m has {z.shape[0]} points."
        )
    frame = pd.DataFrame({"z_m": z, **quantile_band(values, levels)})
    if best is not None:
        frame["map"] = np.asarray(best, dtype=float)
    return frame


@dataclass
class PosteriorBands:
    """Credible bands and predictive summaries from posterior draws.

    Attributes
    ----------
    levels : tuple of float
    profile : DataFrame
        Columns ``label``, ``quantity`` (``"bohm_coefficient"`` [-] or
        ``"frequency_hz"`` [1/s]), ``z_m``, ``median``, ``lower_<level>``,
        ``upper_<level>``, ``map``: the anomalous profile per operating point.
    ion_velocity : DataFrame
        Columns ``label``, ``z_m``, ``median``, bands, ``map``, ``n_ok`` [m/s].
    scalars : DataFrame
        One row per (``label``, ``name``): ``unit``, ``median``, ``mean``, ``std``,
        bands, ``map``, ``measured``, ``measured_sigma``, ``n_ok``, ``n_failed``.
    draws : DataFrame
        One row per forward-run draw: ``draw``, ``status``, ``reason``,
        ``log_likelihood``, ``reduced_chi2`` and coefficients.
    n_draws, n_ok, n_failed : int
    """

    levels: tuple[float, ...]
    profile: pd.DataFrame
    ion_velocity: pd.DataFrame
    scalars: pd.DataFrame
    draws: pd.DataFrame
    n_draws: int = 0
    n_ok: int = 0
    n_failed: int = 0
    extra: dict[str, Any] = field(default_factory=dict)

    def save(self, folder: str | Path) -> Path:
        """Write the tables as parquet files in ``folder``."""
        folder = Path(folder)
        folder.mkdir(parents=True, exist_ok=True)
        for name in BAND_TABLES:
            atomic_write_bytes(folder / band_file(name),
                               functools.partial(_to_parquet, getattr(self, name)))
        return folder

    @classmethod
    def load(cls, folder: str | Path) -> PosteriorBands:
        """Read tables written by :meth:`save`.

        Raises
        ------
        InputDataError
            If a table is missing.
        """
        folder = Path(folder)
        tables: dict[str, Any] = {}
        for name in BAND_TABLES:
            path = folder / band_file(name)
            if not path.exists():
                raise InputDataError(
                    f"bands folder {str(folder)!r}: missing {path.name}; write it with "
                    "PosteriorBands.save."
                )
            tables[name] = pd.read_parquet(path)
        levels = tuple(
            sorted(float(c.split("_", 1)[1]) for c in tables["profile"].columns
                   if c.startswith("lower_"))
        )
        draws = tables["draws"]
        n_ok = int((draws["status"] == "ok").sum()) if len(draws) else 0
        return cls(levels=levels, n_draws=len(draws), n_ok=n_ok, n_failed=len(draws) - n_ok,
                   **tables)


def _default_z(problem: PosteriorProblem) -> np.ndarray:
    lows, highs = [], []
    for point in problem.dataset.operating_points:
        grid = problem.forward_model.grid(point)
        if grid is not None and len(grid) > 1:
            lows.append(float(np.min(grid)))
            highs.append(float(np.max(grid)))
        iv = problem.dataset[point.label].ion_velocity
        if iv is not None:
            lows.append(float(np.min(iv.z_m)))
            highs.append(float(np.max(iv.z_m)))
    if not lows:
        raise InputDataError("posterior_bands: no grid or data positions; pass z_m explicitly.")
    return np.linspace(min(lows), max(highs), 200)


def _device_field(problem: PosteriorProblem) -> Callable[[np.ndarray, Any], np.ndarray] | None:
    """``B(z, point)`` [T] from a forward model that carries a device with a field map."""
    device = getattr(problem.forward_model, "device", None)
    field_map = getattr(device, "magnetic_field", None)
    if not callable(field_map):
        return None
    return functools.partial(_scaled_field, field_map)


def _scaled_field(field_map: Any, z_m: np.ndarray, point: Any) -> np.ndarray:
    return np.asarray(field_map(z_m), dtype=float) * float(point.magnetic_field_scale)


def _profile_frames(
    problem: PosteriorProblem, coeffs: np.ndarray, map_c: np.ndarray, z: np.ndarray,
    levels: tuple[float, ...],
    magnetic_field_T: Callable[[np.ndarray, Any], np.ndarray] | None,
) -> pd.DataFrame:
    frames = []
    for point in problem.dataset.operating_points:
        label = point.label
        field_T = None if magnetic_field_T is None else np.asarray(magnetic_field_T(z, point))

        def values(c: np.ndarray, lab: str = label, b: np.ndarray | None = field_T) -> np.ndarray:
            prof = problem.profile_for(c, lab)
            return prof(z) if b is None else prof.frequency(z, b)

        draws = np.array([values(c) for c in coeffs])
        frame = profile_band(draws, z, levels, best=values(map_c))
        kind = problem.family.kind
        quantity = "frequency_hz" if (kind == "frequency" or field_T is not None) \
            else "bohm_coefficient"
        frame.insert(0, "quantity", quantity)
        frame.insert(0, "label", label)
        frames.append(frame)
    return pd.concat(frames, ignore_index=True)


def _velocity_frame(
    problem: PosteriorProblem, runs: Sequence[DrawRun], map_run: DrawRun, levels: tuple[float, ...]
) -> pd.DataFrame:
    frames = []
    for label in problem.dataset.labels:
        ok_preds = [r.predictions[label] for r in runs if r.ok and label in r.predictions]
        ref = map_run.predictions.get(label) if map_run.ok else None
        if ref is None or ref.z_m is None:
            ref = next((p for p in ok_preds if p.z_m is not None), None)
        if ref is None or ref.z_m is None:
            continue
        z = np.asarray(ref.z_m, dtype=float)
        values = np.full((max(len(ok_preds), 1), len(z)), np.nan)
        for i, p in enumerate(ok_preds):
            if p.z_m is None:
                continue
            v = np.interp(z, p.z_m, p.ion_velocity_m_s, left=np.nan, right=np.nan)
            values[i] = v
        frame = pd.DataFrame({"label": label, "z_m": z, **quantile_band(values, levels)})
        mp = map_run.predictions.get(label) if map_run.ok else None
        frame["map"] = (np.interp(z, mp.z_m, mp.ion_velocity_m_s) if mp is not None
                        and mp.z_m is not None else np.nan)
        frame["n_ok"] = np.sum(np.isfinite(values), axis=0)
        frames.append(frame)
    cols = ["label", "z_m", "median", *band_columns(levels), "map", "n_ok"]
    return pd.concat(frames, ignore_index=True) if frames else pd.DataFrame(columns=cols)


def scalar_table(
    labels: Sequence[str],
    runs: Sequence[DrawRun],
    levels: tuple[float, ...],
    map_run: DrawRun | None = None,
    measured: dict[str, dict[str, Any]] | None = None,
) -> pd.DataFrame:
    """Median, mean, std and intervals of every scalar output per label (ok draws only)."""
    from ..data import SCALAR_UNITS

    rows = []
    for label in labels:
        preds = [r.predictions.get(label) for r in runs]
        ok_preds = [p for p, r in zip(preds, runs, strict=True)
                    if r.ok and p is not None and p.ok]
        names = sorted({k for p in ok_preds for k in p.scalars})
        for name in names:
            x = np.array([p.scalars[name] for p in ok_preds if name in p.scalars], dtype=float)
            row: dict[str, Any] = {
                "label": label, "name": name, "unit": SCALAR_UNITS.get(name, "-"),
                "median": float(np.median(x)), "mean": float(np.mean(x)),
                "std": float(np.std(x, ddof=1)) if len(x) > 1 else math.nan,
            }
            band = quantile_band(x[:, None], levels)
            for key, val in band.items():
                if key != "median":
                    row[key] = float(val[0])
            mp = map_run.predictions.get(label) if map_run is not None and map_run.ok else None
            row["map"] = float(mp.scalars.get(name, math.nan)) if mp is not None else math.nan
            obs = (measured or {}).get(label, {}).get(name)
            row["measured"] = obs.value if obs is not None else math.nan
            row["measured_sigma"] = obs.sigma if obs is not None else math.nan
            row["n_ok"] = len(x)
            row["n_failed"] = len(runs) - len(x)
            rows.append(row)
    return pd.DataFrame(rows)


def posterior_bands(
    problem: PosteriorProblem,
    posterior: PosteriorResult,
    z_m: np.ndarray | None = None,
    levels: Sequence[float] = (0.68, 0.95),
    n_draws: int = 32,
    executor: Any = None,
    *,
    n_profile_draws: int = 1000,
    seed: int | None = 0,
    magnetic_field_T: Callable[[np.ndarray, Any], np.ndarray] | None = None,
    reuse_runs: bool = False,
) -> PosteriorBands:
    """Bands of the profile, the ion velocity and the scalar outputs.

    Parameters
    ----------
    problem : CalibrationProblem
    posterior : PosteriorResult
    z_m : ndarray, optional
        Positions [m] of the profile band; default 200 points over the model
        grid and data range.
    levels : sequence of float, default=(0.68, 0.95)
        Central credible levels.
    n_draws : int, default=32
        Posterior draws run through the forward model (each runs every
        operating point: ``n_draws + 1`` trials including the MAP). 0 gives
        the profile band only.
    executor : Executor or dask Client, optional
        Runs the draws in parallel.
    n_profile_draws : int, default=1000
        Draws for the profile band (cheap: no forward run).
    seed : int or None, default=0
    magnetic_field_T : callable, optional
        ``magnetic_field_T(z_m, point) -> B [T]`` to convert a Bohm-type
        profile into a frequency [1/s]. By default it is taken from the forward
        model's ``device.magnetic_field`` (times the point's field scale) when
        there is one, as with the built-in solver; otherwise a Bohm-type
        profile band is of the coefficient [-].
    reuse_runs : bool, default=False
        Count the posterior's own forward runs of posterior draws (the
        predictive check) and of the MAP among the ``n_draws`` (they are draws
        from the same posterior), so only the rest are run here. Only for the
        problem the posterior was sampled on (its runs are of that model).
        ``extra["n_new_runs"]`` says how many were.

    Returns
    -------
    PosteriorBands
    """
    levels_t = check_levels(levels, "levels")
    if int(n_draws) != n_draws or n_draws < 0:
        raise InputDataError(f"posterior_bands: n_draws must be an integer >= 0; got {n_draws!r}.")
    if list(posterior.names) != list(problem.names):
        raise InputDataError(
            f"posterior_bands: the posterior's parameters {list(posterior.names)} do not match "
            f"the problem's {list(problem.names)}; use the problem the posterior was sampled on."
        )
    z = _default_z(problem) if z_m is None else np.asarray(z_m, dtype=float).reshape(-1)
    if magnetic_field_T is None and problem.family.kind == "bohm":
        magnetic_field_T = _device_field(problem)
    rng = np.random.default_rng(seed)
    map_c = posterior.map_vector
    prof_c = posterior.draw(min(int(n_profile_draws), len(posterior.samples)),
                            seed=int(rng.integers(2**31)))
    profile = _profile_frames(problem, prof_c, map_c, z, levels_t, magnetic_field_T)
    old_c, old_runs, old_map = (_reused_runs(problem, posterior) if reuse_runs
                                else (np.zeros((0, len(map_c))), [], None))
    old_c, old_runs = old_c[: int(n_draws)], old_runs[: int(n_draws)]
    n_new = int(n_draws) - len(old_runs)
    coeffs = posterior.draw(n_new, seed=int(rng.integers(2**31))) if n_new else \
        np.zeros((0, len(map_c)))
    todo = coeffs if old_map is not None else np.vstack([map_c[None, :], coeffs])
    runs = evaluate_many(problem, todo, executor) if len(todo) else []
    if old_map is None:
        map_run, runs = runs[0], runs[1:]
    else:
        map_run = old_map
    draw_runs = list(old_runs) + list(runs)
    coeffs = np.vstack([old_c, coeffs])
    measured = {d.label: dict(d.scalars) for d in problem.dataset}
    velocity = _velocity_frame(problem, draw_runs, map_run, levels_t)
    scalars = scalar_table(problem.dataset.labels, draw_runs, levels_t, map_run, measured)
    draws = pd.DataFrame({
        "draw": np.arange(len(draw_runs)),
        "status": [r.status for r in draw_runs],
        "reason": [r.reason for r in draw_runs],
        "log_likelihood": [r.log_likelihood if r.ok else math.nan for r in draw_runs],
        "reduced_chi2": [r.reduced_chi2 if r.ok else math.nan for r in draw_runs],
    })
    for j, name in enumerate(problem.names):
        draws[name] = coeffs[:, j] if len(coeffs) else []
    n_ok = int(sum(r.ok for r in draw_runs))
    return PosteriorBands(
        levels=levels_t, profile=profile, ion_velocity=velocity, scalars=scalars, draws=draws,
        n_draws=len(draw_runs), n_ok=n_ok, n_failed=len(draw_runs) - n_ok,
        extra={"map_status": map_run.status, "map_reason": map_run.reason,
               "n_new_runs": len(todo), "n_reused_runs": len(old_runs) + (old_map is not None)},
    )


def _reused_runs(problem: PosteriorProblem, posterior: PosteriorResult) -> tuple[np.ndarray, list, Any]:
    """The posterior's check runs (draws) and MAP run, as DrawRuns, from its forward-run log."""
    from .emulated import predictions_from_json

    frame = getattr(posterior, "forward_runs", None)
    names = list(problem.names)
    if frame is None or not len(frame) or "source" not in frame.columns:
        return np.zeros((0, len(names))), [], None

    def as_run(row: pd.Series) -> DrawRun:
        ok = row["status"] == "ok"
        return DrawRun(status=str(row["status"]), reason=str(row.get("error", "") or ""),
                       log_likelihood=float(row["log_likelihood"]) if ok else -math.inf,
                       reduced_chi2=float(row["reduced_chi2"]) if ok else math.inf,
                       predictions=predictions_from_json(row.get("predictions")) if ok else {})

    chk = frame[frame["source"] == "posterior_check"]
    runs = [as_run(r) for _, r in chk.iterrows()]
    coeffs = chk[names].to_numpy(dtype=float) if len(chk) else np.zeros((0, len(names)))
    map_run = None
    mp = frame[frame["source"] == "posterior_map"]
    if len(mp):
        row = mp.iloc[-1]
        if np.allclose(row[names].to_numpy(dtype=float), posterior.map_vector, rtol=0,
                       atol=1e-12 * (1 + np.abs(posterior.map_vector).max())):
            map_run = as_run(row)
    return coeffs, runs, map_run


def emulated_bands(
    posterior: PosteriorResult,
    levels: Sequence[float] = (0.68, 0.95),
    *,
    seed: int | None = 0,
) -> pd.DataFrame:
    """Bands of the emulated outputs (ion velocity at the measured positions, measured scalars).

    Each draw takes a posterior sample and a draw of each output from the
    emulator's marginal predictive distribution there (so the emulator's own
    uncertainty is in the band; pointwise bands need the marginals only). Draws start at
    :data:`EMULATED_DRAWS_START` and double until no quantile moves by more
    than :data:`QUANTILE_STABILITY` of the widest band's width. The
    posterior's real-model check runs are compared with the bands: column
    ``real_inside_<level>`` is the fraction of them inside each band.

    Returns
    -------
    DataFrame
        One row per output: ``label``, ``observable``, ``z_m`` (NaN for
        scalars), ``measured``, ``median``, ``lower_<level>``, ``upper_<level>``,
        ``real_inside_<level>``, ``n_real``; ``attrs["n_draws"]`` and
        ``attrs["stable"]`` tell how many draws and whether the quantiles settled.
        Empty when the posterior was not sampled on the emulator.
    """
    from .emulated import predictions_from_json

    target = getattr(posterior, "surrogate", None)
    if getattr(target, "kind", "") != "emulator":
        return pd.DataFrame()
    levels_t = check_levels(levels, "levels")
    assert target is not None  # kind "emulator" was checked above
    layout = target.layout
    nv = layout.n_values
    rng = np.random.default_rng(seed)
    unit = posterior.unit_samples

    def draw(n: int) -> np.ndarray:
        # pointwise bands need each output's marginal only: y_j ~ N(m_j(theta), v_j(theta))
        u = unit[rng.integers(0, len(unit), size=n)]
        out = []
        for chunk in np.array_split(u, max(1, n // 2000)):
            m, v = target.outputs(chunk)
            out.append(m[:, :nv] + np.sqrt(v[:, :nv]) * rng.standard_normal((len(chunk), nv)))
        return np.vstack(out)

    values = draw(EMULATED_DRAWS_START)
    stable = False
    while True:
        qs = [(1 - lev) / 2 for lev in levels_t] + [(1 + lev) / 2 for lev in levels_t]
        q_old = np.quantile(values, qs, axis=0)
        if len(values) * 2 > EMULATED_DRAWS_MAX:
            break
        values = np.vstack([values, draw(len(values))])
        q_new = np.quantile(values, qs, axis=0)
        width = q_new[-1] - q_new[len(levels_t) - 1]  # widest band
        if np.all(np.abs(q_new - q_old) <= QUANTILE_STABILITY * np.maximum(width, 1e-300)):
            stable = True
            break
    band = quantile_band(values, levels_t)
    cols = layout.columns[:nv]
    frame = pd.DataFrame({"label": [c.label for c in cols],
                          "observable": [c.observable for c in cols],
                          "z_m": [c.z_m for c in cols], "measured": layout.observed, **band})
    real = []
    chk = posterior.forward_runs
    if len(chk) and "source" in chk.columns:
        for _, row in chk[(chk["source"] == "posterior_check") & (chk["status"] == "ok")].iterrows():
            try:
                real.append(layout.vector(predictions_from_json(row["predictions"]))[:nv])
            except Exception:  # a run without the measured outputs is not comparable
                continue
    real_arr = np.array(real) if real else np.zeros((0, nv))
    for lev in levels_t:
        lo, hi = frame[f"lower_{lev:g}"].to_numpy(), frame[f"upper_{lev:g}"].to_numpy()
        inside = (real_arr >= lo) & (real_arr <= hi)
        frame[f"real_inside_{lev:g}"] = inside.mean(axis=0) if len(real_arr) else math.nan
    frame["n_real"] = len(real_arr)
    frame.attrs["n_draws"] = len(values)
    frame.attrs["stable"] = bool(stable)
    return frame
