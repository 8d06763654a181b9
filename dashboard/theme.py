"""Colours and the plotly template of the dashboard: readable for colour-blind users.

Sources of the palettes
-----------------------
* Categorical series (inverters, methods, quantities): the eight colours of
  M. Okabe and K. Ito, "Color Universal Design (CUD): how to make figures and presentations
  that are friendly to colorblind people," 2008 (J*FLY). Distinguishable under protanopia,
  deuteranopia and tritanopia.
* Diverging scale for PR relative to the site median: Paul Tol's diverging "BuRd" scheme,
  P. Tol, "Colour Schemes," SRON technical note SRON/EPS/TN/09-002, issue 3.2, 2021.
  Reversed so that below-median (under-performing) days are red and above-median days blue;
  the centre is a light grey-white, so a lone outlier stands out against a calm field.
* Sequential scale for completeness: Tol's "YlOrBr" sequential scheme (same note), which
  is ordered in lightness and prints legibly in grey scale.

The dashboard's own look: a slate header colour, warm sand accents, a light background.
It deliberately does not follow any monitoring portal's layout or colour codes.
"""

from __future__ import annotations

import plotly.graph_objects as go
import plotly.io as pio

# Okabe & Ito (2008), in their published order.
OKABE_ITO = {
    "black": "#000000",
    "orange": "#E69F00",
    "sky_blue": "#56B4E9",
    "bluish_green": "#009E73",
    "yellow": "#F0E442",
    "blue": "#0072B2",
    "vermillion": "#D55E00",
    "reddish_purple": "#CC79A7",
}
#: Series order for plots (yellow last: weakest on white).
SERIES = [OKABE_ITO[k] for k in ("blue", "vermillion", "bluish_green", "reddish_purple",
                                 "orange", "sky_blue", "black", "yellow")]

# Roles (all from Okabe & Ito).
MEASURED = OKABE_ITO["blue"]
EXPECTED = OKABE_ITO["orange"]
IRRADIANCE = OKABE_ITO["orange"]
T_MODULE = OKABE_ITO["vermillion"]
T_CELL = OKABE_ITO["reddish_purple"]
T_AMB = OKABE_ITO["sky_blue"]
FIT = OKABE_ITO["bluish_green"]
WARRANTY = OKABE_ITO["vermillion"]
PEER = "#B8B8B8"  # neutral grey for peers in the background
FLAG_FILL = "rgba(213, 94, 0, 0.13)"  # vermillion, translucent
SOILING_FILL = "rgba(230, 159, 0, 0.16)"  # orange, translucent
BAND_FILL = "rgba(0, 158, 115, 0.18)"  # bluish green, translucent
SEVERITY = {"alarm": OKABE_ITO["vermillion"], "warning": OKABE_ITO["orange"],
            "info": OKABE_ITO["sky_blue"]}

# Tol (2021) "BuRd", reversed: index 0 = far below the median (red) ... 8 = far above (blue).
TOL_BURD = ["#2166AC", "#4393C3", "#92C5DE", "#D1E5F0", "#F7F7F7",
            "#FDDBC7", "#F4A582", "#D6604D", "#B2182B"]
DIVERGING = [[i / 8, c] for i, c in enumerate(reversed(TOL_BURD))]
# Tol (2021) "YlOrBr" sequential, reversed so that complete (1.0) is the calm light end.
TOL_YLORBR = ["#FFFFE5", "#FFF7BC", "#FEE391", "#FEC44F", "#FB9A29",
              "#EC7014", "#CC4C02", "#993404", "#662506"]
SEQUENTIAL_GAPS = [[i / 8, c] for i, c in enumerate(reversed(TOL_YLORBR))]
MISSING = "#E6E6E6"  # no data: plain light grey, never a colour of the scale

# Streamlit chrome (passed as --theme.* flags by `heliaudit dashboard`).
PRIMARY = "#2F4858"  # slate
BACKGROUND = "#FBFAF7"
SECONDARY_BACKGROUND = "#EFEBE3"  # sand
TEXT = "#1E2328"
STREAMLIT_THEME = {
    "theme.base": "light",
    "theme.primaryColor": PRIMARY,
    "theme.backgroundColor": BACKGROUND,
    "theme.secondaryBackgroundColor": SECONDARY_BACKGROUND,
    "theme.textColor": TEXT,
}

FONT = "Source Sans Pro, Helvetica, Arial, sans-serif"

TEMPLATE = go.layout.Template(
    layout=go.Layout(
        font=dict(family=FONT, size=13, color=TEXT),
        colorway=SERIES,
        paper_bgcolor="white",
        plot_bgcolor="white",
        margin=dict(l=60, r=20, t=86, b=50),
        hovermode="x unified",
        legend=dict(orientation="h", yanchor="bottom", y=1.01, xanchor="left", x=0),
        xaxis=dict(showgrid=True, gridcolor="#ECECEC", zeroline=False, linecolor="#9A9A9A",
                   ticks="outside", automargin=True, title=dict(standoff=8)),
        yaxis=dict(showgrid=True, gridcolor="#ECECEC", zeroline=False, linecolor="#9A9A9A",
                   ticks="outside", automargin=True, title=dict(standoff=8)),
        title=dict(font=dict(size=15, color=PRIMARY), x=0.01, xanchor="left", xref="container",
                   y=0.985, yanchor="top", yref="container"),
    )
)
pio.templates["heliaudit"] = TEMPLATE
