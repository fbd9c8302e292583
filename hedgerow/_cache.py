"""Small caches keyed by the bytes of a query array (probe moves repeat queries)."""

from __future__ import annotations

import hashlib
from collections import OrderedDict

import numpy as np

__all__ = ["array_key", "lru_lookup"]


def array_key(X: np.ndarray) -> tuple:
    """Return a hashable key for the contents, shape and dtype of ``X``."""
    X = np.ascontiguousarray(X)
    digest = hashlib.blake2b(X.view(np.uint8), digest_size=16).digest()
    return digest, X.shape, X.dtype.str


def lru_lookup(store: dict, name: str, key, compute, size: int = 4):
    """Return ``compute()`` cached under ``key`` in the LRU ``store[name]`` of ``size``."""
    cache = store.setdefault(name, OrderedDict())
    if key in cache:
        cache.move_to_end(key)
        return cache[key]
    value = compute()
    cache[key] = value
    while len(cache) > size:
        cache.popitem(last=False)
    return value
