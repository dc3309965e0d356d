"""Compiled inner loops (numba): one pass of the block power iteration, and the forward push."""

from __future__ import annotations

import numpy as np
from numba import literally, njit, prange, uintp

from ._simd import axpy_lanes, prefetch

LOOKAHEAD = 32
"""Links between a row's prefetch and its use (measured best of 0, 4, 8, 16, 32, 64, 128 on 1M pages)."""


@njit(cache=True, parallel=True, fastmath=True, boundscheck=False)
def block_step(  # pragma: no cover
    indptr, indices, data, x, restart, coef, shift, damping, bounds, out, changes, width, lanes
):
    """``out = damping·Pᵀx + coef·restart + shift`` column-wise; ``changes[t]`` = L1 change of chunk t.

    ``x``, ``restart`` and ``out`` are flat views of ``(n, width)`` row-major blocks whose first
    ``coef.size`` columns are used (the rest are zero padding up to a multiple of ``lanes``). Rows are
    split into chunks of about equal link counts (``bounds``); each chunk is one parallel task.
    """
    literally(lanes)
    k = coef.size
    blocks = width // lanes
    end = indptr[indptr.size - 1]
    for t in prange(bounds.size - 1):
        total = np.empty(width, dtype=x.dtype)
        local = np.zeros(k)
        for j in range(bounds[t], bounds[t + 1]):
            total[:] = 0
            for p in range(indptr[j], indptr[j + 1]):
                ahead = p + LOOKAHEAD
                if ahead < end:
                    prefetch(x, np.int64(indices[ahead]) * width)
                row = np.int64(indices[p]) * width
                w = data[p]
                for b in range(blocks):
                    axpy_lanes(total, b * lanes, x, row + b * lanes, w, lanes)
            base = uintp(j) * uintp(width)  # unsigned: no negative-index handling, so the loop vectorises
            for column in range(k):
                c = uintp(column)
                at = base + c
                value = damping * total[c] + coef[c] * restart[at] + shift[c]
                local[c] += abs(np.float64(value) - np.float64(x[at]))
                out[at] = value
        changes[t, :] = local


# One cached entry point per lane width: ``lanes`` must be a compile-time literal for axpy_lanes, and
# passing it as a constant here resolves numba's ``literally`` once, at (cached) compile time. Calling
# block_step directly with a run-time int re-runs type inference on every call (about 1 s each).
@njit(cache=True)
def block_step_1(indptr, indices, data, x, restart, coef, shift, damping, bounds, out, changes, width):
    block_step(indptr, indices, data, x, restart, coef, shift, damping, bounds, out, changes, width, 1)


@njit(cache=True)
def block_step_2(indptr, indices, data, x, restart, coef, shift, damping, bounds, out, changes, width):
    block_step(indptr, indices, data, x, restart, coef, shift, damping, bounds, out, changes, width, 2)


@njit(cache=True)
def block_step_4(indptr, indices, data, x, restart, coef, shift, damping, bounds, out, changes, width):
    block_step(indptr, indices, data, x, restart, coef, shift, damping, bounds, out, changes, width, 4)


@njit(cache=True)
def block_step_8(indptr, indices, data, x, restart, coef, shift, damping, bounds, out, changes, width):
    block_step(indptr, indices, data, x, restart, coef, shift, damping, bounds, out, changes, width, 8)


@njit(cache=True)
def block_step_16(indptr, indices, data, x, restart, coef, shift, damping, bounds, out, changes, width):
    block_step(indptr, indices, data, x, restart, coef, shift, damping, bounds, out, changes, width, 16)


BLOCK_STEPS = {1: block_step_1, 2: block_step_2, 4: block_step_4, 8: block_step_8, 16: block_step_16}


@njit(cache=True)
def column_mass(x, rows):  # pragma: no cover
    """Float64 sum of ``x[rows, c]`` per column."""
    k = x.shape[1]
    mass = np.zeros(k)
    for i in rows:
        for c in range(k):
            mass[c] += x[i, c]
    return mass


_SPAN = 4096
"""Entries of the output that stay in cache while every chosen row passes over them."""


@njit(cache=True, boundscheck=False)
def weighted_rows(rows, chosen, weights, out):  # pragma: no cover
    """``out = Σ_j weights[j] · rows[chosen[j]]`` with float64 sums, ``_SPAN`` entries at a time (read
    column-major, a basis's chosen vectors are then each read once, in order)."""
    n = out.size
    for start in range(0, n, _SPAN):
        stop = min(start + _SPAN, n)
        for i in range(start, stop):
            out[i] = 0.0
        for j in range(chosen.size):
            row = chosen[j]
            w = weights[j]
            for i in range(start, stop):
                out[i] += w * rows[row, i]


