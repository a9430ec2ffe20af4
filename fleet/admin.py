"""The register keeper's screens: search and filters on every model."""

from django import forms
from django.contrib import admin
from django.core.exceptions import ValidationError

from .models import Assessment, CapacitorPart, FittedCapacitor, Motor, PartPrior, Reading, RefitRun, Site, WorkOrder


@admin.register(Site)
class SiteAdmin(admin.ModelAdmin):
    list_display = ["code", "name", "time_zone"]
    search_fields = ["code", "name"]


class FittedCapacitorInline(admin.TabularInline):
    model = FittedCapacitor
    extra = 0
    fields = ["role", "part", "serial", "fitted_on", "removed_on", "removal_reason"]
    autocomplete_fields = ["part"]


@admin.register(Motor)
class MotorAdmin(admin.ModelAdmin):
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
class CapacitorPartAdmin(admin.ModelAdmin):
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
class FittedCapacitorAdmin(admin.ModelAdmin):
    list_display = ["motor", "role", "part", "serial", "fitted_on", "removed_on", "removal_reason"]
    list_filter = ["role", "removal_reason", "part__dielectric", "motor__site"]
    search_fields = ["motor__asset_tag", "serial", "part__code"]
    list_select_related = ["motor", "part"]
    autocomplete_fields = ["motor", "part"]
    date_hierarchy = "fitted_on"


class ReadingAdminForm(forms.ModelForm):
    """A reading added in the admin passes the same rulebook as the form, the API and the import."""

    class Meta:
        model = Reading
        fields = [
            "installation",
            "taken_at",
            "taken_by",
            "method",
            *Reading.MEASURED_FIELDS,
            "condition",
            "notes",
            "outlier_confirmed",
            "supersedes",
            "source",
        ]

    def clean(self):
        from .services.readings import NeedsConfirmation, check_reading

        data = super().clean()
        installation = data.get("installation")
        if installation is None or self.errors:
            return data
        try:
            check_reading(installation, data, confirmed=bool(data.get("outlier_confirmed")))
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
class ReadingAdmin(admin.ModelAdmin):
    """Readings are append-only: they can be added and viewed, never changed or deleted."""

    form = ReadingAdminForm

    list_display = [
        "installation",
        "taken_at",
        "method",
        "capacitance_uf",
        "case_temperature_c",
        "taken_by",
        "source",
        "outlier_confirmed",
    ]
    list_filter = ["method", "source", "condition", "outlier_confirmed", "installation__motor__site"]
    search_fields = ["installation__motor__asset_tag", "notes"]
    list_select_related = ["installation__motor", "installation__part", "taken_by"]
    raw_id_fields = ["installation", "supersedes"]
    date_hierarchy = "taken_at"

    def has_change_permission(self, request, obj=None):
        return obj is None and super().has_change_permission(request, obj)

    def has_delete_permission(self, request, obj=None):
        return False


@admin.register(Assessment)
class AssessmentAdmin(admin.ModelAdmin):
    list_display = [
        "installation",
        "risk",
        "replace_by",
        "capacitance_now_uf",
        "limit_source",
        "low_confidence",
        "is_current",
        "created_at",
    ]
    list_filter = ["is_current", "risk", "limit_source", "low_confidence", "trend_model"]
    search_fields = ["installation__motor__asset_tag"]
    list_select_related = ["installation__motor", "installation__part"]
    raw_id_fields = ["installation", "newest_reading"]


@admin.register(WorkOrder)
class WorkOrderAdmin(admin.ModelAdmin):
    list_display = ["motor", "kind", "due_on", "state", "reason"]
    list_filter = ["state", "kind", "motor__site"]
    search_fields = ["motor__asset_tag", "reason"]
    list_select_related = ["motor"]
    raw_id_fields = ["motor", "installation"]


admin.site.register(PartPrior)
admin.site.register(RefitRun)
