"""A reading form drawn while its capacitor was in service and saved after the capacitor was replaced (another
tab, another technician): the reading is filed on neither capacitor until the technician says which was measured.

[trade] a capacitor is read in the morning and replaced later that day, or replaced first and the new one read:
both happen, so the capacitor meant cannot be guessed from the time alone (the removal day allows either).
[derived] the values kept and the choice offered follow from the rule that nothing typed is silently misfiled.
"""

import datetime as dt
import json
import re

import pytest
from django.urls import reverse
from django.utils import timezone
from django.utils.html import strip_tags

from fleet.models import Reading
from fleet.services.readings import ReplacedMeanwhile, capacitor_as_shown, record_reading, replace_capacitor
from fleet.services.shown_values import SHOWN_VALUES
from tests.factories import confirmation_of, make_fitted_capacitor, make_motor, make_part

from .test_substitutes import post_replacement

pytestmark = pytest.mark.django_db


def _start_and_run():
    """A capacitor-start capacitor-run motor: its start capacitor (listed below its run capacitor) and its run."""
    motor = make_motor()
    run = make_fitted_capacitor(motor=motor, role="run")
    start = make_fitted_capacitor(motor=motor, role="start", part=make_part(rated_uf=145.0, dielectric="electrolytic"))
    return start, run


def _typed(page_form, **values):
    """The form as drawn (its hidden boxes) with the values typed."""
    hidden = {name: page_form[name].value() for name in ("client_key", SHOWN_VALUES)}
    return {**hidden, "method": "meter", "condition": "sound", "taken_at": "", **values}


def test_the_service_refuses_a_reading_shown_in_service_and_saved_after_the_replacement():
    start, _ = _start_and_run()
    shown = capacitor_as_shown(start)
    assert shown == {"removed_on": None}
    new = replace_capacitor(fitted_capacitor=start, part=start.part, removed_on=timezone.localdate(), reason="failed")
    start.refresh_from_db()
    values = {"method": "meter", "capacitance_uf": "141.2", "condition": "sound"}
    with pytest.raises(ReplacedMeanwhile) as error:
        record_reading(fitted_capacitor=start, values=values, shown_values=shown)
    assert error.value.successor == new and error.value.removed_on == timezone.localdate()
    assert f"removed on {timezone.localdate()}" in error.value.messages[0]
    assert f"the {new.part.code} fitted on {new.fitted_on} is in its place now" in error.value.messages[0]
    assert not Reading.objects.exists()
    # Said which: the removed one, its removal date sent as stored; a date other than the stored one is no answer.
    with pytest.raises(ReplacedMeanwhile):
        record_reading(fitted_capacitor=start, values=values, shown_values=shown, removal_seen="2020-01-01")
    reading = record_reading(
        fitted_capacitor=start, values=values, shown_values=shown, removal_seen=timezone.localdate().isoformat()
    )
    assert reading.fitted_capacitor_id == start.id


def test_without_a_form_shown_or_drawn_for_the_removed_capacitor_or_correcting_nothing_changes():
    """The API names its capacitor; a form drawn for the removed capacitor knew it; a correction goes with the
    reading it corrects."""
    start, _ = _start_and_run()
    earlier = record_reading(
        fitted_capacitor=start,
        values={"method": "meter", "capacitance_uf": "142", "taken_at": timezone.now() - dt.timedelta(hours=1)},
    )
    shown_in_service = capacitor_as_shown(start)
    replace_capacitor(fitted_capacitor=start, part=start.part, removed_on=timezone.localdate(), reason="failed")
    start.refresh_from_db()
    values = {"method": "meter", "capacitance_uf": "141.2"}
    assert record_reading(fitted_capacitor=start, values=values).fitted_capacitor_id == start.id
    assert record_reading(
        fitted_capacitor=start, values={**values, "capacitance_uf": "141.3"}, shown_values=capacitor_as_shown(start)
    )
    correction = record_reading(
        fitted_capacitor=start,
        values={"method": "meter", "capacitance_uf": "143"},
        shown_values=shown_in_service,
        supersedes_id=earlier.id,
    )
    assert correction.supersedes_id == earlier.id
    assert Reading.objects.filter(fitted_capacitor=start).count() == 4


def test_replaced_between_the_check_and_the_lock_is_refused_under_the_lock(monkeypatch):
    """[derived] the replacement locks the capacitor's row, as the reading's save does: one replaced after the
    reading was checked is seen once the save holds the row."""
    start, _ = _start_and_run()
    shown = capacitor_as_shown(start)
    from fleet.services import readings

    checked = readings.check_reading

    def replaced_after_checking(fitted_capacitor, values, **kwargs):
        result = checked(fitted_capacitor, values, **kwargs)
        replace_capacitor(
            fitted_capacitor=type(start).objects.get(pk=start.pk),
            part=start.part,
            removed_on=timezone.localdate(),
            reason="failed",
        )
        return result

    monkeypatch.setattr(readings, "check_reading", replaced_after_checking)
    with pytest.raises(ReplacedMeanwhile):
        record_reading(
            fitted_capacitor=start, values={"method": "meter", "capacitance_uf": "141.2"}, shown_values=shown
        )
    assert not Reading.objects.exists()


