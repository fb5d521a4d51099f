"""Items sent to workers in chunks, so the cost of sending a task stays small next to the fits,
and pulled lazily, so a large portfolio is never held in memory all at once."""

from __future__ import annotations

from collections.abc import Callable, Iterable, Iterator
from typing import Any


def chunks(items: Iterable[Any], size: int) -> Iterator[list[Any]]:
    """Consecutive lists of ``size`` items (the last may be shorter), pulled lazily."""
    iterator = iter(items)
    while batch := [x for _, x in zip(range(size), iterator)]:
        yield batch


def run_chunk(func: Callable[[Any], Any], chunk: list[Any]) -> list[Any]:
    """Apply ``func`` to every item of one chunk, in a worker."""
    return [func(item) for item in chunk]
