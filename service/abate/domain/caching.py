"""A small, thread-safe, bounded memo for results that a key (such as a study's revision) fully determines."""

import collections
import threading


class BoundedCache:
    """The most recently used `entries` results by key; computing a missing one happens outside the lock."""

    def __init__(self, entries=256):
        self._entries = entries
        self._results = collections.OrderedDict()
        self._lock = threading.Lock()

    def get_or_compute(self, key, compute):
        """The result kept for key, or compute() kept under key (two threads may both compute; one wins)."""
        with self._lock:
            if key in self._results:
                self._results.move_to_end(key)
                return self._results[key]
        result = compute()
        with self._lock:
            self._results[key] = result
            while len(self._results) > self._entries:
                self._results.popitem(last=False)
        return result
