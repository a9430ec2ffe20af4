"""Forms convert and check what a person typed; the services hold the rules."""

from __future__ import annotations

import hashlib
import json
import re
import uuid

from django import forms
from django.conf import settings
from django.utils import timezone

from fleet.imports.columns import clock_change_offsets, missing_required_words, parse_site_time

from .engineering.rules import RULES
from .models import NOTES_MAX_CHARS, CapacitorPart, FittedCapacitor, ImportJob, Reading, site_zone

# The phone's date-and-time picker, wall-clock time at the site, to the minute: "2026-03-14T09:30" (seconds were
# fiddly to set with gloves). A time with seconds ("2026-03-14T09:30:27") is read too.
LOCAL_MINUTE = "%Y-%m-%dT%H:%M"
# The time the form offers, to the second, as the API stores it, is kept beside the box (`offered_at`): left as
# offered, the reading is saved at that second, so two readings of one capacitor taken within a minute, each at
# the time offered, are two readings, not one refused as a repeat (`readings._second_reading_at_one_time`).
LOCAL_SECOND = "%Y-%m-%dT%H:%M:%S"
OFFERED_AT = re.compile(r"\d{4}-\d{2}-\d{2}T\d{2}:\d{2}:\d{2}")
# A day is typed year-month-day, as every box's message asks and the date picker sends: only that. Django's
# English formats also read 01/04/27 as month/day/year (4 January), a day the person may have meant as 1 April.
DAY_INPUT_FORMATS = ["%Y-%m-%d"]


class YearMonthDayField(forms.DateField):
    """A day box that reads year-month-day only (`DAY_INPUT_FORMATS`); every date box of the forms is one."""

    input_formats = DAY_INPUT_FORMATS


def number(label: str, unit: str, required: bool = False, help_text: str = "", signed: bool = False) -> forms.CharField:
    """A decimal typed as text (opens the numeric keypad on phones): the rulebook parses it,
    so "3,8" means the same here as in the API and the import. A `signed` one (a temperature in a cold
    room) gets a button that puts the minus sign the keypad of many phones lacks (page.js)."""
    attrs = {"inputmode": "decimal", "autocomplete": "off"} | ({"data-signed": ""} if signed else {})
    return forms.CharField(
        label=f"{label} ({unit})" if unit else label,
        required=required,
        help_text=help_text,
        max_length=40,
        widget=forms.TextInput(attrs=attrs),
    )


