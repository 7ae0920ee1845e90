"""Default map styles of the output layers, written into the GeoPackage beside them.

A GIS user who opens an output GeoPackage should see the plan at once: new
sites apart from existing ones, service areas as light outlines, uncovered
people by reason, screening verdicts by colour.  Each style
is data (:class:`LayerStyle`: one symbol, or one symbol per value of a
field), rendered two ways:

* **SLD**: OGC Styled Layer Descriptor 1.1 with Symbology Encoding 1.1, the
  open standard (sizes in pixels of 0.28 mm, SE's standardized rendering
  pixel);
* **QML**: the style format of QGIS, which loads a layer's default style from
  the GeoPackage's ``layer_styles`` table (one row per layer, ``useAsDefault``
  set).  The table is an ordinary attribute table registered in
  ``gpkg_contents``, so it is part of a valid GeoPackage and other tools
  ignore it.

Values of a styled field that a style does not list fall into a last
"other" class, so that no feature is left undrawn.  The colours are our
own (:data:`PALETTE`, which the report's map uses too: new sites as dark
teal triangles, existing facilities as orange squares, people left out in
purple and people no site can serve in red); pure data in, text out -- the
writing is done by :func:`geocover.layers.write_layers`.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING, Any
from xml.sax.saxutils import escape, quoteattr

if TYPE_CHECKING:
    import pandas as pd

__all__ = ["PALETTE", "Symbol", "LayerStyle", "layer_style", "to_sld", "to_qml", "STYLE_NAME"]

STYLE_NAME = "geocover"
_PIXEL_MM = 0.28  # SE 1.1: the standardized rendering pixel
_MARKERS = ("circle", "square", "triangle", "star")  # well-known names both SLD and QGIS draw


@dataclass(frozen=True)
class Symbol:
    """How one class of features is drawn.

    ``fill`` and ``stroke`` are ``#rrggbb`` (``stroke`` None: no outline);
    ``opacity`` is the fill's.  Markers (point layers) have a ``shape`` among
    circle, square, triangle and star, and a ``size_mm``.
    """

    fill: str
    opacity: float = 1.0
    stroke: str | None = None
    stroke_mm: float = 0.26
    size_mm: float = 2.0
    shape: str = "circle"

    def __post_init__(self) -> None:
        for colour in (self.fill, self.stroke):
            hexdigits = colour is not None and all(c in "0123456789abcdefABCDEF" for c in colour[1:])
            if colour is not None and not (len(colour) == 7 and colour[0] == "#" and hexdigits):
                raise ValueError(f"colour {colour!r} is not #rrggbb")
        if self.shape not in _MARKERS:
            raise ValueError(f"marker shape {self.shape!r} is not one of {_MARKERS}")
        if not 0.0 <= self.opacity <= 1.0:
            raise ValueError(f"opacity {self.opacity} is not between 0 and 1")


@dataclass(frozen=True)
class LayerStyle:
    """A layer's style: one ``symbol`` for all, or with ``field``, one per value in ``classes``.

    ``classes``: ``(value, legend label, symbol)``; ``other``: the symbol of
    every value not listed.  ``geometry``: ``"point"`` or ``"polygon"``.
    """

    layer: str
    geometry: str
    title: str
    symbol: Symbol | None = None
    field: str | None = None
    classes: tuple[tuple[str, str, Symbol], ...] = ()
    other: Symbol | None = None


# --------------------------------------------------------------------------- our styles

#: geocover's own palette, shared by these styles and the report's map, so that both tell the same story
PALETTE = {
    "population": ["#f4efe1", "#e6cf9a", "#d19a5e", "#a8593f", "#6b2f3a"],
    "exclusion": "#5b6c7d",
    "service": "#1f8a84",
    "chosen": "#0d4d4a",
    "existing": "#e07b1f",
    "unreachable": "#b8122e",
    "left_out": "#7a3fb0",
    "ink": "#1d2430",
    "paper": "#fbfaf7",
}
_OPTIONAL = "#f2b27a"  # an existing facility the model may close: the existing colour, lighter
_COVERED = "#8fb3ae"  # covered demand: the service colour, muted
_LAND_USE = "#8c6d3f"
_OTHER = "#b9b3a5"
_HALO = "#ffffff"


def _roles(plan: bool) -> tuple[tuple[str, str, Symbol], ...]:
    """New (or candidate) sites as triangles, existing facilities as squares, as on the report's map."""
    existing = Symbol(PALETTE["existing"], stroke=PALETTE["ink"], stroke_mm=0.3, size_mm=3.4, shape="square")
    optional = Symbol(_OPTIONAL, stroke=PALETTE["ink"], stroke_mm=0.3, size_mm=3.4, shape="square")
    if plan:  # plan_sites: what the plan does with each chosen site
        new = Symbol(PALETTE["chosen"], stroke=_HALO, stroke_mm=0.4, size_mm=3.8, shape="triangle")
        return (("new", "New site", new), ("existing_kept", "Existing, stays open", existing),
                ("existing_optional_kept", "Existing, may close: kept", optional))
    candidate = Symbol(PALETTE["service"], stroke=_HALO, stroke_mm=0.3, size_mm=2.6, shape="triangle")
    return (("candidate", "Candidate site", candidate), ("existing_kept", "Existing, stays open", existing),
            ("existing_optional", "Existing, may close", optional))


