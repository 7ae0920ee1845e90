"""The MIP back end: python-mip with CBC (default) or HiGHS, built in bulk.

A model is handed over as arrays: objective ``c``, a CSR constraint matrix
``A`` with row senses and right-hand sides, variable bounds and an integer
mask.  For CBC the columns are added with one ``Cbc_addCol`` call each and
the rows with one ``Cbc_addRow`` call each, passing pointers into the CSR
arrays (python-mip's own ``add_constr`` walks every nonzero in Python, about
1.2 us per nonzero).  The time limit is enforced from our side as well: the
solve runs in a forked child process that is killed at the deadline (CBC was
seen overrunning ``max_seconds`` by 70 %); where ``fork`` is not available
the solve runs in-process with CBC's own limit only.
"""

from __future__ import annotations

import functools
import logging
import multiprocessing as mp_
import os
import time
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import scipy.sparse as sp

from ..errors import SolverError

logger = logging.getLogger(__name__)

__all__ = ["MipResult", "solve_mip", "SOLVERS"]

SOLVERS = ("cbc", "highs")
_BULK_LOAD = True  #: one Cbc_loadProblem call; False: one Cbc_addCol / Cbc_addRow call per column / row


@dataclass
class MipResult:
    """What the solver found."""

    x: np.ndarray | None  #: best solution (None if none was found)
    objective: float  #: its objective (nan if none)
    bound: float  #: best proven bound (nan if unknown)
    status: str  #: "optimal", "feasible", "nosolution", "infeasible", "killed", "error"
    seconds: float
    build_seconds: float = 0.0
    log: list[str] = field(default_factory=list)


def _check_solver(solver: str) -> str:
    name = str(solver).lower()
    if name not in SOLVERS:
        from ..errors import ParameterError

        raise ParameterError(f"solver: unknown solver {solver!r}; use one of {list(SOLVERS)}", param="solver")
    return name


@functools.lru_cache(maxsize=1)
def highs_available() -> bool:
    """True if python-mip can load HiGHS here."""
    try:
        import mip

        mip.Model(solver_name="HIGHS")
        return True
    except Exception:
        return False


def require_highs() -> None:
    """Raise :class:`SolverError` with the fix if python-mip cannot load HiGHS."""
    if not highs_available():
        _new_model("highs", False)


def _new_model(solver: str, maximize: bool) -> Any:
    import mip

    try:
        model = mip.Model(sense=mip.MAXIMIZE if maximize else mip.MINIMIZE, solver_name=solver.upper())
    except Exception as exc:  # mip raises plain exceptions when a library does not load
        if solver == "highs":
            raise SolverError(
                "solver='highs': python-mip could not load HiGHS "
                f"({str(exc).splitlines()[0]}). python-mip 2.0 needs the 'highsbox' package or highspy<=1.14; "
                "install one of them or use solver='cbc'"
            ) from exc
        raise SolverError(f"solver='{solver}': python-mip could not start the solver: {exc}") from exc
    model.verbose = 0
    return model


def _build_cbc(model: Any, c: np.ndarray, A: sp.csr_matrix, sense: np.ndarray, rhs: np.ndarray, lb: np.ndarray, ub: np.ndarray, integer: np.ndarray) -> None:
    from mip.cbc import cbclib, ffi

    mdl = model.solver._model
    n_var = len(c)
    for j in range(n_var):
        cbclib.Cbc_addCol(mdl, b"x%d" % j, float(lb[j]), float(ub[j]), float(c[j]), b"\x01" if integer[j] else b"\x00", 0, ffi.NULL, ffi.NULL)
    ind = np.ascontiguousarray(A.indices, dtype=np.intc)
    val = np.ascontiguousarray(A.data, dtype=np.float64)
    if len(ind) == 0:
        ind = np.zeros(1, dtype=np.intc)
        val = np.zeros(1, dtype=np.float64)
    ip = ffi.cast("int *", ffi.from_buffer(ind))
    vp = ffi.cast("double *", ffi.from_buffer(val))
    ptr = A.indptr.tolist()
    sense_b = [s.encode() for s in sense.tolist()] if sense.dtype.kind == "U" else list(sense)
    rhs_l = rhs.tolist()
    add = cbclib.Cbc_addRow
    for i in range(A.shape[0]):
        s = ptr[i]
        add(mdl, b"", ptr[i + 1] - s, ip + s, vp + s, sense_b[i], rhs_l[i])
    model.vars.update_vars(model.solver.num_cols())
    model.constrs.update_constrs(model.solver.num_rows())
    # keep the buffers alive as long as the model
    model._geocover_buffers = (ind, val)


