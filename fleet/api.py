"""JSON API for scripts and the engineer's own tools (token or session auth).

Read: current assessments (filter by site, risk, replace-by date), a capacitor's
readings, readings in bulk (filter by site, part, motor, dates; cursor pages). Write: a
reading, through the same service and checks as the form, stored with source "api".
"""

from __future__ import annotations

from base64 import b64encode
from collections.abc import Mapping
from urllib import parse

from django.core.exceptions import ValidationError
from django.core.paginator import Paginator
from django.db.models import F
from django_filters.rest_framework import DjangoFilterBackend
from rest_framework import generics, permissions, serializers, status
from rest_framework.exceptions import NotFound
from rest_framework.pagination import CursorPagination, PageNumberPagination
from rest_framework.response import Response
from rest_framework.settings import api_settings

from .filters import AssessmentFilter, ReadingFilter, parameter_problems, query_value
from .imports.columns import parse_site_time
from .models import Assessment, FittedCapacitor, Reading, site_zone
from .roles import permission_words, scope_to_user
from .services.bulk import storable_ids
from .services.counts import assessed_total
from .services.operating_pictures import with_operating_figures
from .services.pages import in_service_assessments
from .services.readings import KeyUsedBefore, NeedsConfirmation, record_reading
from .services.substitutes import substitutes_for


class ModelPermissionsWithView(permissions.DjangoModelPermissions):
    """Django model permissions, reads included (view_*), as the roles grant them; a 403 says which
    roles may do it and which the user holds."""

    perms_map = {
        **permissions.DjangoModelPermissions.perms_map,
        "GET": ["%(app_label)s.view_%(model_name)s"],
        "HEAD": ["%(app_label)s.view_%(model_name)s"],
    }

    def has_permission(self, request, view):
        allowed = super().has_permission(request, view)
        if not allowed and request.user and request.user.is_authenticated:
            model = self._queryset(view).model
            self.message = permission_words(request.user, self.get_required_permissions(request.method, model))
        return allowed


def fitted_capacitor_or_not_found(request, pk) -> FittedCapacitor:
    """The fitted capacitor `pk` at the requesting user's sites, or a 404 saying so in plain words."""
    capacitors = scope_to_user(FittedCapacitor.objects.select_related("motor__site", "part"), request.user)
    found = capacitors.filter(pk__in=storable_ids([pk])).first()
    if found is None:
        raise NotFound(f"No fitted capacitor {pk} at the sites you work at.")
    return found


class CheckedPageSize:
    """`page_size` asked in the query: a whole number from 1 to `max_page_size`, else a 400 naming it
    (never silently the default while `next` echoes the asked size back)."""

    page_size_query_param = "page_size"

    def get_page_size(self, request):
        asked = query_value(request.query_params, self.page_size_query_param)
        if asked is None:
            return self.page_size
        if not (asked.isascii() and asked.isdigit() and 1 <= int(asked) <= self.max_page_size):
            raise serializers.ValidationError(
                {self.page_size_query_param: [f"A whole number from 1 to {self.max_page_size}."]}
            )
        return int(asked)


class NumberedPages(CheckedPageSize, PageNumberPagination):
    """Numbered pages (the API's default, 100 a page, `page_size` up to 1000): a page that is not a whole
    number from 1 to the last is a 400 naming `page`, as a bad `page_size` or filter is, instead of a 404
    for the whole address."""

    max_page_size = 1000

    def paginate_queryset(self, queryset, request, view=None):
        try:
            return super().paginate_queryset(queryset, request, view)
        except NotFound:
            last = self.django_paginator_class(queryset, self.get_page_size(request)).num_pages
            raise serializers.ValidationError(
                {self.page_query_param: [f"A whole number from 1 to {last} (the last page)."]}
            ) from None


