"""From remaining-life quantiles to a risk level, a replacement date and the reason.

The judgement is a pure function of the fit's results: which limit governs,
how many days to each quantile of its crossing, the risk rule, and the reason in
words, so the refit service only loads, calls and stores.
"""

from __future__ import annotations

import datetime as dt
from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np
import pandas as pd

from .drift import EstimateResolution
from .rules import ACCEPTED_DAYS_WORDS, FIRST_ACCEPTED_DAY, decimals_to_tell_apart, fixed_decimals

RISK_REPLACE_NOW = "replace now"
RISK_DUE_SOON = "due soon"
RISK_WATCH = "watch"
RISK_SOUND = "sound"
RISK_ORDER = (RISK_REPLACE_NOW, RISK_DUE_SOON, RISK_WATCH, RISK_SOUND)

TOLERANCE_LIMIT = "tolerance"
DISSIPATION_LIMIT = "dissipation factor"  # the second wear sign, on the ESR readings' trend
# Quantiles of the crossing date the risk rule may flag on; the back-test picks one per family.
# The replacement plan looks from a week to two years ahead (ours): further, a forecast's band is wider than
# the plan is long. Work orders are dated within that reach and bundled into visits of at most a quarter.
PLAN_HORIZON_DAYS = (7, 730)
PLAN_DEFAULT_DAYS = 90  # the plan page's reach and the work orders' when none is asked for: a quarter's round
WORK_ORDER_MAX_WINDOW_DAYS = 90


def work_order_problems(due_on, window_days, today, moved_from=None) -> list[tuple[np.ndarray, str, str]]:
    """(rows, field, message) for work orders no plan makes: due (or moved from a plan's day, `moved_from`; None or
    NaT: not moved) past the plan's reach or before the days any date may name (`rules.FIRST_ACCEPTED_DAY`), or a
    visit window of no days or more than a quarter. One rule for the register's form (the planner keeps to it by
    design)."""
    due = np.atleast_1d(np.asarray(due_on, "datetime64[D]"))
    moved = np.atleast_1d(np.asarray(np.datetime64("NaT") if moved_from is None else moved_from, "datetime64[D]"))
    window = np.atleast_1d(np.asarray(window_days, float))
    furthest = np.datetime64(today, "D") + np.timedelta64(PLAN_HORIZON_DAYS[1], "D")
    too_early = f"before {FIRST_ACCEPTED_DAY}: dates are accepted {ACCEPTED_DAYS_WORDS}, check the year"
    past_reach = f"more than {PLAN_HORIZON_DAYS[1]} days ahead, past the plan's reach"
    return [
        (due < FIRST_ACCEPTED_DAY, "due_on", too_early),
        (due > furthest, "due_on", past_reach),
        (moved < FIRST_ACCEPTED_DAY, "moved_from", too_early),
        (moved > furthest, "moved_from", past_reach),
        (
            ~((window >= 1) & (window <= WORK_ORDER_MAX_WINDOW_DAYS)),
            "window_days",
            f"must be from 1 to {WORK_ORDER_MAX_WINDOW_DAYS} days",
        ),
    ]


# Not calendar.day_name: it follows the process's locale, and the pages' words are English.
WEEKDAY_NAMES = ("Monday", "Tuesday", "Wednesday", "Thursday", "Friday", "Saturday", "Sunday")


def visit_day_problem(
    day: dt.date, today: dt.date, weekmask: str | None = None, days_off: Mapping[dt.date, str] | None = None
) -> str:
    """Why a visit cannot be moved to `day`, in words ("" where it can): a day before `today`, a day that
    is not a working day (`PlanningSettings.working_days`, numpy's weekmask), one of the site's `days_off`
    (day: its name), or one past the plan's reach."""
    weekmask = PlanningSettings.working_days if weekmask is None else weekmask
    if day < today:
        return f"{day.isoformat()} is in the past: choose today or a later working day."
    if days_off and day in days_off:
        return f"{day.isoformat()} is a day off at this site ({days_off[day]}): choose another working day."
    if weekmask[day.weekday()] != "1":
        working = [name for name, flag in zip(WEEKDAY_NAMES, weekmask, strict=True) if flag == "1"]
        return (
            f"{day.isoformat()} is a {WEEKDAY_NAMES[day.weekday()]}: visits are on working days ({', '.join(working)})."
        )
    for rows, _, message in work_order_problems(day, 1, today):
        if rows.any():
            return f"{day.isoformat()} is {message}."
    return ""


