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
