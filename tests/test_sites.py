"""Screening of candidate sites by exclusion zones, setbacks, study area and existing sites.

Independent checks: kept sites' clearance is re-measured with shapely's
``distance`` on the raw geometries as read back from the GeoPackage (GEOS
exact distance), nearest-zone distances against a brute-force minimum, close
pairs against scipy's ``pdist`` (all pairwise distances).
"""

from __future__ import annotations

import logging

import geopandas as gpd
import numpy as np
import pytest
import shapely
from scipy.spatial.distance import pdist, squareform
from shapely.geometry import Point, Polygon, box

from geocover.errors import InputError, ParameterError
from geocover.sites import Exclusion, close_pairs, screen_sites, screened_sites_frame, screening_summary
from geocover.values import SiteRole, Verdict

CRS = "EPSG:32626"
X0, Y0 = 500_000.0, 4_000_000.0  # somewhere in UTM zone 26N


@pytest.fixture(scope="module")
def world(tmp_path_factory):
    """A tiny GeoPackage: candidate points and parcels, flood zones, protected land, existing stations (read only)."""
    path = tmp_path_factory.mktemp("world") / "world.gpkg"
    xs, ys = np.meshgrid(np.arange(0, 2000, 100.0), np.arange(0, 1000, 100.0))
    points = gpd.GeoDataFrame(
        {"name": [f"p{i}" for i in range(xs.size)], "cost": np.linspace(1, 3, xs.size)},
        geometry=gpd.points_from_xy(X0 + xs.ravel() + 30, Y0 + ys.ravel() + 30),
        crs=CRS,
    )
    flood = gpd.GeoDataFrame(
        {"zone_class": ["A", "AE", "X"], "depth_m": [0.2, 1.5, 0.0]},
        geometry=[
            box(X0 + 200, Y0 + 200, X0 + 500, Y0 + 400),
            Polygon([(X0 + 1000, Y0), (X0 + 1300, Y0 + 500), (X0 + 1100, Y0 + 700)]),
            box(X0 + 1600, Y0 + 600, X0 + 1900, Y0 + 900),
        ],
        crs=CRS,
    )
    protected = gpd.GeoDataFrame(
        {"kind": ["reserve"]}, geometry=[Point(X0 + 700, Y0 + 800).buffer(120)], crs=CRS
    )
    parcels = gpd.GeoDataFrame(
        {"name": ["inside", "straddles", "clear", "near"], "cost": [5.0, 6.0, 7.0, 8.0]},
        geometry=[
            box(X0 + 250, Y0 + 250, X0 + 300, Y0 + 300),  # inside flood A
            box(X0 + 450, Y0 + 350, X0 + 700, Y0 + 380),  # point-on-surface may be outside, footprint overlaps
            box(X0 + 800, Y0 + 100, X0 + 900, Y0 + 150),
            box(X0 + 520, Y0 + 200, X0 + 560, Y0 + 260),  # 20 m from flood A
        ],
        crs=CRS,
    )
    existing = gpd.GeoDataFrame(
        {"name": ["old_north", "old_flooded"], "status": ["optional", "kept"], "cost": [0.5, 0.0]},
        geometry=[Point(X0 + 1500, Y0 + 100), Point(X0 + 300, Y0 + 300)],
        crs=CRS,
    )
    for name, frame in (
        ("candidate_points", points), ("flood_zones", flood), ("protected_land", protected),
        ("candidate_parcels", parcels), ("existing_stations", existing),
    ):
        frame.to_file(path, layer=name, driver="GPKG")
    return path


def _kept_footprints(path, layer, record, n_existing=0):
    raw = gpd.read_file(path, layer=layer)
    kept = record.site_index[n_existing:] >= 0
    return np.asarray(raw.geometry.array)[kept]


