"""ballast's own look for plots and pages: warm paper, slate ink, one alarm colour.

Shared by the plots (matplotlib colours) and the HTML pages (CSS custom properties), so that a
verdict has the same colour everywhere.
"""

from __future__ import annotations

PAPER = "#f7f4ec"
PANEL = "#fffdf8"
INK = "#22313a"
MUTED = "#6b7a83"
RULE = "#d9d2c3"
CURVE = "#1f6f8b"
MIRROR = "#9cc3d2"
ALERT = "#c2452d"
BAND = "#f2c14e"
KUROKAWA = "#6a4c93"

MODEL = "#e3cf8f"     # underlay of contour stretches the validated model fills in

#: one colour per plotted node, in order (eight before the cycle repeats with other dashes)
SERIES = ("#1f6f8b", "#6a4c93", "#3b8c5a", "#b5651d", "#8a3b62", "#4f6d7a", "#9a8420",
          "#2d4f9e")
#: dash patterns that tell apart nodes of one colour, and curves that lie on top of each other
DASHES = ("solid", (0, (5, 2)), (0, (1, 1.6)), (0, (6, 2, 1, 2)))
#: markers sprinkled along node curves (off-set per node, so equal curves show both)
MARKERS = ("o", "s", "^", "v", "D", "P", "X", "<")
#: low → high frequency (stability circles): teal, green, ochre, rust, plum: ballast's own ramp
FREQUENCY_RAMP = ("#1f6f8b", "#3b8c5a", "#b5841d", "#c2452d", "#6a2f6e")

#: verdict or status → colour (badges, table cells, bars)
VERDICT_COLOURS = {
    "stable": "#2f7d5b",
    "unstable": ALERT,
    "indeterminate": "#b07d12",
    "failed": "#5d4e86",
    "cancelled": "#7d868c",
    "queued": "#9aa5ab",
    "running": "#4f8fb0",
}

FONT_FAMILY = ["DejaVu Sans"]


def css_variables() -> str:
    """The palette as CSS custom properties for the pages."""
    pairs = {
        "paper": PAPER, "panel": PANEL, "ink": INK, "muted": MUTED, "rule": RULE,
        "curve": CURVE, "alert": ALERT, "band": BAND,
        **{f"v-{name}": colour for name, colour in VERDICT_COLOURS.items()},
    }
    return ":root{" + ";".join(f"--{k}:{v}" for k, v in pairs.items()) + "}"
