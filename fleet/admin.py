"""The register keeper's screens: search and filters on every model.

Users and groups are edited here too, with one rule on top of Django's: nobody grants
more than they hold (superuser, a permission, or a group with permissions they lack).
"""

import json

from django import forms
from django.conf import settings
from django.contrib import admin
from django.contrib.admin.options import InlineModelAdmin
from django.contrib.admin.utils import flatten_fieldsets
from django.contrib.admin.widgets import AutocompleteSelect, AutocompleteSelectMultiple
from django.contrib.auth import get_user_model
from django.contrib.auth.admin import GroupAdmin, UserAdmin
from django.contrib.auth.models import Group
from django.core.exceptions import PermissionDenied, ValidationError
from django.db import models, router, transaction
from django.forms.models import BaseModelFormSet
from django.utils import timezone
from rest_framework.authtoken.admin import TokenAdmin
from rest_framework.authtoken.models import TokenProxy

from .engineering.rules import FIRST_ACCEPTED_DAY, LAST_ACCEPTED_DAY, parse_numbers
from .forms import DAY_INPUT_FORMATS
from .imports.columns import parse_site_time
from .models import (
    Assessment,
    AuditEntry,
    CapacitorPart,
    FittedCapacitor,
    Motor,
    PartPrior,
    Reading,
    RefitRun,
    Site,
    SiteDayOff,
    SiteMembership,
    SiteStock,
    WorkOrder,
)
from .roles import ROLES
from .services.bulk import ROW_ID_MAX
from .services.shown_values import (
    SHOWN_VALUES,
    comparable,
    locked_now,
    model_fields,
    moved_meanwhile,
    moved_words,
    read_shown,
    stored_values,
    value_words,
)

User = get_user_model()


def _rulebook_number(value) -> float | None:
    """A number typed in a register box, read by the rulebook's one parser (`parse_numbers`), as the imports and
    the reading form read the same figures: a decimal comma taken; other scripts' digits ("\u0662\u0665\u0660"),
    "2_50", NaN and infinity refused (Python's float() and int(), which Django's boxes use, take the first two)."""
    value = value.strip() if isinstance(value, str) else value
    if value in (None, ""):  # a box of spaces is empty too, for whole numbers as for the others
        return None
    number, why = parse_numbers([value])
    if why[0]:
        raise ValidationError(why[0][:1].upper() + why[0][1:] + ".", code="invalid")
    return float(number[0])


class RulebookFloatField(forms.FloatField):
    def to_python(self, value):
        return _rulebook_number(value)


class RulebookIntegerField(forms.IntegerField):
    def to_python(self, value):
        number = _rulebook_number(value)
        if number is not None and number != round(number):
            raise ValidationError("Enter a whole number.", code="invalid")
        return None if number is None else int(number)


class RulebookDecimalField(forms.DecimalField):
    def to_python(self, value):
        if _rulebook_number(value) is None:
            return None
        return super().to_python(value.strip().replace(",", ".") if isinstance(value, str) else value)


def _readable_ids(field, values) -> list:
    """The values a relation's target field can read ("abc" is no id) and hold (an id within 64 bits)."""
    remote = field.remote_field
    target = remote.model._meta.get_field(getattr(remote, "field_name", None) or remote.model._meta.pk.name)
    readable = []
    for value in values:
        try:
            number = target.to_python(value)
        except ValidationError:
            continue
        if isinstance(number, int) and not 0 < number <= ROW_ID_MAX:
            continue
        readable.append(value)
    return readable


class CheckedAutocompleteSelect(AutocompleteSelect):
    """An autocomplete box that redraws a refused form whatever was sent: Django's looks the sent value up to show
    its label, and a hand-made "abc" raised a ValueError there (a 500) after the field had said "Select a valid
    choice."; a value no id can be is shown as nothing chosen."""

    def optgroups(self, name, value, attr=None):
        return super().optgroups(name, _readable_ids(self.field, value), attr)


class CheckedAutocompleteSelectMultiple(AutocompleteSelectMultiple):
    def optgroups(self, name, value, attr=None):
        return super().optgroups(name, _readable_ids(self.field, value), attr)


