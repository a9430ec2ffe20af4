"""Plotly figure builders: plain data in, a figure dict out (embedded with json_script)."""

from __future__ import annotations

import plotly.graph_objects as go

INK = "#1d2a33"
TREND = "#2563a8"
BAND = "rgba(37, 99, 168, 0.15)"
LIMIT = "#b4461c"
FLAGGED = "#a3a3a3"


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
            name="readings (at 25 C)",
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
    figure.update_layout(
        margin={"l": 50, "r": 10, "t": 10, "b": 40},
        height=340,
        legend={"orientation": "h", "y": -0.2},
        yaxis_title="capacitance (uF)",
        plot_bgcolor="white",
        font={"size": 14},
    )
    figure.update_xaxes(gridcolor="#e5e7eb")
    figure.update_yaxes(gridcolor="#e5e7eb")
    return figure.to_plotly_json()
