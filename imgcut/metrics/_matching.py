"""Maximum-cardinality bipartite matching for boundary pixels.

scipy 1.17's ``maximum_bipartite_matching`` (and ``min_weight_full_bipartite_matching``,
whose feasibility check calls it) takes exponential time on the ladder-like graphs that
two nearby boundary curves form (scipy issue gh-26147: its depth-first search never marks
dead ends). This module therefore runs its own Hopcroft-Karp, started from a greedy
nearest-first matching that already pairs almost every pixel.
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
    Hopcroft & Karp (1973): breadth-first layers from the free left vertices, then
    vertex-disjoint shortest augmenting paths by depth-first search, marking vertices
    that lead nowhere so that each is expanded once per phase; at most O(sqrt(V))
    phases. The loops run over graph vertices in Python, but start from the greedy
    matching, so only a few percent of the vertices are ever visited.

    Examples
    --------
    >>> import numpy as np
    >>> # path a0-b0-a1-b1: greedy takes a0-b0 only if it is shortest; the optimum is 2
    >>> m = max_matching(np.array([0, 1, 1]), np.array([0, 0, 1]), np.array([1.0, 0.5, 2.0]), 2, 2)
    >>> int((m >= 0).sum())
    2
    """
    match_m, match_h = _greedy_nearest(mi, hj, dist, n_m, n_h)
    if mi.size == 0:
        return match_m
    order = np.argsort(mi, kind="stable")
    ptr = np.searchsorted(mi[order], np.arange(n_m + 1))
    nbr = hj[order]
    has_edge = np.flatnonzero(ptr[1:] > ptr[:-1])
    adj: dict[int, list[int]] = {int(u): nbr[ptr[u] : ptr[u + 1]].tolist() for u in has_edge}
    mm = match_m.tolist()
    mh = match_h.tolist()
    inf = n_m + n_h + 1
    while True:
        free = [u for u in adj if mm[u] < 0]
        if not free:
            break
        # Breadth-first layers over alternating paths (Hopcroft & Karp 1973).
        layer = dict.fromkeys(free, 0)
        queue = list(free)
        found = False
        qi = 0
        while qi < len(queue):
            u = queue[qi]
            qi += 1
            for v in adj[u]:
                w = mh[v]
                if w < 0:
                    found = True
                elif w not in layer:
                    layer[w] = layer[u] + 1
                    queue.append(w)
        if not found:
            break
        # Depth-first search for vertex-disjoint shortest augmenting paths.
        pos = dict.fromkeys(layer, 0)
        for root in free:
            stack = [root]
            path_v: list[int] = []
            while stack:
                u = stack[-1]
                nb = adj[u]
                advanced = False
                while pos[u] < len(nb):
                    v = nb[pos[u]]
                    pos[u] += 1
                    w = mh[v]
                    if w < 0:
                        # Augment along the stack: each u on it takes the v chosen below it.
                        path_v.append(v)
                        for uu, vv in zip(stack, path_v, strict=True):
                            mm[uu] = vv
                            mh[vv] = uu
                        stack = []
                        advanced = True
                        break
                    if layer.get(w, inf) == layer[u] + 1:
                        path_v.append(v)
                        stack.append(w)
                        advanced = True
                        break
                if not advanced:
                    layer[u] = inf  # dead end: never expand again this phase
                    stack.pop()
                    if path_v:
                        path_v.pop()
    return np.asarray(mm, dtype=np.int64)
