"""Static charts of the warranty evidence pack (issue #17): matplotlib, Agg backend, PNG.

Each function takes the table that is also written to the pack's ``data/`` folder and
returns PNG bytes, so every figure can be redrawn from its CSV. Colours are the dashboard's
(:mod:`dashboard.theme`: Okabe & Ito 2008 categorical colours), and every series also differs
by line style or marker so the charts read in greyscale and for colour-blind readers.
The PNGs carry no time stamp or software tag (``metadata``), so equal data give equal bytes.
"""

from __future__ import annotations

import io

import matplotlib

matplotlib.use("Agg")  # no display, no browser
import matplotlib.dates as mdates  # noqa: E402
import matplotlib.pyplot as plt  # noqa: E402
import pandas as pd  # noqa: E402

from dashboard.theme import OKABE_ITO, PRIMARY, SERIES  # noqa: E402

DPI = 200
WIDTH_IN = 6.7  # fits the A4 text width with 2 cm margins
GREY = "#7A7A7A"
#: Markers and line styles that separate series without colour.
MARKERS = ["o", "s", "^", "D", "v", "P", "X", "*", "h", "<", ">"]
LINESTYLES = ["-", "--", ":", "-."]
PNG_METADATA = {"Software": None}

plt.rcParams.update({"font.family": "DejaVu Sans", "font.size": 8.5, "axes.titlesize": 9.5,
                     "axes.titleweight": "bold", "axes.titlecolor": PRIMARY,
                     "axes.spines.top": False, "axes.spines.right": False,
                     "axes.grid": True, "grid.color": "#E4E4E4", "grid.linewidth": 0.6,
                     "legend.fontsize": 7.5, "legend.frameon": False, "svg.hashsalt": "heliaudit"})


def _png(fig) -> bytes:
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=DPI, bbox_inches="tight", metadata=PNG_METADATA)
    plt.close(fig)
    return buf.getvalue()


def _empty(message: str, height_in: float = 1.4) -> bytes:
    fig, ax = plt.subplots(figsize=(WIDTH_IN, height_in))
    ax.axis("off")
    ax.text(0.5, 0.5, message, ha="center", va="center", color=GREY, fontsize=9)
    return _png(fig)


