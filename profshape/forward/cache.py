"""A result cache for forward runs, on disk, shared by processes.

Results are keyed by the forward model's :meth:`~profshape.forward.base.ForwardModel.cache_key`
(model identity, version and settings), the operating point, the profile's
coefficients and the full definition of the shape family that made it (its
class, options, domain, nodes, reference table and bounds), so re-running or
resuming a search does not recompute a run, and two families of the same name
with other options never share an entry.
Each entry is one JSON file ``<sha256>.json``, written atomically, so worker
processes and cluster workers sharing the folder can use it at once.
"""

from __future__ import annotations

import dataclasses
import functools
import hashlib
import json
import os
import pickle
from pathlib import Path
from typing import Any

import numpy as np

from ..atomic_write import atomic_write_bytes
from ..operating_point import OperatingPoint
from ..profile import AnomalousProfile
from .base import ForwardModel, Prediction

__all__ = ["CachedModel", "cache_key_for", "family_definition"]


def _canonical(obj: Any, depth: int = 0) -> Any:
    """A JSON-ready, order-stable description of ``obj`` (floats exact, by repr)."""
    if depth > 12:
        raise ValueError("definition nested too deep")
    if obj is None or isinstance(obj, (bool, str)):
        return obj
    if isinstance(obj, (int, np.integer)):
        return int(obj)
    if isinstance(obj, (float, np.floating)):
        return repr(float(obj))
    if isinstance(obj, np.ndarray):
        return {"array": [repr(float(x)) for x in np.asarray(obj, dtype=float).ravel()],
                "shape": list(obj.shape)}
    if isinstance(obj, (list, tuple)):
        return [_canonical(v, depth + 1) for v in obj]
    if isinstance(obj, dict):
        return {str(k): _canonical(v, depth + 1) for k, v in sorted(obj.items(), key=str)}
    if dataclasses.is_dataclass(obj) and not isinstance(obj, type):
        return {"type": type(obj).__qualname__,
                **{f.name: _canonical(getattr(obj, f.name), depth + 1)
                   for f in dataclasses.fields(obj)}}
    if callable(obj) and hasattr(obj, "__qualname__"):
        return f"{getattr(obj, '__module__', '')}.{obj.__qualname__}"
    if hasattr(obj, "__dict__"):
        return {"type": f"{type(obj).__module__}.{type(obj).__qualname__}",
                **{k: _canonical(v, depth + 1) for k, v in sorted(vars(obj).items())}}
    raise ValueError(f"cannot describe {type(obj).__name__}")


def family_definition(family: Any) -> str:
    """SHA-256 of a shape family's full definition: class, options, domain, bounds.

    Two families with the same name but other options (domain length, nodes,
    reference table, bounds) give different definitions.
    """
    text = json.dumps(_canonical(family), sort_keys=True)
    return hashlib.sha256(text.encode()).hexdigest()


def _profile_definition(profile: AnomalousProfile) -> str | None:
    """Definition of what makes the profile's function, or None if it cannot be told."""
    from ..shapes import ShapeFamily

    parts: list[str] = []
    stack: list[Any] = [profile.function]
    while stack:
        f = stack.pop()
        if isinstance(f, functools.partial):
            parts.append(f"{getattr(f.func, '__module__', '')}.{getattr(f.func, '__qualname__', '')}")
            for arg in f.args:
                if isinstance(arg, ShapeFamily):
                    try:
                        parts.append(family_definition(arg))
                    except ValueError:
                        return _pickled(profile.function)
                elif callable(arg):
                    stack.append(arg)
                else:
                    try:
                        parts.append(json.dumps(_canonical(arg), sort_keys=True))
                    except ValueError:
                        return _pickled(profile.function)
        else:
            return _pickled(profile.function)
    return hashlib.sha256("|".join(parts).encode()).hexdigest()


def _pickled(function: Any) -> str | None:
    try:
        return hashlib.sha256(pickle.dumps(function, protocol=4)).hexdigest()
    except Exception:  # not picklable: the key could not be trusted, so do not cache
        return None


