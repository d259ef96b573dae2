"""Layer styles a desktop GIS applies on opening: QGIS style files (``.qml``, the XML QGIS
reads beside a layer of the same name and from a GeoPackage's ``layer_styles`` table) and
OGC Styled Layer Descriptors (``.sld``, SLD 1.0.0 with Symbology Encoding 1.1 element names
for rasters, OGC 05-078r4 / 05-077r4), plus colour tables for class rasters.

Colours come from matplotlib's perceptually uniform, colour-vision-deficiency-friendly ramps
(viridis, cividis: van der Walt & Smith 2015, matplotlib documentation; Nuñez et al. 2018,
PLoS ONE 13(7): e0199239, doi:10.1371/journal.pone.0199239). Values a map uses for "none"
(e.g. no weak layer) get a neutral grey of their own, apart from the ramp and from nodata.
"""

from __future__ import annotations

from dataclasses import dataclass
from itertools import pairwise
from xml.sax.saxutils import quoteattr

import numpy as np

__all__ = [
    "NONE_COLOUR",
    "RampStop",
    "class_colour_table",
    "ramp_stops",
    "raster_qml",
    "raster_sld",
    "vector_qml",
    "vector_sld",
]

#: colour of a map's "none" value (no weak layer, ...): neutral grey, outside every ramp
NONE_COLOUR = "#bdbdbd"
#: outline of polygons and colour of lines in the vector styles
_OUTLINE = "#232323"


@dataclass(frozen=True)
class RampStop:
    """One entry of a colour ramp: ``value`` drawn in ``colour`` (``#rrggbb``), ``label``."""

    value: float
    colour: str
    label: str


def _hex(rgba) -> str:
    r, g, b = (int(round(255 * c)) for c in rgba[:3])
    return f"#{r:02x}{g:02x}{b:02x}"


def ramp_stops(
    lo: float,
    hi: float,
    *,
    ramp: str = "viridis",
    n: int = 6,
    units: str = "",
    none_value: float | None = None,
    none_label: str = "none",
) -> list[RampStop]:
    """``n`` evenly spaced stops of a matplotlib ramp from ``lo`` to ``hi``, preceded by the
    grey "none" stop when ``none_value`` is given."""
    import matplotlib

    cmap = matplotlib.colormaps[ramp]
    stops = []
    if none_value is not None:
        stops.append(RampStop(float(none_value), NONE_COLOUR, none_label))
    suffix = f" {units}" if units and units != "1" else ""
    for k, v in enumerate(np.linspace(lo, hi, n)):
        stops.append(RampStop(float(v), _hex(cmap(k / (n - 1))), f"{v:g}{suffix}"))
    return stops


def class_colour_table(
    n_classes: int, *, ramp: str = "cividis", nodata: int | None = 255
) -> dict[int, tuple[int, int, int, int]]:
    """Colour table for a byte raster whose values 0, 1, … are classes: class k of
    ``n_classes`` along the ramp, values past the last class in its colour, ``nodata``
    transparent."""
    import matplotlib

    cmap = matplotlib.colormaps[ramp]
    table = {}
    for v in range(256):
        r, g, b, _ = cmap(min(v, n_classes - 1) / max(n_classes - 1, 1))
        table[v] = (int(round(255 * r)), int(round(255 * g)), int(round(255 * b)), 255)
    if nodata is not None:
        table[int(nodata)] = (0, 0, 0, 0)
    return table


def _rgb(colour: str) -> str:
    return ",".join(str(int(colour[k : k + 2], 16)) for k in (1, 3, 5))


def raster_qml(stops: list[RampStop]) -> str:
    """QGIS style of a single-band raster: colours interpolated between ``stops`` (values
    beyond the last stop take its colour; nodata is transparent)."""
    lo, hi = stops[0].value, stops[-1].value
    items = "\n".join(
        f"          <item value={quoteattr(repr(s.value))} label={quoteattr(s.label)} "
        f'color="{s.colour}" alpha="255"/>'
        for s in stops
    )
    return f"""<qgis version="3.28.0" styleCategories="Symbology">
  <pipe>
    <rasterrenderer type="singlebandpseudocolor" band="1" opacity="1" alphaBand="-1"
        classificationMin="{lo!r}" classificationMax="{hi!r}">
      <rastershader>
        <colorrampshader colorRampType="INTERPOLATED" classificationMode="1" clip="0"
            minimumValue="{lo!r}" maximumValue="{hi!r}">
{items}
        </colorrampshader>
      </rastershader>
    </rasterrenderer>
  </pipe>
</qgis>
"""