class KnownParametersOnly:
    """A view that refuses a query parameter it does not take (a misspelt filter, `risks=watch`, would
    otherwise list everything) or one given twice, with a 400 naming it (`filters.parameter_problems`, the
    exports' rule too): it takes its filters, its pager's (`page`, `page_size`, `cursor`: whichever it
    uses), an ordering backend's, the parameters it reads itself (`query_parameters`), and `format`,
    which must name a format it answers in (`json`), not a bare 404."""

    query_parameters: tuple[str, ...] = ()

    def known_parameters(self) -> set[str]:
        known = {api_settings.URL_FORMAT_OVERRIDE, *self.query_parameters}
        filterset_class = getattr(self, "filterset_class", None)
        if filterset_class is not None:
            known |= set(filterset_class.base_filters)
        sources = [self.paginator, *(backend() for backend in self.filter_backends)]
        for source in sources:
            for attribute in ("page_query_param", "page_size_query_param", "cursor_query_param", "ordering_param"):
                known.add(getattr(source, attribute, None))
        return known - {None}

    def formats_answered(self) -> list[str]:
        return sorted({renderer.format for renderer in self.get_renderers()})

    def asked_format_unknown(self, request) -> bool:
        asked = query_value(request.query_params, api_settings.URL_FORMAT_OVERRIDE)
        return asked is not None and asked not in self.formats_answered()

    def perform_content_negotiation(self, request, force=False):
        """JSON for a `format` the API does not answer in, so that `initial` can name it after sign-in."""
        return super().perform_content_negotiation(request, force=force or self.asked_format_unknown(request))

    def initial(self, request, *args, **kwargs):
        super().initial(request, *args, **kwargs)  # sign-in and permissions first
        problems = parameter_problems(request.query_params, self.known_parameters())
        # A page that is no whole number is named with the rest at once (its range waits for the count: a walk
        # found `page=abc` named only once the other parameters were put right).
        page_param = getattr(self.paginator, "page_query_param", None)
        page = query_value(request.query_params, page_param) if page_param else None
        if page is not None and page_param not in problems and not (page.isascii() and page.isdigit() and int(page)):
            problems[page_param] = "A whole number from 1 to the last page."
        if "format" not in problems and self.asked_format_unknown(request):
            formats = ", ".join(self.formats_answered())
            problems["format"] = f"Not a format of the API, which answers in: {formats}."
        if problems:
            refused = {name: [words] for name, words in problems.items()}
            filterset_class = getattr(self, "filterset_class", None)
            if filterset_class is not None:  # the filters' own problems in the same answer
                filterset = filterset_class(request.query_params, queryset=self.get_queryset(), request=request)
                if not filterset.is_valid():
                    refused |= {name: list(words) for name, words in filterset.errors.items() if name not in refused}
            raise serializers.ValidationError(refused)


class AssessmentSerializer(serializers.ModelSerializer):
    asset_tag = serializers.CharField(source="fitted_capacitor.motor.asset_tag")
    site = serializers.CharField(source="fitted_capacitor.motor.site.code")
    role = serializers.CharField(source="fitted_capacitor.role")
    part_code = serializers.CharField(source="fitted_capacitor.part.code")
    rated_uf = serializers.FloatField(source="fitted_capacitor.part.rated_uf")
    fitted_capacitor_id = serializers.IntegerField()
    fitted_against_advice = serializers.BooleanField(source="fitted_capacitor.substitute_override")
    override_reason = serializers.CharField(source="fitted_capacitor.override_reason")
    # Worked out for the page by `AssessmentList` (`with_operating_figures`), not stored.
    figures_new = serializers.DictField(read_only=True)
    figures_now = serializers.DictField(read_only=True)

    class Meta:
        model = Assessment
        fields = [
            "fitted_capacitor_id",
            "asset_tag",
            "site",
            "role",
            "part_code",
            "rated_uf",
            "fitted_against_advice",
            "override_reason",
            "risk",
            "replace_by",
            "reason",
            "read_again",
            "limits",
            "set_aside",
            "capacitance_now_uf",
            "latest_verdict",
            "limit_source",
            "limit_fraction",
            "p10_on",
            "p50_on",
            "p90_on",
            "trend_model",
            "slope_pct_per_1000h",
            "slope_sd_pct_per_1000h",
            "low_confidence",
            "readings_used",
            "visits_used",
            "readings_flagged",
            "fitted_through",
            "model_version",
            "figures_new",
            "figures_now",
        ]


class AsSent(serializers.Field):
    """A measured value passed on as sent (number, text such as "3,8", or null): the rulebook
    parses it, exactly as it parses the form's and the import's."""

    def to_internal_value(self, data):
        return data

    def to_representation(self, value):
        return value


