"""Minimal numpy/torch dispatch so families evaluate on either backend."""

from __future__ import annotations

from typing import Any

import numpy as np

__all__ = ["namespace_of", "to_backend"]


class _Numpy:
    is_torch = False
    tanh = staticmethod(np.tanh)
    exp = staticmethod(np.exp)
    abs = staticmethod(np.abs)
    sign = staticmethod(np.sign)
    where = staticmethod(np.where)
    minimum = staticmethod(np.minimum)
    maximum = staticmethod(np.maximum)

    @staticmethod
    def clip(x: Any, lo: Any, hi: Any) -> Any:
        return np.clip(x, lo, hi)

    @staticmethod
    def searchsorted(sorted_seq: Any, values: Any) -> Any:
        """Row-wise right-searchsorted: ``sorted_seq`` (n, k), ``values`` (n, m)."""
        return np.stack([np.searchsorted(s, v, side="right") for s, v in
                         zip(sorted_seq, values, strict=True)])

    @staticmethod
    def take_along(a: Any, idx: Any) -> Any:
        return np.take_along_axis(a, idx, axis=1)

    @staticmethod
    def zeros_like(x: Any) -> Any:
        return np.zeros_like(x)

    @staticmethod
    def concat(xs: list[Any], axis: int) -> Any:
        return np.concatenate(xs, axis=axis)

    @staticmethod
    def broadcast(x: Any, shape: tuple[int, ...]) -> Any:
        return np.broadcast_to(x, shape).copy()


class _Torch:
    is_torch = True

    def __init__(self) -> None:
        import torch

        self.torch = torch
        self.tanh = torch.tanh
        self.exp = torch.exp
        self.abs = torch.abs
        self.sign = torch.sign
        self.where = torch.where
        self.minimum = torch.minimum
        self.maximum = torch.maximum

    def clip(self, x: Any, lo: Any, hi: Any) -> Any:
        return self.torch.clamp(x, lo, hi)

    def searchsorted(self, sorted_seq: Any, values: Any) -> Any:
        return self.torch.searchsorted(sorted_seq.contiguous(), values.contiguous(), right=True)

    def take_along(self, a: Any, idx: Any) -> Any:
        return self.torch.gather(a, 1, idx)

    def zeros_like(self, x: Any) -> Any:
        return self.torch.zeros_like(x)

    def concat(self, xs: list[Any], axis: int) -> Any:
        return self.torch.cat(xs, dim=axis)

    def broadcast(self, x: Any, shape: tuple[int, ...]) -> Any:
        return x.expand(*shape).clone()


_NUMPY = _Numpy()
_TORCH: _Torch | None = None


def _is_tensor(x: Any) -> bool:
    mod = type(x).__module__
    return mod.startswith("torch") and hasattr(x, "detach")


def namespace_of(x: Any) -> Any:
    """The backend namespace (numpy or torch) of ``x``."""
    global _TORCH
    if _is_tensor(x):
        if _TORCH is None:
            _TORCH = _Torch()
        return _TORCH
    return _NUMPY


def to_backend(a: np.ndarray, like: Any) -> Any:
    """``a`` as an array of the same backend (and dtype/device for torch) as ``like``."""
    if _is_tensor(like):
        import torch

        return torch.as_tensor(a, dtype=like.dtype, device=like.device)
    return np.asarray(a, dtype=float)