@pytest.mark.parametrize("setback", [0.0, 25.0, 80.0])
def test_kept_points_clear_every_zone_by_the_setback(world, setback):
    sites, record = screen_sites(
        f"{world}:candidate_points",
        exclude=[Exclusion(f"{world}:flood_zones", setback_m=setback), Exclusion(f"{world}:protected_land", setback_m=setback)],
    )
    kept = _kept_footprints(world, "candidate_points", record)
    zones = np.concatenate([
        np.asarray(gpd.read_file(world, layer=lyr).geometry.array) for lyr in ("flood_zones", "protected_land")
    ])
    # independent check: GEOS distance on the raw geometries, every kept site against every zone
    dist = shapely.distance(kept[:, None], zones[None, :])
    assert (dist >= setback).all()
    if setback == 0:
        assert not shapely.intersects(kept[:, None], zones[None, :]).any()
    # and every rejected one really is too close to the zone named in its record
    raw = gpd.read_file(world, layer="candidate_points")
    # feature ids are the GeoPackage fids a desktop GIS shows
    names = {lyr: gpd.read_file(world, layer=lyr, fid_as_index=True) for lyr in ("flood_zones", "protected_land")}
    rejected = np.flatnonzero(record.verdict == Verdict.EXCLUDED.value)
    assert len(rejected) > 0
    for i in rejected:
        zone = names[record.layer[i]].geometry.loc[record.feature[i]]
        d = raw.geometry.iloc[i].distance(zone)
        assert (d < setback) if setback > 0 else raw.geometry.iloc[i].intersects(zone)
    assert len(sites) == int((record.site_index >= 0).sum())
    assert (record.verdict[record.site_index >= 0] == Verdict.KEPT.value).all()


def test_setback_boundary_is_inclusive_for_kept_sites():
    zone = gpd.GeoDataFrame(geometry=[box(0, 0, 100, 100)], crs=CRS)
    cands = gpd.GeoDataFrame(geometry=[Point(150, 50), Point(149.999, 50), Point(200, 200)], crs=CRS)
    sites, record = screen_sites(cands, exclude=[Exclusion(zone, setback_m=50, name="zone")])
    # exactly 50 m away is "at least 50 m away": kept; 49.999 m is not
    assert record.verdict.tolist() == ["kept", "excluded", "kept"]
    assert record.rule[1] == "within 50 m of zone"
    np.testing.assert_allclose(record.nearest_exclusion_m, [50.0, 49.999, np.hypot(100, 100)])
    # a site on the zone's boundary is inside it when there is no setback
    touching = gpd.GeoDataFrame(geometry=[Point(100, 50), Point(100.001, 50)], crs=CRS)
    _, rec0 = screen_sites(touching, exclude=[Exclusion(zone, name="zone")])
    assert rec0.verdict.tolist() == ["excluded", "kept"]
    assert rec0.rule[0] == "inside zone"


def test_parcels_are_screened_by_their_whole_footprint(world):
    sites, record = screen_sites(
        f"{world}:candidate_parcels",
        exclude=[Exclusion(f"{world}:flood_zones", setback_m=30, where="zone_class in ('A', 'AE')")],
        label_field="name",
        cost_field="cost",
    )
    assert record.verdict.tolist() == ["excluded", "excluded", "kept", "excluded"]
    assert record.rule[0] == "within 30 m of flood_zones where zone_class in ('A', 'AE')"
    assert record.layer[0] == "flood_zones" and record.feature[0] == 1  # the first feature's fid
    # the parcel's representative point lies inside the parcel
    parcels = gpd.read_file(world, layer="candidate_parcels")
    assert shapely.contains_xy(np.asarray(parcels.geometry.array), record.xy[:, 0], record.xy[:, 1]).all()
    assert sites.label.tolist() == ["clear"]
    assert sites.cost.tolist() == [7.0]
    assert sites.source.tolist() == [3]  # the fid of the third candidate
    assert record.site_index.tolist() == [-1, -1, 0, -1]
    # 'near' is 20 m from flood A: the record keeps that distance (to the raw zone, not the buffer)
    assert record.nearest_exclusion_m[3] == pytest.approx(20.0)


