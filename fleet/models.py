"""The register (sites, motors, capacitor parts, fitted capacitors) and the records.

Physical facts are database constraints, so a bulk import or a script is held to
them as firmly as a form. Rules that span tables (no reading after removal,
readings never edited) are triggers installed by migration 0002.
"""

from __future__ import annotations

import datetime as dt
import zoneinfo

import numpy as np
from django.conf import settings
from django.core.exceptions import ValidationError
from django.core.validators import RegexValidator
from django.db import models
from django.db.models import F, Q
from django.db.models.fields.json import KeyTransform
from django.db.models.functions import Length, Upper
from django.db.models.lookups import LessThanOrEqual
from django.utils import timezone

from fleet.engineering.capacitor import CLASS_LIFE_HOURS, VERDICT_NAMES
from fleet.engineering.drift import CAPACITOR_START, LIMIT_NAMES, PERMANENT_SPLIT, ROLE_RUN, ROLE_START, TWO_VALUE
from fleet.engineering.motor import LOAD_TYPE_CONSTANT, LOAD_TYPE_FAN_LAW
from fleet.engineering.planning import (
    DISSIPATION_LIMIT,
    PATH_BELOW_REASON,
    RISK_DUE_SOON,
    RISK_REPLACE_NOW,
    RISK_SOUND,
    RISK_WATCH,
    TOLERANCE_LIMIT,
    PlanningSettings,
    day_off_problems,
    work_order_problems,
)
from fleet.engineering.rules import (
    CIRCUIT_OHM_FIELDS,
    CONDITION_SOUND,
    ELECTROLYTIC_RUN_WORDS,
    METHOD_IN_CIRCUIT,
    METHOD_METER,
    PART_UNIT_COST_DECIMALS,
    UNDER_VOLTAGE_WORDS,
    ReadsOtherFields,
    commissioning_problems,
    first_problem_by_field,
    fitting_problems,
    motor_problems,
    part_problems,
    service_date_problems,
    site_time_zone,
)
from fleet.engineering.trends import (
    DIELECTRIC_ELECTROLYTIC,
    DIELECTRIC_FILM,
    MODEL_LINEAR,
    MODEL_LOG,
    PATH_BENT,
    PATH_STRAIGHT,
)

# Asset tags, site codes and part codes: letters, digits, '-', '_' and '.', starting with a letter or
# digit; no '/', spaces or other signs, so a code prints on a label and sits in a URL unchanged.
CODE_CHARACTERS = "letters, digits, '-', '_' and '.', starting with a letter or digit"
CODE_PATTERN = r"[A-Za-z0-9][A-Za-z0-9._-]*"
code_validator = RegexValidator(rf"\A{CODE_PATTERN}\Z", f"Use {CODE_CHARACTERS}.", code="code_characters")
# Database bound that refuses NaN and infinity on PostgreSQL (NaN sorts above every number there)
# and infinity on SQLite (which stores NaN as NULL): far above any reading, below any overflow.
FINITE_BOUND = 1e9
NOTES_MAX_CHARS = 2000  # the rulebook's limit (fleet/engineering/rules.py), held by the database too


# (field, lowest, strictly above it, constraint, message): physical facts of a reading, finite.
FINITE_READINGS = [
    (
        "capacitor_voltage_v",
        0,
        True,
        "reading_voltage_positive",
        "The capacitor voltage must be a finite number above zero.",
    ),
    (
        "capacitor_current_a",
        0,
        False,
        "reading_current_not_negative",
        "The capacitor current must be a finite number, zero or more.",
    ),
    (
        "line_voltage_v",
        0,
        False,
        "reading_line_voltage_finite",
        "The line voltage must be a finite number, zero or more.",
    ),
    *(
        (
            f"{which}_current_a",
            0,
            False,
            f"reading_{which}_current_finite",
            f"The {which} current must be a finite number, zero or more.",
        )
        for which in ("main", "aux", "line")
    ),
    (
        "ambient_temperature_c",
        -273.15,
        False,
        "reading_ambient_temperature_finite",
        "The ambient temperature must be a finite number above absolute zero.",
    ),
    ("esr_ohm", 0, False, "reading_esr_finite", "The ESR must be a finite number, zero or more."),
]


def finite(name: str, lowest: float = -FINITE_BOUND, *, above: bool = False) -> Q:
    """Q that holds for a NULL or a finite value at or above `lowest` (above it with `above`)."""
    low = {f"{name}__gt" if above else f"{name}__gte": lowest}
    return Q(**{f"{name}__isnull": True}) | Q(**low, **{f"{name}__lt": FINITE_BOUND})


def constraint_errors(instance: models.Model) -> dict[str, list[str]]:
    """Every check constraint the instance breaks, by field (the model's CONSTRAINT_FIELDS), so a
    form or the API shows it beside the field instead of the database answering 500."""
    fields = getattr(type(instance), "CONSTRAINT_FIELDS", {})
    errors: dict[str, list[str]] = {}
    for constraint in instance._meta.constraints:
        if not isinstance(constraint, models.CheckConstraint):
            continue
        try:
            constraint.validate(type(instance), instance)
        except ValidationError as error:
            errors.setdefault(fields.get(constraint.name, "__all__"), []).extend(error.messages)
    return errors


def unique_any_case(field_name: str, name: str, what: str) -> models.UniqueConstraint:
    """A code unique whatever its case: CST-0093 and cst-0093 name one thing (the imports' rule)."""
    return models.UniqueConstraint(
        Upper(field_name),
        name=name,
        violation_error_message=f"The {what} is taken already, in another case: codes are unique in any case.",
    )


def same_code_in_any_case(instance: models.Model, field_name: str, what: str) -> dict[str, str]:
    """The field's error when another row holds the same code in another case (or the same), for clean()."""
    value = getattr(instance, field_name)
    if not value:
        return {}
    other = (
        type(instance)
        .objects.filter(**{f"{field_name}__iexact": value})
        .exclude(pk=instance.pk)
        .values_list(field_name, flat=True)
        .first()
    )
    if other is None or other == value:
        return {}  # none, or the exact duplicate the field's own unique check names
    return {field_name: f"{other} is in the register already: {what}s are unique in any case."}


def site_zone(name: str) -> zoneinfo.ZoneInfo:
    """A site's time zone; one nobody knows falls back to the plant's (settings.TIME_ZONE)."""
    try:
        return zoneinfo.ZoneInfo(name)
    except (zoneinfo.ZoneInfoNotFoundError, ValueError, TypeError):
        return zoneinfo.ZoneInfo(settings.TIME_ZONE)


class Site(models.Model):
    code = models.CharField(max_length=20, unique=True, validators=[code_validator], help_text=f"Use {CODE_CHARACTERS}")
    name = models.CharField(max_length=120)
    time_zone = models.CharField(max_length=60, default="UTC")

    class Meta:
        ordering = ["code"]
        constraints = [unique_any_case("code", "site_code_unique_any_case", "site code")]

    def __str__(self):
        return f"{self.code} {self.name}"

    def clean(self):
        """A time zone the tz database does not know is refused, by the sites import's rule; a code another
        site holds in another case is refused at the field."""
        super().clean()
        errors = same_code_in_any_case(self, "code", "site code")
        spelt = site_time_zone(self.time_zone)
        if spelt:
            self.time_zone = spelt
        else:
            errors["time_zone"] = "Not a time zone name: use one like Europe/Madrid, America/Chicago or UTC."
        if errors:
            raise ValidationError(errors)