def day_off_problems(days, today: dt.date, weekmask: str | None = None) -> np.ndarray:
    """Why each of `days` (datetime64[D]; NaT: no problem named here) cannot be stored as a site's day off, in words
    without the day itself ("" where it can): the one rule of the days-off page and the days-off import. A day
    before `today` or past the plan's reach guides no plan; a day off work (`weekmask`) has no visit anyway."""
    weekmask = PlanningSettings.working_days if weekmask is None else weekmask
    day = np.atleast_1d(np.asarray(days, "datetime64[D]"))
    base = np.datetime64(today, "D")
    furthest = base + np.timedelta64(PLAN_HORIZON_DAYS[1], "D")
    known = ~np.isnat(day)
    working = np.is_busday(np.where(known, day, base), weekmask=weekmask)
    return np.select(
        [known & (day < base), known & (day > furthest), known & ~working],
        [
            "in the past: days off guide the plan from today on",
            f"past the plan's reach ({PLAN_HORIZON_DAYS[1]} days, to {furthest}): add it later",
            "not a working day: no visit falls on it anyway",
        ],
        default="",
    ).astype(object)


def working_days_near(
    day: dt.date,
    today: dt.date,
    *,
    before: int = 2,
    after: int = 3,
    weekmask: str | None = None,
    days_off: Mapping[dt.date, str] | None = None,
) -> list[dt.date]:
    """The working days next to a visit's `day` that it may be moved to (`visit_day_problem` finds nothing
    against them): up to `before` working days before it and `after` after it, in date order. The choices the
    visit sheet offers, so that a planner picks a day by its weekday and date rather than in a date box
    written in the browser's own order of day, month and year. The site's `days_off` are skipped."""
    weekmask = PlanningSettings.working_days if weekmask is None else weekmask
    start = np.datetime64(day, "D")
    holidays = _holidays(days_off)
    # A `day` off work is rolled towards the side counted from first: one step back is the working day before it.
    earlier = np.busday_offset(start, -np.arange(before, 0, -1), roll="forward", weekmask=weekmask, holidays=holidays)
    later = np.busday_offset(start, np.arange(1, after + 1), roll="backward", weekmask=weekmask, holidays=holidays)
    days = np.concatenate([earlier, later]).astype(dt.date)
    return [d for d in days if not visit_day_problem(d, today, weekmask, days_off)]


def _holidays(days_off) -> np.ndarray:
    """Days off as numpy's busday holidays (an empty list where there are none)."""
    return np.array(sorted(days_off or ()), dtype="datetime64[D]")


ALERT_LEVELS = (0.1, 0.2, 0.3, 0.4, 0.5)
EVIDENCE_NONE, EVIDENCE_DEFECT, EVIDENCE_OPEN_OR_SHORT, EVIDENCE_BELOW, EVIDENCE_DF, EVIDENCE_PATH = range(6)
PATH_BELOW_REASON = "fitted trend is already below "  # then the limit: "replace now" on the fitted path itself
EVIDENCE_OVERLOAD = 6  # a part fitted against the advice overloads the motor now (`drift.overloaded_by_the_part`)


