"""A reference profile to compare the calibration with (a hand-tuned or earlier one).

In the calibration file::

    [reference]
    file = "hand_tuned.csv"      # columns z_m [m], value
    quantity = "bohm"            # "bohm" (Bohm-like coefficient [-]) or "frequency" [1/s];
                                 # default: the shape family's own kind
    label = "hand-tuned"         # its name in the figures and the report

After the search, the reference is run once through the forward model at
every operating point (:func:`run_reference`); its chi-square, computed with
the calibration's own likelihood, is tabulated beside the best fit's in the
report, and its profile and ion velocity are overlaid in the profile and fit
figures. The result is saved in ``reference.json`` so ``profshape report``
redraws it without a forward run. Between the table points the profile is
interpolated linearly in log10 of the value (it is positive and spans
decades); outside them it holds the end values.
"""

from __future__ import annotations

import functools
import json
import math
from collections.abc import Mapping
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from .exceptions import InputDataError
from .profile import AnomalousProfile, ProfileKind

__all__ = [
    "REFERENCE_FILE",
    "check_reference_table",
    "load_reference_result",
    "read_reference_table",
    "reference_profile",
    "run_reference",
]

REFERENCE_FILE = "reference.json"


def check_reference_table(cfg: Any) -> None:
    """Check the ``[reference]`` keys of a parsed calibration file."""
    ref = cfg.data["reference"]
    if ref["file"] is None:
        extra = [k for k in ("quantity",) if ref[k] is not None]
        if extra:
            raise cfg.error(f"reference.{extra[0]}", "needs reference.file (a CSV with columns z_m, "
                            "value).")
        return
    if ref["quantity"] is not None and ref["quantity"] not in ("bohm", "frequency"):
        raise cfg.error("reference.quantity", f"must be 'bohm' (Bohm-like coefficient) or "
                        f"'frequency' [1/s]; got {ref['quantity']!r}.")
    if not str(ref["label"]).strip():
        raise cfg.error("reference.label", "must not be empty.")


def read_reference_table(path: str | Path) -> tuple[np.ndarray, np.ndarray]:
    """Positions [m] and values of a reference-profile CSV (columns ``z_m``, ``value``).

    Raises
    ------
    InputDataError
        Unreadable file, missing columns, non-finite or non-positive values,
        positions not strictly increasing, fewer than two rows; the message
        names the file, row and column.
    """
    path = Path(path)
    try:
        table = pd.read_csv(path)
    except (OSError, ValueError, pd.errors.ParserError) as exc:
        raise InputDataError(f"{path}: cannot be read as CSV: {exc}") from None
    missing = [c for c in ("z_m", "value") if c not in table.columns]
    if missing:
        raise InputDataError(f"{path}: missing column(s) {missing}; a reference profile has columns "
                             f"z_m [m] and value; found {list(table.columns)}.")
    if len(table) < 2:
        raise InputDataError(f"{path}: a reference profile needs at least 2 rows; got {len(table)}.")
    z = pd.to_numeric(table["z_m"], errors="coerce").to_numpy(dtype=float)
    v = pd.to_numeric(table["value"], errors="coerce").to_numpy(dtype=float)
    for name, arr, positive in (("z_m", z, False), ("value", v, True)):
        bad = np.flatnonzero(~np.isfinite(arr) | ((arr <= 0) if positive else False))
        if bad.size:
            row = int(bad[0])
            raise InputDataError(
                f"{path}: row {row + 2}, column {name!r}: {table[name].iloc[row]!r} is not a finite"
                f"{' positive' if positive else ''} number."
            )
    step = np.flatnonzero(np.diff(z) <= 0)
    if step.size:
        raise InputDataError(f"{path}: row {int(step[0]) + 3}, column 'z_m': positions must increase "
                             "strictly (sort the table, drop repeats).")
    return z, v


