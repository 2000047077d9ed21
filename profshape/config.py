"""The calibration file: a TOML description of one calibration.

Read with :mod:`tomllib`. Every problem is a :class:`~profshape.exceptions.ConfigError`
naming the file, the key (dotted path) and its line. Relative file paths are
taken relative to the calibration file's folder. The reference, with a complete
example, is in the README ("Calibration file").
"""

from __future__ import annotations

import math
import re
import tomllib
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from numbers import Integral, Real
from pathlib import Path
from typing import Any

from .exceptions import ConfigError, InputDataError
from .posterior.settings import CONSTRAINTS as POSTERIOR_CONSTRAINTS
from .posterior.settings import FIXES as POSTERIOR_FIXES
from .posterior.settings import PosteriorSettings
from .search.settings import CONSTRAINTS as SEARCH_CONSTRAINTS
from .search.settings import FIXES as SEARCH_FIXES
from .search.settings import SearchSettings
from .validation import (
    Constraint,
    InstanceOf,
    Interval,
    Options,
    dataclass_defaults,
    did_you_mean,
    validate_value,
)

__all__ = ["FIGURE_FORMATS", "MAXIMA", "SCHEMA", "CalibrationConfig", "Key", "did_you_mean",
           "load_config", "parse_config"]

#: Stated maxima of size-like settings, checked where the file enters (the memory or
#: time a value beyond them would take is never what was meant; common practice, no
#: source). The built-in solver's own settings are checked against
#: ``profshape.solver.settings`` (``n_cells`` at most 4000).
MAXIMA: dict[str, int] = {
    "forward_model.grid_points": 100_000,
    "forward_model.retries": 100,
    "search.budget": 100_000,
    "search.batch_size": 64,
    "search.n_initial": 10_000,
    "search.patience": 100_000,
    "search.num_restarts": 1_000,
    "search.raw_samples": 100_000,
    "search.trust_region_warmup": 100_000,
    "search.stop_after_failures": 100_000,
    "search.seed": 2**63 - 1,
    "workers.n_workers": 1_024,
    "posterior.n_walkers": 10_000,
    "posterior.n_steps": 1_000_000,
    "posterior.burn_in": 1_000_000,
    "posterior.thin": 100_000,
    "posterior.n_check_draws": 10_000,
    "posterior.n_gp_draws": 100_000,
    "posterior.n_refine_rounds": 1_000,
    "posterior.n_refine_draws": 10_000,
    "posterior.n_band_draws": 10_000,
    "posterior.seed": 2**63 - 1,
}
#: Figure formats accepted in ``[output] figures`` (all written by matplotlib).
FIGURE_FORMATS = ("png", "svg", "pdf", "eps", "ps", "jpg", "jpeg", "tif", "tiff", "svgz")


@dataclass(frozen=True)
class Key:
    """One key of the calibration file: its constraints (:mod:`profshape.validation`),
    its default when absent, whether it is required, and a fix added to its errors."""

    constraints: Sequence[Constraint | None]
    default: Any = None
    required: bool = False
    fix: str = ""


# Shorthands for the file's own keys.
_STR: Sequence[Constraint | None] = [InstanceOf(str)]
_BOOL: Sequence[Constraint | None] = [InstanceOf(bool, name="true or false")]
_ARRAY: Sequence[Constraint | None] = [InstanceOf(list)]
_NUMBER: Sequence[Constraint | None] = [Interval(Real, None, None)]


def _count(low: int) -> Sequence[Constraint | None]:
    return [Interval(Integral, low, None, closed="left")]


def _settings_keys(cls: type, constraints: Mapping[str, Sequence[Constraint | None]],
                   names: tuple[str, ...], fixes: Mapping[str, str],
                   file_defaults: Mapping[str, Any] | None = None) -> dict[str, Key]:
    """Keys of a section that are fields of settings dataclass ``cls``: the class's own
    constraints and defaults (``file_defaults`` only where the file means otherwise)."""
    base = dataclass_defaults(cls)
    own = dict(file_defaults or {})
    return {n: Key([c for c in constraints[n] if c is not None],
                   own[n] if n in own else base.get(n), fix=fixes.get(n, "")) for n in names}


