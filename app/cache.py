"""A small content-keyed cache shared by sessions, bounded in size, kept in memory only.

For long computations that report progress while they run (which
``st.cache_resource`` would replay oddly). Keys must be content keys
(fingerprints, canonical policy text, parameters), never session ids.
"""

from __future__ import annotations

import threading
from collections import OrderedDict
from typing import Any, Callable, Hashable


class BoundedCache:
    """Least-recently-used cache of at most ``max_entries`` results."""

    def __init__(self, max_entries: int = 8):
        self.max_entries = int(max_entries)
        self._data: OrderedDict[Hashable, Any] = OrderedDict()
        self._lock = threading.Lock()

    def get_or_compute(self, key: Hashable, compute: Callable[[], Any]) -> Any:
        with self._lock:
            if key in self._data:
                self._data.move_to_end(key)
                return self._data[key]
        value = compute()  # outside the lock: other sessions are not blocked
        with self._lock:
            self._data[key] = value
            self._data.move_to_end(key)
            while len(self._data) > self.max_entries:
                self._data.popitem(last=False)
        return value

    def get(self, key: Hashable, default: Any = None) -> Any:
        """The cached value for ``key`` without computing it (``default`` when absent)."""
        with self._lock:
            if key in self._data:
                self._data.move_to_end(key)
                return self._data[key]
        return default

    def __len__(self) -> int:
        return len(self._data)