def _text(s: str) -> str:
    return s.replace("&", "&amp;").replace("<", "&lt;").replace(">", "&gt;")


_SLD_HEAD = (
    '<StyledLayerDescriptor version="1.0.0" '
    'xmlns="http://www.opengis.net/sld" xmlns:ogc="http://www.opengis.net/ogc" '
    'xmlns:xlink="http://www.w3.org/1999/xlink" '
    'xmlns:xsi="http://www.w3.org/2001/XMLSchema-instance">'
)


def raster_sld(stops: list[RampStop], *, name: str, title: str) -> str:
    """OGC SLD 1.0.0 of a single-band raster: a ``ramp`` ColorMap through ``stops``."""
    entries = "\n".join(
        f'              <ColorMapEntry color="{s.colour}" quantity={quoteattr(repr(s.value))} '
        f'label={quoteattr(s.label)} opacity="1"/>'
        for s in stops
    )
    return f"""<?xml version="1.0" encoding="UTF-8"?>
{_SLD_HEAD}
  <NamedLayer>
    <Name>{_text(name)}</Name>
    <UserStyle>
      <Title>{_text(title)}</Title>
      <FeatureTypeStyle>
        <Rule>
          <RasterSymbolizer>
            <Opacity>1.0</Opacity>
            <ColorMap type="ramp">
{entries}
            </ColorMap>
          </RasterSymbolizer>
        </Rule>
      </FeatureTypeStyle>
    </UserStyle>
  </NamedLayer>
</StyledLayerDescriptor>
"""


def _qml_symbol(kind: str, name: str, colour: str) -> str:
    if kind == "line":
        layer = (
            '<layer class="SimpleLine" enabled="1" locked="0" pass="0"><Option type="Map">'
            f'<Option name="line_color" type="QString" value="{_rgb(colour)},255"/>'
            '<Option name="line_width" type="QString" value="0.8"/>'
            '<Option name="line_width_unit" type="QString" value="MM"/>'
            '<Option name="line_style" type="QString" value="solid"/>'
            "</Option></layer>"
        )
    else:
        layer = (
            '<layer class="SimpleFill" enabled="1" locked="0" pass="0"><Option type="Map">'
            f'<Option name="color" type="QString" value="{_rgb(colour)},255"/>'
            f'<Option name="outline_color" type="QString" value="{_rgb(_OUTLINE)},255"/>'
            '<Option name="outline_width" type="QString" value="0.26"/>'
            '<Option name="outline_width_unit" type="QString" value="MM"/>'
            '<Option name="style" type="QString" value="solid"/>'
            "</Option></layer>"
        )
    return (
        f'<symbol type="{kind}" name="{name}" alpha="1" clip_to_extent="1" force_rhr="0">'
        f"{layer}</symbol>"
    )


def _bins(stops: list[RampStop]) -> list[tuple[float, float | None, str, str]]:
    """(lower, upper, label, colour) classes from each ramp stop to the next, each in its
    lower stop's colour; the last class is open above (upper None)."""
    ramp = [s for s in stops if s.colour != NONE_COLOUR]
    out = [(a.value, b.value, f"{a.label} - {b.label}", a.colour) for a, b in pairwise(ramp)]
    last = ramp[-1]
    return [*out, (last.value, None, f">= {last.label}", last.colour)]


#: upper bound QGIS gets for the open last class
_OPEN_UPPER = 1e30


