"""The small frozen value types that flow through a study.

``Demand`` and ``Sites`` hold coordinates in the working CRS (projected,
metres) as numpy arrays; ``Reach`` is the sparse demand x sites coverage
relation; ``Plan`` is what a model returns.  All of them check themselves in
``__post_init__`` and never touch a file.

>>> import numpy as np
>>> d = Demand(np.array([[0.0, 0.0], [10.0, 0.0]]), np.array([5.0, 7.0]), crs="EPSG:3857")
>>> d.total
12.0
"""

from __future__ import annotations

import enum
import math
from dataclasses import dataclass, field
from typing import Any, Mapping

import numpy as np
import scipy.sparse as sp

from .errors import InputError

__all__ = [
    "Demand",
    "Sites",
    "SiteRole",
    "ScreeningRecord",
    "Verdict",
    "Metric",
    "ServiceRule",
    "Reach",
    "Plan",
    "SolveStatus",
]


def _as_xy(xy: Any, what: str) -> np.ndarray:
    arr = np.ascontiguousarray(np.asarray(xy, dtype=np.float64))
    if arr.ndim != 2 or arr.shape[1] != 2:
        raise InputError(f"{what}: coordinates must have shape (n, 2), got {arr.shape}")
    # a finite sum proves every value finite in one pass without a temporary; only otherwise look closer
    if arr.size and not math.isfinite(arr.sum()) and not np.isfinite(arr).all():
        bad = int(np.flatnonzero(~np.isfinite(arr).all(axis=1))[0])
        raise InputError(f"{what}: coordinate row {bad} is not finite ({arr[bad].tolist()}); drop or fix that feature")
    return arr


def _as_vector(values: Any, n: int, dtype: Any, what: str, default: Any, broadcast: bool = False) -> np.ndarray:
    if values is None:
        return np.full(n, default, dtype=dtype)
    if broadcast and np.ndim(values) == 0:  # one value for all as a read-only view: no memory per element
        return np.broadcast_to(np.asarray(values, dtype=dtype), (n,))
    arr = np.asarray(values, dtype=dtype)
    if arr.ndim == 0:  # one value for every element (np.ascontiguousarray would make it shape (1,))
        return np.full(n, arr.item(), dtype=dtype)
    arr = np.ascontiguousarray(arr)
    if arr.shape != (n,):
        raise InputError(f"{what}: expected {n} values, got shape {arr.shape}")
    return arr


def _freeze(arr: np.ndarray) -> np.ndarray:
    arr.setflags(write=False)
    return arr


# --------------------------------------------------------------------------- demand


@dataclass(frozen=True, eq=False)
class Demand:
    """Weighted demand points in the working CRS.

    Parameters
    ----------
    xy : (n, 2) array of float
        Coordinates in the working CRS (metres).
    weight : (n,) array of float
        People (or any non-negative weight) at each point.
    unit : (n,) array of int, optional
        Row of the source layer or flat cell index each point came from.
    footprint : (n,) array of float, optional
        Radius in metres of the area a point stands for (half the cell or
        block diagonal, or a polygon's radius); 0 for true points.
    crs : str, optional
        The working CRS as an authority string or WKT.
    summary : mapping, optional
        What the reader did (people in and out, dropped cells and why).
    """

    xy: np.ndarray
    weight: np.ndarray
    unit: np.ndarray | None = None
    footprint: np.ndarray | None = None
    crs: str | None = None
    summary: Mapping[str, Any] = field(default_factory=dict)

    def __post_init__(self) -> None:
        xy = _as_xy(self.xy, "demand")
        n = len(xy)
        weight = _as_vector(self.weight, n, np.float64, "demand weight", 1.0)
        # min >= 0 (NaN propagates) and a finite sum prove the weights clean without temporaries
        if n and not (weight.min() >= 0 and math.isfinite(weight.sum())) and (
            not np.isfinite(weight).all() or (weight < 0).any()
        ):
            bad = np.flatnonzero(~np.isfinite(weight) | (weight < 0))
            raise InputError(
                f"demand weight: {len(bad)} value(s) are negative or not finite (first at row {int(bad[0])}: "
                f"{weight[bad[0]]}); population must be a count of zero or more"
            )
        unit = _as_vector(self.unit, n, np.int64, "demand unit", 0)
        if self.unit is None:
            unit = np.arange(n, dtype=np.int64)
        footprint = _as_vector(self.footprint, n, np.float64, "demand footprint", 0.0, broadcast=True)
        for name, arr in (("xy", xy), ("weight", weight), ("unit", unit), ("footprint", footprint)):
            object.__setattr__(self, name, _freeze(arr))
        object.__setattr__(self, "summary", dict(self.summary))

    def __len__(self) -> int:
        return len(self.xy)

    @property
    def total(self) -> float:
        """Total weight (people)."""
        return float(self.weight.sum())

    def subset(self, index: Any) -> "Demand":
        """The demand points at ``index`` (a boolean mask or integer indices)."""
        return Demand(
            self.xy[index], self.weight[index], self.unit[index], self.footprint[index], self.crs, self.summary
        )