class CheckedAutocompleteMixin:
    """Every admin screen's autocomplete boxes (`autocomplete_fields`) are the checked ones, and its day boxes read
    year-month-day only, as the pages' do (`DAY_INPUT_FORMATS`); used by every admin class and inline here
    (`tests/test_admin.py` walks them all)."""

    def formfield_for_dbfield(self, db_field, request, **kwargs):
        field = super().formfield_for_dbfield(db_field, request, **kwargs)
        day = field.fields[0] if isinstance(field, forms.SplitDateTimeField) else field
        if isinstance(day, forms.DateField):
            day.input_formats = DAY_INPUT_FORMATS
        return field

    def formfield_for_foreignkey(self, db_field, request, **kwargs):
        if "widget" not in kwargs and db_field.name in self.get_autocomplete_fields(request):
            kwargs["widget"] = CheckedAutocompleteSelect(db_field, self.admin_site, using=kwargs.get("using"))
        return super().formfield_for_foreignkey(db_field, request, **kwargs)

    def formfield_for_manytomany(self, db_field, request, **kwargs):
        if "widget" not in kwargs and db_field.name in self.get_autocomplete_fields(request):
            kwargs["widget"] = CheckedAutocompleteSelectMultiple(db_field, self.admin_site, using=kwargs.get("using"))
        return super().formfield_for_manytomany(db_field, request, **kwargs)


class ShownValuesField(forms.CharField):
    """The hidden box of a record's values as shown: what the page knew, never a change the user made."""

    widget = forms.HiddenInput

    def has_changed(self, initial, data):
        return False


class ShownValuesForm(forms.ModelForm):
    """An edit form that carries its record's values as shown (`shown_values`, hidden) and refuses a save that
    another save overtook (`services.shown_values`): at the save, inside the admin's transaction, the record is
    read again locked; a field stored otherwise than shown refuses the whole save, said at the top and at each
    such field. A box the user left as shown then shows the value stored now; a box typed over keeps what was
    typed; the hidden box takes the values stored now, so the next save is judged against them. Adding is
    unaffected. What the form does not edit (read-only fields, columns the triggers keep) is saved as read under
    the lock, never as read when the page was opened."""

    shown_values = ShownValuesField(required=False)

    def __init__(self, *args, **kwargs):
        self.now_shown = {}  # a box's name -> the value it shows instead of the one sent
        super().__init__(*args, **kwargs)
        if not self.instance._state.adding:
            self.initial[SHOWN_VALUES] = json.dumps(stored_values(self.instance, self.edited_fields()))

    def edited_fields(self) -> list[str]:
        """The fields this form shows and saves (a disabled one, as the password's summary, is not typed)."""
        return [name for name, field in self.fields.items() if name != SHOWN_VALUES and not field.disabled]

    def _widget_data_value(self, widget, html_name):
        if html_name in self.now_shown:
            return self.now_shown[html_name]
        return super()._widget_data_value(widget, html_name)

    def _post_clean(self):
        super()._post_clean()
        if self.instance._state.adding:
            return
        fields = model_fields(self.instance, self.edited_fields())
        stored = locked_now(self.instance)
        what = self.instance._meta.verbose_name
        if stored is None:
            self.add_error(None, f"Someone else deleted this {what} while you edited it: nothing was saved.")
            return
        for field in self.instance._meta.concrete_fields:  # not edited here: saved as stored now
            if field.name not in fields and not field.primary_key:
                setattr(self.instance, field.attname, getattr(stored, field.attname))
        now = stored_values(stored, fields)
        shown = read_shown(self.cleaned_data.get(SHOWN_VALUES))
        if shown is None:
            self.add_error(
                None, f"This form did not say what it showed of the {what}: nothing was saved. Check it and save again."
            )
            self.now_shown[self.add_prefix(SHOWN_VALUES)] = json.dumps(now)
            return
        sent = self._sent(fields)
        moved = moved_meanwhile(shown, now, sent)
        if not moved:
            return
        self.add_error(None, moved_words(self.instance, fields, shown, now, moved))
        for name in moved:
            field, typed_over = fields[name], sent.get(name) != shown.get(name)
            was, saved = value_words(field, shown.get(name)), value_words(field, now[name])
            saved = f"Someone else saved {saved} here meanwhile (was {was})"
            if not typed_over:
                self.now_shown[self.add_prefix(name)] = field.value_from_object(stored)
            self.add_error(name, f"{saved}; yours is kept in the box." if typed_over else f"{saved}: shown here now.")
        self.now_shown[self.add_prefix(SHOWN_VALUES)] = json.dumps(now)

    def _sent(self, fields) -> dict:
        """What this save would store in each field (`comparable`); a field the form refused is left out."""
        return {
            name: comparable(self.cleaned_data[name] if field.many_to_many else field.value_from_object(self.instance))
            for name, field in fields.items()
            if name not in self.errors and (name in self.cleaned_data or not field.many_to_many)
        }


