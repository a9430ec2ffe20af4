"""Rows of the long tables written in Python (the plan's, a visit's on the work-orders page, a route's): through
the template engine a plan page of 50 rows cost about 11 ms of CPU (two url tags and five filters a
row, each cell's variable looked up through four objects); written here with one format_html a row,
the same markup costs about a third of that."""

from __future__ import annotations

from urllib.parse import urlencode

from django import template
from django.template.defaultfilters import floatformat
from django.urls import reverse
from django.utils import timezone
from django.utils.html import format_html, format_html_join
from django.utils.safestring import mark_safe
from django.utils.text import slugify
from django.utils.timezone import template_localtime

from .fleet_format import day, nowrap_dates

register = template.Library()

PLAN_ROW = """
<tr>
  <td data-label="Motor, capacitor"><a class="nowrap" href="{motor_url}">{tag}</a><br><span class="muted">{location}</span><br><a href="{capacitor_url}">{role} <span class="nowrap">{part}</span></a></td>
  <td data-label="Risk, replace by"><span class="risk risk-{risk_slug}">{risk}</span><br><span class="nowrap replace-by">{replace_by}</span>{again}{few}</td>
  <td class="num" data-label="Trend at last reading (&micro;F)">{capacitance}</td>
  <td data-label="Limit">{limit}</td>
  <td data-label="Why">{reason}</td>
  <td data-label="Trend crosses: early / likely"><span class="nowrap">{p10}</span> / <span class="nowrap">{p50}</span></td>
  <td data-label="Site">{site}</td>
</tr>
"""  # noqa: E501 (one line a cell, as the page's source shows it)
FEW_READINGS = mark_safe('<br><span class="muted">few readings</span>')
# Beside a badge whose crossing dates read "past": the trend's date has gone by, but no reading since was below the
# limit, so the order is to read it again first (a walk read "due soon" beside past dates as a contradiction).
READ_AGAIN_FIRST = mark_safe('<br><span class="muted read-again-first">read again first: its trend date passed</span>')
NOTHING_DUE = mark_safe('<tr><td colspan="7">Nothing due in this window.</td></tr>')


def _iso(day, none: str) -> str:
    return none if day is None else day.isoformat()


NO_TREND = "no trend"


def crossing_day(assessment, day, today=None) -> str:
    """A crossing date as the pages write it: the day ("2025-07-14, past" once `today` is after it: a walk read a
    past date as one to come), "beyond" where the trend stays above the limit for the planning horizon, "no
    trend" where no forecast could be made (`set_aside`: an open capacitor's "replace now" showed "- / beyond",
    as if its limit were years away)."""
    if day is not None:
        return day.isoformat() + (", past" if today is not None and day < today else "")
    return NO_TREND if assessment.set_aside else "beyond"


@register.filter
def crossing_dates(assessment) -> str:
    """Early / likely / late crossing dates as the plan's rows write each (`crossing_day`: ", past" once passed;
    an audit read the capacitor page's 2026-11-17 as a date to come beside the plan's "2026-11-17, past")."""
    if assessment.set_aside:
        return NO_TREND
    today = timezone.localdate()
    days = (assessment.p10_on, assessment.p50_on, assessment.p90_on)
    return format_html_join(
        " / ", '<span class="nowrap">{}</span>', ((crossing_day(assessment, d, today),) for d in days)
    )


@register.simple_tag
def plan_rows(assessments):
    """The plan table's body rows for `assessments` (with their capacitors, motors, sites and parts)."""
    rows = []
    today = timezone.localdate()
    for a in assessments:
        capacitor = a.fitted_capacitor
        motor = capacitor.motor
        rows.append(
            format_html(
                PLAN_ROW,
                motor_url=reverse("motor", args=[motor.asset_tag]),
                tag=motor.asset_tag,
                location=motor.location,
                capacitor_url=reverse("fitted_capacitor", args=[capacitor.id]),
                role=capacitor.get_role_display(),
                part=capacitor.part.code,
                risk_slug=slugify(a.risk),
                risk=a.risk,
                replace_by=_iso(a.replace_by, "-"),
                # A capacitor to replace now is not "forecast from similar capacitors": its evidence says why.
                few=FEW_READINGS if a.few_readings_matter else "",
                again=READ_AGAIN_FIRST if a.read_again else "",
                capacitance=floatformat(a.capacitance_now_uf, 2),
                limit=a.limit_source,
                reason=nowrap_dates(a.reason or "-"),
                p10=crossing_day(a, a.p10_on, today),
                p50=crossing_day(a, a.p50_on, today),
                site=motor.site.code,
            )
        )
    return mark_safe("".join(rows)) if rows else NOTHING_DUE


