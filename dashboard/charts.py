"""Plotly figures of the dashboard: each takes DataFrames and returns a ``go.Figure``.

No Streamlit here, so the functions are tested on their own (tests/test_dashboard_charts.py).
Every numeric axis title carries its unit in brackets ("POA irradiance [W/m²]"). Colours come
from :mod:`dashboard.theme` (Okabe & Ito 2008; Tol 2021).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import plotly.graph_objects as go

from dashboard import theme

TEMPLATE = "heliaudit"


def _tz_label(std_offset_s: int) -> str:
    h, m = divmod(abs(int(std_offset_s)) // 60, 60)
    sign = "+" if std_offset_s >= 0 else "−"
    return f"Local standard time (UTC{sign}{h:02d}:{m:02d})"


def _local(ts: pd.Series | pd.DatetimeIndex, std_offset_s: int, tz: str | None = None):
    """tz-aware UTC -> naive local time for display: standard time (``std_offset_s``), or
    the wall clock of the zone ``tz`` (with daylight saving) when given."""
    idx = pd.DatetimeIndex(ts)
    if tz is not None:
        idx = idx if idx.tz is not None else idx.tz_localize("UTC")
        return idx.tz_convert(tz).tz_localize(None)
    if idx.tz is not None:
        idx = idx.tz_convert("UTC").tz_localize(None)
    return idx + pd.Timedelta(seconds=int(std_offset_s))


def _rgba(hex_colour: str, alpha: float) -> str:
    r, g, b = (int(hex_colour[i:i + 2], 16) for i in (1, 3, 5))
    return f"rgba({r}, {g}, {b}, {alpha})"


def empty(message: str, x_title: str = "", y_title: str = "") -> go.Figure:
    fig = go.Figure(layout=dict(template=TEMPLATE, height=220))
    fig.add_annotation(text=message, showarrow=False, x=0.5, y=0.5, xref="paper",
                       yref="paper", font=dict(size=14, color="#666"))
    fig.update_xaxes(title_text=x_title, showticklabels=False)
    fig.update_yaxes(title_text=y_title, showticklabels=False)
    return fig


# ---------------------------------------------------------------- weekly check


PERIOD_WORDS = {"day": ("Day", "%Y-%m-%d", "day"), "week": ("Week starting", "%Y-%m-%d", "week"),
                "month": ("Month", "%Y-%m", "month")}


def pr_heatmap(heat: pd.DataFrame, limit_pct: float = 10.0, period: str = "day") -> go.Figure:
    """Calendar heatmap: inverter x period of PR_STC relative to the site median.

    ``heat`` is :func:`dashboard.data.pr_relative_heatmap` (index device_id, columns the
    first day of each period, %); ``period`` is ``"day"``, ``"week"`` or ``"month"``.
    The scale is diverging and symmetric about 0 (Tol's BuRd, red = below the median),
    saturating at ± ``limit_pct``.
    """
    x_word, x_fmt, p_word = PERIOD_WORDS.get(period, PERIOD_WORDS["day"])
    if heat.empty:
        return empty("No daily results in this window", f"{x_word} (local standard time)",
                     "Inverter")
    z = heat.to_numpy(dtype=float)
    n = len(heat.index)
    # one dict, one validation pass (a 100-inverter fleet over 12 weeks is 8400 cells);
    # not-valid days are gaps on the grey plot background, without hover
    trace = dict(type="heatmap", z=z, x=pd.to_datetime(pd.Index(heat.columns)).to_numpy(),
                 y=[str(i) for i in heat.index], colorscale=theme.DIVERGING, zmid=0,
                 zmin=-limit_pct, zmax=limit_pct, hoverongaps=False,
                 xgap=1 if heat.shape[1] <= 200 else 0, ygap=1,
                 hovertemplate="%{y} · " + p_word + " %{x|" + x_fmt + "}<br>PR_STC vs site "
                               "median: %{z:+.1f} %<extra></extra>",
                 colorbar=dict(title=dict(text="PR_STC vs<br>site median [%]", side="right"),
                               ticksuffix=" %", thickness=14))
    layout = dict(template=TEMPLATE, height=_heat_height(n), plot_bgcolor=theme.MISSING,
                  hovermode="closest",
                  title=dict(text={"day": "Daily", "week": "Weekly", "month": "Monthly"}.get(
                      period, "Daily") + " temperature-corrected PR relative to the site median"),
                  xaxis=dict(title=dict(text=f"{x_word} (local standard time)"), showgrid=False),
                  yaxis=dict(title=dict(text="Inverter"), autorange="reversed", showgrid=False,
                             type="category", dtick=1 if n <= 60 else None,
                             tickfont=dict(size=10 if n > 40 else 12)))
    return go.Figure(data=[trace], layout=layout)


def _heat_height(n_rows: int) -> int:
    """Heatmap height [px]: ~22 px a row for a few rows, ~14 px for a fleet, within 320..1500."""
    per_row = 22 if n_rows <= 30 else 14
    return int(min(1500, max(320, 150 + per_row * n_rows)))


def fleet_quadrant(fleet: pd.DataFrame) -> go.Figure:
    """Last week's PR_STC against the inverter's own trailing weeks (x) and its peers (y).

    Each marker is one inverter, sized by last week's energy and coloured by its most
    severe warning or alarm of the week (``worst_severity``; info flags such as clipping do
    not colour it); the lower-left quadrant (worse than its own history and its peers) is
    where problems sit.
    """
    f = fleet.dropna(subset=["d_trailing_pct", "d_peers_pct"])
    if f.empty:
        return empty("No inverter has a valid week and trailing weeks",
                     "PR_STC vs own trailing weeks [%]", "PR_STC vs peer median [%]")
    size = f["e_ac_kwh"].fillna(0).to_numpy()
    size = 8 + 14 * size / size.max() if size.max() > 0 else np.full(len(f), 10)
    worst = (f["worst_severity"] if "worst_severity" in f
             else pd.Series(np.where(f["n_flags"] > 0, "alarm", "none"), index=f.index))
    colour = [theme.SEVERITY.get(w, theme.MEASURED) for w in worst]
    fig = go.Figure(go.Scatter(
        x=f["d_trailing_pct"], y=f["d_peers_pct"], mode="markers+text",
        text=np.where((f["d_peers_pct"] < -3) | (f["d_trailing_pct"] < -3), f["device_id"], ""),
        textposition="top center", textfont=dict(size=10),
        marker=dict(size=size, color=colour, line=dict(width=0.5, color="white"), opacity=0.85),
        customdata=np.stack([f["device_id"], f["e_ac_kwh"], worst.replace("none", "no")],
                            axis=1),
        hovertemplate="%{customdata[0]}<br>vs own trailing weeks: %{x:+.1f} %"
                      "<br>vs peers: %{y:+.1f} %<br>energy: %{customdata[1]:,.0f} kWh"
                      "<br>worst flag: %{customdata[2]}<extra></extra>",
        showlegend=False))
    for sev, name in (("alarm", "alarm this week"), ("warning", "warning this week"),
                      ("none", "no warning or alarm")):
        fig.add_trace(go.Scatter(x=[None], y=[None], mode="markers", name=name,
                                 marker=dict(size=10, color=theme.SEVERITY.get(sev,
                                                                              theme.MEASURED))))
    for axis in ("x", "y"):
        fig.add_shape(type="line", xref="x" if axis == "x" else "paper",
                      yref="paper" if axis == "x" else "y",
                      x0=0 if axis == "x" else 0, x1=0 if axis == "x" else 1,
                      y0=0 if axis == "x" else 0, y1=1 if axis == "x" else 0,
                      line=dict(color="#888", width=1, dash="dot"))
    fig.update_layout(template=TEMPLATE, height=380, hovermode="closest",
                      title="Last week vs own history and peers")
    fig.update_xaxes(title_text="PR_STC vs own trailing weeks [%]", ticksuffix=" %")
    fig.update_yaxes(title_text="PR_STC vs peer median [%]", ticksuffix=" %")
    return fig


# ---------------------------------------------------------------- trends


def pr_trend(chosen: pd.DataFrame, peers: pd.DataFrame, flagged: pd.DataFrame | None = None,
             soiling: pd.DataFrame | None = None, fits: dict | None = None) -> go.Figure:
    """Daily PR_STC of chosen inverters with rolling medians over the peers' band.

    ``chosen``/``peers`` from :func:`dashboard.data.pr_trend`; ``flagged`` the flagged days
    (a rug of ticks under the data); ``soiling`` rows with ``start_local, end_local`` (shaded); ``fits`` maps
    a label to a frame ``day, fit, lo, hi`` (line and confidence band).
    """
    if chosen.empty:
        return empty("Choose inverters with daily results", "Day (local standard time)",
                     "Temperature-corrected PR (PR_STC) [–]")
    fig = go.Figure()
    if not peers.empty:
        fig.add_trace(go.Scatter(x=peers["day"], y=peers["p90"], mode="lines",
                                 line=dict(width=0), hoverinfo="skip", showlegend=False))
        fig.add_trace(go.Scatter(x=peers["day"], y=peers["p10"], mode="lines",
                                 line=dict(width=0), fill="tonexty",
                                 fillcolor="rgba(184,184,184,0.35)", hoverinfo="skip",
                                 name="site inverters, 10–90 % of rolling medians"))
        fig.add_trace(go.Scatter(x=peers["day"], y=peers["p50"], mode="lines",
                                 line=dict(color=theme.PEER, width=1.5),
                                 name="site median (rolling)"))
    for r in (soiling.itertuples() if soiling is not None else []):
        fig.add_vrect(x0=r.start_local, x1=r.end_local, fillcolor=theme.SOILING_FILL,
                      line_width=0, layer="below")
    if soiling is not None and not soiling.empty:
        fig.add_trace(go.Scatter(x=[None], y=[None], mode="markers", name="soiling interval",
                                 marker=dict(symbol="square", size=12,
                                             color=theme.SOILING_FILL)))
    for k, (dev, g) in enumerate(chosen.groupby("device_id", sort=False)):
        c = theme.SERIES[k % len(theme.SERIES)]
        fig.add_trace(go.Scatter(x=g["day"], y=g["pr_stc"], mode="markers",
                                 marker=dict(size=4, color=c, opacity=0.45),
                                 name=f"{dev} daily", legendgroup=dev))
        fig.add_trace(go.Scatter(x=g["day"], y=g["pr_stc_roll"], mode="lines",
                                 line=dict(color=c, width=2.2), name=f"{dev} rolling median",
                                 legendgroup=dev))
    order = {d: k for k, d in enumerate(dict.fromkeys(chosen["device_id"]))}
    for j, (label, fit) in enumerate((fits or {}).items()):
        # the fit takes its inverter's colour (label "<device> <method> fit"), dashed
        k = order.get(str(label).split(" ")[0], j)
        c = theme.SERIES[k % len(theme.SERIES)]
        fig.add_trace(go.Scatter(x=fit["day"], y=fit["hi"], mode="lines", line=dict(width=0),
                                 hoverinfo="skip", showlegend=False, legendgroup=label))
        fig.add_trace(go.Scatter(x=fit["day"], y=fit["lo"], mode="lines", line=dict(width=0),
                                 fill="tonexty", fillcolor=_rgba(c, 0.13), hoverinfo="skip",
                                 name=f"{label}: confidence band", legendgroup=label))
        fig.add_trace(go.Scatter(x=fit["day"], y=fit["fit"], mode="lines",
                                 line=dict(color=c, width=2, dash="dash"),
                                 name=label, legendgroup=label))
    if flagged is not None and not flagged.empty:
        # a rug under the data, one row per inverter, so the marks never hide the points
        lo = float(np.nanmin(chosen[["pr_stc", "pr_stc_roll"]].to_numpy(dtype=float)))
        span = float(np.nanmax(chosen[["pr_stc", "pr_stc_roll"]].to_numpy(dtype=float))) - lo
        step = max(span, 0.02) * 0.035
        order = {d: k for k, d in enumerate(dict.fromkeys(chosen["device_id"]))}
        ys = [lo - step * (1 + order.get(d, 0)) for d in flagged["device_id"]]
        cols = [theme.SERIES[order.get(d, 0) % len(theme.SERIES)] for d in flagged["device_id"]]
        fig.add_trace(go.Scatter(x=flagged["day"], y=ys, mode="markers",
                                 marker=dict(symbol="line-ns-open", size=7, color=cols,
                                             line=dict(width=1, color=cols)),
                                 customdata=flagged[["device_id", "kind"]].to_numpy(),
                                 hovertemplate="%{customdata[0]} %{x|%Y-%m-%d}: "
                                               "%{customdata[1]}<extra></extra>",
                                 name="flagged days (rug, one row per inverter)"))
    fig.update_layout(template=TEMPLATE, height=500, hovermode="closest",
                      title="Daily temperature-corrected PR (valid days)",
                      margin=dict(t=50),
                      legend=dict(orientation="v", x=1.01, xanchor="left", y=1, yanchor="top",
                                  font=dict(size=11)))
    fig.update_xaxes(title_text="Day (local standard time)")
    fig.update_yaxes(title_text="Temperature-corrected PR (PR_STC) [–]")
    return fig


# ---------------------------------------------------------------- degradation


def degradation_forest(results: pd.DataFrame, recommended: dict | None = None) -> go.Figure:
    """Rate per device and method with its interval (dot and whisker), in two panels with
    their own axes: rates of the plant (absolute), and relative figures (rate relative to
    the peers, the POA sensor's drift against clear sky), which are not degradation rates.
    ``recommended`` maps a device to its recommended method (drawn as a ring)."""
    from analytics.labels import RELATIVE_METHODS, method_label

    r = results.dropna(subset=["rate_pct_per_yr"])
    if r.empty:
        return empty("No degradation rate computed yet", "Degradation rate [%/yr]", "Device")
    rel = r[r["method"].isin(RELATIVE_METHODS)]
    absolute = r[~r["method"].isin(RELATIVE_METHODS)]
    methods = list(dict.fromkeys(sorted(absolute["method"].unique())
                                 + sorted(rel["method"].unique())))
    devices = list(dict.fromkeys(r["device_id"]))
    names = {d: ("whole site" if d == "(site)" else d) for d in devices}
    traces = []
    for k, m in enumerate(methods):
        g = r[r["method"] == m]
        axis = "x2" if m in RELATIVE_METHODS else "x"
        traces.append(dict(
            type="scatter", x=g["rate_pct_per_yr"], y=[names[d] for d in g["device_id"]],
            mode="markers", name=method_label(m), xaxis=axis, yaxis="y",
            marker=dict(size=8, color=theme.SERIES[k % len(theme.SERIES)],
                        symbol=["circle", "diamond", "square", "triangle-up", "x",
                                "star"][k % 6]),
            error_x=dict(type="data", symmetric=False,
                         array=(g["ci_high"] - g["rate_pct_per_yr"]).to_numpy(),
                         arrayminus=(g["rate_pct_per_yr"] - g["ci_low"]).to_numpy(),
                         thickness=1.5, width=3),
            hovertemplate="%{y} · " + method_label(m) + ": %{x:.2f} %/yr<extra></extra>"))
    if recommended:
        pts = [(names[d], r[(r["device_id"] == d) & (r["method"] == m)]["rate_pct_per_yr"])
               for d, m in recommended.items() if d in names]
        pts = [(y, float(v.iloc[0])) for y, v in pts if len(v)]
        if pts:
            traces.append(dict(type="scatter", x=[p[1] for p in pts], y=[p[0] for p in pts],
                               mode="markers", name="recommended rate", xaxis="x", yaxis="y",
                               marker=dict(size=16, color="rgba(0,0,0,0)",
                                           line=dict(width=2, color=theme.TEXT)),
                               hoverinfo="skip"))
    n = len(devices)
    layout = dict(
        template=TEMPLATE, height=int(min(1400, max(340, 170 + n * 26))), hovermode="closest",
        title=dict(text="Rates by device and method (negative = loss)"),
        xaxis=dict(domain=[0, 0.64], title=dict(text="Degradation rate of the plant [%/yr]"),
                   zeroline=True, zerolinecolor="#888"),
        xaxis2=dict(domain=[0.72, 1], anchor="y",
                    title=dict(text="Relative to peers / sensor drift [%/yr]"),
                    zeroline=True, zerolinecolor="#888"),
        yaxis=dict(title=dict(text="Device"), type="category", autorange="reversed",
                   categoryorder="array", categoryarray=[names[d] for d in devices]),
        legend=dict(orientation="h", y=1.02, yanchor="bottom", x=0, font=dict(size=11)),
        margin=dict(t=110))
    return go.Figure(data=traces, layout=layout)


def pair_grid_chart(grid: pd.DataFrame, warranted_pct_per_yr: float | None = None,
                    title: str = "") -> go.Figure:
    """Year x season grid of the median year-on-year pair rate (Jordan et al. 2018 pairs,
    grouped by :func:`analytics.reporting.pair_rate_grid`).

    Colour is diverging about the warranted rate when one is given (red: the pairs of that
    season lost more than the warranty allows; blue: less), else about 0 (Tol's BuRd). Each
    cell is labelled with its median and number of pairs; cells with too few pairs are
    empty.
    """
    from analytics.reporting import SEASON_ORDER

    if grid.empty:
        return empty("No year-on-year pairs (less than a year of usable days)",
                     "Season of the later day", "Year of the later day")
    g = grid.copy()
    g["season"] = g["season"].astype(str)
    z = g.pivot(index="year", columns="season", values="median_pct_per_yr").reindex(
        columns=list(SEASON_ORDER))
    n = g.pivot(index="year", columns="season", values="n_pairs").reindex(
        columns=list(SEASON_ORDER))
    mid = float(warranted_pct_per_yr) if warranted_pct_per_yr is not None else 0.0
    text = [[("" if not np.isfinite(v) else f"{v:+.1f}<br>({int(c)})")
             for v, c in zip(zr, cr, strict=True)]
            for zr, cr in zip(z.to_numpy(dtype=float), n.fillna(0).to_numpy(), strict=True)]
    span = max(2.0, float(np.nanmax(np.abs(z.to_numpy(dtype=float) - mid)))
               if np.isfinite(z.to_numpy(dtype=float)).any() else 2.0)
    span = min(span, 6.0)
    fig = go.Figure(go.Heatmap(
        z=z.to_numpy(dtype=float), x=list(z.columns), y=[str(y) for y in z.index],
        text=text, texttemplate="%{text}", colorscale=theme.DIVERGING, zmid=mid,
        zmin=mid - span, zmax=mid + span, xgap=3, ygap=3, hoverongaps=False,
        textfont=dict(size=12),
        hovertemplate="%{y} %{x}: median pair rate %{z:+.2f} %/yr<extra></extra>",
        colorbar=dict(title=dict(text="Median pair<br>rate [%/yr]", side="right"),
                      thickness=14)))
    fig.update_layout(template=TEMPLATE, height=420, margin=dict(t=50),
                      hovermode="closest", plot_bgcolor=theme.MISSING,
                      title=title or "Is the rate stable over the years and seasons?")
    fig.update_xaxes(title_text="Season of the later day of each pair", showgrid=False,
                     side="bottom")
    fig.update_yaxes(title_text="Year of the later day", showgrid=False, type="category",
                     autorange="reversed")
    return fig


def year_rates_chart(grid: pd.DataFrame, rate: float | None = None,
                     ci: tuple[float | None, float | None] | None = None,
                     warranted_pct_per_yr: float | None = None, title: str = "") -> go.Figure:
    """Per pair year: the median of that year's pair rates with the middle half of its pairs
    (a spread, not a confidence interval), against the whole-period rate with its interval
    (band) and the warranted rate (line)."""
    from analytics.reporting import SEASON_ORDER  # noqa: F401 (same grouping as the grid)

    if grid.empty:
        return empty("No year-on-year pairs", "Year of the later day", "Rate [%/yr]")
    g = grid.dropna(subset=["median_pct_per_yr"])
    fig = go.Figure()
    years = sorted({str(y) for y in grid["year"]})
    if ci is not None and None not in ci:
        fig.add_hrect(y0=ci[0], y1=ci[1], fillcolor=theme.BAND_FILL, line_width=0)
        fig.add_trace(go.Scatter(x=[None], y=[None], mode="markers", name="interval of the "
                                 "whole-period rate", marker=dict(symbol="square", size=12,
                                                                   color=theme.BAND_FILL)))
    if rate is not None:
        fig.add_hline(y=rate, line=dict(color=theme.FIT, width=2.5))
        fig.add_trace(go.Scatter(x=[None], y=[None], mode="lines", name=f"whole period "
                                 f"{rate:+.2f} %/yr", line=dict(color=theme.FIT, width=2.5)))
    if warranted_pct_per_yr is not None:
        fig.add_hline(y=warranted_pct_per_yr, line=dict(color=theme.WARRANTY, width=2,
                                                        dash="dash"))
        fig.add_trace(go.Scatter(x=[None], y=[None], mode="lines",
                                 name=f"warranted {warranted_pct_per_yr:+.2f} %/yr",
                                 line=dict(color=theme.WARRANTY, width=2, dash="dash")))
    for k, (season, s) in enumerate(g.groupby("season", observed=True, sort=True)):
        fig.add_trace(go.Scatter(
            x=[str(y) for y in s["year"]], y=s["median_pct_per_yr"], mode="markers",
            name=str(season), offsetgroup=str(season),
            marker=dict(size=9, color=theme.SERIES[k % len(theme.SERIES)]),
            error_y=dict(type="data", symmetric=False,
                         array=(s["q75_pct_per_yr"] - s["median_pct_per_yr"]).to_numpy(),
                         arrayminus=(s["median_pct_per_yr"] - s["q25_pct_per_yr"]).to_numpy(),
                         thickness=1.3, width=3),
            customdata=s["n_pairs"],
            hovertemplate="%{x} " + str(season) + ": median %{y:+.2f} %/yr, "
                          "%{customdata} pairs<extra></extra>"))
    fig.update_layout(template=TEMPLATE, height=420, hovermode="closest", scattermode="group",
                      title=title or "Which periods drive the rate?", margin=dict(t=50, b=120),
                      legend=dict(orientation="h", x=0, xanchor="left", y=-0.22,
                                  yanchor="top", font=dict(size=11)))
    fig.update_xaxes(title_text="Year of the later day of each pair", type="category",
                     categoryorder="array", categoryarray=years)
    fig.update_yaxes(title_text="Pair rate, median and middle half [%/yr]")
    return fig


def soiling_loss_chart(summary: dict) -> go.Figure:
    """Energy lost to soiling in each dry period [kWh] (bars over time), coloured by whether
    a cleaning was recommended at its end."""
    p = summary.get("periods") if summary else None
    if p is None or p.empty:
        return empty("No soiling period", "Dry period", "Energy lost to soiling [kWh]")
    x = pd.to_datetime(p["first_day"])
    colour = [theme.SEVERITY["warning"] if s == "warning" else theme.OKABE_ITO["sky_blue"]
              for s in p["severity"]]
    fig = go.Figure(go.Bar(
        x=x, y=p["lost_kwh"], marker_color=colour, name="dry period",
        customdata=np.stack([p["first_day"], p["last_day"],
                             p["loss_at_end_pct"].astype(float)], axis=1),
        hovertemplate="%{customdata[0]} → %{customdata[1]}: %{y:,.0f} kWh lost, "
                      "%{customdata[2]:.1f} % at its end<extra></extra>"))
    fig.update_layout(template=TEMPLATE, height=300, hovermode="closest", showlegend=False,
                      title="Energy lost to soiling in each dry period (between cleanings)")
    fig.update_xaxes(title_text="Start of the dry period")
    fig.update_yaxes(title_text="Energy lost to soiling [kWh]")
    return fig


def soiling_loss_bar(summary: dict) -> go.Figure:
    """The insolation-weighted soiling loss over the period [%] as one bar, with the 95 %
    Monte-Carlo interval from the soiling rates' standard errors (full recovery at each
    cleaning), and the present loss."""
    loss = summary.get("loss_pct") if summary else None
    if loss is None:
        return empty("No soiling loss computed", "Energy lost to soiling [%]", "")
    lo, hi = summary.get("loss_low_pct"), summary.get("loss_high_pct")
    fig = go.Figure()
    fig.add_trace(go.Bar(x=[loss], y=["whole period"], orientation="h",
                         marker_color=theme.OKABE_ITO["orange"], name="full recovery",
                         hovertemplate="%{x:.2f} % (full recovery at each cleaning)"
                                       "<extra></extra>", width=0.5))
    if lo is not None and hi is not None:
        fig.add_trace(go.Scatter(x=[lo, hi], y=["whole period", "whole period"],
                                 mode="lines+markers", name="95 % interval (soiling rates)",
                                 line=dict(color=theme.TEXT, width=3),
                                 marker=dict(symbol="line-ns-open", size=16,
                                             line=dict(width=3, color=theme.TEXT)),
                                 hovertemplate="%{x:.2f} %<extra></extra>"))
    cur = summary.get("current_loss_pct")
    if cur is not None:
        fig.add_trace(go.Bar(x=[cur], y=["now"], orientation="h", width=0.5,
                             marker_color=theme.OKABE_ITO["vermillion"], name="present loss",
                             hovertemplate="%{x:.2f} % now<extra></extra>"))
    top = max(v for v in (loss, hi, cur, 1.0) if v is not None)
    fig.update_layout(template=TEMPLATE, height=230, hovermode="closest", barmode="overlay",
                      title="Energy lost to soiling")
    fig.update_xaxes(title_text="Energy lost to soiling [%]", range=[0, top * 1.25],
                     ticksuffix=" %")
    fig.update_yaxes(title_text="", type="category")
    return fig


def warranty_chart(envelope: pd.DataFrame | None, measured: pd.DataFrame | None = None,
                   monthly: pd.DataFrame | None = None) -> go.Figure:
    """Warranted minimum power against the measured index, in % of nameplate.

    ``envelope``: ``years, warranted_pct``; ``measured``: ``years, index_pct`` and optional
    ``lo_pct, hi_pct`` (the fitted rate and its interval); ``monthly``: ``years,
    relative_pct`` (monthly measured index relative to the start, dots).
    """
    if envelope is None or envelope.empty:
        return empty("No warranty terms in the site configuration", "Years in operation [yr]",
                     "Power relative to nameplate [%]")
    fig = go.Figure()
    fig.add_trace(go.Scatter(x=envelope["years"], y=envelope["warranted_pct"], mode="lines",
                             line=dict(color=theme.WARRANTY, width=2.5),
                             name="warranted minimum"))
    if monthly is not None and not monthly.empty:
        fig.add_trace(go.Scatter(x=monthly["years"], y=monthly["relative_pct"], mode="markers",
                                 marker=dict(color=theme.MEASURED, size=6, opacity=0.7),
                                 name="measured index, monthly"))
    if measured is not None and not measured.empty:
        if {"lo_pct", "hi_pct"} <= set(measured.columns):
            fig.add_trace(go.Scatter(x=measured["years"], y=measured["hi_pct"], mode="lines",
                                     line=dict(width=0), hoverinfo="skip", showlegend=False))
            fig.add_trace(go.Scatter(x=measured["years"], y=measured["lo_pct"], mode="lines",
                                     line=dict(width=0), fill="tonexty",
                                     fillcolor=theme.BAND_FILL, name="fitted rate, interval"))
        fig.add_trace(go.Scatter(x=measured["years"], y=measured["index_pct"], mode="lines",
                                 line=dict(color=theme.FIT, width=2.5),
                                 name="fitted rate"))
    x_max = float(measured["years"].max()) if measured is not None and not measured.empty else 5
    fig.update_layout(template=TEMPLATE, height=380,
                      title="Warranted envelope and measured index (relative to the start)")
    fig.update_xaxes(title_text="Years since warranty start [yr]",
                     range=[0, max(2.0, min(float(envelope["years"].max()), x_max * 1.6))])
    fig.update_yaxes(title_text="Power relative to nameplate [%]", ticksuffix=" %")
    return fig


# ---------------------------------------------------------------- drill-down


def drilldown(frame: pd.DataFrame, peers: pd.DataFrame, flags: pd.DataFrame,
              inverter_id: str, std_offset_s: int = 0,
              highlight_flag_id: int | None = None, tz: str | None = None) -> go.Figure:
    """Four stacked panels on one zoomable time axis.

    1. AC power against expected AC power [kW]; 2. normalised power of the inverter and its
    peers [kW/kWp]; 3. POA irradiance [W/m²]; 4. module, cell and ambient temperature [°C].
    This inverter's warnings and alarms are shaded across all panels (the highlighted one
    darker). The figure is assembled as one dict (one validation pass): a week of 5-minute
    data with a dozen peers builds in a few tens of milliseconds.
    """
    x_title = _tz_label(std_offset_s) if tz is None else f"Local wall-clock time ({tz})"
    if frame.empty:
        return empty("No interval readings in this window", x_title, "AC power [kW]")
    x = _local(frame.index, std_offset_s, tz)

    def line(y, name, axis, color, width=1.6, dash=None, **kw):
        return dict(type="scatter", mode="lines", x=x, y=np.asarray(y, dtype=float), name=name,
                    xaxis="x", yaxis=axis, line=dict(color=color, width=width, dash=dash), **kw)

    traces = [line(frame["p_ac_exp_kw"], "expected AC power", "y", theme.EXPECTED, dash="dash"),
              line(frame["p_ac_kw"], f"{inverter_id} AC power", "y", theme.MEASURED, 1.8)]
    if peers is not None and not peers.empty:
        for k, (dev, g) in enumerate(peers.groupby("device_id", sort=True)):
            traces.append(dict(type="scatter", mode="lines", name="peers", legendgroup="peers",
                               showlegend=k == 0, xaxis="x", yaxis="y2", opacity=0.85,
                               x=_local(g["ts_utc"], std_offset_s, tz).to_numpy(),
                               y=g["p_ac_kw_per_kwp"].to_numpy(dtype=float),
                               line=dict(color=theme.PEER, width=1),
                               hovertemplate=f"{dev}: " + "%{y:.3f} kW/kWp<extra></extra>"))
    traces.append(line(frame["p_ac_kw_per_kwp"], f"{inverter_id} normalised", "y2",
                       theme.MEASURED, 2, showlegend=False))
    traces.append(line(frame["poa_wm2"], "POA irradiance", "y3", theme.IRRADIANCE, 1.5,
                       fill="tozeroy", fillcolor="rgba(230,159,0,0.12)"))
    traces.append(line(frame["t_module_c"], "module (back) temperature", "y4", theme.T_MODULE,
                       1.5))
    traces.append(line(frame["t_cell_c"], "cell temperature (Sandia)", "y4", theme.T_CELL,
                       1.5, dash="dot"))
    if "t_amb_c" in frame and frame["t_amb_c"].notna().any():
        traces.append(line(frame["t_amb_c"], "ambient temperature", "y4", theme.T_AMB, 1.2))
    lo, hi = x.min(), x.max()
    shapes, notes = [], []
    for f in flags.itertuples() if flags is not None else []:
        strong = highlight_flag_id is not None and f.flag_id == highlight_flag_id
        # shade this inverter's warnings and alarms; info and site-wide events (soiling,
        # cleaning) stay in the table below, or they would tint the whole window
        if not strong and (getattr(f, "severity", "warning") == "info"
                           or not isinstance(getattr(f, "device_id", inverter_id), str)):
            continue
        if hasattr(f, "start_s"):
            a = max(_local(pd.to_datetime([f.start_s], unit="s", utc=True), std_offset_s,
                           tz)[0], lo)
            b = min(_local(pd.to_datetime([f.end_s], unit="s", utc=True), std_offset_s,
                           tz)[0], hi)
        else:  # only local standard times given
            a, b = max(pd.Timestamp(f.start_local), lo), min(pd.Timestamp(f.end_local), hi)
        if b <= a:
            continue
        fill = "rgba(213, 94, 0, 0.28)" if strong else theme.FLAG_FILL
        shapes.append(dict(type="rect", xref="x", yref="paper", x0=a, x1=b, y0=0, y1=1,
                           fillcolor=fill, line=dict(width=0), layer="below"))
        from analytics.labels import kind_label

        notes.append(dict(x=a, y=1.0, xref="x", yref="paper",
                          text=f"#{f.flag_id} {kind_label(f.kind)}",
                          showarrow=False, xanchor="left", yanchor="bottom",
                          font=dict(size=10, color=theme.OKABE_ITO["vermillion"])))
    gap = 0.035
    dom = np.cumsum([0, 0.21, 0.21, 0.24, 0.34]) * (1 - 3 * gap)
    dom = [[float(dom[i] + i * gap), float(dom[i + 1] + i * gap)] for i in range(4)]

    def yax(title, k):
        return dict(title=dict(text=title, font=dict(size=12)), domain=dom[k], anchor="x")

    layout = dict(
        template=TEMPLATE, height=880, hovermode="x unified", margin=dict(t=90),
        legend=dict(orientation="h", y=1.03, yanchor="bottom", x=0, font=dict(size=11)),
        xaxis=dict(title=dict(text=x_title), anchor="y4"),
        yaxis=yax("AC power [kW]", 3), yaxis2=yax("Power per kWp [kW/kWp]", 2),
        yaxis3=yax("POA [W/m²]", 1), yaxis4=yax("Temperature [°C]", 0),
        shapes=shapes, annotations=notes)
    return go.Figure(data=traces, layout=layout)


# ---------------------------------------------------------------- data quality


def completeness_heatmap(comp: pd.DataFrame, period: str = "day") -> go.Figure:
    """Device x period completeness [%] (sequential Tol YlOrBr: light = complete, dark =
    gaps); ``period`` "week" or "month" when the columns are periods (means of days)."""
    x_word, x_fmt, p_word = PERIOD_WORDS.get(period, PERIOD_WORDS["day"])
    if comp.empty:
        return empty("No devices", f"{x_word} (local standard time)", "Device · quantity")
    z = 100 * comp.to_numpy(dtype=float)
    fig = go.Figure(go.Heatmap(
        z=z, x=pd.to_datetime(pd.Index(comp.columns)), y=list(comp.index),
        colorscale=theme.SEQUENTIAL_GAPS, zmin=0, zmax=100,
        xgap=1 if comp.shape[1] <= 200 else 0, ygap=1,
        hovertemplate="%{y} · " + p_word + " %{x|" + x_fmt + "}: %{z:.0f} % of intervals"
                      "<extra></extra>",
        colorbar=dict(title=dict(text="Readings<br>present [%]", side="right"),
                      ticksuffix=" %", thickness=14)))
    n = len(comp.index)
    fig.update_layout(template=TEMPLATE, height=_heat_height(n), hovermode="closest",
                      title=f"Completeness per device and {p_word}")
    fig.update_xaxes(title_text=f"{x_word} (local standard time)", showgrid=False)
    fig.update_yaxes(title_text="Device · quantity", autorange="reversed", showgrid=False,
                     type="category", dtick=1 if n <= 60 else None,
                     tickfont=dict(size=10 if n > 40 else 12))
    return fig


def ingest_bars(log: pd.DataFrame) -> go.Figure:
    """Rows loaded, duplicate and rejected per ingested file."""
    if log.empty:
        return empty("Nothing ingested yet", "File", "Rows [count]")
    g = log.sort_values("batch_id")
    fig = go.Figure()
    for col, name, colour in (("rows_loaded", "loaded", theme.OKABE_ITO["bluish_green"]),
                              ("rows_duplicate", "duplicate", theme.OKABE_ITO["sky_blue"]),
                              ("rows_rejected", "rejected", theme.OKABE_ITO["vermillion"])):
        fig.add_trace(go.Bar(x=g["file_name"], y=g[col], name=name, marker_color=colour))
    fig.update_layout(template=TEMPLATE, barmode="stack", height=320, hovermode="x unified",
                      title="Rows per ingested file")
    fig.update_xaxes(title_text="File", tickangle=-30)
    fig.update_yaxes(title_text="Rows [count]")
    return fig
