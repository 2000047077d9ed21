"""The calibration file: a TOML description of one calibration.

Read with :mod:`tomllib`. Every problem is a :class:`~profshape.exceptions.ConfigError`
naming the file, the key (dotted path) and its line. Relative file paths are
taken relative to the calibration file's folder. The reference, with a complete
example, is in the README ("Calibration file").
"""

from __future__ import annotations

import difflib
import math
import re
import tomllib
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from .exceptions import ConfigError, InputDataError

__all__ = ["FIGURE_FORMATS", "MAXIMA", "CalibrationConfig", "did_you_mean", "load_config",
           "parse_config"]

_NUMBER = (int, float)

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

# Schema: key -> (types, required, default). A dict value is a sub-table schema;
# the special key "*" accepts any key (free-form tables checked elsewhere).
_SCHEMA: dict[str, Any] = {
    "title": ((str,), False, ""),
    "device": {"*": None},
    "operating_points": "point-list",
    "data_folder": ((str,), False, None),
    "shape": {
        "family": ((str,), True, None),
        "options": {"*": None},
        "bounds": {"*": None},
        "start": "start-list",
    },
    "forward_model": {
        "kind": ((str,), False, "builtin"),
        "solver": {"*": None},
        "command": ((list,), False, None),
        "timeout_s": (_NUMBER, False, 600.0),
        "retries": ((int,), False, 0),
        "grid_points": ((int,), False, 251),
        "grid_z_m": ((list,), False, None),
        "version": ((str,), False, "0"),
        "cache": ((bool,), False, True),
    },
    "likelihood": {
        "discrepancy_sigma_m_s": (_NUMBER, False, 0.0),
        "fit_discrepancy_m_s": ((list,), False, None),
        "scalar_discrepancy_relative": (_NUMBER, False, 0.0),
        "use_position_uncertainty": ((bool,), False, True),
        "free_scale_per_point": ((bool,), False, False),
        "scale_bounds_log10": ((list,), False, [-1.0, 1.0]),
        "weights": {"*": None},
        "discrepancy": {"*": None},  # per observable (profshape.observables)
    },
    "closure": {  # checked in profshape.closure_config
        "features": ((list,), False, None),
        "coefficients": ((list,), False, None),
        "slope_bounds": {"*": None},
        "intercept_bounds": {"*": None},
    },
    "search": {
        "budget": ((int,), False, 40),
        "batch_size": ((int,), False, 1),
        "n_initial": ((int,), False, None),
        "target_reduced_chi2": (_NUMBER, False, None),
        "patience": ((int,), False, None),
        "seed": ((int,), False, 0),
        "num_restarts": ((int,), False, None),
        "raw_samples": ((int,), False, None),
        "strategy": ((str,), False, None),
        "trust_region_warmup": ((int,), False, None),
        "stop_after_failures": ((int,), False, 10),
    },
    "workers": {
        "n_workers": ((int,), False, 1),
        "scheduler_address": ((str,), False, None),
        # batch-scheduled clusters through dask-jobqueue (profshape.workers)
        "kind": ((str,), False, "local"),
        "jobs": ((int,), False, 1),
        "cores": ((int,), False, 1),
        "memory": ((str,), False, "4GB"),
        "walltime": ((str,), False, "01:00:00"),
        "queue": ((str,), False, None),
        "account": ((str,), False, None),
        "job_directives": ((list,), False, []),
        "python": ((str,), False, None),
    },
    "reference": {  # a hand-tuned profile to compare with (profshape.reference)
        "file": ((str,), False, None),
        "quantity": ((str,), False, None),
        "label": ((str,), False, "reference"),
    },
    "posterior": {
        "enabled": ((bool,), False, True),
        "n_walkers": ((int,), False, None),
        "n_steps": ((int,), False, None),
        "n_check_draws": ((int,), False, None),
        "burn_in": ((int,), False, None),
        "thin": ((int,), False, None),
        "n_gp_draws": ((int,), False, None),
        "n_refine_rounds": ((int,), False, None),
        "n_refine_draws": ((int,), False, None),
        "n_band_draws": ((int,), False, 24),
        "forward_budget": ((int,), False, None),
        "refine_threshold_nats": (_NUMBER, False, None),
        "band_levels": ((list,), False, [0.68, 0.95]),
        "seed": ((int,), False, None),
        "predict": "point-list",
    },
    "output": {
        "folder": ((str,), False, None),
        "figures": ((list,), False, ["png", "svg"]),
    },
}