def test_where_filter_selects_zones_and_names_unknown_fields(world):
    _, all_zones = screen_sites(f"{world}:candidate_points", exclude=[Exclusion(f"{world}:flood_zones")])
    _, deep = screen_sites(f"{world}:candidate_points", exclude=[Exclusion(f"{world}:flood_zones", where="depth_m >= 0.5")])
    assert set(all_zones.feature[all_zones.verdict == "excluded"]) == {1, 2, 3}  # fids
    assert set(deep.feature[deep.verdict == "excluded"]) == {2}
    with pytest.raises(ParameterError) as err:
        screen_sites(f"{world}:candidate_points", exclude=[Exclusion(f"{world}:flood_zones", where="depth >= 0.5")])
    message = str(err.value)
    assert "no field 'depth'" in message and "zone_class, depth_m" in message


def test_existing_sites_come_first_with_roles_and_are_flagged_not_removed(world, caplog):
    with caplog.at_level(logging.WARNING, logger="geocover.sites"):
        sites, record = screen_sites(
            f"{world}:candidate_points",
            exclude=[Exclusion(f"{world}:flood_zones", setback_m=10)],
            existing=f"{world}:existing_stations",
            existing_role_field="status",
            cost_field="cost",
            label_field="name",
        )
    assert sites.role[:2].tolist() == [SiteRole.OPTIONAL, SiteRole.KEPT]
    assert (sites.role[2:] == SiteRole.CANDIDATE).all()
    assert sites.label[:2].tolist() == ["old_north", "old_flooded"]
    assert sites.cost[:2].tolist() == [0.5, 0.0]
    assert record.site_index[:2].tolist() == [0, 1]
    assert record.verdict[1] == "kept" and record.rule[1].startswith("existing (kept), flagged: within 10 m of flood_zones")
    assert record.layer[1] == "flood_zones" and record.feature[1] == 1
    assert record.rule[0] == "existing (optional)"
    assert any("old_flooded" in r.message for r in caplog.records)
    assert any("old_flooded" in note for note in record.notes)
    # candidates keep their input order after the existing sites
    kept = np.flatnonzero(record.site_index[2:] >= 0)
    assert record.site_index[2:][kept].tolist() == list(range(2, 2 + len(kept)))
    frame = screened_sites_frame(record, sites)
    assert frame["role"].iloc[:2].tolist() == ["existing_optional", "existing_kept"]


def test_existing_without_cost_field_costs_nothing_and_default_role(world):
    sites, _ = screen_sites(
        f"{world}:candidate_points", existing=f"{world}:existing_stations", existing_role="optional", default_cost=2.5
    )
    assert sites.cost[:2].tolist() == [0.0, 0.0]
    assert (sites.cost[2:] == 2.5).all()
    assert (sites.role[:2] == SiteRole.OPTIONAL).all()
    with pytest.raises(ParameterError, match="'kept' or 'optional'"):
        screen_sites(f"{world}:candidate_points", existing=f"{world}:existing_stations", existing_role="maybe")


def test_constraint_layers_in_other_crs_are_reprojected(world, caplog):
    flood = gpd.read_file(world, layer="flood_zones")
    flood_ll = flood.to_crs("EPSG:4326")
    _, base = screen_sites(f"{world}:candidate_points", exclude=[Exclusion(flood, setback_m=40, name="flood")])
    with caplog.at_level(logging.INFO, logger="geocover.layers"):
        _, moved = screen_sites(f"{world}:candidate_points", exclude=[Exclusion(flood_ll, setback_m=40, name="flood")])
    assert moved.verdict.tolist() == base.verdict.tolist()
    np.testing.assert_allclose(moved.nearest_exclusion_m, base.nearest_exclusion_m, atol=1e-3)
    assert any("reprojected from EPSG:4326" in note for note in moved.notes)
    assert any("reprojecting" in r.message for r in caplog.records)


def test_geographic_candidates_get_a_local_working_crs(world):
    cands = gpd.read_file(world, layer="candidate_points").to_crs("EPSG:4326")
    sites, record = screen_sites(cands, exclude=[Exclusion(f"{world}:flood_zones")])
    assert sites.crs == "EPSG:32626"
    assert record.crs == "EPSG:32626"


