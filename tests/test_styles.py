"""Default map styles: the SLD and QML texts, and the ``layer_styles`` table written beside the layers.

Outside checks: the SLD documents are read as OGC SLD 1.1 / SE 1.1 / Filter
Encoding (namespaces, rule structure, the standardized rendering pixel of
0.28 mm from SE 1.1, section 10.3); the table is read back through GDAL
(pyogrio) and the GeoPackage's own ``gpkg_contents`` and
``gpkg_geometry_columns`` tables (OGC GeoPackage 1.2+).  Where QGIS is
installed (not in CI), the last test opens a written GeoPackage with QGIS
itself and checks that every styled layer comes up with our renderer, field,
classes and colours, and that the SLD loads there too.
"""

from __future__ import annotations

import json
import shutil
import sqlite3
import subprocess
import textwrap
import xml.etree.ElementTree as ET

import geopandas as gpd
import numpy as np
import pyogrio
import pytest
import shapely

from geocover import styles
from geocover.layers import list_layers, read_vector, write_layers

CRS = "EPSG:32633"
NS = {"sld": "http://www.opengis.net/sld", "se": "http://www.opengis.net/se", "ogc": "http://www.opengis.net/ogc"}


def _layers() -> dict[str, gpd.GeoDataFrame]:
    pts = shapely.points([[0, 0], [100, 0], [0, 100], [50, 50]])
    return {
        "plan_sites": gpd.GeoDataFrame({"role": ["new", "existing_kept", "existing_optional_kept", "other"]},
                                       geometry=pts, crs=CRS),
        "service_areas": gpd.GeoDataFrame({"site_id": ["a", "b"]}, geometry=shapely.buffer(pts[:2], 30.0), crs=CRS),
        "uncovered_areas": gpd.GeoDataFrame({"reason": ["left_out", "unreachable"]},
                                            geometry=[shapely.box(0, 0, 10, 10), shapely.box(20, 20, 40, 40)], crs=CRS),
        "screened_sites": gpd.GeoDataFrame({"verdict": ["kept", "excluded", "land_use", "outside"]}, geometry=pts, crs=CRS),
        "sites": gpd.GeoDataFrame({"role": ["candidate", "existing_kept", "existing_optional", "other"]}, geometry=pts, crs=CRS),
        "covered_area": gpd.GeoDataFrame({"sites": [2]}, geometry=[shapely.box(0, 0, 100, 100)], crs=CRS),
        "demand": gpd.GeoDataFrame({"status": ["covered", "left_out", "unreachable", "covered"]}, geometry=pts, crs=CRS),
        "uncovered": gpd.GeoDataFrame({"reason": ["left_out", "unreachable"]}, geometry=pts[:2], crs=CRS),
        "sites_reach": gpd.GeoDataFrame({"site_id": ["a"]}, geometry=pts[:1], crs=CRS),
        "demand_reach": gpd.GeoDataFrame({"people": [3.0]}, geometry=pts[:1], crs=CRS),
        "notes": gpd.GeoDataFrame({"x": [1]}, geometry=[shapely.Point(1, 1)], crs=CRS),  # no style for it
    }


STYLED = {"plan_sites", "service_areas", "uncovered_areas", "screened_sites", "sites", "covered_area", "demand",
          "uncovered", "sites_reach", "demand_reach"}


def _all_styles() -> list[styles.LayerStyle]:
    found = [styles.layer_style(name, frame) for name, frame in _layers().items()]
    return [s for s in found if s is not None]


@pytest.mark.parametrize("style", _all_styles(), ids=lambda s: s.layer)
def test_sld_is_one_rule_per_class_and_one_for_the_rest(style):
    root = ET.fromstring(styles.to_sld(style))
    assert root.tag == f"{{{NS['sld']}}}StyledLayerDescriptor" and root.get("version") == "1.1.0"
    assert root.find("sld:NamedLayer/se:Name", NS).text == style.layer
    rules = root.findall("sld:NamedLayer/sld:UserStyle/se:FeatureTypeStyle/se:Rule", NS)
    kind = "se:PolygonSymbolizer" if style.geometry == "polygon" else "se:PointSymbolizer"
    assert all(rule.find(kind, NS) is not None for rule in rules)
    if style.field is None:
        assert len(rules) == 1 and rules[0].find("ogc:Filter", NS) is None
        return
    assert len(rules) == len(style.classes) + 1
    for rule, (value, label, symbol) in zip(rules, style.classes):
        test = rule.find("ogc:Filter/ogc:PropertyIsEqualTo", NS)
        assert test.find("ogc:PropertyName", NS).text == style.field and test.find("ogc:Literal", NS).text == value
        assert rule.find("se:Description/se:Title", NS).text == label
        fill = {p.get("name"): p.text for p in rule.iter(f"{{{NS['se']}}}SvgParameter")}
        assert fill["fill"] == symbol.fill and float(fill["fill-opacity"]) == symbol.opacity
        if style.geometry == "point":
            # SE 1.1: sizes in pixels of 0.28 mm
            assert float(rule.find(".//se:Size", NS).text) == pytest.approx(symbol.size_mm / 0.28, abs=0.01)
            assert rule.find(".//se:WellKnownName", NS).text == symbol.shape
    # the last rule takes what no class does: not one of the values, or no value (no se:ElseFilter)
    other = rules[-1].find("ogc:Filter/ogc:Or", NS)
    listed = other.find("ogc:Not", NS)
    values = {lit.text for lit in listed.iter(f"{{{NS['ogc']}}}Literal")}
    assert values == {value for value, _, _ in style.classes}
    assert other.find("ogc:PropertyIsNull/ogc:PropertyName", NS).text == style.field