class ReadingForm(forms.Form):
    taken_at = forms.CharField(
        label="Taken at",
        required=False,
        max_length=40,
        # The browser shows the box in its own order of day and month (12/04/2026 is 12 April to many): the day
        # and time it holds are said beside it in words (page.js, the element named by data-day-words).
        widget=forms.DateTimeInput(attrs={"type": "datetime-local", "step": 60, "data-day-words": "taken-day-words"}),
    )
    # The time offered in the box, with its seconds (`LOCAL_SECOND`): the box left at its minute saves this.
    offered_at = forms.CharField(required=False, max_length=40, widget=forms.HiddenInput)
    # Shown only for a time the site's clocks repeat or skip (the night they change): which of the two it was.
    # Checked by `clean_taken_at` (a choice left posted after the time was changed is ignored, never refused).
    clock_offset = forms.CharField(
        required=False,
        max_length=6,
        widget=forms.RadioSelect,
        label="When you measured: before or after the clocks changed",
    )
    method = forms.ChoiceField(
        choices=Reading.Method.choices, initial=Reading.Method.METER, widget=forms.RadioSelect, label="How measured"
    )
    capacitance_uf = number(
        "Capacitance",
        "µF",
        help_text="From the capacitance meter, capacitor isolated and discharged. 0 if it shows none (open capacitor).",
    )
    capacitor_current_a = number("Capacitor current", "A", help_text="True-RMS clamp on the capacitor lead.")
    capacitor_voltage_v = number("Voltage across capacitor", "V")
    line_voltage_v = number("Line voltage", "V")
    main_current_a = number("Main winding current", "A")
    aux_current_a = number("Auxiliary winding current", "A")
    line_current_a = number("Line current", "A")
    case_temperature_c = number(
        "Capacitor case temperature",
        "°C",
        help_text="Capacitance moves with temperature: left empty, the reading is taken as at this capacitor's usual "
        "case temperature (at 25 °C until one is recorded).",
        signed=True,
    )
    ambient_temperature_c = number("Ambient temperature", "°C", signed=True)
    esr_ohm = number("ESR", "Ω", help_text="Only where the meter measures it.")
    condition = forms.ChoiceField(
        choices=Reading.Condition.choices,
        initial=Reading.Condition.SOUND,
        label="What you see",
        help_text="Open or shorted shows on the meter, not to the eye: an open capacitor reads 0 µF (type 0); "
        "a shorted one, record its replacement.",
    )
    notes = forms.CharField(
        required=False, widget=forms.Textarea(attrs={"rows": 2, "maxlength": RULES.notes_max_chars})
    )
    confirmed = forms.BooleanField(required=False, widget=forms.HiddenInput)
    # The values the page asked to confirm (`values_asked_about`): a confirmation counts for those values only, so a
    # value changed after the question and saved with "Value is right" is asked about again (an audit saved a
    # millifarad slip typed after a question about the case temperature, confirmed unseen).
    asked_about = forms.CharField(required=False, max_length=64, widget=forms.HiddenInput)
    # One-time key of this page: a second submit of the same page saves nothing (the service checks it).
    client_key = forms.CharField(required=False, max_length=64, widget=forms.HiddenInput)
    # The reading this one corrects (reached from "Correct" beside a reading on the capacitor page).
    supersedes = forms.IntegerField(required=False, min_value=1, widget=forms.HiddenInput)
    # The capacitor as the form was drawn for it (`readings.capacitor_as_shown`, JSON): a capacitor replaced before
    # the save is not given a reading typed for it in service without a word (`readings.ReplacedMeanwhile`).
    shown_values = forms.CharField(required=False, widget=forms.HiddenInput)
    # Its removal date, sent by the button that saves such a reading to the removed capacitor all the same.
    removal_seen = forms.CharField(required=False, max_length=40, widget=forms.HiddenInput)

    def __init__(self, *args, time_zone: str = "", **kwargs):
        super().__init__(*args, **kwargs)
        self.zone = site_zone(time_zone or settings.TIME_ZONE)
        # The site's clock as the page was made: the live hint holds "taken at" to it as the rulebook does.
        now = timezone.localtime(timezone.now(), self.zone)
        self.site_now = now.strftime(LOCAL_SECOND)
        self.fields["taken_at"].help_text = (
            f"When you measured, local time at the site ({self.zone.key}). Now unless you change it; "
            "a reading kept on the phone keeps the time it was measured."
        )
        if not self.is_bound:
            self.initial["client_key"] = uuid.uuid4().hex
            self.offer_time(now)

    def offer_time(self, local) -> None:
        """The box shows `local` (the site's time) to the minute, and keeps its seconds beside it."""
        self.initial["taken_at"] = local.strftime(LOCAL_MINUTE)
        self.initial["offered_at"] = local.strftime(LOCAL_SECOND)

    def start_from(self, reading: Reading) -> None:
        """A correction starts from the reading it corrects: its time (in the site's time), method,
        every value and the notes it holds, so only the mistake is typed again. A blank form lost what
        was right: a corrected capacitance was stored without its case temperature, unreferred to 25 C."""
        self.offer_time(timezone.localtime(reading.taken_at, self.zone))
        for name in ("method", "condition", "notes", *Reading.MEASURED_FIELDS):
            value = getattr(reading, name)
            worked_out = name == "capacitance_uf" and reading.method == Reading.Method.IN_CIRCUIT
            if value is not None and not worked_out:
                self.initial[name] = str(value)  # a float's shortest exact text: 28.17, not 28.170000000000002

    def clean_taken_at(self):
        """Wall-clock time at the site, read as the import reads it (an offset, if given, wins);
        empty: now. Future and before-fitting are the rulebook's checks, in the service."""
        text = self.cleaned_data["taken_at"].strip()
        if not text:
            return None
        offered = str(self.data.get("offered_at", "")).strip()
        if OFFERED_AT.fullmatch(offered) and text == offered.rsplit(":", 1)[0]:
            text = offered  # left at the minute offered: the second it was offered
        offsets = clock_change_offsets(text, self.zone.key)
        if offsets is not None:
            # The date-and-time box takes no offset: the two the clocks held that night are offered as a choice.
            before, after = offsets
            self.fields["clock_offset"].widget.choices = [
                (before, f"Before the clocks changed (UTC{before})"),
                (after, f"After the clocks changed (UTC{after})"),
            ]
            chosen = str(self.data.get("clock_offset", "")).strip()
            if chosen in offsets:
                text += chosen
            else:
                raise forms.ValidationError(
                    f"This local time is skipped or repeated in {self.zone.key} (clocks changed): choose below "
                    "whether it was before or after they changed."
                )
        try:
            return parse_site_time(text, self.zone.key)
        except ValueError as error:
            raise forms.ValidationError(str(error)) from None

    def clean(self):
        """In circuit the capacitance is worked out from the current and the voltage: a meter value typed
        too (before switching the method) is refused at its field, never dropped without a word."""
        cleaned = super().clean()
        typed = str(cleaned.get("capacitance_uf") or "").strip()
        if cleaned.get("method") == Reading.Method.IN_CIRCUIT and typed:
            self.add_error(
                "capacitance_uf",
                f"In circuit the capacitance is worked out from the current and the voltage, so {typed} µF "
                f"from the meter would not be saved: clear it, or choose “{Reading.Method.METER.label}” to save it "
                "instead.",
            )
        return cleaned

    NOT_MEASURED = frozenset(
        {"confirmed", "asked_about", "client_key", "supersedes", "shown_values", "removal_seen", "offered_at"}
    )

    def measured_values(self) -> dict:
        data = {key: value for key, value in self.cleaned_data.items() if key not in self.NOT_MEASURED}
        if data["method"] == Reading.Method.IN_CIRCUIT:
            data.pop("capacitance_uf", None)
        return data

    def values_asked_about(self) -> str:
        """A digest of the values typed (`measured_values`), as the page carries it when it asks to confirm."""
        text = json.dumps(self.measured_values(), sort_keys=True, default=str)
        return hashlib.sha256(text.encode()).hexdigest()[:32]


