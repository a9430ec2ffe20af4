"""Field work: a reading, a replacement, a site's route, labels and spares held."""

from __future__ import annotations

import functools
import io
import json
import re
import uuid

import segno
from django.contrib import messages
from django.core.exceptions import ValidationError
from django.core.paginator import Paginator
from django.db import OperationalError
from django.shortcuts import redirect, render
from django.template.defaultfilters import pluralize
from django.urls import reverse
from django.utils import timezone
from django.utils.html import conditional_escape, format_html
from django.utils.safestring import mark_safe

from fleet.engineering.rules import RULES
from fleet.faults import database_busy, not_saved_busy_words
from fleet.filters import (
    LabelsPage,
    RoutePage,
    list_page,
    named_if_repeated,
    page_values,
    query_value,
    takes_parameters,
)
from fleet.forms import ReadingForm, ReplacementForm
from fleet.models import CapacitorPart, FittedCapacitor, Motor, Reading
from fleet.roles import needs_permission, refused
from fleet.services import pages
from fleet.services.readings import (
    NeedsConfirmation,
    ReplacedMeanwhile,
    capacitor_as_shown,
    measured_words,
    newest_correction,
    reading_to_correct,
    record_reading,
    replace_capacitor,
    replacement_problems,
    saved_client_keys,
    stored_client_key,
    trend_value_at,
)
from fleet.services.register import set_route_order, set_site_stock
from fleet.services.selectors import successor_of
from fleet.services.shown_values import SHOWN_VALUES, read_shown
from fleet.services.substitutes import design_part, design_parts, substitutes_for
from fleet.services.workorders import after_reading_again_words, open_read_again_order
from fleet.views.register import (
    WORK_ORDER_PAGES,
    fitted_capacitor_or_404,
    page_to_return_to,
    route_to_return_to,
    site_in_any_case,
    with_next,
    worst_case_energy_j,
)


def _asked_about(form: ReadingForm, digest: str) -> None:
    """The page carries the values it asks to confirm (`ReadingForm.values_asked_about`): "Value is right" counts
    for those values only."""
    form.data = form.data.copy()
    form.data["asked_about"] = digest