@dataclass(frozen=True)
class PlanningSettings:
    """How far ahead the plan looks (common practice of the trade, adjustable)."""

    lead_days: float = 30.0  # replace this long before the early (P10) crossing
    due_soon_days: float = 90.0  # one quarter: the next round of readings
    watch_days: float = 365.0
    notice_days: float = 7.0  # without a defect, never sooner than this: spares and a visit need time
    below_limit_days: float = 14.0  # read below its limit: replace within one visit window
    # A reading this close before the trend's early crossing, or after it, answers whether the capacitor has
    # passed its limit (it moves little within one visit window): no "read it again" after it.
    reading_answers_days: float = 14.0
    horizon_days: float = 30 * 365.0  # crossings later than this are "beyond"
    alert_level: float = 0.1  # the crossing quantile the risk rule flags on, until a back-test chose one
    alert_min_recall: float = 0.85  # a back-tested level must catch this share of the year's crossings
    # Days a visit may fall on, Monday to Sunday (numpy's weekmask): public holidays are local, the planner
    # moves a visit that falls on one.
    working_days: str = "1111100"
    # A motor's other capacitor due this soon after the first goes on the same visit, replaced a little early
    # rather than the motor isolated, locked out and its capacitors discharged a second time weeks later (common
    # practice of the trade, no single source; the figure is ours: two visit windows and a half).
    same_motor_days: float = 35.0


@dataclass(frozen=True)
class Judgement:
    """Per capacitor: risk level, days to the replacement (inf: none planned),
    the governing limit's index (-1: none; L: the second wear sign), days to its P10/P50/P90 and the
    reason; `limit_index` and `limit_fraction`, the capacitance limit that governs (-1 and nan: none),
    the one a reading is judged against (`reads_below`)."""

    risk: np.ndarray
    due_days: np.ndarray
    governing: np.ndarray
    days: np.ndarray  # (3, G)
    reason: np.ndarray
    limit_index: np.ndarray
    limit_fraction: np.ndarray
    read_again: np.ndarray  # the plan's word is "read it again" (`read_again`)


def reads_below(fraction_25c, limit_fraction) -> np.ndarray:
    """A reading is below its limit when its value referred to 25 C is under the capacitance limit that
    governs its capacitor (`Judgement.limit_fraction`), by any margin: the one rule for "a reading below
    its limit", which asks for a replacement (`judge`) and which the back-test counts as a crossing seen."""
    with np.errstate(invalid="ignore"):
        return np.asarray(fraction_25c, float) < np.asarray(limit_fraction, float)


def instant_days(today: dt.date, offset_days, day_fraction: float = 0.0) -> np.ndarray:
    """The calendar day (datetime64[D]) of each instant `offset_days` after the forecast's moment, which is
    `day_fraction` of the way through `today`: the day of the instant, not today plus the offset's whole days, so
    a crossing is dated alike by refits of the same readings at any hour (a crossing 0.6 days after a refit at
    18:00 is tomorrow's). Not finite: today (the callers mask those)."""
    offset = np.asarray(offset_days, float) + day_fraction
    whole = np.floor(np.nan_to_num(offset, nan=0.0, posinf=0.0, neginf=0.0)).astype(np.int64)
    return np.datetime64(today, "D") + whole.astype("timedelta64[D]")


def _month(today: dt.date, days, day_fraction: float = 0.0) -> np.ndarray:
    return np.datetime_as_string(instant_days(today, days, day_fraction), unit="M")


