"""Exact reductions of a coverage relation before any solver sees it.

All functions work on 0/1 CSR matrices (demand rows x site columns) and
plain numpy arrays, never on Python loops over nonzeros.

* :func:`merge_rows` -- demand rows with identical covering sets become one
  row with their weights summed (valid for every model).
* :func:`subset_pairs` -- all pairs ``(a, b)`` of sets with
  ``set(b) <= set(a)``; the building block of row and column dominance.
* :func:`reduce_lscp` -- the LSCP rules of Toregas & ReVelle (1973,
  Geographical Analysis 5(2)): drop rows that are supersets of another row,
  drop dominated columns, fix essential sites, repeated until nothing
  changes.  These rules are *not* valid for backup coverage (Church &
  Gerrard 2003, Geographical Analysis 35(4)), and row dominance is not valid
  for weighted (MCLP) models; the callers apply only what is valid.
* :func:`dominated_columns` -- column dominance with a resource (cost or
  "counts toward p") so that MCLP and coverage targets can use it too.
* :func:`components` -- connected components of the demand-site graph.
"""

from __future__ import annotations

import logging
import time
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import scipy.sparse as sp
from scipy.sparse.csgraph import connected_components

logger = logging.getLogger(__name__)

__all__ = [
    "as_pattern",
    "merge_rows",
    "subset_pairs",
    "dominated_columns",
    "dominated_rows",
    "reduce_lscp",
    "LscpCore",
    "components",
    "members",
]

_MASK_SEED = 20260101


def as_pattern(matrix: sp.spmatrix) -> sp.csr_matrix:
    """The 0/1 pattern of ``matrix`` as a canonical CSR matrix of int8.

    Every stored entry counts, explicit zeros included (a site on a demand
    point covers it at distance 0).
    """
    if sp.isspmatrix_csr(matrix) and matrix.dtype == np.int8 and matrix.has_canonical_format and (matrix.nnz == 0 or matrix.data.min() == 1):
        return matrix
    mat = sp.csr_matrix(matrix)
    if not mat.has_canonical_format:
        mat = mat.copy()
        mat.sum_duplicates()
    out = sp.csr_matrix(
        (np.ones(mat.nnz, dtype=np.int8), mat.indices.astype(np.int32, copy=True), mat.indptr.astype(np.int64, copy=True)),
        shape=mat.shape,
    )
    out.has_sorted_indices = True
    return out


def _row_of_nonzero(indptr: np.ndarray) -> np.ndarray:
    return np.repeat(np.arange(len(indptr) - 1, dtype=np.int64), np.diff(indptr))


def _take_rows(mat: sp.csr_matrix, rows: np.ndarray) -> sp.csr_matrix:
    """Rows of a CSR matrix in the given order (fast path of fancy indexing)."""
    return mat[np.asarray(rows, dtype=np.int64)]