class ReplacementForm(forms.Form):
    # As the page lays the fields out (replace.html), so its error summary lists them in the order they are seen.
    field_order = ["removal_reason", "part", "substitute_override", "override_reason", "serial", "removed_on", "notes"]

    part = forms.ModelChoiceField(
        queryset=CapacitorPart.objects.none(),
        label="Part fitted now",
        error_messages={"required": "Choose the part you fitted, as on the new capacitor's label."},
    )
    serial = forms.CharField(
        required=False,
        label="Serial or date code of the new capacitor",
        widget=forms.TextInput(attrs={"autocorrect": "off", "spellcheck": "false", "autocomplete": "off"}),
    )
    removed_on = YearMonthDayField(
        initial=timezone.localdate,
        label="Replaced on",
        # The browser's order of day and month (12/04/2026 is 12 April to many): page.js says the day in words.
        widget=forms.DateInput(attrs={"type": "date", "data-day-words": "replaced-day-words"}),
        error_messages={
            "required": "Enter the day you replaced it, e.g. 2026-03-14.",
            "invalid": "Enter the day as year-month-day, e.g. 2026-03-14.",
        },
    )
    removal_reason = forms.ChoiceField(
        choices=FittedCapacitor.RemovalReason.choices,
        widget=forms.RadioSelect,
        label="Why the old one came out",
        help_text=(
            "Failed in service: it had failed when you found it (open, shorted, bulged, leaking, vented, or the motor "
            "would not start), even on a planned visit. The life data count it as a failure; replaced on plan counts "
            "as one still working."
        ),
        error_messages={
            "required": "Choose why the old capacitor came out: failed in service, replaced on plan, or other."
        },
    )
    notes = forms.CharField(
        required=False,
        widget=forms.Textarea(attrs={"rows": 2}),
        max_length=NOTES_MAX_CHARS,
        error_messages={"max_length": f"Notes take at most {NOTES_MAX_CHARS} characters (a reading's do too)."},
    )
    substitute_override = forms.BooleanField(
        required=False, label="Fit this part against the advice (marginal or unsuitable here)"
    )
    override_reason = forms.CharField(
        required=False,
        label="Why, for the engineer",
        widget=forms.Textarea(attrs={"rows": 2}),
        help_text="Required with the override; kept on the new capacitor's record.",
        max_length=NOTES_MAX_CHARS,
        error_messages={"max_length": f"The reason takes at most {NOTES_MAX_CHARS} characters."},
    )

    def __init__(self, *args, fitted_capacitor: FittedCapacitor, design: CapacitorPart, **kwargs):
        super().__init__(*args, **kwargs)
        same_kind = CapacitorPart.objects.filter(dielectric=fitted_capacitor.part.dielectric).order_by(
            "rated_uf", "code"
        )
        self.fields["part"].queryset = same_kind
        self.fields["part"].initial = design.pk

    def replacement_values(self) -> dict:
        """What was read, under `readings.replace_capacitor`'s names (None where a value was not read)."""
        data = self.cleaned_data
        return {
            "part": data.get("part"),
            "removed_on": data.get("removed_on"),
            "reason": data.get("removal_reason"),
            "serial": data.get("serial") or "",
            "notes": data.get("notes") or "",
            "substitute_override": bool(data.get("substitute_override")),
            "override_reason": data.get("override_reason") or "",
        }