class PkWithShownValues(forms.HiddenInput):
    """A list's hidden id box that also draws its row's values as shown: the list draws no other hidden box."""

    def __init__(self, shown_box, attrs=None):
        super().__init__(attrs)
        self.shown_box = shown_box

    def render(self, name, value, attrs=None, renderer=None):
        return super().render(name, value, attrs, renderer) + str(self.shown_box)


class ShownValuesListFormSet(BaseModelFormSet):
    """The boxes typed in a list (`list_editable`), each row guarded as a change form is."""

    def add_fields(self, form, index):
        super().add_fields(form, index)
        pk = form.fields[self._pk_field.name]
        pk.widget = PkWithShownValues(form[SHOWN_VALUES], pk.widget.attrs)


class ShownValuesAdmin:
    """Every admin screen and inline that edits a record saves through `ShownValuesForm`: its change form, its
    inline rows and its list's typed boxes (`tests/test_admin_edits.py` walks them all)."""

    def __init__(self, *args, **kwargs):
        super().__init__(*args, **kwargs)
        if not issubclass(self.form, ShownValuesForm):
            self.form = type(self.form.__name__, (ShownValuesForm, self.form), {})

    def get_fieldsets(self, request, obj=None):
        """The hidden box among the fields drawn, where fieldsets name the fields (the users' screen)."""
        fieldsets = super().get_fieldsets(request, obj)
        if (obj is None and not isinstance(self, InlineModelAdmin)) or SHOWN_VALUES in flatten_fieldsets(fieldsets):
            return fieldsets
        (name, options), *others = fieldsets
        return [(name, {**options, "fields": [*options["fields"], SHOWN_VALUES]}), *others]

    def get_changelist_form(self, request, **kwargs):
        return super().get_changelist_form(request, **{"form": ShownValuesForm, **kwargs})

    def get_changelist_formset(self, request, **kwargs):
        formset = super().get_changelist_formset(request, **kwargs)
        return type(formset.__name__, (ShownValuesListFormSet, formset), {})

    def changelist_view(self, request, extra_context=None):
        """A list's typed boxes are checked and saved in one transaction, as a change form is."""
        if request.method != "POST" or not self.list_editable:
            return super().changelist_view(request, extra_context)
        with transaction.atomic(using=router.db_for_write(self.model)):
            return super().changelist_view(request, extra_context)


class CheckedLookupsAdmin(ShownValuesAdmin, CheckedAutocompleteMixin, admin.ModelAdmin):
    """A list's query string may name any date's year (`?due_on__year=2026`, as the date drill-down does): a year
    outside the rulebook's accepted span is refused (400), not a 500 from the first day of year 99999."""

    def lookup_allowed(self, lookup, value, request=None):
        if lookup.endswith(("__year", "__iso_year")):
            first, last = FIRST_ACCEPTED_DAY.astype(object).year, LAST_ACCEPTED_DAY.astype(object).year
            years = value if isinstance(value, list) else [value]
            if not all(str(year).isascii() and str(year).isdigit() and first <= int(year) <= last for year in years):
                return False
        return super().lookup_allowed(lookup, value, request)


class FieldsRefusedFirst(forms.ModelForm):
    """The model's own checks (`Model.clean`) learn which boxes this form refused already (`fields_refused` on the
    instance), so a check that reads other fields too (`rules.ReadsOtherFields`) does not judge the stored value of
    a refused box beside the typed ones (a walk was told an output "abc" was above volts times amps)."""

    def _post_clean(self):
        self.instance.fields_refused = frozenset(self._errors or ())
        super()._post_clean()


class RulebookNumbersAdmin(CheckedLookupsAdmin):
    """Number boxes read by the rulebook (`_rulebook_number`); a box with choices stays a choice."""

    form = FieldsRefusedFirst
    formfield_overrides = {
        models.FloatField: {"form_class": RulebookFloatField},
        models.IntegerField: {"form_class": RulebookIntegerField},
        models.DecimalField: {"form_class": RulebookDecimalField},
    }


@admin.register(Site)
class SiteAdmin(RulebookNumbersAdmin):
    list_display = ["code", "name", "time_zone"]
    search_fields = ["code", "name"]