def merge_rows(mat: sp.csr_matrix, weight: np.ndarray) -> tuple[sp.csr_matrix, np.ndarray, np.ndarray]:
    """Merge rows with identical covering sets, summing their weights.

    Parameters
    ----------
    mat : csr_matrix
        0/1 pattern with sorted indices.
    weight : (n,) array

    Returns
    -------
    merged : csr_matrix
        One row per distinct covering set, ordered by first occurrence.
    merged_weight : (k,) array
    group : (n,) int array
        The merged row each input row went to.

    Examples
    --------
    >>> import scipy.sparse as sp, numpy as np
    >>> m, w, g = merge_rows(as_pattern(sp.csr_matrix([[1, 1], [0, 1], [1, 1]])), np.array([1., 2., 3.]))
    >>> w.tolist(), g.tolist()
    ([4.0, 2.0], [0, 1, 0])
    """
    n, m = mat.shape
    if n == 0:
        return mat, np.asarray(weight, dtype=np.float64), np.zeros(0, dtype=np.int64)
    rng = np.random.default_rng(_MASK_SEED)
    h1 = rng.integers(1, 2**62, size=m, dtype=np.int64).view(np.uint64)
    h2 = rng.integers(1, 2**62, size=m, dtype=np.int64).view(np.uint64)
    size = np.diff(mat.indptr)
    nz_rows = size > 0
    k1 = np.zeros(n, dtype=np.uint64)
    k2 = np.zeros(n, dtype=np.uint64)
    if mat.nnz:
        starts = mat.indptr[:-1][nz_rows]
        with np.errstate(over="ignore"):
            k1[nz_rows] = np.add.reduceat(h1[mat.indices], starts)
            k2[nz_rows] = np.bitwise_xor.reduceat(h2[mat.indices], starts)
    # one 64-bit key per row (size, sum-hash and xor-hash mixed); the exact check below catches collisions
    with np.errstate(over="ignore"):
        keys = k1 ^ (k2 * np.uint64(0x9E3779B97F4A7C15)) ^ (size.astype(np.uint64) * np.uint64(0xC2B2AE3D27D4EB4F))
    _, first, group = np.unique(keys, return_index=True, return_inverse=True)
    group = group.ravel()
    # renumber groups by first occurrence so the result does not depend on hash order
    order = np.argsort(first, kind="stable")
    rank = np.empty_like(order)
    rank[order] = np.arange(len(order))
    group = rank[group]
    rep = first[order]
    # verify exactness: every row must equal its representative (guards against hash collisions)
    expanded_rep = rep[group]
    if mat.nnz and not np.array_equal(size, size[expanded_rep]):  # pragma: no cover - 64-bit collision
        logger.warning("row merge: hash collision detected, falling back to exact grouping")
        return _merge_rows_exact(mat, weight)
    if mat.nnz:
        idx_rep = _take_rows(mat, expanded_rep).indices
        if not np.array_equal(idx_rep, mat.indices):  # pragma: no cover - 128-bit collision
            logger.warning("row merge: hash collision detected, falling back to exact grouping")
            return _merge_rows_exact(mat, weight)
    merged = _take_rows(mat, rep)
    merged_weight = np.bincount(group, weights=np.asarray(weight, dtype=np.float64), minlength=len(rep))
    return merged, merged_weight, group.astype(np.int64)


def _merge_rows_exact(mat: sp.csr_matrix, weight: np.ndarray) -> tuple[sp.csr_matrix, np.ndarray, np.ndarray]:  # pragma: no cover
    rows = [tuple(mat.indices[mat.indptr[i] : mat.indptr[i + 1]]) for i in range(mat.shape[0])]
    seen: dict[tuple, int] = {}
    group = np.array([seen.setdefault(r, len(seen)) for r in rows], dtype=np.int64)
    rep = np.zeros(len(seen), dtype=np.int64)
    rep[group[::-1]] = np.arange(len(group))[::-1]
    merged = _take_rows(mat, rep)
    return merged, np.bincount(group, weights=weight, minlength=len(rep)), group


def _bitmask(mat: sp.csr_matrix, salt: int) -> np.ndarray:
    """A 64-bit signature per row: bit ``hash(e) % 64`` set for every element e."""
    m = mat.shape[1]
    rng = np.random.default_rng(_MASK_SEED + salt)
    bit = np.left_shift(np.uint64(1), rng.integers(0, 64, size=m).astype(np.uint64))
    out = np.zeros(mat.shape[0], dtype=np.uint64)
    size = np.diff(mat.indptr)
    nz = size > 0
    if mat.nnz:
        out[nz] = np.bitwise_or.reduceat(bit[mat.indices], mat.indptr[:-1][nz])
    return out


