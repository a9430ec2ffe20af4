"""Plotly figure builders: plain data in, a figure dict out (embedded with json_script)."""

from __future__ import annotations

import numpy as np
import plotly.graph_objects as go

from .engineering.backtest import QUANTILES

INK = "#1d2a33"
TREND = "#2563a8"
BAND = "rgba(37, 99, 168, 0.15)"
LIMIT = "#b4461c"
FLAGGED = "#a3a3a3"
GRID = "#e5e7eb"


def trend_figure(readings: list[dict], path: dict, limit_uf: float, limit_label: str, rated_uf: float) -> dict:
    """Capacitance readings, the fitted path with its 90 % prediction band, the limit.

    readings: dicts with date, capacitance_uf, flagged (bool).
    path: dates, mid_uf, low_uf, high_uf (past and forecast).
    """
    kept = [r for r in readings if not r["flagged"]]
    stray = [r for r in readings if r["flagged"]]
    figure = go.Figure()
    figure.add_trace(
        go.Scatter(
            x=path["dates"] + path["dates"][::-1],
            y=path["high_uf"] + path["low_uf"][::-1],
            fill="toself",
            fillcolor=BAND,
            line={"width": 0},
            hoverinfo="skip",
            name="90 % prediction band",
        )
    )
    figure.add_trace(
        go.Scatter(
            x=path["dates"], y=path["mid_uf"], mode="lines", line={"color": TREND, "width": 2}, name="fitted trend"
        )
    )
    figure.add_trace(
        go.Scatter(
            x=[r["date"] for r in kept],
            y=[r["capacitance_uf"] for r in kept],
            mode="markers",
            marker={"color": INK, "size": 9},
            name="readings (at 25 °C)",
        )
    )
    if stray:
        figure.add_trace(
            go.Scatter(
                x=[r["date"] for r in stray],
                y=[r["capacitance_uf"] for r in stray],
                mode="markers",
                marker={"color": FLAGGED, "size": 11, "symbol": "x"},
                name="set aside (off trend)",
            )
        )
    figure.add_hline(y=limit_uf, line={"color": LIMIT, "dash": "dash"}, annotation_text=f"limit: {limit_label}")
    figure.add_hline(y=rated_uf, line={"color": "#6b7280", "dash": "dot", "width": 1}, annotation_text="rated")
    return _styled(figure, height=340, yaxis_title="capacitance (µF)")


def weibull_plot_figure(times_years, fraction_failed, beta: float, eta: float) -> dict:
    """Weibull probability plot: ln(-ln(1 - F)) against time on a log axis, with the fit."""
    times = np.asarray(times_years, float)
    fraction = np.asarray(fraction_failed, float)
    line_t = np.geomspace(max(times.min() * 0.5, 1e-3), times.max() * 2.0, 60)
    line_f = 1.0 - np.exp(-((line_t / eta) ** beta))
    figure = go.Figure()
    figure.add_trace(
        go.Scatter(
            x=times,
            y=np.log(-np.log1p(-fraction)),
            mode="markers",
            marker={"color": INK, "size": 8},
            name="failures (median ranks)",
        )
    )
    figure.add_trace(
        go.Scatter(
            x=line_t,
            y=np.log(-np.log1p(-line_f)),
            mode="lines",
            line={"color": TREND, "width": 2},
            name=f"Weibull fit (beta {beta:.2f}, eta {eta:.1f} y)",
        )
    )
    ticks = np.array([0.01, 0.05, 0.1, 0.2, 0.5, 0.9, 0.99])
    figure.update_yaxes(tickvals=np.log(-np.log1p(-ticks)).tolist(), ticktext=[f"{100 * t:g} %" for t in ticks])
    figure.update_xaxes(type="log")
    return _styled(figure, height=360, xaxis_title="age (years)", yaxis_title="fraction failed")