_LOAD_CDEF = """void Cbc_loadProblem(Cbc_Model *model, const int numcols, const int numrows,
    const int *start, const int *index, const double *value,
    const double *collb, const double *colub, const double *obj,
    const double *rowlb, const double *rowub);"""


@functools.lru_cache(maxsize=1)
def _cbc_load_problem() -> Any:
    """``Cbc_loadProblem`` from the CBC library python-mip loaded (not in mip's own declarations)."""
    from mip.cbc import cbclib, ffi

    try:
        ffi.cdef(_LOAD_CDEF)
        return cbclib.Cbc_loadProblem
    except Exception:  # pragma: no cover - a CBC build without it: fall back to row-by-row
        return None


def _build_cbc_bulk(model: Any, c: np.ndarray, A: sp.csr_matrix, sense: np.ndarray, rhs: np.ndarray, lb: np.ndarray, ub: np.ndarray, integer: np.ndarray) -> bool:
    """Hand CBC the whole matrix in one ``Cbc_loadProblem`` call (column-major arrays)."""
    load = _cbc_load_problem()
    if load is None:
        return False
    from mip.cbc import cbclib, ffi

    mdl = model.solver._model
    n_var = len(c)
    csc = sp.csc_matrix(A)
    csc.sort_indices()
    start = np.ascontiguousarray(csc.indptr, dtype=np.intc)
    index = np.ascontiguousarray(csc.indices, dtype=np.intc)
    value = np.ascontiguousarray(csc.data, dtype=np.float64)
    if len(index) == 0:
        index = np.zeros(1, dtype=np.intc)
        value = np.zeros(1, dtype=np.float64)
    s = np.array([x if isinstance(x, bytes) else str(x).encode() for x in sense.tolist()], dtype="S1")
    rlo = np.where((s == b"G") | (s == b"E"), rhs, -np.inf).astype(np.float64)
    rhi = np.where((s == b"L") | (s == b"E"), rhs, np.inf).astype(np.float64)
    arrays = [start, index, value, np.ascontiguousarray(lb, dtype=np.float64), np.ascontiguousarray(ub, dtype=np.float64), np.ascontiguousarray(c, dtype=np.float64), np.ascontiguousarray(rlo), np.ascontiguousarray(rhi)]
    ptrs = [ffi.cast("int *", ffi.from_buffer(a)) for a in arrays[:2]] + [ffi.cast("double *", ffi.from_buffer(a)) for a in arrays[2:]]
    load(mdl, n_var, A.shape[0], *ptrs)
    for j in np.flatnonzero(integer).tolist():
        cbclib.Cbc_setInteger(mdl, j)
    cbclib.Cbc_setObjSense(mdl, -1.0 if model.sense == "MAX" else 1.0)
    model.vars.update_vars(model.solver.num_cols())
    model.constrs.update_constrs(model.solver.num_rows())
    model._geocover_buffers = arrays
    return True


def _build_generic(model: Any, c: np.ndarray, A: sp.csr_matrix, sense: np.ndarray, rhs: np.ndarray, lb: np.ndarray, ub: np.ndarray, integer: np.ndarray) -> None:
    """Build through python-mip's ordinary API (used for HiGHS)."""
    import mip

    xs = [model.add_var(lb=float(lb[j]), ub=float(ub[j]), obj=float(c[j]), var_type=mip.INTEGER if integer[j] else mip.CONTINUOUS) for j in range(len(c))]
    for i in range(A.shape[0]):
        s, e = A.indptr[i], A.indptr[i + 1]
        expr = mip.LinExpr(variables=[xs[k] for k in A.indices[s:e]], coeffs=A.data[s:e].tolist())
        sg = sense[i] if isinstance(sense[i], str) else sense[i].decode()
        if sg == "G":
            model.add_constr(expr >= float(rhs[i]))
        elif sg == "L":
            model.add_constr(expr <= float(rhs[i]))
        else:
            model.add_constr(expr == float(rhs[i]))