def subset_pairs(mat: sp.csr_matrix, *, chunk: int = 4_000_000, max_candidates: int | None = None, deadline: float | None = None) -> tuple[np.ndarray, np.ndarray] | None:
    """All pairs ``(a, b)``, ``a != b``, of non-empty rows with ``set(b) <= set(a)``.

    Candidate pairs come from the rarest element of ``b`` (``a`` must
    contain it), are filtered by size and by two 64-bit signatures, and the
    survivors are checked element by element, so the result is exact.
    The work is vectorised over candidate pairs in chunks.

    Returns
    -------
    sup, sub : int arrays
        ``set(sub[t]) <= set(sup[t])`` for every t; None when more than
        ``max_candidates`` candidate pairs would have to be checked (the
        caller then skips the rule, which is always safe), or when the
        ``deadline`` (a ``time.perf_counter()`` value) passes.
    """
    mat = sp.csr_matrix(mat)
    n, m = mat.shape
    empty = (np.zeros(0, dtype=np.int64), np.zeros(0, dtype=np.int64))
    if n < 2 or mat.nnz == 0:
        return empty
    indptr = mat.indptr.astype(np.int64)
    indices = mat.indices.astype(np.int64)
    size = np.diff(indptr)
    cnt = np.bincount(indices, minlength=m).astype(np.int64)
    nzrows = np.flatnonzero(size > 0)
    # rarest element of each non-empty row (ties: lowest element index)
    score = cnt[indices] * (m + 1) + indices
    rare_score = np.minimum.reduceat(score, indptr[:-1][nzrows])
    rare = rare_score % (m + 1)
    # rows b grouped by their rarest element, smallest first: a can only contain b if size[b] < size[a]
    # (or == for identical rows, which callers merge beforehand)
    smax = int(size.max()) + 1
    order = np.lexsort((nzrows, size[nzrows], rare))
    b_sorted = nzrows[order]
    b_key = rare[order] * smax + size[b_sorted]
    b_count = np.bincount(rare, minlength=m)
    b_start = np.concatenate([[0], np.cumsum(b_count)[:-1]])
    mask1 = _bitmask(mat, 1)
    mask2 = _bitmask(mat, 2)
    nmask1 = ~mask1
    nmask2 = ~mask2
    b_sorted32 = b_sorted.astype(np.int32)
    keys = _row_of_nonzero(indptr) * m + indices  # sorted (canonical CSR)
    row_nz = _row_of_nonzero(indptr)
    row_nz32 = row_nz.astype(np.int32)
    # candidate b's for each nonzero (a, e): rarest element e and size <= size[a]
    per_nz = np.searchsorted(b_key, indices * smax + size[row_nz], side="right") - b_start[indices]
    if max_candidates is not None and int(per_nz.sum()) > max_candidates:
        return None
    sup_out: list[np.ndarray] = []
    sub_out: list[np.ndarray] = []
    # chunk over nonzeros so that each chunk makes at most ~chunk candidate pairs
    csum = np.cumsum(per_nz)
    lo = 0
    total_nz = len(indices)
    while lo < total_nz:
        if deadline is not None and time.perf_counter() > deadline:
            return None
        base = csum[lo - 1] if lo else 0
        hi = int(np.searchsorted(csum, base + chunk, side="right"))
        hi = max(hi, lo + 1)
        sl = slice(lo, hi)
        reps = per_nz[sl]
        tot = int(reps.sum())
        lo = hi
        if tot == 0:
            continue
        a = np.repeat(row_nz32[sl], reps)
        shift = np.repeat(b_start[indices[sl]] - (np.cumsum(reps) - reps), reps)
        b = b_sorted32[shift + np.arange(tot, dtype=np.int64)]
        keep = (mask1[b] & nmask1[a]) == 0
        a = a[keep]
        b = b[keep]
        keep = ((mask2[b] & nmask2[a]) == 0) & (a != b)
        a = a[keep].astype(np.int64)
        b = b[keep].astype(np.int64)
        if len(a) == 0:
            continue
        # quick check on up to 8 evenly spaced elements of b, then the full check on the survivors
        nb = size[b]
        samp = np.minimum(nb, 8)
        tot1 = int(samp.sum())
        pid1 = np.repeat(np.arange(len(a), dtype=np.int64), samp)
        k1 = np.arange(tot1, dtype=np.int64) - np.repeat(np.cumsum(samp) - samp, samp)
        pos_in_b = (k1 * np.repeat(nb, samp)) // np.repeat(samp, samp)
        elem = indices[np.repeat(indptr[b], samp) + pos_in_b]
        probe = a[pid1] * m + elem
        pos = np.minimum(np.searchsorted(keys, probe), len(keys) - 1)
        ok1 = np.bincount(pid1[keys[pos] != probe], minlength=len(a)) == 0
        a = a[ok1]
        b = b[ok1]
        if len(a) == 0:
            continue
        if deadline is not None and time.perf_counter() > deadline:
            return None
        nb = size[b]
        tot2 = int(nb.sum())
        pair_id = np.repeat(np.arange(len(a), dtype=np.int64), nb)
        offs2 = np.arange(tot2, dtype=np.int64) - np.repeat(np.cumsum(nb) - nb, nb)
        elem = indices[np.repeat(indptr[b], nb) + offs2]
        probe = a[pair_id] * m + elem
        pos = np.minimum(np.searchsorted(keys, probe), len(keys) - 1)
        hit = keys[pos] == probe
        miss = np.bincount(pair_id[~hit], minlength=len(a))
        ok = miss == 0
        sup_out.append(a[ok])
        sub_out.append(b[ok])
    if not sup_out:
        return empty
    return np.concatenate(sup_out), np.concatenate(sub_out)