@needs_permission("fleet.add_reading")
@takes_parameters("corrects", "next")
def reading_new(request, fitted_capacitor_id):
    fitted_capacitor = fitted_capacitor_or_404(request, fitted_capacitor_id)
    needs_confirmation, to_check, replaced_meanwhile, busy = False, [], None, False
    zone = fitted_capacitor.motor.site.time_zone
    if request.method == "POST":
        form = ReadingForm(request.POST, time_zone=zone)
        if form.is_valid():
            # Before any error is added: a field's error takes its value out of cleaned_data.
            asked = form.values_asked_about()
            confirmed = bool(form.cleaned_data["confirmed"]) and form.cleaned_data["asked_about"] == asked
            if form.cleaned_data["confirmed"] and not confirmed:  # values changed since the question: ask again
                form.data = form.data.copy()
                form.data.pop("confirmed", None)
            try:
                reading = record_reading(
                    fitted_capacitor=fitted_capacitor,
                    values=form.measured_values(),
                    user=request.user,
                    confirmed=confirmed,
                    client_key=form.cleaned_data["client_key"],
                    supersedes_id=form.cleaned_data["supersedes"],
                    shown_values=read_shown(form.cleaned_data[SHOWN_VALUES]),
                    removal_seen=form.cleaned_data["removal_seen"],
                )
            except NeedsConfirmation as error:
                needs_confirmation = True
                form.add_error(None, error)
                _asked_about(form, asked)
            except OperationalError as error:
                if not database_busy(error):
                    raise
                busy = True  # nothing typed is wrong: the summary says so, not "1 to put right"
                form.add_error(None, not_saved_busy_words())  # nothing saved (its transaction rolled back)
            except ReplacedMeanwhile as error:
                # Nothing saved, every value kept: the page asks which capacitor was measured (reading_form.html).
                replaced_meanwhile = error
                form.add_error(None, error)
            except ValidationError as error:
                _add_errors(form, error)
                # Refused, with values to check said beside the refusals: confirmed once nothing is refused.
                to_confirm = getattr(error, "to_confirm", {})
                if to_confirm:
                    _add_errors(form, ValidationError(to_confirm))
                    to_check = [name for name in to_confirm if name in form.fields]
                    _asked_about(form, asked)
                if "client_key" in error.message_dict:  # a page saved before, sent with new values: a new key
                    form.data = form.data.copy()
                    form.data["client_key"] = uuid.uuid4().hex
            else:
                saved = "was already saved (sent twice)" if reading.replayed else "saved"
                what = "Correction" if reading.supersedes_id else "Reading"
                closed = getattr(reading, "closed_read_again", 0)
                motor = fitted_capacitor.motor
                route = route_to_return_to(request, motor.site)
                removed = "removed " if fitted_capacitor.removed_on else ""
                messages.success(
                    request,
                    _saved_words(
                        f"{what} {saved} for {motor.asset_tag} ({removed}{fitted_capacitor.get_role_display().lower()} "
                        f"capacitor): {measured_words(reading, fitted_capacitor.part)}"
                        + (" as measured" if reading.condition != Reading.Condition.SOUND else "")
                        + (
                            f"; its read-again work order{pluralize(closed)} {pluralize(closed, 'is,are')} done."
                            + after_reading_again_words(reading)
                            if closed
                            else "."
                        ),
                        route=route,
                        after=motor if route and not reading.supersedes_id else None,
                    ),
                )
                if reading.condition != Reading.Condition.SOUND:
                    messages.warning(request, damaged_capacitor_words(fitted_capacitor, reading))
                # ?saved= tells the page to drop the draft the phone kept of this form. A correction goes back
                # to the capacitor's page its "Correct" was on; a reading to its visit sheet, or to its motor's
                # page (with the route it came from, `?next=`, kept for its back link).
                back, at = page_to_return_to(request), ""
                if back is not None and not back.startswith(WORK_ORDER_PAGES):  # a route: by the motor's page
                    back = None
                if back is None and reading.supersedes_id:
                    back = reverse("fitted_capacitor", args=[fitted_capacitor.id])
                elif back is None:
                    back = with_next(reverse("motor", args=[motor.asset_tag]), route)
                    at = _at_the_capacitor_read(fitted_capacitor, reading)
                return redirect(f"{back}{'&' if '?' in back else '?'}saved={fitted_capacitor.id}{at}")
    else:
        corrects = None if named_if_repeated(request, ["corrects"]) else query_value(request.GET, "corrects")
        shown = json.dumps(capacitor_as_shown(fitted_capacitor))
        form = ReadingForm(initial={"supersedes": corrects, SHOWN_VALUES: shown}, time_zone=zone)
    correcting, correction_problem = None, ""
    try:
        correcting = reading_to_correct(fitted_capacitor, form["supersedes"].value())
    except ValidationError as error:
        correction_problem = " ".join(error.messages)
    correct_instead = newest_correction(fitted_capacitor, form["supersedes"].value()) if correction_problem else None
    if correcting and not form.is_bound:
        form.start_from(correcting)
    assessment = fitted_capacitor.assessments.filter(is_current=True).first()
    successor = successor_of(fitted_capacitor)
    back = page_to_return_to(request)
    context = {
        "successor": successor,
        # The reading form of the capacitor in this one's place now, the page to return to kept.
        "successor_form": successor and with_next(reverse("reading_new", args=[successor.id]), back),
        "motor_back": with_next(
            reverse("motor", args=[fitted_capacitor.motor.asset_tag]),
            route_to_return_to(request, fitted_capacitor.motor.site),
        ),
        "fitted_capacitor": fitted_capacitor,
        "motor": fitted_capacitor.motor,
        "part": fitted_capacitor.part,
        "form": form,
        "needs_confirmation": needs_confirmation,
        "replaced_meanwhile": replaced_meanwhile,
        "busy": busy,
        # Fields whose value is asked to confirm while others are refused (the summary tells the two apart).
        "to_check": to_check,
        "to_put_right": len(form.errors) - len(to_check),
        "correcting": correcting,
        "correction_problem": correction_problem,
        "correct_instead": correct_instead,
        "assessment": assessment,
        "read_again": None if fitted_capacitor.removed_on else open_read_again_order(fitted_capacitor.id),
        "recent": pages.recent_readings(fitted_capacitor),
        "energy_j": worst_case_energy_j(fitted_capacitor.part),
        "rules": RULES.as_dict(),
        # A draft on the phone holds its page's key as stored (`key_digest`); one whose key is among the saved
        # ones was saved, though the answer never reached the phone: the page drops it (reading_form.html).
        "key_digest": stored_client_key(request.user, form["client_key"].value()) if form["client_key"].value() else "",
        "saved_keys": saved_client_keys(fitted_capacitor, request.user),
        # The trend's value now, which the live hint holds a typed value to as saving does (`off_trend`).
        "trend_now_uf": float(trend_value_at(assessment, fitted_capacitor.part.rated_uf, timezone.now())[0]),
    }
    with timezone.override(form.zone):  # the last readings in the site's time, as the form takes it
        return render(request, "fleet/reading_form.html", context)


