"""Reproducible standard-normal draws that depend only on (seed, row key,
component, draw index), not on a row's position in the batch. A catalogue cut
into partitions therefore gets exactly the same Monte Carlo draws per star as
when run whole.

Uniforms come from the SplitMix64 integer mixer (Steele, Lea & Flood 2014,
OOPSLA, "Fast splittable pseudorandom number generators"), normals from the
inverse normal CDF (scipy.special.ndtri).
"""
from __future__ import annotations

from functools import lru_cache

import numpy as np
import pandas as pd
from scipy.special import ndtri

__all__ = ["row_keys", "normal_draws"]

_GOLDEN = np.uint64(0x9E3779B97F4A7C15)
_M1 = np.uint64(0xBF58476D1CE4E5B9)
_M2 = np.uint64(0x94D049BB133111EB)


def _mix(x: np.ndarray) -> np.ndarray:
    with np.errstate(over="ignore"):
        x = x + _GOLDEN
        x = (x ^ (x >> np.uint64(30))) * _M1
        x = (x ^ (x >> np.uint64(27))) * _M2
        return x ^ (x >> np.uint64(31))


def row_keys(frame: pd.DataFrame) -> np.ndarray:
    """uint64 key per row from the row's own content (vectorised hashing)."""
    if frame.shape[1] == 0:
        return np.zeros(len(frame), dtype=np.uint64)
    return pd.util.hash_pandas_object(frame.astype(str), index=False).to_numpy(np.uint64)


def _mix_inplace(x: np.ndarray) -> np.ndarray:
    """:func:`_mix` on a large array, overwriting it (same bits, fewer temporaries)."""
    with np.errstate(over="ignore"):
        x += _GOLDEN
        x ^= x >> np.uint64(30)
        x *= _M1
        x ^= x >> np.uint64(27)
        x *= _M2
        x ^= x >> np.uint64(31)
    return x


@lru_cache(maxsize=8)
def _draw_index_hash(n_draws: int) -> np.ndarray:
    h = _mix(np.arange(n_draws, dtype=np.uint64) + np.uint64(1_000_003))
    h.setflags(write=False)
    return h


def normal_draws(keys: np.ndarray, seed: int, component: int, n_draws: int) -> np.ndarray:
    """(len(keys), n_draws) standard normals for one random component."""
    base = _mix(np.uint64(seed & 0xFFFFFFFFFFFFFFFF) ^ _mix(np.uint64(component)))
    k = _mix(keys.astype(np.uint64) ^ base)[:, None]
    x = np.bitwise_xor(k, _draw_index_hash(int(n_draws))[None, :])
    _mix_inplace(x)
    x >>= np.uint64(11)
    u = x.astype(np.float64)
    u += 0.5
    u *= 2.0 ** -53
    return ndtri(u, out=u)
