"""Chain size from positions: radius of gyration and end-to-end vector.

All functions take positions of shape ``(..., n_beads, d)`` (a leading frame axis is
allowed) and chain offsets ``chain_start`` of shape ``(n_chains + 1,)``.
"""

from __future__ import annotations

import numpy as np


def radius_of_gyration_squared(positions: np.ndarray, chain_start: np.ndarray) -> np.ndarray:
    """Rg^2 of each chain (equal masses), shape ``(..., n_chains)``.

    Rg^2 = (1/N) sum_i |r_i - r_cm|^2 over the N beads of the chain.
    """
    x = np.asarray(positions, dtype=np.float64)
    starts = np.asarray(chain_start)
    out = np.empty(x.shape[:-2] + (starts.size - 1,))
    for c in range(starts.size - 1):
        seg = x[..., starts[c] : starts[c + 1], :]
        dev = seg - seg.mean(axis=-2, keepdims=True)
        out[..., c] = np.mean(np.sum(dev * dev, axis=-1), axis=-1)
    return out


def end_to_end(positions: np.ndarray, chain_start: np.ndarray) -> np.ndarray:
    """End-to-end vectors ``R_last - R_first`` of each chain, shape ``(..., n_chains, d)``."""
    x = np.asarray(positions, dtype=np.float64)
    starts = np.asarray(chain_start)
    return x[..., starts[1:] - 1, :] - x[..., starts[:-1], :]
