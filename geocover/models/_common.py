"""Shared plumbing: parameter checks, the clock, and turning a choice into a Plan."""

from __future__ import annotations

import logging
import math
import time
from dataclasses import dataclass
from typing import Any, Iterable

import numpy as np
import scipy.sparse as sp

from ..errors import ParameterError
from ..values import Plan, Reach, SiteRole, SolveStatus
from .reduce import as_pattern

logger = logging.getLogger(__name__)


class Clock:
    """Wall-clock budget for one model call."""

    def __init__(self, limit: float) -> None:
        self.t0 = time.perf_counter()
        self.limit = float(limit)
        self.phases: dict[str, float] = {}
        self.reserved = 0.0  #: seconds kept back for the work after the solver
        self._last = self.t0

    @property
    def elapsed(self) -> float:
        return time.perf_counter() - self.t0

    @property
    def left(self) -> float:
        return self.limit - self.elapsed

    @property
    def deadline(self) -> float:
        return self.t0 + self.limit

    def reserve(self, seconds: float) -> None:
        """Keep ``seconds`` of the budget for the work after the solver (evaluating the plan)."""
        seconds = max(float(seconds), 0.0)
        self.limit = max(self.limit - seconds, 0.0)
        self.reserved += seconds

    def mark(self, phase: str) -> None:
        now = time.perf_counter()
        self.phases[phase] = self.phases.get(phase, 0.0) + now - self._last
        self._last = now


def check_common(time_limit: Any, rel_gap: Any, threads: Any, seed: Any, solver: Any) -> None:
    # bool is an int to Python, but time_limit=True (one second) is a slip, not a choice
    if isinstance(time_limit, bool) or not (isinstance(time_limit, (int, float)) and math.isfinite(time_limit) and time_limit > 0):
        raise ParameterError(f"time_limit: must be a positive number of seconds (e.g. 60), got {time_limit!r}", param="time_limit")
    if isinstance(rel_gap, bool) or not (isinstance(rel_gap, (int, float)) and 0 <= rel_gap < 1):
        raise ParameterError(f"rel_gap: must be a fraction in [0, 1) (e.g. 1e-4 for 0.01 %), got {rel_gap!r}", param="rel_gap")
    if isinstance(threads, bool) or not (isinstance(threads, (int, np.integer)) and threads >= 1):
        raise ParameterError(f"threads: must be a whole number >= 1, got {threads!r}", param="threads")
    if isinstance(seed, bool) or not isinstance(seed, (int, np.integer)):
        raise ParameterError(f"seed: must be a whole number, got {seed!r}", param="seed")
    if str(solver).lower() not in ("cbc", "highs"):
        raise ParameterError(f"solver: unknown solver {solver!r}; use 'cbc' or 'highs'", param="solver")
    if str(solver).lower() == "highs":
        from .solver import require_highs

        require_highs()


def check_reach(reach: Any) -> Reach:
    if not isinstance(reach, Reach):
        raise ParameterError(
            f"reach: expected a geocover Reach, got {type(reach).__name__}; wrap a plain matrix with Reach.from_sparse(matrix, weight, cost)",
            param="reach",
        )
    return reach


def gap_widened(value: float, rel_gap: float, *, maximize: bool) -> float:
    """The bound proved by a solver that stopped as "optimal" with objective ``value``.

    CBC and HiGHS report a MIP as optimal once the relative gap is within
    ``rel_gap`` (python-mip's ``max_mip_gap``, relative to the larger of
    objective and bound), so the true optimum may lie up to
    ``rel_gap / (1 - rel_gap)`` x ``|value|`` beyond it; ``value`` itself is
    a bound only when ``rel_gap`` is 0.

    >>> gap_widened(100.0, 0.0, maximize=True) - 100.0 < 1e-6
    True
    >>> round(gap_widened(100.0, 0.01, maximize=False), 4)
    98.9899
    """
    slack = rel_gap / (1.0 - rel_gap) * abs(value) + 1e-9 * max(1.0, abs(value))
    return value + slack if maximize else value - slack


def start_call(reach: Any, *, time_limit: Any, rel_gap: Any, threads: Any, seed: Any, solver: Any, reduce: bool) -> tuple[Reach, str, Clock, dict[str, Any]]:
    """Check the arguments every model entry point shares and start its clock.

    Returns the reach, the solver name in lower case, the clock (with time
    kept back for evaluating the plan) and those arguments as plan parameters.
    """
    reach = check_reach(reach)
    check_common(time_limit, rel_gap, threads, seed, solver)
    clock = Clock(time_limit)
    clock.reserve(min(0.1 * time_limit, 0.2 + 3e-8 * reach.matrix.nnz))
    params = {"time_limit": time_limit, "rel_gap": rel_gap, "threads": threads, "seed": seed, "reduce": bool(reduce)}
    return reach, str(solver).lower(), clock, params


