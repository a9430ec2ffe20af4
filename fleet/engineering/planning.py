"""From remaining-life quantiles to a risk level and a replacement date."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

RISK_REPLACE_NOW = "replace now"
RISK_DUE_SOON = "due soon"
RISK_WATCH = "watch"
RISK_SOUND = "sound"
RISK_ORDER = (RISK_REPLACE_NOW, RISK_DUE_SOON, RISK_WATCH, RISK_SOUND)


@dataclass(frozen=True)
class PlanningSettings:
    """How far ahead the plan looks (common practice of the trade, adjustable)."""

    lead_days: float = 30.0  # replace this long before the early (P10) crossing
    due_soon_days: float = 90.0  # one quarter: the next round of readings
    watch_days: float = 365.0


def risk_levels(days_to_p10, days_to_p50, limit_already_crossed, settings: PlanningSettings | None = None):
    """Risk level per capacitor and days from now to its recommended replacement.

    "Replace now" needs evidence: the newest reading outside its limit, a visible
    defect, or the fitted path (P50) already past the limit. An early crossing
    (P10) inside the next quarter makes it "due soon" with a date P10 less the
    lead time; P10 within a year, "watch"; beyond that, or never, "sound" (inf days).
    """
    settings = settings or PlanningSettings()
    p10 = np.asarray(days_to_p10, float)
    p50 = np.asarray(days_to_p50, float)
    crossed = np.asarray(limit_already_crossed, bool) | (p50 <= 0)
    level = np.select(
        [crossed, p10 <= settings.due_soon_days, p10 <= settings.watch_days],
        [RISK_REPLACE_NOW, RISK_DUE_SOON, RISK_WATCH],
        default=RISK_SOUND,
    )
    due_days = np.where(crossed, 0.0, np.maximum(p10 - settings.lead_days, 0.0))
    return level, due_days


def bundle_visits(site, due_day, window_days=14):
    """Group replacements into site visits: one trip per site per window.

    Per site, the earliest due replacement opens a visit dated on its due day;
    everything at that site due within `window_days` after it joins the visit
    (replaced a little early rather than sending a second trip); the next item
    opens the next visit. Returns (visit number per item, visit day per item).
    The loop runs over visits, not over items.
    """
    site = np.asarray(site)
    due_day = np.asarray(due_day, float)
    visit = np.full(due_day.size, -1, dtype=np.int64)
    visit_day = np.full(due_day.size, np.nan)
    order = np.lexsort((due_day, site))
    sorted_site, sorted_due = site[order], due_day[order]
    boundaries = np.flatnonzero(np.r_[True, sorted_site[1:] != sorted_site[:-1], True])
    next_visit = 0
    for start, stop in zip(boundaries[:-1], boundaries[1:], strict=True):
        position = start
        while position < stop:
            opens = sorted_due[position]
            end = start + int(np.searchsorted(sorted_due[start:stop], opens + window_days, side="right"))
            visit[order[position:end]] = next_visit
            visit_day[order[position:end]] = opens
            next_visit += 1
            position = end
    return visit, visit_day