#: Special entries: a free-form table (checked where it is used), an array of
#: operating-point tables, an array of start tables.
FREE: dict[str, Any] = {"*": None}
POINT_LIST = "point-list"
START_LIST = "start-list"

#: The calibration file: table -> {key: Key | sub-table | special}. To add a key,
#: add a ``Key`` here (a settings-class field: add it to that class's ``CONSTRAINTS``
#: and to the names passed to ``_settings_keys``), document it in the README's
#: calibration-file reference and in ``profshape.template``.
SCHEMA: dict[str, Any] = {
    "title": Key(_STR, ""),
    "device": FREE,
    "operating_points": POINT_LIST,
    "data_folder": Key(_STR),
    "shape": {
        "family": Key(_STR, required=True),
        "options": FREE,
        "bounds": FREE,
        "start": START_LIST,
    },
    "forward_model": {
        "kind": Key([Options(str, ("builtin", "external"))], "builtin"),
        "solver": FREE,  # profshape.solver.settings.SolverSettings, checked there
        "command": Key(_ARRAY),
        "timeout_s": Key([Interval(Real, 0, None, closed="neither")], 600.0,
                         fix="Give a time in seconds, e.g. 600."),
        "retries": Key(_count(0), 0),
        "grid_points": Key(_count(2), 251),
        "grid_z_m": Key(_ARRAY),
        "version": Key(_STR, "0"),
        "cache": Key(_BOOL, True),
    },
    "likelihood": {
        "discrepancy_sigma_m_s": Key(_NUMBER, 0.0),
        "fit_discrepancy_m_s": Key(_ARRAY),
        "scalar_discrepancy_relative": Key(_NUMBER, 0.0),
        "use_position_uncertainty": Key(_BOOL, True),
        "free_scale_per_point": Key(_BOOL, False),
        "scale_bounds_log10": Key(_ARRAY, [-1.0, 1.0]),
        "weights": FREE,
        "discrepancy": FREE,  # per observable (profshape.observables)
    },
    "closure": {  # checked in profshape.closure_config
        "features": Key(_ARRAY),
        "coefficients": Key(_ARRAY),
        "slope_bounds": FREE,
        "intercept_bounds": FREE,
    },
    "search": {
        **_settings_keys(SearchSettings, SEARCH_CONSTRAINTS,
                         ("budget", "batch_size", "n_initial", "target_reduced_chi2", "patience",
                          "seed", "num_restarts", "raw_samples", "strategy",
                          "trust_region_warmup"),
                         SEARCH_FIXES, file_defaults={"budget": 40}),
        # a run_search argument, not a SearchSettings field
        "stop_after_failures": Key(_count(0), 10,
                                   fix="Use 0 to never stop for repeated failures."),
    },
    "workers": {
        "n_workers": Key(_count(1), 1),
        "scheduler_address": Key(_STR),
        # batch-scheduled clusters through dask-jobqueue (profshape.workers)
        "kind": Key(_STR, "local"),
        "jobs": Key(_count(1), 1),
        "cores": Key(_count(1), 1),
        "memory": Key(_STR, "4GB"),
        "walltime": Key(_STR, "01:00:00"),
        "queue": Key(_STR),
        "account": Key(_STR),
        "job_directives": Key(_ARRAY, []),
        "python": Key(_STR),
    },
    "reference": {  # a hand-tuned profile to compare with (profshape.reference)
        "file": Key(_STR),
        "quantity": Key(_STR),
        "label": Key(_STR, "reference"),
    },
    "posterior": {
        "enabled": Key(_BOOL, True),
        **_settings_keys(PosteriorSettings, POSTERIOR_CONSTRAINTS,
                         ("n_walkers", "n_steps", "n_check_draws", "burn_in", "thin",
                          "n_gp_draws", "n_refine_rounds", "n_refine_draws", "forward_budget",
                          "refine_threshold_nats", "seed"),
                         POSTERIOR_FIXES, file_defaults={"seed": None}),  # None: the search's
        "n_band_draws": Key(_count(1), 24),
        "band_levels": Key(_ARRAY, list(dataclass_defaults(PosteriorSettings)["band_levels"])),
        "predict": POINT_LIST,
    },
    "output": {
        "folder": Key(_STR),
        "figures": Key(_ARRAY, ["png", "svg"]),
    },
}