NEXT_TO_READ = '{} <a class="button next-to-read" href="{}">Next to read: <span class="nowrap">{}</span></a>'
ROUTE_DONE = "{} No other motor is left to read on the {} route this quarter."
STILL_TO_READ_HERE = (
    '{} <a class="button next-to-read" href="{}">'
    + 'Still to read here: the {} capacitor of <span class="nowrap">{}</span></a>'
)


def _saved_words(words: str, *, route: str | None, after: Motor | None) -> str:
    """A saved reading's message; reached from a site's route (`route`, its address), with a button that keeps the
    route: to the motor's own capacitor still to read where it is half read (`pages.still_to_read_here`), else to
    the next motor to read after `after` on it (`pages.next_to_read`), or that none is left."""
    if after is None:
        return words
    here = pages.still_to_read_here(after)
    if here is not None:
        return format_html(
            STILL_TO_READ_HERE,
            words,
            with_next(reverse("reading_new", args=[here.id]), route),
            here.get_role_display().lower(),
            after.asset_tag,
        )
    following = pages.next_to_read(after)
    if following is None:
        return format_html(ROUTE_DONE, words, after.site.code)
    return format_html(
        NEXT_TO_READ, words, with_next(reverse("motor", args=[following.asset_tag]), route), following.asset_tag
    )


# A reading form's address inside a service's message (a refused reading names the one to use instead).
def _at_the_capacitor_read(fitted_capacitor, reading) -> str:
    """Where on its motor's page to land after a reading: at a start capacitor listed below its run capacitor
    (a screen or two down a phone, a walk found), unless the page's top says more than "saved" (a defect seen)."""
    below_another = (
        fitted_capacitor.removed_on is None  # a removed capacitor is not on its motor's page
        and fitted_capacitor.role == FittedCapacitor.Role.START
        and FittedCapacitor.objects.filter(motor_id=fitted_capacitor.motor_id, removed_on__isnull=True)
        .exclude(pk=fitted_capacitor.pk)
        .exists()
    )
    return f"#capacitor-{fitted_capacitor.id}" if below_another and reading.condition == Reading.Condition.SOUND else ""


def damaged_capacitor_words(fitted_capacitor, reading) -> str:
    """What a technician who just logged a defect seen (bulged, leaking, vented) is told to do: the reading form
    says it live (reading_form.html), and the saved page again, as the motor page is where they go on from."""
    return (
        f"{reading.get_condition_display()}: replace the {fitted_capacitor.get_role_display().lower()} capacitor of "
        f"{fitted_capacitor.motor.asset_tag}, whatever it reads, and do not run the motor on it. It may still hold "
        "its charge: leave the motor isolated, discharge the capacitor and handle it as your site's rules and local "
        "codes require."
    )


READING_FORM_ADDRESS = re.compile(r"(/fitted-capacitors/\d+/reading/)")


def _linked(message: str) -> str:
    """A message with each reading form's address in it made a link."""
    if not READING_FORM_ADDRESS.search(message):
        return message
    return mark_safe(READING_FORM_ADDRESS.sub(r'<a href="\1">open its reading form</a>', conditional_escape(message)))


def _add_errors(form, error: ValidationError) -> None:
    """Attach a service's errors to the form's fields (unknown and hidden fields to the top)."""
    for field, field_messages in error.message_dict.items():
        shown = field in form.fields and not form.fields[field].widget.is_hidden
        form.add_error(field if shown else None, [_linked(message) for message in field_messages])