def judge(
    *,
    limit_names,
    limit_fraction,
    limit_days,
    fraction_now,
    rated_uf,
    latest_uf,
    latest_fraction_25c,
    evidence,
    evidence_text,
    today: dt.date,
    day_fraction: float = 0.0,
    wear_days=None,
    wear_words=None,
    alert_days=None,
    latest_on=None,
    settings: PlanningSettings | None = None,
) -> Judgement:
    """Judge every capacitor at once.

    limit_names: L names, the first the tolerance. limit_fraction (L, G): each
    limit as a fraction of rated capacitance, nan where not evaluated or set
    aside. limit_days (3, L, G): days from today to the P10/P50/P90 crossing of
    each limit (inf: never within the horizon; <= 0: already). fraction_now: the
    fitted value now; latest_fraction_25c: the newest reading referred to 25 C.
    evidence (G ints, EVIDENCE_*) and evidence_text: what a reading showed, or a part fitted against the advice
    that overloads the motor (EVIDENCE_OVERLOAD; a reading below a limit is said instead where there is one).
    wear_days (3, G) and wear_words: a second wear sign's crossing (the
    dissipation factor's trend); when it comes before the capacitance limit it
    sets the risk, the date and the reason, and `governing` is L.
    alert_days (L, G): days to each limit's crossing at the quantile the risk
    rule flags on (`risk_levels`; P10 when not given). latest_on (G dates): the newest reading's day
    (NaT or not given: unknown). day_fraction: how far through `today` the days are counted from (the
    crossings' months in the words are the instants' own, `instant_days`).

    The governing limit is the highest fraction (a falling capacitance meets it
    first). "Replace now" needs evidence: a defect seen, an open or short
    circuit, a reading below the governing limit, a dissipation factor over its
    maximum, or the fitted path already below the limit today; a crossing that only
    the forecast puts after the newest reading is a question for a reading
    (`read_again`), not evidence, whatever quantile the risk rule flags on. The crossing at the
    alert quantile (P10, or the back-tested one) within a quarter is "due soon",
    within a year "watch", else "sound"; the same crossing dates the replacement
    (`lead_days` before it), so the risk level and the replace-by date follow
    one crossing ("sound" has none inside eleven months). That crossing already passed asks to read the capacitor again
    (`read_again`); a reading taken since that still reads above the limit settles it: the
    capacitor sits at the edge of its limit by its trend, replace it at the next visit.
    """
    settings = settings or PlanningSettings()
    names = np.asarray(limit_names, dtype=object)
    fractions = np.asarray(limit_fraction, float)
    all_days = np.asarray(limit_days, float)
    n = fractions.shape[1]
    evaluated = np.isfinite(fractions)
    governing = np.where(evaluated.any(axis=0), np.argmax(np.where(evaluated, fractions, -np.inf), axis=0), -1)
    limit_index = governing.copy()
    column = np.arange(n)
    safe = np.maximum(governing, 0)
    days = np.where(governing >= 0, all_days[:, safe, column], np.inf)
    alert = days[0]
    if alert_days is not None:
        alert = np.where(governing >= 0, np.asarray(alert_days, float)[safe, column], np.inf)
    limit = np.where(governing >= 0, fractions[safe, column], np.nan)
    evidence = np.asarray(evidence, int).copy()
    below = reads_below(latest_fraction_25c, limit)
    # A part's overload of the motor (`drift.overloaded_by_the_part`) gives way to its capacitance below a limit:
    # a part too small is said as the limit it breaches, the more telling reason.
    outranked = [EVIDENCE_NONE, EVIDENCE_OVERLOAD]
    evidence = np.where(np.isin(evidence, outranked) & below, EVIDENCE_BELOW, evidence)
    # The fitted path itself below the limit is evidence; a crossing the forecast only projects past since the
    # newest reading is not: it asks for the capacitor to be read again (`read_again`), which settles it.
    path_past = np.asarray(fraction_now, float) < limit
    evidence = np.where(np.isin(evidence, outranked) & path_past, EVIDENCE_PATH, evidence)
    wear_first = np.zeros(n, bool)
    if wear_days is not None:
        wear_days = np.asarray(wear_days, float)
        wear_first = wear_days[0] < days[0]
        days = np.where(wear_first, wear_days, days)
        alert = np.where(wear_first, wear_days[0], alert)
        governing = np.where(wear_first, len(names), governing)
    replace_now = evidence != EVIDENCE_NONE
    risk = risk_levels(replace_now, alert, settings)
    latest_days = np.full(n, np.nan)
    if latest_on is not None:
        latest_day = np.asarray(latest_on, "datetime64[D]")
        latest_days = (latest_day - np.datetime64(today, "D")).astype(float)
        latest_days[np.isnat(latest_day)] = np.nan
    # One decision threshold: the crossing the risk level is judged on also dates the replacement and asks
    # for a reading once passed, so a "sound" capacitor (its crossing over a year away) has no replacement
    # within the next eleven months.
    again = read_again(risk, alert, latest_days, settings.reading_answers_days)
    read_since = ~replace_now & (alert <= 0) & ~again
    urgent = np.isin(evidence, [EVIDENCE_DEFECT, EVIDENCE_OPEN_OR_SHORT])
    planned = np.maximum(alert - settings.lead_days, settings.notice_days)
    due_days = np.select(
        [urgent, replace_now, np.isfinite(alert) & (alert <= settings.horizon_days)],
        [0.0, np.clip(planned, settings.notice_days, settings.below_limit_days), planned],
        default=np.inf,
    )
    # Reading and limit with the decimals that tell them apart: "189.069 µF: below ... (189.072 µF)".
    places = decimals_to_tell_apart(latest_uf, limit * np.asarray(rated_uf, float))
    limit_uf = fixed_decimals(limit * np.asarray(rated_uf, float), places)
    limit_name = np.where(governing >= 0, names[safe], "")
    latest = fixed_decimals(latest_uf, places)
    limit_words = "the " + limit_name + " limit (" + limit_uf + " \u00b5F)"
    if wear_days is not None:
        limit_words = np.where(wear_first, np.asarray(wear_words, dtype=object), limit_words)

    def month_or(offset, beyond):
        inside = np.isfinite(offset) & (offset <= settings.horizon_days)
        return np.where(inside, _month(today, offset, day_fraction), beyond)

    beyond = f"beyond {settings.horizon_days / 365:.0f} years"
    likely = month_or(days[1], beyond)
    late = month_or(days[2], "")
    read_on = np.datetime_as_string(
        np.datetime64(today, "D") + np.nan_to_num(latest_days, nan=0.0).astype("int64").astype("timedelta64[D]"),
        unit="D",
    ).astype(object)
    settled = (
        "read on "
        + read_on
        + np.where(
            wear_first,
            ", within " + limit_words,
            ", referred to 25 \u00b0C, at " + latest + " \u00b5F, above " + limit_words,
        )
        # The likely crossing may be past already ("crosses it now (likely 2026-09)" read in December).
        + np.where(
            days[1] <= 0,
            ", but its trend has likely crossed it since (likely ",
            ", but its trend crosses it now (likely ",
        )
        + likely
        + "): replace at the next visit"
    )
    between = np.select(
        [(alert > 0) & (late != ""), alert > 0],
        [
            "trend reaches "
            + limit_words
            + " between "
            + _month(today, days[0], day_fraction)
            + " and "
            + late
            + " (likely "
            + likely
            + ")",
            "trend reaches "
            + limit_words
            + " no sooner than "
            + _month(today, days[0], day_fraction)
            + " (likely "
            + likely
            + ")",
        ],
        # The early crossing has passed and the likely one is ahead: said as such (a walk read "may already have
        # reached ... (likely 2027-01)": a future date for what was said to have perhaps happened).
        default=np.where(
            days[1] <= 0,
            "the trend has likely crossed " + limit_words + " since the newest reading (likely ",
            "the trend's early crossing of " + limit_words + " has passed (likely crossing ",
        )
        + likely
        + np.where(late != "", ", at the latest " + late, "")
        + "): read it again",
    )
    # An operating-point limit that governs at the part's own rating (only a part fitted against the advice keeps
    # such a limit: `drift.judge_limits`) is breached by the part itself, new or worn: said as such, not as wear.
    # Not the tolerance (the first limit): a part marked -0 % has its tolerance limit at its rating, and a reading
    # under it is a reading below its limit (a walk found every such start capacitor "fitted against the advice").
    rated_words = pd.Series(np.asarray(rated_uf, float)).map("{:.2f}".format).to_numpy(object)
    by_the_part = (
        (governing > 0) & ~wear_first & (np.nan_to_num(limit, nan=0.0) >= EstimateResolution.at_rated_fraction)
    )
    reason = np.select(
        [
            np.isin(evidence, [EVIDENCE_DEFECT, EVIDENCE_OPEN_OR_SHORT, EVIDENCE_DF, EVIDENCE_OVERLOAD]),
            by_the_part & np.isin(evidence, [EVIDENCE_BELOW, EVIDENCE_PATH]),
            evidence == EVIDENCE_BELOW,
            evidence == EVIDENCE_PATH,
            (governing < 0) & ~wear_first,
            read_since,
            np.isfinite(days[0]) & (days[0] <= settings.horizon_days),
        ],
        [
            np.asarray(evidence_text, dtype=object),
            "at its rated "
            + rated_words
            + " \u00b5F this part already breaches the "
            + limit_name
            + " limit on the motor model: fitted against the advice, it does not suit this motor; fit the design"
            " part",
            "latest reading, referred to 25 \u00b0C, " + latest + " \u00b5F: below " + limit_words,
            PATH_BELOW_REASON + limit_words,
            "no limit could be evaluated",
            settled,
            between,
        ],
        default="trend stays above " + limit_words + " for the planning horizon",
    )
    return Judgement(
        risk=risk,
        due_days=due_days,
        governing=governing,
        days=days,
        reason=reason,
        limit_index=limit_index,
        limit_fraction=limit,
        read_again=again,
    )