# --------------------------------------------------------------------------- sites


class SiteRole(enum.IntEnum):
    """What the model may do with a site."""

    CANDIDATE = 0  #: may be opened
    KEPT = 1  #: an existing facility that stays open
    OPTIONAL = 2  #: an existing facility the model may close

    @property
    def label(self) -> str:
        return {0: "candidate", 1: "existing_kept", 2: "existing_optional"}[int(self)]


@dataclass(frozen=True, eq=False)
class Sites:
    """Sites the model may use, in the working CRS.

    Parameters
    ----------
    xy : (m, 2) array of float
    cost : (m,) array of float, optional
        Opening cost (default 1 per site, so that least cost = fewest sites).
    role : (m,) array of int, optional
        :class:`SiteRole` codes (default all candidates).
    label : (m,) array of str, optional
        Names shown in layers and reports.
    source : (m,) array of int, optional
        Feature id in the source layer.
    crs : str, optional
    close_pairs : (k, 2) array of int, optional
        Pairs of site indices closer than the minimum spacing; the models
        forbid opening both.
    """

    xy: np.ndarray
    cost: np.ndarray | None = None
    role: np.ndarray | None = None
    label: np.ndarray | None = None
    source: np.ndarray | None = None
    crs: str | None = None
    close_pairs: np.ndarray | None = None

    def __post_init__(self) -> None:
        xy = _as_xy(self.xy, "sites")
        m = len(xy)
        cost = _as_vector(self.cost, m, np.float64, "site cost", 1.0)
        if m and (not np.isfinite(cost).all() or (cost < 0).any()):
            bad = int(np.flatnonzero(~np.isfinite(cost) | (cost < 0))[0])
            raise InputError(f"site cost: site {bad} has cost {cost[bad]}; costs must be zero or more")
        role = _as_vector(self.role, m, np.int8, "site role", int(SiteRole.CANDIDATE))
        if m and not np.isin(role, [r.value for r in SiteRole]).all():
            raise InputError(f"site role: codes must be one of {[r.value for r in SiteRole]}")
        if self.label is None:
            label = np.array([f"site_{i}" for i in range(m)], dtype=object)
        else:
            label = _as_vector(self.label, m, object, "site label", "")
        source = _as_vector(self.source, m, np.int64, "site source", 0)
        if self.source is None:
            source = np.arange(m, dtype=np.int64)
        pairs = np.zeros((0, 2), dtype=np.int64) if self.close_pairs is None else np.asarray(self.close_pairs)
        pairs = np.ascontiguousarray(pairs.astype(np.int64).reshape(-1, 2))
        if pairs.size and (pairs.min() < 0 or pairs.max() >= m):
            raise InputError("sites close_pairs: indices must refer to sites 0..m-1")
        for name, arr in (
            ("xy", xy), ("cost", cost), ("role", role), ("label", label), ("source", source), ("close_pairs", pairs)
        ):
            object.__setattr__(self, name, _freeze(arr))

    def __len__(self) -> int:
        return len(self.xy)

    @property
    def kept(self) -> np.ndarray:
        """Indices of sites that must stay open."""
        return np.flatnonzero(self.role == SiteRole.KEPT)


class Verdict(str, enum.Enum):
    """Outcome of screening one candidate."""

    KEPT = "kept"
    EXCLUDED = "excluded"  #: inside (or within the setback of) an exclusion zone
    LAND_USE = "land_use"  #: on a disallowed land-use class
    OUTSIDE = "outside"  #: outside the study area
    INVALID = "invalid"  #: empty or unusable geometry