class Motor(models.Model):
    class Application(models.TextChoices):
        FAN = "fan", "Fan"
        PUMP = "pump", "Pump"
        COMPRESSOR = "compressor", "Compressor"
        CONVEYOR = "conveyor", "Conveyor"
        OTHER = "other", "Other"

    class MotorType(models.TextChoices):
        CAPACITOR_START = CAPACITOR_START, "Capacitor-start"
        PERMANENT_SPLIT = PERMANENT_SPLIT, "Permanent-split capacitor"
        TWO_VALUE = TWO_VALUE, "Two-value capacitor"

    class LoadType(models.TextChoices):
        FAN_LAW = LOAD_TYPE_FAN_LAW, "Fan law (torque ~ speed squared)"
        CONSTANT = LOAD_TYPE_CONSTANT, "Constant torque"

    class Status(models.TextChoices):
        IN_SERVICE = "in_service", "In service"
        STANDBY = "standby", "Standby"
        RETIRED = "retired", "Retired"

    asset_tag = models.CharField(
        max_length=40, unique=True, validators=[code_validator], help_text=f"Use {CODE_CHARACTERS}"
    )
    site = models.ForeignKey(Site, on_delete=models.PROTECT, related_name="motors")
    location = models.CharField(max_length=120, blank=True)
    route_order = models.PositiveIntegerField(default=0, help_text="Walking order on the site's reading route")
    application = models.CharField(max_length=20, choices=Application.choices)
    motor_type = models.CharField(max_length=20, choices=MotorType.choices)
    load_type = models.CharField(max_length=20, choices=LoadType.choices)
    rated_voltage_v = models.FloatField(verbose_name="rated voltage (V)")
    frequency_hz = models.PositiveSmallIntegerField(verbose_name="frequency (Hz)")
    poles = models.PositiveSmallIntegerField()
    output_w = models.FloatField(verbose_name="rated output (W)")
    full_load_current_a = models.FloatField(verbose_name="full-load current (A)")
    rated_speed_rpm = models.FloatField(verbose_name="rated speed (rpm)")
    insulation_class = models.CharField(max_length=2, blank=True)
    commissioned_on = models.DateField(null=True, blank=True)
    status = models.CharField(max_length=20, choices=Status.choices, default=Status.IN_SERVICE)
    # Equivalent circuit (ohms, referred to the main winding): entered or estimated.
    r1m_ohm = models.FloatField(verbose_name="main winding resistance R1m (Ω)", null=True, blank=True)
    x1m_ohm = models.FloatField(verbose_name="main winding leakage reactance X1m (Ω)", null=True, blank=True)
    r1a_ohm = models.FloatField(verbose_name="auxiliary winding resistance R1a (Ω)", null=True, blank=True)
    x1a_ohm = models.FloatField(verbose_name="auxiliary winding leakage reactance X1a (Ω)", null=True, blank=True)
    r2_ohm = models.FloatField(verbose_name="rotor resistance R2 (Ω)", null=True, blank=True)
    x2_ohm = models.FloatField(verbose_name="rotor leakage reactance X2 (Ω)", null=True, blank=True)
    xm_ohm = models.FloatField(verbose_name="magnetising reactance Xm (Ω)", null=True, blank=True)
    turns_ratio = models.FloatField(null=True, blank=True)
    rotational_loss_w = models.FloatField(verbose_name="rotational loss (W)", null=True, blank=True)
    circuit_source = models.CharField(
        max_length=20, blank=True, help_text="entered, estimated (nameplate only) or fitted (with readings)"
    )
    last_read_at = models.DateTimeField(
        null=True,
        blank=True,
        editable=False,
        help_text="When every capacitor in service on the motor had last been read: the oldest of its "
        "positions' newest readings (a position's predecessors included, corrected readings left out); "
        "empty while a position was never read; kept by database triggers on readings and capacitors",
    )

    class Meta:
        ordering = ["site__code", "route_order", "asset_tag"]
        # Route and label pages: a site's motors in walking order, a page at a time.
        indexes = [
            models.Index(fields=["site", "route_order", "asset_tag"], name="motor_walking_order"),
            models.Index(fields=["site", "status", "last_read_at"], name="motor_last_read"),
        ]
        constraints = [
            # Also the index that finds a motor by its tag in any case (the motor page, Find).
            unique_any_case("asset_tag", "motor_tag_unique_any_case", "asset tag"),
            models.CheckConstraint(
                condition=Q(rated_voltage_v__gt=0, rated_voltage_v__lte=1000),
                name="motor_voltage_range",
                violation_error_message="The rated voltage must be above 0 and at most 1,000 V.",
            ),
            models.CheckConstraint(
                condition=Q(frequency_hz__in=[50, 60]),
                name="motor_frequency_50_or_60",
                violation_error_message="The frequency must be 50 or 60 Hz.",
            ),
            models.CheckConstraint(
                condition=Q(poles__in=[2, 4, 6, 8, 10, 12]),
                name="motor_poles_even",
                violation_error_message="The poles must be 2, 4, 6, 8, 10 or 12.",
            ),
            models.CheckConstraint(
                condition=Q(output_w__gt=0),
                name="motor_output_positive",
                violation_error_message="The rated output must be above zero.",
            ),
            models.CheckConstraint(
                condition=Q(full_load_current_a__gt=0),
                name="motor_current_positive",
                violation_error_message="The full-load current must be above zero.",
            ),
            models.CheckConstraint(
                condition=Q(rated_speed_rpm__gt=0) & Q(rated_speed_rpm__lt=120 * F("frequency_hz") / F("poles")),
                name="motor_speed_below_synchronous",
                violation_error_message="The rated speed must be above zero and below synchronous speed "
                "(120 × frequency / poles).",
            ),
        ]

    CONSTRAINT_FIELDS = {
        "motor_voltage_range": "rated_voltage_v",
        "motor_frequency_50_or_60": "frequency_hz",
        "motor_poles_even": "poles",
        "motor_output_positive": "output_w",
        "motor_current_positive": "full_load_current_a",
        "motor_speed_below_synchronous": "rated_speed_rpm",
    }

    def __str__(self):
        return self.asset_tag

    def clean(self):
        """Figures and dates no capacitor motor has are refused at their field, by the register import's rule
        (`rules.motor_problems`, `rules.commissioning_problems`)."""
        super().clean()
        errors = same_code_in_any_case(self, "asset_tag", "asset tag")
        nameplate = ("rated_voltage_v", "frequency_hz", "poles", "rated_speed_rpm", "full_load_current_a", "output_w")
        optional = (*CIRCUIT_OHM_FIELDS, "turns_ratio", "rotational_loss_w", "route_order")
        value = {name: np.nan if getattr(self, name) is None else getattr(self, name) for name in nameplate + optional}
        problems = motor_problems(
            *(value[name] for name in nameplate),
            circuit={name: value[name] for name in optional[:-1]},
            route_order=value["route_order"],
        )
        if self.commissioned_on is not None:
            problems += commissioning_problems(self.commissioned_on, timezone.localdate())
        # A figure the form refused already (`fields_refused`, set by the admin's form) is not judged again, nor
        # read by a check of other fields: the stored value would be judged beside the typed ones.
        refused = getattr(self, "fields_refused", frozenset())
        if refused:
            problems = [p for p in problems if p[1] not in refused and not isinstance(p[1], ReadsOtherFields)]
        # A missing nameplate figure is its field's own error ("required"); no second word on it or from it.
        if not any(getattr(self, name) is None for name in nameplate):
            errors = first_problem_by_field(problems) | errors
        else:
            errors = first_problem_by_field([p for p in problems if p[1] not in nameplate]) | errors
        if errors:
            raise ValidationError(errors)

    @property
    def has_circuit(self) -> bool:
        return self.r1m_ohm is not None


class CapacitorPart(models.Model):
    class Dielectric(models.TextChoices):
        FILM = DIELECTRIC_FILM, "Metallised film (run)"
        ELECTROLYTIC = DIELECTRIC_ELECTROLYTIC, "Aluminium electrolytic (start)"

    class OperationClass(models.TextChoices):
        A = "A", f"A ({CLASS_LIFE_HOURS['A']:,.0f} h)"
        B = "B", f"B ({CLASS_LIFE_HOURS['B']:,.0f} h)"
        C = "C", f"C ({CLASS_LIFE_HOURS['C']:,.0f} h)"
        D = "D", f"D ({CLASS_LIFE_HOURS['D']:,.0f} h)"

    class SafetyClass(models.TextChoices):
        NONE = "S0", "S0 (no protection)"
        S1 = "S1", "S1"
        S2 = "S2", "S2 (overpressure disconnector)"
        S3 = "S3", "S3 (segmented film)"
        P0 = "P0", "P0 (older marking)"
        P1 = "P1", "P1 (older marking)"
        P2 = "P2", "P2 (older marking)"

    code = models.CharField(max_length=40, unique=True, validators=[code_validator], help_text=f"Use {CODE_CHARACTERS}")
    description = models.CharField(max_length=200, blank=True)
    rated_uf = models.FloatField(verbose_name="rated capacitance (µF)")
    tolerance_minus_pct = models.FloatField(verbose_name="tolerance minus (%)")
    tolerance_plus_pct = models.FloatField(verbose_name="tolerance plus (%)")
    rated_voltage_v = models.FloatField(verbose_name="rated voltage (V)")
    frequency_hz = models.PositiveSmallIntegerField(verbose_name="rated frequency (Hz)", default=50)
    dielectric = models.CharField(max_length=20, choices=Dielectric.choices)
    class_of_operation = models.CharField(max_length=1, choices=OperationClass.choices, blank=True)
    duty = models.CharField(max_length=80, blank=True, help_text="e.g. continuous, or 20 starts/h of 3 s")
    safety_class = models.CharField(max_length=2, choices=SafetyClass.choices, blank=True)
    max_case_temperature_c = models.FloatField(verbose_name="highest case temperature (°C)", default=70)
    max_dissipation_factor = models.FloatField(null=True, blank=True)
    tempco_ppm_per_k = models.FloatField(
        verbose_name="temperature coefficient (ppm/K)",
        null=True,
        blank=True,
        help_text="Temperature coefficient, ppm/K; empty: the dielectric's default, refined from readings",
    )
    unit_cost = models.DecimalField(max_digits=10, decimal_places=PART_UNIT_COST_DECIMALS, default=0)

    class Meta:
        ordering = ["code"]
        constraints = [
            unique_any_case("code", "part_code_unique_any_case", "part code"),
            models.CheckConstraint(
                condition=Q(rated_uf__gt=0),
                name="part_capacitance_positive",
                violation_error_message="The rated capacitance must be above zero.",
            ),
            models.CheckConstraint(
                condition=Q(tolerance_minus_pct__gte=0, tolerance_minus_pct__lt=100, tolerance_plus_pct__gte=0),
                name="part_tolerance_sane",
                violation_error_message="The tolerances must be 0 or more, the minus tolerance under 100 %%.",
            ),
            models.CheckConstraint(
                condition=Q(rated_voltage_v__gt=0),
                name="part_voltage_positive",
                violation_error_message="The rated voltage must be above zero.",
            ),
            models.CheckConstraint(
                condition=Q(unit_cost__gte=0),
                name="part_cost_not_negative",
                violation_error_message="The unit cost cannot be below zero.",
            ),
        ]

    CONSTRAINT_FIELDS = {
        "part_capacitance_positive": "rated_uf",
        "part_tolerance_sane": "tolerance_minus_pct",
        "part_voltage_positive": "rated_voltage_v",
        "part_cost_not_negative": "unit_cost",
    }

    def __str__(self):
        return f"{self.code} ({self.rated_uf:g} µF {self.rated_voltage_v:g} V)"

    def clean(self):
        """Catalogue figures no motor capacitor has are refused at their field, by the parts import's rule."""
        super().clean()
        same_code = same_code_in_any_case(self, "code", "part code")
        if same_code:
            raise ValidationError(same_code)
        required = (self.rated_uf, self.tolerance_minus_pct, self.tolerance_plus_pct, self.rated_voltage_v)
        if None in required or self.frequency_hz is None:
            return  # a missing figure is the field's own error
        errors = first_problem_by_field(
            part_problems(
                *required,
                self.frequency_hz,
                self.max_case_temperature_c if self.max_case_temperature_c is not None else np.nan,
                self.max_dissipation_factor if self.max_dissipation_factor is not None else np.nan,
                float(self.unit_cost) if self.unit_cost is not None else np.nan,
                self.tempco_ppm_per_k if self.tempco_ppm_per_k is not None else np.nan,
                dielectric=self.dielectric,
            )
        )
        if errors:
            raise ValidationError(errors)

    @property
    def lower_limit_uf(self) -> float:
        return self.rated_uf * (1 - self.tolerance_minus_pct / 100)

    @property
    def upper_limit_uf(self) -> float:
        return self.rated_uf * (1 + self.tolerance_plus_pct / 100)


