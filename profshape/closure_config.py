"""The ``[closure]`` table of a calibration file: coefficients that vary with the condition.

.. code-block:: toml

    [closure]
    features = [{ field = "background_pressure_Pa", transform = "log10", floor = 1e-5 },
                { field = "discharge_voltage_V" }]
    coefficients = ["transition_z_m", "log10_outer_level"]   # default: all
    slope_bounds = { transition_z_m = [-0.004, 0.004] }      # by coefficient or slope name
    intercept_bounds = { transition_z_m = [0.020, 0.032] }   # the coefficient mid-range

Each feature is a numeric operating-point field, optionally as log10 with a
floor (needed when a point has 0, such as zero background pressure). The
intercepts are the family's coefficients at the middle of the calibrated range
of the features (their bounds: ``intercept_bounds``, else ``[shape] bounds``,
else the family's); each varying coefficient gets one slope per feature (see
:mod:`profshape.closure`). Without ``features`` there is no closure.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import Any

from .closure import ConditionClosure, ConditionFeature
from .exceptions import InputDataError
from .operating_point import OperatingPoint
from .shapes import ShapeFamily

__all__ = ["CLOSURE_KEYS", "FEATURE_KEYS", "closure_from_config"]

#: Keys of the ``[closure]`` table.
CLOSURE_KEYS = ("features", "coefficients", "slope_bounds", "intercept_bounds")
#: Keys of one feature entry.
FEATURE_KEYS = ("field", "transform", "floor")


def _pair(cfg: Any, key: str, value: Any) -> tuple[float, float]:
    ok = (isinstance(value, list) and len(value) == 2
          and all(isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v)
                  for v in value) and value[0] < value[1])
    if not ok:
        raise cfg.error(key, f"must be [lower, upper] with finite numbers, lower < upper; got "
                        f"{value!r}.")
    return float(value[0]), float(value[1])


def closure_from_config(cfg: Any, family: ShapeFamily, points: Sequence[OperatingPoint] = ()
                        ) -> tuple[ShapeFamily, ConditionClosure | None]:
    """The family (with ``intercept_bounds`` applied) and the closure of ``[closure]``.

    Parameters
    ----------
    cfg : CalibrationConfig
    family : ShapeFamily
        As built from ``[shape]``.
    points : sequence of OperatingPoint, optional
        The calibration points: when given, the closure is bound to them now,
        so a feature constant across them is refused with its key.

    Returns
    -------
    (ShapeFamily, ConditionClosure or None)
        None when the file declares no ``[closure] features``.

    Raises
    ------
    ConfigError
        Naming the key (``closure.features[1].field``, ...), the value and the fix.
    """
    section = cfg.section("closure")
    unknown = [k for k in section if k not in CLOSURE_KEYS]
    if unknown:
        from .config import did_you_mean

        raise cfg.error(f"closure.{unknown[0]}", f"unknown key{did_you_mean(unknown[0], CLOSURE_KEYS)}"
                        f"; the [closure] keys are {list(CLOSURE_KEYS)}.")
    raw = section.get("features")
    if not raw:
        if any(section.get(k) for k in CLOSURE_KEYS[1:]):
            raise cfg.error("closure.features", "is missing: a closure needs at least one "
                            "feature, e.g. features = [{ field = \"discharge_voltage_V\" }].")
        return family, None
    if not isinstance(raw, list):
        raise cfg.error("closure.features", f"must be a list of tables; got {raw!r}.")
    features = []
    for i, entry in enumerate(raw):
        key = f"closure.features[{i}]"
        if not isinstance(entry, dict) or "field" not in entry:
            raise cfg.error(key, f"must be a table with a 'field'; got {entry!r}.")
        bad = [k for k in entry if k not in FEATURE_KEYS]
        if bad:
            from .config import did_you_mean

            raise cfg.error(f"{key}.{bad[0]}", f"unknown key{did_you_mean(bad[0], FEATURE_KEYS)}; "
                            f"a feature has {list(FEATURE_KEYS)}.")
        try:
            features.append(ConditionFeature(str(entry["field"]),
                                             entry.get("transform", "identity"),
                                             entry.get("floor")))
        except InputDataError as exc:
            which = next((k for k in ("floor", "transform") if k in entry and k in str(exc)),
                         "field")
            hint = ""
            if which == "field":
                from .closure import _NUMERIC_FIELDS
                from .config import did_you_mean

                hint = did_you_mean(entry["field"], _NUMERIC_FIELDS)
            raise cfg.error(f"{key}.{which}", f"{exc}{hint}") from None
    coefficients = section.get("coefficients")
    if coefficients is not None:
        if not (isinstance(coefficients, list) and all(isinstance(c, str) for c in coefficients)):
            raise cfg.error("closure.coefficients", f"must be a list of coefficient names; got "
                            f"{coefficients!r}.")
        bad = [c for c in coefficients if c not in family.names]
        if bad:
            from .config import did_you_mean

            raise cfg.error("closure.coefficients", f"{bad[0]!r} is not a coefficient of "
                            f"{family.name!r}{did_you_mean(bad[0], family.names)}; its "
                            f"coefficients are {list(family.names)}.")
    slopes = {name: _pair(cfg, f"closure.slope_bounds.{name}", v)
              for name, v in dict(section.get("slope_bounds") or {}).items()}
    intercepts = {name: _pair(cfg, f"closure.intercept_bounds.{name}", v)
                  for name, v in dict(section.get("intercept_bounds") or {}).items()}
    shape_bounds = dict(cfg.section("shape").get("bounds") or {})
    for name in intercepts:
        if name not in family.names:
            from .config import did_you_mean

            raise cfg.error(f"closure.intercept_bounds.{name}", f"not a coefficient of "
                            f"{family.name!r}{did_you_mean(name, family.names)}; its coefficients "
                            f"are {list(family.names)}.")
        if name in shape_bounds:
            raise cfg.error(f"closure.intercept_bounds.{name}", "is also in [shape] bounds; "
                            "give the bounds in one place.")
    if intercepts:
        try:
            family = family.with_bounds(**intercepts)
        except InputDataError as exc:
            raise cfg.error("closure.intercept_bounds", str(exc)) from None
    try:
        closure = ConditionClosure(tuple(features),
                                   tuple(coefficients) if coefficients is not None else None,
                                   slopes)
    except InputDataError as exc:
        raise cfg.error("closure.features", str(exc)) from None
    if points:
        try:
            closure.bind(family, list(points))
        except InputDataError as exc:
            text = str(exc)
            key = "closure.slope_bounds" if "slope_bounds" in text else "closure.features"
            for i, feat in enumerate(features):
                if f"feature {feat.name!r}" in text:
                    key = f"closure.features[{i}].field"
            raise cfg.error(key, text) from None
    return family, closure
