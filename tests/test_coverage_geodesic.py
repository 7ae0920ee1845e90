"""Geodesic coverage checked against Karney (2013) and the geographiclib package.

Reference values: C. F. F. Karney, "Algorithms for geodesics", J. Geodesy 87:43-55 (2013),
worked examples on WGS84 (recalled from memory, each also re-checked here against geographiclib).
"""

from __future__ import annotations

import numpy as np
import pytest
from geographiclib.geodesic import Geodesic
from pyproj import Transformer

from geocover.coverage import reach_geodesic
from geocover.errors import CRSError, InputError, ParameterError
from geocover.values import Demand, Metric, Sites

WGS84 = "EPSG:4326"
MM = 1e-3


def _one(lonlat_d, lonlat_s, limit, crs=WGS84, **kw):
    d = Demand(np.atleast_2d(np.asarray(lonlat_d, float)), [1.0], crs=crs)
    s = Sites(np.atleast_2d(np.asarray(lonlat_s, float)), crs=crs)
    return reach_geodesic(d, s, limit, **kw)


def test_karney_direct_example():
    # Karney (2013), direct problem on WGS84 (from memory): lat1 = 40, azi1 = 30, s12 = 10,000 km
    # -> lat2 = 41.79331020506, lon2 = 137.84490004377 (lon1 = 0)
    lat2, lon2 = 41.79331020506, 137.84490004377
    geographiclib = Geodesic.WGS84.Direct(40.0, 0.0, 30.0, 10e6)  # geographiclib package
    assert abs(geographiclib["lat2"] - lat2) < 1e-11 and abs(geographiclib["lon2"] - lon2) < 1e-11
    r = _one([lon2, lat2], [0.0, 40.0], 10e6 + 0.01)
    assert r.matrix.nnz == 1
    assert abs(r.matrix.data[0] - 10e6) < MM
    assert _one([lon2, lat2], [0.0, 40.0], 10e6 - 0.01).matrix.nnz == 0


def test_karney_inverse_examples():
    # Karney (2013) inverse examples on WGS84 (from memory):
    #   nearly antipodal: lat1 = -30, lat2 = 29.9, lon12 = 179.8 -> s12 = 19,989,832.827610 m
    #   very short:       lat1 = -30.12345, lat2 = -30.12344, lon12 = 0.00005 -> s12 = 4.944208 m
    for (lat1, lat2, lon12), s12 in (((-30.0, 29.9, 179.8), 19989832.827610), ((-30.12345, -30.12344, 0.00005), 4.944208)):
        ref = Geodesic.WGS84.Inverse(lat1, 0.0, lat2, lon12)["s12"]  # geographiclib package
        assert abs(ref - s12) < MM
        r = _one([lon12, lat2], [0.0, lat1], s12 * 1.001)
        assert abs(r.matrix.data[0] - ref) < MM


def _random_lonlat(rng, n, lon_c, lat_c, spread):
    lon = lon_c + rng.uniform(-spread, spread, n)
    lat = np.clip(lat_c + rng.uniform(-spread, spread, n), -90, 90)
    lon = (lon + 180.0) % 360.0 - 180.0
    return np.column_stack([lon, lat])