class FittedCapacitor(models.Model):
    """One capacitor fitted to one motor, from fitting to removal: a life-data point."""

    class Role(models.TextChoices):
        START = ROLE_START, "Start"
        RUN = ROLE_RUN, "Run"

    class RemovalReason(models.TextChoices):
        FAILED = "failed", "Failed in service"
        PLANNED = "planned", "Replaced on plan"
        OTHER = "other", "Other"

    motor = models.ForeignKey(Motor, on_delete=models.PROTECT, related_name="capacitors")
    role = models.CharField(max_length=5, choices=Role.choices)
    part = models.ForeignKey(CapacitorPart, on_delete=models.PROTECT, related_name="fitted")
    serial = models.CharField(max_length=60, blank=True, help_text="Serial or date code")
    fitted_on = models.DateField()
    removed_on = models.DateField(null=True, blank=True)
    removal_reason = models.CharField(max_length=10, choices=RemovalReason.choices, blank=True)
    notes = models.TextField(blank=True)
    substitute_override = models.BooleanField(
        default=False, help_text="Fitted against the substitute advice (marginal or unsuitable), by a person's choice"
    )
    override_reason = models.TextField(blank=True, help_text="Why the advice was overridden")

    class Meta:
        ordering = ["motor__asset_tag", "role", "-fitted_on"]
        constraints = [
            models.UniqueConstraint(
                fields=["motor", "role"],
                condition=Q(removed_on__isnull=True),
                name="one_active_capacitor_per_role",
                violation_error_message="This motor has a capacitor in service in this role already: "
                "give that one a removal date first.",
            ),
            models.CheckConstraint(
                condition=Q(removed_on__isnull=True) | Q(removed_on__gte=F("fitted_on")),
                name="removed_after_fitted",
                violation_error_message="The removal date cannot be before the fitting date.",
            ),
            models.CheckConstraint(
                condition=(Q(removed_on__isnull=True) & Q(removal_reason=""))
                | (Q(removed_on__isnull=False) & ~Q(removal_reason="")),
                name="removal_reason_with_removal",
                violation_error_message="A removal reason goes with a removal date: give both or neither.",
            ),
        ]
        indexes = [
            models.Index(fields=["motor", "role"]),
            # The dashboard's replacements this week: the few removed lately, not every capacitor.
            models.Index(
                fields=["removed_on", "removal_reason"],
                condition=Q(removed_on__isnull=False),
                name="capacitor_removals",
            ),
            # The stand-in parts page's first capacitor of each design: a part and role's in service, by id.
            models.Index(
                fields=["part", "role", "id"], condition=Q(removed_on__isnull=True), name="in_service_by_part"
            ),
            # The engineer's list of parts fitted against the advice and still in service: a few, newest first.
            models.Index(
                fields=["-fitted_on", "-id"],
                condition=Q(removed_on__isnull=True, substitute_override=True),
                name="in_service_against_advice",
            ),
        ]

    CONSTRAINT_FIELDS = {"removed_after_fitted": "removed_on", "removal_reason_with_removal": "removal_reason"}

    def __str__(self):
        return f"{self.motor.asset_tag} {self.role} {self.part.code}"

    def _fitting_rules(self):
        """The fitting rules the register import applies (`rules.fitting_problems`), for the admin."""
        if self.part_id is None or self.motor_id is None:
            return
        part, motor = self.part, self.motor
        electrolytic_run, under_voltage = fitting_problems(
            [self.role], [part.dielectric], [part.rated_voltage_v], [motor.rated_voltage_v]
        )
        if electrolytic_run[0]:
            raise ValidationError({"part": f"{part.code} {ELECTROLYTIC_RUN_WORDS}"})
        if under_voltage[0]:
            raise ValidationError(
                {
                    "part": f"{part.code} is rated {part.rated_voltage_v:g} V, below this motor's "
                    f"{motor.rated_voltage_v:g} V {UNDER_VOLTAGE_WORDS}"
                }
            )

    @property
    def in_service(self) -> bool:
        return self.removed_on is None

    def readings_after(self, day):
        """Readings taken after `day` ended at the motor's site (its local midnight): a reading taken
        during the removal day is the removed capacitor's."""
        next_day = dt.datetime.combine(
            day + dt.timedelta(days=1), dt.time(), tzinfo=site_zone(self.motor.site.time_zone)
        )
        return self.readings.filter(taken_at__gte=next_day)

    def clean(self):
        """Service dates no record has (the history import's rule), a removal date earlier than a reading of
        this capacitor (the trigger holds it too), and a fitting date later than one (an audit moved a fitting
        date past sixteen readings in the admin, the refit judging them as read before the capacitor was there)
        are refused at their field."""
        super().clean()
        self._fitting_rules()
        if self.fitted_on is not None:
            errors = first_problem_by_field(
                service_date_problems(self.fitted_on, self.removed_on or "NaT", timezone.localdate())
            )
            if errors:
                raise ValidationError(errors)
        if self.pk and self.fitted_on is not None:
            zone = site_zone(self.motor.site.time_zone)
            fitting_day = dt.datetime.combine(self.fitted_on, dt.time(), tzinfo=zone)
            earlier = self.readings.filter(taken_at__lt=fitting_day).order_by("taken_at").first()
            if earlier is not None:
                raise ValidationError(
                    {
                        "fitted_on": f"This capacitor has readings before {self.fitted_on} (the first on "
                        f"{timezone.localtime(earlier.taken_at, zone):%Y-%m-%d}, site time): the fitting date cannot "
                        "be later."
                    }
                )
        if self.pk and self.removed_on is not None:
            later = self.readings_after(self.removed_on).order_by("-taken_at").first()
            if later is not None:
                zone = site_zone(self.motor.site.time_zone)
                raise ValidationError(
                    {
                        "removed_on": f"This capacitor has readings after {self.removed_on} "
                        f"(the last on {timezone.localtime(later.taken_at, zone):%Y-%m-%d}, site time): "
                        "the removal date cannot be earlier."
                    }
                )


class SiteStock(models.Model):
    """Spare capacitors of one part held at one site (kept by the planner, used by replacements)."""

    site = models.ForeignKey(Site, on_delete=models.CASCADE, related_name="stock")
    part = models.ForeignKey(CapacitorPart, on_delete=models.PROTECT, related_name="stock")
    quantity = models.IntegerField(default=0)

    CONSTRAINT_FIELDS = {"stock_quantity_not_negative": "quantity"}
    # More spares of one part than any site's store holds is a typing slip (ours); the stock page's rule too.
    MAX_QUANTITY = 99999

    class Meta:
        ordering = ["site__code", "part__code"]
        verbose_name_plural = "site stock"
        constraints = [
            models.UniqueConstraint(fields=["site", "part"], name="one_stock_row_per_site_and_part"),
            models.CheckConstraint(
                condition=Q(quantity__gte=0),
                name="stock_quantity_not_negative",
                violation_error_message="The quantity cannot be below zero.",
            ),
        ]

    def __str__(self):
        return f"{self.site.code} {self.part.code}: {self.quantity}"

    def clean(self):
        """A quantity past any store is refused at its field, by the stock page's rule."""
        super().clean()
        if self.quantity is not None and self.quantity > self.MAX_QUANTITY:
            raise ValidationError({"quantity": f"{self.quantity} is not a whole number from 0 to {self.MAX_QUANTITY}."})


