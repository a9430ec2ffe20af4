"""Plotly figure builders: plain data in, a figure dict out (embedded with json_script)."""

from __future__ import annotations

import numpy as np
import plotly.graph_objects as go

from .engineering.backtest import QUANTILES
from .engineering.lifedata import age_in_words, age_unit

INK = "#1d2a33"
TREND = "#2563a8"
BAND = "rgba(37, 99, 168, 0.15)"
LIMIT = "#b4461c"
FLAGGED = "#a3a3a3"
GRID = "#e5e7eb"


def trend_figure(readings: list[dict], path: dict, limit_uf: float, limit_label: str, rated_uf: float) -> dict:
    """Capacitance readings, the path (P50) with its P10-P90 band, the limit.

    readings: dicts with date, capacitance_uf, flagged (bool).
    path: dates, mid_uf, low_uf, high_uf (past and forecast; ahead, the calibrated path whose
    crossings of the limit are the forecast's dates).
    """
    # The newest reading is what the verdict reads ("below the limit: replace now" needs no trend): always in
    # view, and drawn apart where it is below the limit, even if the fit set it aside as off its trend.
    latest = max(readings, key=lambda r: r["date"]) if readings else None
    governing = latest if latest is not None and latest["capacitance_uf"] < limit_uf else None
    kept = [r for r in readings if not r["flagged"] and r is not governing]
    stray = [r for r in readings if r["flagged"] and r is not governing]
    figure = go.Figure()
    figure.add_trace(
        go.Scatter(
            x=path["dates"] + path["dates"][::-1],
            y=path["high_uf"] + path["low_uf"][::-1],
            fill="toself",
            fillcolor=BAND,
            line={"width": 0},
            hoverinfo="skip",
            name="trend, P10-P90 (early to late)",
        )
    )
    figure.add_trace(
        go.Scatter(
            x=path["dates"],
            y=path["mid_uf"],
            mode="lines",
            line={"color": TREND, "width": 2},
            name="trend, P50 (likely)",
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
    if governing is not None:
        figure.add_trace(
            go.Scatter(
                x=[governing["date"]],
                y=[governing["capacitance_uf"]],
                mode="markers",
                marker={"color": LIMIT, "size": 12, "symbol": "diamond"},
                name="latest reading, below the limit",
            )
        )
    figure.add_hline(
        y=limit_uf,
        line={"color": LIMIT, "dash": "dash"},
        annotation_text=f"limit: {limit_label}",
        annotation_position="bottom right",
    )
    figure.add_hline(
        y=rated_uf,
        line={"color": "#6b7280", "dash": "dot", "width": 1},
        annotation_text="rated",
        # At the right: a capacitor's first readings sit at its rating on the left, under a label put there.
        annotation_position="top right",
    )
    band_uf = path["low_uf"] + path["high_uf"]
    shown_uf = [r["capacitance_uf"] for r in kept]
    newest_uf = [] if latest is None else [latest["capacitance_uf"]]
    figure.update_yaxes(range=trend_axis_range(shown_uf, band_uf, limit_uf, rated_uf, always_uf=newest_uf))
    return _styled(figure, height=340, yaxis_title="capacitance (µF)")


TREND_AXIS_SPANS = 4.0  # a trend chart's axis spans at most this many rating-to-limit gaps: a quarter of it, about


def trend_axis_range(readings_uf, band_uf, limit_uf: float, rated_uf: float, always_uf=()) -> list[float]:
    """The capacitance axis of a trend chart, with a small margin: the rating, the limit with room below it (60 %
    of the gap between them, `span`), the readings kept and the P10-P90 band over the plotted time. Two things
    are cut so as not to squeeze the rest into a strip: the outermost reading on either side where it lies
    alone, more than a span past every other value shown, and the band beyond `TREND_AXIS_SPANS` spans (or the
    readings' spread, if wider): a start capacitor's P10 edge ran to -14 uF, past its 13 uF gap. `always_uf`
    (the newest reading, which the verdict reads) is never cut: a walk found a 14.22 uF reading that made a
    143 uF capacitor "replace now" off its chart."""
    span = max(abs(rated_uf - limit_uf), 0.02 * rated_uf)
    readings = np.sort(np.asarray(readings_uf, float))
    shown = np.concatenate([[limit_uf, rated_uf], readings[1:-1]])  # all but the outermost two readings
    outer = readings[[0, -1]] if readings.size else readings
    shown = np.concatenate([shown, outer[(outer >= shown.min() - span) & (outer <= shown.max() + span)]])
    shown = np.concatenate([shown, np.asarray(always_uf, float)])
    low, high = min(float(shown.min()), limit_uf - 0.6 * span), float(shown.max())
    band = np.asarray(band_uf, float)
    band = band[np.isfinite(band)]
    if band.size:
        reach = max(TREND_AXIS_SPANS * span, high - low)
        low, high = min(low, max(float(band.min()), high - reach)), max(high, min(float(band.max()), low + reach))
    # Room below for a marker's half (12 px of a 340 px chart: a few per cent of the range shown); the axis stops
    # at zero unless a value shown is itself near zero (an open capacitor's 0 uF reading).
    margin = max(0.01 * rated_uf, 0.04 * (high - low))
    return [low - margin if low < margin else max(low - margin, 0.0), high + 0.03 * rated_uf]


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
    ages = _log_ticks(line_t[0], line_t[-1])
    figure.update_xaxes(type="log", tickvals=ages, ticktext=[f"{age:g}" for age in ages])
    return _styled(figure, height=360, xaxis_title="age (years)", yaxis_title="fraction failed")


def _log_ticks(low: float, high: float) -> list[float]:
    """Ticks of a log axis from `low` to `high`, each label a number in full (where Plotly's own read
    "5 0.1 2 5 1"): the powers of ten over more than 2.5 decades, 1, 2 and 5 times them over more than
    one, every whole step within one."""
    decades = np.log10(high / low)
    steps = (1,) if decades > 2.5 else (1, 2, 5) if decades > 1 else range(1, 10)
    powers = range(int(np.floor(np.log10(low))), int(np.ceil(np.log10(high))) + 1)
    ticks = [float(f"{step}e{power}") for power in powers for step in steps]
    return [tick for tick in ticks if low <= tick <= high]


# A best age in this first share of the curve's ages stood on the cost axis: the axis then ends at
# `BEST_AGE_SHOWN_TO` times it, which puts the best age a fifth of the way along (ours).
BEST_AGE_CROWDED_SHARE = 0.1
BEST_AGE_SHOWN_TO = 5.0


def cost_curve_figure(ages_years, cost_per_year, run_to_failure: float, optimum_age: float | None) -> dict:
    """Cost per year of replacing at each age, against running every capacitor to failure. The age axis is in
    the unit the best age is read in (`lifedata.age_unit`: months for one under a year), and labelled as the
    page words it; a best age early in the curve is shown with the ages up to a few times it only, so that
    its marker stands clear of the cost axis."""
    ages, cost = np.asarray(ages_years, float), np.asarray(cost_per_year, float)
    unit, per_year = ("years", 1.0) if optimum_age is None else age_unit(optimum_age)
    shown_to = ages.max()
    if optimum_age is not None and optimum_age < BEST_AGE_CROWDED_SHARE * ages.max():
        shown_to = BEST_AGE_SHOWN_TO * optimum_age
    shown = ages <= shown_to
    figure = go.Figure()
    figure.add_trace(
        go.Scatter(
            x=(per_year * ages[shown]).tolist(),
            y=cost[shown].tolist(),
            mode="lines",
            line={"color": TREND, "width": 2},
            name="replace at this age or at failure",
        )
    )
    # Its words at the right edge, on the side of the line the curve is not on there: a curve still above the line
    # at its end (no wear-out) ran through words set above it on a phone's narrow chart.
    ends_above = bool(shown.any()) and cost[shown][-1] >= run_to_failure
    figure.add_hline(
        y=run_to_failure,
        line={"color": LIMIT, "dash": "dash"},
        annotation_text="run to failure",
        annotation_position="bottom right" if ends_above else "top right",
    )
    if optimum_age is not None:
        figure.add_vline(
            x=per_year * optimum_age,
            line={"color": INK, "dash": "dot"},
            annotation_text=f"best: {age_in_words(optimum_age)}",
            # Its words on the side with the room: past the middle, the run-to-failure words hold the right.
            annotation_position="top right" if optimum_age < 0.5 * shown_to else "top left",
        )
    figure.update_xaxes(range=[0.0, per_year * shown_to])
    return _styled(figure, height=320, xaxis_title=f"replacement age ({unit})", yaxis_title="cost per capacitor-year")


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


def coverage_figure(
    cutoffs: list[str],
    coverage_by_variant: dict[str, list[float | None]],
    nominal: float,
    if_right: list[float | None] | None = None,
) -> dict:
    """Share of observed crossings inside the P10-P90 band at each cut-off, against the share exactly right
    forecasts would show at each cut-off (`if_right`, `expected_band_shares`: only crossings within the follow-up
    are seen, fewer of them inside the band the shorter it is; the nominal share where that is not known).

    cutoffs: ISO dates; coverage_by_variant: label -> share (0..1, None where nothing crossed) per cut-off.
    """
    figure = go.Figure()
    right_known = bool(if_right) and any(share is not None for share in if_right)
    if right_known:
        figure.add_trace(
            go.Scatter(
                x=cutoffs,
                y=[None if s is None else 100 * s for s in if_right],
                mode="lines",
                line={"color": LIMIT, "width": 2, "dash": "dot"},
                name="right forecasts would show",
                hovertemplate="%{x|%Y-%m-%d}: %{y:.0f} % if every forecast were right<extra></extra>",
            )
        )
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
    if not right_known:  # a back-test stored before the expected shares: the nominal share alone
        figure.add_hline(
            y=100 * nominal,
            line={"color": LIMIT, "dash": "dash"},
            annotation_text=f"nominal {100 * nominal:.0f} %",
            annotation_position="top left",
        )
    figure.update_xaxes(type="date", tickformat="%Y-%m")
    figure.update_yaxes(range=[0, 100], ticksuffix=" %")
    return _styled(figure, height=CHART_HEIGHT_PX, xaxis_title="cut-off", yaxis_title="crossings inside P10-P90")


# Risk colours as the pages' risk badges (site.css), and a grey for capacitors with no assessment.
RISK_COLOURS = {
    "replace now": "#b3261e",
    "due soon": "#9a5b00",
    "watch": "#1f5fa8",
    "sound": "#2f6b3a",
    "not assessed yet": "#9ca3af",
}
# Sites and parts: hues apart from the risk colours above (no red, amber, blue or green, which the same
# dashboard uses for risk levels), each with its own bar pattern so that neither colour vision nor a grey
# printout has to tell them apart.
SERIES_COLOURS = ("#6d28d9", "#0891b2", "#a21caf", "#475569", "#0d9488", "#86198f", "#1e293b", "#3f3f46")
SERIES_PATTERNS = ("", "/", ".", "x", "\\", "+", "-", "|")


def _series_marker(k: int) -> dict:
    """The k-th site's or part's bar marker: a colour and a pattern, both cycling."""
    return {
        "color": SERIES_COLOURS[k % len(SERIES_COLOURS)],
        "pattern": {"shape": SERIES_PATTERNS[k % len(SERIES_PATTERNS)], "fgcolor": "#ffffff", "size": 7},
    }


DASHBOARD_HEIGHT_PX = 360
WORKLOAD_HEIGHT_PX = 400
SPARES_HEIGHT_PX = 460  # room for one legend line per part on a phone
# Prices are entered without a currency, so the unit is the parts' prices; short enough for a phone's chart.
SPARES_COST_TITLE = "cost (parts' prices)"


def _switch(labels: list[str], groups: list[int]) -> dict:
    """A switch that shows one group of traces at a time (`groups`: the group of each trace), the first
    shown at first: the page draws it above the chart as buttons a gloved finger can hit (page.js), where
    Plotly's own in-chart buttons are 33 px tall."""
    return {"switch": [{"label": label, "visible": [g == shown for g in groups]} for shown, label in enumerate(labels)]}


def workload_figure(weeks: list[str], by_risk: dict, by_site: dict, visits: list[int]) -> dict:
    """Replacements per week, stacked by risk level (or, by a button, by site), with the site
    visits of the open work orders on a second axis."""
    figure = go.Figure()
    groups = []
    for risk, counts in by_risk.items():
        figure.add_trace(go.Bar(x=weeks, y=counts, name=risk, marker_color=RISK_COLOURS.get(risk, INK)))
        groups.append(0)
    for k, (site, counts) in enumerate(by_site.items()):
        figure.add_trace(go.Bar(x=weeks, y=counts, name=site, marker=_series_marker(k), visible=False))
        groups.append(1)
    figure.add_trace(
        go.Scatter(
            x=weeks,
            y=visits,
            name="site visits",
            mode="lines+markers",
            yaxis="y2",
            line={"color": INK, "width": 2, "dash": "dot"},
            marker={"size": 7},
            hovertemplate="week of %{x|%Y-%m-%d}: %{y} site visits<extra></extra>",
        )
    )
    switch = _switch(["by risk level", "by site"], [*groups, -1])
    for option in switch["switch"]:
        option["visible"][-1] = True  # the visits stay
    figure.update_layout(
        barmode="stack",
        meta=switch,
        yaxis2={
            "overlaying": "y",
            "side": "right",
            "rangemode": "tozero",
            "showgrid": False,
            "title": "visits",
            "tick0": 0,
            "dtick": _whole_step(max(visits, default=0)),
        },
    )
    figure.update_xaxes(type="date", tickformat="%d %b %Y")  # a week in January is of next year: say so
    weekly = np.sum([counts for counts in by_risk.values()], axis=0) if by_risk else [0]
    figure.update_layout(yaxis={"tick0": 0, "dtick": _whole_step(max(weekly))})
    styled = _styled(figure, height=WORKLOAD_HEIGHT_PX, yaxis_title="replacements")
    styled["layout"]["margin"].update(r=50)
    return styled


def spares_figure(months: list[str], parts: list[dict], cost_per_month: list[float]) -> dict:
    """Spares needed per month, stacked by part (planned replacements plus expected failures),
    with their cost on a second axis."""
    figure = go.Figure()
    for k, row in enumerate(parts):
        figure.add_trace(
            go.Bar(
                x=months,
                y=[round(v, 2) for v in row["need"]],
                name=row["code"],
                marker=_series_marker(k),
                customdata=[[round(p), round(f, 2)] for p, f in zip(row["planned"], row["failures"], strict=True)],
                hovertemplate="%{x|%b %Y}: %{y:.1f} (planned %{customdata[0]}, failures %{customdata[1]})"
                f"<extra>{row['code']}</extra>",
            )
        )
    figure.add_trace(
        go.Scatter(
            x=months,
            y=[round(c, 2) for c in cost_per_month],
            name="cost",
            mode="lines+markers",
            yaxis="y2",
            line={"color": INK, "width": 2},
            hovertemplate="%{x|%b %Y}: %{y:,.2f}<extra>cost</extra>",
        )
    )
    figure.update_layout(
        barmode="stack",
        yaxis2={
            "overlaying": "y",
            "side": "right",
            "rangemode": "tozero",
            "showgrid": False,
            "title": SPARES_COST_TITLE,
            "automargin": True,  # the title beside wide tick labels ("1,500") was cut to "ost (parts' prices)"
            "tickmode": "linear",
            "tick0": 0,
            "dtick": _whole_step(max(cost_per_month, default=0)),
        },
    )
    # Every other month labelled from the first (counted from January, a December start had no label).
    figure.update_xaxes(type="date", tickformat="%b %Y", dtick="M2", tick0=months[0] if months else None)
    styled = _styled(figure, height=SPARES_HEIGHT_PX, yaxis_title="capacitors")
    styled["layout"]["margin"].update(r=60)
    return styled


def stock_figure(parts: list[dict]) -> dict:
    """Per part: spares needed in the next 3 and 12 months against the stock held."""
    codes = [row["code"] for row in parts]
    figure = go.Figure()
    figure.add_trace(
        go.Bar(
            y=codes,
            x=[round(r["need_3_months"], 1) for r in parts],
            orientation="h",
            name="need, 3 months",
            marker_color="#93b7d3",
        )
    )
    figure.add_trace(
        go.Bar(
            y=codes,
            x=[round(r["need_12_months"], 1) for r in parts],
            orientation="h",
            name="need, 12 months",
            marker_color=TREND,
        )
    )
    figure.add_trace(
        go.Scatter(
            y=codes,
            x=[r["stock"] for r in parts],
            mode="markers",
            name="stock held",
            marker={"color": LIMIT, "symbol": "line-ns-open", "size": 22, "line": {"width": 4}},
        )
    )
    figure.update_layout(barmode="group")
    figure.update_yaxes(autorange="reversed")
    styled = _styled(
        figure, height=max(DASHBOARD_HEIGHT_PX, 2 * _rows_height(len(parts)) - 160), xaxis_title="capacitors"
    )
    _top_legend(styled, left=120)
    styled["layout"]["xaxis"].update(
        tick0=0, dtick=_whole_step(max([r["need_12_months"] for r in parts] + [r["stock"] for r in parts] + [0]))
    )
    return styled


def risk_mix_figure(sites: list[str], levels: list[str], counts: dict) -> dict:
    """Capacitors in service per site, stacked by risk level."""
    figure = go.Figure()
    for level in levels:
        figure.add_trace(
            go.Bar(
                y=sites,
                x=[counts[s][level] for s in sites],
                orientation="h",
                name=level,
                marker_color=RISK_COLOURS.get(level, INK),
            )
        )
    figure.update_layout(barmode="stack")
    figure.update_yaxes(autorange="reversed")
    totals = [sum(counts[s].values()) for s in sites]
    figure.update_xaxes(tick0=0, dtick=_whole_step(max(totals, default=0)))
    return _top_legend(_styled(figure, height=_rows_height(len(sites)), xaxis_title="capacitors in service"))


def _rows_height(rows: int) -> int:
    """A horizontal bar chart's fixed height: the house height, taller when many rows need it."""
    return max(CHART_HEIGHT_PX, 160 + 30 * rows)


def _whole_step(largest: float) -> int:
    """A tick step in whole units, 1, 2 or 5 times a power of ten, for about five ticks up to `largest`."""
    wanted = max(largest / 5.0, 1.0)
    power = 10 ** int(np.floor(np.log10(wanted)))
    return int(next(step * power for step in (1, 2, 5, 10) if step * power >= wanted))


def _top_legend(styled: dict, left: int = 60) -> dict:
    """The legend above the plot, for horizontal bars whose axis title sits where it would go."""
    styled["layout"]["legend"] = {"orientation": "h", "x": 0, "y": 1.0, "yanchor": "bottom"}
    styled["layout"]["margin"].update(t=40, l=left, b=50)
    return styled


def routes_figure(routes: list[dict]) -> dict:
    """Per site route: motors overdue, due this quarter and read this quarter."""
    codes = [r["code"] for r in routes]
    figure = go.Figure()
    for key, label, colour in (
        ("overdue", "overdue", RISK_COLOURS["replace now"]),
        ("due", "due this quarter", RISK_COLOURS["due soon"]),
        ("read", "read this quarter", RISK_COLOURS["sound"]),
    ):
        figure.add_trace(go.Bar(y=codes, x=[r[key] for r in routes], orientation="h", name=label, marker_color=colour))
    figure.update_layout(barmode="stack")
    figure.update_yaxes(autorange="reversed")
    totals = [r["overdue"] + r["due"] + r["read"] for r in routes]
    figure.update_xaxes(tick0=0, dtick=_whole_step(max(totals, default=0)))
    return _top_legend(_styled(figure, height=_rows_height(len(routes)), xaxis_title="motors in service"))


PHASOR_HEIGHT_PX = 380
SWEEP_HEIGHT_PX = 520
PHASOR_STYLE = {  # label: (name on the chart, colour)
    "line": ("line current", "#3f7d3a"),
    "main": ("main winding", INK),
    "aux": ("auxiliary winding", TREND),
    "supply": ("supply voltage", DEFAULT_BANDS),
    "capacitor": ("capacitor voltage", LIMIT),
}


def phasor_figure(states: dict[str, dict[str, tuple]], unit: str, where: str) -> dict:
    """Phasor diagram of currents (unit "A") or voltages ("V"), the supply voltage at 0 degrees.

    states: "as new" and, if known, "now" -> {label: (magnitude, angle_deg)} with labels from
    PHASOR_STYLE; as new dashed, now solid. `where`: "running" or "at standstill".
    Built from plain dicts in one go (the motor page draws several: figure-by-figure updates cost
    a second a page).
    """
    traces = []
    for state, points in states.items():
        now = state == "now" or len(states) == 1
        for label, (magnitude, angle) in points.items():
            name, color = PHASOR_STYLE[label]
            if magnitude is None or angle is None:
                continue
            traces.append(
                {
                    "type": "scatterpolar",
                    "r": [0, magnitude],
                    "theta": [0, angle],
                    "mode": "lines+markers",
                    "line": {"color": color, "width": 3 if now else 2, "dash": "solid" if now else "dash"},
                    "marker": {"symbol": "arrow", "angleref": "previous", "size": [0, 13], "color": color},
                    "name": name,
                    "legendgroup": label,
                    "showlegend": now,
                    "hovertemplate": f"{name}, {state}: %{{r:.3~f}} {unit} at %{{theta:.1f}}\u00b0<extra></extra>",
                }
            )
    states_words = "dashed: as new, solid: now" if len(states) > 1 else "as new"
    quantity = "currents" if unit == "A" else "voltages"
    # The radial axis and its numbers in the widest gap between the phasors: at a fixed 135 degrees they lay
    # over any phasor that pointed there.
    axis_angle = _widest_gap_deg([trace["theta"][1] for trace in traces])
    layout = {
        "polar": {
            "angularaxis": {"direction": "counterclockwise", "rotation": 0, "gridcolor": GRID, "dtick": 30},
            "radialaxis": {
                "gridcolor": GRID,
                "angle": axis_angle,
                "tickangle": axis_angle % 180.0 - 90.0,  # as Plotly drew them at 135 degrees: 45
                "nticks": 4,
                "tickfont": {"size": 11},
            },
            "bgcolor": "white",
        },
        "margin": {"l": 30, "r": 30, "t": 30, "b": 20},
        "legend": {
            "orientation": "h",
            "y": -0.1,
            "yanchor": "top",
            "title": {"text": f"{quantity} ({unit}) {where}; {states_words}", "side": "top", "font": {"size": 12}},
        },
    }
    return _plain(traces, layout, PHASOR_HEIGHT_PX)


def _widest_gap_deg(angles_deg) -> float:
    """The middle of the widest angle between neighbouring directions (degrees, 0 to 360); 135 with none."""
    if not len(angles_deg):
        return 135.0
    around = np.sort(np.mod(np.asarray(angles_deg, float), 360.0))
    gaps = np.diff(np.r_[around, around[0] + 360.0])
    widest = int(np.argmax(gaps))
    return float(np.mod(around[widest] + gaps[widest] / 2.0, 360.0))


# The sweep's words, measured for the narrowest screen it is drawn on (a 390 px phone: the plot about 290 px
# wide, 11 px text about 6.2 px a character, 15 px a line); ours.
SWEEP_PLOT_WIDTH_PX = 290.0
SWEEP_CHAR_PX = 6.2
SWEEP_LINE_PX = 15.0
SWEEP_MARGIN_PX = {"l": 60, "r": 10, "t": 12, "b": 40}


def level_words_lines(words: str) -> list[str]:
    """A limit's words on one line, or on two (broken at the space nearest the middle) where one line would
    take over half a phone's plot: across the whole width no place is clear of a curve that crosses it."""
    if len(words) * SWEEP_CHAR_PX <= SWEEP_PLOT_WIDTH_PX / 2.0 or " " not in words:
        return [words]
    spaces = [k for k, character in enumerate(words) if character == " "]
    cut = min(spaces, key=lambda k: abs(k - len(words) / 2.0))
    return [words[:cut], words[cut + 1 :]]


def _level_words_place(x, ys, level, words, panel_px):
    """Where a limit's level is named clear of the data: (x in the domain, xanchor, yanchor) for the first of
    left-above, right-above, left-below and right-below whose box (the words as `level_words_lines` sets them)
    holds no point of the curve or the markers (the fewest, where each holds some), and the panel's y range
    with room for the words beyond the data."""
    x, ys = np.asarray(x, float), np.asarray(ys, float)
    kept = np.isfinite(x) & np.isfinite(ys)
    x, ys = x[kept], ys[kept]
    lines = level_words_lines(words)
    low, high = float(np.min(ys, initial=level)), float(np.max(ys, initial=level))
    share_h = SWEEP_LINE_PX * len(lines) / panel_px
    span = (high - low or abs(level) or 1.0) / (1.0 - 2.0 * share_h)
    words_h = share_h * span
    share_w = min(1.0, max(len(line) for line in lines) * SWEEP_CHAR_PX / SWEEP_PLOT_WIDTH_PX)
    # No finite point (the model gave no operating point at any capacitance, e.g. a nameplate speed a hair below
    # synchronous): the words go left above the level, the panel spans them.
    x_low, x_high = (float(x.min()), float(x.max())) if x.size else (0.0, 1.0)
    reach = share_w * (x_high - x_low)
    candidates = []
    for vertical, y_low, y_high in (("bottom", level, level + words_h), ("top", level - words_h, level)):
        for edge, anchor, x_from, x_to in ((0, "left", x_low, x_low + reach), (1, "right", x_high - reach, x_high)):
            inside = (x >= x_from) & (x <= x_to) & (ys >= y_low) & (ys <= y_high)
            candidates.append((int(inside.sum()), len(candidates), (edge, anchor, vertical)))
    place = min(candidates)[2]
    return place, [low - words_h, high + words_h]


def _crossing_rows(xs_share, words) -> list[int]:
    """A row above the plot for each crossing's name (0: the lowest), so that no two names in a row overlap."""
    ends: list[float] = []
    rows = []
    for share, text in sorted(zip(xs_share, words, strict=True)):
        width = len(text) * SWEEP_CHAR_PX / SWEEP_PLOT_WIDTH_PX
        left = min(max(share - width / 2.0, 0.0), 1.0 - width)
        row = next((k for k, end in enumerate(ends) if end < left), len(ends))
        ends[row : row + 1] = [left + width + 0.02]
        rows.append(row)
    order = np.argsort(xs_share, kind="stable")
    placed = [0] * len(rows)
    for k, index in enumerate(order):
        placed[int(index)] = rows[k]
    return placed


SWEEP_PANELS = (  # (value key, axis title, what the limit's level is), top to bottom
    ("starting_torque_nm", "starting torque (N m)", "least: load break-away"),
    ("capacitor_voltage_v", "capacitor voltage (V)", "most: capacitor rating"),
    ("main_current_a", "main current, running (A)", "most: full-load current \u00d7 service factor"),
)


def capacitance_sweep_figure(
    percent_of_rated: list[float],
    rated_uf: float,
    values: dict[str, list],
    levels: dict[str, float | None],
    points: dict[str, dict],
    crossings: list[dict],
) -> dict:
    """Starting torque, capacitor voltage and main current against capacitance (% of rated), one panel
    each on a shared axis, with each limit's level (dashed), where the assessment found it crossed
    (dotted), and the as-new and present points marked. Plain dicts, as `phasor_figure`."""
    traces, shapes, annotations, layout = [], [], [], {}
    gap = 0.06
    height = (1 - 2 * gap) / len(SWEEP_PANELS)
    inside = [c for c in crossings if percent_of_rated[0] <= c["percent_of_rated"] <= percent_of_rated[-1]]
    span = percent_of_rated[-1] - percent_of_rated[0]
    rows = _crossing_rows(
        [(c["percent_of_rated"] - percent_of_rated[0]) / span for c in inside], [c["name"] for c in inside]
    )
    margin = SWEEP_MARGIN_PX | {"t": SWEEP_MARGIN_PX["t"] + SWEEP_LINE_PX * (max(rows, default=-1) + 1)}
    panel_px = (SWEEP_HEIGHT_PX - margin["t"] - margin["b"] - 60) * height  # 60: the legend below
    for row, (key, title, level_words) in enumerate(SWEEP_PANELS):
        axis = "y" if row == 0 else f"y{row + 1}"
        top = 1 - row * (height + gap)
        layout["yaxis" if row == 0 else f"yaxis{row + 1}"] = {
            "domain": [top - height, top],
            "anchor": "x",
            "title": {"text": title, "font": {"size": 12}},
            "gridcolor": GRID,
        }
        traces.append(
            {
                "type": "scatter",
                "x": percent_of_rated,
                "y": values[key],
                "yaxis": axis,
                "mode": "lines",
                "line": {"color": TREND, "width": 2},
                "name": title,
                "showlegend": False,
                "hovertemplate": f"%{{x:.1f}} % of rated: %{{y:.3~f}}<extra>{title}</extra>",
            }
        )
        if levels.get(key) is not None:
            marked = [point[key] for point in points.values()], [point["percent_of_rated"] for point in points.values()]
            (edge, x_anchor, y_anchor), y_range = _level_words_place(
                [*percent_of_rated, *marked[1]], [*values[key], *marked[0]], levels[key], level_words, panel_px
            )
            layout["yaxis" if row == 0 else f"yaxis{row + 1}"]["range"] = y_range
            line = {"color": LIMIT, "dash": "dash", "width": 1.5}
            shapes.append(
                {
                    "type": "line",
                    "xref": "x domain",
                    "x0": 0,
                    "x1": 1,
                    "yref": axis,
                    "y0": levels[key],
                    "y1": levels[key],
                    "line": line,
                }
            )
            annotations.append(
                {
                    "xref": "x domain",
                    "x": edge,
                    "yref": axis,
                    "y": levels[key],
                    "text": "<br>".join(level_words_lines(level_words)),
                    "showarrow": False,
                    "xanchor": x_anchor,
                    "yanchor": y_anchor,
                    "font": {"size": 11, "color": LIMIT},
                }
            )
        for label, point in points.items():
            traces.append(
                {
                    "type": "scatter",
                    "x": [point["percent_of_rated"]],
                    "y": [point[key]],
                    "yaxis": axis,
                    "mode": "markers",
                    "marker": {
                        "color": INK if label == "now" else "white",
                        "line": {"color": INK, "width": 2},
                        "size": 11,
                        "symbol": "circle" if label == "now" else "diamond",
                    },
                    "name": label,
                    "legendgroup": label,
                    "showlegend": row == 0,
                    "hovertemplate": f"{label}: %{{x:.1f}} % of rated, %{{y:.3~f}}<extra></extra>",
                }
            )
    # Each crossing's name above the plot, level, on a row of its own where names would meet: drawn down the
    # top panel they crossed its curve.
    for crossing, words_row in zip(inside, rows, strict=True):
        x = crossing["percent_of_rated"]
        share = (x - percent_of_rated[0]) / span
        half = len(crossing["name"]) * SWEEP_CHAR_PX / SWEEP_PLOT_WIDTH_PX / 2.0
        x_anchor = "left" if share < half else "right" if share > 1.0 - half else "center"
        shapes.append(
            {
                "type": "line",
                "xref": "x",
                "x0": x,
                "x1": x,
                "yref": "paper",
                "y0": 0,
                "y1": 1,
                "line": {"color": LIMIT, "dash": "dot", "width": 1},
            }
        )
        annotations.append(
            {
                "x": x,
                "y": 1.0,
                "xref": "x",
                "yref": "paper",
                "text": crossing["name"],
                "showarrow": False,
                "xanchor": x_anchor,
                "yanchor": "bottom",
                "yshift": SWEEP_LINE_PX * words_row,
                "font": {"size": 11, "color": LIMIT},
            }
        )
    layout |= {
        "xaxis": {
            "anchor": f"y{len(SWEEP_PANELS)}",
            "title": {"text": f"capacitance, % of rated {rated_uf:g} \u00b5F"},
            "gridcolor": GRID,
        },
        "shapes": shapes,
        "annotations": annotations,
        "margin": margin,
        # Below the plot: above it the legend met the crossings' names.
        "legend": {"orientation": "h", "y": -0.2, "yanchor": "top", "x": 0, "xanchor": "left"},
    }
    return _plain(traces, layout, SWEEP_HEIGHT_PX)


def _plain(traces: list[dict], layout: dict, height: int) -> dict:
    """A figure dict in the house style of `_styled`, without building graph objects."""
    return {"data": traces, "layout": {"height": height, "plot_bgcolor": "white", "font": {"size": 14}, **layout}}