WORK_ORDER_ROW = """<tr>
    <td data-label="Motor"><a href="{motor_url}">{tag}</a><br><span class="muted">{location}</span></td>
    <td data-label="Work">{kind}{action}</td><td data-label="Part">{part}</td><td data-label="Replace by">{replace_by}</td><td data-label="State">{state}</td><td data-label="Why">{reason}{plan_now}</td></tr>
  """  # noqa: E501 (as the page's source shows it)
PLAN_NOW = '<br><b class="plan-now">{}</b>'
PART = '<span class="nowrap">{}</span>'
# A stop-gap's order leads with the part to bring, the stop-gap fitted now second and smaller (a walk found the
# stop-gap's code first, as a link, and a technician packing the wrong part).
BRING_PART = (
    '<b class="bring-part">Bring <span class="nowrap part-code">{bring}</span> (the design part)</b>'
    '<br><small class="muted stop-gap-fitted">fitted now: <span class="nowrap">{fitted}</span>, a stop-gap</small>'
)
REPLACE_BY = '<span class="replace-by">{}</span>'
PAST_REPLACE_BY = mark_safe('<br><b class="error-text past-replace-by">the visit is after it</b>')
NOT_ISSUED = "Planned, not issued yet"


PART_LINK = '<a class="nowrap part-code" href="{}">{}</a>'
# The order's work said as a link, as the visit sheet says it (a walk found the part code alone read as no action).
RECORD_READING = '<br><a class="glove field-work" href="{}">Record the reading</a>'
RECORD_REPLACEMENT = '<br><a class="glove field-work record-replacement" href="{}">Record the replacement</a>'


@register.simple_tag
def work_order_rows(orders, can_read=False, can_replace=False):
    """A visit's rows on the work-orders page for `orders` (with their motors and capacitors' parts), as the
    visit sheet's: a "read again" order's part opens the capacitor's reading form where the user may log one
    (`can_read`), a replacement order's the replacement form where the user may record one (`can_replace`); a
    stop-gap's order leads with the design part to bring (`bring_part`); each row says its capacitor's replace-by
    date, marked where the visit is after it, and a planned order that it is not issued yet."""
    rows = []
    back = f"?next={reverse('work_orders')}"  # back to this list once recorded (`register.page_to_return_to`)
    for order in orders:
        capacitor = order.fitted_capacitor
        code = "" if capacitor is None else capacitor.part.code
        bring = getattr(order, "bring_part", None)
        shown = bring.code if bring else code  # the part code the row leads with
        in_service = code and capacitor.removed_on is None
        part, action = format_html(PART, shown) if shown else "", ""
        if in_service and can_read and order.reads_again:
            link = reverse("reading_new", args=[capacitor.id]) + back
            part, action = format_html(PART_LINK, link, shown), format_html(RECORD_READING, link)
        elif in_service and can_replace and not order.reads_again:
            link = reverse("replace", args=[capacitor.id]) + back
            part, action = format_html(PART_LINK, link, shown), format_html(RECORD_REPLACEMENT, link)
        if bring:
            part = format_html(BRING_PART, bring=part, fitted=code)
        replace_by = getattr(order, "plan_replace_by", None)
        rows.append(
            format_html(
                WORK_ORDER_ROW,
                motor_url=reverse("motor", args=[order.motor.asset_tag]),
                tag=order.motor.asset_tag,
                location=order.motor.location,
                kind=order.get_kind_display(),
                action=action,
                part=part,
                replace_by=format_html(
                    "{}{}",
                    format_html(REPLACE_BY, day(replace_by)),
                    PAST_REPLACE_BY if getattr(order, "plan_late", False) else "",  # `with_current_plan`
                )
                if replace_by
                else "-",
                state=NOT_ISSUED if order.state == order.State.PLANNED else order.get_state_display(),
                reason=nowrap_dates(order.reason),
                plan_now=format_html(PLAN_NOW, nowrap_dates(order.plan_now)) if getattr(order, "plan_now", "") else "",
            )
        )
    return mark_safe("".join(rows))


