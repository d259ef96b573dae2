"""regionmap's colours and figure conventions, used by every figure.

Two palettes, designed here:

* **Grain classes** — one colour per main class of the International Classification for
  Seasonal Snow on the Ground (Fierz et al. 2009), taken from the eight colours of Okabe &
  Ito (2008), a set chosen to stay distinguishable for the common forms of colour-vision
  deficiency. Subclasses (``FCxr``, ``MFcr`` …) take their main class's colour; figures write
  the code itself on the layer, so the colour is never the only cue. The assignment of colours
  to classes is our own.
* **Metric values** — a sequential ramp from near-white to deep indigo, one hue with a
  lightness that falls monotonically, so order is readable without colour vision (the
  argument of Crameri, Shephard & Heron 2020). It deliberately holds no green, yellow,
  orange or red, so nobody reads a map or an overview as an avalanche danger rating.

References
----------
.. [1] Okabe, M. & Ito, K. (2008). Color Universal Design (CUD): how to make figures and
   presentations that are friendly to colorblind people. J*FLY Data Depository for
   Drosophila Researchers. (The eight colours are also listed in Wong, B. 2011, Points of
   view: Color blindness, Nature Methods 8, 441, doi:10.1038/nmeth.1618.)
.. [2] Fierz, C. et al. (2009). The International Classification for Seasonal Snow on the
   Ground. IHP-VII Technical Documents in Hydrology 83, UNESCO-IHP, Paris.
.. [3] Crameri, F., Shephard, G. E. & Heron, P. J. (2020). The misuse of colour in science
   communication. Nature Communications 11, 5444, doi:10.1038/s41467-020-19160-7.
"""

from __future__ import annotations

import hashlib
import io
import re
from pathlib import Path

import numpy as np
from matplotlib.colors import LinearSegmentedColormap, to_rgb
from matplotlib.figure import Figure

from regionmap.io.atomic import atomic_path

__all__ = [
    "OKABE_ITO",
    "GRAIN_MAIN_COLOURS",
    "grain_colour",
    "grain_main_class",
    "METRIC_CMAP",
    "METRIC_RAMP",
    "METRIC_RAMPS",
    "metric_cmap",
    "robust_top",
    "text_colour_on",
    "relative_luminance",
    "PRINT_DPI",
    "REPORT_DPI",
    "new_figure",
    "slug",
    "save_png",
    "render_png",
    "zone_slug",
    "encode_png",
]

#: The eight colours of Okabe & Ito (2008), by their published names.
OKABE_ITO: dict[str, str] = {
    "black": "#000000",
    "orange": "#E69F00",
    "sky blue": "#56B4E9",
    "bluish green": "#009E73",
    "yellow": "#F0E442",
    "blue": "#0072B2",
    "vermillion": "#D55E00",
    "reddish purple": "#CC79A7",
}

#: Main grain class → colour (our assignment of the Okabe & Ito set).
GRAIN_MAIN_COLOURS: dict[str, str] = {
    "PP": OKABE_ITO["sky blue"],
    "DF": OKABE_ITO["bluish green"],
    "RG": OKABE_ITO["yellow"],
    "FC": OKABE_ITO["orange"],
    "DH": OKABE_ITO["vermillion"],
    "SH": OKABE_ITO["reddish purple"],
    "MF": OKABE_ITO["blue"],
    "IF": OKABE_ITO["black"],
}
_UNKNOWN_GRAIN = "#BBBBBB"

#: The sequential ramp for metric values, light to dark (regionmap's own).
METRIC_RAMP: tuple[str, ...] = (
    "#F7F7FB",
    "#DCDFF0",
    "#B9BFE1",
    "#959ECF",
    "#737CBB",
    "#5559A3",
    "#3B3C86",
    "#232262",
)
METRIC_CMAP = LinearSegmentedColormap.from_list(
    "regionmap_indigo", METRIC_RAMP, N=256
).with_extremes(bad=(1.0, 1.0, 1.0, 0.0))

#: ColorBrewer sequential ramp of each quantity (Harrower & Brewer 2003, as matplotlib ships
#: them): single- or two-hue ramps whose lightness falls monotonically, so they stay readable
#: for the common colour-vision deficiencies; none passes through green, yellow, orange or
#: red. Quantities not listed use :data:`METRIC_CMAP`.
#:
#: Harrower, M. & Brewer, C. A. (2003). ColorBrewer.org: an online tool for selecting colour
#: schemes for maps. The Cartographic Journal 40(1), 27-37, doi:10.1179/000870403235002042.
METRIC_RAMPS: dict[str, str] = {
    "snow_depth_cm": "PuBu",
    "new_snow_24h_cm": "BuPu",
    "new_snow_72h_cm": "BuPu",
    "new_snow_72h_kg_m2": "BuPu",
    "depth_hoar_fraction": "Purples",
    "pwl_fraction": "Purples",
    "pwl_depth_cm": "Blues",
    "pwl_slab_cm": "Blues",
    "crust_count": "Greys",
    "crust_count_mean": "Greys",
    "threshold_count_max": "Purples",
}
#: percentile of a quantity's values that tops its colour scale when it has no fixed one, so
#: that a few outliers do not wash out the rest (the colour bar then extends beyond it).
ROBUST_PERCENTILE = 98.0


