"""The HTML report: self-contained, carries the caution, and renders in a real browser."""

from __future__ import annotations

import re
import shutil
import subprocess

import numpy as np
import pytest

from geocover.report import CAUTION, ReportData, render_report, write_report


def _data(**extra) -> ReportData:
    import shapely

    rng = np.random.default_rng(1)
    xy = rng.uniform(0, 10000, size=(400, 2)) + [500000, 5000000]
    base = dict(
        title="Test district",
        crs="EPSG:32626",
        rule="planar distance within 2 km",
        model="cover-most",
        plan_summary={"sites in the plan": 2, "people covered": 1234.0, "gap": 0.0},
        sites_table=[{"site": "C1", "people covered": 800.0}, {"site": "C2", "people covered": 434.0}],
        today_vs_plan=[{"": "today", "people covered": 100.0}, {"": "with the plan", "people covered": 1234.0}],
        uncovered_by_reason={"unreachable": 10.0, "left_out": 56.0},
        audit={"aggregation_error": -3.0, "aggregation_error_bound": 40.0},
        screening={"kept": 3, "excluded": 1},
        parameters={"service.distance": 2000.0},
        inputs=[{"file": "pop.tif", "bytes": 10, "sha256": "abc..."}],
        tradeoff=[{"p": 1, "share": 0.5, "gap": 0.0, "status": "optimal"}, {"p": 2, "share": 0.8, "gap": 0.01, "status": "feasible"},
                  {"p": 3, "share": 1.0, "gap": 0.0, "status": "optimal (cover-all end point)"}],
        tradeoff_marks={"80 %": (2, True), "90 %": (3, False)},
        demand_xy=xy,
        demand_weight=rng.gamma(1, 5, 400),
        study_area=shapely.box(500000, 5000000, 510000, 5010000),
        exclusions=[shapely.box(503000, 5003000, 504000, 5004000)],
        service_areas=[shapely.Point(502000, 5002000).buffer(2000)],
        chosen_xy=np.array([[502000.0, 5002000.0]]),
        existing_xy=np.array([[508000.0, 5008000.0]]),
        unreachable_xy=xy[:5],
        left_out_xy=xy[5:9],
    )
    base.update(extra)
    return ReportData(**base)


def test_report_is_self_contained_and_cautions():
    text = render_report(_data())
    assert text.count(CAUTION) == 2  # at the top and at the end
    assert "authority having jurisdiction" in CAUTION
    # no external resources: every src is embedded data, no stylesheet or script links
    srcs = re.findall(r"src='([^']*)'", text)
    assert len(srcs) == 2 and all(s.startswith("data:image/png;base64,") for s in srcs)
    assert not re.search(r"(src|href)=['\"]https?:", text)
    assert "<script" not in text


def test_report_escapes_user_text(tmp_path):
    text = render_report(_data(title="<b>Bad & title</b>"))
    assert "&lt;b&gt;Bad &amp; title&lt;/b&gt;" in text


def test_report_is_written_atomically(tmp_path):
    path = write_report(tmp_path / "report.html", _data())
    assert path.read_text(encoding="utf-8").startswith("<!DOCTYPE html>")
    assert [p.name for p in tmp_path.iterdir()] == ["report.html"]


def _chromium() -> str | None:
    for name in ("chromium", "chromium-browser", "google-chrome"):
        found = shutil.which(name)
        if found:
            return found
    return None


@pytest.mark.skipif(_chromium() is None, reason="headless Chromium not installed (Debian: apt-get install chromium)")
def test_report_renders_in_headless_chromium(tmp_path):
    report = write_report(tmp_path / "report.html", _data())
    shot = tmp_path / "shot.png"
    cmd = [
        _chromium(), "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
        "--disable-background-networking", "--disable-component-update", "--disable-sync",
        f"--user-data-dir={tmp_path / 'profile'}", f"--screenshot={shot}", "--window-size=1200,2400",
        report.as_uri(),
    ]
    subprocess.run(cmd, check=True, capture_output=True, timeout=120)
    from PIL import Image

    image = np.asarray(Image.open(shot).convert("RGB")).astype(int)
    assert image.shape[0] >= 2000 and image.shape[1] >= 1100
    # the page drew something: many distinct colours (the map), not a blank or error page
    colours = np.unique(image.reshape(-1, 3) // 8, axis=0)
    assert len(colours) > 200
    # the caution box's orange rule (#e07b1f) is on screen
    orange = (abs(image[..., 0] - 0xE0) < 12) & (abs(image[..., 1] - 0x7B) < 12) & (abs(image[..., 2] - 0x1F) < 12)
    assert orange.sum() > 500