@pytest.mark.parametrize("threads", [1, 2])
def test_invalid_zone_polygons_are_repaired_and_counted(caplog, monkeypatch, threads):
    from geocover import clearance

    built = []  # the zones each zone grid is built from
    real_build = clearance.ZoneGrid.build.__func__
    monkeypatch.setattr(clearance.ZoneGrid, "build", classmethod(lambda cls, geoms, setback: built.append(geoms) or real_build(cls, geoms, setback)))
    bowtie = Polygon([(0, 0), (100, 100), (100, 0), (0, 100)])  # self-intersecting
    assert not bowtie.is_valid
    zones = gpd.GeoDataFrame(geometry=[bowtie], crs=CRS)
    cands = gpd.GeoDataFrame(geometry=[Point(20, 50), Point(50, 20), Point(200, 50)], crs=CRS)
    with caplog.at_level(logging.WARNING, logger="geocover.sites"):
        _, record = screen_sites(cands, exclude=[Exclusion(zones, name="bowtie")], threads=threads)
    # (20, 50) is in the left triangle of the repaired bow tie, (50, 20) in neither triangle
    assert record.verdict.tolist() == ["excluded", "kept", "kept"]
    assert any("repaired 1 invalid geometry" in note for note in record.notes)
    # with threads a grid is built ahead from the zones as read; it must not be the one screened with
    assert len(built) == threads and shapely.is_valid(built[-1]).all()


def test_invalid_candidates_are_recorded_not_dropped():
    cands = gpd.GeoDataFrame(
        geometry=[Point(0, 0), None, shapely.LineString([(0, 0), (1, 1)]), Polygon()], crs=CRS
    )
    sites, record = screen_sites(cands)
    assert record.verdict.tolist() == ["kept", "invalid", "invalid", "invalid"]
    assert record.rule[1:].tolist() == ["no geometry", "geometry is not a point or a polygon", "empty geometry"]
    assert np.isnan(record.xy[1:]).all() and len(sites) == 1
    frame = screened_sites_frame(record)
    assert frame.geometry.isna().tolist() == [False, True, True, True]


def test_study_area_rejects_outside_points():
    area = gpd.GeoDataFrame(geometry=[box(0, 0, 100, 100)], crs=CRS)
    cands = gpd.GeoDataFrame(geometry=[Point(50, 50), Point(100, 50), Point(150, 50)], crs=CRS)
    _, record = screen_sites(cands, study_area=area)
    assert record.verdict.tolist() == ["kept", "kept", "outside"]


def test_empty_result_says_which_rule_removed_how_many(world):
    zone = gpd.GeoDataFrame(geometry=[box(X0 - 10, Y0 - 10, X0 + 1000, Y0 + 2000)], crs=CRS)
    area = gpd.GeoDataFrame(geometry=[box(X0 - 10, Y0 - 10, X0 + 1000, Y0 + 2000)], crs=CRS)
    with pytest.raises(InputError) as err:
        screen_sites(f"{world}:candidate_points", exclude=[Exclusion(zone, name="everything")], study_area=area)
    message = str(err.value)
    # 20 x 10 grid: the 10 columns at x < 1000 fall in the zone, the other 10 outside the area
    assert "100 inside everything (excluded)" in message
    assert "100 outside study area (outside)" in message


def test_nearest_exclusion_matches_brute_force(world):
    _, record = screen_sites(
        f"{world}:candidate_points",
        exclude=[Exclusion(f"{world}:flood_zones", setback_m=15), Exclusion(f"{world}:protected_land")],
    )
    pts = np.asarray(gpd.read_file(world, layer="candidate_points").geometry.array)
    zones = np.concatenate([
        np.asarray(gpd.read_file(world, layer=lyr).geometry.array) for lyr in ("flood_zones", "protected_land")
    ])
    brute = shapely.distance(pts[:, None], zones[None, :]).min(axis=1)
    np.testing.assert_allclose(record.nearest_exclusion_m, brute, rtol=0, atol=1e-9)
    # parcels: the distance is from the whole footprint
    _, parcels = screen_sites(
        f"{world}:candidate_parcels",
        exclude=[Exclusion(f"{world}:flood_zones", setback_m=15), Exclusion(f"{world}:protected_land")],
    )
    shapes = np.asarray(gpd.read_file(world, layer="candidate_parcels").geometry.array)
    brute = shapely.distance(shapes[:, None], zones[None, :]).min(axis=1)
    np.testing.assert_allclose(parcels.nearest_exclusion_m, brute, rtol=0, atol=1e-9)
    _, none = screen_sites(f"{world}:candidate_points")
    assert np.isinf(none.nearest_exclusion_m).all()


