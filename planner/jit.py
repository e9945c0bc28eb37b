"""Compiling a numeric loop with numba on its first call, not when its module is imported.

numba costs about 0.3 s and 100 MB to import, and modules with compiled loops (the true-peak
meter, the PCM reader, the frame powers) are reached by commands that never run them
(``cueplan plan`` loads the scoring constants). The compiled code is cached in
``__pycache__`` (``cache=True``), so later processes load it instead of compiling.
"""

from __future__ import annotations

import functools
from collections.abc import Callable
from typing import Any


def compiled(**options: Any) -> Callable[[Callable[..., Any]], Callable[..., Any]]:
    """Decorator: the function runs compiled by ``numba.njit(cache=True, **options)``, compiled on its first call."""

    def wrap(function: Callable[..., Any]) -> Callable[..., Any]:
        @functools.cache
        def jitted() -> Callable[..., Any]:
            from numba import njit

            return njit(cache=True, **options)(function)  # type: ignore[no-any-return]

        @functools.wraps(function)
        def call(*args: Any) -> Any:
            return jitted()(*args)

        return call

    return wrap


@compiled()
def _identity(x):  # type: ignore[no-untyped-def]
    return x


def ready() -> None:
    """Set up numba's dispatch in this process (about 0.25 s, once per process) by calling a
    cached compiled function, so that processes forked afterwards inherit it instead of each
    paying it again."""
    _identity(0)