class SiteDayOff(models.Model):
    """A day a site does no maintenance visits (a local public holiday, a shutdown): the plan dates no visit on
    it and a visit cannot be moved onto it. Kept by the planner, per site: holidays are local."""

    site = models.ForeignKey(Site, on_delete=models.CASCADE, related_name="days_off")
    day = models.DateField()
    name = models.CharField(max_length=80, help_text="What the day is, e.g. a public holiday's name or 'shutdown'")

    class Meta:
        ordering = ["site__code", "day"]
        verbose_name = "day off"
        verbose_name_plural = "days off"
        constraints = [
            models.UniqueConstraint(
                fields=["site", "day"],
                name="one_day_off_per_site_and_day",
                violation_error_message="That day is a day off at this site already.",
            )
        ]

    def __str__(self):
        return f"{self.site.code} {self.day.isoformat()} {self.name}"

    def clean(self):
        """A day off added or moved to another day keeps to the days-off page's and the import's rule
        (`planning.day_off_problems`: from today to the plan's reach, a working day); one kept as it was stays."""
        super().clean()
        if self.day is None:
            return
        before = SiteDayOff.objects.filter(pk=self.pk).values_list("day", flat=True).first() if self.pk else None
        if self.day != before:
            problem = day_off_problems([self.day], timezone.localdate(), PlanningSettings().working_days)[0]
            if problem:
                raise ValidationError({"day": f"{self.day:%A} {self.day.isoformat()}: {problem}."})


class Reading(models.Model):
    """One measurement, append-only. A correction is a new reading that supersedes."""

    MEASURED_FIELDS = (
        "capacitance_uf",
        "capacitor_current_a",
        "capacitor_voltage_v",
        "line_voltage_v",
        "main_current_a",
        "aux_current_a",
        "line_current_a",
        "case_temperature_c",
        "ambient_temperature_c",
        "esr_ohm",
    )

    class Method(models.TextChoices):
        METER = METHOD_METER, "Capacitance meter (isolated)"
        IN_CIRCUIT = METHOD_IN_CIRCUIT, "In circuit (current and voltage)"

    class Condition(models.TextChoices):
        SOUND = CONDITION_SOUND, "No visible defect"
        BULGED = "bulged", "Bulged or raised top"
        LEAKING = "leaking", "Leaking"
        VENTED = "vented", "Vented"

    class Source(models.TextChoices):
        FORM = "form", "Reading form"
        API = "api", "API"
        IMPORT = "import", "File import"
        DEMO = "demo", "Demo data"
        REGISTER = "register", "Register (admin)"

    # No index of its own: the index on (fitted_capacitor, taken_at) serves every lookup by capacitor,
    # and one index fewer makes every import's write cheaper.
    fitted_capacitor = models.ForeignKey(
        FittedCapacitor, on_delete=models.PROTECT, related_name="readings", db_index=False
    )
    taken_at = models.DateTimeField()
    taken_by = models.ForeignKey(settings.AUTH_USER_MODEL, null=True, blank=True, on_delete=models.PROTECT)
    method = models.CharField(max_length=12, choices=Method.choices)
    capacitance_uf = models.FloatField(verbose_name="capacitance (µF)")
    capacitor_current_a = models.FloatField(verbose_name="capacitor current (A)", null=True, blank=True)
    capacitor_voltage_v = models.FloatField(verbose_name="capacitor voltage (V)", null=True, blank=True)
    line_voltage_v = models.FloatField(verbose_name="line voltage (V)", null=True, blank=True)
    main_current_a = models.FloatField(verbose_name="main-winding current (A)", null=True, blank=True)
    aux_current_a = models.FloatField(verbose_name="auxiliary-winding current (A)", null=True, blank=True)
    line_current_a = models.FloatField(verbose_name="line current (A)", null=True, blank=True)
    case_temperature_c = models.FloatField(verbose_name="case temperature (°C)", null=True, blank=True)
    ambient_temperature_c = models.FloatField(verbose_name="ambient temperature (°C)", null=True, blank=True)
    esr_ohm = models.FloatField(verbose_name="ESR (Ω)", null=True, blank=True)
    condition = models.CharField(max_length=10, choices=Condition.choices, default=Condition.SOUND)
    notes = models.TextField(blank=True)
    outlier_confirmed = models.BooleanField(
        default=False, help_text="Far off the trend, re-checked and confirmed by the technician"
    )
    supersedes = models.OneToOneField(
        "self", null=True, blank=True, on_delete=models.PROTECT, related_name="superseded_by"
    )
    source = models.CharField(max_length=10, choices=Source.choices, default=Source.FORM)
    import_key = models.CharField(max_length=64, null=True, blank=True, unique=True)
    client_key = models.CharField(
        max_length=64,
        null=True,
        blank=True,
        unique=True,
        help_text="The form's one-time key or the API client's idempotency key: sent twice, saved once",
    )
    created_at = models.DateTimeField(auto_now_add=True)

    CONSTRAINT_FIELDS = {
        "reading_capacitance_not_negative": "capacitance_uf",
        "reading_capacitance_finite": "capacitance_uf",
        "in_circuit_needs_current_and_voltage": "capacitor_current_a",
        "reading_case_temperature_range": "case_temperature_c",
        **{name: field for field, _, _, name, _ in FINITE_READINGS},
        "reading_notes_bounded": "notes",
    }

    class Meta:
        ordering = ["fitted_capacitor_id", "taken_at", "id"]
        constraints = [
            # 0 is a meter that shows no capacitance: an open capacitor, kept as read (rules.OPEN_CAPACITOR_WORDS).
            models.CheckConstraint(
                condition=Q(capacitance_uf__gte=0),
                name="reading_capacitance_not_negative",
                violation_error_message="Capacitance must be 0 µF or more.",
            ),
            models.CheckConstraint(
                condition=Q(capacitance_uf__lt=FINITE_BOUND),
                name="reading_capacitance_finite",
                violation_error_message="Capacitance must be a finite number.",
            ),
            models.CheckConstraint(
                condition=Q(method=METHOD_METER)
                | (Q(capacitor_current_a__isnull=False) & Q(capacitor_voltage_v__isnull=False)),
                name="in_circuit_needs_current_and_voltage",
                violation_error_message="An in-circuit reading needs the capacitor current and the capacitor voltage.",
            ),
            models.CheckConstraint(
                condition=Q(case_temperature_c__isnull=True)
                | Q(case_temperature_c__gte=-40, case_temperature_c__lte=150),
                name="reading_case_temperature_range",
            ),
            *(
                models.CheckConstraint(
                    condition=finite(field, lowest, above=above), name=name, violation_error_message=message
                )
                for field, lowest, above, name, message in FINITE_READINGS
            ),
            models.CheckConstraint(
                condition=LessThanOrEqual(Length("notes"), NOTES_MAX_CHARS),
                name="reading_notes_bounded",
                violation_error_message=f"Notes take at most {NOTES_MAX_CHARS} characters.",
            ),
        ]
        indexes = [
            models.Index(fields=["fitted_capacitor", "taken_at"]),
            # The refits page counts stale capacitors among the readings saved since the last fleet refit.
            models.Index(fields=["created_at"], name="reading_by_created_at"),
            # The dashboard counts the readings taken in the last week: a range of this index, not every reading;
            # with the id in it (PostgreSQL) the count and its test that no later reading corrects each one read the
            # index alone (at 600,000 readings, 10,000 of them in the week: 28 -> 12 ms warm, 111 ms cold before).
            models.Index(fields=["taken_at"], include=["id"], name="reading_by_taken_at"),
        ]

    def __str__(self):
        return f"{self.fitted_capacitor} {self.taken_at:%Y-%m-%d} {self.capacitance_uf:.2f} µF"

    def clean(self):
        """A correction replaces a reading of the same capacitor (the form's and the API's rule,
        `readings.reading_to_correct`): in the admin, one of another capacitor's readings was taken
        out of that capacitor's trend without a word."""
        super().clean()
        corrected = self.supersedes
        if (
            corrected is not None
            and self.fitted_capacitor_id
            and corrected.fitted_capacitor_id != self.fitted_capacitor_id
        ):
            raise ValidationError({"supersedes": f"Reading {corrected.id} is not a reading of this capacitor."})


def choices_of(name: str, values) -> type[models.TextChoices]:
    """TextChoices over a fixed set of the core's names, each its own label with a capital."""
    return models.TextChoices(
        name, [(value.upper().replace(" ", "_").replace("-", "_"), (value, value.capitalize())) for value in values]
    )


class TrendModel(models.TextChoices):
    """The trend forms the core fits (fleet/engineering/trends.py)."""

    LINEAR = MODEL_LINEAR, "Linear"
    LOG_LINEAR = MODEL_LOG, "Log-linear"


class PathShape(models.TextChoices):
    """Whether a family's paths are fitted with a bend (fleet/engineering/trends.py)."""

    BENT = PATH_BENT, "Bent"
    STRAIGHT = PATH_STRAIGHT, "Straight"


IN_SERVICE = Q(is_current=True, capacitor_in_service=True)  # an assessment the plans and lists show


def kept_by_triggers(model, help_text: str) -> models.ForeignKey:
    """A copy of a related row's key that database triggers keep true, for lists that aggregate
    without a join: no foreign-key constraint or index of its own (partial indexes read it)."""
    return models.ForeignKey(
        model,
        null=True,
        blank=True,
        editable=False,
        on_delete=models.DO_NOTHING,
        db_constraint=False,
        db_index=False,
        related_name="+",
        help_text=help_text,
    )