def _solve_inprocess(solver: str, maximize: bool, c: np.ndarray, A: sp.csr_matrix, sense: np.ndarray, rhs: np.ndarray, lb: np.ndarray, ub: np.ndarray, integer: np.ndarray, start: np.ndarray | None, time_limit: float, rel_gap: float, threads: int, seed: int) -> MipResult:
    import mip

    t0 = time.perf_counter()
    model = _new_model(solver, maximize)
    if solver == "cbc":
        if not (_BULK_LOAD and _build_cbc_bulk(model, c, A, sense, rhs, lb, ub, integer)):
            _build_cbc(model, c, A, sense, rhs, lb, ub, integer)
    else:
        _build_generic(model, c, A, sense, rhs, lb, ub, integer)
    build = time.perf_counter() - t0
    model.threads = int(threads)
    model.seed = int(seed)
    model.max_mip_gap = float(rel_gap)
    model.max_mip_gap_abs = 1e-9
    log = [f"{solver}: built {len(c)} columns, {A.shape[0]} rows, {A.nnz} nonzeros in {build:.3f} s"]
    if start is not None:
        idx = np.flatnonzero(integer)
        if solver == "cbc":
            from mip.cbc import cbclib, ffi

            # every column's value, continuous ones too, so CBC need not solve an LP to complete the start
            idx = np.arange(len(c))
            sv = np.ascontiguousarray(np.where(integer, np.round(start), start), dtype=np.float64)
            ii = np.ascontiguousarray(idx, dtype=np.intc)
            cbclib.Cbc_setMIPStartI(model.solver._model, len(ii), ffi.cast("int *", ffi.from_buffer(ii)), ffi.cast("double *", ffi.from_buffer(sv)))
        else:
            model.start = [(model.vars[int(j)], float(round(start[j]))) for j in idx]
    t1 = time.perf_counter()
    status = model.optimize(max_seconds=max(float(time_limit), 0.05))
    secs = time.perf_counter() - t1
    log.append(f"{solver}: status {status.name} after {secs:.2f} s (limit {time_limit:.2f} s)")
    x = None
    obj = float("nan")
    bound = float("nan")
    try:
        bound = float(model.objective_bound)
    except Exception:
        pass
    if status in (mip.OptimizationStatus.OPTIMAL, mip.OptimizationStatus.FEASIBLE):
        if solver == "cbc":
            from mip.cbc import cbclib, ffi

            ptr = cbclib.Cbc_getColSolution(model.solver._model)
            x = np.frombuffer(ffi.buffer(ptr, 8 * len(c)), dtype=np.float64).copy()
        else:
            x = np.array([v.x for v in model.vars], dtype=np.float64)
        obj = float(model.objective_value)
        st = "optimal" if status == mip.OptimizationStatus.OPTIMAL else "feasible"
    elif status == mip.OptimizationStatus.INFEASIBLE:
        st = "infeasible"
    else:
        st = "nosolution"
    return MipResult(x, obj, bound, st, secs, build, log)


def _child(conn: Any, args: tuple) -> None:  # pragma: no cover - runs in the forked child
    # the library never prints: CLP writes its LP log to stdout even with verbose=0
    try:
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, 1)
        os.dup2(devnull, 2)
    except OSError:
        pass
    try:
        res = _solve_inprocess(*args)
        conn.send(res)
    except BaseException as exc:  # report, never hang the parent
        conn.send(MipResult(None, float("nan"), float("nan"), "error", 0.0, 0.0, [f"solver error: {exc!r}"]))
    finally:
        conn.close()


