"""Row-weighting local search for set covering.

After Gao, Weise & Li (2015, European Journal of Operational Research
246(3), "An efficient local search heuristic with row weighting for the
unicost set covering problem"), generalised to costs by scoring per unit
cost.  Starting from a cover, it removes sites while the plan still covers
everything (recording each cover), then alternates "remove the least useful
site, add the best site for a random uncovered row" while raising the weight
of rows left uncovered, so that hard rows pull sites toward them.

The search is deterministic for a given ``seed`` and step budget; it stops
early at ``deadline`` (then the number of steps, and so possibly the plan,
depends on the machine's speed).
"""

from __future__ import annotations

import time

import numpy as np
import scipy.sparse as sp

__all__ = ["cover_local_search"]


def cover_local_search(
    mat: sp.csr_matrix,
    cost: np.ndarray,
    start: np.ndarray,
    *,
    seed: int = 0,
    max_steps: int = 20000,
    deadline: float | None = None,
    target: float | None = None,
) -> np.ndarray:
    """Improve the cover ``start`` of every row of ``mat``; returns the best cover found.

    Parameters
    ----------
    mat : csr_matrix (rows x columns, 0/1), every row non-empty
    cost : (m,) array of positive costs
    start : int array, a cover
    seed : int
    max_steps : int
        Swap steps (each: one removal, one addition).
    deadline : float, optional
        ``time.perf_counter()`` value at which to stop.
    target : float, optional
        Stop as soon as a cover of at most this cost is found (a proven bound).
    """
    n, m = mat.shape
    cost = np.maximum(np.asarray(cost, dtype=np.float64), 1e-12)
    csr = sp.csr_matrix(mat)
    csc = sp.csc_matrix(mat)
    r_ptr, r_idx = csr.indptr, csr.indices.astype(np.int64)
    c_ptr, c_idx = csc.indptr, csc.indices.astype(np.int64)
    rng = np.random.default_rng(seed)
    in_s = np.zeros(m, dtype=bool)
    in_s[np.asarray(start, dtype=np.int64)] = True
    cnt = np.asarray(csr @ in_s.astype(np.int64)).ravel()
    w = np.ones(n, dtype=np.float64)
    # score: for j in S, minus the weight of rows only j covers; for j not in S, the weight of uncovered rows j covers
    sole = np.zeros(n, dtype=np.int64) - 1
    score = np.zeros(m)
    # initial scores
    one = cnt == 1
    if one.any():
        rows1 = np.flatnonzero(one)
        lens = np.diff(r_ptr)[rows1]
        cols = r_idx[np.repeat(r_ptr[rows1], lens) + (np.arange(lens.sum()) - np.repeat(np.cumsum(lens) - lens, lens))]
        rr = np.repeat(rows1, lens)
        sel = in_s[cols]
        sole[rr[sel]] = cols[sel]
        np.subtract.at(score, cols[sel], w[rr[sel]])
    stamp = np.zeros(m, dtype=np.int64)
    can_add = np.ones(m, dtype=bool)
    uncovered: set[int] = set(np.flatnonzero(cnt == 0).tolist())
    for i in uncovered:
        cols = r_idx[r_ptr[i] : r_ptr[i + 1]]
        score[cols] += w[i]
    cur_cost = float(cost[in_s].sum())
    best = np.flatnonzero(in_s) if not uncovered else np.asarray(start, dtype=np.int64)
    best_cost = float(cost[best].sum())

    def add(k: int) -> None:
        nonlocal cur_cost
        in_s[k] = True
        cur_cost += cost[k]
        rows = c_idx[c_ptr[k] : c_ptr[k + 1]]
        old = cnt[rows]
        cnt[rows] = old + 1
        score[k] = 0.0
        # rows newly covered: k becomes their sole coverer; other columns lose their gain
        new = rows[old == 0]
        for i in new.tolist():
            cols = r_idx[r_ptr[i] : r_ptr[i + 1]]
            score[cols] -= w[i]
            uncovered.discard(i)
        score[k] = -float(w[new].sum()) if len(new) else 0.0
        sole[new] = k
        # rows now covered twice: their former sole coverer is no longer critical for them
        two = rows[old == 1]
        if len(two):
            prev = sole[two]
            np.add.at(score, prev, w[two])
            sole[two] = -1

    def remove(j: int) -> None:
        nonlocal cur_cost
        in_s[j] = False
        cur_cost -= cost[j]
        rows = c_idx[c_ptr[j] : c_ptr[j + 1]]
        old = cnt[rows]
        cnt[rows] = old - 1
        lost = rows[old == 1]
        score[j] = 0.0
        for i in lost.tolist():
            cols = r_idx[r_ptr[i] : r_ptr[i + 1]]
            score[cols] += w[i]
            uncovered.add(i)
        sole[lost] = -1
        score[j] = float(w[lost].sum()) if len(lost) else 0.0
        # rows now covered once: find their remaining coverer, it becomes critical
        one_ = rows[old == 2]
        for i in one_.tolist():
            cols = r_idx[r_ptr[i] : r_ptr[i + 1]]
            k = int(cols[in_s[cols]][0])
            sole[i] = k
            score[k] -= w[i]

    def pick_remove(exclude: int = -1) -> int:
        idx = np.flatnonzero(in_s)
        if exclude >= 0:
            idx = idx[idx != exclude]
        if len(idx) == 0:
            return -1
        val = score[idx] / cost[idx]
        top = np.flatnonzero(val == val.max())
        cand = idx[top]
        return int(cand[np.argmin(stamp[cand])])  # oldest first, then lowest index

    tabu = -1
    step = 0
    for step in range(max_steps):
        while not uncovered:
            if cur_cost < best_cost - 1e-9:
                best_cost = cur_cost
                best = np.flatnonzero(in_s)
                if target is not None and best_cost <= target + 1e-9:
                    return best
            j = pick_remove()
            if j < 0:
                break
            remove(j)
            stamp[j] = step
        if deadline is not None and step % 64 == 0 and time.perf_counter() > deadline:
            break
        j = pick_remove(exclude=tabu)
        if j < 0:
            break
        remove(j)
        stamp[j] = step
        can_add[j] = False
        rows = c_idx[c_ptr[j] : c_ptr[j + 1]]
        # configuration checking: columns sharing a row with j may be added again
        for i in rows.tolist():
            can_add[r_idx[r_ptr[i] : r_ptr[i + 1]]] = True
        can_add[j] = False
        unc = sorted(uncovered)
        i = unc[int(rng.integers(len(unc)))]
        cols = r_idx[r_ptr[i] : r_ptr[i + 1]]
        ok = cols[can_add[cols] & ~in_s[cols]]
        if len(ok) == 0:
            ok = cols[~in_s[cols]]
        val = score[ok] / cost[ok]
        cand = ok[val == val.max()]
        k = int(cand[np.argmin(stamp[cand])])
        add(k)
        stamp[k] = step
        tabu = k
        rows_k = c_idx[c_ptr[k] : c_ptr[k + 1]]
        for ii in rows_k.tolist():
            can_add[r_idx[r_ptr[ii] : r_ptr[ii + 1]]] = True
        # raise the weight of rows still uncovered
        for i2 in uncovered:
            w[i2] += 1.0
            cols2 = r_idx[r_ptr[i2] : r_ptr[i2 + 1]]
            score[cols2] += 1.0
    return best
