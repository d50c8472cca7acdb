"""Neighbour search: cell grid + Verlet list with a skin, and the brute-force oracle.

The list is *full* (each pair appears for both beads) and each bead's neighbours are
stored in ascending index order. Every bead's force is therefore summed over the same
partners in the same order whatever the thread count and whenever the list was last
rebuilt, which keeps runs bitwise reproducible across threads and restarts.

Beads are binned per *group* (one group per independent replica). Each group has its
own grid: over the periodic box, or over the group's current bounding box in open
space (no images; a chain that wanders far just gets a larger box, with the number of
cells capped at about twice the number of beads). Beads of different groups never
meet, because they are never in each other's cells.
"""

from __future__ import annotations

import numpy as np
from numba import njit, prange

from ..errors import ConfigError


@njit(cache=True)
def _grid(dim, x, group_start, lengths, list_range):
    """Per-group grids: origin (G, d), inverse cell size (G, d), cells (G, d), offsets (G+1)."""
    D = len(dim)
    G = group_start.shape[0] - 1
    origin = np.zeros((G, D))
    inv_cell = np.zeros((G, D))
    ncell = np.ones((G, D), dtype=np.int64)
    offset = np.zeros(G + 1, dtype=np.int64)
    periodic = lengths[0] > 0.0
    for g in range(G):
        a = group_start[g]
        b = group_start[g + 1]
        if periodic:
            total = 1
            for k in range(D):
                nc = max(1, int(np.floor(lengths[k] / list_range)))
                ncell[g, k] = nc
                inv_cell[g, k] = nc / lengths[k]
                total *= nc
        else:
            span = np.zeros(D)
            for k in range(D):
                lo = x[a, k]
                hi = x[a, k]
                for i in range(a + 1, b):
                    lo = min(lo, x[i, k])
                    hi = max(hi, x[i, k])
                origin[g, k] = lo
                span[k] = hi - lo
            # Cells at least list_range wide; cap the count near twice the bead count.
            size = list_range
            cap = max(8, 2 * (b - a))
            while True:
                total = 1
                for k in range(D):
                    nc = max(1, int(np.floor(span[k] / size)))
                    total *= nc
                if total <= cap:
                    break
                size *= 1.25
            total = 1
            for k in range(D):
                nc = max(1, int(np.floor(span[k] / size)))
                ncell[g, k] = nc
                inv_cell[g, k] = nc / span[k] if span[k] > 0.0 else 0.0
                total *= nc
        offset[g + 1] = offset[g] + total
    return origin, inv_cell, ncell, offset


@njit(cache=True, inline="always")
def _coordinate(xk, origin, inv_cell, nc, periodic):
    c = int(np.floor((xk - origin) * inv_cell))
    if periodic:
        c = c % nc
    else:
        c = min(max(c, 0), nc - 1)
    return c


@njit(cache=True)
def _bin(dim, x, replica, origin, inv_cell, ncell, offset, periodic):
    """Counting sort of beads into cells: (cell_first (C+1,), cell_beads (n,))."""
    D = len(dim)
    n = x.shape[0]
    cell_of = np.empty(n, dtype=np.int64)
    for i in range(n):
        g = replica[i]
        flat = 0
        for k in range(D):
            flat = flat * ncell[g, k] + _coordinate(
                x[i, k], origin[g, k], inv_cell[g, k], ncell[g, k], periodic
            )
        cell_of[i] = offset[g] + flat
    n_cells = offset[-1]
    cell_first = np.zeros(n_cells + 1, dtype=np.int64)
    for i in range(n):
        cell_first[cell_of[i] + 1] += 1
    for c in range(n_cells):
        cell_first[c + 1] += cell_first[c]
    fill = cell_first[:-1].copy()
    cell_beads = np.empty(n, dtype=np.int64)
    for i in range(n):
        c = cell_of[i]
        cell_beads[fill[c]] = i
        fill[c] += 1
    return cell_first, cell_beads


@njit(cache=True, inline="always")
def _excluded(i, j, excl_start, excl):
    for e in range(excl_start[i], excl_start[i + 1]):
        if excl[e] == j:
            return True
    return False


@njit(cache=True, inline="always")
def _scan(
    dim,
    i,
    x,
    replica,
    lengths,
    inv_lengths,
    range2,
    origin,
    inv_cell,
    ncell,
    offset,
    cell_first,
    cell_beads,
    excl_start,
    excl,
    out,
    out_at,
    write,
):
    """Visit the stencil of bead i; count (write=False) or store its neighbours."""
    D = len(dim)
    periodic = lengths[0] > 0.0
    g = replica[i]
    count = 0
    n_stencil = 3**D
    for s in range(n_stencil):
        rem = s
        flat = 0
        ok = True
        for k in range(D):
            o = rem % 3 - 1
            rem //= 3
            nc = ncell[g, k]
            c = _coordinate(x[i, k], origin[g, k], inv_cell[g, k], nc, periodic) + o
            if periodic:
                if (nc == 1 and o != 0) or (nc == 2 and o == -1):
                    ok = False  # the same cell again through the image
                c = c % nc
            elif c < 0 or c >= nc:
                ok = False
            flat = flat * nc + c
        if not ok:
            continue
        cell = offset[g] + flat
        for p in range(cell_first[cell], cell_first[cell + 1]):
            j = cell_beads[p]
            if j == i:
                continue
            r2 = 0.0
            for k in range(D):
                dx = x[i, k] - x[j, k]
                dx -= lengths[k] * np.rint(dx * inv_lengths[k])
                r2 += dx * dx
            if r2 < range2 and not _excluded(i, j, excl_start, excl):
                if write:
                    out[out_at + count] = j
                count += 1
    return count


