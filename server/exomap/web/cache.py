"""An LRU cache of answers, bounded by entry count and by bytes, safe across threads.

Keys are ``(route, scenario content id, normalized SI parameters, format)``, so the same question asked by a
POST body or a GET query, with units or in SI, hits the same entry. Values are the serialised answers
(``exomap.web.jobs.Answer``: body and gzip form) exactly as first sent. Each entry counts its size when
stored (an answer's gzip form, made later, is counted in advance: ``Answer.__len__``).
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
        self._data: OrderedDict[Hashable, tuple[Sized, int]] = OrderedDict()  # key -> (value, size when put)
        self._bytes = 0
        self._lock = threading.Lock()
        self.hits = 0
        self.misses = 0

    def get(self, key: Hashable) -> Sized | None:
        with self._lock:
            entry = self._data.get(key)
            if entry is None:
                self.misses += 1
                return None
            self._data.move_to_end(key)
            self.hits += 1
            return entry[0]

    def put(self, key: Hashable, value: Sized) -> None:
        size = len(value)
        if self.entries <= 0 or size > self.max_bytes:
            return
        with self._lock:
            old = self._data.pop(key, None)
            if old is not None:
                self._bytes -= old[1]
            self._data[key] = (value, size)
            self._bytes += size
            while len(self._data) > self.entries or self._bytes > self.max_bytes:
                _, (_, dropped) = self._data.popitem(last=False)
                self._bytes -= dropped

    def drop(self, key: Hashable) -> None:
        """Forget one answer (one that is right but not complete, e.g. cut short by the time budget)."""
        with self._lock:
            old = self._data.pop(key, None)
            if old is not None:
                self._bytes -= old[1]

    def __len__(self) -> int:
        with self._lock:
            return len(self._data)

    @property
    def size_bytes(self) -> int:
        with self._lock:
            return self._bytes