ROUTE_ROW = """
<tr id="motor-{tag}"{row_class}><td class="num">{order}</td>
  <td><a class="button nowrap {read}" href="{motor_url}">{tag}</a></td>
  <td>{location}<br><span class="muted">{application}</span></td>
  <td>{status}{unread}</td>
  <td data-label="Last read">{last_read}</td></tr>
"""
# Text, not a number field: a refused entry ("two", "-1") comes back in its box exactly as typed.
ROUTE_ORDER_INPUT = (
    '<input type="text" inputmode="numeric" name="order-{id}" id="place-{tag}" value="{value}" style="width:4.5em" '
    'aria-label="Place of {tag} on the route"{invalid}><input type="hidden" name="was-{id}" value="{shown}">'
)
ROUTE_ORDER_INVALID = ' aria-invalid="true" aria-describedby="place-{}-error"'
# A refused place's message: a row of its own under the motor's, tied to the box it is about.
ROUTE_ORDER_ERROR = (
    '<tr class="order-error"><td colspan="5" id="place-{tag}-error"><ul class="errorlist"><li>'
    "{tag}: {message}</li></ul></td></tr>\n"
)
# An open "read again" order on the motor: why a motor read this quarter is still to read, with the reading form.
READ_AGAIN_LINE = (
    '<br><span class="read-again">read again: work order {order_id} for the {capacitor}, visit {due_on}</span>'
)
READ_AGAIN_FORM = ' <a class="nowrap glove field-work" href="{}">Record the reading</a>'
# Read or not, a motor with a capacitor to replace now says so on the route (a walk saw a bulged one as "done").
REPLACE_NOW_LINE = '<br><b class="error-text route-replace-now">replace now: {}</b>'
HAS_ERROR = mark_safe(' class="has-error"')
OVERDUE = mark_safe('<b class="error-text">overdue</b>')
TO_READ = mark_safe("<b>to read</b>")


@register.simple_tag
def route_rows(motors, can_order, typed=None, errors=None, can_read=False, back=""):
    """A route page's rows for `motors` (`pages.RouteRows`: with `due`, `overdue`, `still_to_read` and
    `read_again`), each with its place on the route as a field when the user may change the walking order
    (`can_order`); an open "read again" order says so, with a link to the reading form where the user may
    log one (`can_read`).
    After a refused save, `typed` {motor id: text} fills the boxes as they were sent and `errors`
    {asset tag: [message]} marks each refused box, its message in a row under it.
    `back`, the route page's own address (its filter and page), goes with each motor's and reading form's link
    as `?next=`: the motor's page leads back to it, and on to the next motor still to read once a reading is saved."""
    typed, errors = typed or {}, errors or {}
    back = f"?{urlencode({'next': back})}" if back else ""
    rows = []
    for motor in motors:
        unread = " and ".join(motor.still_to_read)
        problems = errors.get(motor.asset_tag)
        order = motor.route_order
        if can_order:
            order = format_html(
                ROUTE_ORDER_INPUT,
                id=motor.id,
                tag=motor.asset_tag,
                value=typed.get(motor.id, motor.route_order),
                shown=motor.route_order,
                invalid=format_html(ROUTE_ORDER_INVALID, motor.asset_tag) if problems else "",
            )
        rows.append(
            format_html(
                ROUTE_ROW,
                row_class=HAS_ERROR if problems else "",
                order=order,
                read="" if motor.due else "secondary",
                motor_url=reverse("motor", args=[motor.asset_tag]) + back,
                tag=motor.asset_tag,
                location=motor.location,
                application=motor.get_application_display(),
                status=OVERDUE if motor.overdue else TO_READ if motor.due else "done",
                unread=format_html(
                    "{}{}{}",
                    format_html('<br><span class="muted">{} still to read</span>', unread) if unread else "",
                    _read_again_lines(motor.read_again, can_read, back),
                    format_html(REPLACE_NOW_LINE, " and ".join(motor.replace_now)) if motor.replace_now else "",
                ),
                last_read=day(template_localtime(motor.last_read_at)) or "never",
            )
        )
        if problems:
            rows.append(format_html(ROUTE_ORDER_ERROR, tag=motor.asset_tag, message=" ".join(problems)))
    return mark_safe("".join(rows))


def _read_again_lines(orders, can_read: bool, back: str = "") -> str:
    """A route row's lines for its motor's open "read again" orders (`pages.read_again_by_motor`)."""
    lines = []
    for order in orders:
        link = format_html(READ_AGAIN_FORM, reverse("reading_new", args=[order["fitted_capacitor_id"]]) + back)
        lines.append(
            format_html(
                READ_AGAIN_LINE + "{link}",
                order_id=order["order_id"],
                capacitor=order["capacitor"],
                due_on=day(order["due_on"]),
                link=link if can_read else "",
            )
        )
    return mark_safe("".join(lines))