def _log_interp(z_table: np.ndarray, log_values: np.ndarray, z: np.ndarray) -> np.ndarray:
    """Module-level (picklable): log10-linear interpolation, ends held."""
    return 10.0 ** np.interp(np.asarray(z, dtype=float), z_table, log_values)


def reference_profile(z_m: np.ndarray, values: np.ndarray, kind: str, label: str = "reference"
                      ) -> AnomalousProfile:
    """The reference as an :class:`AnomalousProfile` (``kind`` ``"bohm"`` or ``"frequency"``)."""
    z = np.asarray(z_m, dtype=float)
    v = np.asarray(values, dtype=float)
    if kind not in ("bohm", "frequency"):
        raise InputDataError(f"reference profile: kind must be 'bohm' or 'frequency'; got {kind!r}.")
    checked: ProfileKind = "bohm" if kind == "bohm" else "frequency"
    fn = functools.partial(_log_interp, z, np.log10(v))
    return AnomalousProfile(kind=checked, function=fn, coefficients={}, family=f"reference:{label}")


def _run_all(problem: Any, profile: AnomalousProfile, executor: Any) -> dict[str, Any]:
    points = {p.label: p for p in problem.dataset.operating_points}
    if executor is None:
        return {lab: problem.forward_model(profile, pt) for lab, pt in points.items()}
    from .forward.base import Prediction

    futures = {lab: executor.submit(problem.forward_model, profile, pt) for lab, pt in points.items()}
    out = {}
    for lab, fut in futures.items():
        try:
            out[lab] = fut.result()
        except Exception as exc:  # a worker lost: the reference is a failed run, not a crash
            out[lab] = Prediction.failure("failed", f"executor: {type(exc).__name__}: {exc}")
    return out


def run_reference(cal: Any, out: str | Path, executor: Any = None) -> dict[str, Any] | None:
    """Run the ``[reference]`` profile once at every operating point; save ``reference.json``.

    Returns
    -------
    dict or None
        What was saved (None when the calibration has no reference): ``label``,
        ``file``, ``quantity``, ``status``, ``reason``, ``chi2``,
        ``reduced_chi2``, ``n_data``, ``per_point``, ``profile`` (``z_m``,
        ``value``) and ``predictions`` per point (z, ion velocity, scalars).
        A failed forward run is recorded with its status and reason.
    """
    from .atomic_write import atomic_write_bytes
    from .likelihood import evaluate_misfit

    cfg = cal.config
    ref = cfg.section("reference")
    if not ref or not ref.get("file"):
        return None
    path = cfg.resolve("reference.file", ref["file"])
    try:
        z, v = read_reference_table(path)
    except InputDataError as exc:
        raise cfg.error("reference.file", str(exc)) from None
    problem = cal.problem
    kind = ref.get("quantity") or problem.family.kind
    profile = reference_profile(z, v, kind, ref["label"])
    preds = _run_all(problem, profile, executor)
    failed = {lab: p for lab, p in preds.items() if not p.ok}
    result: dict[str, Any] = {
        "label": ref["label"], "file": str(path), "quantity": kind,
        "profile": {"z_m": z.tolist(), "value": v.tolist()},
        "predictions": {lab: p.to_json_dict() for lab, p in preds.items()},
    }
    if failed:
        reason = "; ".join(f"point {lab}: {p.status}: {p.reason}" for lab, p in failed.items())
        result.update(status=next(iter(failed.values())).status, reason=reason, chi2=None,
                      reduced_chi2=None, n_data=int(problem.dataset.n_data), per_point={})
    else:
        m = evaluate_misfit(problem.dataset, preds, problem.likelihood)
        result.update(status="ok" if m.ok else "failed", reason=m.reason,
                      chi2=float(m.chi2) if m.ok else None,
                      reduced_chi2=float(m.reduced_chi2) if m.ok else None,
                      n_data=int(m.n_data),
                      per_point={k: float(x) for k, x in m.per_point.items()} if m.ok else {})
        if problem.fit_discrepancy:
            result["note"] = ("chi-square with the fixed discrepancy_sigma_m_s; the best fit's uses "
                              "its fitted discrepancy")
    text = json.dumps(_finite(result), indent=1)
    atomic_write_bytes(Path(out) / REFERENCE_FILE,
                       lambda tmp: Path(tmp).write_text(text, encoding="utf-8"))
    return result


