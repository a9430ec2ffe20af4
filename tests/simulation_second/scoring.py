"""Score the API's assessments at a cut-off against the second simulated fleet's truth, in calendar dates.

Scored: the capacitors in service at the cut-off that have an assessment and whose true capacitance at 25 C
is still above the part's lower tolerance limit on the cut-off day.
- band: among those whose true crossing falls after the cut-off and by READ_END, the share with the crossing
  inside [P10, P90]; before_p10 and after_p90 the tails. A null date is past the API's 30-year horizon.
- p50_error_median: median of (P50 - true crossing) / remaining life (days, at least 1); positive is late.
- recall_365 / precision_365: a risk other than "sound" against "truly crosses within 365 days of the cut-off"
  (a capacitor that never crosses counts as a negative; both cut-offs are more than a year before READ_END).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from fleet.engineering.backtest import expected_band_shares
from tests.simulation_second.fleet import READ_END


def _dates(items: list[dict], key: str) -> list:
    return [pd.Timestamp(a[key]) if a.get(key) else pd.NaT for a in items]


def forecasts_from_api(items: list[dict]) -> pd.DataFrame:
    """One row per assessment of GET /api/assessments/: motor, role, risk and the governing P10/P50/P90 days."""
    return pd.DataFrame(
        dict(
            asset_tag=[x["asset_tag"] for x in items],
            role=[x["role"] for x in items],
            risk=[x["risk"] for x in items],
            p10=_dates(items, "p10_on"),
            p50=_dates(items, "p50_on"),
            p90=_dates(items, "p90_on"),
        )
    )


def band_scores(g: pd.DataFrame, cut: pd.Timestamp) -> dict:
    """Band coverage, tails, band width and P50 error of the crossings after the cut-off up to READ_END."""
    x = g[g.truth_cross.notna() & (g.truth_cross <= READ_END)]
    n = len(x)
    if n == 0:
        return dict(n_cross=0)
    far = cut + pd.DateOffset(years=30)  # a null date is past the API's 30-year horizon
    p10, p50, p90 = (x[k].fillna(far) for k in ("p10", "p50", "p90"))
    # What exactly right forecasts would score here, every capacitor followed to READ_END (a diagnostic: the
    # crossings seen are the early part of each forecast's distribution).
    expected = expected_band_shares(
        (0.1, 0.5, 0.9),
        np.stack([((g[k] - cut).dt.days).astype(float).fillna(np.inf) for k in ("p10", "p50", "p90")]),
        np.full(len(g), float((READ_END - cut).days)),
    )
    remaining_d = (x.truth_cross - cut).dt.days.clip(lower=1)
    err = (p50 - x.truth_cross).dt.days / remaining_d
    return dict(
        n_cross=n,
        band=((x.truth_cross >= p10) & (x.truth_cross <= p90)).sum() / n,
        before_p10=(x.truth_cross < p10).sum() / n,
        after_p90=(x.truth_cross > p90).sum() / n,
        expected_n_cross=expected["expected_crossed"],
        expected_band=expected["expected_inside_p10_p90"],
        expected_before_p10=expected["expected_before_p10"],
        band_width_median_y=float(((p90 - p10).dt.days / 365.25).median()),
        p50_err_median=float(np.nanmedian(err)),
    )


def risk_scores(g: pd.DataFrame, cut: pd.Timestamp) -> dict:
    """Recall and precision of a risk other than "sound" against a true crossing within 365 days."""
    pos = g.truth_cross.notna() & ((g.truth_cross - cut).dt.days <= 365)
    flag = g.risk != "sound"
    tp = (pos & flag).sum()
    return dict(
        n=len(g),
        n_pos_365=int(pos.sum()),
        n_flag=int(flag.sum()),
        recall_365=tp / pos.sum() if pos.sum() else np.nan,
        precision_365=tp / flag.sum() if flag.sum() else np.nan,
    )


def score(world: dict, cutoff, forecasts: pd.DataFrame) -> tuple[pd.DataFrame, dict]:
    """Scores by group (all, electrolytic, film, then each site's film and electrolytic) as a table, and the
    counts of what was scored."""
    cut = pd.Timestamp(cutoff)
    caps = world["caps"]
    in_service = caps[(caps.fitted < cut) & (caps.removed.isna() | (caps.removed >= cut))]
    j = in_service.merge(forecasts, on=["asset_tag", "role"], how="left", indicator=True)
    assessed = j._merge == "both"
    already = j.truth_cross < cut
    g = j[~already & assessed]
    counts = dict(
        in_service=len(in_service),
        assessed=len(forecasts),
        in_service_without_assessment=int((~assessed).sum()),
        already_below=int(already.sum()),
        scored=len(g),
    )
    rows = []
    by_site = [(f"{site} {dielectric}", sub) for (site, dielectric), sub in g.groupby(["site", "dielectric"])]
    for name, sub in [("all", g), *g.groupby("dielectric"), *by_site]:
        rows.append(dict(group=name, **risk_scores(sub, cut), **band_scores(sub, cut)))
    return pd.DataFrame(rows).set_index("group"), counts


def table(scores: pd.DataFrame, counts: dict) -> str:
    """The scores as printed text, one column per group."""
    head = ", ".join(f"{k.replace('_', ' ')} {v}" for k, v in counts.items())
    return head + "\n" + scores.round(3).T.to_string()