def test_close_pairs_match_all_pairwise_distances():
    rng = np.random.default_rng(7)
    xy = rng.uniform(0, 1000, size=(300, 2))
    pairs = close_pairs(xy, 60.0)
    # independent: scipy pdist, every pair below the spacing
    d = squareform(pdist(xy))
    i, j = np.nonzero(np.triu(d < 60.0, k=1))
    assert pairs.tolist() == np.stack([i, j], axis=1).tolist()
    assert pairs.dtype == np.int64 and pairs.shape[1] == 2


def test_min_spacing_pairs_go_to_sites_but_not_between_two_kept_sites():
    existing = gpd.GeoDataFrame({"status": ["kept", "optional", "kept"]},
                                geometry=[Point(0, 0), Point(10, 0), Point(13, 0)], crs=CRS)
    cands = gpd.GeoDataFrame(geometry=[Point(24, 0), Point(500, 0), Point(505, 0)], crs=CRS)
    sites, record = screen_sites(cands, existing=existing, existing_role_field="status", min_spacing_m="15 m")
    # closer than 15 m: (0, 1) 10 m, (0, 2) 13 m, (1, 2) 3 m, (1, 3) 14 m, (2, 3) 11 m, (4, 5) 5 m.
    # (0, 2) are both kept, so no constraint; kept-optional, optional/kept-candidate and candidate pairs are
    assert sites.close_pairs.tolist() == [[0, 1], [1, 2], [1, 3], [2, 3], [4, 5]]
    assert any("1 pair(s) of kept existing sites are closer" in n for n in record.notes)


def test_lattice_labels_and_duplicate_exclusion_names():
    from geocover.sites import lattice_candidates

    lattice = lattice_candidates(box(0, 0, 300, 200), 100, crs=CRS)
    sites, _ = screen_sites(lattice)
    assert sites.label.tolist()[:3] == ["L0_0", "L0_1", "L0_2"]
    zone = gpd.GeoDataFrame(geometry=[box(0, 0, 10, 10)], crs=CRS)
    with pytest.raises(ParameterError, match="2 exclusion layers are named 'exclusion'"):
        screen_sites(lattice, exclude=[Exclusion(zone), Exclusion(zone)])


def test_summary_counts_per_rule(world):
    _, record = screen_sites(
        f"{world}:candidate_points",
        exclude=[Exclusion(f"{world}:flood_zones"), Exclusion(f"{world}:protected_land", setback_m=50)],
    )
    summary = screening_summary(record)
    assert summary[0]["verdict"] == "kept"
    assert sum(item["count"] for item in summary) == len(record)
    by_rule = {item["rule"]: item["count"] for item in summary}
    assert by_rule["inside flood_zones"] == int((record.layer == "flood_zones").sum())
    assert record.counts()["excluded"] == by_rule["inside flood_zones"] + by_rule["within 50 m of protected_land"]


def test_bad_parameters_are_named(world):
    with pytest.raises(ParameterError, match="setback_m"):
        Exclusion(f"{world}:flood_zones", setback_m=-5)
    with pytest.raises(ParameterError, match="position"):
        Exclusion(f"{world}:flood_zones", where="zone_class in ('A'")
    with pytest.raises(ParameterError, match="cost_field.*no field 'price'.*name, cost"):
        screen_sites(f"{world}:candidate_points", cost_field="price")
    with pytest.raises(ParameterError, match="label_field.*no field 'title'"):
        screen_sites(f"{world}:candidate_points", label_field="title")


