"""The planners' daily digest by email: capacitors that entered the top risk level, readings
that fell overdue. Each condition is reported once while it lasts (DigestEntry); once it ends,
its entry goes, so a capacitor that enters it again is reported again."""

from __future__ import annotations

import datetime as dt
import smtplib

from django.conf import settings
from django.contrib.auth.models import User
from django.core.mail import EmailMessage, get_connection
from django.db import transaction
from django.template.defaultfilters import pluralize
from django.urls import reverse
from django.utils import timezone

from fleet.engineering.planning import RISK_ORDER
from fleet.models import DigestEntry
from fleet.roles import PLANNER, visible_site_ids
from fleet.services.dashboard import overdue_capacitors
from fleet.services.pages import OVERDUE_GRACE_DAYS, READING_INTERVAL_DAYS, in_service_assessments, overdue_before

TOP_RISK = RISK_ORDER[0]
CAUTION = (
    "Before anyone works on these motors: capacitors hold a charge that can kill, even with the power off. "
    "Isolate and lock out, discharge through a rated resistor, verify zero with a meter; local codes and "
    "licensed practice decide (the cautions on each motor's page)."
)


def _link(path: str) -> str:
    return f"{settings.FLEET_SITE_URL}{path}"


def current_conditions(today: dt.date) -> dict[tuple[str, int], dict]:
    """Every capacitor now at the top risk level or on a motor overdue a reading, by (kind, capacitor id),
    with its site, the line for the digest and the reason (two queries)."""
    conditions = {}
    for row in (
        in_service_assessments()
        .filter(risk=TOP_RISK)
        .values(
            "fitted_capacitor_id",
            "fitted_capacitor__role",
            "fitted_capacitor__part__code",
            "fitted_capacitor__motor__asset_tag",
            "fitted_capacitor__motor__site_id",
            "replace_by",
            "reason",
        )
        .order_by("replace_by", "fitted_capacitor__motor__asset_tag")
    ):
        replace_by = f", replace by {row['replace_by']:%Y-%m-%d}" if row["replace_by"] else ""
        conditions[(DigestEntry.Kind.TOP_RISK, row["fitted_capacitor_id"])] = {
            "site_id": row["fitted_capacitor__motor__site_id"],
            "reason": row["reason"][:300],
            "line": f"{row['fitted_capacitor__motor__asset_tag']} {row['fitted_capacitor__role']} capacitor "
            f"{row['fitted_capacitor__part__code']}{replace_by}: {row['reason']}",
            "link": _link(reverse("fitted_capacitor", args=[row["fitted_capacitor_id"]])),
        }
    for row in (
        overdue_capacitors(None, today)
        .values(
            "id",
            "role",
            "last_read",
            "motor__commissioned_on",
            "motor__asset_tag",
            "motor__site_id",
            "motor__site__code",
        )
        .order_by("motor__site__code", "motor__route_order", "motor__asset_tag", "role")
    ):
        if row["last_read"] is None:
            reason = f"never read since the motor was commissioned on {row['motor__commissioned_on']:%Y-%m-%d}"
        else:
            last = timezone.localdate(row["last_read"])
            reason = f"last read {last:%Y-%m-%d}, {(today - last).days} days ago"
        conditions[(DigestEntry.Kind.OVERDUE, row["id"])] = {
            "site_id": row["motor__site_id"],
            "reason": reason,
            "line": f"{row['motor__asset_tag']} {row['role']} capacitor: {reason}",
            "link": _link(reverse("route", args=[row["motor__site__code"]]) + "?show=due"),
        }
    return conditions


def _body(items: list[dict], today: dt.date) -> str:
    sections = []
    for kind, heading in (
        (DigestEntry.Kind.TOP_RISK, f"Capacitors that entered the top risk level ({TOP_RISK}):"),
        (
            DigestEntry.Kind.OVERDUE,
            f"Readings that fell overdue (due every {READING_INTERVAL_DAYS} days, overdue "
            f"{OVERDUE_GRACE_DAYS} days after that: none since {overdue_before(today):%Y-%m-%d}):",
        ),
    ):
        lines = [f"- {item['line']}\n  {item['link']}" for item in items if item["kind"] == kind]
        if lines:
            sections.append("\n".join([heading, *lines]))
    sections.append(f"The planner's dashboard: {_link(reverse('dashboard'))}")
    sections.append(CAUTION)
    return "\n\n".join(sections) + "\n"


class DigestNotSent(Exception):
    """The mail server refused or could not be reached: nothing is recorded as sent, so the next digest sends it."""


def send_daily_digest(*, today: dt.date | None = None) -> dict:
    """Email each planner (active, with an address) what is new since the last digest at the
    sites they work at; nothing new, no email. Returns counts."""
    today = today or timezone.localdate()
    conditions = current_conditions(today)
    known = set(DigestEntry.objects.values_list("kind", "fitted_capacitor_id"))
    new = [{"kind": kind, "id": capacitor_id, **conditions[(kind, capacitor_id)]} for kind, capacitor_id in conditions]
    new = [item for item in new if (item["kind"], item["id"]) not in known]
    ended = [key for key in known if key not in conditions]
    messages = []
    planners = User.objects.filter(is_active=True, groups__name=PLANNER).exclude(email="").distinct()
    for planner in planners.order_by("username"):
        sites = visible_site_ids(planner)
        mine = [item for item in new if sites is None or item["site_id"] in sites]
        if not mine:
            continue
        top = sum(item["kind"] == DigestEntry.Kind.TOP_RISK for item in mine)
        overdue = len(mine) - top
        subject = f"Fleet digest {today:%Y-%m-%d}: {top} to {TOP_RISK}, {overdue} reading{pluralize(overdue)} overdue"
        messages.append(EmailMessage(subject, _body(mine, today), settings.DEFAULT_FROM_EMAIL, [planner.email]))
    if messages:
        try:
            get_connection().send_messages(messages)
        except (OSError, smtplib.SMTPException) as error:  # an operator's walk: a traceback, with no mail server
            where = f"{settings.EMAIL_HOST}:{settings.EMAIL_PORT}"
            raise DigestNotSent(
                f"The digest was not sent: the mail server at {where} answered {error!r}. Nothing is recorded as "
                "sent, so the next digest sends it; set EMAIL_HOST and EMAIL_PORT (README, Settings)."
            ) from error
    with transaction.atomic():
        for kind in DigestEntry.Kind.values:
            gone = [capacitor_id for k, capacitor_id in ended if k == kind]
            DigestEntry.objects.filter(kind=kind, fitted_capacitor_id__in=gone).delete()
        DigestEntry.objects.bulk_create(
            [DigestEntry(kind=item["kind"], fitted_capacitor_id=item["id"], reason=item["reason"]) for item in new],
            ignore_conflicts=True,
        )
    return {"new": len(new), "ended": len(ended), "emails": len(messages)}