#: One ``[[operating_points]]`` (or ``[[posterior.predict]]``) table.
POINT_SCHEMA: dict[str, Any] = {
    "label": Key(_STR, required=True),
    "discharge_voltage_V": Key(_NUMBER, required=True),
    "anode_mass_flow_kg_s": Key(_NUMBER, required=True),
    "propellant": Key(_STR),  # None: xenon, with a warning
    "magnetic_field_scale": Key(_NUMBER, 1.0),
    "background_pressure_Pa": Key(_NUMBER, 0.0),
    "background_temperature_K": Key(_NUMBER, 300.0),
    "ion_velocity_file": Key(_STR),
    "scalars": FREE,
}


@dataclass
class CalibrationConfig:
    """A parsed and checked calibration file.

    Attributes
    ----------
    path : Path
        The file it came from (``Path("<string>")`` for text).
    base_dir : Path
        Folder against which relative paths are resolved.
    data : dict
        The checked content with defaults filled in.
    text : str
        The raw TOML text (for line look-ups in later errors).
    """

    path: Path
    base_dir: Path
    data: dict[str, Any]
    text: str = field(repr=False, default="")

    def section(self, name: str) -> dict[str, Any]:
        """A top-level table (empty dict if absent)."""
        return self.data.get(name) or {}

    def error(self, key: str, message: str) -> ConfigError:
        """A ConfigError naming the file, the key and its line.

        ``key`` counts array elements from 0 (``operating_points[0]``); the
        message counts them from 1, as a reader of the file does.
        """
        return ConfigError(f"{_location(self.path, self.text, key)}: {message}")

    def resolve(self, key: str, value: str, must_exist: bool = True) -> Path:
        """A path from the file, relative to :attr:`base_dir`; checked to exist."""
        p = Path(value).expanduser()
        p = p if p.is_absolute() else self.base_dir / p
        if must_exist and not p.exists():
            raise self.error(key, f"file {value!r} not found (looked for {p}).")
        return p


def _line_of(text: str, dotted: str) -> int | None:
    """Line (1-based) where ``dotted`` key is set, by scanning table headers."""
    whole = re.fullmatch(r"([\w.]+)\[(\d+)\]", dotted)
    if whole:  # an element of an array of tables: its own [[header]]
        name, nth = whole.group(1), int(whole.group(2))
        heads = [n for n, raw in enumerate(text.splitlines(), start=1)
                 if re.match(rf"^\s*\[\[\s*{re.escape(name)}\s*\]\]", raw)]
        return heads[nth] if nth < len(heads) else None
    parts = [re.sub(r"\[\d+\]", "", p) for p in dotted.split(".")]
    index = [int(m) for m in re.findall(r"\[(\d+)\]", dotted)]
    *tables, key = parts
    counts: dict[str, int] = {}
    current = ""
    header_line: dict[str, int] = {}
    for n, raw in enumerate(text.splitlines(), start=1):
        line = raw.split("#", 1)[0].strip()
        m = re.match(r"^\[\[\s*([^\]]+?)\s*\]\]$", line) or re.match(r"^\[\s*([^\]]+?)\s*\]$", line)
        if m:
            current = m.group(1).replace(" ", "")
            if line.startswith("[["):
                counts[current] = counts.get(current, -1) + 1
            header_line.setdefault(current, n)
            continue
        want = ".".join(tables)
        if current == want or (not tables and current == ""):
            if index and counts.get(tables[0] if tables else "", -1) != index[0]:
                continue
            if re.match(rf"^\"?{re.escape(key)}\"?\s*=", line):
                return n
            inline = re.match(rf"^\"?{re.escape(key.split('.')[0])}\"?\s*=", line)
            if inline:
                return n
        # a key given as a dotted table, e.g. [shape] then `bounds.x = ...`
        if current == ".".join(tables[:-1]) and tables and re.match(
                rf"^{re.escape(tables[-1])}\.{re.escape(key)}\s*=", line):
            return n
    dotted_table = ".".join(parts)
    return header_line.get(dotted_table)


def _one_based(key: str) -> str:
    return re.sub(r"\[(\d+)\]", lambda m: f"[{int(m.group(1)) + 1}]", key)


