"""Scoring of capacitor-life forecasts against a simulated fleet's truth (no Django).

Scored in calendar dates. A forecast is, per capacitor in service at the
cut-off (asset_tag, role): P10/P50/P90 dates of crossing the lower tolerance
limit (null: not within the forecast's horizon) and a risk level.

- Band: among capacitors still above their limit at the cut-off whose true
  crossing falls after it and within the simulated span, the share whose
  crossing lies inside [P10, P90], below P10, above P90 (a null date means
  "beyond the forecast's horizon": a null P90 holds every later crossing, a
  null P10 misses every crossing as late), or that have no tolerance forecast
  at all (no assessment, or `tolerance_known` false).
- P50 error as a share of the true remaining life (crossing - cut-off).
- Risk: among capacitors not yet below their limit at the cut-off, recall and
  precision of "flagged for the next 365 days" against "truly crosses within
  365 days". A capacitor with no crossing in the span is a known negative only
  if the span reaches 365 days past the cut-off; otherwise it is left out.

Only capacitors that cross inside the span enter the band figures, which leans
them towards early crossings; `censored_above_p90` counts the capacitors that
had not crossed by the end of the span although their P90 fell before it
(certainly above the band), as a check on that selection.
"""

from __future__ import annotations

import datetime as dt

import numpy as np
import pandas as pd

from fleet.engineering.backtest import expected_band_shares

FLAGGED = ("replace now", "due soon", "watch")


def _dates(series: pd.Series) -> pd.Series:
    return pd.to_datetime(series, errors="coerce")


def in_service(truth: pd.DataFrame, cutoff: dt.date) -> pd.DataFrame:
    """Capacitors fitted before the cut-off and not removed before it, one per motor and role."""
    day = pd.Timestamp(cutoff)
    return truth[(truth["fitted_on"] < day) & ~(truth["removed_on"] < day)]


def score(truth: pd.DataFrame, cutoff: dt.date, forecasts: pd.DataFrame, horizon_days: int = 365) -> dict:
    """Band coverage, P50 error and risk recall/precision of one cut-off's forecasts."""
    day = pd.Timestamp(cutoff)
    forecasts = forecasts.copy()
    for name in ("p10_on", "p50_on", "p90_on"):
        forecasts[name] = _dates(forecasts[name])
    if "tolerance_known" not in forecasts:
        forecasts["tolerance_known"] = True
    frame = in_service(truth, cutoff).merge(
        forecasts[["asset_tag", "role", "p10_on", "p50_on", "p90_on", "risk", "tolerance_known"]],
        on=["asset_tag", "role"],
        how="left",
    )
    frame["forecast"] = frame["tolerance_known"].eq(True)
    crossed = frame["crossed_on"]
    above_at_cut = crossed.isna() | (crossed >= day)

    scored = frame[above_at_cut & crossed.notna() & frame["forecast"]]
    missing = int((above_at_cut & crossed.notna() & ~frame["forecast"]).sum())
    c, p10, p90 = scored["crossed_on"], scored["p10_on"], scored["p90_on"]
    # A null date is "not within the forecast's horizon": later than any crossing seen.
    below = p10.isna() | (c < p10)
    above = ~below & p90.notna() & (c > p90)
    inside = ~below & ~above
    n_band = len(scored) + missing
    remaining = (c - day).dt.days.clip(lower=1)
    p50_error = ((scored["p50_on"] - c).dt.days / remaining).dropna()
    # The band's width in years, a null date at the API's 30-year horizon (as the second fleet's scorer reads it).
    far = day + pd.DateOffset(years=30)
    width_y = (p90.fillna(far) - p10.fillna(far)).dt.days / 365.25

    # What exactly right forecasts would score here, each capacitor followed to the end of its span (a diagnostic:
    # the crossings seen are the early part of each forecast's distribution).
    followed = frame[above_at_cut & frame["forecast"]]
    expected = expected_band_shares(
        (0.1, 0.5, 0.9),
        np.stack([((followed[k] - day).dt.days).astype(float).fillna(np.inf) for k in ("p10_on", "p50_on", "p90_on")]),
        ((followed["span_end"] - day).dt.days).astype(float),
    )

    never_crossed = frame[above_at_cut & crossed.isna() & frame["forecast"]]
    censored_above = int((never_crossed["p90_on"] < never_crossed["span_end"]).sum())

    span_ok = frame["span_end"] >= day + pd.Timedelta(days=horizon_days)
    eligible = above_at_cut & (crossed.notna() | span_ok)
    positive = crossed.notna() & (crossed < day + pd.Timedelta(days=horizon_days))
    flagged = frame["risk"].isin(FLAGGED)
    tp = int((eligible & positive & flagged).sum())
    n_pos = int((eligible & positive).sum())
    n_flag = int((eligible & flagged).sum())

    def share(k, n):
        return float(k) / n if n else float("nan")

    return {
        "cutoff": str(cutoff),
        "in_service": len(frame),
        "below_at_cutoff": int((~above_at_cut).sum()),
        "band_scored": n_band,
        "inside": share(int(inside.sum()), n_band),
        "below_p10": share(int(below.sum()), n_band),
        "above_p90": share(int(above.sum()), n_band),
        "no_forecast": share(missing, n_band),
        "expected_scored": expected["expected_crossed"],
        "expected_inside": expected["expected_inside_p10_p90"],
        "expected_below_p10": expected["expected_before_p10"],
        "censored_above_p90": censored_above,
        "p50_error_median": float(np.median(p50_error)) if len(p50_error) else float("nan"),
        "p50_abs_error_median": float(np.median(np.abs(p50_error))) if len(p50_error) else float("nan"),
        "band_width_median_y": float(np.median(width_y)) if len(width_y) else float("nan"),
        "risk_eligible": int(eligible.sum()),
        "risk_positives": n_pos,
        "risk_flagged": n_flag,
        "risk_true_flags": tp,
        "recall": share(tp, n_pos),
        "precision": share(tp, n_flag),
    }