MAX_CANDIDATES = 400_000_000  #: about 10 s of subset checks; beyond that a dominance rule is skipped
_CANDIDATES_PER_SECOND = 2.0e7  #: conservative rate of the vectorised subset check (measured about 4e7/s)


def dominated_rows(mat: sp.csr_matrix, *, max_candidates: int = MAX_CANDIDATES, deadline: float | None = None) -> np.ndarray | None:
    """Boolean mask of rows that are strict supersets of another row (LSCP only).

    Rows must already be merged (no two identical), so every superset is strict.
    Covering the smaller row covers the larger one, so the larger constraint
    is redundant.
    """
    found = subset_pairs(mat, max_candidates=max_candidates, deadline=deadline)
    if found is None:
        logger.info("row dominance skipped: too many candidate pairs")
        return None
    sup, sub = found
    out = np.zeros(mat.shape[0], dtype=bool)
    # identical rows (if the caller did not merge) keep the lower index
    size = np.diff(mat.indptr)
    strict = size[sub] < size[sup]
    out[sup[strict]] = True
    same = ~strict
    out[np.maximum(sup[same], sub[same])] = True
    return out


def dominated_columns(
    mat: sp.csr_matrix,
    resource: np.ndarray,
    *,
    can_dominate: np.ndarray | None = None,
    can_drop: np.ndarray | None = None,
    max_candidates: int = 0,
    deadline: float | None = None,
) -> np.ndarray:
    """Boolean mask of columns dominated by another column.

    Column j is dominated by column k when ``rows(j) <= rows(k)`` and
    ``resource[k] <= resource[j]`` (strictly smaller set, strictly smaller
    resource, or -- for identical columns of equal resource -- ``k < j``, so
    the lowest-index column survives).  The relation is a strict partial
    order, so every dropped column is dominated by a surviving one.

    ``resource`` is the opening cost for LSCP, budgets and targets, or
    "counts toward p" for MCLP.  ``can_dominate`` (e.g. columns without
    spacing conflicts) and ``can_drop`` restrict the rule.  Columns with no
    rows are dropped when ``can_drop`` allows.
    """
    n, m = mat.shape
    csc_as_rows = sp.csr_matrix(mat.T)
    csc_as_rows.sort_indices()
    resource = np.asarray(resource, dtype=np.float64)
    found = subset_pairs(csc_as_rows, max_candidates=max_candidates or MAX_CANDIDATES, deadline=deadline)
    size = np.diff(csc_as_rows.indptr)
    out = np.zeros(m, dtype=bool)
    if found is None:
        logger.info("column dominance skipped: too many candidate pairs")
        sup = sub = np.zeros(0, dtype=np.int64)
    else:
        sup, sub = found
    if len(sup):
        strict_set = size[sub] < size[sup]
        ok = (resource[sup] < resource[sub]) | ((resource[sup] == resource[sub]) & (strict_set | (sup < sub)))
        ok &= resource[sup] <= resource[sub]
        if can_dominate is not None:
            ok &= can_dominate[sup]
        if can_drop is not None:
            ok &= can_drop[sub]
        out[sub[ok]] = True
    empty = size == 0
    if can_drop is not None:
        empty &= can_drop
    out |= empty
    return out


@dataclass
class LscpCore:
    """A reduced LSCP instance and the way back to the original sites."""

    matrix: sp.csr_matrix  #: remaining rows x remaining columns (0/1)
    cost: np.ndarray  #: cost of the remaining columns
    columns: np.ndarray  #: original site index of each remaining column
    fixed: np.ndarray  #: original site indices fixed open (kept and essential)
    infeasible: bool = False  #: a row lost all its columns (only with spacing conflicts)
    stats: list[dict[str, Any]] = field(default_factory=list)