class MoveVisitForm(forms.Form):
    """The day to move a whole site visit to; `workorders.move_visit` holds the rules (working day, not past)."""

    to_day = YearMonthDayField(
        label="Move this visit to",
        # The box is written in the browser's order of day, month and year: page.js says its day in words
        # beside it (the element named by data-day-words).
        widget=forms.DateInput(attrs={"type": "date", "data-day-words": "to-day-words"}),
        error_messages={
            "required": "Enter the day to move the visit to, e.g. 2026-12-24.",
            "invalid": "Enter the day as year-month-day, e.g. 2026-12-24.",
        },
    )


class DayOffForm(forms.Form):
    """A day a site does no visits; `workorders.add_day_off` holds the rules (not past, within the plan's reach)."""

    day = YearMonthDayField(
        label="Day off",
        widget=forms.DateInput(attrs={"type": "date", "data-day-words": "day-off-words"}),
        error_messages={
            "required": "Enter the day off, e.g. 2026-12-25.",
            "invalid": "Enter the day as year-month-day, e.g. 2026-12-25.",
        },
    )
    name = forms.CharField(
        label="What it is",
        help_text="e.g. a public holiday's name, or 'shutdown'",
        required=False,  # the service names an empty one
    )


class CancelOrderForm(forms.Form):
    """Why the planner cancels an open work order; `workorders.cancel_order` holds the rules."""

    reason = forms.CharField(
        label="Why cancel it",
        widget=forms.Textarea(attrs={"rows": 2}),
        help_text="Kept with the cancelled order, e.g. 'plan now says watch; read again next quarter'.",
        required=False,  # the service names an empty reason, as it does for the API and the shell
    )


class FindMotorForm(forms.Form):
    tag = forms.CharField(
        label="Asset tag, part of it, or where the motor is",
        max_length=40,
        error_messages={
            "required": "Type the asset tag from the motor's label (or part of it), or where the motor is.",
            "max_length": "The box takes a tag (or part of one) or words of a place, at most %(limit_value)d "
            "characters (this has %(show_value)d).",
        },
        # A phone's autocorrect turns "cst 93" into "cat 93": tags and codes are not words.
        widget=forms.TextInput(
            attrs={
                "autocapitalize": "characters",
                "autocomplete": "off",
                "autocorrect": "off",
                "spellcheck": "false",
                "autofocus": True,
            }
        ),
    )