class SiteTime(serializers.DateTimeField):
    """A reading's time as the form and the import read it (`parse_site_time`): without an offset it is
    wall-clock time at the capacitor's site (the serializer's `time_zone`); a time the clocks skip or
    repeat there is refused with the site's offsets; a date alone is refused."""

    def to_internal_value(self, value):
        if not isinstance(value, str):
            raise serializers.ValidationError("Send the time as text: 2026-03-14T09:30 (site time), or with an offset.")
        try:
            return parse_site_time(value, self.context["time_zone"])
        except ValueError as error:
            raise serializers.ValidationError(str(error)) from None


class KnownFieldsOnly:
    """A body field the serializer does not take (a misspelt `case_temprature_c`, an `id` or `source` it
    sets itself) is a 400 naming it with the fields it takes, never dropped unseen."""

    def to_internal_value(self, data):
        if isinstance(data, Mapping):
            takes = sorted(name for name, field in self.fields.items() if not field.read_only)
            unknown = sorted(set(data) - set(takes))
            if unknown:
                words = f"Not a field of this call, which takes: {', '.join(takes)}."
                raise serializers.ValidationError({name: [words] for name in unknown})
        return super().to_internal_value(data)


SUPERSEDES_WORDS = 'The id of the reading this one corrects: a whole number from 1, as the API gave it ("id").'


class ReadingSerializer(KnownFieldsOnly, serializers.ModelSerializer):
    # A body that is not one JSON object (a list, a number): said in the API's words, not the framework's.
    default_error_messages = {
        "invalid": 'Send one reading as a JSON object of fields, e.g. {{"method": "meter", "capacitance_uf": 4.0}}; '
        "this body is a JSON {datatype}."
    }
    taken_at = SiteTime(required=False, allow_null=True)  # null is left out: now
    # Sent: true keeps a value the checks asked to confirm. Answered: whether the reading is stored as confirmed
    # (true only where the checks asked), as the readings export and the import's column name it.
    confirmed = serializers.BooleanField(
        source="outlier_confirmed",
        required=False,
        default=False,
        error_messages={"invalid": "true or false: true keeps a value the checks asked to confirm."},
    )
    # Id of the reading this one corrects (same capacitor, not corrected before); both are kept.
    supersedes = serializers.IntegerField(
        source="supersedes_id",
        required=False,
        allow_null=True,
        min_value=1,
        error_messages={
            "invalid": SUPERSEDES_WORDS,
            "min_value": SUPERSEDES_WORDS,
            "max_string_length": SUPERSEDES_WORDS,
        },
    )
    capacitance_uf = AsSent(required=False, allow_null=True)
    capacitor_current_a = AsSent(required=False, allow_null=True)
    capacitor_voltage_v = AsSent(required=False, allow_null=True)
    line_voltage_v = AsSent(required=False, allow_null=True)
    main_current_a = AsSent(required=False, allow_null=True)
    aux_current_a = AsSent(required=False, allow_null=True)
    line_current_a = AsSent(required=False, allow_null=True)
    case_temperature_c = AsSent(required=False, allow_null=True)
    ambient_temperature_c = AsSent(required=False, allow_null=True)
    esr_ohm = AsSent(required=False, allow_null=True)

    class Meta:
        model = Reading
        fields = [
            "id",
            "taken_at",
            "method",
            *Reading.MEASURED_FIELDS,
            "condition",
            "notes",
            "confirmed",
            "supersedes",
            "source",
        ]
        read_only_fields = ["id", "source"]
        extra_kwargs = {"taken_at": {"required": False}, "notes": {"trim_whitespace": False}}

    def get_fields(self):
        """A value outside a field's fixed vocabulary (`method`, `condition`) is named with the valid ones."""
        fields = super().get_fields()
        for name, field in fields.items():
            if isinstance(field, serializers.ChoiceField):
                valid = ", ".join(str(value) for value in field.choices)
                field.error_messages["invalid_choice"] = f'"{{input}}" is not a {name}: one of {valid}.'
        return fields