@dataclass(frozen=True, eq=False)
class ScreeningRecord:
    """The verdict on every candidate, kept or rejected, and why.

    ``xy`` are the candidates' representative points in the working CRS,
    ``verdict`` a :class:`Verdict` value per candidate, ``rule`` a short text
    ("flood zones within 50 m"), ``layer`` and ``feature`` the rejecting layer
    and feature id (empty / -1 when kept), ``nearest_exclusion_m`` the
    distance to the nearest exclusion polygon (inf when there is none) and
    ``site_index`` the candidate's index in the screened :class:`Sites`
    (-1 when rejected).
    """

    xy: np.ndarray
    verdict: np.ndarray
    rule: np.ndarray
    layer: np.ndarray
    feature: np.ndarray
    nearest_exclusion_m: np.ndarray
    site_index: np.ndarray
    label: np.ndarray | None = None
    crs: str | None = None
    land_use_share: np.ndarray | None = None  #: share of the footprint on allowed land use (nan: no mask)
    notes: tuple[str, ...] = ()  #: what screening repaired, reprojected or flagged, for reports
    zones: Mapping[str, Any] = field(default_factory=dict)  #: exclusion polygons used, by layer name (for maps)

    def __post_init__(self) -> None:
        # rows with verdict "invalid" have no usable location and may hold NaN coordinates
        xy = np.ascontiguousarray(np.asarray(self.xy, dtype=np.float64))
        if xy.ndim != 2 or xy.shape[1] != 2:
            raise InputError(f"screening record: coordinates must have shape (n, 2), got {xy.shape}")
        n = len(xy)
        object.__setattr__(self, "xy", _freeze(xy))
        for name, dtype, default in (
            ("verdict", object, Verdict.KEPT.value),
            ("rule", object, ""),
            ("layer", object, ""),
            ("feature", np.int64, -1),
            ("nearest_exclusion_m", np.float64, np.inf),
            ("site_index", np.int64, -1),
            ("label", object, ""),
            ("land_use_share", np.float64, np.nan),
        ):
            object.__setattr__(self, name, _freeze(_as_vector(getattr(self, name), n, dtype, f"record {name}", default)))
        lacking = np.flatnonzero(~np.isfinite(xy).all(axis=1))
        if len(lacking) and (self.verdict[lacking].astype(str) != Verdict.INVALID.value).any():
            raise InputError("screening record: only rows with verdict 'invalid' may lack finite coordinates")
        object.__setattr__(self, "notes", tuple(self.notes))
        object.__setattr__(self, "zones", dict(self.zones))

    def __len__(self) -> int:
        return len(self.xy)

    def counts(self) -> dict[str, int]:
        """Number of candidates per verdict."""
        values, counts = np.unique(self.verdict.astype(str), return_counts=True)
        return {str(v): int(c) for v, c in zip(values, counts)}


# --------------------------------------------------------------------------- coverage


class Metric(str, enum.Enum):
    """How service is measured."""

    PLANAR = "planar"  #: straight line in the projected working CRS, metres
    GEODESIC = "geodesic"  #: shortest path on the ellipsoid, metres
    NETWORK = "network"  #: travel time on a road network, seconds
    GIVEN = "given"  #: a matrix supplied by the user


@dataclass(frozen=True)
class ServiceRule:
    """The rule that decides coverage: a metric and an inclusive limit."""

    metric: Metric
    limit: float | None
    unit: str  # "m", "s" or "" for a plain 0/1 matrix

    def __post_init__(self) -> None:
        object.__setattr__(self, "metric", Metric(self.metric))
        if self.limit is not None and not (np.isfinite(self.limit) and self.limit > 0):
            raise InputError(f"service limit must be a positive number, got {self.limit}")

    def describe(self) -> str:
        if self.limit is None:
            return f"{self.metric.value} coverage"
        if self.unit == "s":
            return f"{self.metric.value} travel time within {self.limit / 60:g} min"
        return f"{self.metric.value} distance within {self.limit / 1000:g} km"