@njit(cache=True, inline="always")
def _sort_segment(a, lo, hi):
    for p in range(lo + 1, hi):
        v = a[p]
        q = p - 1
        while q >= lo and a[q] > v:
            a[q + 1] = a[q]
            q -= 1
        a[q + 1] = v


@njit(cache=True, parallel=True)
def build_cell_list(dim, x, replica, group_start, lengths, inv_lengths, list_range, excl_start, excl):
    """Full Verlet list within ``list_range`` from a cell grid.

    Returns ``(start (n+1,) int64, neighbours (m,) int32)``: the neighbours of bead i are
    ``neighbours[start[i]:start[i+1]]``, ascending.
    """
    n = x.shape[0]
    if list_range <= 0.0:
        return np.zeros(n + 1, dtype=np.int64), np.empty(0, dtype=np.int32)
    periodic = lengths[0] > 0.0
    origin, inv_cell, ncell, offset = _grid(dim, x, group_start, lengths, list_range)
    cell_first, cell_beads = _bin(dim, x, replica, origin, inv_cell, ncell, offset, periodic)
    range2 = list_range * list_range
    counts = np.zeros(n + 1, dtype=np.int64)
    dummy = np.empty(0, dtype=np.int32)
    for i in prange(n):
        counts[i + 1] = _scan(
            dim,
            i,
            x,
            replica,
            lengths,
            inv_lengths,
            range2,
            origin,
            inv_cell,
            ncell,
            offset,
            cell_first,
            cell_beads,
            excl_start,
            excl,
            dummy,
            0,
            False,
        )
    for i in range(n):
        counts[i + 1] += counts[i]
    out = np.empty(counts[n], dtype=np.int32)
    for i in prange(n):
        _scan(
            dim,
            i,
            x,
            replica,
            lengths,
            inv_lengths,
            range2,
            origin,
            inv_cell,
            ncell,
            offset,
            cell_first,
            cell_beads,
            excl_start,
            excl,
            out,
            counts[i],
            True,
        )
        _sort_segment(out, counts[i], counts[i + 1])
    return counts, out


@njit(cache=True)
def build_brute_force(dim, x, replica, group_start, lengths, inv_lengths, list_range, excl_start, excl):
    """O(n^2) oracle with the same output as :func:`build_cell_list` (for tests, tiny systems)."""
    D = len(dim)
    n = x.shape[0]
    range2 = list_range * list_range
    counts = np.zeros(n + 1, dtype=np.int64)
    for p in range(2):
        out = np.empty(counts[n] if p == 1 else 0, dtype=np.int32)
        for i in range(n):
            m = 0
            for j in range(group_start[replica[i]], group_start[replica[i] + 1]):
                if j == i:
                    continue
                r2 = 0.0
                for k in range(D):
                    dx = x[i, k] - x[j, k]
                    dx -= lengths[k] * np.rint(dx * inv_lengths[k])
                    r2 += dx * dx
                if r2 < range2 and not _excluded(i, j, excl_start, excl):
                    if p == 1:
                        out[counts[i] + m] = j
                    m += 1
            if p == 0:
                counts[i + 1] = m
        if p == 0:
            for i in range(n):
                counts[i + 1] += counts[i]
    return counts, out


def exclusion_table(n_beads: int, bonds: np.ndarray, mode: str) -> tuple[np.ndarray, np.ndarray]:
    """CSR ``(start (n+1,), partners)`` of excluded pairs: ``"none"`` or ``"bonded"``."""
    if mode == "none" or bonds.shape[0] == 0:
        return np.zeros(n_beads + 1, dtype=np.int64), np.zeros(0, dtype=np.int64)
    if mode != "bonded":
        raise ConfigError(f"exclusions = {mode!r} is not allowed: use 'none' or 'bonded'")
    a = np.concatenate([bonds[:, 0], bonds[:, 1]])
    b = np.concatenate([bonds[:, 1], bonds[:, 0]])
    order = np.lexsort((b, a))
    a, b = a[order], b[order]
    start = np.searchsorted(a, np.arange(n_beads + 1)).astype(np.int64)
    return start, np.ascontiguousarray(b, dtype=np.int64)


def pair_set(start: np.ndarray, neighbours: np.ndarray) -> set[tuple[int, int]]:
    """Unordered pairs ``{(i, j), i < j}`` of a full list (for tests)."""
    i = np.repeat(np.arange(start.shape[0] - 1), np.diff(start))
    j = neighbours.astype(np.int64)
    keep = i < j
    return set(zip(i[keep].tolist(), j[keep].tolist(), strict=True))