def vector_qml(
    geometry: str,
    *,
    attribute: str | None = None,
    stops: list[RampStop] | None = None,
    colour: str = "#3b528b",
    label_field: str | None = None,
) -> str:
    """QGIS style of a vector layer: polygons (``geometry="fill"``) or lines (``"line"``),
    graduated by ``attribute`` through the classes between ``stops`` or in one ``colour``;
    features labelled with ``label_field``. ``geometry=None`` styles an attribute table."""
    if geometry is None:
        renderer = ""
    elif attribute and stops:
        bins = _bins(stops)
        ranges = "".join(
            f'<range lower="{lo!r}" upper="{_OPEN_UPPER if hi is None else hi!r}" symbol="{k}" '
            f'label={quoteattr(label)} render="true"/>'
            for k, (lo, hi, label, _) in enumerate(bins)
        )
        symbols = "".join(_qml_symbol(geometry, str(k), c) for k, (*_, c) in enumerate(bins))
        renderer = (
            f'<renderer-v2 type="graduatedSymbol" attr="{attribute}" '
            'graduatedMethod="GraduatedColor" symbollevels="0" enableorderby="0" '
            f'forceraster="0"><ranges>{ranges}</ranges><symbols>{symbols}</symbols></renderer-v2>'
        )
    else:
        renderer = (
            '<renderer-v2 type="singleSymbol" symbollevels="0" enableorderby="0" '
            f'forceraster="0"><symbols>{_qml_symbol(geometry, "0", colour)}</symbols>'
            "</renderer-v2>"
        )
    labels = ""
    if label_field:
        labels = (
            '<labeling type="simple"><settings calloutType="simple">'
            f'<text-style fieldName="{label_field}" fontSize="9" textColor="{_rgb(_OUTLINE)},255">'
            '<text-buffer bufferDraw="1" bufferSize="1" bufferColor="255,255,255,255"/>'
            "</text-style></settings></labeling>"
        )
    enabled = ' labelsEnabled="1"' if label_field else ""
    geometry_type = {"fill": 2, "line": 1, None: 4}[geometry]
    return (
        f'<qgis version="3.28.0" styleCategories="Symbology|Labeling"{enabled}>{renderer}{labels}'
        f"<layerGeometryType>{geometry_type}</layerGeometryType></qgis>\n"
    )


def vector_sld(
    name: str,
    geometry: str,
    *,
    attribute: str | None = None,
    stops: list[RampStop] | None = None,
    colour: str = "#3b528b",
) -> str:
    """OGC SLD 1.0.0 of a vector layer, the same classes as :func:`vector_qml`."""

    def symbolizer(c: str) -> str:
        if geometry == "line":
            return (
                "<LineSymbolizer><Stroke>"
                f'<CssParameter name="stroke">{c}</CssParameter>'
                '<CssParameter name="stroke-width">2</CssParameter>'
                "</Stroke></LineSymbolizer>"
            )
        return (
            f'<PolygonSymbolizer><Fill><CssParameter name="fill">{c}</CssParameter></Fill>'
            f'<Stroke><CssParameter name="stroke">{_OUTLINE}</CssParameter>'
            '<CssParameter name="stroke-width">0.5</CssParameter></Stroke></PolygonSymbolizer>'
        )

    if attribute and stops:
        rules = ""
        for lo, hi, label, c in _bins(stops):
            cond = (
                "<ogc:PropertyIsGreaterThanOrEqualTo>"
                f"<ogc:PropertyName>{attribute}</ogc:PropertyName><ogc:Literal>{lo!r}</ogc:Literal>"
                "</ogc:PropertyIsGreaterThanOrEqualTo>"
            )
            if hi is not None:
                cond = (
                    f"<ogc:And>{cond}<ogc:PropertyIsLessThan>"
                    f"<ogc:PropertyName>{attribute}</ogc:PropertyName><ogc:Literal>{hi!r}</ogc:Literal>"
                    "</ogc:PropertyIsLessThan></ogc:And>"
                )
            rules += (
                f"<Rule><Name>{_text(label)}</Name><ogc:Filter>{cond}</ogc:Filter>"
                f"{symbolizer(c)}</Rule>"
            )
    else:
        rules = f"<Rule><Name>{_text(name)}</Name>{symbolizer(colour)}</Rule>"
    return (
        f'<?xml version="1.0" encoding="UTF-8"?>\n{_SLD_HEAD}<NamedLayer><Name>{_text(name)}</Name>'
        f"<UserStyle><Title>{_text(name)}</Title><FeatureTypeStyle>{rules}"
        "</FeatureTypeStyle></UserStyle></NamedLayer></StyledLayerDescriptor>\n"
    )