@dataclass(frozen=True, eq=False)
class Reach:
    """Which sites can serve which demand, with the distance or time of each pair.

    ``matrix`` is a CSR matrix (n_demand x n_sites); a stored entry means
    "covered" and its value is the distance (m) or time (s).  Explicit zeros
    are kept: a site standing on a demand point covers it at distance 0.
    ``weight`` are the people per demand row, ``cost`` and ``role`` describe
    the sites, ``close_pairs`` the site pairs that may not both open.
    ``demand`` and ``sites`` are the value objects the relation was made from,
    when there were any.  ``notes`` carries what the builder found on the way
    (for a road network: unsnapped points, disconnected parts, the graph).
    """

    matrix: sp.csr_matrix
    weight: np.ndarray | None = None
    cost: np.ndarray | None = None
    role: np.ndarray | None = None
    rule: ServiceRule = field(default_factory=lambda: ServiceRule(Metric.GIVEN, None, ""))
    close_pairs: np.ndarray | None = None
    demand: Demand | None = None
    sites: Sites | None = None
    notes: Mapping[str, Any] = field(default_factory=dict)

    def __post_init__(self) -> None:
        mat = self.matrix
        if not sp.issparse(mat):
            mat = sp.csr_matrix(np.asarray(mat))
        mat = sp.csr_matrix(mat, dtype=np.float64, copy=False)
        if not mat.has_canonical_format:
            mat = mat.copy()
            mat.sum_duplicates()
        n, m = mat.shape
        weight = _as_vector(self.weight, n, np.float64, "reach weight", 1.0)
        if n and ((weight < 0).any() or not np.isfinite(weight).all()):
            raise InputError("reach weight: weights must be finite and zero or more")
        cost = _as_vector(self.cost, m, np.float64, "reach cost", 1.0)
        if m and ((cost < 0).any() or not np.isfinite(cost).all()):
            raise InputError("reach cost: costs must be finite and zero or more")
        role = _as_vector(self.role, m, np.int8, "reach role", int(SiteRole.CANDIDATE))
        pairs = np.zeros((0, 2), dtype=np.int64) if self.close_pairs is None else np.asarray(self.close_pairs)
        pairs = np.ascontiguousarray(pairs.astype(np.int64).reshape(-1, 2))
        if self.demand is not None and len(self.demand) != n:
            raise InputError(f"reach: matrix has {n} rows but demand has {len(self.demand)} points")
        if self.sites is not None and len(self.sites) != m:
            raise InputError(f"reach: matrix has {m} columns but there are {len(self.sites)} sites")
        object.__setattr__(self, "matrix", mat)
        object.__setattr__(self, "notes", dict(self.notes))
        for name, arr in (("weight", weight), ("cost", cost), ("role", role), ("close_pairs", pairs)):
            object.__setattr__(self, name, _freeze(arr))

    @classmethod
    def from_sparse(
        cls,
        matrix: Any,
        weight: Any = None,
        cost: Any = None,
        role: Any = None,
        close_pairs: Any = None,
    ) -> "Reach":
        """A coverage relation from any demand x sites matrix.

        Every stored nonzero is a covering pair (a 0/1 incidence matrix or a
        matrix of distances within the limit), e.g. a published set-covering
        instance.

        >>> import scipy.sparse as sp
        >>> r = Reach.from_sparse(sp.csr_matrix([[1, 0], [1, 1]]), cost=[2, 1])
        >>> r.shape
        (2, 2)
        """
        mat = sp.csr_matrix(matrix, dtype=np.float64) if sp.issparse(matrix) else sp.csr_matrix(np.asarray(matrix, dtype=np.float64))
        mat.eliminate_zeros()
        return cls(mat, weight=weight, cost=cost, role=role, close_pairs=close_pairs)

    @classmethod
    def from_pairs(
        cls,
        rows: np.ndarray,
        cols: np.ndarray,
        values: np.ndarray,
        demand: Demand,
        sites: Sites,
        rule: ServiceRule,
    ) -> "Reach":
        """Build the relation from covering index pairs and their distances or times."""
        mat = sp.csr_matrix(
            (np.asarray(values, dtype=np.float64), (np.asarray(rows), np.asarray(cols))),
            shape=(len(demand), len(sites)),
        )
        mat.sum_duplicates()
        return cls.from_matrix(mat, demand, sites, rule)

    @classmethod
    def from_matrix(cls, matrix: sp.csr_matrix, demand: Demand, sites: Sites, rule: ServiceRule, **extra: Any) -> "Reach":
        """The relation from a demand x sites CSR matrix, with weights, costs and roles taken from the inputs."""
        return cls(
            matrix,
            weight=demand.weight,
            cost=sites.cost,
            role=sites.role,
            rule=rule,
            close_pairs=sites.close_pairs,
            demand=demand,
            sites=sites,
            **extra,
        )

    @property
    def shape(self) -> tuple[int, int]:
        return self.matrix.shape  # type: ignore[return-value]

    @property
    def pattern(self) -> sp.csr_matrix:
        """The 0/1 covering pattern (every stored entry, zeros included, as 1)."""
        mat = self.matrix
        return sp.csr_matrix(
            (np.ones(mat.nnz, dtype=np.int8), mat.indices, mat.indptr), shape=mat.shape
        )

    @property
    def coverable(self) -> np.ndarray:
        """Boolean per demand row: at least one site reaches it."""
        return np.diff(self.matrix.indptr) > 0

    @property
    def uncoverable_weight(self) -> float:
        """People that no site can reach."""
        return float(self.weight[~self.coverable].sum())

    def coverage_count(self, chosen: Any) -> np.ndarray:
        """How many of the ``chosen`` sites cover each demand row."""
        open_ = np.zeros(self.shape[1], dtype=np.int8)
        open_[np.asarray(chosen, dtype=np.int64)] = 1
        return np.asarray(self.pattern @ open_, dtype=np.int64).ravel()


