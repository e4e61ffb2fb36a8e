"""The house style of every figure and page: colour maps, verdict colours, fonts, sizes, page CSS.

Colour maps are perceptually uniform (lightness changes evenly along the map): temperature is the
upper 85 % of matplotlib's "inferno" (no black end, so a cool surface still shows its shading), stress
is "cividis" (readable with red-green colour blindness), differences use a map of our own that runs
linearly in CIELAB lightness from a dark blue through a light grey to a dark orange.  Verdict colours
differ in lightness as well as hue (dark = fail, mid = near, light = pass), so they also read in grey
and for colour-blind readers; a failing bar is hatched as well.
"""

from __future__ import annotations

import numpy as np

FONT = "DejaVu Sans"
#: Colour of text, lines and markers.
INK = "#1d1d1f"
MUTED = "#6b6b70"
#: Verdict colours (fill, text on it): fail is dark, near is mid, pass is light; blue/orange for hue.
FAIL = "#7a1f0a"
NEAR = "#d4760b"
PASS = "#9cc3e0"
#: Over-range colour of a stress map: a peak at a singular feature lies above the drawn range.
OVER = "#c2188a"
#: Size of a figure [inch] and its resolution [dot/inch]: 1000 x 720 pixels.
SIZE = (8.0, 5.76)
DPI = 125
#: Off-screen render size [px] of a 3-D view placed in a figure.
RENDER = (1000, 720)


def _lab_to_srgb(lab: np.ndarray) -> np.ndarray:
    """CIELAB (D65) -> sRGB in [0, 1] (clipped)."""
    L, a, b = lab.T
    fy = (L + 16) / 116
    f = np.stack([fy + a / 500, fy, fy - b / 200], axis=1)
    xyz = np.where(f > 6 / 29, f ** 3, 3 * (6 / 29) ** 2 * (f - 4 / 29)) * np.array([0.95047, 1.0, 1.08883])
    m = np.array([[3.2406, -1.5372, -0.4986], [-0.9689, 1.8758, 0.0415], [0.0557, -0.2040, 1.0570]])
    lin = xyz @ m.T
    rgb = np.where(lin <= 0.0031308, 12.92 * lin, 1.055 * np.clip(lin, 0, None) ** (1 / 2.4) - 0.055)
    return np.clip(rgb, 0, 1)


def lightness(rgb) -> float:
    """CIELAB lightness L* [0, 100] of an sRGB colour (components in [0, 1])."""
    c = np.asarray(rgb, dtype=float)[:3]
    lin = np.where(c <= 0.04045, c / 12.92, ((c + 0.055) / 1.055) ** 2.4)
    y = float(lin @ [0.2126, 0.7152, 0.0722])
    return 116 * np.cbrt(y) - 16 if y > (6 / 29) ** 3 else y * (29 / 3) ** 3


def _difference_map():
    """Diverging: L* 30 -> 96 -> 30 linearly, blue (negative) to orange (positive) at moderate chroma."""
    from matplotlib.colors import ListedColormap

    s = np.linspace(-1, 1, 256)
    L = 96 - 66 * np.abs(s)
    chroma = 48 * np.abs(s)
    hue = np.where(s < 0, np.deg2rad(260), np.deg2rad(55))
    lab = np.stack([L, chroma * np.cos(hue), chroma * np.sin(hue)], axis=1)
    return ListedColormap(_lab_to_srgb(lab), name="thermochain_difference")


def colormap(kind: str):
    """The map of a quantity: "temperature", "stress" or "difference" (a matplotlib Colormap)."""
    import matplotlib as mpl
    from matplotlib.colors import ListedColormap

    if kind == "temperature":
        cmap = ListedColormap(mpl.colormaps["inferno"](np.linspace(0.15, 1.0, 256)), name="thermochain_temperature")
    elif kind == "stress":
        cmap = mpl.colormaps["cividis"].with_extremes(over=OVER)
    elif kind == "difference":
        cmap = _difference_map()
    else:
        raise KeyError(kind)
    return cmap


def verdict_colour(margin: float | None) -> str:
    """Fill colour of a bar or cell by its margin (value / limit - 1 for a safety factor, limit - value
    for a temperature scaled to the limit): below 0 fails, below 0.1 is near, else passes."""
    if margin is None:
        return MUTED
    return FAIL if margin < 0 else NEAR if margin < 0.1 else PASS


def rc() -> dict:
    """matplotlib settings of every chart (used with ``matplotlib.rc_context``)."""
    return {"font.family": FONT, "font.size": 10, "axes.titlesize": 11, "axes.titleweight": "bold",
            "axes.titlelocation": "left", "axes.edgecolor": MUTED, "axes.labelcolor": INK,
            "axes.spines.top": False, "axes.spines.right": False, "xtick.color": INK, "ytick.color": INK,
            "text.color": INK, "axes.grid": True, "grid.color": "#dcdce0", "grid.linewidth": 0.6,
            "axes.axisbelow": True, "figure.facecolor": "white", "savefig.facecolor": "white",
            "legend.frameon": False}


#: CSS of the report and every study or comparison page.
CSS = f"""
body{{font-family:"{FONT}",Verdana,sans-serif;margin:0;color:{INK};line-height:1.45;background:#fafafa}}
main{{max-width:74em;margin:0 auto;padding:1.2em 2.2em 3em;background:white;border-left:6px solid #3c5a78}}
h1{{font-size:1.55em;margin:.4em 0 .2em}}h2{{font-size:1.2em;margin-top:1.8em;padding-bottom:.15em;
border-bottom:1px solid #c9ced6}}h3{{font-size:1.02em;margin-top:1.2em}}
table{{border-collapse:collapse;margin:.6em 0;font-size:.92em}}td,th{{border-bottom:1px solid #d6d9de;
padding:.22em .7em;text-align:right;vertical-align:top}}th{{background:#eef1f5;font-weight:600}}
td:first-child,th:first-child{{text-align:left}}.text td,.text th{{text-align:left}}
.fail{{background:{FAIL};color:white;font-weight:bold}}.near{{background:{NEAR};color:black;font-weight:bold}}
.pass{{background:{PASS};color:black}}.nolimit{{color:{MUTED}}}.changed{{font-weight:bold;background:#e6e9ee}}
.verdict{{border:2px solid {INK};padding:.2em 1.2em .6em;margin:1em 0;background:#fdfdfd}}
.verdict ul{{list-style:none;padding-left:0}}.verdict li{{margin:.45em 0}}.flag{{color:{OVER};font-weight:bold}}
.badge{{display:inline-block;min-width:4.6em;text-align:center;padding:.05em .4em;margin-right:.5em;
font-size:.85em;font-weight:bold;border:1px solid {INK}}}
.warn{{background:#fff4e0;border-left:4px solid {NEAR};padding:.5em 1em;margin:.4em 0}}
.caution{{background:#f0f0f2;border-left:4px solid {MUTED};padding:.7em 1em;font-size:.9em}}
img{{max-width:100%;border:1px solid #e2e4e8}}figure{{margin:1.2em 0}}
figcaption{{font-size:.88em;color:{MUTED}}}.notes{{font-size:.85em;color:{MUTED}}}code{{font-size:.92em}}
"""
