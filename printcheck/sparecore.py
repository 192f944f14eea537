"""Work handed to a second core while the caller goes on, where that helps.

``printcheck inspect`` measures one photo at a time on a machine with two cores or more.
The segment stage's decisions nudged for the range do not depend on its main decision, nor
the measure stage's work on the main mask on them, nor the watershed's flooding of one
part of the contacts on another's, nor one block's quantiles on another's, nor the
brightness's relief on the contacts' body, nor the colour's spread on the watershed, nor
the decisions' seeds on where the watershed's regions touch;
NumPy, OpenCV and skimage's flooding release the GIL in their loops: a thread beside the
caller's overlaps them.  Not in a batch's workers (nor
the web application's), which hold OpenCV to one thread (one photo a core): there, and
for windows too large to hold two sets of temporaries at once, the work is done at once
in the caller's thread, with the same result.
"""

from __future__ import annotations

import os
import threading
from collections.abc import Callable, Iterator, Sequence
from concurrent.futures import Future, ThreadPoolExecutor
from typing import Any, ParamSpec, TypeVar, overload

import cv2

__all__ = ["PARALLEL_MAX_PX", "Later", "on_spare_core", "spare_core_helps"]

P = ParamSpec("P")
T = TypeVar("T")

#: Two decisions at once hold two sets of temporaries, about 45 bytes a pixel more: only
#: up to 3 MP (a card's window at phone resolution; not a whole way's, which would pass
#: 1 GB in a 24 MP photo).
PARALLEL_MAX_PX = 3_000_000

_POOL: list[ThreadPoolExecutor] = []  # made on first use, one per process
_ON_POOL = threading.local()  # .yes on the pool's own threads


def spare_core_helps(pixels: int) -> bool:
    """Whether :func:`on_spare_core` hands work of a window of ``pixels`` to another thread
    (else it works at once in the caller's): two cores or more, OpenCV not held to one
    thread, not more than :data:`PARALLEL_MAX_PX` ``pixels``, and not called from work
    already on the pool (a pool thread waiting for work queued behind it, or behind its
    sibling waiting likewise, would wait for ever).  Work on the pool may wait for work
    handed to it earlier: the pool starts work in the order it is handed over."""
    return not (
        cv2.getNumThreads() <= 1
        or (os.cpu_count() or 1) <= 1
        or pixels > PARALLEL_MAX_PX
        or getattr(_ON_POOL, "yes", False)
    )


def on_spare_core(pixels: int, fn: Callable[P, T], *args: P.args, **kwargs: P.kwargs) -> Future[T]:
    """``fn(*args, **kwargs)`` on a thread of a shared pool of two, or, where that does
    not help (:func:`spare_core_helps`), at once in this thread; its result (or
    exception) from ``.result()``.

    ``fn`` must only read what it shares with the caller.
    """
    if not spare_core_helps(pixels):
        done: Future[T] = Future()
        try:
            done.set_result(fn(*args, **kwargs))
        except BaseException as exc:  # handed on, as the pool would, by .result()
            done.set_exception(exc)
        return done
    if not _POOL:
        _POOL.append(
            ThreadPoolExecutor(
                max_workers=2, thread_name_prefix="spare-core", initializer=_mark_pool_thread
            )
        )
    return _POOL[0].submit(fn, *args, **kwargs)


def _mark_pool_thread() -> None:
    _ON_POOL.yes = True


class Later(Sequence[T]):
    """Results still being worked out on a spare core, read as a sequence: reading an
    item waits for it (and hands on its exception), so that the caller may go on with
    what does not need them.  Pickled, it is the tuple of its results."""

    def __init__(self, futures: Sequence[Future[T]]):
        self._futures = tuple(futures)

    def __len__(self) -> int:
        return len(self._futures)

    @overload
    def __getitem__(self, index: int) -> T: ...

    @overload
    def __getitem__(self, index: slice) -> tuple[T, ...]: ...

    def __getitem__(self, index: int | slice) -> T | tuple[T, ...]:
        if isinstance(index, slice):
            return tuple(self[i] for i in range(len(self))[index])
        return self._futures[range(len(self))[index]].result()  # IndexError as a tuple's

    def __iter__(self) -> Iterator[T]:
        return (self[i] for i in range(len(self)))

    def __reduce__(self) -> tuple[Any, ...]:
        return (tuple, (tuple(self),))