def _reasons(size_mm: float, polygon: bool) -> tuple[tuple[str, str, Symbol], ...]:
    def symbol(colour: str) -> Symbol:
        if polygon:
            return Symbol(colour, opacity=0.35, stroke=colour, stroke_mm=0.3)
        return Symbol(colour, size_mm=size_mm)  # no halo: uncovered people come in dense grids

    return (("unreachable", "No site can serve them", symbol(PALETTE["unreachable"])),
            ("left_out", "Left out by the plan", symbol(PALETTE["left_out"])))


def layer_style(name: str, frame: "pd.DataFrame | Any") -> LayerStyle | None:
    """The default style of output layer ``name``, or None (no style for it, or not a map layer).

    The style is chosen by the layer's name and checked against its fields:
    a layer without the field a style classifies on (the demand layer of the
    demand tools has no ``status``) gets the style's "other" symbol for all.
    """
    if not hasattr(frame, "geometry"):
        return None  # an attribute table (as write_layers tells them apart)
    columns = set(getattr(frame, "columns", ()))
    other_point = Symbol(_OTHER, size_mm=2.0)
    service = PALETTE["service"]
    styles: dict[str, LayerStyle] = {
        "plan_sites": LayerStyle("plan_sites", "point", "Chosen sites by role", field="role",
                                 classes=_roles(plan=True), other=other_point),
        "sites": LayerStyle("sites", "point", "Usable sites by role", field="role", classes=_roles(plan=False),
                            other=other_point),
        "sites_reach": LayerStyle("sites_reach", "point", "Sites", symbol=_roles(plan=False)[0][2]),
        "service_areas": LayerStyle("service_areas", "polygon", "Service area of each chosen site",
                                    symbol=Symbol(service, opacity=0.12, stroke=service, stroke_mm=0.4)),
        "covered_area": LayerStyle("covered_area", "polygon", "Area the plan serves",
                                   symbol=Symbol(service, opacity=0.08, stroke=service, stroke_mm=0.26)),
        "demand": LayerStyle("demand", "point", "Demand by coverage", field="status", classes=(
            ("covered", "Covered", Symbol(_COVERED, size_mm=1.4)),
            ("left_out", "Left out by the plan", Symbol(PALETTE["left_out"], size_mm=1.8)),
            ("unreachable", "No site can serve them", Symbol(PALETTE["unreachable"], size_mm=1.8)),
        ), other=Symbol(_COVERED, size_mm=1.4)),
        "demand_reach": LayerStyle("demand_reach", "point", "Demand", symbol=Symbol(_COVERED, size_mm=1.4)),
        "uncovered": LayerStyle("uncovered", "point", "Uncovered people by reason", field="reason",
                                classes=_reasons(1.8, polygon=False), other=other_point),
        "uncovered_areas": LayerStyle("uncovered_areas", "polygon", "Uncovered areas by reason", field="reason",
                                      classes=_reasons(0.0, polygon=True), other=Symbol(_OTHER, opacity=0.35, stroke=_OTHER)),
        "screened_sites": LayerStyle("screened_sites", "point", "Screening verdicts", field="verdict", classes=(
            ("kept", "Kept", Symbol(service, stroke=_HALO, stroke_mm=0.2, size_mm=2.2)),
            ("excluded", "In or near an exclusion zone", Symbol(PALETTE["exclusion"], size_mm=2.4, shape="triangle")),
            ("land_use", "Land use not allowed", Symbol(_LAND_USE, size_mm=2.4, shape="triangle")),
            ("outside", "Outside the study area", Symbol(_OTHER, size_mm=1.8)),
        ), other=other_point),
    }
    style = styles.get(name)
    if style is None:
        return None
    if style.field is not None and style.field not in columns:
        if style.other is None:
            return None
        return LayerStyle(style.layer, style.geometry, style.title, symbol=style.other)
    return style