def score_by(truth, cutoff, forecasts, by: str = "dielectric", horizon_days: int = 365) -> dict[str, dict]:
    """`score` overall ("all") and per value of a truth column (dielectric, part_code)."""
    out = {"all": score(truth, cutoff, forecasts, horizon_days)}
    for value, group in truth.groupby(by):
        out[str(value)] = score(group, cutoff, forecasts, horizon_days)
    return out


def _percent(share) -> str:
    return "-" if share is None else f"{share:.0%}"


def table(results: dict[str, dict]) -> str:
    """Figures as a small text table, one line per group."""
    lines = [
        f"{'group':<14}{'cut-off':<12}{'n':>4}{'in':>7}{'<P10':>7}{'>P90':>7}{'none':>6}{'P50err':>8}"
        f"{'|P50|':>7}{'width':>6}{'pos':>5}{'flag':>5}{'TP':>4}{'recall':>8}{'prec':>7}"
        f"  if right: {'n':>4}{'in':>5}{'<P10':>6}"
    ]
    for group, r in results.items():
        lines.append(
            f"{group:<14}{r['cutoff']:<12}{r['band_scored']:>4}{r['inside']:>7.0%}{r['below_p10']:>7.0%}"
            f"{r['above_p90']:>7.0%}{r['no_forecast']:>6.0%}{r['p50_error_median']:>8.2f}{r['p50_abs_error_median']:>7.2f}"
            f"{r['band_width_median_y']:>6.1f}{r['risk_positives']:>5}{r['risk_flagged']:>5}{r['risk_true_flags']:>4}{r['recall']:>8.0%}{r['precision']:>7.0%}"
            f"  {'':>10}{r['expected_scored']:>4.0f}{_percent(r['expected_inside']):>5}"
            f"{_percent(r['expected_below_p10']):>6}"
        )
    return "\n".join(lines)


def forecasts_from_api(items: list[dict]) -> pd.DataFrame:
    """Per capacitor, the tolerance-limit dates and the risk from `GET /api/assessments/` items.

    The entry named `tolerance` of an item's `limits`; an item without that list
    falls back to its own dates when its governing limit is the tolerance; else
    the tolerance forecast is missing (`tolerance_known` false).
    """
    rows = []
    for item in items:
        limit = next((entry for entry in item.get("limits") or [] if entry.get("name") == "tolerance"), None)
        if limit is None and item.get("limit_source") == "tolerance":
            limit = item
        rows.append(
            {
                "asset_tag": item["asset_tag"],
                "role": item["role"],
                "risk": item["risk"],
                "limit_source": item.get("limit_source"),
                "p10_on": limit and limit.get("p10_on"),
                "p50_on": limit and limit.get("p50_on"),
                "p90_on": limit and limit.get("p90_on"),
                "tolerance_known": limit is not None,
            }
        )
    columns = ["asset_tag", "role", "risk", "limit_source", "p10_on", "p50_on", "p90_on", "tolerance_known"]
    return pd.DataFrame(rows, columns=columns)