@pytest.mark.parametrize("style", _all_styles(), ids=lambda s: s.layer)
def test_qml_has_the_classes_in_order_and_a_catch_all(style):
    root = ET.fromstring(styles.to_qml(style).split("\n", 1)[1])  # past the DOCTYPE line
    renderer = root.find("renderer-v2")
    symbols = {s.get("name"): s for s in renderer.find("symbols")}
    if style.field is None:
        assert renderer.get("type") == "singleSymbol" and list(symbols) == ["0"]
        return
    assert renderer.get("type") == "categorizedSymbol" and renderer.get("attr") == style.field
    categories = renderer.find("categories").findall("category")
    assert [c.get("value") for c in categories] == [v for v, _, _ in style.classes] + [""]
    for category, (_, label, symbol) in zip(categories, style.classes):
        assert category.get("label") == label
        options = {o.get("name"): o.get("value") for o in symbols[category.get("symbol")].iter("Option") if o.get("name")}
        r, g, b = (int(symbol.fill[k:k + 2], 16) for k in (1, 3, 5))
        assert options["color"] == f"{r},{g},{b},{round(255 * symbol.opacity)}"


def test_a_layer_without_the_classified_field_gets_the_single_fallback_symbol():
    bare = gpd.GeoDataFrame({"people": [1.0]}, geometry=[shapely.Point(0, 0)], crs=CRS)  # demand as the demand tools write it
    style = styles.layer_style("demand", bare)
    assert style is not None and style.field is None and style.symbol is not None
    assert styles.layer_style("demand", bare.assign(status=["covered"])).field == "status"
    assert styles.layer_style("anything_else", bare) is None


def test_symbols_refuse_bad_colours_shapes_and_opacity():
    with pytest.raises(ValueError, match="rrggbb"):
        styles.Symbol("red")
    with pytest.raises(ValueError, match="shape"):
        styles.Symbol("#112233", shape="hexagon")
    with pytest.raises(ValueError, match="opacity"):
        styles.Symbol("#112233", opacity=1.5)


def test_the_styles_table_names_each_styled_layer_and_its_geometry_column(tmp_path):
    layers = _layers()
    target = write_layers(tmp_path / "out.gpkg", layers)
    table = pyogrio.read_dataframe(target, layer="layer_styles")
    assert set(table["f_table_name"]) == STYLED and len(table) == len(STYLED)
    with sqlite3.connect(target) as con:
        geometry = dict(con.execute("SELECT table_name, column_name FROM gpkg_geometry_columns"))
        contents = dict(con.execute("SELECT table_name, data_type FROM gpkg_contents"))
    assert contents["layer_styles"] == "attributes"  # registered: a valid GeoPackage table
    for row in table.itertuples():
        assert row.f_geometry_column == geometry[row.f_table_name]
        assert row.useAsDefault and row.styleName == styles.STYLE_NAME
        expected = styles.layer_style(row.f_table_name, layers[row.f_table_name])
        assert row.styleQML == styles.to_qml(expected) and row.styleSLD == styles.to_sld(expected)
    # the styles table is not a layer one would read
    assert "layer_styles" not in list_layers(target)


def test_a_single_layer_with_its_style_reads_back_without_naming_the_layer(tmp_path):
    frame = _layers()["plan_sites"]
    target = write_layers(tmp_path / "one.gpkg", {"plan_sites": frame})
    assert {n for n, _ in pyogrio.list_layers(target)} == {"plan_sites", "layer_styles"}
    back = read_vector(str(target))
    assert list(back["role"]) == list(frame["role"])