@njit(cache=True, boundscheck=False)
def _queue_if_over(hot, queue, head, size, n, v):  # pragma: no cover
    """Append page ``v`` to the circular queue if its residual exceeds its (positive) threshold."""
    threshold = hot[2 * v + 1]
    if threshold > 0.0 and hot[2 * v] > threshold:
        at = head + size
        if at >= n:
            at -= n
        queue[at] = v
        hot[2 * v + 1] = -threshold
        return size + 1
    return size


@njit(cache=True, boundscheck=False)
def forward_push(  # pragma: no cover
    indptr, indices, data, out_degree, seeds, seed_weights, damping, epsilon, max_pushes, workspace
):
    """Forward push from a seed distribution; dangling pages send their mass back to the seeds.

    ``workspace`` = (hot, estimate, queue, touched). ``hot`` interleaves, per page ``v``, the residual
    ``hot[2v]`` and the push threshold ``hot[2v + 1]`` (0: not yet touched; > 0: touched; < 0: queued),
    so that visiting a link reads one cache line. All entries are zero on entry; the caller reads and
    then clears the ``touched[:count]`` entries (see :func:`clear_touched`), so the arrays can serve the
    next call without an O(n) clearing pass.

    Returns (count of touched pages, pushes, converged).
    """
    hot, estimate, queue, touched = workspace
    n = indptr.size - 1
    count = 0
    head = 0
    size = 0
    for s in range(seeds.size):
        u = seeds[s]
        if hot[2 * u + 1] == 0.0:
            hot[2 * u + 1] = epsilon * max(out_degree[u], 1)
            touched[count] = u
            count += 1
        hot[2 * u] += seed_weights[s]
    for s in range(seeds.size):
        size = _queue_if_over(hot, queue, head, size, n, seeds[s])
    pushes = 0
    while size > 0 and pushes < max_pushes:
        u = queue[head]
        head = head + 1 if head + 1 < n else 0
        size -= 1
        hot[2 * u + 1] = -hot[2 * u + 1]
        mass = hot[2 * u]
        hot[2 * u] = 0.0
        estimate[u] += (1.0 - damping) * mass
        pushes += 1
        spread = damping * mass
        first = indptr[u]
        last = indptr[u + 1]
        if first == last:
            for s in range(seeds.size):
                v = seeds[s]
                hot[2 * v] += spread * seed_weights[s]
                size = _queue_if_over(hot, queue, head, size, n, v)
            continue
        for p in range(first, last):
            v = np.int64(indices[p])
            if hot[2 * v + 1] == 0.0:
                hot[2 * v + 1] = epsilon * max(out_degree[v], 1)
                touched[count] = v
                count += 1
            hot[2 * v] += spread * data[p]
            size = _queue_if_over(hot, queue, head, size, n, v)
    return count, pushes, size == 0


@njit(cache=True, boundscheck=False)
def inflow(indptr, indices, data, hot, pages):  # pragma: no cover
    """``Σ_u r[u] P[u, v]`` for each ``v`` in ``pages``: residual one step away (``indptr`` = Pᵀ rows)."""
    sums = np.zeros(pages.size)
    for position in range(pages.size):
        v = pages[position]
        total = 0.0
        for p in range(indptr[v], indptr[v + 1]):
            total += hot[2 * np.int64(indices[p])] * data[p]
        sums[position] = total
    return sums


@njit(cache=True, boundscheck=False)
def reverse_push(indptr, indices, data, residual, estimate, damping, epsilon, max_pushes):  # pragma: no cover
    """Reverse push (``indptr`` = Pᵀ rows: each page's in-links): while some page holds residual above
    ``epsilon``, move ``(1 − α)`` of it into its estimate and ``α P[u, v]`` of it to each page ``u``
    linking to it. ``residual`` and ``estimate`` are updated in place. Returns (pushes, converged)."""
    n = indptr.size - 1
    queue = np.empty(max(n, 1), dtype=np.int64)
    queued = np.zeros(n, dtype=np.bool_)
    head = 0
    size = 0
    for v in range(n):
        if residual[v] > epsilon:
            queue[size] = v
            queued[v] = True
            size += 1
    pushes = 0
    while size > 0 and pushes < max_pushes:
        v = queue[head]
        head = head + 1 if head + 1 < n else 0
        size -= 1
        queued[v] = False
        mass = residual[v]
        residual[v] = 0.0
        estimate[v] += (1.0 - damping) * mass
        pushes += 1
        spread = damping * mass
        for p in range(indptr[v], indptr[v + 1]):
            u = np.int64(indices[p])
            residual[u] += spread * data[p]
            if not queued[u] and residual[u] > epsilon:
                at = head + size
                if at >= n:
                    at -= n
                queue[at] = u
                queued[u] = True
                size += 1
    return pushes, size == 0