class WrittenJSONField(models.JSONField):
    """JSON kept as the text written (PostgreSQL's json type, not jsonb): for documents written in bulk
    and read whole, never searched by key. The server only checks the text (a refit chunk's COPY parsed
    four jsonb columns for about 20 ms of its CPU); read as text and parsed here, as a jsonb column is."""

    def db_type(self, connection):
        return "json" if connection.vendor == "postgresql" else super().db_type(connection)

    def select_format(self, compiler, sql, params):
        sql, params = super().select_format(compiler, sql, params)
        if compiler.connection.vendor == "postgresql":
            return f"({sql})::text", params
        return sql, params


class Assessment(models.Model):
    """A stored fit and plan for one fitted capacitor; a new row per refit."""

    class Risk(models.TextChoices):
        """The core's risk levels (fleet/engineering/planning.py), most urgent first."""

        REPLACE_NOW = RISK_REPLACE_NOW, "Replace now"
        DUE_SOON = RISK_DUE_SOON, "Due soon"
        WATCH = RISK_WATCH, "Watch"
        SOUND = RISK_SOUND, "Sound"

    # The latest reading against the part's marking (fleet/engineering/capacitor.py).
    Verdict = choices_of("Verdict", VERDICT_NAMES.values())
    # The limit that sets the date: tolerance, an operating-point limit (drift.py) or the dissipation factor.
    LimitSource = choices_of("LimitSource", (TOLERANCE_LIMIT, *LIMIT_NAMES, DISSIPATION_LIMIT))

    # Indexed with the time each was made (`assessment_capacitor_made`, below), not alone.
    fitted_capacitor = models.ForeignKey(
        FittedCapacitor, on_delete=models.CASCADE, related_name="assessments", db_index=False
    )
    is_current = models.BooleanField(default=True)
    model_version = models.CharField(max_length=20)
    fitted_through = models.DateTimeField(help_text="Time of the newest reading used")
    # No constraint in the database: readings are append-only (triggers refuse UPDATE and DELETE), and
    # checking it locked and dirtied the newest reading of every capacitor a refit wrote. No index
    # either: nothing looks assessments up by it, and each refit wrote two entries a capacitor.
    newest_reading = models.ForeignKey(
        Reading, null=True, on_delete=models.SET_NULL, related_name="+", db_constraint=False, db_index=False
    )
    max_reading_id = models.BigIntegerField(
        default=0, help_text="Highest reading id seen by this fit: a reading added later makes it stale"
    )
    readings_used = models.PositiveIntegerField()
    visits_used = models.PositiveIntegerField(
        null=True, blank=True, help_text="The visits those readings came from (one day's readings count as one)"
    )
    readings_flagged = models.PositiveIntegerField(default=0)
    flagged_reading_ids = WrittenJSONField(default=list, blank=True)
    trend_model = models.CharField(max_length=12, choices=TrendModel.choices)
    slope_pct_per_1000h = models.FloatField(verbose_name="slope (% of rated per 1000 stress-hours)")
    slope_sd_pct_per_1000h = models.FloatField(verbose_name="slope's standard error (% of rated per 1000 stress-hours)")
    low_confidence = models.BooleanField(default=False)
    capacitance_now_uf = models.FloatField(verbose_name="capacitance now, at 25 °C (µF)")
    latest_verdict = models.CharField(max_length=40, choices=Verdict.choices)
    limit_fraction = models.FloatField()
    limit_source = models.CharField(max_length=40, choices=LimitSource.choices)
    p10_on = models.DateField(null=True, blank=True)
    p50_on = models.DateField(null=True, blank=True)
    p90_on = models.DateField(null=True, blank=True)
    risk = models.CharField(max_length=20, choices=Risk.choices)
    replace_by = models.DateField(null=True, blank=True)
    reason = models.CharField(max_length=300, blank=True, help_text="Why this risk level and date, in words")
    # Nullable so the column is added without rebuilding the table (and its triggers) on SQLite.
    read_again = models.BooleanField(
        null=True,
        blank=True,
        help_text="The plan says read it again before replacing (planning.read_again); empty: judged before this "
        "was stored",
    )
    limits = WrittenJSONField(
        default=list, blank=True, help_text="Every limit evaluated: name, fraction of rated, P10/P50/P90 dates"
    )
    set_aside = models.CharField(
        max_length=200, blank=True, help_text="Why no forecast could be made (e.g. a fit that is not finite)"
    )
    # No operating figures are stored: the capacitor page and the API work them out on reading
    # (`operating_pictures.with_operating_figures`) from the motor's circuit and `capacitance_now_uf`.
    # The fitted path in stress hours (none where set aside): the capacitor page redraws it and its band
    # against that capacitor's readings, whose stress hours it recomputes (trends.reading_stress_hours).
    trend_intercept = models.FloatField(null=True, blank=True)
    trend_slope_per_hour = models.FloatField(null=True, blank=True)
    trend_var_intercept = models.FloatField(null=True, blank=True)
    trend_cov_intercept_slope = models.FloatField(null=True, blank=True)
    trend_var_slope = models.FloatField(null=True, blank=True)
    trend_curvature = models.FloatField(
        null=True, blank=True, help_text="Bend of the fitted path per stress hour squared (0: straight)"
    )
    trend_noise_sd = models.FloatField(null=True, blank=True)
    stress_hours_now = models.FloatField(null=True, blank=True, help_text="Stress hours at the newest reading")
    stress_rate = models.FloatField(null=True, blank=True, help_text="Stress hours per calendar hour, long run")
    tempco_ppm_per_k = models.FloatField(null=True, blank=True, help_text="Temperature coefficient used, ppm/K")
    calibration_terms = WrittenJSONField(
        null=True,
        blank=True,
        help_text="The band calibration's six terms this forecast was made with (BandCalibration's fields), "
        "so the page draws the same calibrated path its dates come from",
    )
    capacitor_in_service = models.BooleanField(
        default=True,
        db_default=True,
        editable=False,
        help_text="Its capacitor has no removal date: kept by database triggers, so lists need no join",
    )
    risk_was = models.CharField(
        max_length=20,
        blank=True,
        db_default="",
        help_text="The risk level before its latest change; empty if it never changed",
    )
    risk_changed_at = models.DateTimeField(
        null=True, blank=True, help_text="When the risk level took its present value (carried over by later refits)"
    )
    # Null, not a default: adding a column with a default rebuilds the table on SQLite, which drops its triggers.
    limit_was = models.CharField(  # noqa: DJ001
        max_length=40,
        null=True,
        blank=True,
        help_text="The governing limit before the risk level's latest change (carried as risk_was is); empty if it "
        "never changed",
    )
    # Its capacitor's site and part, kept by database triggers (migration 0020), so the plan's spares,
    # the risk counts and the dashboard aggregate one table's index instead of joining every capacitor.
    site = kept_by_triggers(Site, "Its capacitor's motor's site; kept by database triggers")
    part = kept_by_triggers(CapacitorPart, "Its capacitor's part; kept by database triggers")
    # Its capacitor's fitting date, kept the same way (migration 0023): the spares forecast's ages.
    fitted_on = models.DateField(
        null=True, blank=True, editable=False, help_text="Its capacitor's fitting date; kept by database triggers"
    )
    # Its capacitor's motor's place on the site's reading route (migration 0034): the plan lists a day's
    # replacements in walking order from an index of the assessments instead of joining every one's motor.
    route_order = models.IntegerField(
        null=True,
        blank=True,
        editable=False,
        help_text="Its capacitor's motor's route order (Motor.route_order); kept by database triggers while current",
    )
    created_at = models.DateTimeField(auto_now_add=True)

    class Meta:
        ordering = ["-created_at"]
        constraints = [
            models.UniqueConstraint(
                fields=["fitted_capacitor"], condition=Q(is_current=True), name="one_current_assessment"
            ),
        ]
        # Each partial index on current assessments costs every refit an entry a capacitor (about 7 ms of
        # server CPU a 2,000-capacitor chunk): only the ones the pages read are kept (migration 0051).
        indexes = [
            # The plan and the API: current assessments soonest first, read a page at a time; totals by
            # date, site, part, risk and fitting date (plan spares, dashboard workload and spares), index only.
            models.Index(
                fields=["replace_by", "fitted_capacitor"],
                include=["site", "part", "risk", "fitted_on"],
                condition=IN_SERVICE,
                name="in_service_totals",
            ),
            # The work-orders page's and the dashboard's count of capacitors to replace now without an order
            # (`workorders.replace_now_without_order`): a few rows, so a cheap entry for the refit (it scanned
            # 150,000 current assessments, 48 ms at 100,000 motors, without it).
            models.Index(
                fields=["fitted_capacitor"],
                condition=IN_SERVICE & Q(risk="replace now"),
                name="in_service_replace_now",
            ),
            # The plan's "changed in the last 7 days": only the capacitors whose risk moved.
            models.Index(fields=["risk_changed_at"], condition=IN_SERVICE, name="in_service_by_risk_change"),
            # And each of those capacitors' level at the window's start, its newest assessment made before then
            # (`pages.with_level_then`): one entry, not all its kept assessments (migration 0070). It serves every
            # look-up by capacitor too, in place of the foreign key's own index.
            models.Index(fields=["fitted_capacitor", "created_at"], name="assessment_capacitor_made"),
            # The plan and home: a day's replacements by site and walking order, read a page at a time.
            models.Index(
                fields=["replace_by", "site", "route_order", "fitted_capacitor"],
                condition=IN_SERVICE,
                name="in_service_walking_order",
            ),
        ]

    def __str__(self):
        return f"{self.fitted_capacitor} {self.risk}"

    @property
    def has_trend(self) -> bool:
        return self.trend_intercept is not None

    @property
    def few_readings_matter(self) -> bool:
        """Few readings, and the risk rests on the trend they give (not on a reading below, a defect, an open
        circuit): the lists say "few readings" beside it."""
        return self.low_confidence and (
            self.risk != RISK_REPLACE_NOW or (self.reason or "").startswith(PATH_BELOW_REASON)
        )


