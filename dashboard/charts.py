"""Plotly figure builders for the dashboard.

Every builder is a pure function: tables in, ``go.Figure`` out, no Streamlit, no state,
no engineering computation (rates, fits, forecasts and stages come from ``core``). They are
tested without Streamlit in ``tests/test_charts.py`` on small hand-made tables in the shape
of the data contracts in ``DEVELOPERS.md``.

Colours
-------
All colours come from :data:`PALETTE`, one constant. The hues are the eight colours of the
Okabe-Ito colour-universal-design set (M. Okabe and K. Ito, "Color Universal Design (CUD):
How to make figures and presentations that are friendly to colorblind people", 2008), chosen
because they stay distinguishable under protanopia, deuteranopia and tritanopia. The mapping
of hues to quantities is our own and deliberately avoids the common trade habit of green oil,
red gas and blue water:

* oil: black, gas: orange, water: reddish purple;
* fitted curve: vermillion (dashed), forecast: blue (dotted), excluded months: grey crosses;
* GOR: orange line, pressure: bluish green, Rsi and bubble point reference lines in the
  same hue as their quantity, dashed;
* the four depletion stages as light tints, ordered light to dark in "urgency": stage 1 sky
  blue, stage 2 yellow, stage 3 orange, stage 4 reddish purple;
* planning statuses: ahead sky blue, open bluish green, closing orange, passed vermillion,
  not applicable grey.

Line style (solid, dashed, dotted) and marker shape always repeat the colour's message, so a
figure printed in grey stays readable.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Mapping
from typing import Any

import pandas as pd
import plotly.graph_objects as go

# Okabe & Ito (2008) colour-universal-design set; the mapping to quantities is ours.
_OI = {
    "black": "#000000",
    "orange": "#E69F00",
    "sky_blue": "#56B4E9",
    "bluish_green": "#009E73",
    "yellow": "#F0E442",
    "blue": "#0072B2",
    "vermillion": "#D55E00",
    "reddish_purple": "#CC79A7",
}

PALETTE: dict[str, Any] = {
    "oil": _OI["black"],
    "gas": _OI["orange"],
    "water": _OI["reddish_purple"],
    "fitted": _OI["vermillion"],
    "forecast": _OI["blue"],
    "excluded": "#8C8C8C",
    "fit_window": _OI["sky_blue"],
    "gor": _OI["orange"],
    "pressure": _OI["bluish_green"],
    "event": "#4D4D4D",
    "expected": _OI["blue"],
    # P90-P10 band of the probabilistic forecast: bluish green line, light tint fill
    "band": _OI["bluish_green"],
    "band_fill": "rgba(0, 158, 115, 0.15)",
    "stage": {
        1: _OI["sky_blue"],
        2: _OI["yellow"],
        3: _OI["orange"],
        4: _OI["reddish_purple"],
        "not_applicable": "#BBBBBB",
    },
    "planning": {
        "window_ahead": _OI["sky_blue"],
        "window_open": _OI["bluish_green"],
        "window_closing": _OI["orange"],
        "window_passed": _OI["vermillion"],
        "not_applicable": "#BBBBBB",
    },
    "stage_tint_opacity": 0.18,
}

STAGE_LABELS = {
    1: "Stage 1: above bubble point",
    2: "Stage 2: gas immobile, GOR below Rsi",
    3: "Stage 3: free gas flowing, GOR rising",
    4: "Stage 4: after the GOR peak",
}

PLANNING_LABELS = {
    "window_ahead": "window ahead",
    "window_open": "window open",
    "window_closing": "window closing",
    "window_passed": "window passed",
    "not_applicable": "not applicable",
}

# No named template: building one is slow in plotly; a white plot with light grid lines instead.
_LAYOUT = dict(
    paper_bgcolor="white",
    plot_bgcolor="white",
    margin=dict(l=60, r=20, t=80, b=40),
    legend=dict(orientation="h", yanchor="bottom", y=1.02, xanchor="left", x=0.0, traceorder="normal"),
    hovermode="x unified",
    font=dict(size=12),
)


_AXIS = dict(showgrid=True, gridcolor="#E5E5E5", zeroline=False, linecolor="#888888", showline=True)


class _Fig:
    """Collects traces, shapes and annotations as plain dicts and validates them once.

    Plotly validates on every ``add_*`` call and copies the layout each time; building the
    figure in one go keeps a page with four figures well under a tenth of a second.
    """

    def __init__(self) -> None:
        self.data: list[dict] = []
        self.shapes: list[dict] = []
        self.annotations: list[dict] = []

    def trace(self, **kw: Any) -> None:
        kw.setdefault("type", "scatter")
        self.data.append(kw)

    def vrect(self, x0: Any, x1: Any, color: str, opacity: float, label: str | None = None,
              at_bottom: bool = False) -> None:
        self.shapes.append(dict(type="rect", xref="x", yref="paper", x0=x0, x1=x1, y0=0, y1=1,
                                fillcolor=color, opacity=opacity, line=dict(width=0), layer="below"))
        if label:
            self.annotations.append(dict(x=x0, y=0.0 if at_bottom else 1.0, xref="x", yref="paper", text=label,
                                         showarrow=False, xanchor="left", yanchor="bottom" if at_bottom else "top",
                                         font=dict(size=10)))

    def hline(self, y: float, line: dict, label: str | None = None, yref: str = "y",
              xanchor: str = "left", x: float = 0.0, yanchor: str = "bottom", log: bool = False) -> None:
        self.shapes.append(dict(type="line", xref="paper", yref=yref, x0=0, x1=1, y0=y, y1=y, line=line))
        if label:
            # plotly places annotations on a log axis by log10 of the value (shapes by the value)
            at = math.log10(y) if log else y
            self.annotations.append(dict(x=x, y=at, xref="paper", yref=yref, text=label, showarrow=False,
                                         xanchor=xanchor, yanchor=yanchor, font=dict(size=10)))

    def vline(self, x: Any, line: dict, label: str | None = None) -> None:
        self.shapes.append(dict(type="line", xref="x", yref="paper", x0=x, x1=x, y0=0, y1=1, line=line))
        if label:
            self.annotations.append(dict(x=x, y=1.0, xref="x", yref="paper", text=label, showarrow=False,
                                         textangle=-90, xanchor="right", yanchor="top", font=dict(size=10)))

    def build(self, title: str, **layout: Any) -> go.Figure:
        base = dict(_LAYOUT)
        base.update(layout)
        base["title"] = dict(text=title)
        base["shapes"] = self.shapes
        base["annotations"] = self.annotations
        for ax in ("xaxis", "yaxis"):
            base[ax] = {**_AXIS, **base.get(ax, {})}
        return go.Figure(data=self.data, layout=base)


def _empty(title: str, message: str) -> go.Figure:
    layout = dict(_LAYOUT, title=dict(text=title), xaxis=dict(visible=False), yaxis=dict(visible=False),
                  annotations=[dict(text=message, showarrow=False, xref="paper", yref="paper", x=0.5, y=0.5)])
    return go.Figure(layout=layout)


def _positive(frame: pd.DataFrame, column: str) -> pd.DataFrame:
    """Rows where ``column`` is a finite positive number (a log axis cannot show the rest)."""
    if frame is None or column not in frame:
        return pd.DataFrame(columns=["month", column])
    values = pd.to_numeric(frame[column], errors="coerce")
    return frame.loc[values.gt(0) & values.notna()]


def calendar_day_rates(monthly: pd.DataFrame) -> pd.DataFrame:
    """Monthly P90/P50/P10 volumes as calendar-day rates, for drawing.

    ``monthly`` has ``month`` (month starts) and ``oil_bbl_p90``, ``oil_bbl_p50``,
    ``oil_bbl_p10`` [bbl per month] (``core.probabilistic``). Returns ``month``, ``rate_p90``,
    ``rate_p50``, ``rate_p10`` [bbl/d]: each volume over the calendar days of its month, the
    basis of the deterministic forecast's ``oil_rate_bopd`` (``core.forecast``), so the band
    and the forecast line are comparable.
    """
    out = pd.DataFrame({"month": pd.to_datetime(monthly["month"]).to_numpy()})
    days = pd.to_datetime(monthly["month"]).dt.days_in_month.to_numpy(dtype=float)
    for p in ("p90", "p50", "p10"):
        out[f"rate_{p}"] = pd.to_numeric(monthly[f"oil_bbl_{p}"], errors="coerce").to_numpy(dtype=float) / days
    return out


def log_ticks(values: Iterable[float]) -> dict[str, Any]:
    """Tick values and labels of a log axis at 1-2-5 steps per decade spanning ``values``.

    Plotly's default log ticks label the minor steps with their first digit only ("2", "5")
    between full decade labels, which reads as "2, 100, 5"; every tick here carries its full
    value ("20", "50", "100").
    """
    import math

    v = [float(x) for x in values if x is not None and pd.notna(x) and float(x) > 0]
    if not v:
        return {}
    lo, hi = math.floor(math.log10(min(v))), math.ceil(math.log10(max(v)))
    ticks = [m * 10.0 ** e for e in range(lo, hi + 1) for m in (1, 2, 5)]
    ticks = [t for t in ticks if min(v) / 2.5 <= t <= max(v) * 2.5]
    text = [f"{t:,.0f}" if t >= 1 else f"{t:g}" for t in ticks]
    return dict(tickmode="array", tickvals=ticks, ticktext=text)


def _forecast_to_limit(forecast: pd.DataFrame, econ_limit_rate: float | None) -> pd.DataFrame:
    """Forecast months for the line: the last month's rate is often a part-month volume over
    a whole month (the well reaches the limit mid-month), which would draw a vertical drop
    below the limit; a trailing month below the limit is left off the line (its volume stays
    in the tables and the EUR)."""
    f = _positive(forecast, "rate")
    if econ_limit_rate is None or pd.isna(econ_limit_rate) or f.empty:
        return f
    r = pd.to_numeric(f["rate"]).to_numpy(dtype=float)
    if len(r) > 1 and r[-1] < 0.999 * float(econ_limit_rate):
        return f.iloc[:-1]
    return f


def _band_to_limit(band: pd.DataFrame, econ_limit_rate: float | None) -> tuple[pd.DataFrame, pd.Series, pd.Series]:
    """The band's months and its low (P90) and P50 lines as drawn on a log axis.

    Monthly percentiles fall towards zero once some samples have reached the economic limit
    (a stopped sample counts as zero), which would draw vertical drops to the bottom of a log
    axis. With a limit given, the band is drawn down to the limit and no lower: months whose
    P10 is below the limit are left off, a P90 below it is drawn at the limit (the low case
    has ended), a P50 below it is not drawn. Without a limit only non-positive values are
    left off. The tables keep every month's volumes.
    """
    p10 = pd.to_numeric(band["rate_p10"], errors="coerce")
    lim = float(econ_limit_rate) if econ_limit_rate is not None and pd.notna(econ_limit_rate) and econ_limit_rate > 0 else 0.0
    b = band.loc[p10.gt(0) & p10.ge(0.999 * lim)] if lim else band.loc[p10.gt(0)]
    low = pd.to_numeric(b["rate_p90"], errors="coerce")
    mid = pd.to_numeric(b["rate_p50"], errors="coerce")
    if lim:
        low = low.clip(lower=lim)
        mid = mid.where(mid >= 0.999 * lim)
    else:
        low = low.where(low > 0)
        mid = mid.where(mid > 0)
    return b, low, mid


def rate_time_figure(
    history: pd.DataFrame,
    *,
    fitted: pd.DataFrame | None = None,
    forecast: pd.DataFrame | None = None,
    excluded_months: Iterable[Any] = (),
    fit_window: tuple[Any, Any] | None = None,
    econ_limit_rate: float | None = None,
    stream: str = "oil",
    title: str | None = None,
    band: pd.DataFrame | None = None,
) -> go.Figure:
    """Rate against time on a log axis.

    Parameters
    ----------
    history : DataFrame
        One well's rows of the tidy monthly table: ``month`` and ``oil_rate_bbl_d``
        (or ``gas_rate_mcf_d`` when ``stream="gas"``). [bbl/d] or [Mcf/d]
    fitted : DataFrame, optional
        ``month`` and ``rate``: the fitted Arps curve over the fit window, from ``core``.
    forecast : DataFrame, optional
        ``month`` and ``rate``: the forecast to the economic limit, from ``core``.
    excluded_months : iterable of month starts
        Months left out of the fit (shut-ins, low uptime, engineer exclusions).
    fit_window : (start, end), optional
        First and last month of the fit window, shaded.
    econ_limit_rate : float, optional
        Economic-limit rate drawn as a horizontal line. [bbl/d] or [Mcf/d]
    stream : {"oil", "gas"}
    band : DataFrame, optional
        ``month``, ``rate_p90``, ``rate_p50``, ``rate_p10`` [bbl/d]: the probabilistic
        forecast (:func:`calendar_day_rates` of ``core.probabilistic``'s monthly table),
        drawn as a shaded P90-P10 band with the P50 line.
    """
    col = "oil_rate_bbl_d" if stream == "oil" else "gas_rate_mcf_d"
    unit = "bbl/d" if stream == "oil" else "Mcf/d"
    title = title or f"{stream.capitalize()} rate against time"
    actual = _positive(history, col)
    if actual.empty and (forecast is None or forecast.empty):
        return _empty(title, f"No positive {stream} rates to draw")
    fig = _Fig()
    if fit_window is not None and fit_window[0] is not None and pd.notna(fit_window[0]):
        end = fit_window[1] if fit_window[1] is not None and pd.notna(fit_window[1]) else actual["month"].max()
        fig.vrect(pd.Timestamp(fit_window[0]), pd.Timestamp(end), PALETTE["fit_window"],
                  PALETTE["stage_tint_opacity"], "fit window")
    excluded = pd.to_datetime(pd.Series(list(excluded_months), dtype="object"))
    is_excluded = actual["month"].isin(excluded) if len(excluded) else pd.Series(False, index=actual.index)
    used = actual.loc[~is_excluded]
    left_out = actual.loc[is_excluded]
    fig.trace(x=used["month"], y=used[col], mode="markers", name=f"actual {stream}",
              marker=dict(color=PALETTE[stream], size=5, symbol="circle"))
    if not left_out.empty:
        fig.trace(x=left_out["month"], y=left_out[col], mode="markers", name="excluded from fit",
                  marker=dict(color=PALETTE["excluded"], size=8, symbol="x"))
    if fitted is not None and not fitted.empty:
        f = _positive(fitted, "rate")
        fig.trace(x=f["month"], y=f["rate"], mode="lines", name="fitted curve",
                  line=dict(color=PALETTE["fitted"], width=2, dash="dash"))
    ys = list(actual[col])
    if band is not None and not band.empty:
        b, low, mid = _band_to_limit(band, econ_limit_rate)
        fig.trace(x=b["month"], y=b["rate_p10"], mode="lines", name="P10 (high)", showlegend=False,
                  line=dict(color=PALETTE["band"], width=0.5), hoverinfo="skip")
        fig.trace(x=b["month"], y=low, mode="lines", name="P90-P10 range", fill="tonexty",
                  fillcolor=PALETTE["band_fill"], line=dict(color=PALETTE["band"], width=0.5), connectgaps=False)
        fig.trace(x=b["month"], y=mid, mode="lines", name="P50",
                  line=dict(color=PALETTE["band"], width=1.5, dash="dashdot"))
        ys += list(b["rate_p10"]) + list(low.dropna())
    if forecast is not None and not forecast.empty:
        f = _forecast_to_limit(forecast, econ_limit_rate)
        fig.trace(x=f["month"], y=f["rate"], mode="lines", name="forecast",
                  line=dict(color=PALETTE["forecast"], width=2, dash="dot"))
        ys += list(f["rate"])
    if econ_limit_rate is not None and pd.notna(econ_limit_rate) and econ_limit_rate > 0:
        fig.hline(float(econ_limit_rate), dict(color=PALETTE["event"], dash="dashdot", width=1),
                  f"economic limit {econ_limit_rate:.3g} {unit}", xanchor="right", x=1.0, yanchor="top", log=True)
        ys.append(float(econ_limit_rate))
    return fig.build(title, yaxis=dict(type="log", title=dict(text=f"{stream} rate [{unit}]"), **log_ticks(ys)),
                     xaxis=dict(title=dict(text="month")))


def rate_cumulative_figure(
    history: pd.DataFrame,
    forecast: pd.DataFrame | None = None,
    *,
    title: str = "Oil rate against cumulative oil",
) -> go.Figure:
    """Oil rate against cumulative oil (linear axes).

    ``history`` has ``cum_oil_bbl`` and ``oil_rate_bbl_d``; ``forecast`` has ``cum_oil_bbl``
    and ``rate``. Both come from ``core`` (tidy monthly table and forecast table).
    """
    actual = _positive(history, "oil_rate_bbl_d")
    if actual.empty:
        return _empty(title, "No positive oil rates to draw")
    fig = _Fig()
    fig.trace(x=actual["cum_oil_bbl"], y=actual["oil_rate_bbl_d"], mode="markers", name="actual oil",
              marker=dict(color=PALETTE["oil"], size=5))
    if forecast is not None and not forecast.empty and "cum_oil_bbl" in forecast:
        f = _positive(forecast, "rate")
        fig.trace(x=f["cum_oil_bbl"], y=f["rate"], mode="lines", name="forecast",
                  line=dict(color=PALETTE["forecast"], width=2, dash="dot"))
    return fig.build(title, hovermode="closest", xaxis=dict(title=dict(text="cumulative oil [bbl]")),
                     yaxis=dict(title=dict(text="oil rate [bbl/d]"), rangemode="tozero"))


def stage_periods(
    first_month: Any,
    last_month: Any,
    *,
    bubble_point_date: Any = None,
    stage2_end_date: Any = None,
    gor_peak_date: Any = None,
) -> list[tuple[int, pd.Timestamp, pd.Timestamp]]:
    """Stage periods ``(stage, start, end)`` from the dates the stage tracker found.

    Stage 1 runs to the bubble-point date, stage 2 to the end of the GOR dip, stage 3 to the
    GOR peak, stage 4 to the last month. A missing date ends the sequence: the well is still
    in the stage before it. Only drawing boundaries; the dates themselves come from
    ``core.stages``.
    """
    if first_month is None or pd.isna(first_month) or last_month is None or pd.isna(last_month):
        return []
    bounds = [pd.Timestamp(first_month)]
    for d in (bubble_point_date, stage2_end_date, gor_peak_date):
        if d is None or pd.isna(d):
            break
        bounds.append(min(max(pd.Timestamp(d), bounds[-1]), pd.Timestamp(last_month)))
    bounds.append(pd.Timestamp(last_month))
    periods = []
    for i in range(len(bounds) - 1):
        if bounds[i + 1] > bounds[i] or i == len(bounds) - 2:
            periods.append((i + 1, bounds[i], bounds[i + 1]))
    return periods


def gor_pressure_figure(
    history: pd.DataFrame,
    *,
    periods: list[tuple[int, pd.Timestamp, pd.Timestamp]] = (),
    rsi_scf_stb: float | None = None,
    bubble_point_psia: float | None = None,
    events: Mapping[str, Any] | None = None,
    expected: pd.DataFrame | None = None,
    title: str = "Producing GOR and pressure",
) -> go.Figure:
    """Producing GOR (left axis) and pressure (right axis) against time.

    Parameters
    ----------
    history : DataFrame
        ``month``, ``gor_scf_stb`` and ``pressure_psia`` (tidy monthly table). [scf/STB], [psia]
    periods : list of (stage, start, end)
        Stage periods to shade (see :func:`stage_periods`).
    rsi_scf_stb, bubble_point_psia : float, optional
        Initial solution GOR and bubble point, drawn as dashed reference lines.
    events : mapping label -> month, optional
        Detected dates (bubble point, end of the GOR dip, GOR peak) marked as vertical lines.
    expected : DataFrame, optional
        ``month`` with ``gor_scf_stb`` and/or ``pressure_psia`` from the material-balance
        history match, drawn as lines beside the observed points.
    """
    has_gor = history is not None and "gor_scf_stb" in history and history["gor_scf_stb"].notna().any()
    has_p = history is not None and "pressure_psia" in history and history["pressure_psia"].notna().any()
    if not has_gor and not has_p:
        return _empty(title, "No GOR or pressure data to draw")
    fig = _Fig()
    for stage, start, end in periods:
        # stage names along the bottom, event names along the top: they never overlap
        fig.vrect(start, end, PALETTE["stage"][stage], PALETTE["stage_tint_opacity"], str(stage) if
                  (pd.Timestamp(end) - pd.Timestamp(start)).days < 400 else f"stage {stage}", at_bottom=True)
    if has_gor:
        g = history.loc[history["gor_scf_stb"].notna()]
        fig.trace(x=g["month"], y=g["gor_scf_stb"], mode="lines+markers", name="producing GOR",
                  line=dict(color=PALETTE["gor"], width=1.5), marker=dict(size=4, symbol="circle"))
    if has_p:
        p = history.loc[history["pressure_psia"].notna()]
        fig.trace(x=p["month"], y=p["pressure_psia"], mode="markers", name="pressure survey",
                  marker=dict(color=PALETTE["pressure"], size=8, symbol="diamond"), yaxis="y2")
    if expected is not None and not expected.empty:
        if "gor_scf_stb" in expected:
            fig.trace(x=expected["month"], y=expected["gor_scf_stb"], mode="lines",
                      name="expected GOR (history match)", line=dict(color=PALETTE["gor"], width=2, dash="dot"))
        if "pressure_psia" in expected:
            fig.trace(x=expected["month"], y=expected["pressure_psia"], mode="lines",
                      name="expected pressure (history match)",
                      line=dict(color=PALETTE["pressure"], width=2, dash="dot"), yaxis="y2")
    if rsi_scf_stb is not None and pd.notna(rsi_scf_stb):
        fig.hline(float(rsi_scf_stb), dict(color=PALETTE["gor"], dash="dash", width=1),
                  f"Rsi {rsi_scf_stb:.0f} scf/STB", xanchor="right", x=1.0)
    if bubble_point_psia is not None and pd.notna(bubble_point_psia):
        fig.hline(float(bubble_point_psia), dict(color=PALETTE["pressure"], dash="dash", width=1),
                  f"bubble point {bubble_point_psia:.0f} psia", yref="y2", xanchor="center", x=0.5,
                  yanchor="top")
    for label, when in (events or {}).items():
        if when is None or pd.isna(when):
            continue
        fig.vline(pd.Timestamp(when), dict(color=PALETTE["event"], dash="dot", width=1), label)
    return fig.build(
        title,
        xaxis=dict(title=dict(text="month")),
        yaxis=dict(title=dict(text="GOR [scf/STB]"), rangemode="tozero"),
        yaxis2=dict(title=dict(text="pressure [psia]"), overlaying="y", side="right",
                    rangemode="tozero", showgrid=False, tickmode="auto", nticks=6),
    )


_SHARE_COLUMNS = [
    (1, "share_stage_1"),
    (2, "share_stage_2"),
    (3, "share_stage_3"),
    (4, "share_stage_4"),
    ("not_applicable", "share_not_applicable"),
]


def stage_share_figure(units: pd.DataFrame, *, title: str = "Wells by stage in each unit") -> go.Figure:
    """Stacked horizontal bars: share of a unit's wells in each stage (from ``track_units``).

    ``units`` has ``unit``, ``n_wells`` and ``share_stage_1`` .. ``share_stage_4``,
    ``share_not_applicable`` (fractions 0-1).
    """
    if units is None or units.empty:
        return _empty(title, "No reservoir units")
    fig = _Fig()
    labels = [f"{u} ({n} wells)" for u, n in zip(units["unit"], units["n_wells"])]
    for stage, column in _SHARE_COLUMNS:
        if column not in units:
            continue
        name = STAGE_LABELS.get(stage, "not applicable (gas, condensate, unknown)")
        fig.trace(type="bar", y=labels, x=units[column], name=name, orientation="h",
                  marker=dict(color=PALETTE["stage"][stage], line=dict(color="#333333", width=0.5)),
                  hovertemplate="%{y}: %{x:.0%}<extra>" + name + "</extra>")
    return fig.build(title, barmode="stack", hovermode="closest",
                     legend=dict(orientation="h", yanchor="top", y=-0.32, xanchor="left", x=0.0),
                     margin=dict(l=60, r=20, t=80, b=150),
                     xaxis=dict(title=dict(text="share of wells"), tickformat=".0%", range=[0, 1]),
                     yaxis=dict(automargin=True))


def planning_status_figure(counts: pd.DataFrame, *, title: str = "Wells by planning status") -> go.Figure:
    """Bar chart of well counts by planning status.

    ``counts`` has ``planning_status`` and ``wells`` (counts made by ``core`` or ``state``).
    """
    if counts is None or counts.empty:
        return _empty(title, "No planning statuses")
    colours = [PALETTE["planning"].get(s, PALETTE["excluded"]) for s in counts["planning_status"]]
    labels = [PLANNING_LABELS.get(s, str(s)) for s in counts["planning_status"]]
    fig = _Fig()
    fig.trace(type="bar", x=labels, y=counts["wells"], marker=dict(color=colours, line=dict(color="#333333", width=0.5)),
              text=counts["wells"], textposition="outside", name="wells")
    return fig.build(title, hovermode="closest", showlegend=False, yaxis=dict(title=dict(text="wells")))


def _band_traces(fig: _Fig, band: pd.DataFrame | None, what: str = "") -> None:
    """P90-P10 shaded band and P50 line (``month``, ``rate_p90``, ``rate_p50``, ``rate_p10``)."""
    if band is None or band.empty:
        return
    fig.trace(x=band["month"], y=band["rate_p10"], mode="lines", name=f"{what}P10 (high)", showlegend=False,
              line=dict(color=PALETTE["band"], width=0.5), hoverinfo="skip")
    fig.trace(x=band["month"], y=band["rate_p90"], mode="lines", name=f"{what}P90-P10 range", fill="tonexty",
              fillcolor=PALETTE["band_fill"], line=dict(color=PALETTE["band"], width=0.5))
    fig.trace(x=band["month"], y=band["rate_p50"], mode="lines", name=f"{what}P50",
              line=dict(color=PALETTE["band"], width=1.5, dash="dashdot"))


def field_rate_figure(field: pd.DataFrame, *, title: str = "Field oil rate: history and forecast",
                      band: pd.DataFrame | None = None) -> go.Figure:
    """Field oil rate, history and forecast, against time.

    ``field`` has ``month``, ``kind`` (``actual`` or ``forecast``) and ``oil_rate_bopd``: the
    field total per month, summed from the batch-run monthly table. ``band`` (optional):
    the field's P90/P50/P10 per forecast month as rates (:func:`calendar_day_rates`).
    """
    if field is None or field.empty:
        return _empty(title, "No field totals")
    fig = _Fig()
    _band_traces(fig, band, "field ")
    for kind, colour, dash, name in (
        ("actual", PALETTE["oil"], "solid", "field oil rate, actual"),
        ("forecast", PALETTE["forecast"], "dot", "field oil rate, forecast"),
    ):
        part = field.loc[field["kind"] == kind]
        if part.empty:
            continue
        fig.trace(x=part["month"], y=part["oil_rate_bopd"], mode="lines", name=name,
                  line=dict(color=colour, width=2, dash=dash))
    return fig.build(title, yaxis=dict(title=dict(text="oil rate [bbl/d]"), rangemode="tozero"),
                     xaxis=dict(title=dict(text="month")))


def type_well_figure(curve: pd.DataFrame, *, fit_label: str = "", title: str = "Type well") -> go.Figure:
    """A type well: P90 / P50 / P10 rate per aligned month (log axis), the Arps fit of the
    P50, and the count of wells contributing at each month (bars, right axis).

    ``curve`` has the columns of ``core.type_wells.CURVE_COLUMNS``: ``month_index``,
    ``n_wells``, ``oil_rate_bbl_d_p90``, ``oil_rate_bbl_d_p50``, ``oil_rate_bbl_d_p10``,
    ``oil_rate_bbl_d_p50_fit`` [bbl/d].
    """
    if curve is None or curve.empty:
        return _empty(title, "No type well")
    fig = _Fig()
    x = curve["month_index"]
    fig.trace(type="bar", x=x, y=curve["n_wells"], name="wells contributing", yaxis="y2",
              marker=dict(color="#D9D9D9", line=dict(width=0)), hovertemplate="month %{x}: %{y} wells<extra></extra>")
    fig.trace(x=x, y=curve["oil_rate_bbl_d_p10"], mode="lines", name="P10 (high)",
              line=dict(color=PALETTE["band"], width=1.5, dash="dash"))
    fig.trace(x=x, y=curve["oil_rate_bbl_d_p50"], mode="lines+markers", name="P50",
              line=dict(color=PALETTE["oil"], width=2), marker=dict(size=4))
    fig.trace(x=x, y=curve["oil_rate_bbl_d_p90"], mode="lines", name="P90 (low)",
              line=dict(color=PALETTE["band"], width=1.5, dash="dot"))
    ys = list(curve["oil_rate_bbl_d_p10"]) + list(curve["oil_rate_bbl_d_p90"])
    if "oil_rate_bbl_d_p50_fit" in curve and curve["oil_rate_bbl_d_p50_fit"].notna().any():
        fig.trace(x=x, y=curve["oil_rate_bbl_d_p50_fit"], mode="lines",
                  name="Arps fit of the P50" + (f" ({fit_label})" if fit_label else ""),
                  line=dict(color=PALETTE["fitted"], width=2, dash="dash"))
    return fig.build(
        title, hovermode="x unified",
        xaxis=dict(title=dict(text="months since alignment (month 0)")),
        yaxis=dict(type="log", title=dict(text="oil rate [bbl/d]"), **log_ticks(ys)),
        yaxis2=dict(title=dict(text="wells contributing"), overlaying="y", side="right", showgrid=False,
                    range=[0, 3.0 * float(curve["n_wells"].max())], tickmode="auto", nticks=4, tickformat="d"),
        legend=dict(orientation="h", yanchor="top", y=-0.2, xanchor="left", x=0.0, traceorder="normal"),
        margin=dict(l=60, r=60, t=60, b=120), height=520,
    )