class FittedCapacitorInline(ShownValuesAdmin, CheckedAutocompleteMixin, admin.TabularInline):
    """The motor's capacitors, one row each, within a 1366 px screen (six boxes overflowed it by 150 px): the
    serial box sized to a date code, the removal shown as text and recorded on the capacitor's own page
    ("Change" on its row), where its day and reason are edited together."""

    model = FittedCapacitor
    extra = 0
    fields = ["role", "part", "serial", "fitted_on", "removed_on", "removal_reason"]
    readonly_fields = ["removed_on", "removal_reason"]
    autocomplete_fields = ["part"]
    show_change_link = True
    formfield_overrides = {models.CharField: {"widget": forms.TextInput(attrs={"size": 14})}}


@admin.register(Motor)
class MotorAdmin(RulebookNumbersAdmin):
    list_display = [
        "asset_tag",
        "site",
        "location",
        "application",
        "motor_type",
        "output_w",
        "rated_voltage_v",
        "status",
    ]
    list_filter = ["site", "application", "motor_type", "load_type", "status", "frequency_hz", "poles"]
    search_fields = ["asset_tag", "location"]
    list_select_related = ["site"]
    inlines = [FittedCapacitorInline]


@admin.register(CapacitorPart)
class CapacitorPartAdmin(RulebookNumbersAdmin):
    list_display = [
        "code",
        "rated_uf",
        "tolerance_minus_pct",
        "tolerance_plus_pct",
        "rated_voltage_v",
        "dielectric",
        "class_of_operation",
        "safety_class",
        "unit_cost",
    ]
    list_filter = ["dielectric", "class_of_operation", "safety_class", "frequency_hz"]
    search_fields = ["code", "description"]


@admin.register(FittedCapacitor)
class FittedCapacitorAdmin(RulebookNumbersAdmin):
    list_display = ["motor", "role", "part", "serial", "fitted_on", "removed_on", "removal_reason"]
    list_filter = ["role", "removal_reason", "part__dielectric", "motor__site"]
    search_fields = ["motor__asset_tag", "serial", "part__code"]
    list_select_related = ["motor", "part"]
    autocomplete_fields = ["motor", "part"]
    date_hierarchy = "fitted_on"


@admin.register(SiteDayOff)
class SiteDayOffAdmin(CheckedLookupsAdmin):
    list_display = ["site", "day", "name"]
    list_filter = ["site"]
    search_fields = ["site__code", "name"]
    list_select_related = ["site"]
    date_hierarchy = "day"


@admin.register(SiteStock)
class SiteStockAdmin(RulebookNumbersAdmin):
    list_display = ["site", "part", "quantity"]
    list_editable = ["quantity"]
    list_filter = ["site", "part__dielectric"]
    search_fields = ["site__code", "part__code"]
    list_select_related = ["site", "part"]
    autocomplete_fields = ["part"]


class ReadingAdminForm(forms.ModelForm):
    """A reading added in the admin passes the same rulebook as the form, the API and the import. Who recorded
    it and where are not typed: the administrator adding it, from the register (a reading filed under a
    technician's name as a reading-form entry would mislead the audit and the engineer)."""

    class Meta:
        model = Reading
        fields = [
            "fitted_capacitor",
            "taken_at",
            "method",
            *Reading.MEASURED_FIELDS,
            "condition",
            "notes",
            "outlier_confirmed",
            "supersedes",
        ]

    def __init__(self, *args, **kwargs):
        super().__init__(*args, **kwargs)
        if "taken_at" in self.fields:
            self.fields["taken_at"].help_text = (
                "In the site's time (the motor's site), as the reading form takes it; "
                f"the admin's lists show times in {settings.TIME_ZONE}."
            )

    def clean(self):
        from .services.readings import NeedsConfirmation, check_reading

        data = super().clean()
        fitted_capacitor = data.get("fitted_capacitor")
        if fitted_capacitor is None or self.errors:
            return data
        # The boxes hold the site's wall-clock time (the admin read it in TIME_ZONE): read it in the site's zone,
        # by the reading form's rule (a time the clocks skip or repeat is named, with its two offsets).
        wall = timezone.localtime(data["taken_at"]).replace(tzinfo=None).isoformat(timespec="seconds")
        try:
            data["taken_at"] = parse_site_time(wall, fitted_capacitor.motor.site.time_zone)
        except ValueError as error:
            raise ValidationError({"taken_at": str(error)}) from error
        try:
            check_reading(
                fitted_capacitor,
                data,
                confirmed=bool(data.get("outlier_confirmed")),
                supersedes=data.get("supersedes"),
            )
        except NeedsConfirmation as error:
            raise ValidationError(
                [*error.messages, "Tick 'outlier confirmed' if the value is right."], code="needs_confirmation"
            ) from error
        except ValidationError as error:
            raise ValidationError(
                {
                    field if field in self.fields else "__all__": messages
                    for field, messages in error.message_dict.items()
                }
            ) from error
        return data


