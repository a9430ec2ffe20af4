"""Numbers for people: shares as whole percentages, counts with thousands separators, a dash for none;
dates that never wrap; the risk and the last reading set side by side in words."""

from __future__ import annotations

import datetime as dt
import re

from django import template
from django.template.defaultfilters import date as date_format
from django.urls import reverse
from django.utils.html import conditional_escape, format_html
from django.utils.safestring import mark_safe

from fleet.engineering.capacitor import VERDICT_NAMES, VERDICT_WITHIN
from fleet.engineering.lifedata import age_in_words
from fleet.engineering.planning import RISK_DUE_SOON, RISK_REPLACE_NOW, RISK_SOUND, RISK_WATCH, TOLERANCE_LIMIT
from fleet.engineering.rules import decimals_to_tell_apart, fixed_decimals, microfarad_text, reading_time_text
from fleet.services.assessments import DEFECT_REASON, DISSIPATION_LIMIT
from fleet.services.workorders import READ_FOR_WORDS

register = template.Library()

DASH = "-"
NBSP = "\u00a0"
MINUS = "\u2212"
TIMES = "\u00d7"


@register.filter
def percent(share):
    """0.573 -> '57 %'; None -> '-'."""
    return DASH if share is None else f"{100 * share:.0f}{NBSP}%"


@register.filter
def percent_to_a_tenth(share):
    """0.898 -> '89.8 %', 0.9 -> '90 %': a limit's share of rated as exactly as its microfarads are written
    (an audit read "90 % of rated" beside an 88.00 µF limit of a 98 µF part); None -> '-'."""
    if share is None:
        return DASH
    return f"{100 * share:.1f}".removesuffix(".0") + f"{NBSP}%"


@register.filter
def signed_percent(share):
    """0.23 -> '+23 %', -0.4 -> '-40 %' (a true minus sign); None -> '-'."""
    if share is None:
        return DASH
    value = round(100 * share)
    sign = "+" if value > 0 else MINUS if value < 0 else ""
    return f"{sign}{abs(value)}{NBSP}%"


@register.filter
def thousands(count):
    """3637 -> '3,637'; None -> '-'."""
    return DASH if count is None else f"{count:,}"


@register.filter
def times(factor):
    """1.523 -> 'x 1.52' with a multiplication sign."""
    return DASH if factor is None else f"{TIMES}{NBSP}{factor:.2f}"


@register.filter
def age_in_years(years):
    """An age given in years, in the unit a planner reads it in (`lifedata.age_in_words`): 2.93 -> '2.9 years',
    0.29 -> '3.5 months', 0.02 -> '7 days'; None -> '-'."""
    return DASH if years is None else age_in_words(years)


@register.filter
def microfarads(value):
    """A capacitance in µF as the pages write it (`rules.microfarad_text`): '3.95', '0.00003'; None -> '-'."""
    return DASH if value is None else microfarad_text(value)


@register.filter
def microfarads_beside(value, limit_uf):
    """A reading in µF as `microfarads` writes it, with the decimals that tell it from its part's lower tolerance
    limit where two would not (`rules.decimals_to_tell_apart`: an audit read "189.07" judged below a 189.07 µF
    limit, the reading 189.069 µF and the limit 189.072 µF)."""
    if value is None or limit_uf is None:
        return microfarads(value)
    places = int(decimals_to_tell_apart(value, limit_uf))
    return microfarads(value) if places <= 2 else fixed_decimals(value, places).item()


ISO_DAY = "Y-m-d"


@register.filter(expects_localtime=True)
def day(value, pattern=ISO_DAY):
    """A date or time that never wraps at its hyphens: '2026-12-02' kept on one line; None -> ''. The
    ISO day, the pattern of nearly every date shown, is written directly (a list of a hundred dates
    spent a few milliseconds in Django's date formatting)."""
    if value in (None, ""):
        return ""
    if pattern == ISO_DAY and isinstance(value, dt.date):
        return mark_safe(f'<span class="nowrap">{dt.date.isoformat(value)}</span>')
    return format_html('<span class="nowrap">{}</span>', date_format(value, pattern))