class ImportUploadForm(forms.Form):
    kind = forms.ChoiceField(
        choices=ImportJob.Kind.choices,
        widget=forms.RadioSelect,
        initial="readings",
        label="What the file holds",
    )
    file = forms.FileField(
        label="CSV or XLSX file",
        error_messages={
            "required": "Choose the file to import: a CSV or XLSX file with one row of headings.",
            "empty": "This file is empty: choose one with a row of headings and the rows under it.",
        },
    )

    def __init__(self, *args, kinds=None, **kwargs):
        """`kinds`: the kinds of file this user may import (all when not given)."""
        super().__init__(*args, **kwargs)
        if kinds is not None:
            kind = self.fields["kind"]
            kind.choices = [(value, label) for value, label in ImportJob.Kind.choices if value in kinds]
            kind.error_messages["invalid_choice"] = (
                "Your role cannot import this kind of file; you may import: "
                + ", ".join(label.lower() for _, label in kind.choices)
                + ". Ask an administrator for the others."
            )
            if kind.initial not in kinds:
                kind.initial = kinds[0] if kinds else None
        self.fields["file"].help_text = (
            f"Up to {settings.FLEET_IMPORT_MAX_FILE_MB} MB and {settings.FLEET_IMPORT_MAX_ROWS:,} rows. "
            "First row: column headings. Comma, semicolon or tab between fields."
        )

    def clean_file(self):
        upload = self.cleaned_data["file"]
        if not upload.name.lower().endswith((".csv", ".xlsx", ".txt")):
            raise forms.ValidationError("Choose a .csv or .xlsx file.")
        if upload.size > settings.FLEET_IMPORT_MAX_FILE_MB * 1024 * 1024:
            raise forms.ValidationError(f"The file is over {settings.FLEET_IMPORT_MAX_FILE_MB} MB: split it.")
        return upload


class ColumnMappingForm(forms.Form):
    """One choice per field of ours: which of the file's columns holds it."""

    def __init__(
        self,
        *args,
        ours: dict[str, str],
        columns: list[str],
        initial_mapping: dict[str, str],
        required: tuple,
        **kwargs,
    ):
        super().__init__(*args, **kwargs)
        self.columns, self.required = columns, required
        choices = [("", "(not in this file)")] + [(c, c) for c in columns]
        for name, description in ours.items():
            self.fields[name] = forms.ChoiceField(
                choices=choices,
                required=name in required,
                label=name,
                help_text=description,
                initial=initial_mapping.get(name, ""),
                error_messages={"required": "Required: choose the file's column that holds it."},
            )

    def missing_words(self, chosen: dict[str, str]) -> str:
        """The sentence for the top of the page where a required field has no column in `chosen` ("" if none)."""
        missing = [name for name in self.required if not chosen.get(name)]
        remedy = "add the column to the file and upload it again, or choose the column that holds it under Columns"
        return missing_required_words(missing, self.columns, remedy) if missing else ""

    def clean(self):
        """One column holds one field: a column chosen twice (case temperature read as capacitance,
        40 °C taken as 40 µF) is refused at each field but the first that names it. A required field left
        without a column is refused at that field; `missing_words` says them all in one sentence, which the
        page shows under the summary's list, not as one more thing to put right."""
        cleaned = super().clean()
        first_field: dict[str, str] = {}
        for name in self.fields:
            column = cleaned.get(name)
            if not column:
                continue
            if column in first_field:
                self.add_error(
                    name,
                    f"The column {column!r} is already chosen for {first_field[column]}: one column holds one field.",
                )
            else:
                first_field[column] = name
        return cleaned

    def mapping(self) -> dict[str, str]:
        return {name: column for name, column in self.cleaned_data.items() if column}