@admin.register(Reading)
class ReadingAdmin(RulebookNumbersAdmin):
    """Readings are append-only: they can be added and viewed, never changed or deleted."""

    form = ReadingAdminForm

    list_display = [
        "fitted_capacitor",
        "taken_at",
        "method",
        "capacitance_uf",
        "case_temperature_c",
        "taken_by",
        "source",
        "outlier_confirmed",
    ]
    list_filter = ["method", "source", "condition", "outlier_confirmed", "fitted_capacitor__motor__site"]
    search_fields = ["fitted_capacitor__motor__asset_tag", "notes"]
    list_select_related = ["fitted_capacitor__motor", "fitted_capacitor__part", "taken_by"]
    raw_id_fields = ["fitted_capacitor", "supersedes"]
    date_hierarchy = "taken_at"

    def has_change_permission(self, request, obj=None):
        return obj is None and super().has_change_permission(request, obj)

    def has_delete_permission(self, request, obj=None):
        return False

    def save_model(self, request, obj, form, change):
        obj.taken_by, obj.source = request.user, Reading.Source.REGISTER
        super().save_model(request, obj, form, change)

    def delete_view(self, request, object_id, extra_context=None):
        """Refused in words that say why: no role may delete a reading (asking an administrator would not help)."""
        raise PermissionDenied(READINGS_KEPT_WORDS)


READINGS_KEPT_WORDS = (
    "Readings are never deleted, by any role: the forecast and the audit rest on every value measured. To put a "
    'wrong reading right, record a correction from the capacitor\'s page ("Correct"): both are kept, and the '
    "trend uses the correction."
)


@admin.register(Assessment)
class AssessmentAdmin(CheckedLookupsAdmin):
    list_display = [
        "fitted_capacitor",
        "risk",
        "replace_by",
        "capacitance_now",
        "limit_source",
        "low_confidence",
        "is_current",
        "created_at",
    ]
    list_filter = ["is_current", "risk", "limit_source", "low_confidence", "trend_model"]
    search_fields = ["fitted_capacitor__motor__asset_tag"]
    list_select_related = ["fitted_capacitor__motor", "fitted_capacitor__part"]
    raw_id_fields = ["fitted_capacitor", "newest_reading"]

    @admin.display(description="trend at newest reading, 25 °C (µF)", ordering="capacitance_now_uf")
    def capacitance_now(self, assessment):
        return f"{assessment.capacitance_now_uf:.2f}"

    # Computed by the refit from the readings: to be looked at, never typed over.
    def has_add_permission(self, request):
        return False

    def has_change_permission(self, request, obj=None):
        return obj is None and super().has_change_permission(request, obj)


@admin.register(WorkOrder)
class WorkOrderAdmin(RulebookNumbersAdmin):
    """Who created and who closed an order, and when, are the application's record of the work (the pages that
    plan, close and cancel write them): shown, never typed (the admin took a closing time of 9999-12-31)."""

    readonly_fields = ["created_by", "closed_by", "closed_at"]
    list_display = ["motor", "kind", "due_on", "state", "reason"]
    list_filter = ["state", "kind", "motor__site"]
    search_fields = ["motor__asset_tag", "reason"]
    list_select_related = ["motor"]
    raw_id_fields = ["motor", "fitted_capacitor"]


class DerivedRecordAdmin(CheckedLookupsAdmin):
    """Records the application works out (a part's pooled priors, a refit's progress): to be looked at, never
    added or typed over."""

    def has_add_permission(self, request):
        return False

    def has_change_permission(self, request, obj=None):
        return obj is None and super().has_change_permission(request, obj)


admin.site.register(PartPrior, DerivedRecordAdmin)
admin.site.register(RefitRun, DerivedRecordAdmin)


def _perm_name(permission) -> str:
    return f"{permission.content_type.app_label}.{permission.codename}"


def _beyond(editor, permissions) -> list[str]:
    """The permissions in `permissions` that `editor` does not hold (none for a superuser)."""
    if editor.is_superuser:
        return []
    held = editor.get_all_permissions()
    return sorted(name for name in map(_perm_name, permissions) if name not in held)