def read_again(
    risk, early_days, latest_days, answers_days: float = PlanningSettings.reading_answers_days
) -> np.ndarray:
    """Where the plan's word is "read it again" before replacing: the trend's crossing at the risk rule's
    quantile (its early one, P10, by default) has passed (`early_days` from today at or below 0), no
    reading shows the capacitor past its limit or damaged (not "replace now"), and none was taken since the
    crossing, or `answers_days` before it (`latest_days`, days from today to the newest reading; nan:
    unknown). Such a reading settles it either way: below the limit it is "replace now", above it `judge`
    says replace at the next visit; never a second "read again" for a question a reading answered. The work
    orders follow the stored word."""
    early_days = np.asarray(early_days, float)
    with np.errstate(invalid="ignore"):
        read_since = np.asarray(latest_days, float) >= np.floor(early_days) - answers_days
    return (np.asarray(risk) != RISK_REPLACE_NOW) & (early_days <= 0) & ~read_since


def alert_index(level) -> np.ndarray:
    """Index into ALERT_LEVELS of each capacitor's alert level (nan: the default level)."""
    level = np.nan_to_num(np.asarray(level, float), nan=PlanningSettings().alert_level)
    return np.clip(np.searchsorted(ALERT_LEVELS, level - 1e-9), 0, len(ALERT_LEVELS) - 1)


