"""Maximum-cardinality bipartite matching for boundary pixels.

scipy 1.17's ``maximum_bipartite_matching`` (and ``min_weight_full_bipartite_matching``,
whose feasibility check calls it) takes exponential time on the ladder-like graphs that
two nearby boundary curves form (scipy issue gh-26147: its depth-first search never marks
dead ends). This module therefore runs its own augmenting-path matching, vectorised
per search level, started from a greedy nearest-first matching that already pairs almost
every pixel.
"""

from __future__ import annotations

import numpy as np

__all__ = ["max_matching"]

# Mutual-nearest rounds before Hopcroft-Karp takes over. Each round is vectorised; on
# boundary maps a few rounds pair nearly every pixel, while on long chains of equal
# distances a round may pair only one edge, so the number of rounds is capped.
_GREEDY_ROUNDS = 12


def _greedy_nearest(
    mi: np.ndarray, hj: np.ndarray, dist: np.ndarray, n_m: int, n_h: int
) -> tuple[np.ndarray, np.ndarray]:
    """Match mutual-nearest free pairs, shortest first, in a few vectorised rounds."""
    match_m = np.full(n_m, -1, dtype=np.int64)
    match_h = np.full(n_h, -1, dtype=np.int64)
    order = np.lexsort((hj, mi, dist))  # by distance, ties by index: deterministic
    em, eh = mi[order], hj[order]
    for _ in range(_GREEDY_ROUNDS):
        if em.size == 0:
            break
        _, first_m = np.unique(em, return_index=True)  # nearest edge of each machine pixel
        _, first_h = np.unique(eh, return_index=True)  # nearest edge of each human pixel
        best_m = np.zeros(em.size, dtype=bool)
        best_m[first_m] = True
        best_h = np.zeros(em.size, dtype=bool)
        best_h[first_h] = True
        take = best_m & best_h  # never empty: the globally shortest edge is mutual
        match_m[em[take]] = eh[take]
        match_h[eh[take]] = em[take]
        free = (match_m[em] < 0) & (match_h[eh] < 0)
        em, eh = em[free], eh[free]
    return match_m, match_h


def _augment_phase(ptr: np.ndarray, nbr: np.ndarray, mm: np.ndarray, mh: np.ndarray) -> int:
    """One phase: breadth-first search from all free left vertices, then augment.

    The search is level-synchronous and vectorised; it stops at the first level that
    reaches a free right vertex, so the augmenting paths found are shortest (Hopcroft &
    Karp 1973; running it to the end took fewer phases but more time here). Each right vertex
    keeps the left vertex it was first reached from; paths are traced back through
    these parents and applied when they share no vertex with a path already applied in
    this phase. Returns the number of augmentations.
    """
    n_m = mm.size
    deg = ptr[1:] - ptr[:-1]
    frontier = np.flatnonzero((mm < 0) & (deg > 0))
    if frontier.size == 0:
        return 0
    parent = np.full(mh.size, -1, dtype=np.int64)
    seen_left = np.zeros(n_m, dtype=bool)
    seen_left[frontier] = True
    ends = np.empty(0, dtype=np.int64)
    while frontier.size:
        counts = deg[frontier]
        start = np.repeat(ptr[frontier] - np.cumsum(counts) + counts, counts)
        edge = start + np.arange(counts.sum())
        src = np.repeat(frontier, counts)
        dst = nbr[edge]
        new = parent[dst] < 0
        dst, first = np.unique(dst[new], return_index=True)
        parent[dst] = src[new][first]
        free_right = mh[dst] < 0
        if free_right.any():
            ends = dst[free_right]
            break
        nxt = mh[dst]
        nxt = nxt[~seen_left[nxt]]
        seen_left[nxt] = True
        frontier = nxt
    if ends.size == 0:
        return 0
    par = parent.tolist()  # Python lists: fast scalar access while tracing
    mml = mm.tolist()
    used = bytearray(n_m)
    applied: list[tuple[int, int]] = []
    for v in ends.tolist():  # one short path per free right vertex reached
        path = []
        x = v
        while True:
            u = par[x]
            if used[u]:
                path = []
                break
            path.append((u, x))
            if mml[u] < 0:
                break  # reached a free root
            x = mml[u]
        for u, x in path:
            used[u] = 1
            mml[u] = x
        applied.extend(path)
    if applied:
        pairs = np.asarray(applied, dtype=np.int64)
        mm[pairs[:, 0]] = pairs[:, 1]
        mh[pairs[:, 1]] = pairs[:, 0]
    return len(applied)


def max_matching(
    mi: np.ndarray, hj: np.ndarray, dist: np.ndarray, n_m: int, n_h: int
) -> np.ndarray:
    """Maximum-cardinality matching of a bipartite graph given as an edge list.

    Parameters
    ----------
    mi, hj : ndarray of int
        Edge endpoints: left vertex ``mi[e]`` in ``0..n_m-1``, right vertex ``hj[e]``.
    dist : ndarray of float
        Edge lengths; the greedy start prefers short edges.
    n_m, n_h : int
        Number of left and right vertices.

    Returns
    -------
    ndarray of int, shape (n_m,)
        The right partner of each left vertex, or -1.

    Notes
    -----
    A greedy start (mutual-nearest pairs, shortest first) is completed by phases of
    shortest augmenting paths found by a breadth-first search from every free left
    vertex at once (the layered search of Hopcroft & Karp 1973). By Berge's theorem
    (1957) the matching is maximum when no augmenting path is left. The searches are
    vectorised per level; only the tracing of the few paths found runs in Python.

    Examples
    --------
    >>> import numpy as np
    >>> # path a0-b0-a1-b1: greedy takes a1-b0 (shortest) first; the optimum has 2 pairs
    >>> m = max_matching(np.array([0, 1, 1]), np.array([0, 0, 1]), np.array([1.0, 0.5, 2.0]), 2, 2)
    >>> int((m >= 0).sum())
    2
    """
    mm, mh = _greedy_nearest(mi, hj, dist, n_m, n_h)
    if mi.size == 0:
        return mm
    order = np.argsort(mi, kind="stable")
    ptr = np.searchsorted(mi[order], np.arange(n_m + 1))
    nbr = hj[order]
    while _augment_phase(ptr, nbr, mm, mh):
        pass
    return mm