class NoEscalationForm(forms.ModelForm):
    """Refuses to add a permission or a group that gives more than the editor holds."""

    editor = None

    def _check_added(self, field: str, permissions_of) -> None:
        if field not in self.cleaned_data or self.editor is None:
            return
        before = set(getattr(self.instance, field).all()) if self.instance.pk else set()
        for added in set(self.cleaned_data[field]) - before:
            beyond = _beyond(self.editor, permissions_of(added))
            if beyond:
                self.add_error(field, f"You cannot grant {added}: it holds {', '.join(beyond)}, which you do not.")

    def clean(self):
        cleaned = super().clean()
        self._check_added("permissions", lambda p: [p])
        self._check_added("user_permissions", lambda p: [p])
        self._check_added("groups", lambda g: g.permissions.select_related("content_type"))
        if self.editor is not None and not self.editor.is_superuser and cleaned.get("is_superuser"):
            self.add_error("is_superuser", "Only a superuser can make a superuser.")
        return cleaned


class NoEscalationAdminMixin:
    def get_form(self, request, obj=None, **kwargs):
        form = super().get_form(request, obj, **kwargs)
        return type(form.__name__, (NoEscalationForm, form), {"editor": request.user})


class SiteMembershipInline(ShownValuesAdmin, CheckedAutocompleteMixin, admin.TabularInline):
    model = SiteMembership
    extra = 0
    autocomplete_fields = ["site"]
    verbose_name = "site this user works at"
    verbose_name_plural = "sites this user works at (none listed: every site)"


admin.site.unregister(User)
admin.site.unregister(Group)
admin.site.unregister(TokenProxy)


@admin.register(User)
class FleetUserAdmin(ShownValuesAdmin, CheckedAutocompleteMixin, NoEscalationAdminMixin, UserAdmin):
    """Users with their roles (groups) and the sites they work at."""

    inlines = [SiteMembershipInline]

    def get_readonly_fields(self, request, obj=None):
        fields = list(super().get_readonly_fields(request, obj))
        return fields if request.user.is_superuser else [*fields, "is_superuser"]

    def has_change_permission(self, request, obj=None):
        """A superuser's account is changed (password included) by superusers only."""
        if obj is not None and obj.is_superuser and not request.user.is_superuser:
            return False
        return super().has_change_permission(request, obj)

    def has_delete_permission(self, request, obj=None):
        if obj is not None and obj.is_superuser and not request.user.is_superuser:
            return False
        return super().has_delete_permission(request, obj)


@admin.register(Group)
class FleetGroupAdmin(ShownValuesAdmin, CheckedAutocompleteMixin, NoEscalationAdminMixin, GroupAdmin):
    """Roles: a group's permissions are granted only by someone who holds them. A role's group keeps its name and
    is not deleted: the application knows each role by its group's name (`roles.roles_of`), so a renamed one
    took the role from every member unseen."""

    def get_readonly_fields(self, request, obj=None):
        fields = super().get_readonly_fields(request, obj)
        return [*fields, "name"] if obj is not None and obj.name in ROLES else fields

    def has_delete_permission(self, request, obj=None):
        if obj is not None and obj.name in ROLES:
            return False
        return super().has_delete_permission(request, obj)


@admin.register(TokenProxy)
class FleetTokenAdmin(ShownValuesAdmin, CheckedAutocompleteMixin, TokenAdmin):
    """API tokens: a token acts as its user, so only superusers make one for a superuser."""

    def formfield_for_foreignkey(self, db_field, request, **kwargs):
        if db_field.name == "user" and not request.user.is_superuser:
            kwargs["queryset"] = User.objects.filter(is_superuser=False)
        return super().formfield_for_foreignkey(db_field, request, **kwargs)


@admin.register(SiteMembership)
class SiteMembershipAdmin(CheckedLookupsAdmin):
    list_display = ["user", "site"]
    list_filter = ["site"]
    search_fields = ["user__username", "site__code"]
    autocomplete_fields = ["user", "site"]


@admin.register(AuditEntry)
class AuditEntryAdmin(CheckedLookupsAdmin):
    """The audit trail: read-only, newest first."""

    list_display = ["at", "username", "action", "model", "object_repr", "changed_fields"]
    list_filter = ["action", "model", "username"]
    search_fields = ["object_repr", "object_id", "username"]
    date_hierarchy = "at"
    readonly_fields = [f.name for f in AuditEntry._meta.fields]

    @admin.display(description="fields")
    def changed_fields(self, entry):
        return ", ".join(entry.changes)[:120]

    def has_add_permission(self, request):
        return False

    def has_change_permission(self, request, obj=None):
        return False

    def has_delete_permission(self, request, obj=None):
        return False