class PartPrior(models.Model):
    """A part's population of ageing paths, fitted across the fleet (empirical Bayes)."""

    part = models.OneToOneField(CapacitorPart, on_delete=models.CASCADE, related_name="prior")
    trend_model = models.CharField(max_length=12, choices=TrendModel.choices)
    intercept_mean = models.FloatField()
    intercept_var = models.FloatField()
    slope_mean = models.FloatField()
    slope_var = models.FloatField()
    noise_var = models.FloatField()
    capacitors = models.PositiveIntegerField()
    tempco_ppm_per_k = models.FloatField(default=0.0, help_text="Temperature coefficient used for the part, ppm/K")
    curvature_per_h2 = models.FloatField(
        default=0.0, help_text="Common bend c of the part's paths z = b0 + b1 tau + c tau^2, per stress hour squared"
    )
    curvature_var = models.FloatField(default=0.0, help_text="Variance of the bend between the part's capacitors")
    slope_per_age = models.FloatField(
        default=0.0, help_text="Change of the prior slope b1 per stress hour of the readings' mean age"
    )
    voltage_ratio = models.FloatField(
        null=True,
        blank=True,
        help_text="Median measured capacitor voltage / rated, for capacitors never read in circuit",
    )
    stress_rate = models.FloatField(
        null=True,
        blank=True,
        help_text="Typical long-run stress hours per calendar hour of the part's capacitors read over a year: "
        "a young capacitor's future runs mostly at it",
    )
    stress_rate_log_var = models.FloatField(
        null=True, blank=True, help_text="Variance of the log long-run stress rates between the part's capacitors"
    )
    reading_log_var = models.FloatField(
        null=True,
        blank=True,
        help_text="Variance of a reading's log ageing factor about its capacitor's mean (seasons, day, duty)",
    )
    bend_slope_mean = models.FloatField(
        default=0.0, help_text="Mean of the capacitors' own slopes at their readings' centre, per stress hour"
    )
    bend_slope_var = models.FloatField(default=0.0, help_text="Variance of those slopes between the part's capacitors")
    bend_slope_cov = models.FloatField(
        default=0.0, help_text="Covariance of the bend with that slope between the part's capacitors (0: bend alone)"
    )
    updated_at = models.DateTimeField(auto_now=True)

    def __str__(self):
        return f"prior of {self.part_id} ({self.trend_model}, {self.capacitors} capacitors)"


class WorkOrder(models.Model):
    class Kind(models.TextChoices):
        REPLACE_START = "replace_start", "Replace start capacitor"
        REPLACE_RUN = "replace_run", "Replace run capacitor"
        INSPECT = "inspect", "Inspect"
        READ_AGAIN = "read_again", "Read again; replace if past its limit"

    class State(models.TextChoices):
        PLANNED = "planned", "Planned"
        ISSUED = "issued", "Issued"
        DONE = "done", "Done"
        CANCELLED = "cancelled", "Cancelled"

    OPEN_STATES = (State.PLANNED, State.ISSUED)  # still to do: the work-orders page, a route's "read again"

    motor = models.ForeignKey(Motor, on_delete=models.PROTECT, related_name="work_orders")
    site = models.ForeignKey(
        Site,
        null=True,
        blank=True,
        editable=False,
        on_delete=models.PROTECT,
        related_name="+",
        help_text="The motor's site; kept by database triggers",
    )
    fitted_capacitor = models.ForeignKey(
        FittedCapacitor, null=True, blank=True, on_delete=models.PROTECT, related_name="work_orders"
    )
    kind = models.CharField(max_length=20, choices=Kind.choices)
    due_on = models.DateField()
    window_days = models.PositiveIntegerField(default=14)
    state = models.CharField(max_length=10, choices=State.choices, default=State.PLANNED)
    reason = models.CharField(max_length=200, blank=True)
    created_by = models.ForeignKey(
        settings.AUTH_USER_MODEL, null=True, blank=True, on_delete=models.SET_NULL, related_name="+"
    )
    created_at = models.DateTimeField(auto_now_add=True)
    closed_by = models.ForeignKey(
        settings.AUTH_USER_MODEL, null=True, blank=True, on_delete=models.SET_NULL, related_name="+"
    )
    closed_at = models.DateTimeField(null=True, blank=True)
    # Null allowed so that SQLite adds these columns in place: rebuilding the table would drop its triggers.
    cancel_reason = models.CharField(  # noqa: DJ001
        max_length=200, null=True, blank=True, help_text="Why the planner cancelled it, in their words"
    )
    moved_from = models.DateField(
        null=True,
        blank=True,
        help_text="The day the plan put its visit on before the planner moved it (a re-plan keeps the move)",
    )
    # Its motor's place on the route and tag, and its capacitor's part, kept by database triggers
    # (migration 0035): the work-orders page and the visit sheet walk a visit's orders and count its
    # spares from the open orders' index instead of looking up every order's motor and capacitor.
    route_order = models.IntegerField(
        null=True, blank=True, editable=False, help_text="Its motor's route order; kept by database triggers"
    )
    # Null allowed so that SQLite adds the column in place: rebuilding the table would drop its triggers.
    asset_tag = models.CharField(  # noqa: DJ001
        max_length=40,
        null=True,
        blank=True,
        editable=False,
        help_text="Its motor's asset tag; kept by database triggers",
    )
    part = kept_by_triggers(CapacitorPart, "Its capacitor's part (none for an inspection); kept by database triggers")

    class Meta:
        ordering = ["due_on", "motor__asset_tag"]
        constraints = [
            models.UniqueConstraint(
                fields=["fitted_capacitor", "kind"],
                condition=Q(state__in=["planned", "issued"]),
                name="one_open_order_per_capacitor_and_kind",
            ),
            models.CheckConstraint(
                condition=Q(state__in=["done", "cancelled"], closed_at__isnull=False)
                | Q(state__in=["planned", "issued"], closed_at__isnull=True),
                name="closed_orders_have_close_time",
            ),
        ]
        # The work-orders page: open orders by visit (day, site), a page of visits at a time, each visit's
        # orders in walking order and its spares by part, from the index alone.
        indexes = [
            models.Index(
                fields=["due_on", "site", "route_order", "asset_tag", "id"],
                include=["part"],
                condition=Q(state__in=["planned", "issued"]),
                name="open_orders_by_visit_walk",
            ),
            # A visit's closed orders, listed at the foot of every visit sheet (`workorders.closed_visit`): years
            # of done and cancelled orders at a site, read by visit, not by site.
            models.Index(
                fields=["site", "due_on"], condition=~Q(state__in=["planned", "issued"]), name="closed_orders_by_visit"
            ),
        ]

    def __str__(self):
        return f"{self.get_kind_display()} {self.motor.asset_tag} by {self.due_on}"

    @property
    def reads_again(self) -> bool:
        """The order asks for a reading first (replace only if past its limit)."""
        return self.kind == self.Kind.READ_AGAIN

    @property
    def not_issued(self) -> bool:
        """Planned, not handed to the technicians yet: the planner may still move or cancel it."""
        return self.state == self.State.PLANNED

    def clean(self):
        """A due date past the plan's reach or a visit window no plan makes is refused at its field."""
        super().clean()
        if self.due_on is not None and self.window_days is not None:
            errors = first_problem_by_field(
                work_order_problems(self.due_on, self.window_days, timezone.localdate(), self.moved_from)
            )
            if errors:
                raise ValidationError(errors)


class RefitRun(models.Model):
    """Progress of a fleet refit, visible on a page in eager mode too.

    `done` and `readings` are sums over the run's RefitChunk rows, advanced only
    when a chunk's row is first written, so a chunk delivered twice counts once.
    A run whose progress has not moved for longer than a chunk may take is
    marked abandoned (its worker was lost); a rerun picks up what it left.
    """

    class State(models.TextChoices):
        QUEUED = "queued", "Queued"
        RUNNING = "running", "Running"
        DONE = "done", "Done"
        FAILED = "failed", "Failed"
        ABANDONED = "abandoned", "Abandoned"

    kind = models.CharField(max_length=20, default="fleet")
    state = models.CharField(max_length=10, choices=State.choices, default=State.RUNNING)
    total = models.PositiveIntegerField(default=0)
    done = models.PositiveIntegerField(default=0)
    readings = models.PositiveIntegerField(default=0)
    started_at = models.DateTimeField(auto_now_add=True)
    progress_at = models.DateTimeField(null=True, blank=True, help_text="When a chunk last finished, or the run began")
    finished_at = models.DateTimeField(null=True, blank=True)
    message = models.TextField(blank=True)

    class Meta:
        ordering = ["-started_at"]
        indexes = [models.Index(fields=["-started_at"], name="refit_run_newest_first")]

    def __str__(self):
        return f"{self.kind} refit {self.started_at:%Y-%m-%d %H:%M} ({self.state})"

    @property
    def percent(self) -> int:
        return int(100 * self.done / self.total) if self.total else (100 if self.state == "done" else 0)