@pytest.mark.parametrize(
    "lon_c, lat_c, spread, limit",
    [
        (180.0, 10.0, 0.5, 30_000.0),  # straddles the antimeridian
        (25.0, 89.7, 0.6, 40_000.0),  # around the north pole
        (-60.0, -89.8, 0.5, 25_000.0),  # around the south pole
        (10.0, 45.0, 2.0, 100_000.0),  # mid latitudes
    ],
)
def test_matches_geographiclib_for_every_pair(lon_c, lat_c, spread, limit):
    rng = np.random.default_rng(int(abs(lon_c) + abs(lat_c)))
    d = _random_lonlat(rng, 150, lon_c, lat_c, spread)
    s = _random_lonlat(rng, 25, lon_c, lat_c, spread)
    reach = reach_geodesic(Demand(d, np.ones(len(d)), crs=WGS84), Sites(s, crs=WGS84), limit)
    geo = Geodesic.WGS84  # geographiclib package, every pair measured
    ref = np.array([[geo.Inverse(a[1], a[0], b[1], b[0])["s12"] for b in s] for a in d])
    dense = reach.matrix.toarray()
    covered = np.zeros(ref.shape, bool)
    rows = np.repeat(np.arange(len(d)), np.diff(reach.matrix.indptr))
    covered[rows, reach.matrix.indices] = True
    np.testing.assert_array_equal(covered, ref <= limit)
    assert covered.sum() > 20 and (~covered).sum() > 20  # the instance tests both sides of the limit
    np.testing.assert_allclose(dense[covered], ref[covered], rtol=0, atol=MM)
    assert reach.rule.metric == Metric.GEODESIC and reach.rule.unit == "m"


def test_projected_input_is_measured_on_its_ellipsoid():
    rng = np.random.default_rng(5)
    crs = "EPSG:32633"
    xy_d = rng.uniform([400_000, 5_500_000], [600_000, 5_700_000], (120, 2))
    xy_s = rng.uniform([400_000, 5_500_000], [600_000, 5_700_000], (15, 2))
    reach = reach_geodesic(Demand(xy_d, np.ones(120), crs=crs), Sites(xy_s, crs=crs), 40_000.0)
    tr = Transformer.from_crs(crs, WGS84, always_xy=True)
    ld, ls = np.column_stack(tr.transform(*xy_d.T)), np.column_stack(tr.transform(*xy_s.T))
    geo = Geodesic.WGS84  # geographiclib package
    ref = np.array([[geo.Inverse(a[1], a[0], b[1], b[0])["s12"] for b in ls] for a in ld])
    dense = reach.matrix.toarray()
    mask = ref <= 40_000.0
    assert np.count_nonzero(reach.matrix.toarray() > 0) == mask.sum()
    np.testing.assert_allclose(dense[mask], ref[mask], atol=MM, rtol=0)


def test_ellipsoid_override():
    grs80 = Geodesic(6378137.0, 1 / 298.257222101)  # geographiclib with the GRS80 flattening
    ref = grs80.Inverse(0.0, 0.0, 1.0, 1.0)["s12"]
    r = _one([1.0, 1.0], [0.0, 0.0], 200_000.0, ellipsoid="GRS80")
    assert abs(r.matrix.data[0] - ref) < MM
    intl = _one([1.0, 1.0], [0.0, 0.0], 200_000.0, ellipsoid="intl").matrix.data[0]
    assert abs(intl - ref) > 1.0  # a different ellipsoid really is used
    with pytest.raises(ParameterError) as err:
        _one([1.0, 1.0], [0.0, 0.0], 1000.0, ellipsoid="potato")
    assert err.value.param == "ellipsoid"


def test_errors():
    with pytest.raises(ParameterError) as err:
        _one([0.0, 0.0], [0.0, 0.0], -1.0)
    assert err.value.param == "limit"
    with pytest.raises(InputError, match="swapped"):
        _one([45.0, 120.0], [0.0, 0.0], 1000.0)
    with pytest.raises(CRSError):
        reach_geodesic(Demand(np.zeros((1, 2)), [1.0]), Sites(np.zeros((1, 2))), 10.0)
    with pytest.raises(CRSError, match="reproject"):
        reach_geodesic(Demand(np.zeros((1, 2)), [1.0], crs=WGS84), Sites(np.zeros((1, 2)), crs="EPSG:3857"), 10.0)


def test_same_point_is_an_explicit_zero():
    r = _one([12.0, 55.0], [12.0, 55.0], 1.0)
    assert r.matrix.nnz == 1 and r.matrix.data[0] == 0.0