def _location(path: Path, text: str, key: str) -> str:
    line = _line_of(text, key) if text else None
    shown = _one_based(key)
    where = [f"line {line}"] if line else []
    if shown != key:
        where.append("arrays counted from 1")
    return f"{path}: key {shown!r}" + (f" ({'; '.join(where)})" if where else "")


def _check_key(value: Any, spec: Key, dotted: str, cfg: CalibrationConfig) -> Any:
    if value is None:
        if spec.required:
            raise cfg.error(dotted, "is required but missing.")
        return spec.default
    try:
        value = validate_value("", value, list(spec.constraints), fix=spec.fix, error=ConfigError)
    except ConfigError as exc:
        raise cfg.error(dotted, str(exc).strip()) from None
    top = MAXIMA.get(re.sub(r"\[\d+\]", "", dotted))
    if top is not None and isinstance(value, int) and value > top:
        raise cfg.error(dotted, f"must be at most {top:,}; got {value:,}. This limit "
                        "keeps a typo from exhausting memory or time; lower the value.")
    return value


def _check_table(table: Any, schema: Mapping[str, Any], where: str, cfg: CalibrationConfig) -> dict:
    if not isinstance(table, dict):
        raise cfg.error(where, f"must be a table; got {type(table).__name__}.")
    if "*" in schema:
        return dict(table)
    out: dict[str, Any] = {}
    for key in table:
        if key not in schema:
            what = "table" if isinstance(table[key], dict) else "key"
            raise cfg.error(
                f"{where}.{key}" if where else key,
                f"unknown {what}{did_you_mean(key, schema)}; known keys here: {sorted(schema)}.",
            )
    for key, spec in schema.items():
        dotted = f"{where}.{key}" if where else key
        value = table.get(key)
        if isinstance(spec, dict):
            out[key] = _check_table(value if value is not None else {}, spec, dotted, cfg)
        elif spec == POINT_LIST:
            out[key] = _check_points(value, dotted, cfg) if value is not None else []
        elif spec == START_LIST:
            tables = isinstance(value, list) and all(isinstance(v, dict) for v in value)
            if value is not None and not tables:
                raise cfg.error(dotted, "must be an array of tables ([[shape.start]]) of coefficients "
                                "by name.")
            out[key] = value or []
        else:
            out[key] = _check_key(value, spec, dotted, cfg)
    return out


def _check_points(value: Any, where: str, cfg: CalibrationConfig) -> list[dict]:
    if not isinstance(value, list) or not all(isinstance(v, dict) for v in value):
        raise cfg.error(where, "must be an array of tables ([[operating_points]]).")
    return [_check_table(v, POINT_SCHEMA, f"{where}[{i}]", cfg) for i, v in enumerate(value)]


def parse_config(text: str, path: str | Path = "<string>", base_dir: str | Path | None = None
                 ) -> CalibrationConfig:
    """Parse and check calibration-file text.

    Raises
    ------
    ConfigError
        TOML syntax errors (with the line), unknown keys, wrong types, missing keys.
    """
    path = Path(path)
    if base_dir is not None:
        base = Path(base_dir)
    else:
        base = path.parent if path.name != "<string>" else Path.cwd()
    text = text.removeprefix("\ufeff")  # a UTF-8 byte-order mark some editors write
    cfg = CalibrationConfig(path=path, base_dir=base.resolve(), data={}, text=text)
    try:
        raw = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(f"{path}: not valid TOML: {exc}") from None
    cfg.data = _check_table(raw, SCHEMA, "", cfg)
    if not cfg.data["operating_points"] and not cfg.data["data_folder"]:
        raise ConfigError(
            f"{path}: no data: give [[operating_points]] tables (with ion_velocity_file and/or "
            "scalars) or a data_folder."
        )
    if cfg.data["operating_points"] and cfg.data["data_folder"]:
        raise cfg.error("data_folder", "give either data_folder or [[operating_points]], not both.")
    if cfg.data["forward_model"]["kind"] == "external" and not cfg.data["forward_model"]["command"]:
        raise cfg.error("forward_model.command", "is required when kind = 'external' "
                        "(an array of arguments, e.g. [\"./my_code\", \"{input}\"]).")
    levels = cfg.data["posterior"]["band_levels"]
    if not levels or not all(_number(v) and 0 < v < 1 for v in levels):
        raise cfg.error("posterior.band_levels", f"must be numbers in (0, 1); got {levels!r}.")
    fm = cfg.data["forward_model"]
    if fm["grid_z_m"] is not None:
        _check_pair(cfg, "forward_model.grid_z_m", fm["grid_z_m"], "[z_start_m, z_end_m]",
                    low=0.0)
    _check_values(cfg, raw)
    from .reference import check_reference_table
    from .workers import check_workers_table

    check_workers_table(cfg)
    check_reference_table(cfg)
    return cfg


