"""Compiled inner loops (numba): one pass of the block power iteration, and the forward push."""

from __future__ import annotations

import numpy as np
from numba import njit, prange


@njit(cache=True, parallel=True, fastmath=True)
def block_step(  # pragma: no cover
    indptr, indices, data, x, restart, coef, shift, damping, bounds, out, changes
):
    """``out = damping·Pᵀx + coef·restart + shift`` column-wise; ``changes[t]`` = L1 change of chunk t.

    Rows are split into chunks of about equal link counts (``bounds``); each chunk is one parallel task.
    """
    k = x.shape[1]
    for t in prange(bounds.size - 1):
        total = np.empty(k, dtype=x.dtype)
        local = np.zeros(k)
        for j in range(bounds[t], bounds[t + 1]):
            total[:] = 0
            for p in range(indptr[j], indptr[j + 1]):
                i = indices[p]
                w = data[p]
                for c in range(k):
                    total[c] += w * x[i, c]
            for c in range(k):
                value = damping * total[c] + coef[c] * restart[j, c] + shift[c]
                local[c] += abs(np.float64(value) - np.float64(x[j, c]))
                out[j, c] = value
        changes[t, :] = local


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
    indptr, indices, data, out_degree, seeds, seed_weights, damping, epsilon, max_pushes
):
    """Forward push from a seed distribution; dangling pages send their mass back to the seeds.

    Returns (estimate, residual, touched pages, pushes, converged).
    """
    n = indptr.size - 1
    estimate = np.zeros(n)
    residual = np.zeros(n)
    queue = np.empty(n, dtype=np.int32)
    queued = np.zeros(n, dtype=np.bool_)
    seen = np.zeros(n, dtype=np.bool_)
    touched = np.empty(n, dtype=np.int32)
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
    return estimate, residual, touched[:count], pushes, size == 0
