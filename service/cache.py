"""A bounded least-recently-used map for finished responses (single event-loop thread)."""

from __future__ import annotations

from collections import OrderedDict
from dataclasses import dataclass
from typing import Generic, Hashable, TypeVar

V = TypeVar("V")


@dataclass
class CacheStats:
    hits: int = 0
    misses: int = 0


class LruCache(Generic[V]):
    def __init__(self, capacity: int) -> None:
        if capacity < 0:
            raise ValueError("capacity must be >= 0")
        self.capacity = capacity
        self.stats = CacheStats()
        self._items: OrderedDict[Hashable, V] = OrderedDict()

    def get(self, key: Hashable) -> V | None:
        value = self._items.get(key)
        if value is None:
            self.stats.misses += 1
            return None
        self._items.move_to_end(key)
        self.stats.hits += 1
        return value

    def put(self, key: Hashable, value: V) -> None:
        if self.capacity == 0:
            return
        self._items[key] = value
        self._items.move_to_end(key)
        while len(self._items) > self.capacity:
            self._items.popitem(last=False)

    def __len__(self) -> int:
        return len(self._items)


def freeze(value: object) -> Hashable:
    """A hashable, order-keeping stand-in for a JSON value, for use in cache keys."""
    if isinstance(value, dict):
        return ("{", tuple((k, freeze(v)) for k, v in value.items()))
    if isinstance(value, list):
        return ("[", tuple(freeze(v) for v in value))
    # bool before int: True == 1 would otherwise share a key with 1.
    return (type(value).__name__, value)