def _number(value: Any) -> bool:
    return isinstance(value, (int, float)) and not isinstance(value, bool) and math.isfinite(value)


def _check_pair(cfg: CalibrationConfig, key: str, pair: Any, form: str, low: float | None = None,
                positive: bool = False) -> None:
    if not (isinstance(pair, list) and len(pair) == 2 and all(_number(v) for v in pair)):
        n = len(pair) if isinstance(pair, list) else 1
        raise cfg.error(key, f"must be {form}, two finite numbers; got {pair!r} ({n} value"
                        f"{'s' if n != 1 else ''}).")
    if not pair[0] < pair[1]:
        raise cfg.error(key, f"must be {form} with the first below the second; got {pair!r}.")
    if low is not None and pair[0] < low:
        raise cfg.error(key, f"values must be >= {low:g}; got {pair!r}.")
    if positive and pair[0] <= 0:
        raise cfg.error(key, f"values must be > 0; got {pair!r}.")


def _check_values(cfg: CalibrationConfig, raw: Mapping[str, Any]) -> None:
    """Values whose type alone says too little: pairs, weights, starts, seeds, formats."""
    d = cfg.data
    lk = d["likelihood"]
    if lk["fit_discrepancy_m_s"] is not None:
        _check_pair(cfg, "likelihood.fit_discrepancy_m_s", lk["fit_discrepancy_m_s"],
                    "[lower_m_s, upper_m_s]", positive=True)
    _check_pair(cfg, "likelihood.scale_bounds_log10", lk["scale_bounds_log10"],
                "[lower, upper] (log10 of the scale)")
    for name, w in lk["weights"].items():
        if not _number(w) or w < 0:
            raise cfg.error(f"likelihood.weights.{name}",
                            f"must be a number >= 0 (a weight on that observable's chi-square); "
                            f"got {w!r}.")
    for i, start in enumerate(d["shape"]["start"]):
        for name, value in start.items():
            if not _number(value):
                raise cfg.error(f"shape.start[{i}].{name}",
                                f"must be a finite number (the coefficient in its unit); "
                                f"got {value!r}.")
    figures = d["output"]["figures"]
    for i, fmt in enumerate(figures):
        if not isinstance(fmt, str) or fmt.lower().lstrip(".") not in FIGURE_FORMATS:
            raise cfg.error(f"output.figures[{i}]",
                            f"unknown figure format {fmt!r}{did_you_mean(str(fmt), FIGURE_FORMATS)}"
                            f"; use some of {list(FIGURE_FORMATS)}.")
    post = d["posterior"]
    given = raw.get("posterior") or {}
    if "burn_in" in given and "n_steps" in given:  # both from the file: say so here
        steps = post["n_steps"]
        if post["burn_in"] >= steps:
            raise cfg.error("posterior.burn_in",
                            f"must be smaller than n_steps = {steps}; got {post['burn_in']}. "
                            "Lower burn_in or raise n_steps.")


def load_config(path: str | Path) -> CalibrationConfig:
    """Read and check a calibration file.

    Raises
    ------
    ConfigError
        Missing or unreadable file, bad TOML, unknown keys, wrong types.
    """
    path = Path(path)
    if not path.is_file():
        raise ConfigError(f"{path}: calibration file not found.")
    try:
        text = path.read_text(encoding="utf-8-sig")  # a byte-order mark is accepted
    except (OSError, UnicodeDecodeError) as exc:
        raise ConfigError(f"{path}: cannot be read: {exc}") from None
    return parse_config(text, path)


def wrap_input_error(cfg: CalibrationConfig, key: str, exc: InputDataError) -> ConfigError:
    """Re-raise a lower-level input error as a ConfigError pointing at ``key``."""
    return cfg.error(key, str(exc))