def coverage_chart(monthly: pd.DataFrame) -> bytes:
    """Stacked monthly bars of inverter-days: valid (coverage at or above the minimum),
    not valid (coverage below the minimum), and no data.

    ``monthly``: columns ``month`` (YYYY-MM), ``days_valid``, ``days_not_valid``,
    ``days_missing`` (inverter-days summed over the chosen inverters).
    """
    if monthly.empty:
        return _empty("No daily rows in the period")
    x = range(len(monthly))
    fig, ax = plt.subplots(figsize=(WIDTH_IN, 2.5))
    parts = [("days_valid", "valid days (coverage at or above the minimum)", OKABE_ITO["blue"], None),
             ("days_not_valid", "days excluded (coverage below the minimum)",
              OKABE_ITO["orange"], "////"),
             ("days_missing", "days without data", "#D9D9D9", "..")]
    bottom = pd.Series(0.0, index=monthly.index)
    for col, label, colour, hatch in parts:
        ax.bar(x, monthly[col], bottom=bottom, color=colour, hatch=hatch, edgecolor="white",
               linewidth=0.4, label=label, width=0.85)
        bottom = bottom + monthly[col]
    step = max(1, len(monthly) // 12)
    ax.set_xticks(list(x)[::step], monthly["month"].iloc[::step], rotation=45, ha="right")
    ax.set_ylabel("inverter-days [d]")
    ax.set_title("Data coverage per month (all chosen inverters)", loc="left")
    ax.legend(loc="upper left", bbox_to_anchor=(0, -0.32), ncol=3)
    ax.grid(axis="x", visible=False)
    return _png(fig)


def index_chart(daily: pd.DataFrame, trend: pd.DataFrame | None, change_points: list[dict],
                soiling: pd.DataFrame | None, title: str) -> bytes:
    """Daily performance index with its 30-day rolling median, the recommended rate as a
    line through the period, level shifts (vertical lines) and soiling intervals (shaded).

    ``daily``: ``day, pi`` (valid days); ``trend``: ``day, pi_trend``; ``soiling``:
    ``first_day, last_day``.
    """
    if daily.empty:
        return _empty("No valid days: no performance index to show")
    d = daily.copy()
    d["day"] = pd.to_datetime(d["day"])
    fig, ax = plt.subplots(figsize=(WIDTH_IN, 2.8))
    if soiling is not None:
        for k, (_, s) in enumerate(soiling.iterrows()):
            ax.axvspan(pd.Timestamp(s["first_day"]), pd.Timestamp(s["last_day"]),
                       color=OKABE_ITO["orange"], alpha=0.15, lw=0,
                       label="soiling interval (flag)" if k == 0 else None)
    ax.plot(d["day"], d["pi"], ls="none", marker=".", ms=2.2, color=GREY, alpha=0.6,
            label="daily index (valid days)")
    roll = d.set_index("day")["pi"].rolling("30D", min_periods=10).median()
    ax.plot(roll.index, roll.to_numpy(), color=OKABE_ITO["blue"], lw=1.4, ls="-",
            label="30-day rolling median")
    if trend is not None and not trend.empty:
        ax.plot(pd.to_datetime(trend["day"]), trend["pi_trend"], color=OKABE_ITO["bluish_green"],
                lw=2.0, ls="--", label="recommended rate (line through the period)")
    for k, c in enumerate(change_points):
        ax.axvline(pd.Timestamp(c["day"]), color=OKABE_ITO["vermillion"], lw=1.1, ls=":",
                   label="level shift (change point)" if k == 0 else None)
    loc = mdates.AutoDateLocator(minticks=4, maxticks=9)
    ax.xaxis.set_major_locator(loc)
    ax.xaxis.set_major_formatter(mdates.ConciseDateFormatter(loc))
    ax.set_ylabel("performance index [-]")
    lo, hi = d["pi"].quantile([0.01, 0.99])
    pad = 0.05 * max(hi - lo, 0.05)
    ax.set_ylim(lo - pad, hi + pad)
    ax.set_title(title, loc="left")
    ax.legend(loc="upper left", bbox_to_anchor=(0, -0.12), ncol=3)
    return _png(fig)


def rates_chart(rates: pd.DataFrame) -> bytes:
    """Forest plot: every method's rate and interval per device, one marker per method.

    ``rates``: ``device_id, method, rate_pct_per_yr, ci_low, ci_high, recommended`` (bool).
    Rows without a rate are left out.
    """
    r = rates.dropna(subset=["rate_pct_per_yr"])
    if r.empty:
        return _empty("No method produced a rate (too little data)")
    devices = list(dict.fromkeys(r["device_id"]))
    methods = list(dict.fromkeys(r["method"]))
    fig, ax = plt.subplots(figsize=(WIDTH_IN, 0.9 + 0.32 * len(devices) * max(1, len(methods)) / 2))
    n = len(methods)
    for j, m in enumerate(methods):
        sub = r[r["method"] == m]
        y = [devices.index(dv) + (j - (n - 1) / 2) * 0.8 / max(n, 1) for dv in sub["device_id"]]
        colour = SERIES[j % len(SERIES)]
        lo = (sub["rate_pct_per_yr"] - sub["ci_low"]).clip(lower=0).fillna(0)
        hi = (sub["ci_high"] - sub["rate_pct_per_yr"]).clip(lower=0).fillna(0)
        ax.errorbar(sub["rate_pct_per_yr"], y, xerr=[lo, hi], fmt=MARKERS[j % len(MARKERS)],
                    color=colour, ms=4.5, lw=1.0, capsize=2, label=m,
                    mfc="white" if j % 2 else colour)
    rec = r[r["recommended"].astype(bool)]
    if not rec.empty:
        ax.scatter(rec["rate_pct_per_yr"], [devices.index(dv) for dv in rec["device_id"]],
                   s=70, facecolors="none", edgecolors="black", lw=1.2, zorder=5,
                   label="recommended rate (ring)")
    ax.axvline(0, color=GREY, lw=0.8)
    ax.set_yticks(range(len(devices)), devices)
    ax.invert_yaxis()
    ax.set_xlabel("degradation rate [%/yr] (negative = loss); bars: interval")
    ax.set_title("Every method's rate and interval", loc="left")
    ax.legend(loc="upper left", bbox_to_anchor=(1.01, 1.0), ncol=1)
    return _png(fig)


def warranty_chart(env: pd.DataFrame, title: str) -> bytes:
    """Warranted minimum (line) against the measured monthly index relative to the
    warranty start (markers), both in % of nameplate.

    ``env``: ``years, warranted_pct, relative_pct``.
    """
    if env.empty:
        return _empty("No warranty comparison (no terms, or too little data)")
    fig, ax = plt.subplots(figsize=(WIDTH_IN, 2.7))
    ax.plot(env["years"], env["relative_pct"], ls="none", marker="o", ms=3.2, mfc="white",
            color=OKABE_ITO["blue"], label="measured index, monthly, de-seasonalised")
    ax.plot(env["years"], env["warranted_pct"], color=OKABE_ITO["vermillion"], lw=2.0, ls="-",
            label="warranted minimum")
    below = env[env["relative_pct"] < env["warranted_pct"]]
    if not below.empty:
        ax.plot(below["years"], below["relative_pct"], ls="none", marker="x", ms=5,
                color="black", label="month below the warranted minimum")
    ax.set_xlabel("years since warranty start [yr]")
    ax.set_ylabel("relative to nameplate [%]")
    ax.set_title(title, loc="left")
    ax.legend(loc="upper left", bbox_to_anchor=(0, -0.2), ncol=3)
    return _png(fig)


def warranty_panels(env: pd.DataFrame, devices: list[str], title: str) -> bytes:
    """Small multiples of :func:`warranty_chart`, one panel per device (2 columns, shared
    axes). ``env``: ``device_id, years, warranted_pct, relative_pct``."""
    devices = [d for d in devices if (env["device_id"] == d).any()]
    if not devices:
        return _empty("No warranty comparison per inverter (no terms, or too little data)")
    n_rows = (len(devices) + 1) // 2
    fig, axes = plt.subplots(n_rows, 2, figsize=(WIDTH_IN, 0.4 + 1.55 * n_rows), sharex=True,
                             sharey=True, squeeze=False)
    for k, ax in enumerate(axes.flat):
        if k >= len(devices):
            ax.axis("off")
            continue
        d = env[env["device_id"] == devices[k]]
        ax.plot(d["years"], d["relative_pct"], ls="none", marker="o", ms=2.4, mfc="white",
                color=OKABE_ITO["blue"])
        ax.plot(d["years"], d["warranted_pct"], color=OKABE_ITO["vermillion"], lw=1.5)
        below = d[d["relative_pct"] < d["warranted_pct"]]
        ax.plot(below["years"], below["relative_pct"], ls="none", marker="x", ms=4,
                color="black")
        ax.set_title(devices[k], loc="left", fontsize=8, color=PRIMARY)
        ax.tick_params(labelsize=7)
    for ax in axes[-1]:
        ax.set_xlabel("years since warranty start [yr]", fontsize=7)
    for ax in axes[:, 0]:
        ax.set_ylabel("[% of nameplate]", fontsize=7)
    fig.suptitle(title + " (circles: measured index; line: warranted minimum; x: below)",
                 x=0.01, ha="left", fontsize=8.5, color=PRIMARY, fontweight="bold")
    fig.tight_layout()
    return _png(fig)