def _orders_done_words(order_ids) -> str:
    """The work orders a replacement closed, for its message ("; work order 48 is done"); "" for none."""
    if not order_ids:
        return ""
    if len(order_ids) == 1:
        return f"; work order {order_ids[0]} is done"
    return f"; work orders {', '.join(map(str, order_ids[:-1]))} and {order_ids[-1]} are done"


def _stock_message(request, successor) -> None:
    site = successor.motor.site.code
    if successor.from_stock:
        messages.info(request, f"Stock at {site}: {successor.stock_left} of {successor.part.code} left.")
    else:
        messages.warning(
            request, f"No {successor.part.code} was in stock at {site}: the replacement is recorded, the stock shows 0."
        )


@needs_permission("fleet.add_fittedcapacitor")
@takes_parameters("next")
def replace(request, fitted_capacitor_id):
    fitted_capacitor = fitted_capacitor_or_404(request, fitted_capacitor_id)
    if fitted_capacitor.removed_on and request.method != "POST":  # a POST is refused by the service, with the form
        context = {
            "fitted_capacitor": fitted_capacitor,
            "motor": fitted_capacitor.motor,
            "successor": successor_of(fitted_capacitor),
        }
        return render(request, "fleet/replace.html", context)
    design = design_part(fitted_capacitor)
    back = page_to_return_to(request)
    # No reason is taken for granted, from a planned order either: a capacitor found failed on its visit and saved
    # at a reason chosen for the technician counted as one still working in the life data (a walk found "Replaced
    # on plan" ticked beside a capacitor that had failed), which makes the life estimate too long.
    form = ReplacementForm(request.POST or None, fitted_capacitor=fitted_capacitor, design=design)
    if request.method == "POST" and not form.is_valid():
        # The service's problems with what the form did read, in the same answer (not one at a time).
        values = {name: value for name, value in form.replacement_values().items() if name != "notes"}
        problems = replacement_problems(fitted_capacitor, **values)  # its field names are the form's
        problems = {name: words for name, words in problems.items() if not form.has_error(name)}
        if problems:
            _add_errors(form, ValidationError(problems))
    elif request.method == "POST":
        try:
            values = form.replacement_values()
            successor = replace_capacitor(fitted_capacitor=fitted_capacitor, user=request.user, **values)
        except ValidationError as error:
            _add_errors(form, error)
        else:
            if successor.replayed:
                messages.success(
                    request,
                    "This replacement was already recorded (sent twice). Log the new capacitor's first reading now.",
                )
            else:
                messages.success(
                    request,
                    f"Replacement recorded{_orders_done_words(successor.closed_orders)}. "
                    "Log the new capacitor's first reading now.",
                )
                _stock_message(request, successor)
            return redirect(with_next(reverse("reading_new", args=[successor.id]), back))
    advice = substitutes_for(fitted_capacitor)
    choosable = set(form.fields["part"].queryset.values_list("id", flat=True))
    chosen = str(form["part"].value() or "")
    context = {
        "fitted_capacitor": fitted_capacitor,
        "motor": fitted_capacitor.motor,
        "form": form,
        "energy_j": worst_case_energy_j(fitted_capacitor.part),
        "advice": advice,
        "singles": [i for i in advice["items"] if i["arrangement"] == "single" and i["part_ids"][0] in choosable],
        "pairs": [i for i in advice["items"] if i["arrangement"] != "single" and i["verdict"] != "unsuitable"],
        "chosen": chosen,
        "design": design,
    }
    return render(request, "fleet/replace.html", context)


ROUTE_PAGE_SIZE = 100  # motors a route page lists
LABELS_PAGE_SIZE = 24  # labels a page prints: one sheet of 3 x 8


@needs_permission("fleet.view_motor")
@site_in_any_case
@takes_parameters("show", "page")
def site_route(request, site):
    order_errors, typed = {}, {}
    if request.method == "POST":
        if not request.user.has_perm("fleet.change_motor"):
            raise refused(request.user, "fleet.change_motor")
        # order-<motor id>: the place typed; was-<motor id>: the place the page showed
        positions, shown = _values_by_id(request.POST, "order-"), _values_by_id(request.POST, "was-")
        try:
            saved = set_route_order(site=site, positions=positions, shown=shown)
        except ValidationError as error:
            # Nothing saved; the boxes come back as typed (as the stock page's do), the refused ones marked.
            order_errors, typed = error.message_dict, positions
        else:
            messages.success(request, " ".join(filter(None, ["Walking order saved.", saved.words()])))
            query = request.GET.urlencode()  # the page and filter the walking order was saved from
            return redirect(reverse("route", args=[site.code]) + (f"?{query}" if query else ""))
    values = page_values(RoutePage, request)
    only_due = values.get("show") == "due"
    motors, counts, days = pages.route_for_site(site, only_due=only_due)
    context = {
        "site": site,
        "page": list_page(request, Paginator(motors, ROUTE_PAGE_SIZE).get_page),
        "total": counts["total"],
        "due": counts["due"],
        "overdue": counts["overdue"],
        "only_due": only_due,
        **days,
        "order_errors": order_errors,
        "typed": typed,
    }
    return render(request, "fleet/route.html", context)