def test_the_form_keeps_the_values_says_what_happened_and_offers_both_capacitors(client, technician):
    """The walk: tab A opens the start capacitor's form, tab B records its replacement, tab A saves 141.2 µF."""
    start, _ = _start_and_run()
    client.force_login(technician)
    drawn = client.get(reverse("reading_new", args=[start.id])).context["form"]
    assert json.loads(drawn[SHOWN_VALUES].value()) == {"removed_on": None}
    new_part = make_part(rated_uf=145.0, dielectric="electrolytic")
    assert (
        post_replacement(client, start, new_part).status_code == 302  # suitable: no override
    )
    new = type(start).objects.get(motor=start.motor, role="start", removed_on__isnull=True)
    today = timezone.localdate().isoformat()

    response = client.post(reverse("reading_new", args=[start.id]), _typed(drawn, capacitance_uf="141.2"))
    assert response.status_code == 200 and not Reading.objects.exists()
    page = response.content.decode()
    words = " ".join(strip_tags(page).split())
    replaced = f"This start capacitor ({start.part.code}) was replaced while this form was open: removed on {today}"
    assert replaced in words
    assert f"(recorded by {technician.username} at {today} " in words
    assert f"the {new_part.code} fitted on {today} is in its place now" in words
    assert 'value="141.2"' in page  # the value typed, kept
    assert 'id="save"' not in page  # no plain Save that would file it without a choice
    to_new = re.search(r'<button[^>]*id="save-to-successor"[^>]*>', page).group(0)
    assert f'formaction="{reverse("reading_new", args=[new.id])}"' in to_new
    to_removed = re.search(r'<button[^>]*id="save-to-removed"[^>]*>', page).group(0)
    assert f'name="removal_seen" value="{today}"' in to_removed

    # The button to the capacitor fitted now sends the same form to its reading form: filed there.
    sent = response.context["form"].data.dict()
    saved = client.post(reverse("reading_new", args=[new.id]), sent)
    assert saved.status_code == 302 and f"saved={new.id}" in saved.url
    assert list(Reading.objects.values_list("fitted_capacitor_id", "capacitance_uf")) == [(new.id, 141.2)]


def test_the_removed_one_chosen_is_filed_there_and_lands_on_the_motor_page_without_its_anchor(client, technician):
    start, _ = _start_and_run()
    client.force_login(technician)
    drawn = client.get(reverse("reading_new", args=[start.id])).context["form"]
    replace_capacitor(fitted_capacitor=start, part=start.part, removed_on=timezone.localdate(), reason="failed")
    typed = _typed(drawn, capacitance_uf="141.2")
    assert client.post(reverse("reading_new", args=[start.id]), typed).status_code == 200
    saved = client.post(
        reverse("reading_new", args=[start.id]), {**typed, "removal_seen": timezone.localdate().isoformat()}
    )
    assert saved.status_code == 302 and "#capacitor-" not in saved.url
    assert list(Reading.objects.values_list("fitted_capacitor_id", flat=True)) == [start.id]
    landed = " ".join(strip_tags(client.get(saved.url).content.decode()).split())
    assert f"Reading saved for {start.motor.asset_tag} (removed start capacitor): 141.20 µF" in landed


def test_a_removed_one_chosen_and_then_confirmed_keeps_its_choice(client, technician):
    """A value asked to confirm after choosing the removed capacitor: the confirmation carries the choice."""
    start, _ = _start_and_run()
    client.force_login(technician)
    drawn = client.get(reverse("reading_new", args=[start.id])).context["form"]
    replace_capacitor(fitted_capacitor=start, part=start.part, removed_on=timezone.localdate(), reason="failed")
    typed = _typed(drawn, capacitance_uf="200", removal_seen=timezone.localdate().isoformat())  # far above tolerance
    asked = client.post(reverse("reading_new", args=[start.id]), typed)
    assert asked.status_code == 200 and asked.context["needs_confirmation"]
    assert f'name="removal_seen" value="{timezone.localdate().isoformat()}"' in asked.content.decode()
    confirmed = client.post(reverse("reading_new", args=[start.id]), {**typed, **confirmation_of(asked)})
    assert confirmed.status_code == 302
    assert list(Reading.objects.values_list("fitted_capacitor_id", flat=True)) == [start.id]


def test_a_form_drawn_for_the_removed_capacitor_saves_as_before(client, technician):
    start, _ = _start_and_run()
    replace_capacitor(fitted_capacitor=start, part=start.part, removed_on=timezone.localdate(), reason="failed")
    client.force_login(technician)
    drawn = client.get(reverse("reading_new", args=[start.id])).context["form"]
    saved = client.post(reverse("reading_new", args=[start.id]), _typed(drawn, capacitance_uf="141.2"))
    assert saved.status_code == 302
    assert list(Reading.objects.values_list("fitted_capacitor_id", flat=True)) == [start.id]


def test_a_reading_on_a_capacitor_in_service_lands_at_its_card_as_before(client, technician):
    start, _ = _start_and_run()
    client.force_login(technician)
    drawn = client.get(reverse("reading_new", args=[start.id])).context["form"]
    saved = client.post(reverse("reading_new", args=[start.id]), _typed(drawn, capacitance_uf="141.2"))
    assert saved.status_code == 302 and saved.url.endswith(f"#capacitor-{start.id}")


def test_the_in_circuit_refusal_names_the_choice_as_labelled():
    from fleet.forms import ReadingForm

    form = ReadingForm(
        {"method": "in_circuit", "condition": "sound", "capacitance_uf": "3.95", "capacitor_current_a": "0.6"}
    )
    assert not form.is_valid()
    assert "or choose “Capacitance meter (isolated)” to save it instead" in form.errors["capacitance_uf"][0]