# --------------------------------------------------------------------------- SLD 1.1

def _px(mm: float) -> str:
    return f"{mm / _PIXEL_MM:.2f}".rstrip("0").rstrip(".")


def _sld_symbolizer(style: LayerStyle, symbol: Symbol) -> str:
    fill = (f'<se:Fill><se:SvgParameter name="fill">{symbol.fill}</se:SvgParameter>'
            f'<se:SvgParameter name="fill-opacity">{symbol.opacity:g}</se:SvgParameter></se:Fill>')
    stroke = ""
    if symbol.stroke is not None:
        stroke = (f'<se:Stroke><se:SvgParameter name="stroke">{symbol.stroke}</se:SvgParameter>'
                  f'<se:SvgParameter name="stroke-width">{_px(symbol.stroke_mm)}</se:SvgParameter></se:Stroke>')
    if style.geometry == "polygon":
        return f"<se:PolygonSymbolizer>{fill}{stroke}</se:PolygonSymbolizer>"
    return (f"<se:PointSymbolizer><se:Graphic><se:Mark><se:WellKnownName>{symbol.shape}</se:WellKnownName>"
            f"{fill}{stroke}</se:Mark><se:Size>{_px(symbol.size_mm)}</se:Size></se:Graphic></se:PointSymbolizer>")


def _sld_rule(name: str, title: str, condition: str, body: str) -> str:
    return (f"<se:Rule><se:Name>{escape(name)}</se:Name><se:Description><se:Title>{escape(title)}</se:Title>"
            f"</se:Description>{condition}{body}</se:Rule>")


def to_sld(style: LayerStyle) -> str:
    """The style as an SLD 1.1 document (one rule per class, and one for the values not listed)."""
    rules = []
    if style.field is None:
        assert style.symbol is not None
        rules.append(_sld_rule("all", style.title, "", _sld_symbolizer(style, style.symbol)))
    else:
        field = f"<ogc:PropertyName>{escape(style.field)}</ogc:PropertyName>"
        equal = [f"<ogc:PropertyIsEqualTo>{field}<ogc:Literal>{escape(value)}</ogc:Literal></ogc:PropertyIsEqualTo>"
                 for value, _, _ in style.classes]
        for (value, label, symbol), test in zip(style.classes, equal, strict=True):
            rules.append(_sld_rule(value, label, f"<ogc:Filter>{test}</ogc:Filter>", _sld_symbolizer(style, symbol)))
        if style.other is not None:
            # not se:ElseFilter, which some readers take for "every feature": none of the values, or none at all
            listed = equal[0] if len(equal) == 1 else f"<ogc:Or>{''.join(equal)}</ogc:Or>"
            condition = (f"<ogc:Filter><ogc:Or><ogc:Not>{listed}</ogc:Not>"
                         f"<ogc:PropertyIsNull>{field}</ogc:PropertyIsNull></ogc:Or></ogc:Filter>")
            rules.append(_sld_rule("other", "Other", condition, _sld_symbolizer(style, style.other)))
    return (
        '<?xml version="1.0" encoding="UTF-8"?>\n'
        '<StyledLayerDescriptor version="1.1.0" xmlns="http://www.opengis.net/sld" '
        'xmlns:se="http://www.opengis.net/se" xmlns:ogc="http://www.opengis.net/ogc" '
        'xmlns:xlink="http://www.w3.org/1999/xlink" xmlns:xsi="http://www.w3.org/2001/XMLSchema-instance" '
        'xsi:schemaLocation="http://www.opengis.net/sld http://schemas.opengis.net/sld/1.1.0/StyledLayerDescriptor.xsd">'
        f"<NamedLayer><se:Name>{escape(style.layer)}</se:Name><UserStyle><se:Name>{STYLE_NAME}</se:Name>"
        f"<se:Description><se:Title>{escape(style.title)}</se:Title></se:Description>"
        f"<se:FeatureTypeStyle>{''.join(rules)}</se:FeatureTypeStyle></UserStyle></NamedLayer>"
        "</StyledLayerDescriptor>\n"
    )