def test_existing_sites_alone_in_degrees_get_a_local_working_crs():
    # an audit of today's facilities: no candidates, the facilities in lon/lat place the working CRS
    stations = gpd.GeoDataFrame({"status": ["kept", "optional"]},
                                geometry=[Point(-27.0, 36.1), Point(-26.99, 36.11)], crs="EPSG:4326")
    sites, record = screen_sites(None, existing=stations, existing_role_field="status")
    assert sites.crs == "EPSG:32626" and record.crs == "EPSG:32626"  # UTM zone 26N holds lon -27
    assert sites.role.tolist() == [SiteRole.KEPT, SiteRole.OPTIONAL]
    # the same with an empty candidates layer
    none = gpd.GeoDataFrame(geometry=[], crs="EPSG:4326")
    sites2, _ = screen_sites(none, existing=stations)
    assert sites2.crs == "EPSG:32626" and len(sites2) == 2
    np.testing.assert_allclose(sites2.xy, sites.xy)


def test_a_study_area_without_area_is_refused_not_an_everything_outside():
    from geocover.errors import LayerError

    cands = gpd.GeoDataFrame(geometry=[Point(50, 50)], crs=CRS)
    no_geometry = gpd.GeoDataFrame(geometry=[None], crs=CRS)
    with pytest.raises(LayerError, match="study area: it has no area"):
        screen_sites(cands, study_area=no_geometry)
    with pytest.raises(LayerError, match="study area: it has no area"):
        screen_sites(cands, study_area=shapely.LineString([(0, 0), (100, 100)]))


def test_an_invalid_bare_study_area_is_repaired():
    bowtie = Polygon([(0, 0), (100, 100), (100, 0), (0, 100)])  # self-intersecting
    cands = gpd.GeoDataFrame(geometry=[Point(20, 50), Point(80, 50), Point(50, 20)], crs=CRS)
    _, record = screen_sites(cands, study_area=bowtie)
    # make_valid gives the two triangles meeting at (50, 50): (50, 20) is in neither
    assert record.verdict.tolist() == ["kept", "kept", "outside"]


def test_bad_cost_and_spacing_parameters_are_named_before_reading(tmp_path):
    missing = tmp_path / "not_there.gpkg"  # never read: the parameters fail first
    with pytest.raises(ParameterError, match="default_cost: must be a number"):
        screen_sites(missing, default_cost="cheap")
    with pytest.raises(ParameterError, match="min_spacing_m: must be a distance of 0 m or more"):
        screen_sites(missing, min_spacing_m=-3)


def test_a_polygon_with_no_area_is_called_so_after_repair():
    flat = Polygon([(0, 0), (10, 10), (20, 20), (0, 0)])  # all on one line: make_valid gives lines
    cands = gpd.GeoDataFrame(geometry=[flat, Point(5, 5)], crs=CRS)
    _, record = screen_sites(cands)
    assert record.verdict.tolist() == ["invalid", "kept"]
    assert record.rule[0] == "polygon with no area"


def test_holes_and_multipolygons_are_screened_by_their_real_footprint():
    # a zone with a hole (an island of dry land), a parcel with a hole around a small zone, a two-part parcel
    ring_zone = box(0, 0, 300, 300).difference(box(100, 100, 200, 200))
    small_zone = box(1000, 1000, 1010, 1010)
    zones = gpd.GeoDataFrame(geometry=[ring_zone, small_zone], crs=CRS)
    donut = box(950, 950, 1060, 1060).difference(box(980, 980, 1030, 1030))  # the small zone sits in its hole
    two_part = shapely.MultiPolygon([box(500, 500, 520, 520), box(290, 150, 295, 155)])  # 2nd part in the ring
    cands = gpd.GeoDataFrame(
        geometry=[Point(150, 150), Point(125, 150), donut, two_part, box(600, 600, 620, 620)], crs=CRS
    )
    _, rec0 = screen_sites(cands, exclude=[Exclusion(zones, name="zones")])
    _, rec30 = screen_sites(cands, exclude=[Exclusion(zones, setback_m=30, name="zones")])
    # independent: GEOS distance / intersects on the raw geometries
    raw = np.asarray(cands.geometry.array)
    zg = np.asarray(zones.geometry.array)
    d = shapely.distance(raw[:, None], zg[None, :]).min(axis=1)
    touches = shapely.intersects(raw[:, None], zg[None, :]).any(axis=1)
    assert rec0.verdict.tolist() == np.where(touches, "excluded", "kept").tolist()
    assert rec30.verdict.tolist() == np.where(d < 30, "excluded", "kept").tolist()
    # the point in the island is kept with no setback, 50 m from the shore; the one 25 m from it is not kept at 30
    assert rec0.verdict.tolist() == ["kept", "kept", "kept", "excluded", "kept"]
    assert rec30.verdict.tolist() == ["kept", "excluded", "excluded", "excluded", "kept"]
    np.testing.assert_allclose(rec0.nearest_exclusion_m, d, rtol=0, atol=1e-9)
    np.testing.assert_allclose(rec0.nearest_exclusion_m[[0, 1, 2]], [50.0, 25.0, 20.0])
    # the two-part parcel stands at a point inside one of its parts
    assert shapely.contains_xy(two_part, *rec0.xy[3])