def conflict_matrix(pairs: np.ndarray, m: int) -> sp.csr_matrix:
    """Symmetric site x site matrix of spacing conflicts."""
    pairs = np.asarray(pairs, dtype=np.int64).reshape(-1, 2)
    pairs = pairs[pairs[:, 0] != pairs[:, 1]]
    r = np.concatenate([pairs[:, 0], pairs[:, 1]])
    c = np.concatenate([pairs[:, 1], pairs[:, 0]])
    mat = sp.csr_matrix((np.ones(len(r), dtype=np.int8), (r, c)), shape=(m, m))
    mat.data[:] = 1
    return mat


def spacing_rows(conflicts: sp.csr_matrix | None, n_var: int) -> sp.csr_matrix:
    """One MIP row ``x_i + x_j <= 1`` per spacing conflict; site columns come first of ``n_var``.

    >>> spacing_rows(conflict_matrix(np.array([[0, 2]]), 3), 5).toarray().tolist()
    [[1.0, 0.0, 1.0, 0.0, 0.0]]
    """
    if conflicts is None or not conflicts.nnz:
        return sp.csr_matrix((0, n_var))
    cu = sp.triu(conflicts, k=1).tocoo()
    k = len(cu.row)
    return sp.csr_matrix((np.ones(2 * k), (np.repeat(np.arange(k), 2), np.stack([cu.row, cu.col], 1).ravel())), shape=(k, n_var))


def kept_conflict(reach: Reach) -> bool:
    pairs = reach.close_pairs
    if not len(pairs):
        return False
    kept = reach.role == SiteRole.KEPT
    return bool((kept[pairs[:, 0]] & kept[pairs[:, 1]]).any())


def violates_spacing(sites: np.ndarray, pairs: np.ndarray, m: int) -> bool:
    if not len(pairs):
        return False
    x = np.zeros(m, dtype=bool)
    x[np.asarray(sites, dtype=np.int64)] = True
    return bool((x[pairs[:, 0]] & x[pairs[:, 1]]).any())


def integral(values: np.ndarray) -> bool:
    v = np.asarray(values, dtype=np.float64)
    return bool(np.all(np.abs(v - np.round(v)) < 1e-9))


def make_plan(
    reach: Reach,
    sites: Iterable[int],
    *,
    model: str,
    objective: float,
    bound: float,
    status: SolveStatus,
    solver: str,
    clock: Clock,
    params: dict[str, Any],
    log: list[str],
) -> Plan:
    """Evaluate the chosen sites on the *original* reach and wrap them up."""
    chosen = np.unique(np.asarray(list(sites), dtype=np.int64))
    count = reach.coverage_count(chosen) if reach.shape[0] else np.zeros(0, dtype=np.int64)
    covered = float(reach.weight[count > 0].sum())
    params = dict(params)
    params["phase_seconds"] = {k: round(v, 4) for k, v in clock.phases.items()}
    return Plan(
        sites=chosen,
        model=model,
        objective=float(objective),
        bound=float(bound),
        status=status,
        solver=solver,
        seconds=clock.elapsed,
        coverage_count=count,
        covered_weight=covered,
        uncoverable_weight=reach.uncoverable_weight,
        total_weight=float(reach.weight.sum()),
        params=params,
        log=tuple(log),
        reach=reach,
    )


@dataclass
class Prepared:
    """The coverable part of a reach as a 0/1 pattern, and site facts."""

    pattern: sp.csr_matrix  #: coverable rows x all sites
    rows: np.ndarray  #: original row index of each pattern row
    weight: np.ndarray
    cost: np.ndarray
    kept: np.ndarray  #: bool per site
    optional: np.ndarray  #: bool per site
    pairs: np.ndarray


def prepare(reach: Reach) -> Prepared:
    pat = as_pattern(reach.matrix)
    rows = np.flatnonzero(np.diff(pat.indptr) > 0)
    return Prepared(
        pattern=pat if len(rows) == pat.shape[0] else pat[rows],
        rows=rows,
        weight=np.asarray(reach.weight, dtype=np.float64)[rows],
        cost=np.asarray(reach.cost, dtype=np.float64),
        kept=np.asarray(reach.role) == SiteRole.KEPT,
        optional=np.asarray(reach.role) == SiteRole.OPTIONAL,
        pairs=np.asarray(reach.close_pairs, dtype=np.int64).reshape(-1, 2),
    )