def risk_levels(replace_now, alert_days, settings: PlanningSettings | None = None) -> np.ndarray:
    """The risk rule: evidence now is "replace now"; else the crossing at the alert
    quantile within a quarter is "due soon", within a year "watch", else "sound"."""
    settings = settings or PlanningSettings()
    alert_days = np.asarray(alert_days, float)
    return np.select(
        [np.asarray(replace_now, bool), alert_days <= settings.due_soon_days, alert_days <= settings.watch_days],
        [RISK_REPLACE_NOW, RISK_DUE_SOON, RISK_WATCH],
        default=RISK_SOUND,
    )


def plan_moved_words(
    *,
    order_reads_again,
    order_due_days,
    window_days,
    plan_risk,
    plan_read_again,
    plan_due_days,
    today: dt.date,
    order_visit_days=None,
    plan_visit_days=None,
) -> np.ndarray:
    """Per open work order, in words, what its capacitor's current plan asks where that is no longer the
    order's work in its visit ("plan now: watch, replace by 2027-01-03"); empty where it still is.

    The plan no longer asks for the order's work when it plans no replacement, asks for the other kind
    (read again or replace), or dates the replacement after the order's visit window (due day plus
    `window_days`: the plan would not put it in this visit), judged on the day its visits take it as due
    (`plan_visit_days`, `with_its_motor`: a capacitor due within weeks of its motor's other one goes in that
    one's visit; its own replace-by day if not given). An order whose capacitor the plan now says to
    replace now, by a day before the order's visit (`order_visit_days`, the visit's own day), says so too
    ("..., before this visit"): a capacitor seen bulged a week before its visit waits for no visit (a walk
    found one silent). Days count from `today` (inf: none)."""
    order_due = np.asarray(order_due_days, float)
    plan_due = np.asarray(plan_due_days, float)
    plan_again = np.asarray(plan_read_again, bool)
    no_date = ~np.isfinite(plan_due)
    visit = order_due if order_visit_days is None else np.asarray(order_visit_days, float)
    sooner = ~no_date & (np.asarray(plan_risk, dtype=object) == RISK_REPLACE_NOW) & (plan_due < visit)
    plan_visit = plan_due if plan_visit_days is None else np.asarray(plan_visit_days, float)
    moved = (
        no_date
        | (np.asarray(order_reads_again, bool) != plan_again)
        | (plan_visit > order_due + np.asarray(window_days, float))
        | sooner
    )
    when = np.where(
        no_date,
        "no replacement planned",
        np.where(plan_again, "read it again by ", "replace by ")
        + np.datetime_as_string(
            np.datetime64(today, "D") + np.where(no_date, 0, plan_due).astype("int64").astype("timedelta64[D]"),
            unit="D",
        ).astype(object),
    )
    when = np.where(sooner, when + ", before this visit", when)
    return np.where(moved, "plan now: " + np.asarray(plan_risk, dtype=object) + ", " + when, "")


