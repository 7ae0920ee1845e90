"""Greedy plans and local search: the fast first answer every model starts from.

* :func:`greedy_cover` -- Chvatal's (1979, Mathematics of Operations
  Research 4(3)) greedy for weighted set covering: repeatedly open the site
  with the most uncovered rows per unit cost; cost <= H(d) x optimum, d the
  largest column.
* :func:`prune_cover` -- drop redundant sites (most expensive first).
* :func:`greedy_most` -- greedy maximal covering with p sites or a budget.
* :func:`swap_most` -- vertex substitution (Teitz & Bart 1968, Operations
  Research 16(5)): best single swap, repeated while it improves.

All work on 0/1 CSR matrices; ties are broken by the lowest site index.
"""

from __future__ import annotations

import time

import numpy as np
import scipy.sparse as sp

__all__ = ["greedy_cover", "prune_cover", "greedy_most", "swap_most", "iterated_swap", "covered_weight"]

_EPS = 1e-9


def covered_weight(mat: sp.csr_matrix, weight: np.ndarray, chosen: np.ndarray) -> float:
    """Weight of the rows covered by at least one chosen column."""
    x = np.zeros(mat.shape[1], dtype=np.int8)
    x[np.asarray(chosen, dtype=np.int64)] = 1
    hit = np.asarray(mat @ x).ravel() > 0
    return float(np.asarray(weight)[hit].sum())


class _Opening:
    """State of a greedy run: what is uncovered, each column's uncovered weight, which columns may still open.

    :meth:`open` is the one step both greedy heuristics share.
    """

    def __init__(self, mat: sp.csr_matrix, weight: np.ndarray, allowed: np.ndarray | None, conflicts: sp.csr_matrix | None) -> None:
        n, m = mat.shape
        self.mat, self.weight, self.conflicts = mat, weight, conflicts
        self.csc = sp.csc_matrix(mat)
        self.uncovered = np.ones(n, dtype=bool)
        self.gain = np.asarray(self.csc.T @ weight).ravel() if n else np.zeros(m)  # uncovered weight per column
        self.ok = np.ones(m, dtype=bool) if allowed is None else np.asarray(allowed, dtype=bool).copy()
        self.chosen: list[int] = []

    def open(self, j: int) -> float:
        """Open column ``j``, close the columns it conflicts with; return the weight it newly covers."""
        csc, conflicts = self.csc, self.conflicts
        self.chosen.append(j)
        self.ok[j] = False
        if conflicts is not None:
            self.ok[conflicts.indices[conflicts.indptr[j] : conflicts.indptr[j + 1]]] = False
        rows = csc.indices[csc.indptr[j] : csc.indptr[j + 1]]
        rows = rows[self.uncovered[rows]]
        self.uncovered[rows] = False
        if len(rows) == 0:
            return 0.0
        sub = self.mat[rows]
        w = self.weight[rows]
        self.gain -= np.bincount(sub.indices, weights=np.repeat(w, np.diff(sub.indptr)), minlength=len(self.gain))
        return float(w.sum())

    def result(self) -> np.ndarray:
        return np.array(sorted(self.chosen), dtype=np.int64)


def greedy_cover(
    mat: sp.csr_matrix,
    cost: np.ndarray,
    *,
    allowed: np.ndarray | None = None,
    conflicts: sp.csr_matrix | None = None,
    weight: np.ndarray | None = None,
    need: float | None = None,
) -> np.ndarray | None:
    """Chvatal's greedy set cover of every row (or of ``need`` weight); None if it cannot be reached.

    Parameters
    ----------
    mat : csr_matrix (rows x columns, 0/1)
    cost : (m,) array of non-negative costs
    allowed : (m,) bool, optional
        Columns that may be opened.
    conflicts : csr_matrix (m x m), optional
        Opening column j forbids every column k with ``conflicts[j, k] != 0``.
    weight : (n,) array, optional
        Row weights; columns are scored by uncovered weight per unit cost.
        Default 1 per row (Chvatal's rule).
    need : float, optional
        Stop once this much weight is covered (a coverage target).  Default:
        every row.
    """
    n = mat.shape[0]
    cost = np.asarray(cost, dtype=np.float64)
    w = np.ones(n) if weight is None else np.asarray(weight, dtype=np.float64)
    every_row = need is None
    state = _Opening(mat, w, allowed, conflicts)
    got = 0.0
    while state.uncovered.any() if every_row else got < float(need):
        useful = state.ok & (state.gain > 1e-12)
        score = np.where(useful, state.gain / np.maximum(cost, _EPS), -1.0)
        # zero-cost columns that cover something come first
        score = np.where(useful & (cost <= 0), np.inf, score)
        j = int(np.argmax(score))
        if score[j] <= 0:
            return None
        got += state.open(j)
    return state.result()