class RefitChunk(models.Model):
    """One finished chunk of a refit run; unique by number, so a redelivery adds nothing."""

    run = models.ForeignKey(RefitRun, on_delete=models.CASCADE, related_name="chunks")
    number = models.PositiveIntegerField()
    capacitors = models.PositiveIntegerField()
    readings = models.PositiveIntegerField(default=0)
    finished_at = models.DateTimeField(auto_now_add=True)

    class Meta:
        constraints = [models.UniqueConstraint(fields=["run", "number"], name="refit_chunk_once")]

    def __str__(self):
        return f"chunk {self.number} of run {self.run_id}"


class ImportJob(models.Model):
    """One uploaded file on its way in: mapping, dry run, then the import itself."""

    class Kind(models.TextChoices):
        READINGS = "readings", "Readings"
        REGISTER = "register", "Motor register"
        SITES = "sites", "Sites"
        PARTS = "parts", "Capacitor parts"
        HISTORY = "history", "Past fitted capacitors"
        DAYS_OFF = "days_off", "Days off at sites"

    class Mode(models.TextChoices):
        ALL_OR_NOTHING = "all", "All or nothing"
        GOOD_ROWS = "good", "Good rows only"

    class State(models.TextChoices):
        RECEIVED = "received", "Reading the file"
        UPLOADED = "uploaded", "Uploaded"
        CHECKING = "checking", "Checking"
        CHECKED = "checked", "Checked"
        IMPORTING = "importing", "Importing"
        DONE = "done", "Imported"
        REFUSED = "refused", "Refused"
        FAILED = "failed", "Failed"

    kind = models.CharField(max_length=10, choices=Kind.choices)
    filename = models.CharField(max_length=200)
    content = models.BinaryField()
    columns = models.JSONField(default=list)
    mapping = models.JSONField(default=dict, blank=True)
    mode = models.CharField(max_length=5, choices=Mode.choices, blank=True)
    state = models.CharField(max_length=10, choices=State.choices, default=State.RECEIVED)
    total_rows = models.PositiveIntegerField(default=0)
    done_rows = models.PositiveIntegerField(default=0)
    good_rows = models.PositiveIntegerField(default=0)
    duplicate_rows = models.PositiveIntegerField(default=0)
    error_rows = models.PositiveIntegerField(default=0)
    imported_rows = models.PositiveIntegerField(default=0)
    errors = models.JSONField(default=list, blank=True, help_text="[row, field, message] of the first problems")
    open_visits = models.JSONField(
        default=list, blank=True, help_text="[site code, day, open orders] of the open visits on the days off it holds"
    )
    message = models.TextField(blank=True)
    created_by = models.ForeignKey(settings.AUTH_USER_MODEL, null=True, on_delete=models.SET_NULL, related_name="+")
    created_at = models.DateTimeField(auto_now_add=True)
    updated_at = models.DateTimeField(auto_now=True, help_text="Last change of state or progress")
    file_deleted_at = models.DateTimeField(
        null=True, blank=True, help_text="When the uploaded file was deleted (FLEET_IMPORT_FILE_DAYS); the report stays"
    )

    class Meta:
        ordering = ["-created_at"]
        # Who may bring in which kind of file, apart from who may add such records one by one.
        permissions = [
            ("import_readings", "Can import readings"),
            ("import_register", "Can import the motor register"),
            ("import_sites", "Can import sites"),
            ("import_parts", "Can import capacitor parts"),
            ("import_history", "Can import past fitted capacitors"),
            ("import_days_off", "Can import days off at sites"),
        ]

    def __str__(self):
        return f"{self.get_kind_display()} {self.filename}"

    @property
    def percent(self) -> int:
        return int(100 * self.done_rows / self.total_rows) if self.total_rows else 0


class Backtest(models.Model):
    """A forecast track record: refits at past cut-offs scored against what came after."""

    class State(models.TextChoices):
        RUNNING = "running", "Running"
        DONE = "done", "Done"
        FAILED = "failed", "Failed"

    state = models.CharField(max_length=10, choices=State.choices, default=State.RUNNING)
    cutoffs = models.JSONField(default=list, help_text="Cut-off dates, oldest first")
    done_cutoffs = models.PositiveIntegerField(default=0)
    results = models.JSONField(default=dict, blank=True, help_text="Scores per cut-off, dielectric and part")
    message = models.TextField(blank=True)
    started_at = models.DateTimeField(auto_now_add=True)
    finished_at = models.DateTimeField(null=True, blank=True)

    class Meta:
        ordering = ["-started_at"]

    def __str__(self):
        return f"back-test {self.started_at:%Y-%m-%d %H:%M} ({self.state})"

    @property
    def percent(self) -> int:
        return int(100 * self.done_cutoffs / len(self.cutoffs)) if self.cutoffs else 0


class BandCalibration(models.Model):
    """Calibration of forecast bands for one family of parts (a dielectric), from a back-test."""

    family = models.CharField(max_length=20, unique=True)
    slope_bias = models.FloatField(help_text="Future slope = fitted slope x (1 + bias) + extra slope")
    slope_spread = models.FloatField(help_text="Relative standard deviation of the future slope")
    extra_slope_per_h = models.FloatField(
        default=0.0, help_text="Common extra slope, fraction of rated per calendar hour"
    )
    extra_sd_per_h = models.FloatField(default=0.0, help_text="Its standard deviation, per calendar hour")
    acceleration_per_h = models.FloatField(
        default=0.0, help_text="Relative growth of a capacitor's own slope per calendar hour ahead"
    )
    trend_model = models.CharField(
        max_length=12,
        blank=True,
        choices=TrendModel.choices,
        help_text="Trend form with the smaller back-tested error (linear or log-linear)",
    )
    path_shape = models.CharField(
        max_length=10,
        blank=True,
        choices=PathShape.choices,
        help_text="Bent or straight paths, whichever projected the later readings better in the back-test",
    )
    curvature_per_h2 = models.FloatField(
        default=0.0, help_text="Common bend of the path, fraction of rated per calendar hour squared"
    )
    alert_quantile = models.FloatField(
        default=0.1, help_text="Crossing quantile the risk rule flags on, chosen by the back-test (0.1 = P10)"
    )
    alert_met_recall = models.BooleanField(
        null=True,
        help_text="Whether that level caught the year's share of crossings the rule asks (alert_min_recall) in the "
        "back-test; False: none did, so the most cautious; null: not scored (a back-test before this was kept)",
    )
    capacitors = models.PositiveIntegerField(default=0)
    residuals = models.PositiveIntegerField(default=0)
    backtest = models.ForeignKey(Backtest, null=True, on_delete=models.SET_NULL, related_name="+")
    updated_at = models.DateTimeField(auto_now=True)

    class Meta:
        constraints = [
            models.CheckConstraint(
                condition=Q(slope_spread__gte=0, slope_spread__lt=100), name="calibration_spread_sane"
            ),
            models.CheckConstraint(condition=Q(slope_bias__gt=-1, slope_bias__lt=100), name="calibration_bias_sane"),
            models.CheckConstraint(
                condition=Q(extra_sd_per_h__gte=0, extra_sd_per_h__lt=1), name="calibration_extra_sane"
            ),
        ]

    def __str__(self):
        return f"{self.family}: bias {self.slope_bias:+.2f}, spread {self.slope_spread:.2f}"


class SiteMembership(models.Model):
    """A user limited to the sites listed here; a user with none works at every site."""

    user = models.ForeignKey(settings.AUTH_USER_MODEL, on_delete=models.CASCADE, related_name="site_memberships")
    site = models.ForeignKey(Site, on_delete=models.CASCADE, related_name="memberships")

    class Meta:
        ordering = ["user__username", "site__code"]
        constraints = [models.UniqueConstraint(fields=["user", "site"], name="one_membership_per_user_and_site")]

    def __str__(self):
        return f"{self.user} at {self.site.code}"


class AuditEntry(models.Model):
    """One change to the register, users or roles: who, when, what, old -> new. Append-only.

    The user is kept as id and name (no foreign key), so deleting a user leaves their
    entries as they were written.
    """

    class Action(models.TextChoices):
        CREATE = "create", "Created"
        UPDATE = "update", "Changed"
        DELETE = "delete", "Deleted"

    at = models.DateTimeField(default=timezone.now, db_index=True)
    user_id = models.IntegerField(null=True, blank=True, help_text="Empty for the system (tasks, commands)")
    username = models.CharField(max_length=150, blank=True)
    model = models.CharField(max_length=100, db_index=True, help_text="app_label.model")
    object_id = models.CharField(max_length=64, db_index=True)
    object_repr = models.CharField(max_length=200, blank=True)
    action = models.CharField(max_length=6, choices=Action.choices)
    changes = models.JSONField(default=dict, blank=True, help_text="field: [old, new]")

    class Meta:
        ordering = ["-at", "-id"]
        verbose_name_plural = "audit entries"
        indexes = [
            # The day an update took a work order off (`workorders._redated_to`: where a visit's old address
            # leads): at a million entries a scan of the trail took a second, this index a millisecond.
            models.Index(
                KeyTransform("0", KeyTransform("due_on", "changes")),
                "at",
                name="order_taken_off_day",
                condition=Q(model="fleet.workorder", action="update"),
            ),
        ]

    def __str__(self):
        return f"{self.at:%Y-%m-%d %H:%M} {self.username or 'system'} {self.action} {self.model} {self.object_repr}"

    def save(self, *args, **kwargs):
        if not self._state.adding:
            raise ValueError("Audit entries are append-only: they are never changed.")
        super().save(*args, **kwargs)

    def delete(self, *args, **kwargs):
        raise ValueError("Audit entries are append-only: they are never deleted.")


