"""Ordered thread maps for work that releases the GIL (scikit-learn tree fitting and prediction).

Results come back in input order, so sums over them are added in the same order on every run.
"""
from __future__ import annotations

import os
from collections import deque
from concurrent.futures import ThreadPoolExecutor
from typing import Callable, Iterable, Iterator, TypeVar

T = TypeVar("T")
R = TypeVar("R")


def workers(n_jobs: int | None) -> int:
    """scikit-learn's convention: None → 1, -1 → every core, k → k."""
    if n_jobs is None:
        return 1
    if n_jobs < 0:
        return max(1, (os.cpu_count() or 1) + 1 + n_jobs)
    return max(1, n_jobs)


def thread_map(fn: Callable[..., R], items: Iterable[T], n_jobs: int | None = -1) -> list[R]:
    """``[fn(*item) if tuple else fn(item) ...]`` on a pool of threads, in input order."""
    items = list(items)
    call = (lambda it: fn(*it)) if items and isinstance(items[0], tuple) else fn
    n = workers(n_jobs)
    if n == 1 or len(items) <= 1:
        return [call(it) for it in items]
    with ThreadPoolExecutor(min(n, len(items))) as pool:
        return list(pool.map(call, items))


def ordered_stream(fn: Callable[..., R], items: Iterable[tuple], n_jobs: int | None = -1) -> Iterator[R]:
    """``fn(*item)`` for a stream of items on a pool of threads, yielded in input order, with at
    most two items per thread in flight so memory stays bounded by the chunk size.

    For `score`: one thread reads the next chunk while others type and predict earlier ones
    (onnxruntime and most pandas work release the GIL).
    """
    n = workers(n_jobs)
    if n == 1:
        for it in items:
            yield fn(*it)
        return
    pending: deque = deque()
    with ThreadPoolExecutor(n) as pool:
        try:
            for it in items:
                pending.append(pool.submit(fn, *it))
                if len(pending) >= 2 * n:
                    yield pending.popleft().result()
            while pending:
                yield pending.popleft().result()
        finally:
            for f in pending:
                f.cancel()
