"""Neighbour search: cell grid + Verlet list with a skin, and the brute-force oracle.

The list is *full* (each pair appears for both beads), stored as rows of a padded array
``neighbours (n, capacity)`` with ``counts (n,)``, and each bead's neighbours are in
ascending index order. Every bead's force is therefore summed over the same
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
from .pair import nearest_integer


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
    """Counting sort of beads into cells.

    Returns ``(cell_first (C+1,), cell_beads (n,))``: the beads of cell c are
    ``cell_beads[cell_first[c]:cell_first[c+1]]``, in ascending index order.
    """
    D = len(dim)
    n = x.shape[0]
    cell_of = np.empty(n, dtype=np.int32)
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
    cell_beads = np.empty(n, dtype=np.int32)
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
def _sort_row(a, i, m):
    for p in range(1, m):
        v = a[i, p]
        q = p - 1
        while q >= 0 and a[i, q] > v:
            a[i, q + 1] = a[i, q]
            q -= 1
        a[i, q + 1] = v


@njit(cache=True, inline="always")
def _scan(dim, xs, a, b_first, b_last, y0, y1, y2, y3, range2, i, m, excl_start, excl, ids, rows):
    """Test the candidates ``xs[b_first:b_last]`` against bead ``a`` seen at ``y`` (its
    position minus the candidates' image shift) and append the neighbours to row ``i``
    from slot ``m``; returns the new count (which also counts past the row capacity)."""
    D = len(dim)
    cap = rows.shape[1]
    has_exclusions = excl_start[i + 1] > excl_start[i]
    for b in range(b_first, b_last):
        d0 = y0 - xs[b, 0]
        r2 = d0 * d0
        if D > 1:
            d1 = y1 - xs[b, 1]
            r2 += d1 * d1
        if D > 2:
            d2 = y2 - xs[b, 2]
            r2 += d2 * d2
        if D > 3:
            d3 = y3 - xs[b, 3]
            r2 += d3 * d3
        # Branch-free append: every candidate is written at slot m, which only advances
        # when it is a neighbour (no mispredicted branch).
        ok = r2 < range2
        j = ids[b]
        if has_exclusions:
            ok = ok & (not _excluded(i, j, excl_start, excl))
        if m < cap:
            rows[i, m] = j
        m += 1 if ok else 0
    return m


@njit(cache=True, inline="always")
def _shifted(D, Z, x0, x1, x2, x3, shift):
    """``(x0, .., x3)`` with ``shift`` taken off component ``Z``."""
    if Z == 0:
        x0 -= shift
    elif Z == 1:
        x1 -= shift
    elif Z == 2:
        x2 -= shift
    else:
        x3 -= shift
    return x0, x1, x2, x3


@njit(cache=True, parallel=True)
def _half_pass(
    dim,
    xs,
    ids,
    cell_first,
    cell_group,
    cell_coord,
    columns,
    ncell,
    strides,
    offset,
    lengths,
    range2,
    excl_start,
    excl,
    counts,
    neighbours,
):
    """One sweep over the cells storing each pair once (the half list), unsorted: the
    pair goes to the row of the bead whose cell owns it; ``counts`` get the half-row
    lengths (also past the capacity). Not for periodic boxes under 3 cells wide.

    The half stencil is swept along *columns* in the last direction, whose cells are
    consecutive in cell order: the bead's own cell after it together with the next
    cell (one contiguous run of ``xs``), and the full 3-cell columns of the row offsets
    whose first non-zero component is positive; a column end that wraps around a
    periodic box is a second run with its own image shift. Few, long runs keep the
    inner loop a tight distance test.
    """
    D = len(dim)
    Z = D - 1  # the column direction (stride 1 in the flat cell index)
    periodic = lengths[0] > 0.0
    n_cells = cell_first.shape[0] - 1
    for c in prange(n_cells):
        first = cell_first[c]
        last = cell_first[c + 1]
        if first == last:
            continue
        g = cell_group[c]
        nz = ncell[g, Z]
        t = cell_coord[c, Z]
        row = c - t  # the cell at t = 0 of this column
        # The own column: the rest of this cell, then the next cell (wrapped or not).
        own_last = cell_first[c + 2] if t + 1 < nz else last
        wrap_next = periodic and t + 1 == nz
        for a in range(first, last):
            i = ids[a]
            x0 = xs[a, 0]
            x1 = xs[a, 1] if D > 1 else 0.0
            x2 = xs[a, 2] if D > 2 else 0.0
            x3 = xs[a, 3] if D > 3 else 0.0
            m = _scan(
                dim, xs, a, a + 1, own_last, x0, x1, x2, x3, range2, i, 0, excl_start, excl, ids, neighbours
            )
            if wrap_next:
                y0, y1, y2, y3 = _shifted(D, Z, x0, x1, x2, x3, lengths[Z])
                m = _scan(
                    dim,
                    xs,
                    a,
                    cell_first[row],
                    cell_first[row + 1],
                    y0,
                    y1,
                    y2,
                    y3,
                    range2,
                    i,
                    m,
                    excl_start,
                    excl,
                    ids,
                    neighbours,
                )
            counts[i] = m
        # Full columns of the other half-stencil rows.
        lo = max(t - 1, 0)
        hi = min(t + 1, nz - 1)
        wrap = periodic and (t == 0 or t == nz - 1)
        wrapped = nz - 1 if t == 0 else 0
        wrap_shift = -lengths[Z] if t == 0 else lengths[Z]
        for s in range(columns.shape[0]):
            flat = 0
            ok = True
            h0 = 0.0
            h1 = 0.0
            h2 = 0.0
            for k in range(Z):
                nc = ncell[g, k]
                tk = cell_coord[c, k] + columns[s, k]
                shift = 0.0
                if tk < 0:
                    ok = ok and periodic
                    tk += nc
                    shift = -lengths[k]
                elif tk >= nc:
                    ok = ok and periodic
                    tk -= nc
                    shift = lengths[k]
                flat += tk * strides[g, k]
                if k == 0:
                    h0 = shift
                elif k == 1:
                    h1 = shift
                else:
                    h2 = shift
            if not ok:
                continue
            base = offset[g] + flat
            run_first = cell_first[base + lo]
            run_last = cell_first[base + hi + 1]
            for a in range(first, last):
                i = ids[a]
                x0 = xs[a, 0] - h0
                x1 = (xs[a, 1] - h1 if Z > 1 else xs[a, 1]) if D > 1 else 0.0
                x2 = (xs[a, 2] - h2 if Z > 2 else xs[a, 2]) if D > 2 else 0.0
                x3 = xs[a, 3] if D > 3 else 0.0
                m = _scan(
                    dim,
                    xs,
                    a,
                    run_first,
                    run_last,
                    x0,
                    x1,
                    x2,
                    x3,
                    range2,
                    i,
                    counts[i],
                    excl_start,
                    excl,
                    ids,
                    neighbours,
                )
                if wrap:
                    y0, y1, y2, y3 = _shifted(D, Z, x0, x1, x2, x3, wrap_shift)
                    m = _scan(
                        dim,
                        xs,
                        a,
                        cell_first[base + wrapped],
                        cell_first[base + wrapped + 1],
                        y0,
                        y1,
                        y2,
                        y3,
                        range2,
                        i,
                        m,
                        excl_start,
                        excl,
                        ids,
                        neighbours,
                    )
                counts[i] = m


@njit(cache=True, parallel=True)
def _cell_pass(
    dim,
    xs,
    ids,
    cell_first,
    cell_group,
    cell_coord,
    stencil,
    ncell,
    strides,
    offset,
    lengths,
    inv_lengths,
    range2,
    excl_start,
    excl,
    counts,
    neighbours,
):
    """One sweep over all cells with the full stencil: store each bead's neighbours (up
    to the row capacity) in ``neighbours[i]``, sorted, and their number in ``counts[i]``
    (also past capacity). For periodic boxes under 3 cells wide, and to size the rows.

    ``xs`` are the positions in cell order, wrapped into the box when periodic; the
    image shift of each neighbour cell is worked out once per cell pair, so the inner
    loop is a plain distance test. A periodic direction only 1 or 2 cells wide has no
    unique shift; there the minimum image is taken pair by pair.
    """
    D = len(dim)
    periodic = lengths[0] > 0.0
    n_cells = cell_first.shape[0] - 1
    cap = neighbours.shape[1]
    n_stencil = stencil.shape[0]
    for c in prange(n_cells):
        first = cell_first[c]
        last = cell_first[c + 1]
        if first == last:
            continue
        for a in range(first, last):
            counts[ids[a]] = 0
        g = cell_group[c]
        narrow = False
        if periodic:
            for k in range(D):
                if ncell[g, k] < 3:
                    narrow = True
        for s in range(n_stencil):
            # Neighbour cell and its image shift (up to 4 components); no divisions here.
            flat = 0
            ok = True
            h0 = 0.0
            h1 = 0.0
            h2 = 0.0
            h3 = 0.0
            for k in range(D):
                nc = ncell[g, k]
                o = stencil[s, k]
                t = cell_coord[c, k] + o
                shift = 0.0
                if periodic:
                    if (nc == 1 and o != 0) or (nc == 2 and o == -1):
                        ok = False
                    if t < 0:
                        t += nc
                        shift = -lengths[k]
                    elif t >= nc:
                        t -= nc
                        shift = lengths[k]
                elif t < 0 or t >= nc:
                    ok = False
                flat += t * strides[g, k]
                if k == 0:
                    h0 = shift
                elif k == 1:
                    h1 = shift
                elif k == 2:
                    h2 = shift
                else:
                    h3 = shift
            if not ok:
                continue
            nb = offset[g] + flat
            for a in range(first, last):
                i = ids[a]
                m = counts[i]
                has_exclusions = excl_start[i + 1] > excl_start[i]
                b_first = cell_first[nb]
                x0 = xs[a, 0] - h0
                x1 = xs[a, 1] - h1 if D > 1 else 0.0
                x2 = xs[a, 2] - h2 if D > 2 else 0.0
                x3 = xs[a, 3] - h3 if D > 3 else 0.0
                for b in range(b_first, cell_first[nb + 1]):
                    if narrow:
                        r2 = 0.0
                        for k in range(D):
                            dk = xs[a, k] - xs[b, k]
                            dk -= lengths[k] * nearest_integer(dk * inv_lengths[k])
                            r2 += dk * dk
                    else:
                        d0 = x0 - xs[b, 0]
                        r2 = d0 * d0
                        if D > 1:
                            d1 = x1 - xs[b, 1]
                            r2 += d1 * d1
                        if D > 2:
                            d2 = x2 - xs[b, 2]
                            r2 += d2 * d2
                        if D > 3:
                            d3 = x3 - xs[b, 3]
                            r2 += d3 * d3
                    # Branch-free append: every candidate is written at slot m, which
                    # only advances when it is a neighbour (no mispredicted branch).
                    ok = (r2 < range2) & (b != a)
                    j = ids[b]
                    if has_exclusions:
                        ok = ok & (not _excluded(i, j, excl_start, excl))
                    if m < cap:
                        neighbours[i, m] = j
                    m += 1 if ok else 0
                counts[i] = m
        for a in range(first, last):
            i = ids[a]
            if counts[i] <= cap:
                _sort_row(neighbours, i, counts[i])


@njit(cache=True)
def _reverse_counts(counts, neighbours):
    """Full row lengths from a half list: own entries plus appearances as a partner."""
    total = counts.copy()
    for i in range(counts.shape[0]):
        for p in range(counts[i]):
            total[neighbours[i, p]] += 1
    return total


@njit(cache=True)
def _complete_rows(counts, neighbours, total):
    """Append to every row the beads that list it (serial, fixed order), then sort rows."""
    fill = counts.copy()
    for i in range(counts.shape[0]):
        for p in range(counts[i]):
            j = neighbours[i, p]
            neighbours[j, fill[j]] = i
            fill[j] += 1
    _sort_rows(neighbours, total)


@njit(cache=True, parallel=True)
def _sort_rows(neighbours, counts):
    for i in prange(counts.shape[0]):
        _sort_row(neighbours, i, counts[i])


@njit(cache=True)
def _capacity(needed):
    """Row capacity with a little head room, so a list that grows a little needs no new
    array (the rows are padded to this width: memory per bead)."""
    return needed + 4


@njit(cache=True)
def _stencil(dim):
    """Offsets (3^d, d) of a cell's neighbour cells, itself included."""
    D = len(dim)
    stencil = np.empty((3**D, D), dtype=np.int64)
    for s in range(3**D):
        rem = s
        for k in range(D):
            stencil[s, k] = rem % 3 - 1
            rem //= 3
    return stencil