def _values_by_id(post, prefix: str) -> dict[int, str]:
    """The form's fields named <prefix><id>, by id. Only ASCII digits make an id: '²' counts as a digit to
    str.isdigit but not to int(), and a field name is whatever the sender typed."""
    return {
        int(name[len(prefix) :]): value
        for name, value in post.items()
        if name.startswith(prefix) and name[len(prefix) :].isascii() and name[len(prefix) :].isdigit()
    }


@functools.lru_cache(maxsize=4096)
def qr_svg(text: str) -> str:
    """A QR code of `text` as inline SVG (error correction M). Encoding one takes about 10 ms, most of it
    choosing the best of the eight masks, and a motor's address never changes: kept per process, so a
    sheet printed again, or paged back to, costs the look-ups alone (4,096 codes, about 8 MB)."""
    buffer = io.BytesIO()
    segno.make(text, error="m").save(buffer, kind="svg", scale=4, border=1, xmldecl=False, svgns=True)
    return buffer.getvalue().decode()


def _qr_svg(request, motor: Motor) -> str:
    return qr_svg(request.build_absolute_uri(reverse("motor", kwargs={"asset_tag": motor.asset_tag})))


@needs_permission("fleet.view_motor")
@site_in_any_case
@takes_parameters("tag", "page")
def labels(request, site):
    tag = page_values(LabelsPage, request).get("tag")
    page = list_page(request, Paginator(pages.label_motors(site, tag), LABELS_PAGE_SIZE).get_page)
    # A part fitted against the advice is a stop-gap: the label names the position's design part, the one to bring.
    designs = design_parts([c for m in page.object_list for c in m.in_service])
    labels_ = [
        {"motor": m, "qr": _qr_svg(request, m), "parts": [(c, designs[c.id]) for c in m.in_service]}
        for m in page.object_list
    ]
    return render(request, "fleet/labels.html", {"site": site, "labels": labels_, "page": page, "tag": tag})


@needs_permission("fleet.view_sitestock")
@site_in_any_case
@takes_parameters()
def site_stock(request, site):
    """The spare capacitors held at a site; the planner sets the quantities, replacements take from them."""
    errors, typed = {}, {}
    if request.method == "POST":
        if not request.user.has_perm("fleet.change_sitestock"):
            raise refused(request.user, "fleet.change_sitestock")
        # qty-<part id>: the quantity typed; was-<part id>: the quantity the page showed
        quantities, shown = _values_by_id(request.POST, "qty-"), _values_by_id(request.POST, "was-")
        try:
            changed = set_site_stock(site=site, quantities=quantities, shown=shown)
        except ValidationError as error:
            errors = error.message_dict
            typed = {i: text for i, text in quantities.items() if text.strip() != shown.get(i, "").strip()}
        else:
            if changed:
                messages.success(request, f"Stock saved: {changed} quantit{pluralize(changed, 'y,ies')} changed.")
            else:
                messages.info(request, "Nothing to save: every quantity is as it was.")
            return redirect("site_stock", site_code=site.code)
    held = dict(site.stock.values_list("part_id", "quantity"))
    # Each row: the part, the quantity in its box (as typed when the save was refused), the quantity held now
    # (sent back as what the page showed, so a replacement meanwhile is not undone), and why its box was refused.
    rows = [
        (part, typed.get(part.id, held.get(part.id, 0)), held.get(part.id, 0), errors.get(part.code))
        for part in CapacitorPart.objects.order_by("dielectric", "rated_uf", "code")
    ]
    return render(request, "fleet/stock.html", {"site": site, "rows": rows, "errors": errors})
