"""Parameter groups shared by several tools and by the study-file sections.

A study file's ``[demand]``, ``[sites]``, ``[service]`` and ``[model]``
sections take exactly the parameters of these groups, so a key means the
same thing on the command line, in Python and in a study file.
"""

from __future__ import annotations

from ..choices import (
    BadValues,
    ClipMode,
    ExistingRole,
    GridValues,
    LatticeShape,
    ModelKind,
    Placement,
    ServiceMetric,
    SolverName,
)
from .params import (
    Choice,
    Distance,
    Duration,
    ExclusionList,
    FieldName,
    Flag,
    IntList,
    Number,
    OutputFolder,
    Raster,
    Share,
    Text,
    VectorLayer,
)

__all__ = ["DEMAND", "SITES", "SERVICE", "MODEL", "OUTPUT", "CRS"]

CRS = (
    Text("crs", "working CRS, projected in metres (e.g. EPSG:32626); default: the inputs' own, or a local one", None),
)

DEMAND = (
    Raster("grid", "population raster (GeoTIFF); one of grid, areas or points", None),
    Number("band", "band of the population raster", 1, minimum=1, integer=True),
    Choice("values", "what the band holds: people per cell or per km2", GridValues.COUNT, choices=GridValues),
    Number("coarsen", "sum cells in blocks of this many cells per side before siting", 1, minimum=1, integer=True),
    VectorLayer("clip", "study-area polygons to clip the grid to", None),
    Choice("clip_mode", "edge cells: by centre, or by the share of area inside", ClipMode.CENTRE, choices=ClipMode),
    Choice("bad_values", "negative or non-finite cells: an error, or treated as zero", BadValues.ERROR, choices=BadValues),
    VectorLayer("areas", "polygon layer with a population field (census-like areas)", None),
    VectorLayer("points", "point layer with a weight field (address points, buildings)", None),
    FieldName("population", "population (or weight) field of areas or points", None),
    Choice("placement", "where an area's people go", Placement.CENTROID, choices=Placement),
    Raster("weight_raster", "raster that spreads each area's people (placement = spread)", None),
    Distance("spread_spacing", "lattice spacing for spreading areas without a weight raster", None),
)

SITES = (
    VectorLayer("candidates", "candidate sites: points, or parcel polygons", None),
    Distance("lattice_spacing", "instead of candidates: a lattice over the study area at this spacing", None),
    Choice("lattice_shape", "lattice shape", LatticeShape.HEX, choices=LatticeShape),
    VectorLayer("study_area", "study-area polygons (for lattices, service areas and the map)", None),
    FieldName("cost_field", "field with each candidate's opening cost", None),
    Number("default_cost", "opening cost where there is no cost field", 1.0, minimum=0.0),
    FieldName("label_field", "field with the candidates' names", None),
    VectorLayer("existing", "existing facilities (points)", None),
    FieldName("existing_role_field", "field saying 'kept' or 'optional' per existing facility", None),
    FieldName("existing_label_field", "field with the existing facilities' names", None),
    Choice("existing_role", "role of existing facilities without a role field", ExistingRole.KEPT, choices=ExistingRole),
    ExclusionList("exclude", "exclusion zones: layer, optional setback and filter (repeatable)", ()),
    Raster("land_use", "categorical land-use raster", None),
    IntList("allowed_classes", "land-use classes a site may stand on", None),
    IntList("forbidden_classes", "land-use classes a site may not stand on", None),
    Share("min_share", "least share of a parcel on allowed land use", 0.5),
    Distance("min_spacing", "least distance between two chosen sites", None),
    Number("screen_threads", "threads that screen the candidates (default: one per core, at most 4)", None,
           minimum=1, maximum=256, integer=True),
)

SERVICE = (
    Choice("metric", "how service is measured", ServiceMetric.PLANAR, choices=ServiceMetric),
    Distance("distance", "service distance (planar or geodesic), e.g. '5 km'", None),
    Duration("time", "service travel time (network), e.g. '8 min'", None),
    VectorLayer("roads", "road lines for travel time", None),
    FieldName("speed_field", "road speed field in km/h", None),
    FieldName("class_field", "road class field (with the default speed table)", None),
    FieldName("oneway_field", "one-way flag field (1 = digitised direction only)", None),
    Number("offroad_speed_kmh", "speed off the road network, km/h", 5.0, minimum=0.1, unit="km/h"),
    Distance("max_snap", "farthest a point may be from a road", 500.0),
    Duration("turn_penalty", "delay added at every road junction", 0.0, allow_zero=True),
    Number("memory_gb", "memory the coverage relation may use, GB", 8.0, minimum=0.01, unit="GB"),
    Number("road_processes", "processes for the road travel-time searches (default: one per core for big jobs on "
           "Linux, at most 4)", None, minimum=1, maximum=256, integer=True),
)

MODEL = (
    Choice("kind", "which model", ModelKind.COVER_MOST, choices=ModelKind),
    Number("sites", "how many new sites (cover-most, cover-twice)", None, minimum=0, integer=True),
    Number("budget", "budget for opening costs (cover-most)", None, minimum=0.0),
    Share("share", "coverage share to reach (cover-target)", None),
    Share("first_floor", "least share covered once (cover-twice)", 0.9),
    Flag("fewest", "cover-all: fewest sites, ignoring costs", False),
    Number("tradeoff", "also compute the trade-off curve up to this many sites (0 = no)", 0, minimum=0, integer=True),
    Duration("time_limit", "solver time limit per solve", 60.0),
    Share("gap", "relative optimality gap at which the solver may stop", 0.0001),
    Number("threads", "solver threads", 1, minimum=1, maximum=256, integer=True),
    Number("seed", "solver random seed", 0, minimum=0, integer=True),
    Choice("solver", "MIP solver", SolverName.CBC, choices=SolverName),
)

OUTPUT = (OutputFolder("out", "output folder", "geocover_out"),)