def with_its_motor(due_day, motor_first_day, same_motor_days: float = PlanningSettings.same_motor_days) -> np.ndarray:
    """The day the plan's visits take each item as due: its own, or its motor's earliest (`motor_first_day`,
    inf: none) where its own is within `same_motor_days` of it, so both capacitors go in one isolation
    (`bundle_visits`; and where an order's visit is judged, `plan_moved_words`)."""
    due_day = np.asarray(due_day, float)
    first = np.asarray(motor_first_day, float)
    with np.errstate(invalid="ignore"):
        joins = np.isfinite(first) & (due_day - first <= same_motor_days)
    return np.where(joins, np.minimum(first, due_day), due_day)


def bundle_visits(
    site,
    due_day,
    window_days=14,
    *,
    today: dt.date | None = None,
    weekmask: str = PlanningSettings.working_days,
    days_off_by_site: Mapping | None = None,
    motor=None,
    same_motor_days: float = 0.0,
):
    """Group replacements into site visits: one trip per site per window.

    Per site, the earliest due replacement opens a visit dated on its due day;
    everything at that site due within `window_days` after it joins the visit
    (replaced a little early rather than sending a second trip); the next item
    opens the next visit. Given `motor` (per item), an item due within
    `same_motor_days` of its motor's earliest goes where that one goes: one
    isolation for both capacitors. Returns (visit number per item, visit day per item).
    The loop runs over visits, not over items. Given `today` (day 0), a visit day
    that falls outside `weekmask`'s working days, or on one of its site's days off
    (`days_off_by_site`: site value to its days), moves to the working day before
    it, or after it where that would be before today.
    """
    site = np.asarray(site)
    due_day = np.asarray(due_day, float)
    if motor is not None and due_day.size and same_motor_days > 0:
        _, of_motor = np.unique(np.asarray(motor), return_inverse=True)
        earliest = np.full(of_motor.max() + 1, np.inf)
        np.minimum.at(earliest, of_motor, due_day)
        due_day = with_its_motor(due_day, earliest[of_motor], same_motor_days)
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
    if today is not None and due_day.size:
        on_working_day = working_visit_days(visit_day, today, weekmask)
        for site_value, days_off in (days_off_by_site or {}).items():  # a loop over sites, not items
            at_site = site == site_value
            if days_off and at_site.any():
                on_working_day[at_site] = working_visit_days(visit_day[at_site], today, weekmask, days_off)
        visit_day = on_working_day
    return visit, visit_day


def working_visit_days(
    visit_day, today: dt.date, weekmask: str = PlanningSettings.working_days, days_off=()
) -> np.ndarray:
    """Visit days (days from `today`) moved onto working days that are not `days_off`: back to the working day
    before, or on to the one after where going back would be before today (a weekend's overdue visit goes on
    Monday)."""
    day = np.asarray(visit_day, float)
    base = np.datetime64(today, "D")
    holidays = _holidays(days_off)
    dates = base + np.nan_to_num(day, nan=0.0).astype("int64").astype("timedelta64[D]")
    earlier = np.busday_offset(dates, 0, roll="backward", weekmask=weekmask, holidays=holidays)
    later = np.busday_offset(dates, 0, roll="forward", weekmask=weekmask, holidays=holidays)
    moved = np.where(earlier >= base, earlier, later)
    return np.where(np.isnan(day), np.nan, (moved - base).astype(float))
