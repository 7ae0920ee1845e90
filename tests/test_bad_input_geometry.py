"""Messy geometry: invalid polygons are repaired and counted, mixed and empty geometries are
named or screened out with a reason, far-away points are reported; and a study where nobody can
be reached is a clear, complete result rather than a crash."""

from __future__ import annotations

import json

import numpy as np
import pytest

from _studykit import CRS, STUDY, X0, Y0, assert_clean_exit, edit, far_grid, invoke, write_study

import geocover as gc
from geocover.errors import InputError, LayerError

BOWTIE = [(X0, Y0), (X0 + 500, Y0 + 500), (X0 + 500, Y0), (X0, Y0 + 500)]  # self-intersecting ring


def _frame(geoms, **fields):
    import geopandas as gpd

    return gpd.GeoDataFrame(fields, geometry=geoms, crs="EPSG:32626")


def test_invalid_population_polygons_are_repaired_counted_and_keep_their_people():
    from shapely.geometry import Polygon, box

    areas = _frame([Polygon(BOWTIE), box(X0 + 600, Y0, X0 + 700, Y0 + 100), Polygon(BOWTIE)],
                   pop=[10.0, 5.0, 7.0])
    for placement in ("centroid", "inside"):
        demand = gc.demand_from_areas(areas, population="pop", placement=placement)
        assert demand.total == pytest.approx(22.0)  # nobody lost in the repair
        assert "repaired 2 invalid polygon(s) with make_valid" in demand.summary["notes"]


def test_invalid_candidate_parcels_are_repaired_and_counted():
    from shapely.geometry import Point, Polygon

    sites, record = gc.screen_sites(_frame([Polygon(BOWTIE), Point(X0 + 900, Y0)], parcel=["A", "B"]))
    assert len(sites) == 2
    assert any("repaired 1 invalid geometry" in note for note in record.notes)


def test_mixed_geometry_types_in_population_areas_are_named():
    from shapely.geometry import LineString, Point, box

    areas = _frame([Point(X0, Y0), box(X0, Y0, X0 + 10, Y0 + 10), LineString([(X0, Y0), (X0 + 5, Y0)])], pop=[1.0, 2.0, 3.0])
    with pytest.raises(LayerError, match=r"2 feature\(s\) that are not polygons \(ids 0, 2\); keep only polygons"):
        gc.demand_from_areas(areas, population="pop")  # an in-memory frame: its own index


def test_mixed_and_empty_candidate_geometries_are_screened_out_with_a_reason():
    from shapely.geometry import LineString, Point, Polygon, box

    geoms = [Point(X0, Y0), box(X0, Y0, X0 + 10, Y0 + 10), LineString([(X0, Y0), (X0 + 5, Y0)]), Polygon(), None]
    sites, record = gc.screen_sites(_frame(geoms, parcel=list("ABCDE")))
    assert len(sites) == 2
    assert list(record.verdict) == ["kept", "kept", "invalid", "invalid", "invalid"]
    assert list(record.rule[2:]) == ["geometry is not a point or a polygon", "empty geometry", "no geometry"]
    assert record.counts() == {"kept": 2, "invalid": 3}


def test_population_with_no_geometry_is_named(tiny):
    import geopandas as gpd
    from shapely.geometry import Polygon, box

    gpd.GeoDataFrame({"pop": [1.0, 2.0, 3.0]}, geometry=[Polygon(), box(X0, Y0, X0 + 100, Y0 + 100), None],
                     crs="EPSG:32626").to_file(tiny["dir"] / "areas.gpkg", layer="a")
    study = write_study(tiny["dir"], edit(STUDY, ('grid = "pop.tif"', 'areas = "areas.gpkg:a"\npopulation = "pop"')))
    result = invoke("study", str(study), "--out", str(tiny["dir"] / "out"))
    assert_clean_exit(result, 1, "population areas", "2 feature(s)", "people but no geometry", "ids 1, 3")


def test_candidates_far_outside_the_study_area_are_screened_out():
    from shapely.geometry import Point, box

    cands = _frame([Point(X0 + 500, Y0 + 500), Point(X0 + 900_000, Y0)], parcel=["near", "far"])
    area = _frame([box(X0, Y0, X0 + 2000, Y0 + 2000)])
    sites, record = gc.screen_sites(cands, study_area=area, label_field="parcel")
    assert list(sites.label) == ["near"]
    assert list(record.verdict) == ["kept", "outside"] and record.rule[1] == "outside study area"


def test_every_candidate_screened_out_says_why_for_each(tiny):
    from shapely.geometry import Point, box

    cands = _frame([Point(X0 + 900_000, Y0), Point(X0 + 1000, Y0 + 1000)], parcel=["far", "wet"])
    with pytest.raises(InputError) as info:
        gc.screen_sites(cands, study_area=_frame([box(X0, Y0, X0 + 2000, Y0 + 2000)]),
                        exclude=[gc.Exclusion(_frame([box(X0 + 900, Y0 + 900, X0 + 1100, Y0 + 1100)]), setback_m=10)])
    msg = str(info.value)
    assert "no candidate site is left after screening all 2" in msg
    assert "outside study area (outside)" in msg and "(excluded)" in msg and "Relax a rule" in msg


