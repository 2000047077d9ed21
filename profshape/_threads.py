"""Torch's intra-op thread count, pinned while a block runs.

Floating-point reductions in torch's CPU kernels are split across threads, so
their last bits depend on the thread count; the search and the posterior
sampler pin it (one thread by default) so that the same seed on the same
machine repeats the same trials and draws.
"""

from __future__ import annotations

import contextlib
import functools
from collections.abc import Callable, Iterator
from typing import Any, TypeVar

import torch

__all__ = ["pinned_threads", "torch_threads"]

F = TypeVar("F", bound=Callable[..., Any])


@contextlib.contextmanager
def torch_threads(n: int | None) -> Iterator[None]:
    """Run torch with ``n`` intra-op threads inside the block (``None``: unchanged).

    The previous count is restored on exit, also after an exception.
    """
    if n is None:
        yield
        return
    before = torch.get_num_threads()
    torch.set_num_threads(n)
    try:
        yield
    finally:
        torch.set_num_threads(before)


def pinned_threads(n: int) -> Callable[[F], F]:
    """Decorator: run the function under :func:`torch_threads` ``(n)``."""

    def deco(fn: F) -> F:
        @functools.wraps(fn)
        def wrapper(*args: Any, **kwargs: Any) -> Any:
            with torch_threads(n):
                return fn(*args, **kwargs)

        return wrapper  # type: ignore[return-value]

    return deco
