"""Shared helpers for the model tests: random geographic instances and the scipy/HiGHS reference."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import scipy.sparse as sp
from scipy.optimize import Bounds, LinearConstraint, milp

from geocover.values import Reach, SiteRole

# the instances ship with the tests (MIT licence, see tests/data/orlib/README.md); a shared/ copy beside
# the repository is the fallback
ORLIB = Path(__file__).resolve().parent / "data" / "orlib"
if not (ORLIB / "scp41.txt").exists():
    ORLIB = Path(__file__).resolve().parents[2] / "shared" / "data" / "orlib"


def read_orlib(path: Path) -> tuple[sp.csr_matrix, np.ndarray]:
    """Read an OR-Library set-covering file (format in shared/data/orlib/README.md)."""
    tok = np.array(path.read_text().split(), dtype=np.int64)
    m, n = int(tok[0]), int(tok[1])
    cost = tok[2 : 2 + n].astype(np.float64)
    pos = 2 + n
    rows, cols = [], []
    for i in range(m):
        k = int(tok[pos])
        cols.append(tok[pos + 1 : pos + 1 + k] - 1)
        rows.append(np.full(k, i))
        pos += 1 + k
    mat = sp.csr_matrix((np.ones(sum(map(len, cols))), (np.concatenate(rows), np.concatenate(cols))), shape=(m, n))
    return mat, cost


def geo_instance(seed: int, n: int, m: int, radius: float, *, roles: bool = True, spacing: float = 0.0) -> Reach:
    """Random demand points and sites in a 10 x 10 square, covered within ``radius``."""
    rng = np.random.default_rng(seed)
    dxy = rng.uniform(0, 10, (n, 2))
    sxy = rng.uniform(0, 10, (m, 2))
    d = np.hypot(dxy[:, None, 0] - sxy[None, :, 0], dxy[:, None, 1] - sxy[None, :, 1])
    mat = sp.csr_matrix(np.where(d <= radius, d + 1.0, 0.0))
    weight = rng.integers(0, 20, n).astype(float)
    cost = rng.integers(1, 6, m).astype(float)
    role = np.zeros(m, dtype=np.int8)
    if roles:
        u = rng.random(m)
        role[u < 0.12] = SiteRole.KEPT
        role[(u >= 0.12) & (u < 0.24)] = SiteRole.OPTIONAL
    pairs = None
    if spacing > 0:
        ds = np.hypot(sxy[:, None, 0] - sxy[None, :, 0], sxy[:, None, 1] - sxy[None, :, 1])
        i, j = np.nonzero(np.triu(ds < spacing, 1))
        pairs = np.stack([i, j], 1)
        # two kept sites may not conflict: demote the second one
        for a, b in pairs:
            if role[a] == SiteRole.KEPT and role[b] == SiteRole.KEPT:
                role[b] = SiteRole.CANDIDATE
    return Reach.from_sparse(mat, weight=weight, cost=cost, role=role, close_pairs=pairs)


# ----------------------------------------------------------------------------- independent reference
# scipy.optimize.milp (HiGHS), a solver independent of python-mip/CBC, on the same matrix.
# The coverage variables y are declared binary here (an equivalent formulation): with continuous y,
# the HiGHS bundled with scipy 1.17.1 returned a wrong "optimal" 28 (24 without presolve) on a
# coverage-target instance where a feasible plan of cost 22 exists (found by a stress run).


def _pair_rows(pairs: np.ndarray, nvar: int) -> sp.csr_matrix:
    k = len(pairs)
    return sp.csr_matrix((np.ones(2 * k), (np.repeat(np.arange(k), 2), pairs.ravel())), shape=(k, nvar))


def ref_lscp(reach: Reach, use_cost: bool = True) -> float | None:
    """Optimal LSCP objective by scipy/HiGHS, or None if infeasible."""
    A = reach.pattern.astype(float)
    n, m = A.shape
    A = A[np.diff(A.indptr) > 0]
    cost = reach.cost if use_cost else np.ones(m)
    lb = (reach.role == SiteRole.KEPT).astype(float)
    cons = [LinearConstraint(A, 1, np.inf)] if A.shape[0] else []
    if len(reach.close_pairs):
        cons.append(LinearConstraint(_pair_rows(reach.close_pairs, m), -np.inf, 1))
    r = milp(cost, constraints=cons, integrality=np.ones(m), bounds=Bounds(lb, np.ones(m)))
    return None if r.status == 2 else float(r.fun)


def _coverage_vars(reach: Reach):
    A = reach.pattern.astype(float)
    n, m = A.shape
    M = sp.hstack([A, -sp.identity(n)], format="csr")
    lb = np.concatenate([(reach.role == SiteRole.KEPT).astype(float), np.zeros(n)])
    return A, n, m, M, lb


def ref_mclp(reach: Reach, p: int | None = None, budget: float | None = None) -> float | None:
    """Optimal MCLP covered weight by scipy/HiGHS (optional sites free, not counted)."""
    A, n, m, M, lb = _coverage_vars(reach)
    cons = [LinearConstraint(M, 0, np.inf)]
    optional = reach.role == SiteRole.OPTIONAL
    if p is not None:
        res = (reach.role == SiteRole.CANDIDATE).astype(float)
        cons.append(LinearConstraint(np.concatenate([res, np.zeros(n)])[None, :], -np.inf, p))
    else:
        cost = np.where(optional, 0.0, reach.cost)
        cons.append(LinearConstraint(np.concatenate([cost, np.zeros(n)])[None, :], -np.inf, budget))
    if len(reach.close_pairs):
        cons.append(LinearConstraint(_pair_rows(reach.close_pairs, m + n), -np.inf, 1))
    c = np.concatenate([np.zeros(m), -reach.weight])
    r = milp(c, constraints=cons, integrality=np.ones(m + n), bounds=Bounds(lb, np.ones(m + n)))
    return None if r.status == 2 else -float(r.fun)


def ref_target(reach: Reach, share: float) -> float | None:
    """Least cost covering at least ``share`` of the coverable weight, by scipy/HiGHS."""
    A, n, m, M, lb = _coverage_vars(reach)
    coverable = np.diff(reach.pattern.indptr) > 0
    need = share * float(reach.weight[coverable].sum())
    cons = [LinearConstraint(M, 0, np.inf), LinearConstraint(np.concatenate([np.zeros(m), reach.weight])[None, :], need * (1 - 1e-9), np.inf)]
    if len(reach.close_pairs):
        cons.append(LinearConstraint(_pair_rows(reach.close_pairs, m + n), -np.inf, 1))
    c = np.concatenate([reach.cost, np.zeros(n)])
    r = milp(c, constraints=cons, integrality=np.ones(m + n), bounds=Bounds(lb, np.ones(m + n)))
    return None if r.status == 2 else float(r.fun)


def ref_backup(reach: Reach, p: int, floor: float, k: int = 2) -> float | None:
    """Most weight covered >= k times with first coverage >= floor x coverable weight, by scipy/HiGHS.

    Variables: x (sites), y1 (covered once), yk (covered k times), all binary.
    """
    A = reach.pattern.astype(float)
    n, m = A.shape
    coverable = np.diff(reach.pattern.indptr) > 0
    W = float(reach.weight[coverable].sum())
    I = sp.identity(n, format="csr")
    Z = sp.csr_matrix((n, n))
    rows1 = sp.hstack([A, -I, Z], format="csr")  # A x - y1 >= 0
    rowsk = sp.hstack([A, Z, -k * I], format="csr")  # A x - k yk >= 0
    res = (reach.role == SiteRole.CANDIDATE).astype(float)
    cons = [
        LinearConstraint(rows1, 0, np.inf),
        LinearConstraint(rowsk, 0, np.inf),
        LinearConstraint(np.concatenate([res, np.zeros(2 * n)])[None, :], -np.inf, p),
        LinearConstraint(np.concatenate([np.zeros(m), reach.weight, np.zeros(n)])[None, :], floor * W * (1 - 1e-9), np.inf),
    ]
    if len(reach.close_pairs):
        cons.append(LinearConstraint(_pair_rows(reach.close_pairs, m + 2 * n), -np.inf, 1))
    lb = np.concatenate([(reach.role == SiteRole.KEPT).astype(float), np.zeros(2 * n)])
    c = np.concatenate([np.zeros(m + n), -reach.weight])
    integ = np.ones(m + 2 * n)
    r = milp(c, constraints=cons, integrality=integ, bounds=Bounds(lb, np.ones(m + 2 * n)))
    return None if r.status == 2 else -float(r.fun)