def test_population_cells_outside_the_clip_are_dropped_and_counted(tiny):
    from shapely.geometry import box

    clip = _frame([box(X0, Y0, X0 + 1000, Y0 + 2000)])  # the western half of the 2 x 2 km grid
    full = gc.demand_from_grid(tiny["grid"])
    half = gc.demand_from_grid(tiny["grid"], clip=clip)
    # centre mode: exactly the cells whose centres are west of the clip's edge remain
    assert half.total == pytest.approx(full.weight[full.xy[:, 0] < X0 + 1000].sum())
    assert half.total < full.total
    assert (half.xy[:, 0] < X0 + 1000).all()
    assert half.summary["people_in"] - half.summary["people_out"] == pytest.approx(full.total - half.total)


@pytest.mark.parametrize("twist", ["bowtie", "crossing"])
def test_a_self_intersecting_study_area_is_repaired_for_the_service_areas_too(tiny, twist):
    import geopandas as gpd
    import pyogrio
    import shapely
    from shapely.geometry import Polygon

    x0, y0 = X0, Y0
    if twist == "bowtie":  # two triangles meeting in the middle: its own area is 0
        ring = [(x0, y0), (x0 + 2000, y0 + 2000), (x0 + 2000, y0), (x0, y0 + 2000)]
    else:  # the district with one edge crossing another near a corner
        ring = [(x0, y0), (x0 + 2000, y0), (x0 + 2000, y0 + 2000), (x0, y0 + 2000), (x0 + 100, y0 - 100)]
    area = Polygon(ring)
    assert not area.is_valid
    # with a second feature: the union of the raw parts is a GEOS topology error
    parts = [area, shapely.box(x0 + 2100, y0, x0 + 2300, y0 + 200)]
    gpd.GeoDataFrame({"name": ["district", "annex"]}, geometry=parts, crs=CRS).to_file(tiny["gpkg"], layer="area")
    study = write_study(tiny["dir"])
    result = invoke("study", str(study), "--out", str(tiny["dir"] / "out"))
    assert result.exit_code == 0, result.output
    repaired = shapely.union_all(shapely.make_valid(np.array(parts, dtype=object)))
    served = pyogrio.read_dataframe(tiny["dir"] / "out" / "study.gpkg", layer="service_areas")
    assert len(served) and (served.geometry.area > 0).all()
    # clipped to the repaired area (to GEOS's precision), not to nothing and not left unclipped
    assert (served.geometry.difference(repaired).area < 1e-6 * served.geometry.area).all()


# ----------------------------------------------------------------------------- nothing coverable


@pytest.mark.parametrize("kind", ["cover-most", "cover-all", "cover-twice", "cover-target"])
def test_nobody_reachable_is_an_empty_plan_and_everyone_uncovered(tiny, kind):
    import pyogrio

    far_grid(tiny["dir"])  # 400 people, 50 km east of every site
    model = {"cover-most": "sites = 2", "cover-all": "", "cover-twice": "sites = 2", "cover-target": 'share = "90 %"'}[kind]
    text = edit(STUDY, ('existing = "tiny.gpkg:stations"\n', ""), ('kind = "cover-most"\nsites = 2', f'kind = "{kind}"\n{model}'))
    out = tiny["dir"] / "out"
    result = invoke("study", str(write_study(tiny["dir"], text)), "--out", str(out))
    text_out = assert_clean_exit(result, 0, "sites chosen:       0", "400 beyond reach of any site")
    plan = json.loads((out / "manifest.json").read_text())["plan"]
    assert plan["sites_chosen"] == 0 and plan["people_covered"] == 0 and plan["people_uncoverable"] == 400
    assert pyogrio.read_info(out / "study.gpkg", layer="plan_sites")["features"] == 0
    uncovered = pyogrio.read_dataframe(out / "study.gpkg", layer="uncovered")
    assert uncovered["people"].sum() == pytest.approx(400.0)
    assert set(uncovered["reason"]) == {"unreachable"}
    assert (out / "report.html").stat().st_size > 0, text_out


def test_nobody_reachable_with_existing_sites_keeps_them_open(tiny):
    import pyogrio

    far_grid(tiny["dir"])
    out = tiny["dir"] / "out"
    result = invoke("study", str(write_study(tiny["dir"])), "--out", str(out))
    assert_clean_exit(result, 0, "people served:      0 of 400")
    plan_sites = pyogrio.read_dataframe(out / "study.gpkg", layer="plan_sites")
    assert list(plan_sites["role"]) == ["existing_kept"]  # kept sites stay open; no new site is opened
    assert pyogrio.read_dataframe(out / "study.gpkg", layer="uncovered")["people"].sum() == pytest.approx(400.0)


def test_nobody_reachable_in_the_python_api():
    demand = gc.Demand(np.array([[0.0, 0.0], [10.0, 0.0]]), [3.0, 4.0], crs="EPSG:32626")
    sites = gc.Sites(np.array([[10_000.0, 0.0]]), crs="EPSG:32626")
    reach = gc.reach_planar(demand, sites, limit_m=100)
    for plan in (gc.cover_all(reach), gc.cover_most(reach, sites=1)):
        assert len(plan.sites) == 0 and plan.status == gc.SolveStatus.EMPTY
        assert plan.covered_weight == 0 and plan.uncoverable_weight == 7.0
