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


@njit(cache=True)
def forward_push(  # pragma: no cover
    indptr, indices, data, out_degree, seeds, seed_weights, damping, epsilon, max_pushes, workspace
):
    """Forward push from a seed distribution; dangling pages send their mass back to the seeds.

    ``workspace`` = (estimate, residual, queue, queued, seen, touched) of length n, all zero / False on
    entry; only the touched entries are written, and they are reset before returning, so the arrays can
    serve the next call without an O(n) clearing pass.

    Returns (touched pages, their estimates, their residuals, pushes, converged).
    """
    estimate, residual, queue, queued, seen, touched = workspace
    n = indptr.size - 1
    count = 0
    head = 0
    size = 0
    for s in range(seeds.size):
        u = seeds[s]
        residual[u] += seed_weights[s]
        if not seen[u]:
            seen[u] = True
            touched[count] = u
            count += 1
    for s in range(seeds.size):
        u = seeds[s]
        if not queued[u] and residual[u] > epsilon * max(out_degree[u], 1):
            queued[u] = True
            queue[(head + size) % n] = u
            size += 1
    pushes = 0
    while size > 0 and pushes < max_pushes:
        u = queue[head]
        head = (head + 1) % n
        size -= 1
        queued[u] = False
        mass = residual[u]
        if mass <= epsilon * max(out_degree[u], 1):
            continue
        residual[u] = 0.0
        estimate[u] += (1.0 - damping) * mass
        pushes += 1
        spread = damping * mass
        if out_degree[u] == 0:
            for s in range(seeds.size):
                v = seeds[s]
                residual[v] += spread * seed_weights[s]
                if not queued[v] and residual[v] > epsilon * max(out_degree[v], 1):
                    queued[v] = True
                    queue[(head + size) % n] = v
                    size += 1
            continue
        for p in range(indptr[u], indptr[u + 1]):
            v = indices[p]
            residual[v] += spread * data[p]
            if not seen[v]:
                seen[v] = True
                touched[count] = v
                count += 1
            if not queued[v] and residual[v] > epsilon * max(out_degree[v], 1):
                queued[v] = True
                queue[(head + size) % n] = v
                size += 1
    pages = touched[:count].copy()
    values = np.empty(count)
    left = np.empty(count)
    for position in range(count):
        u = pages[position]
        values[position] = estimate[u]
        left[position] = residual[u]
        estimate[u] = 0.0
        residual[u] = 0.0
        queued[u] = False
        seen[u] = False
    return pages, values, left, pushes, size == 0