@register.filter(expects_localtime=True)
def reading_time(value):
    """When a reading was taken (`rules.reading_time_text`), kept on one line."""
    if value in (None, ""):
        return ""
    return format_html('<span class="nowrap">{}</span>', reading_time_text(value))


@register.filter
def defect_seen(assessment) -> str:
    """The defect its newest reading found ("bulged", "leaking", "vented"), from the reason it was judged on;
    "" where none was."""
    reason = "" if assessment is None else assessment.reason or ""
    return reason[len(DEFECT_REASON) :] if reason.startswith(DEFECT_REASON) else ""


@register.filter
def verdict_and_risk(assessment, reason_shown_above=""):
    """One sentence where the last reading's tolerance verdict and the risk level seem to disagree
    (a green "within tolerance" beside a red "replace now"), ending with the stored reason, or pointing
    to it where the page shows it just above (`verdict_and_risk:"above"`); "" where they agree."""
    if assessment is None:
        return ""
    within = assessment.latest_verdict == VERDICT_NAMES[VERDICT_WITHIN]
    reason = assessment.reason or "no reason stored"
    if reason_shown_above:
        reason = "see Why, above"
    if within and assessment.risk in (RISK_REPLACE_NOW, RISK_DUE_SOON):
        if defect_seen(assessment):
            because = "a capacitor seen bulged, leaking or vented is replaced whatever it measures"
        elif (assessment.reason or "").startswith(DISSIPATION_LIMIT):
            because = "its dissipation factor, worked out from the ESR read, is above the part's maximum"
        elif assessment.limit_source == DISSIPATION_LIMIT:
            because = "its dissipation factor (from the ESR readings) reaches the part's maximum first"
        elif assessment.limit_source != TOLERANCE_LIMIT:
            because = (
                f"the motor's {assessment.limit_source} limit, crossed at {100 * assessment.limit_fraction:.0f} % "
                "of the rated capacitance, comes before the tolerance"
            )
        elif assessment.risk == RISK_DUE_SOON:
            because = "its trend, referred to 25 °C, reaches the limit soon or may have reached it since that reading"
        else:
            because = "it judges the readings referred to 25 °C and their trend, not one reading as measured"
        return (
            f"As measured, the last reading is within the marked tolerance; the plan still says "
            f"{assessment.risk} because {because}: {reason}."
        )
    if not within and assessment.risk in (RISK_DUE_SOON, RISK_WATCH, RISK_SOUND):
        says = "due soon, not replace now," if assessment.risk == RISK_DUE_SOON else f"only {assessment.risk}"
        return (
            f"As measured, the last reading is {assessment.latest_verdict}; the plan says {says} "
            f"because, referred to 25 °C and set against the trend, it is not past the limit: {reason}."
            + ("" if assessment.risk == RISK_DUE_SOON else " Read it again to confirm.")
        )
    return ""


# A date, a month or a date and time inside a sentence: "2027-01", "2026-12-02", "2026-03-14 09:30".
DATE_IN_TEXT = re.compile(r"\b\d{4}-\d{2}(?:-\d{2}(?:[ T]\d{2}:\d{2}(?::\d{2})?)?)?\b")


@register.filter
def read_for_link(html, read_for):
    """A reason (escaped, by `nowrap_dates`) with its "work order N" (`workorders.READ_FOR_ORDER`) a link to
    that order on its visit's page (done, it is listed among the visit's closed orders, `_closed_orders.html`), a
    tap target of 44 px on a phone (`a.glove`); unchanged where `read_for` is None."""
    if not read_for or html in (None, ""):
        return html
    visit = reverse("visit_sheet", args=[read_for["site_code"], read_for["day"].isoformat()])
    url = f"{visit}#order-{read_for['id']}"
    words = READ_FOR_WORDS.format(read_for["id"])
    link = format_html('<a class="glove nowrap" href="{}">{}</a>', url, words.removeprefix("read for "))
    return mark_safe(str(html).replace(f"({words})", f"(read for {link})", 1))


@register.filter
def nowrap_dates(text):
    """Text (escaped) with each date in it kept on one line; the words around still wrap."""
    if text in (None, ""):
        return text
    escaped = str(conditional_escape(text))
    return mark_safe(DATE_IN_TEXT.sub(lambda m: f'<span class="nowrap">{m.group(0)}</span>', escaped))
