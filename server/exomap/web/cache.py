"""An LRU cache of answers, bounded by entry count and by bytes, safe across threads.

Keys are ``(route, scenario content id, normalized SI parameters, format)``, so the same question asked by a
POST body or a GET query, with units or in SI, hits the same entry. Values are the serialised answers
(``exomap.web.jobs.Answer``: body and gzip form) exactly as first sent.
"""

from __future__ import annotations

import threading
from collections import OrderedDict
from collections.abc import Hashable, Sized


class AnswerCache:
    """Least-recently-used answers; ``entries=0`` disables caching."""

    def __init__(self, entries: int, max_bytes: int) -> None:
        self.entries = entries
        self.max_bytes = max_bytes
        self._data: OrderedDict[Hashable, Sized] = OrderedDict()
        self._bytes = 0
        self._lock = threading.Lock()
        self.hits = 0
        self.misses = 0

    def get(self, key: Hashable) -> Sized | None:
        with self._lock:
            value = self._data.get(key)
            if value is None:
                self.misses += 1
                return None
            self._data.move_to_end(key)
            self.hits += 1
            return value

    def put(self, key: Hashable, value: Sized) -> None:
        size = len(value)
        if self.entries <= 0 or size > self.max_bytes:
            return
        with self._lock:
            old = self._data.pop(key, None)
            if old is not None:
                self._bytes -= len(old)
            self._data[key] = value
            self._bytes += size
            while len(self._data) > self.entries or self._bytes > self.max_bytes:
                _, dropped = self._data.popitem(last=False)
                self._bytes -= len(dropped)

    def __len__(self) -> int:
        with self._lock:
            return len(self._data)

    @property
    def size_bytes(self) -> int:
        with self._lock:
            return self._bytes