_POINT_SCHEMA: dict[str, Any] = {
    "label": ((str,), True, None),
    "discharge_voltage_V": (_NUMBER, True, None),
    "anode_mass_flow_kg_s": (_NUMBER, True, None),
    "propellant": ((str,), False, None),  # None: xenon, with a warning
    "magnetic_field_scale": (_NUMBER, False, 1.0),
    "background_pressure_Pa": (_NUMBER, False, 0.0),
    "background_temperature_K": (_NUMBER, False, 300.0),
    "ion_velocity_file": ((str,), False, None),
    "scalars": {"*": None},
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


def did_you_mean(name: str, known: Any) -> str:
    """`` (did you mean 'x'?)`` for the closest of ``known`` (difflib), or ``""``."""
    near = difflib.get_close_matches(str(name), [str(k) for k in known], n=1, cutoff=0.6)
    return f" (did you mean {near[0]!r}?)" if near else ""


def _type_name(types: tuple[type, ...]) -> str:
    if set(types) == {int, float}:
        return "number"
    names = {int: "integer", float: "number", str: "string", bool: "true/false", list: "array"}
    return " or ".join(dict.fromkeys(names.get(t, t.__name__) for t in types))


def _article(noun: str) -> str:
    return ("an " if noun[0] in "aeiou" else "a ") + noun


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
        elif spec == "point-list":
            out[key] = _check_points(value, dotted, cfg) if value is not None else []
        elif spec == "start-list":
            tables = isinstance(value, list) and all(isinstance(v, dict) for v in value)
            if value is not None and not tables:
                raise cfg.error(dotted, "must be an array of tables ([[shape.start]]) of coefficients "
                                "by name.")
            out[key] = value or []
        else:
            types, required, default = spec
            if value is None:
                if required:
                    raise cfg.error(dotted, "is required but missing.")
                out[key] = default
                continue
            ok = isinstance(value, types) and not (isinstance(value, bool) and bool not in types)
            if not ok:
                raise cfg.error(dotted, f"must be {_article(_type_name(types))}; got {value!r}.")
            if isinstance(value, float) and not math.isfinite(value):
                raise cfg.error(dotted, f"must be finite; got {value!r}.")
            top = MAXIMA.get(re.sub(r"\[\d+\]", "", dotted))
            if top is not None and isinstance(value, int) and value > top:
                raise cfg.error(dotted, f"must be at most {top:,}; got {value:,}. This limit "
                                "keeps a typo from exhausting memory or time; lower the value.")
            out[key] = value
    return out


def _check_points(value: Any, where: str, cfg: CalibrationConfig) -> list[dict]:
    if not isinstance(value, list) or not all(isinstance(v, dict) for v in value):
        raise cfg.error(where, "must be an array of tables ([[operating_points]]).")
    return [_check_table(v, _POINT_SCHEMA, f"{where}[{i}]", cfg) for i, v in enumerate(value)]


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
    cfg.data = _check_table(raw, _SCHEMA, "", cfg)
    if not cfg.data["operating_points"] and not cfg.data["data_folder"]:
        raise ConfigError(
            f"{path}: no data: give [[operating_points]] tables (with ion_velocity_file and/or "
            "scalars) or a data_folder."
        )
    if cfg.data["operating_points"] and cfg.data["data_folder"]:
        raise cfg.error("data_folder", "give either data_folder or [[operating_points]], not both.")
    kind = cfg.data["forward_model"]["kind"]
    if kind not in ("builtin", "external"):
        raise cfg.error("forward_model.kind", f"must be 'builtin' or 'external'; got {kind!r}.")
    if kind == "external" and not cfg.data["forward_model"]["command"]:
        raise cfg.error("forward_model.command", "is required when kind = 'external' "
                        "(an array of arguments, e.g. [\"./my_code\", \"{input}\"]).")
    levels = cfg.data["posterior"]["band_levels"]
    if not levels or not all(isinstance(v, _NUMBER) and 0 < v < 1 for v in levels):
        raise cfg.error("posterior.band_levels", f"must be numbers in (0, 1); got {levels!r}.")
    for key in ("budget", "batch_size"):
        if cfg.data["search"][key] < 1:
            raise cfg.error(f"search.{key}", f"must be >= 1; got {cfg.data['search'][key]!r}.")
    fm = cfg.data["forward_model"]
    if not fm["timeout_s"] > 0:
        raise cfg.error("forward_model.timeout_s", f"must be > 0 [s]; got {fm['timeout_s']!r}.")
    if fm["retries"] < 0:
        raise cfg.error("forward_model.retries", f"must be >= 0; got {fm['retries']!r}.")
    if fm["grid_points"] < 2:
        raise cfg.error("forward_model.grid_points", f"must be >= 2; got {fm['grid_points']!r}.")
    if fm["grid_z_m"] is not None:
        _check_pair(cfg, "forward_model.grid_z_m", fm["grid_z_m"], "[z_start_m, z_end_m]",
                    low=0.0)
    if cfg.data["workers"]["n_workers"] < 1:
        raise cfg.error("workers.n_workers", "must be >= 1.")
    _check_values(cfg)
    from .reference import check_reference_table
    from .workers import check_workers_table

    check_workers_table(cfg)
    check_reference_table(cfg)
    return cfg


def _number(value: Any) -> bool:
    return isinstance(value, _NUMBER) and not isinstance(value, bool) and math.isfinite(value)


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


def _check_values(cfg: CalibrationConfig) -> None:
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
    for section in ("search", "posterior"):
        seed = d[section].get("seed")
        if seed is not None and seed < 0:
            raise cfg.error(f"{section}.seed", f"must be >= 0; got {seed!r}.")
    for key in ("n_initial", "patience", "num_restarts", "raw_samples", "trust_region_warmup"):
        value = d["search"][key]
        if value is not None and value < (0 if key == "trust_region_warmup" else 1):
            raise cfg.error(f"search.{key}", f"must be >= 1; got {value!r}.")
    if d["search"]["stop_after_failures"] < 0:
        raise cfg.error("search.stop_after_failures",
                        "must be >= 0 (0: never stop for repeated failures).")
    figures = d["output"]["figures"]
    for i, fmt in enumerate(figures):
        if not isinstance(fmt, str) or fmt.lower().lstrip(".") not in FIGURE_FORMATS:
            raise cfg.error(f"output.figures[{i}]",
                            f"unknown figure format {fmt!r}{did_you_mean(str(fmt), FIGURE_FORMATS)}"
                            f"; use some of {list(FIGURE_FORMATS)}.")
    post = d["posterior"]
    for key in ("n_walkers", "n_steps", "n_band_draws"):
        if post[key] is not None and post[key] < 1:
            raise cfg.error(f"posterior.{key}", f"must be >= 1; got {post[key]!r}.")
    if post["burn_in"] is not None:
        steps = post["n_steps"]
        if post["burn_in"] < 0:
            raise cfg.error("posterior.burn_in", f"must be >= 0; got {post['burn_in']!r}.")
        if steps is not None and post["burn_in"] >= steps:
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
