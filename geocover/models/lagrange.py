"""Lagrangian lower bound for set covering with subgradient optimisation.

Following Beasley (1990, Naval Research Logistics 37, "A Lagrangian
heuristic for set-covering problems"): relax every covering row with a
multiplier ``u_i >= 0``; then

    L(u) = sum_i u_i + sum_j min(0, c_j - sum_{i in rows(j)} u_i)

is a lower bound on the optimum for *every* ``u >= 0`` (weak duality), so the
best value seen is a proven bound whatever the step rule does.  Each few
iterations the Lagrangian solution is repaired greedily into a cover, which
often beats the plain greedy plan.
"""

from __future__ import annotations

import math
import time

import numpy as np
import scipy.sparse as sp

from .greedy import greedy_cover, prune_cover

__all__ = ["lagrangian_cover"]


def lagrangian_cover(
    mat: sp.csr_matrix,
    cost: np.ndarray,
    *,
    upper: float,
    iterations: int = 400,
    deadline: float | None = None,
    heuristic_every: int = 10,
    patience: int = 30,
    f_min: float = 1e-4,
) -> tuple[float, np.ndarray | None]:
    """Best Lagrangian bound and the best cover found from the multipliers.

    Parameters
    ----------
    mat : csr_matrix (rows x columns, 0/1), every row non-empty
    cost : (m,) array
    upper : float
        Objective of a known cover (the step size uses it).
    iterations : int
    deadline : float, optional
        ``time.perf_counter()`` value at which to stop.

    Returns
    -------
    bound : float
    plan : int array or None
    """
    n, m = mat.shape
    cost = np.asarray(cost, dtype=np.float64)
    csc = sp.csc_matrix(mat, dtype=np.float64)
    A = sp.csr_matrix(mat, dtype=np.float64)
    colsize = np.maximum(np.diff(csc.indptr), 1)
    # start: each row gets the cheapest per-row share of its columns
    share = cost / colsize
    u = np.minimum.reduceat(share[A.indices], A.indptr[:-1]) if A.nnz else np.zeros(n)
    best_bound = -math.inf
    best_plan: np.ndarray | None = None
    best_obj = upper
    f = 2.0
    since = 0
    scale = max(1.0, abs(upper))
    for it in range(iterations):
        if deadline is not None and time.perf_counter() > deadline:
            break
        red = cost - csc.T @ u
        x = red < 0
        L = float(u.sum() + red[x].sum())
        if L > best_bound + 1e-9 * scale:
            best_bound = L
            since = 0
        else:
            since += 1
            if since >= patience:
                f *= 0.5
                since = 0
        if f < f_min or best_bound >= best_obj - 1e-9 * scale:
            break
        if it % heuristic_every == 0:
            # repair: start from the Lagrangian columns, cover the rest by reduced-cost greedy
            start = np.flatnonzero(x)
            covered = np.asarray(A[:, start].sum(axis=1)).ravel() > 0 if len(start) else np.zeros(n, dtype=bool)
            rest = np.flatnonzero(~covered)
            plan = start
            if len(rest):
                sub = A[rest]
                extra = greedy_cover(sub, cost)
                if extra is None:
                    plan = None
                else:
                    plan = np.union1d(start, extra)
            if plan is not None:
                plan = prune_cover(mat, cost, plan)
                obj = float(cost[plan].sum())
                if obj < best_obj - 1e-9 or best_plan is None:
                    if obj <= best_obj + 1e-9:
                        best_plan, best_obj = plan, obj
        g = 1.0 - np.asarray(A @ x.astype(np.float64)).ravel()
        g[(u <= 0) & (g < 0)] = 0.0
        norm = float(g @ g)
        if norm <= 0:
            # x(u) covers every row exactly once: it is optimal for the relaxation and feasible
            break
        t = f * (best_obj - L) / norm
        u = np.maximum(0.0, u + t * g)
    # guard the bound against rounding in the sums
    return best_bound - 1e-9 * scale, best_plan


def lagrangian_most(
    mat: sp.csr_matrix,
    weight: np.ndarray,
    paid: np.ndarray,
    p: int,
    *,
    lower: float,
    iterations: int = 3000,
    deadline: float | None = None,
    patience: int = 100,
) -> float:
    """Lagrangian upper bound for maximal covering with at most ``p`` paid columns.

    Relaxing ``y_i <= sum_j a_ij x_j`` with ``lam_i >= 0`` gives, for every
    ``lam >= 0``, the valid upper bound

        U(lam) = sum_i max(0, w_i - lam_i) + sum_{free j} max(0, v_j) + (sum of the p largest v_j, paid j)

    with ``v_j = sum_{i in rows(j)} lam_i`` (Galvao & ReVelle 1996, European
    Journal of Operational Research 88(1), use the same relaxation).  The
    smallest value seen is returned.  ``lower`` is the value of a known plan.
    """
    n, m = mat.shape
    w = np.asarray(weight, dtype=np.float64)
    paid = np.asarray(paid, dtype=bool)
    A = sp.csr_matrix(mat, dtype=np.float64)
    AT = sp.csr_matrix(A.T)
    lam = 0.5 * w
    best = math.inf
    f = 2.0
    since = 0
    scale = max(1.0, float(w.sum()))
    paid_idx = np.flatnonzero(paid)
    free_idx = np.flatnonzero(~paid)
    p = int(min(p, len(paid_idx)))
    for it in range(iterations):
        if deadline is not None and time.perf_counter() > deadline:
            break
        v = AT @ lam
        y = w - lam > 0
        x = np.zeros(m)
        x[free_idx[v[free_idx] > 0]] = 1.0
        if p > 0:
            vp = v[paid_idx]
            top = np.argpartition(-vp, p - 1)[:p] if p < len(vp) else np.arange(len(vp))
            top = top[vp[top] > 0]
            x[paid_idx[top]] = 1.0
        U = float(np.maximum(w - lam, 0.0).sum() + (v * x).sum())
        if U < best - 1e-12 * scale:
            best = U
            since = 0
        else:
            since += 1
            if since >= patience:
                f *= 0.5
                since = 0
        if f < 1e-6 or best <= lower + 1e-9 * scale:
            break
        g = (A @ x) - y  # dU/dlam
        g[(lam <= 0) & (g > 0)] = 0.0
        norm = float(g @ g)
        if norm <= 0:
            break
        t = f * (U - lower) / norm
        lam = np.maximum(0.0, lam - t * g)
    return best + 1e-9 * scale