def prune_cover(mat: sp.csr_matrix, cost: np.ndarray, chosen: np.ndarray, *, removable: np.ndarray | None = None) -> np.ndarray:
    """Remove sites whose rows are all covered by other chosen sites.

    Tries the most expensive site first (ties: highest index first), so the
    result is a minimal cover and deterministic.
    """
    chosen = np.asarray(chosen, dtype=np.int64)
    if len(chosen) == 0:
        return chosen
    cost = np.asarray(cost, dtype=np.float64)
    csc = sp.csc_matrix(mat)
    x = np.zeros(mat.shape[1], dtype=np.int64)
    x[chosen] = 1
    cover = np.asarray(mat @ x).ravel()
    order = chosen[np.lexsort((-chosen, -cost[chosen]))]
    keep = np.ones(mat.shape[1], dtype=bool)
    for j in order:
        if removable is not None and not removable[j]:
            continue
        rows = csc.indices[csc.indptr[j] : csc.indptr[j + 1]]
        if (cover[rows] >= 2).all():
            cover[rows] -= 1
            keep[j] = False
    return np.array([j for j in chosen if keep[j]], dtype=np.int64)


def greedy_most(
    mat: sp.csr_matrix,
    weight: np.ndarray,
    *,
    sites: int | None = None,
    resource: np.ndarray | None = None,
    budget: float | None = None,
    allowed: np.ndarray | None = None,
    conflicts: sp.csr_matrix | None = None,
    start: np.ndarray | None = None,
) -> np.ndarray:
    """Greedy maximal covering.

    With ``sites`` opens up to that many columns whose ``resource`` is
    positive (columns with resource 0 are free and open first if they add
    weight); with ``budget`` opens columns by weight gained per unit of
    ``resource`` while they fit.  ``start`` columns are open from the start.
    """
    m = mat.shape[1]
    weight = np.asarray(weight, dtype=np.float64)
    res = np.ones(m) if resource is None else np.asarray(resource, dtype=np.float64)
    state = _Opening(mat, weight, allowed, conflicts)
    for j in [] if start is None else list(np.asarray(start, dtype=np.int64)):
        state.open(int(j))
    chosen = state.chosen
    used = 0.0 if sites is None else float(sum(1 for j in chosen if res[j] > 0))
    spent = float(res[chosen].sum()) if chosen else 0.0
    while True:
        ok, gain = state.ok, state.gain
        free = ok & (res <= 0) & (gain > _EPS)
        if free.any():
            state.open(int(np.argmax(np.where(free, gain, -1.0))))
            continue
        if sites is not None:
            if used >= sites:
                break
            score = np.where(ok & (gain > _EPS), gain, -1.0)
        else:
            assert budget is not None
            fits = ok & (gain > _EPS) & (res <= budget - spent + 1e-9)
            score = np.where(fits, gain / np.maximum(res, _EPS), -1.0)
        j = int(np.argmax(score))
        if score[j] <= 0:
            break
        state.open(j)
        used += 1
        spent += res[j]
    return state.result()