def cache_key_for(model: ForwardModel, profile: AnomalousProfile, point: OperatingPoint
                  ) -> str | None:
    """SHA-256 key of a run, or ``None`` when it cannot be keyed safely.

    ``None`` when the profile carries no coefficients, or when what makes its
    function (the shape family with its options) cannot be described.
    """
    if not profile.coefficients:
        return None
    definition = _profile_definition(profile)
    if definition is None:
        return None
    payload = {
        "model": model.cache_key(),
        "point": point.to_dict(),
        "kind": profile.kind,
        "family": profile.family,
        "definition": definition,
        "coefficients": {k: repr(float(v)) for k, v in sorted(profile.coefficients.items())},
    }
    text = json.dumps(payload, sort_keys=True)
    return hashlib.sha256(text.encode()).hexdigest()


def _encode(p: Prediction) -> dict[str, Any]:
    d = p.to_json_dict()
    d["fields"] = {k: np.asarray(v, dtype=float).tolist() for k, v in p.fields.items()}
    d["wall_time_s"] = p.wall_time_s
    return d


def _decode(d: dict[str, Any]) -> Prediction:
    if d["status"] != "ok":
        return Prediction.failure(d["status"], d.get("reason", ""), d.get("wall_time_s", 0.0))
    return Prediction(
        status="ok",
        z_m=d.get("z_m"),
        ion_velocity_m_s=d.get("ion_velocity_m_s"),
        scalars=d.get("scalars", {}),
        reason=d.get("reason", ""),
        fields={k: np.asarray(v, dtype=float) for k, v in d.get("fields", {}).items()},
        wall_time_s=float(d.get("wall_time_s", 0.0)),
    )


class CachedModel(ForwardModel):
    """Wrap a forward model with an on-disk result cache.

    Parameters
    ----------
    model : ForwardModel
        The model whose results are cached.
    directory : path-like
        Cache folder (created if needed); may be shared by processes.
    cache_statuses : tuple of str, default=("ok", "not_converged")
        Statuses worth keeping. Failures and timeouts are not cached by
        default, as they may be transient (a busy machine, a full disk).

    Attributes
    ----------
    hits, misses : int
        Lookups answered from the cache, and runs made, in this process.
    """

    def __init__(
        self,
        model: ForwardModel,
        directory: str | os.PathLike[str],
        cache_statuses: tuple[str, ...] = ("ok", "not_converged"),
    ) -> None:
        if not isinstance(model, ForwardModel):
            raise TypeError(f"model must be a ForwardModel; got {type(model).__name__}.")
        self.model = model
        self.directory = Path(directory)
        self.directory.mkdir(parents=True, exist_ok=True)
        self.cache_statuses = tuple(cache_statuses)
        self.name = model.name
        self.version = model.version
        self.hits = 0
        self.misses = 0

    def cache_key(self) -> str:
        """The wrapped model's key."""
        return self.model.cache_key()

    def grid(self, point: OperatingPoint) -> np.ndarray | None:
        """The wrapped model's grid."""
        return self.model.grid(point)

    def _path(self, key: str) -> Path:
        return self.directory / f"{key}.json"

    def lookup(self, profile: AnomalousProfile, point: OperatingPoint) -> Prediction | None:
        """The cached prediction, or ``None``."""
        key = cache_key_for(self.model, profile, point)
        if key is None:
            return None
        path = self._path(key)
        try:
            return _decode(json.loads(path.read_text(encoding="utf-8")))
        except (OSError, ValueError, KeyError):
            return None

    def run(self, profile: AnomalousProfile, point: OperatingPoint) -> Prediction:
        """Answer from the cache, or run the model and store the result."""
        cached = self.lookup(profile, point)
        if cached is not None:
            self.hits += 1
            return cached
        self.misses += 1
        result = self.model(profile, point)
        key = cache_key_for(self.model, profile, point)
        if key is not None and result.status in self.cache_statuses:
            text = json.dumps(_encode(result))
            atomic_write_bytes(self._path(key), lambda tmp: Path(tmp).write_text(text))
        return result
