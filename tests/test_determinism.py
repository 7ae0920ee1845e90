"""The same inputs give the same layers and the same plan.

Measured while writing this test: with ``OGR_CURRENT_DATE`` pinned, GDAL
writes byte-identical GeoPackages for the same study (the only differences
otherwise are the ``last_change`` timestamps GDAL stamps into
``gpkg_contents``); ``report.html`` differs only in the solve time it prints;
``manifest.json`` only in its timings.  So the GeoPackage is compared byte for
byte, every layer also feature by feature, and the report and manifest with
their timings masked.
"""

from __future__ import annotations

import json
import re

import pytest

from _studykit import STUDY, edit, make_tiny, write_study

LAYERS = ("plan_sites", "service_areas", "covered_area", "demand", "uncovered", "uncovered_areas", "screened_sites")


def _strip_times(value):
    """The manifest without anything measured by the clock."""
    if isinstance(value, dict):
        return {k: _strip_times(v) for k, v in value.items() if k not in ("timings_s", "seconds")}
    if isinstance(value, list):
        return [_strip_times(v) for v in value]
    return value


@pytest.fixture(scope="module")
def two_runs(tmp_path_factory):
    from geocover.toolbox.study import run_study

    folder = make_tiny(tmp_path_factory.mktemp("determinism"))["dir"]
    # a trade-off curve and coarsening too, so that every step of the flow is exercised
    study = write_study(folder, edit(STUDY, ('grid = "pop.tif"', 'grid = "pop.tif"\ncoarsen = 2'), ("sites = 2", "sites = 2\ntradeoff = 3")))
    outs = [folder / "run_a", folder / "run_b"]
    with pytest.MonkeyPatch.context() as mp:
        mp.setenv("OGR_CURRENT_DATE", "2026-01-01T00:00:00Z")  # pins GDAL's gpkg_contents timestamps
        outcomes = [run_study(study, out)[0] for out in outs]
    return outs, outcomes


def test_same_inputs_same_plan_and_byte_identical_geopackage(two_runs):
    (a, b), (pa, pb) = two_runs
    assert list(pa.plan.sites) == list(pb.plan.sites)
    assert pa.plan.objective == pb.plan.objective and pa.plan.status == pb.plan.status
    assert (a / "study.gpkg").read_bytes() == (b / "study.gpkg").read_bytes()


def test_same_inputs_same_features_and_attributes_in_every_layer(two_runs):
    import pyogrio
    from pandas.testing import assert_frame_equal

    (a, b), _ = two_runs
    names = [str(n) for n in pyogrio.list_layers(a / "study.gpkg")[:, 0]]
    assert set(LAYERS) <= set(names)
    for layer in names:
        fa = pyogrio.read_dataframe(a / "study.gpkg", layer=layer)
        fb = pyogrio.read_dataframe(b / "study.gpkg", layer=layer)
        geoms = "geometry" in fa.columns
        assert_frame_equal(fa.drop(columns="geometry") if geoms else fa, fb.drop(columns="geometry") if geoms else fb)
        if geoms:
            assert list(fa.geometry.to_wkb()) == list(fb.geometry.to_wkb()), layer


def test_same_inputs_same_manifest_and_report_apart_from_timings(two_runs):
    (a, b), _ = two_runs
    ma, mb = (json.loads((d / "manifest.json").read_text()) for d in (a, b))
    assert ma["timings_s"].keys() == mb["timings_s"].keys()
    assert _strip_times(ma) == _strip_times(mb)
    seconds = re.compile(r"<td>solve seconds</td>\s*<td>[^<]*</td>")
    ra, rb = (seconds.sub("", (d / "report.html").read_text(encoding="utf-8")) for d in (a, b))
    assert "solve seconds" not in ra  # the mask found what it was meant to hide
    assert ra == rb