# A stored Weibull: a finite positive shape and scale and no reason, or neither and the reason why not.
WEIBULL_OR_WHY_NOT = Q(
    beta__gt=0, beta__lt=FINITE_BOUND, eta_years__gt=0, eta_years__lt=FINITE_BOUND, no_fit_reason=""
) | (Q(beta__isnull=True, eta_years__isnull=True) & ~Q(no_fit_reason=""))


class PartLifeFit(models.Model):
    """A part's stored Weibull fit (failures in service against suspensions), refreshed by a task,
    so pages that forecast failures read it instead of fitting on a page load; or, for a part with
    two failures or more whose data hold no estimate, why not (no shape nor scale then)."""

    part = models.OneToOneField(CapacitorPart, on_delete=models.CASCADE, related_name="life_fit")
    beta = models.FloatField(null=True, blank=True, help_text="Weibull shape; empty when there is no estimate")
    eta_years = models.FloatField(null=True, blank=True, help_text="Weibull scale, years")
    no_fit_reason = models.CharField(max_length=300, blank=True, help_text="Why the data hold no estimate")
    failures = models.PositiveIntegerField()
    suspensions = models.PositiveIntegerField()
    # What the life-data page shows besides the fit (migration 0023), so it never fits on a page load:
    # the covariance of (ln beta, ln eta) for the Fisher bounds (empty where the information matrix could
    # not be inverted: the estimate without bounds), the Weibull plot's points (thinned) and the mean
    # chance that a capacitor in service fails within a year, on the day of the fit.
    var_log_beta = models.FloatField(null=True, blank=True)
    cov_log_beta_eta = models.FloatField(null=True, blank=True)
    var_log_eta = models.FloatField(null=True, blank=True)
    plot_points = models.JSONField(default=list, blank=True, help_text="[[age in years, fraction failed], ...]")
    next_year_failure = models.FloatField(null=True, blank=True)
    fitted_at = models.DateTimeField(auto_now=True)

    class Meta:
        constraints = [
            models.CheckConstraint(
                condition=WEIBULL_OR_WHY_NOT,
                name="life_fit_finite_positive_or_why_not",
            ),
        ]

    def __str__(self):
        if self.beta is None:
            return f"life of {self.part_id}: no estimate"
        return f"life of {self.part_id}: beta {self.beta:.2f}, eta {self.eta_years:.1f} y"


class PartToleranceLife(models.Model):
    """A part's age at leaving tolerance in service, from its capacitors' readings (a Weibull of the first reading
    out of tolerance or failure in service, the others suspended at their last reading), refreshed with the life
    fits, so the forecast of one capacitor can be set beside what its part's capacitors did."""

    part = models.OneToOneField(CapacitorPart, on_delete=models.CASCADE, related_name="tolerance_life")
    left_tolerance = models.PositiveIntegerField(
        help_text="Capacitors read below the tolerance limit or seen damaged, or failed in service"
    )
    still_within = models.PositiveIntegerField(help_text="Capacitors within tolerance at their last reading")
    beta = models.FloatField(null=True, blank=True, help_text="Weibull shape; empty when there is no estimate")
    eta_years = models.FloatField(null=True, blank=True, help_text="Weibull scale, years")
    no_fit_reason = models.CharField(max_length=300, blank=True, help_text="Why the data hold no estimate")
    fitted_at = models.DateTimeField(auto_now=True)

    class Meta:
        constraints = [
            models.CheckConstraint(
                condition=WEIBULL_OR_WHY_NOT,
                name="tolerance_life_finite_positive_or_why_not",
            ),
        ]

    def __str__(self):
        if self.beta is None:
            return f"tolerance life of {self.part_id}: no estimate"
        return f"tolerance life of {self.part_id}: beta {self.beta:.2f}, eta {self.eta_years:.1f} y"


class DigestEntry(models.Model):
    """A condition already reported in the planners' daily digest (a capacitor at the top risk
    level, a capacitor whose reading is overdue). Removed once the condition ends, so a capacitor
    that enters it again is reported again; while it lasts, it is never reported twice."""

    class Kind(models.TextChoices):
        TOP_RISK = "top_risk", "Entered the top risk level"
        OVERDUE = "overdue", "Reading overdue"

    kind = models.CharField(max_length=10, choices=Kind.choices)
    fitted_capacitor = models.ForeignKey(FittedCapacitor, on_delete=models.CASCADE, related_name="+")
    reason = models.CharField(max_length=300, blank=True)
    sent_at = models.DateTimeField(default=timezone.now)

    class Meta:
        ordering = ["-sent_at"]
        verbose_name_plural = "digest entries"
        constraints = [
            models.UniqueConstraint(fields=["kind", "fitted_capacitor"], name="one_digest_entry_per_condition"),
        ]

    def __str__(self):
        return f"{self.get_kind_display()}: {self.fitted_capacitor_id} ({self.sent_at:%Y-%m-%d})"


class InServiceCount(models.Model):
    """Append-only ledger of the counts of capacitors in service, kept on write by database triggers
    (migration 0023), so pages sum a few rows instead of counting the fleet.

    Each row is a change to one count. A capacitor in service adds 1 at (its motor's site, its part,
    the month it was fitted, risk ""); its current assessment adds 1 at (site, part, its risk level,
    the UTC day it was judged), fitted month empty. A write adds the new rows' share and takes away
    the old rows'; each statement's changes are summed per key first, so a refit chunk adds a few
    rows and locks none. `services.counts.compact_counts` replaces the rows by their sums.
    """

    site = kept_by_triggers(Site, "The capacitors' motor's site")
    part = kept_by_triggers(CapacitorPart, "The capacitors' part")
    risk = models.CharField(max_length=20, blank=True, help_text='Current risk level; "" counts capacitors in service')
    fitted_month = models.DateField(null=True, blank=True, help_text="First day of the month fitted (capacitors)")
    assessed_on = models.DateField(null=True, blank=True, help_text="UTC day of the current assessment (risk levels)")
    n = models.IntegerField(help_text="Change to the count")

    def __str__(self):
        return f"{self.site_id} {self.part_id} {self.risk or self.fitted_month} {self.n:+d}"


class MotorReadCount(models.Model):
    """Append-only ledger of the counts of motors in service by site and the UTC day of their newest
    reading (never read: by the day commissioned), kept on write by database triggers on motors
    (migration 0031), so the dashboard's readings by route sums a few hundred rows instead of
    counting every motor. Each row is a change to one count; `services.counts.compact_counts`
    replaces the rows by their sums."""

    site = kept_by_triggers(Site, "The motors' site")
    last_read_on = models.DateField(null=True, blank=True, help_text="UTC day of the motors' newest reading")
    commissioned_on = models.DateField(null=True, blank=True, help_text="Day commissioned, of motors never read")
    n = models.IntegerField(help_text="Change to the count")

    def __str__(self):
        return f"{self.site_id} {self.last_read_on or self.commissioned_on} {self.n:+d}"


class DesignCount(models.Model):
    """Append-only ledger of the capacitors in service per position design, kept on write by database
    triggers on fitted capacitors and motors (migration 0033), so the stand-in parts page reads the
    distinct designs from a few hundred rows instead of joining every capacitor with its motor.

    A capacitor in service on a motor in service adds 1 at (the motor's site, the capacitor's part
    and role, the motor's design: type, load, ratings and equivalent circuit). Each row is a change
    to one count; `services.counts.compact_counts` replaces the rows by their sums."""

    site = kept_by_triggers(Site, "The motors' site")
    part = kept_by_triggers(CapacitorPart, "The capacitors' part")
    role = models.CharField(max_length=5)
    motor_type = models.CharField(max_length=20)
    load_type = models.CharField(max_length=20)
    rated_voltage_v = models.FloatField()
    frequency_hz = models.PositiveSmallIntegerField()
    poles = models.PositiveSmallIntegerField()
    full_load_current_a = models.FloatField()
    rated_speed_rpm = models.FloatField()
    r1m_ohm = models.FloatField(null=True, blank=True)
    x1m_ohm = models.FloatField(null=True, blank=True)
    r1a_ohm = models.FloatField(null=True, blank=True)
    x1a_ohm = models.FloatField(null=True, blank=True)
    r2_ohm = models.FloatField(null=True, blank=True)
    x2_ohm = models.FloatField(null=True, blank=True)
    xm_ohm = models.FloatField(null=True, blank=True)
    turns_ratio = models.FloatField(null=True, blank=True)
    rotational_loss_w = models.FloatField(null=True, blank=True)
    n = models.IntegerField(help_text="Change to the count")

    def __str__(self):
        return f"{self.site_id} {self.part_id} {self.role} {self.motor_type} {self.n:+d}"