def reduce_lscp(
    mat: sp.csr_matrix,
    cost: np.ndarray,
    *,
    fixed_open: np.ndarray | None = None,
    close_pairs: np.ndarray | None = None,
    rules: bool = True,
    max_rounds: int = 50,
    deadline: float | None = None,
) -> LscpCore:
    """Reduce an LSCP instance exactly.

    Parameters
    ----------
    mat : csr_matrix
        0/1 pattern, coverable rows only (every row has a column).
    cost : (m,) array
    fixed_open : int array, optional
        Columns that must be open (existing kept facilities).
    close_pairs : (k, 2) int array, optional
        Pairs that may not both be open.  Columns in a pair never dominate
        others; opening a column closes its partners.
    rules : bool
        False: only merge identical rows and take the fixed columns out (the
        "bare" model).  True: also row and column dominance and essential
        sites, until nothing changes.
    deadline : float, optional
        ``time.perf_counter()`` value after which no further round starts;
        the dominance checks are also sized to the time left (a skipped
        rule only leaves the instance larger, never wrong).
    """

    def budget() -> int:
        if deadline is None:
            return MAX_CANDIDATES
        left = deadline - time.perf_counter()
        return int(max(0.0, min(float(MAX_CANDIDATES), _CANDIDATES_PER_SECOND * left)))

    t0 = time.perf_counter()
    n, m = mat.shape
    cost = np.asarray(cost, dtype=np.float64)
    pairs = np.zeros((0, 2), dtype=np.int64) if close_pairs is None else np.asarray(close_pairs, dtype=np.int64).reshape(-1, 2)
    alive_col = np.ones(m, dtype=bool)
    is_open = np.zeros(m, dtype=bool)
    in_pair = np.zeros(m, dtype=bool)
    in_pair[pairs.ravel()] = True
    stats: list[dict[str, Any]] = [{"step": "input", "rows": n, "columns": m, "nnz": int(mat.nnz)}]
    cur = as_pattern(mat)
    infeasible = False

    def open_columns(cols: np.ndarray) -> bool:
        """Open ``cols`` and close their spacing partners; False if two open columns conflict."""
        is_open[cols] = True
        alive_col[cols] = False
        if len(pairs) and (is_open[pairs[:, 0]] & is_open[pairs[:, 1]]).any():
            return False
        if len(pairs):
            partner = np.concatenate([pairs[np.isin(pairs[:, 0], cols), 1], pairs[np.isin(pairs[:, 1], cols), 0]])
            alive_col[partner] = False
        return True

    if fixed_open is not None and len(fixed_open):
        infeasible |= not open_columns(np.asarray(fixed_open, dtype=np.int64))

    def apply_columns(cur: sp.csr_matrix) -> tuple[sp.csr_matrix, bool]:
        """Drop rows covered by open columns and dead columns from the matrix."""
        covered = np.asarray(cur @ is_open.astype(np.int8), dtype=np.int64).ravel() > 0
        keep_rows = ~covered
        sub = cur[keep_rows]
        dead = ~alive_col
        if dead.any() and sub.nnz:
            coo_keep = alive_col[sub.indices]
            row = _row_of_nonzero(sub.indptr)[coo_keep]
            sub = sp.csr_matrix((np.ones(int(coo_keep.sum()), dtype=np.int8), (row, sub.indices[coo_keep])), shape=sub.shape)
        bad = bool((np.diff(sub.indptr) == 0).any())
        return sub, bad

    if is_open.any() or not alive_col.all():
        cur, bad = apply_columns(cur)
        infeasible |= bad
    cur, _, _ = merge_rows(cur, np.ones(cur.shape[0]))
    stats.append({"step": "merge identical rows", "rows": cur.shape[0], "columns": int(alive_col.sum()), "nnz": int(cur.nnz), "seconds": time.perf_counter() - t0})
    rounds = 0
    while rules and not infeasible and rounds < max_rounds and cur.shape[0]:
        if deadline is not None and time.perf_counter() > deadline:
            stats.append({"step": "stopped", "reason": "reduction time budget used"})
            break
        rounds += 1
        changed = False
        # dominated columns (resource = cost); columns in a spacing pair never dominate
        t = time.perf_counter()
        dead = dominated_columns(cur, cost, can_dominate=~in_pair, can_drop=alive_col, max_candidates=max(budget(), 1), deadline=deadline)
        dead &= alive_col
        if dead.any():
            alive_col[dead] = False
            changed = True
            cur, bad = apply_columns(cur)
            infeasible |= bad
        stats.append({"step": f"dominated columns (round {rounds})", "rows": cur.shape[0], "columns": int(alive_col.sum()), "nnz": int(cur.nnz), "seconds": time.perf_counter() - t})
        if infeasible:
            break
        # essential sites: a row with a single column forces it open
        t = time.perf_counter()
        single = np.diff(cur.indptr) == 1
        if single.any():
            ess = np.unique(cur.indices[cur.indptr[:-1][single]])
            # two essential sites that may not both open: some row cannot be covered
            infeasible |= not open_columns(ess)
            changed = True
            cur, bad = apply_columns(cur)
            infeasible |= bad
        stats.append({"step": f"essential sites (round {rounds})", "rows": cur.shape[0], "columns": int(alive_col.sum()), "fixed": int(is_open.sum()), "seconds": time.perf_counter() - t})
        if infeasible or not cur.shape[0]:
            break
        # merge again (column removal can make rows identical), then row dominance
        t = time.perf_counter()
        before = cur.shape[0]
        cur, _, _ = merge_rows(cur, np.ones(before))
        drop = dominated_rows(cur, max_candidates=budget(), deadline=deadline)
        if drop is None:
            stats.append({"step": f"dominated rows (round {rounds})", "skipped": "too many candidate pairs"})
            break
        if drop.any():
            cur = cur[~drop]
        if cur.shape[0] != before:
            changed = True
        stats.append({"step": f"dominated rows (round {rounds})", "rows": cur.shape[0], "columns": int(alive_col.sum()), "nnz": int(cur.nnz), "seconds": time.perf_counter() - t})
        if not changed:
            break
    # compress to live columns that still cover something
    used = np.zeros(m, dtype=bool)
    used[cur.indices] = True
    cols = np.flatnonzero(used & alive_col)
    remap = -np.ones(m, dtype=np.int64)
    remap[cols] = np.arange(len(cols))
    core = sp.csr_matrix(
        (np.ones(cur.nnz, dtype=np.int8), remap[cur.indices].astype(np.int32), cur.indptr), shape=(cur.shape[0], len(cols))
    ) if cur.nnz else sp.csr_matrix((cur.shape[0], len(cols)), dtype=np.int8)
    stats.append({"step": "reduced", "rows": core.shape[0], "columns": core.shape[1], "nnz": int(core.nnz), "fixed": int(is_open.sum()), "seconds": time.perf_counter() - t0})
    return LscpCore(core, cost[cols], cols, np.flatnonzero(is_open), infeasible, stats)


