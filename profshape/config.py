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
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from .exceptions import ConfigError, InputDataError

__all__ = ["CalibrationConfig", "load_config", "parse_config"]

_NUMBER = (int, float)

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
    },
    "workers": {
        "n_workers": ((int,), False, 1),
        "scheduler_address": ((str,), False, None),
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
    "propellant": ((str,), False, "xenon"),
    "magnetic_field_scale": (_NUMBER, False, 1.0),
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
        """A ConfigError naming the file, the key and its line."""
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


def _location(path: Path, text: str, key: str) -> str:
    line = _line_of(text, key) if text else None
    return f"{path}: key {key!r}" + (f" (line {line})" if line else "")


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
            near = [k for k in schema if k.split("_")[0] == key.split("_")[0]]
            raise cfg.error(
                f"{where}.{key}" if where else key,
                f"unknown key; known keys here: {sorted(schema)}"
                + (f" (did you mean {near[0]!r}?)" if near else "") + ".",
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
    if cfg.data["workers"]["n_workers"] < 1:
        raise cfg.error("workers.n_workers", "must be >= 1.")
    return cfg


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
        text = path.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise ConfigError(f"{path}: cannot be read: {exc}") from None
    return parse_config(text, path)


def wrap_input_error(cfg: CalibrationConfig, key: str, exc: InputDataError) -> ConfigError:
    """Re-raise a lower-level input error as a ConfigError pointing at ``key``."""
    return cfg.error(key, str(exc))