def _finite(obj: Any) -> Any:
    if isinstance(obj, dict):
        return {k: _finite(x) for k, x in obj.items()}
    if isinstance(obj, list):
        return [_finite(x) for x in obj]
    if isinstance(obj, float) and not math.isfinite(obj):
        return None
    return obj


def load_reference_result(out: str | Path) -> dict[str, Any] | None:
    """``reference.json`` of a calibration folder (None when there is none)."""
    path = Path(out) / REFERENCE_FILE
    if not path.exists():
        return None
    return json.loads(path.read_text(encoding="utf-8"))


def reference_curves(result: Mapping[str, Any] | None) -> dict[str, pd.DataFrame]:
    """Ion-velocity curves of a reference result per label (ok points only)."""
    out: dict[str, pd.DataFrame] = {}
    for lab, pred in ((result or {}).get("predictions") or {}).items():
        if pred.get("z_m") is not None and pred.get("ion_velocity_m_s") is not None:
            out[lab] = pd.DataFrame({"z_m": pred["z_m"], "ion_velocity_m_s": pred["ion_velocity_m_s"]})
    return out


def reference_summary(reference: dict[str, Any] | None, trials: pd.DataFrame, best_trial: Any
                      ) -> dict[str, Any] | None:
    """The reference's numbers for ``summary.json``, with the best trial's chi-square beside them."""
    if reference is None:
        return None
    out = {k: reference.get(k) for k in ("label", "file", "quantity", "status", "reason", "chi2",
                                         "reduced_chi2", "n_data", "per_point", "note")}
    out["best_chi2"] = None
    if best_trial is not None and "chi2" in trials:
        row = trials.loc[trials["trial"] == best_trial, "chi2"]
        if len(row) and math.isfinite(float(row.iloc[0])):
            out["best_chi2"] = float(row.iloc[0])
    return out


def reference_markdown(summary: dict[str, Any]) -> list[str]:
    """Report lines: the reference's chi-square beside the best fit's."""
    ref = summary.get("reference") or {}

    def f(x: Any) -> str:
        return "n/a" if x is None else f"{float(x):.4g}"

    best = summary.get("best_reduced_chi2")
    n = ref.get("n_data")
    best_chi2 = ref.get("best_chi2")
    lines = ["## Best fit against the reference profile", "",
             "| profile | reduced chi-square | chi-square | status |", "|---|---|---|---|"]
    lines.append(f"| best fit (trial {summary.get('best_trial')}) | {f(best)} | "
                 f"{f(best_chi2)} | ok |")
    status = ref.get("status", "")
    reason = str(ref.get("reason") or "").replace("|", "/")[:160]
    lines.append(f"| {ref.get('label', 'reference')} (`{Path(str(ref.get('file', ''))).name}`) | "
                 f"{f(ref.get('reduced_chi2'))} | {f(ref.get('chi2'))} | "
                 f"{status}{': ' + reason if reason and status != 'ok' else ''} |")
    if ref.get("reduced_chi2") is not None and best is not None:
        ratio = float(ref["reduced_chi2"]) / float(best)
        if ratio > 1:
            text = (f"The calibrated best fit beats the reference: its reduced chi-square is "
                    f"{ratio:.3g} times smaller")
        else:
            text = (f"The calibrated best fit does not beat the reference: the reference's reduced "
                    f"chi-square is {1 / ratio:.3g} times smaller")
        lines += ["", f"{text} ({n} data values, the same likelihood)."]
    lines.append("")
    return lines