def components(mat: sp.csr_matrix, conflicts: sp.csr_matrix | None = None) -> tuple[int, np.ndarray, np.ndarray]:
    """Connected components of the bipartite demand-site graph.

    ``conflicts`` (site x site, spacing pairs) adds site-site edges, since two
    sites that may not both open are not independent.

    Returns
    -------
    count : int
    row_label : (n,) int array
    col_label : (m,) int array
        Component of each row / column; columns that cover nothing get
        their own components, numbered after the others.
    """
    n, m = mat.shape
    pat = sp.csr_matrix((np.ones(mat.nnz, dtype=np.int8), mat.indices, mat.indptr), shape=(n, m))
    cc = conflicts if conflicts is not None and conflicts.nnz else None
    if n + m == 0:
        return 0, np.zeros(0, dtype=np.int64), np.zeros(0, dtype=np.int64)
    graph = sp.bmat([[sp.csr_matrix((n, n)), pat], [pat.T, cc if cc is not None else sp.csr_matrix((m, m))]], format="csr")
    count, label = connected_components(graph, directed=False)
    # renumber by first appearance (rows first) so the numbering is deterministic
    _, first = np.unique(label, return_index=True)
    order = np.argsort(first, kind="stable")
    rank = np.empty_like(order)
    rank[order] = np.arange(len(order))
    label = rank[label]
    return int(count), label[:n], label[n:]


def members(labels: np.ndarray, count: int) -> list[np.ndarray]:
    """Indices carrying each label ``0..count-1``, in index order (one sort, not one scan per label).

    >>> [m.tolist() for m in members(np.array([1, 0, 1, 2]), 3)]
    [[1], [0, 2], [3]]
    """
    labels = np.asarray(labels)
    order = np.argsort(labels, kind="stable")
    starts = np.searchsorted(labels[order], np.arange(count + 1))
    return [order[starts[c] : starts[c + 1]] for c in range(count)]
