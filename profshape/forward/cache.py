"""A result cache for forward runs, on disk, shared by processes.

Results are keyed by the forward model's :meth:`~profshape.forward.base.ForwardModel.cache_key`
(model identity, version and settings), the operating point and the profile's
coefficients, so re-running or resuming a search does not recompute a run.
Each entry is one JSON file ``<sha256>.json``, written atomically, so worker
processes and cluster workers sharing the folder can use it at once.
"""

from __future__ import annotations

import hashlib
import json
import os
from pathlib import Path
from typing import Any

import numpy as np

from ..operating_point import OperatingPoint
from ..profile import AnomalousProfile
from ..trials import atomic_write_bytes
from .base import ForwardModel, Prediction

__all__ = ["CachedModel", "cache_key_for"]


def cache_key_for(model: ForwardModel, profile: AnomalousProfile, point: OperatingPoint
                  ) -> str | None:
    """SHA-256 key of a run, or ``None`` when the profile carries no coefficients."""
    if not profile.coefficients:
        return None
    payload = {
        "model": model.cache_key(),
        "point": point.to_dict(),
        "kind": profile.kind,
        "family": profile.family,
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