def metric_cmap(name: str):
    """The colour map of a quantity (:data:`METRIC_RAMPS`, from the ramp's light end but not
    its near-white, which would vanish over the hillshade), else :data:`METRIC_CMAP`."""
    from matplotlib import colormaps

    if name not in METRIC_RAMPS:
        return METRIC_CMAP
    base = colormaps[METRIC_RAMPS[name]]
    colours = base(np.linspace(0.15, 1.0, 256))
    return LinearSegmentedColormap.from_list(f"regionmap_{name}", colours, N=256).with_extremes(
        bad=(1.0, 1.0, 1.0, 0.0)
    )


def robust_top(values, fixed: float | None = None) -> float:
    """Top of a colour scale: ``fixed`` when given, else the :data:`ROBUST_PERCENTILE` of the
    finite values rounded up to a 1-2-2.5-5 step (1.0 when there are none above 0)."""
    if fixed is not None:
        return float(fixed)
    v = np.asarray(values, dtype=np.float64)
    v = v[np.isfinite(v)]
    top = float(np.percentile(v, ROBUST_PERCENTILE)) if v.size else 0.0
    if top <= 0:
        return 1.0
    p = 10 ** np.floor(np.log10(top))
    return float(min(s * p for s in (1, 1.5, 2, 2.5, 3, 4, 5, 6, 8, 10) if s * p >= top))


#: Print resolution of the PNGs under figures/ [dots per inch] (150 dpi or more is the usual
#: floor for print; common practice).
PRINT_DPI = 150
#: zlib level of the PNGs under figures/: 1 encodes several times faster than the default 6
#: for a few per cent more bytes on flat-coloured figures (measured on the demo).
PNG_COMPRESS_LEVEL = 1
#: Resolution of the copies embedded in report.html [dots per inch].
REPORT_DPI = 72


def grain_main_class(code: str) -> str:
    """Main class of a grain code: the first two letters (``FCxr`` → ``FC``)."""
    return str(code)[:2]


def grain_colour(code: str) -> str:
    """Colour of a grain-class code (subclasses take their main class's colour)."""
    return GRAIN_MAIN_COLOURS.get(grain_main_class(code), _UNKNOWN_GRAIN)


def relative_luminance(colour) -> float:
    """Relative luminance of an sRGB colour (IEC 61966-2-1 transfer, WCAG 2 weights) [0–1]."""
    rgb = np.asarray(to_rgb(colour), dtype=np.float64)
    lin = np.where(rgb <= 0.04045, rgb / 12.92, ((rgb + 0.055) / 1.055) ** 2.4)
    return float(lin @ np.array([0.2126, 0.7152, 0.0722]))


def text_colour_on(colour) -> str:
    """Black or white, whichever contrasts more with ``colour`` (WCAG 2 contrast ratio)."""
    lum = relative_luminance(colour)
    return "black" if (lum + 0.05) / 0.05 >= 1.05 / (lum + 0.05) else "white"


def new_figure(width_in: float, height_in: float) -> Figure:
    """A matplotlib Figure on the Agg canvas, outside pyplot (no display, no global state)."""
    fig = Figure(figsize=(width_in, height_in), layout="constrained")
    return fig


def slug(text: str) -> str:
    """File-name-safe lower-case form of a name (``"Upper Vell"`` → ``upper-vell``)."""
    s = re.sub(r"[^0-9a-zA-Z]+", "-", str(text)).strip("-").lower()
    return s or "x"


def zone_slug(zone: str) -> str:
    """File-name part of a zone, unique per zone name: its :func:`slug` and the first 6 hex
    digits of the name's SHA-256 (``"H West"`` and ``"h/west"`` share the slug ``h-west``)."""
    return f"{slug(zone)}-{hashlib.sha256(str(zone).encode()).hexdigest()[:6]}"


def render_png(fig: Figure, *, dpi: int = PRINT_DPI) -> tuple[bytes, np.ndarray]:
    """Draw a figure once on the Agg canvas and encode it as PNG.

    ``Figure.savefig`` draws a figure with a layout engine twice (a layout pass, then the
    real one); drawing on the canvas runs the layout and renders in one pass, and the pixels
    are then encoded with Pillow at :data:`PNG_COMPRESS_LEVEL`.

    Returns
    -------
    png : the PNG file's bytes (with its resolution in the pHYs chunk).
    rgb : ndarray (y, x, 3) uint8, the pixels (for reduced copies).
    """
    import matplotlib
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.text import Text

    canvas = FigureCanvasAgg(fig)
    fig.set_dpi(dpi)
    # every text is plain: a zone named "$x$" must not be read as mathtext
    for text in fig.findobj(Text):
        text.set_parse_math(False)
    with matplotlib.rc_context({"text.parse_math": False}):
        canvas.draw()
    rgb = np.asarray(canvas.buffer_rgba())[..., :3].copy()
    return encode_png(rgb, dpi=dpi), rgb


def encode_png(
    rgb: np.ndarray, *, dpi: int = PRINT_DPI, compress_level: int = PNG_COMPRESS_LEVEL
) -> bytes:
    """PNG bytes of an (y, x, 3) uint8 image (Pillow), its resolution recorded as ``dpi``."""
    from PIL import Image

    buf = io.BytesIO()
    Image.fromarray(rgb, mode="RGB").save(
        buf, format="PNG", compress_level=compress_level, dpi=(dpi, dpi)
    )
    return buf.getvalue()


def save_png(fig: Figure, path: Path, *, dpi: int = PRINT_DPI) -> Path:
    """Save a figure as PNG (folders created), atomically (one draw, see :func:`render_png`)."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    png, _ = render_png(fig, dpi=dpi)
    with atomic_path(path) as tmp:
        Path(tmp).write_bytes(png)
    return path
