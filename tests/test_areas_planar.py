"""Planar service-area polygons: circles of the service distance, clipped to the study area."""

from __future__ import annotations

import numpy as np
import pytest
import shapely

from geocover.areas import circle_areas, service_areas
from geocover.coverage import reach_planar
from geocover.errors import InputError, ParameterError
from geocover.values import Demand, Sites

UTM = "EPSG:32633"


def _ngon_area(r, n):
    # closed form: area of a regular n-gon inscribed in a circle of radius r
    return 0.5 * n * r * r * np.sin(2 * np.pi / n)


def test_circle_area_is_the_inscribed_polygon():
    s = Sites(np.array([[500.0, 500.0], [0.0, 0.0]]), crs=UTM)
    polys = service_areas((s, [0, 1], 100.0))
    assert len(polys) == 2
    for p, c in zip(polys, s.xy):
        assert p.area == pytest.approx(_ngon_area(100.0, 128), rel=1e-9)
        assert p.centroid.distance(shapely.Point(c)) < 1e-6


def test_clipped_to_the_study_area():
    s = Sites(np.array([[0.0, 0.0], [1000.0, 1000.0], [5000.0, 5000.0]]), crs=UTM)
    study = shapely.box(0.0, -1000.0, 2000.0, 2000.0)  # cuts the first circle in half
    polys = service_areas((s, [0, 1, 2], 100.0), clip=study)
    assert polys[0].area == pytest.approx(_ngon_area(100.0, 128) / 2, rel=1e-9)
    assert polys[1].area == pytest.approx(_ngon_area(100.0, 128), rel=1e-9)
    assert polys[2].is_empty
    assert all(study.buffer(1e-6).contains(p) for p in polys[:2])


def test_from_a_planar_reach_in_chosen_order():
    d = Demand(np.array([[0.0, 0.0]]), [1.0], crs=UTM)
    s = Sites(np.array([[0.0, 0.0], [300.0, 0.0], [600.0, 0.0]]), crs=UTM)
    reach = reach_planar(d, s, 50.0)
    polys = service_areas(reach, chosen=[2, 0])
    assert [round(p.centroid.x) for p in polys] == [600, 0]
    assert len(service_areas(reach)) == 3
    # every demand point the reach says is covered lies in (or on) its site's circle
    assert polys[1].buffer(1e-6).contains(shapely.Point(0.0, 0.0))


def test_bad_inputs():
    s = Sites(np.array([[0.0, 0.0]]), crs=UTM)
    with pytest.raises(InputError, match="chosen"):
        service_areas((s, [3], 10.0))
    with pytest.raises(ParameterError):
        circle_areas(s.xy, 0.0)
    with pytest.raises(InputError, match="empty"):
        service_areas((s, [0], 10.0), clip=shapely.Polygon())
    with pytest.raises(InputError):
        service_areas("not a reach")


def test_both_call_forms():
    s = Sites(np.array([[0.0, 0.0], [1000.0, 1000.0]]), crs=UTM)
    study = shapely.box(0.0, -1000.0, 2000.0, 2000.0)
    reach = reach_planar(Demand(np.array([[0.0, 0.0]]), [1.0], crs=UTM), s, 100.0)
    by_position = service_areas(reach, [0], study)  # (reach, chosen, clip), as the study pipeline calls it
    tuple_clip = service_areas((s, [0], 100.0), study)  # (sites, chosen, limit) then the study area
    for polys in (by_position, tuple_clip):
        assert len(polys) == 1 and polys[0].area == pytest.approx(_ngon_area(100.0, 128) / 2, rel=1e-9)


def test_a_clip_layer_with_an_invalid_part_among_several_is_repaired_not_a_topology_error():
    import geopandas as gpd
    from shapely.geometry import Polygon

    from geocover.values import Sites

    # one edge crosses another near a corner; with a second part, the raw union is a GEOS error
    twisted = Polygon([(0, 0), (2000, 0), (2000, 2000), (0, 2000), (100, -100)])
    parts = [twisted, shapely.box(2100, 0, 2300, 200)]
    with pytest.raises(shapely.errors.GEOSException):
        shapely.union_all(parts)
    repaired = shapely.union_all(shapely.make_valid(np.array(parts, dtype=object)))
    sites = Sites(np.array([[1000.0, 1000.0], [2200.0, 100.0]]), crs="EPSG:32633")
    for clip in (parts, gpd.GeoDataFrame(geometry=parts, crs="EPSG:32633")):
        polys = service_areas((sites, [0, 1], 500.0), clip=clip)
        assert all(p.area > 0 for p in polys)
        assert all(p.difference(repaired).area < 1e-6 * p.area for p in polys)


def test_a_clip_with_a_spike_clips_to_its_polygonal_part_only():
    # make_valid turns a polygon with a spike into a collection of the polygon and a line
    spiked = shapely.Polygon([(0, 0), (1000, 0), (1000, 1000), (0, 1000), (0, 500), (-300, 500), (0, 500)])
    assert shapely.get_type_id(shapely.make_valid(spiked)) == 7
    sites = Sites(np.array([[50.0, 500.0]]), crs="EPSG:32633")
    for clip in (spiked, [spiked, shapely.box(2000, 0, 2100, 100)]):
        (poly,) = service_areas((sites, [0], 400.0), clip=clip)
        assert shapely.get_type_id(poly) in (3, 6)  # a polygon, no line along the spike
        assert poly.area > 0 and poly.difference(shapely.box(0, 0, 1000, 1000)).area < 1e-6 * poly.area