class AssessmentPages(NumberedPages):
    """100 a page. The total of a list filtered by site and risk level only (or not at all) is summed
    from the ledger of counts kept on write, not counted over every current assessment; a list cut
    at a replace-by date, or to the capacitors fitted against the advice (or not), is counted by the database."""

    def paginate_queryset(self, queryset, request, view=None):
        params = request.query_params  # valid here: the filters answered 400 to a bad value before
        # The ledger counts by site and risk level only: any other filter is counted by the database.
        self.ledger_total = (
            None
            if query_value(params, "replace_by_before") or query_value(params, "fitted_against_advice")
            else assessed_total(request.user, query_value(params, "site"), query_value(params, "risk"))
        )
        return super().paginate_queryset(queryset, request, view)

    def django_paginator_class(self, object_list, per_page):
        paginator = Paginator(object_list, per_page)
        if self.ledger_total is not None:
            paginator.count = self.ledger_total
        return paginator


class AssessmentList(KnownParametersOnly, generics.ListAPIView):
    """GET /api/assessments/?site=CST&risk=replace+now&replace_by_before=2027-01-01"""

    serializer_class = AssessmentSerializer
    permission_classes = [permissions.IsAuthenticated, ModelPermissionsWithView]
    filter_backends = [DjangoFilterBackend]
    filterset_class = AssessmentFilter
    pagination_class = AssessmentPages

    def get_queryset(self):
        return (
            in_service_assessments(self.request.user)
            .select_related("fitted_capacitor__motor__site", "fitted_capacitor__part")
            .order_by(F("replace_by").asc(nulls_last=True), "fitted_capacitor_id")
        )

    def paginate_queryset(self, queryset):
        """The page's assessments with their operating figures, worked out for the page in one core call."""
        page = super().paginate_queryset(queryset)
        return None if page is None else with_operating_figures(page)


class FittedCapacitorReadings(KnownParametersOnly, generics.ListCreateAPIView):
    """GET or POST /api/fitted-capacitors/<id>/readings/ (POST: the form's checks; 400 names the field).

    An `Idempotency-Key` header (any client-made string up to 64 characters) makes a repeated
    POST save nothing: the reading saved the first time comes back with 200.
    """

    serializer_class = ReadingSerializer
    permission_classes = [permissions.IsAuthenticated, ModelPermissionsWithView]
    queryset = Reading.objects.none()  # for the permission class's model lookup
    pagination_class = NumberedPages

    def fitted_capacitor(self) -> FittedCapacitor:
        return fitted_capacitor_or_not_found(self.request, self.kwargs["pk"])

    def get_queryset(self):
        return Reading.objects.filter(fitted_capacitor=self.fitted_capacitor()).order_by("taken_at", "id")

    def create(self, request, *args, **kwargs):
        fitted_capacitor = self.fitted_capacitor()
        zone = site_zone(fitted_capacitor.motor.site.time_zone).key
        serializer = self.get_serializer_class()(
            data=request.data, context={**self.get_serializer_context(), "time_zone": zone}
        )
        serializer.is_valid(raise_exception=True)
        values = dict(serializer.validated_data)
        if values.get("taken_at") is None:  # null, as left out: now (or the corrected reading's time)
            values.pop("taken_at", None)
        confirmed = values.pop("outlier_confirmed", False)
        supersedes_id = values.pop("supersedes_id", None)
        key = request.headers.get("Idempotency-Key", "")
        if len(key) > 64 or "\x00" in key:
            return Response({"Idempotency-Key": ["At most 64 characters, no NUL."]}, status=status.HTTP_400_BAD_REQUEST)
        try:
            reading = record_reading(
                fitted_capacitor=fitted_capacitor,
                values=values,
                user=request.user,
                confirmed=confirmed,
                client_key=key,
                supersedes_id=supersedes_id,
                source=Reading.Source.API,
            )
        except KeyUsedBefore as error:
            return Response({"Idempotency-Key": [key_used_words(error.earlier)]}, status=status.HTTP_400_BAD_REQUEST)
        except NeedsConfirmation as error:
            body = {**error.message_dict, "confirm": ["Send again with confirmed=true if the value is right."]}
            return Response(body, status=status.HTTP_409_CONFLICT)
        except ValidationError as error:
            return Response(error.message_dict, status=status.HTTP_400_BAD_REQUEST)
        answer = status.HTTP_200_OK if reading.replayed else status.HTTP_201_CREATED
        return Response(self.get_serializer(reading).data, status=answer)