def test_flagged_existing_sites_name_the_zone_feature_or_the_class(tmp_path):
    import rasterio
    from rasterio.transform import from_origin

    from geocover.sites import LandUseMask

    path = tmp_path / "lu.tif"
    with rasterio.open(path, "w", driver="GTiff", width=2, height=1, count=1, dtype="uint8", crs=CRS,
                       transform=from_origin(0, 10, 10, 10), nodata=0) as dst:
        dst.write(np.array([[1, 6]], dtype=np.uint8), 1)
    stations = gpd.GeoDataFrame({"name": ["west", "east", "far"]},
                                geometry=[Point(5, 5), Point(15, 5), Point(500, 5)], crs=CRS)
    zone = gpd.GeoDataFrame(geometry=[box(0, 0, 8, 8)], crs=CRS, index=[7])
    _, record = screen_sites(None, existing=stations, existing_label_field="name",
                             exclude=[Exclusion(zone, name="flood")], land_use=LandUseMask(path, allowed=(1,)))
    notes = " | ".join(record.notes)
    assert "west is kept although it is inside flood (flood, feature 7)" in notes
    assert "east is kept although it is not on land use in classes (1) (lu, class 6)" in notes
    assert "far is kept although it is not on land use in classes (1) (lu, nodata or off the raster)" in notes


def test_bad_costs_and_roles_name_the_feature_id_a_user_sees(world):
    # the GeoPackage fid of the second parcel is 2 (row 1)
    parcels = gpd.read_file(world, layer="candidate_parcels", fid_as_index=True)
    parcels["cost"] = parcels["cost"].astype(object)
    parcels.loc[2, "cost"] = "n/a"
    with pytest.raises(InputError, match="holds 'n/a' at feature 2, not a number"):
        screen_sites(parcels, cost_field="cost")
    parcels.loc[2, "cost"] = -1.0
    with pytest.raises(InputError, match="has cost -1.0 at feature 2; costs must be finite and 0 or more"):
        screen_sites(parcels, cost_field="cost")
    stations = gpd.read_file(world, layer="existing_stations", fid_as_index=True)
    stations.loc[2, "status"] = "maybe"
    with pytest.raises(InputError, match="holds 'maybe' at feature 2"):
        screen_sites(None, existing=stations, existing_role_field="status")


def test_points_with_non_finite_coordinates_are_rejected_not_a_crash():
    # a point with a NaN or infinite coordinate has no place: GEOS calls it invalid and make_valid cannot repair it
    cands = gpd.GeoDataFrame(
        geometry=[Point(X0, Y0), Point(np.nan, Y0), shapely.MultiPoint([(X0, Y0), (np.inf, Y0)]), Point(X0 + 100, Y0)],
        crs=CRS,
    )
    zones = gpd.GeoDataFrame(geometry=[Point(np.inf, Y0), Point(X0 + 10, Y0)], crs=CRS)
    sites, record = screen_sites(cands, exclude=[Exclusion(zones, setback_m=5, name="wells")])
    assert record.verdict.tolist() == ["kept", "invalid", "invalid", "kept"]
    assert record.rule[1] == record.rule[2] == "point with a non-finite coordinate"
    assert len(sites) == 2
    # the non-finite well is left out (with a note); the other one is 10 m and 90 m away
    np.testing.assert_allclose(record.nearest_exclusion_m[[0, 3]], [10.0, 90.0], rtol=0, atol=1e-9)
    assert any("1 point(s) with a non-finite coordinate" in note for note in record.notes)
