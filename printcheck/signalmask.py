"""Signals held back for a moment: a signal that arrives meanwhile is delivered when they
are let through again, not lost.

Light on purpose (the standard library only): the command's entry point uses it before
anything heavy is loaded.
"""

from __future__ import annotations

import contextlib
import signal
from collections.abc import Iterator

__all__ = ["signals_blocked"]


@contextlib.contextmanager
def signals_blocked(*signums: int) -> Iterator[None]:
    """Block ``signums`` in this thread (and so in processes started meanwhile); a signal
    that arrives meanwhile is delivered when they are unblocked, not lost."""
    if not hasattr(signal, "pthread_sigmask"):  # pragma: no cover - not POSIX
        yield
        return
    old = signal.pthread_sigmask(signal.SIG_BLOCK, signums)
    try:
        yield
    finally:
        signal.pthread_sigmask(signal.SIG_SETMASK, old)