def test_no_styles_table_when_asked_or_when_nothing_is_styled(tmp_path):
    layers = _layers()
    plain = write_layers(tmp_path / "plain.gpkg", layers, styles=False)
    assert "layer_styles" not in {n for n, _ in pyogrio.list_layers(plain)}
    unstyled = write_layers(tmp_path / "unstyled.gpkg", {"notes": layers["notes"]})
    assert {n for n, _ in pyogrio.list_layers(unstyled)} == {"notes"}


_QGIS_PROBE = """
import os
os.environ["QT_QPA_PLATFORM"] = "offscreen"
from qgis.core import QgsApplication, QgsProviderRegistry
app = QgsApplication([], False); app.initQgis()
assert "ogr" in QgsProviderRegistry.instance().providerList()
"""


def _qgis_python() -> str | None:
    """A Python whose QGIS starts headless with its OGR provider (the system one, where QGIS is installed), else None."""
    for exe in ("/usr/bin/python3", shutil.which("python3")):
        if exe:
            try:
                probe = subprocess.run([exe, "-c", _QGIS_PROBE], capture_output=True, timeout=60)
            except (OSError, subprocess.TimeoutExpired):
                continue
            if probe.returncode == 0:
                return exe
    return None


_QGIS = _qgis_python()


@pytest.mark.skipif(_QGIS is None, reason="QGIS is not installed or does not start headless (optional outside check)")
def test_qgis_opens_each_layer_with_our_style_and_reads_our_sld(tmp_path):
    # outside check: QGIS itself reads the default style from the table, and the SLD from the same row
    layers = _layers()
    target = write_layers(tmp_path / "out.gpkg", layers)
    script = textwrap.dedent(
        """
        import json, os, sqlite3, sys
        os.environ["QT_QPA_PLATFORM"] = "offscreen"
        from qgis.core import QgsApplication, QgsRenderContext, QgsVectorLayer
        app = QgsApplication([], False); app.initQgis()
        path = sys.argv[1]
        out = {}
        slds = dict(sqlite3.connect(path).execute("SELECT f_table_name, styleSLD FROM layer_styles"))
        for name, sld in slds.items():
            drawn = {}
            for how in ("default", "sld"):
                layer = QgsVectorLayer(f"{path}|layername={name}", name, "ogr")
                if how == "sld":
                    sld_path = os.path.join(os.path.dirname(path), name + ".sld")
                    open(sld_path, "w").write(sld)
                    layer.loadSldStyle(sld_path)
                renderer = layer.renderer()
                ctx = QgsRenderContext()
                renderer.startRender(ctx, layer.fields())
                field = renderer.classAttribute() if renderer.type() == "categorizedSymbol" else None
                drawn[how] = {"type": renderer.type(), "field": field, "features": [
                    [[s.color().name(), s.color().alpha()] for s in renderer.symbolsForFeature(f, ctx)]
                    for f in layer.getFeatures()]}
                renderer.stopRender(ctx)
            out[name] = drawn
        print(json.dumps(out))
        """
    )
    run = subprocess.run([_QGIS, "-c", script, str(target)], capture_output=True, text=True, timeout=120)
    assert run.returncode == 0, run.stderr[-2000:]
    seen = json.loads(run.stdout.strip().splitlines()[-1])
    assert set(seen) == STYLED
    for name, drawn in seen.items():
        style = styles.layer_style(name, layers[name])
        frame = layers[name]
        for how in ("default", "sld"):
            # QGIS reads a one-rule SLD as a single symbol, several rules as a rule-based renderer
            expect_type = "singleSymbol" if style.field is None else {"default": "categorizedSymbol", "sld": "RuleRenderer"}[how]
            assert drawn[how]["type"] == expect_type, (name, how)
            if how == "default":
                assert drawn[how]["field"] == style.field
            for k, symbols in enumerate(drawn[how]["features"]):
                if style.field is None:
                    symbol = style.symbol
                else:
                    by_value = {value: sym for value, _, sym in style.classes}
                    symbol = by_value.get(frame[style.field].iloc[k], style.other)
                # exactly one symbol per feature, ours (from an SLD opacity QGIS truncates alpha, the QML gives it rounded)
                alpha = round(255 * symbol.opacity) if how == "default" else int(255 * symbol.opacity)
                assert symbols == [[symbol.fill, alpha]], (name, how, k)
    assert np.all([len(d["default"]["features"]) == len(layers[n]) for n, d in seen.items()])


def test_attribute_tables_get_no_style():
    import pandas as pd

    assert styles.layer_style("demand", pd.DataFrame({"status": ["covered"]})) is None