def solve_mip(
    c: np.ndarray,
    A: sp.csr_matrix,
    sense: np.ndarray,
    rhs: np.ndarray,
    *,
    lb: np.ndarray | None = None,
    ub: np.ndarray | None = None,
    integer: np.ndarray | None = None,
    maximize: bool = False,
    start: np.ndarray | None = None,
    time_limit: float = 60.0,
    rel_gap: float = 1e-4,
    threads: int = 1,
    seed: int = 0,
    solver: str = "cbc",
    guard: bool = True,
) -> MipResult:
    """Solve ``min/max c x  s.t.  A x (sense) rhs,  lb <= x <= ub``, some x integer.

    ``sense`` holds one of ``b"G"``, ``b"L"``, ``b"E"`` per row.  The whole
    call (building included) is held to ``time_limit`` seconds: the solver
    gets what is left after building, and with ``guard`` the solve runs in a
    forked child that is asked to stop at 70 % of the limit and killed at
    the limit.
    """
    solver = _check_solver(solver)
    if solver == "highs":
        require_highs()  # SolverError with the fix if HiGHS does not load (checked once, not a model per solve)
    n_var = len(c)
    lb = np.zeros(n_var) if lb is None else np.asarray(lb, dtype=np.float64)
    ub = np.ones(n_var) if ub is None else np.asarray(ub, dtype=np.float64)
    integer = np.ones(n_var, dtype=bool) if integer is None else np.asarray(integer, dtype=bool)
    A = sp.csr_matrix(A, dtype=np.float64)
    A.sort_indices()
    sense = np.array([s if isinstance(s, bytes) else str(s).encode() for s in np.asarray(sense).tolist()], dtype=object)
    rhs = np.asarray(rhs, dtype=np.float64)
    if time_limit <= 0:
        return MipResult(None, float("nan"), float("nan"), "nosolution", 0.0, 0.0, ["no time left for the solver"])
    # the solver's own limit leaves room for building and reading back
    est_build = 2e-6 * (A.shape[0] + n_var) + 5e-8 * A.nnz
    use_fork = guard and "fork" in mp_.get_all_start_methods() and os.name == "posix"
    if use_fork:
        # CBC overruns its own limit (seen: +70 %): ask it to stop well before we kill it
        inner = max(0.05, 0.7 * time_limit - est_build - 0.2)
    else:
        inner = max(0.05, min(time_limit * 0.97 - est_build, time_limit - est_build - 0.1))
    args = (solver, maximize, np.asarray(c, dtype=np.float64), A, sense, rhs, lb, ub, integer, start, inner, rel_gap, threads, seed)
    if not use_fork:
        return _solve_inprocess(*args)
    t0 = time.perf_counter()
    ctx = mp_.get_context("fork")
    parent, child = ctx.Pipe(duplex=False)
    proc = ctx.Process(target=_child, args=(child, args), daemon=True)
    proc.start()
    child.close()
    deadline = t0 + time_limit
    res: MipResult | None = None
    try:
        while True:
            left = deadline - time.perf_counter()
            if left <= 0:
                break
            if parent.poll(min(left, 0.5)):
                try:
                    res = parent.recv()
                except EOFError:
                    res = None
                break
            if not proc.is_alive() and not parent.poll(0):
                break
    except BaseException:  # Ctrl-C in the parent alone (a notebook): do not leave the child solving on
        if proc.is_alive():
            proc.kill()
        proc.join(5)
        raise
    if res is None:
        if proc.is_alive():
            proc.kill()
        proc.join(5)
        secs = time.perf_counter() - t0
        why = "killed at the deadline" if secs >= time_limit else f"child exited with code {proc.exitcode}"
        logger.info("MIP %s after %.1f s (limit %.1f s)", why, secs, time_limit)
        return MipResult(None, float("nan"), float("nan"), "killed", secs, 0.0, [f"{solver}: {why} after {secs:.1f} s (limit {time_limit:.1f} s); using the heuristic plan"])
    proc.join(5)
    if proc.is_alive():  # pragma: no cover
        proc.kill()
        proc.join(1)
    if res.status == "error":
        raise SolverError("; ".join(res.log))
    return res
