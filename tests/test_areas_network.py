"""Network and geodesic service-area polygons (display approximations) against closed-form extents."""

from __future__ import annotations

import geopandas as gpd
import numpy as np
import pytest
import shapely
from geographiclib.geodesic import Geodesic
from shapely import LineString, Point

from geocover.areas import service_areas
from geocover.coverage import reach_geodesic
from geocover.errors import InputError, ParameterError
from geocover.network import network_service_areas, reach_network
from geocover.values import Demand, Sites

UTM = "EPSG:32633"


def _straight():
    roads = gpd.GeoDataFrame({"kmh": [36.0]}, geometry=[LineString([(0.0, 0.0), (10_000.0, 0.0)])], crs=UTM)
    d = Demand(np.array([[2500.0, 0.0]]), [1.0], crs=UTM)
    s = Sites(np.array([[2000.0, 0.0], [9000.0, 0.0]]), crs=UTM)
    return reach_network(d, s, roads, 300.0, speed_field="kmh", offroad_speed_kmh=5.0, max_snap_m=100.0)


def test_network_area_along_a_straight_road():
    reach = _straight()
    poly = service_areas(reach, chosen=[0])[0]
    # closed form: 10 m/s for 300 s reaches 3 km each way along the road: x in [0 (road end), 5000]
    road = LineString([(0.0, 0.0), (10_000.0, 0.0)])
    on_road = poly.intersection(road)
    assert on_road.bounds[0] == pytest.approx(0.0, abs=1e-6) and on_road.bounds[2] == pytest.approx(5000.0, abs=1.0)
    # off-road allowance near the site is capped by max_snap_m (100 m), and shrinks towards the far end
    assert poly.contains(Point(2000.0, 99.0)) and not poly.contains(Point(2000.0, 101.0))
    assert not poly.contains(Point(4990.0, 50.0))
    # every covered demand point lies inside its site's area
    assert poly.contains(Point(2500.0, 0.0))


def test_network_areas_one_per_chosen_site_and_clipped():
    reach = _straight()
    polys = network_service_areas(reach, [1, 0], clip=shapely.box(0.0, -1000.0, 8000.0, 1000.0))
    assert len(polys) == 2
    assert polys[0].bounds[2] <= 8000.0 + 1e-6 and polys[0].bounds[0] == pytest.approx(6000.0, abs=1.0)
    with pytest.raises(InputError):
        network_service_areas(reach, [5])
    with pytest.raises(ParameterError) as err:
        network_service_areas(reach, [0], steps=0)
    assert err.value.param == "steps"


def test_geodesic_area_across_the_antimeridian():
    s = Sites(np.array([[179.9, -16.5]]), crs="EPSG:4326")
    d = Demand(np.array([[-179.95, -16.5]]), [1.0], crs="EPSG:4326")
    reach = reach_geodesic(d, s, 30_000.0)
    poly = service_areas(reach)[0]
    ring = np.asarray(poly.exterior.coords)
    # every vertex is 30 km from the centre on WGS84 (geographiclib package)
    dist = [Geodesic.WGS84.Inverse(-16.5, 179.9, lat, lon)["s12"] for lon, lat in ring[::16]]
    np.testing.assert_allclose(dist, 30_000.0, atol=1e-3)
    assert ring[:, 0].max() > 180.0  # the ring is continuous across the antimeridian, not wrapped
    assert poly.contains(Point(-179.95 + 360.0, -16.5))


def test_geodesic_area_in_a_projected_crs():
    s = Sites(np.array([[500_000.0, 5_600_000.0]]), crs=UTM)
    reach = reach_geodesic(Demand(np.array([[500_000.0, 5_600_000.0]]), [1.0], crs=UTM), s, 10_000.0)
    poly = service_areas(reach)[0]
    assert poly.area == pytest.approx(np.pi * 1e8, rel=0.002)  # a UTM circle near the central meridian