def swap_most(
    mat: sp.csr_matrix,
    weight: np.ndarray,
    chosen: np.ndarray,
    *,
    swappable: np.ndarray | None = None,
    candidates: np.ndarray | None = None,
    resource: np.ndarray | None = None,
    budget: float | None = None,
    conflicts: sp.csr_matrix | None = None,
    max_rounds: int = 200,
    deadline: float | None = None,
) -> np.ndarray:
    """Best-improvement single swaps (Teitz & Bart 1968) until none improves.

    The gain of swapping chosen j for k is computed for all pairs at once:
    ``gain(k) - loss(j) + overlap(j, k)`` where overlap is the weight of rows
    covered only by j that k also covers.  Ties: lowest (j, k).
    """
    n, m = mat.shape
    weight = np.asarray(weight, dtype=np.float64)
    csc = sp.csc_matrix(mat)
    chosen = np.array(sorted(np.asarray(chosen, dtype=np.int64)), dtype=np.int64)
    res = np.ones(m) if resource is None else np.asarray(resource, dtype=np.float64)
    cand_ok = np.ones(m, dtype=bool) if candidates is None else np.asarray(candidates, dtype=bool)
    for _ in range(max_rounds):
        if deadline is not None and time.perf_counter() > deadline:
            break
        x = np.zeros(m, dtype=np.int64)
        x[chosen] = 1
        cover = np.asarray(mat @ x).ravel()
        w0 = np.where(cover == 0, weight, 0.0)
        w1 = np.where(cover == 1, weight, 0.0)
        add_gain = np.asarray(csc.T @ w0).ravel()
        out = chosen if swappable is None else chosen[np.asarray(swappable, dtype=bool)[chosen]]
        if len(out) == 0:
            break
        loss = np.asarray(csc[:, out].T @ w1).ravel()
        sub = csc[:, out].T.tocsr()  # |out| x n
        overlap = (sub.multiply(w1[None, :]) @ csc).toarray() if n else np.zeros((len(out), m))
        delta = add_gain[None, :] - loss[:, None] + overlap
        blocked = np.zeros(m, dtype=bool)
        blocked[chosen] = True
        blocked |= ~cand_ok
        delta[:, blocked] = -np.inf
        if budget is not None:
            spent = res[chosen].sum()
            fits = (spent - res[out][:, None] + res[None, :]) <= budget + 1e-9
            delta[~fits] = -np.inf
        else:
            # a swap must keep the count of p-sites: resource-free may not replace paid ones
            delta[(res[out][:, None] > 0) != (res[None, :] > 0)] = -np.inf
        if conflicts is not None and conflicts.nnz:
            for a, j in enumerate(out):
                others = np.setdiff1d(chosen, [j])
                bad = np.asarray(conflicts[others].sum(axis=0)).ravel() > 0
                delta[a, bad] = -np.inf
        flat = int(np.argmax(delta))
        a, k = divmod(flat, m)
        best = delta[a, k]
        if not np.isfinite(best) or best <= 1e-9 * max(1.0, float(weight.sum())):
            break
        chosen = np.array(sorted(set(chosen.tolist()) - {int(out[a])} | {int(k)}), dtype=np.int64)
    return chosen


def iterated_swap(
    mat: sp.csr_matrix,
    weight: np.ndarray,
    chosen: np.ndarray,
    *,
    sites: int,
    swappable: np.ndarray | None = None,
    resource: np.ndarray | None = None,
    seed: int = 0,
    iterations: int = 50,
    kick: int = 3,
    deadline: float | None = None,
) -> np.ndarray:
    """Iterated local search around :func:`swap_most` for the p-site model.

    Each iteration replaces ``kick`` random sites of the best plan by random
    other sites, descends with best-improvement swaps and keeps the result if
    it covers more.  Deterministic for a given seed and iteration budget.
    """
    m = mat.shape[1]
    rng = np.random.default_rng(seed)
    res = np.ones(m) if resource is None else np.asarray(resource, dtype=np.float64)
    best = np.array(sorted(np.asarray(chosen, dtype=np.int64)), dtype=np.int64)
    best_val = covered_weight(mat, weight, best)
    paid_pool = np.flatnonzero(res > 0)
    for _ in range(iterations):
        if deadline is not None and time.perf_counter() > deadline:
            break
        movable = best[res[best] > 0] if swappable is None else best[(res[best] > 0) & np.asarray(swappable, dtype=bool)[best]]
        if len(movable) == 0:
            break
        k = min(kick, len(movable))
        out = rng.choice(movable, size=k, replace=False)
        pool = np.setdiff1d(paid_pool, best)
        if len(pool) < k:
            break
        inn = rng.choice(pool, size=k, replace=False)
        trial = np.union1d(np.setdiff1d(best, out), inn)
        trial = swap_most(mat, weight, trial, swappable=swappable, resource=resource, deadline=deadline)
        val = covered_weight(mat, weight, trial)
        if val > best_val + 1e-9 * max(1.0, best_val):
            best, best_val = trial, val
    del sites
    return best