def key_used_words(earlier: Reading) -> str:
    """An Idempotency-Key sent again with other values, or for another capacitor, in the API's words."""
    taken = f"{earlier.capacitance_uf:g} µF taken {earlier.taken_at:%Y-%m-%dT%H:%MZ}"
    where = f"reading {earlier.id} ({taken}) of fitted capacitor {earlier.fitted_capacitor_id}"
    return (
        f"This Idempotency-Key already saved {where}, with other values: nothing was saved now. To log these "
        f"values as another reading send them under a new key; to correct that reading, add "
        f'"supersedes": {earlier.id}.'
    )


class BulkReadingSerializer(ReadingSerializer):
    fitted_capacitor_id = serializers.IntegerField()
    asset_tag = serializers.CharField(source="fitted_capacitor.motor.asset_tag")
    site = serializers.CharField(source="fitted_capacitor.motor.site.code")
    role = serializers.CharField(source="fitted_capacitor.role")
    part_code = serializers.CharField(source="fitted_capacitor.part.code")

    class Meta(ReadingSerializer.Meta):
        fields = ["fitted_capacitor_id", "asset_tag", "site", "role", "part_code", *ReadingSerializer.Meta.fields]


class ReadingPages(CheckedPageSize, CursorPagination):
    """Pages in the order readings were stored: a page never shifts as readings arrive."""

    ordering = "id"
    page_size = 500
    max_page_size = 5000

    def decode_cursor(self, request):
        """The position a `cursor` holds, or a 400 naming `cursor` when it is not one this list gave: the
        cursor must be written exactly as `encode_cursor` writes one (rest_framework's decoding drops what is
        not base64, so `%` or `[]` read as the first page), at a position an id can hold. An empty one is one
        left out (`filters.query_value`): the first page."""
        refused = serializers.ValidationError(
            {self.cursor_query_param: ["Not a cursor from this list: follow its next and previous links."]}
        )
        given = request.query_params.get(self.cursor_query_param)
        if given is None or given == "":
            return None
        try:
            cursor = super().decode_cursor(request)
        except NotFound:
            raise refused from None
        position = cursor.position
        if position is not None and not (position.isascii() and position.isdigit() and storable_ids([position])):
            raise refused
        tokens = {"o": str(cursor.offset)} if cursor.offset else {}
        tokens |= {"r": "1"} if cursor.reverse else {}
        tokens |= {"p": position} if position is not None else {}
        if given != b64encode(parse.urlencode(tokens).encode("ascii")).decode("ascii"):
            raise refused
        return cursor


class ReadingList(KnownParametersOnly, generics.ListAPIView):
    """GET /api/readings/?site=CST&part=RUN-4U-450&motor=CST-0093&since=2026-01-01&until=2026-03-31:
    readings at the user's sites, 500 a page (page_size up to 5000), `next` links to the next page."""

    serializer_class = BulkReadingSerializer
    permission_classes = [permissions.IsAuthenticated, ModelPermissionsWithView]
    filter_backends = [DjangoFilterBackend]
    filterset_class = ReadingFilter
    pagination_class = ReadingPages

    def get_queryset(self):
        return scope_to_user(
            Reading.objects.select_related("fitted_capacitor__motor__site", "fitted_capacitor__part"), self.request.user
        )


class FittedCapacitorSubstitutes(KnownParametersOnly, generics.GenericAPIView):
    """GET /api/fitted-capacitors/<id>/substitutes/?parts=CODE1,CODE2: one entry per candidate part (and pair),
    suitable first, with `verdict`, `reasons` and the operating figures with that part fitted."""

    permission_classes = [permissions.IsAuthenticated, ModelPermissionsWithView]
    pagination_class = None  # one answer, not pages
    query_parameters = ("parts",)
    queryset = FittedCapacitor.objects.none()  # for the permission class's model lookup

    def get(self, request, *args, **kwargs):
        fitted_capacitor = fitted_capacitor_or_not_found(request, self.kwargs["pk"])
        raw = query_value(request.query_params, "parts")
        codes = None if raw is None else [code.strip() for code in raw.split(",") if code.strip()]
        if codes is not None and not codes:
            return Response({"parts": ["Name at least one part code."]}, status=status.HTTP_400_BAD_REQUEST)
        try:
            advice = substitutes_for(fitted_capacitor, codes=codes)
        except ValidationError as error:
            return Response(error.message_dict, status=status.HTTP_400_BAD_REQUEST)
        return Response({"fitted_capacitor_id": fitted_capacitor.id, **advice})