def cost_curve_figure(ages_years, cost_per_year, run_to_failure: float, optimum_age: float | None) -> dict:
    """Cost per year of replacing at each age, against running every capacitor to failure."""
    figure = go.Figure()
    figure.add_trace(
        go.Scatter(
            x=ages_years,
            y=cost_per_year,
            mode="lines",
            line={"color": TREND, "width": 2},
            name="replace at this age or at failure",
        )
    )
    figure.add_hline(y=run_to_failure, line={"color": LIMIT, "dash": "dash"}, annotation_text="run to failure")
    if optimum_age is not None:
        figure.add_vline(
            x=optimum_age, line={"color": INK, "dash": "dot"}, annotation_text=f"best: {optimum_age:.1f} y"
        )
    return _styled(figure, height=320, xaxis_title="replacement age (years)", yaxis_title="cost per capacitor-year")


def _styled(figure: go.Figure, height: int, **titles) -> dict:
    """The house style every figure shares: white plot, light grid, legend below."""
    figure.update_layout(
        margin={"l": 60, "r": 10, "t": 10, "b": 40},
        height=height,
        plot_bgcolor="white",
        font={"size": 14},
        legend={"orientation": "h", "y": -0.25},
        **titles,
    )
    figure.update_xaxes(gridcolor=GRID)
    figure.update_yaxes(gridcolor=GRID)
    return figure.to_plotly_json()


DEFAULT_BANDS = "#6b7280"
CHART_HEIGHT_PX = 320


def calibration_figure(observed_by_variant: dict[str, list[dict]]) -> dict:
    """Observed against nominal share crossed by each forecast quantile, one line per band variant.

    observed_by_variant: label -> [{nominal, observed, capacitors}] (shares 0..1, observed None
    where no capacitor counted). A forecast that is calibrated lies on the diagonal.
    """
    figure = go.Figure()
    figure.add_trace(
        go.Scatter(
            x=[0, 100],
            y=[0, 100],
            mode="lines",
            line={"color": INK, "dash": "dot", "width": 1},
            hoverinfo="skip",
            showlegend=False,
        )
    )
    figure.add_annotation(
        x=30, y=30, text="nominal", showarrow=False, xanchor="left", yanchor="top", font={"color": INK, "size": 12}
    )
    for (label, points), color in zip(observed_by_variant.items(), (DEFAULT_BANDS, TREND), strict=False):
        figure.add_trace(
            go.Scatter(
                x=[100 * p["nominal"] for p in points],
                y=[None if p["observed"] is None else 100 * p["observed"] for p in points],
                customdata=[p["capacitors"] for p in points],
                mode="lines+markers",
                line={"color": color, "width": 2},
                marker={"color": color, "size": 9},
                name=label,
                hovertemplate="P%{x:.0f}: %{y:.0f} % crossed (of %{customdata} capacitors)<extra></extra>",
            )
        )
    nominal = [100 * q for q in QUANTILES]
    figure.update_xaxes(range=[0, 100], tickvals=nominal, ticktext=[f"P{q:.0f}" for q in nominal])
    figure.update_yaxes(range=[0, 100], ticksuffix=" %")
    return _styled(figure, height=CHART_HEIGHT_PX, xaxis_title="forecast date", yaxis_title="share crossed by it")


def coverage_figure(cutoffs: list[str], coverage_by_variant: dict[str, list[float | None]], nominal: float) -> dict:
    """Share of observed crossings inside the P10-P90 band at each cut-off, against the nominal share.

    cutoffs: ISO dates; coverage_by_variant: label -> share (0..1, None where nothing crossed) per cut-off.
    """
    figure = go.Figure()
    for (label, shares), color in zip(coverage_by_variant.items(), (DEFAULT_BANDS, TREND), strict=False):
        figure.add_trace(
            go.Scatter(
                x=cutoffs,
                y=[None if s is None else 100 * s for s in shares],
                mode="lines+markers",
                line={"color": color, "width": 2},
                marker={"color": color, "size": 9},
                name=label,
                hovertemplate="%{x|%Y-%m-%d}: %{y:.0f} %<extra></extra>",
            )
        )
    figure.add_hline(
        y=100 * nominal,
        line={"color": LIMIT, "dash": "dash"},
        annotation_text=f"nominal {100 * nominal:.0f} %",
        annotation_position="top left",
    )
    figure.update_xaxes(type="date", tickformat="%Y-%m")
    figure.update_yaxes(range=[0, 100], ticksuffix=" %")
    return _styled(figure, height=CHART_HEIGHT_PX, xaxis_title="cut-off", yaxis_title="crossings inside P10-P90")