# --------------------------------------------------------------------------- plans


class SolveStatus(str, enum.Enum):
    """How far the solver got; a status is data, not an exception."""

    OPTIMAL = "optimal"  #: proven optimal (within the relative gap asked for)
    FEASIBLE = "feasible"  #: a plan with a proven bound, stopped by the time limit
    HEURISTIC = "heuristic"  #: a plan without a bound from the MIP (greedy or local search)
    INFEASIBLE = "infeasible"  #: no plan satisfies the constraints
    EMPTY = "empty"  #: nothing to decide (no coverable demand or no sites)


@dataclass(frozen=True, eq=False)
class Plan:
    """The sites a model chose and how good the choice is proven to be.

    ``objective`` is in the model's own sense (sites or cost for LSCP, people
    for MCLP); ``bound`` is the best proven bound on it and ``gap`` the
    relative distance between the two (0 when optimal).  ``reach`` is the
    relation the plan was solved on (what :func:`geocover.audit` re-checks).
    """

    sites: np.ndarray
    model: str
    objective: float
    bound: float
    status: SolveStatus
    solver: str
    seconds: float
    coverage_count: np.ndarray
    covered_weight: float
    uncoverable_weight: float
    total_weight: float
    params: Mapping[str, Any] = field(default_factory=dict)
    log: tuple[str, ...] = ()
    reach: "Reach | None" = field(default=None, repr=False)  #: the relation the plan was made on

    def __post_init__(self) -> None:
        chosen = np.unique(np.asarray(self.sites, dtype=np.int64))
        object.__setattr__(self, "sites", _freeze(chosen))
        object.__setattr__(self, "coverage_count", _freeze(np.asarray(self.coverage_count, dtype=np.int64)))
        object.__setattr__(self, "status", SolveStatus(self.status))
        object.__setattr__(self, "params", dict(self.params))
        object.__setattr__(self, "log", tuple(self.log))

    @property
    def gap(self) -> float:
        """Relative gap between objective and bound.

        0 for an exact optimum; an OPTIMAL plan solved to a relative gap
        tolerance shows the small gap its bound really proves.
        """
        if self.status == SolveStatus.EMPTY:
            return 0.0
        if not (np.isfinite(self.bound) and np.isfinite(self.objective)):
            return 0.0 if self.status == SolveStatus.OPTIMAL else float("inf")
        return abs(self.objective - self.bound) / max(abs(self.objective), 1e-9)

    @property
    def left_out_weight(self) -> float:
        """People some site could reach but the plan does not cover."""
        return max(self.total_weight - self.covered_weight - self.uncoverable_weight, 0.0)

    def summary(self) -> dict[str, Any]:
        """A plain dict for manifests and printing."""
        return {
            "model": self.model,
            "sites_chosen": int(len(self.sites)),
            "objective": float(self.objective),
            "bound": float(self.bound),
            "gap": float(self.gap),
            "status": self.status.value,
            "solver": self.solver,
            "seconds": round(float(self.seconds), 3),
            "people_total": float(self.total_weight),
            "people_covered": float(self.covered_weight),
            "people_uncoverable": float(self.uncoverable_weight),
            "people_left_out": float(self.left_out_weight),
        }