# --------------------------------------------------------------------------- QML (QGIS 3)

def _rgba(colour: str | None, alpha: float = 1.0) -> str:
    if colour is None:
        return "0,0,0,0"
    r, g, b = (int(colour[k:k + 2], 16) for k in (1, 3, 5))
    return f"{r},{g},{b},{round(255 * alpha)}"


def _options(values: dict[str, str]) -> str:
    return '<Option type="Map">' + "".join(
        f'<Option type="QString" name={quoteattr(k)} value={quoteattr(v)}/>' for k, v in values.items()
    ) + "</Option>"


def _qml_symbol(style: LayerStyle, name: str, symbol: Symbol) -> str:
    if style.geometry == "polygon":
        layer_class, kind = "SimpleFill", "fill"
        values = {
            "color": _rgba(symbol.fill, symbol.opacity),
            "style": "solid",
            "outline_color": _rgba(symbol.stroke),
            "outline_style": "solid" if symbol.stroke is not None else "no",
            "outline_width": f"{symbol.stroke_mm:g}",
            "outline_width_unit": "MM",
        }
    else:
        layer_class, kind = "SimpleMarker", "marker"
        values = {
            "color": _rgba(symbol.fill, symbol.opacity),
            "name": symbol.shape,
            "size": f"{symbol.size_mm:g}",
            "size_unit": "MM",
            "outline_color": _rgba(symbol.stroke),
            "outline_style": "solid" if symbol.stroke is not None else "no",
            "outline_width": f"{symbol.stroke_mm:g}",
            "outline_width_unit": "MM",
        }
    return (f'<symbol type="{kind}" name={quoteattr(name)} alpha="1" clip_to_extent="1" force_rhr="0">'
            f'<layer class="{layer_class}" enabled="1" locked="0" pass="0">{_options(values)}</layer></symbol>')


def to_qml(style: LayerStyle) -> str:
    """The style as a QGIS 3 layer style (symbology only): single symbol, or categorized on ``field``."""
    if style.field is None:
        assert style.symbol is not None
        renderer = (f'<renderer-v2 type="singleSymbol" forceraster="0" symbollevels="0" enableorderby="0">'
                    f"<symbols>{_qml_symbol(style, '0', style.symbol)}</symbols></renderer-v2>")
    else:
        entries = [(value, label, symbol) for value, label, symbol in style.classes]
        if style.other is not None:
            entries.append(("", "Other", style.other))  # an empty value: every value not listed
        categories = "".join(
            f'<category render="true" symbol="{k}" value={quoteattr(value)} label={quoteattr(label)}/>'
            for k, (value, label, _) in enumerate(entries)
        )
        symbols = "".join(_qml_symbol(style, str(k), symbol) for k, (_, _, symbol) in enumerate(entries))
        renderer = (f'<renderer-v2 type="categorizedSymbol" attr={quoteattr(style.field)} forceraster="0" '
                    f'symbollevels="0" enableorderby="0"><categories>{categories}</categories>'
                    f"<symbols>{symbols}</symbols></renderer-v2>")
    geometry_type = {"point": 0, "polygon": 2}[style.geometry]
    return (
        "<!DOCTYPE qgis PUBLIC 'http://mrcc.com/qgis.dtd' 'SYSTEM'>\n"
        f'<qgis version="3.22.0" styleCategories="Symbology">{renderer}'
        f"<layerGeometryType>{geometry_type}</layerGeometryType></qgis>\n"
    )