@njit(cache=True)
def _half_columns(dim):
    """Row offsets (directions 0 .. d-2) of the full columns of the half stencil: those
    whose first non-zero component is positive, ((3^(d-1) - 1) / 2, max(d-1, 1))."""
    D = len(dim)
    n_rows = 3 ** (D - 1)
    columns = np.zeros(((n_rows - 1) // 2, max(D - 1, 1)), dtype=np.int64)
    row = 0
    for s in range(n_rows):
        rem = s
        first_nonzero = 0
        for _k in range(D - 1):
            o = rem % 3 - 1
            rem //= 3
            if first_nonzero == 0:
                first_nonzero = o
        if first_nonzero > 0:
            rem = s
            for k in range(D - 1):
                columns[row, k] = rem % 3 - 1
                rem //= 3
            row += 1
    return columns


@njit(cache=True)
def build_cell_list(
    dim, x, replica, group_start, lengths, inv_lengths, list_range, excl_start, excl, neighbours
):
    """Full Verlet list within ``list_range`` from a cell grid.

    Parameters
    ----------
    neighbours : int32 array (n, capacity)
        The previous list, reused when its rows are long enough (any capacity, 0 too).

    Returns
    -------
    counts : int32 (n,)
        Number of neighbours of each bead.
    neighbours : int32 (n, capacity)
        ``neighbours[i, :counts[i]]`` are bead i's neighbours, ascending; a new array
        only when a row outgrew the old capacity.

    Beads are swept cell by cell over a copy of the positions in cell order, so the
    inner loop reads contiguous memory; one sweep fills the rows directly.
    """
    D = len(dim)
    n = x.shape[0]
    counts = np.zeros(n, dtype=np.int32)
    if list_range <= 0.0:
        return counts, neighbours
    periodic = lengths[0] > 0.0
    origin, inv_cell, ncell, offset = _grid(dim, x, group_start, lengths, list_range)
    cell_first, ids = _bin(dim, x, replica, origin, inv_cell, ncell, offset, periodic)
    n_groups = offset.shape[0] - 1
    n_cells = offset[-1]
    cell_group = np.empty(n_cells, dtype=np.int64)
    cell_coord = np.empty((n_cells, D), dtype=np.int64)
    strides = np.empty((n_groups, D), dtype=np.int64)
    for g in range(n_groups):
        stride = 1
        for k in range(D - 1, -1, -1):
            strides[g, k] = stride
            stride *= ncell[g, k]
        for local in range(offset[g + 1] - offset[g]):
            c = offset[g] + local
            cell_group[c] = g
            for k in range(D):
                cell_coord[c, k] = (local // strides[g, k]) % ncell[g, k]
    # The half stencil (each pair of cells once, :func:`_half_pass`) unless a periodic
    # direction is only 1 or 2 cells wide, where +1 and -1 reach the same cell.
    narrow = False
    if periodic:
        for g in range(n_groups):
            for k in range(D):
                if ncell[g, k] < 3:
                    narrow = True
    half = not narrow
    xs = np.empty((n, D))
    for a in range(n):
        for k in range(D):
            v = x[ids[a], k]
            if periodic:
                v -= lengths[k] * np.floor(v * inv_lengths[k])
            xs[a, k] = v
    range2 = list_range * list_range
    args = (cell_group, cell_coord)
    rest = (ncell, strides, offset, lengths, inv_lengths, range2, excl_start, excl)
    if half:
        _half_pass(
            dim,
            xs,
            ids,
            cell_first,
            *args,
            _half_columns(dim),
            ncell,
            strides,
            offset,
            lengths,
            range2,
            excl_start,
            excl,
            counts,
            neighbours,
        )
        fits = counts.max() <= neighbours.shape[1] if n > 0 else True
        if fits:
            total = _reverse_counts(counts, neighbours)
            fits = total.max() <= neighbours.shape[1] if n > 0 else True
            if fits:
                _complete_rows(counts, neighbours, total)
                return total, neighbours
    # The rows do not fit (the first build, or a row grew): the full stencil writes
    # complete rows directly, so only one array of the right width is ever allocated.
    full = _stencil(dim)
    _cell_pass(dim, xs, ids, cell_first, *args, full, *rest, counts, neighbours)
    needed = counts.max() if n > 0 else 0
    if needed > neighbours.shape[1]:
        neighbours = np.empty((n, _capacity(needed)), dtype=np.int32)
        _cell_pass(dim, xs, ids, cell_first, *args, full, *rest, counts, neighbours)
    return counts, neighbours


@njit(cache=True)
def build_brute_force(
    dim, x, replica, group_start, lengths, inv_lengths, list_range, excl_start, excl, neighbours
):
    """O(n^2) oracle with the same output as :func:`build_cell_list` (for tests, tiny systems)."""
    D = len(dim)
    n = x.shape[0]
    range2 = list_range * list_range
    counts = np.zeros(n, dtype=np.int32)
    for _sweep in range(2):
        cap = neighbours.shape[1]
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
                    if m < cap:
                        neighbours[i, m] = j
                    m += 1
            counts[i] = m
        needed = counts.max() if n > 0 else 0
        if needed <= cap:
            break
        neighbours = np.empty((n, _capacity(needed)), dtype=np.int32)
    return counts, neighbours


def empty_list(n_beads: int) -> np.ndarray:
    """A neighbour array of capacity 0 (the first build sizes it)."""
    return np.empty((n_beads, 0), dtype=np.int32)


def to_offsets(counts: np.ndarray, neighbours: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Compact a list to ``(start (n+1,), flat)``: bead i's neighbours are ``flat[start[i]:start[i+1]]``."""
    start = np.concatenate([[0], np.cumsum(counts)]).astype(np.int64)
    mask = np.arange(neighbours.shape[1])[None, :] < counts[:, None]
    return start, np.ascontiguousarray(neighbours[mask])


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
