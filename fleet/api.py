"""JSON API for scripts and the engineer's own tools (token or session auth).

Read: current assessments (filter by site, risk, replace-by date), a capacitor's
readings. Write: a reading, through the same service and checks as the form.
"""

from __future__ import annotations

from django.core.exceptions import ValidationError
from django.shortcuts import get_object_or_404
from rest_framework import generics, permissions, serializers, status
from rest_framework.response import Response

from .models import Assessment, FittedCapacitor, Reading
from .roles import scope_to_user
from .services.readings import NeedsConfirmation, record_reading


class ModelPermissionsWithView(permissions.DjangoModelPermissions):
    """Django model permissions, reads included (view_*), as the roles grant them."""

    perms_map = {
        **permissions.DjangoModelPermissions.perms_map,
        "GET": ["%(app_label)s.view_%(model_name)s"],
        "HEAD": ["%(app_label)s.view_%(model_name)s"],
    }


class AssessmentSerializer(serializers.ModelSerializer):
    asset_tag = serializers.CharField(source="installation.motor.asset_tag")
    site = serializers.CharField(source="installation.motor.site.code")
    role = serializers.CharField(source="installation.role")
    part_code = serializers.CharField(source="installation.part.code")
    rated_uf = serializers.FloatField(source="installation.part.rated_uf")
    installation_id = serializers.IntegerField()

    class Meta:
        model = Assessment
        fields = [
            "installation_id",
            "asset_tag",
            "site",
            "role",
            "part_code",
            "rated_uf",
            "risk",
            "replace_by",
            "reason",
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
            "readings_flagged",
            "fitted_through",
            "model_version",
            "figures_new",
            "figures_now",
        ]


class ReadingSerializer(serializers.ModelSerializer):
    confirmed = serializers.BooleanField(write_only=True, required=False, default=False)

    class Meta:
        model = Reading
        fields = [
            "id",
            "taken_at",
            "method",
            *Reading.MEASURED_FIELDS,
            "condition",
            "notes",
            "outlier_confirmed",
            "supersedes",
            "source",
            "confirmed",
        ]
        read_only_fields = ["id", "outlier_confirmed", "supersedes", "source"]
        extra_kwargs = {"capacitance_uf": {"required": False}, "taken_at": {"required": False}}


class AssessmentList(generics.ListAPIView):
    """GET /api/assessments/?site=CST&risk=replace+now&replace_by_before=2027-01-01"""

    serializer_class = AssessmentSerializer
    permission_classes = [permissions.IsAuthenticated, ModelPermissionsWithView]

    def get_queryset(self):
        queryset = scope_to_user(
            Assessment.objects.filter(is_current=True, installation__removed_on__isnull=True)
            .select_related("installation__motor__site", "installation__part")
            .order_by("replace_by", "installation_id"),
            self.request.user,
        )
        params = self.request.query_params
        if params.get("site"):
            queryset = queryset.filter(installation__motor__site__code=params["site"])
        if params.get("risk"):
            queryset = queryset.filter(risk=params["risk"])
        if params.get("replace_by_before"):
            queryset = queryset.filter(replace_by__lte=params["replace_by_before"])
        return queryset


class CapacitorReadings(generics.ListCreateAPIView):
    """GET or POST /api/capacitors/<id>/readings/ (POST: the form's checks; 400 names the field)."""

    serializer_class = ReadingSerializer
    permission_classes = [permissions.IsAuthenticated, ModelPermissionsWithView]
    queryset = Reading.objects.none()  # for the permission class's model lookup

    def installation(self) -> FittedCapacitor:
        capacitors = scope_to_user(FittedCapacitor.objects.select_related("motor", "part"), self.request.user)
        return get_object_or_404(capacitors, pk=self.kwargs["pk"])

    def get_queryset(self):
        return Reading.objects.filter(installation=self.installation()).order_by("taken_at", "id")

    def create(self, request, *args, **kwargs):
        serializer = self.get_serializer(data=request.data)
        serializer.is_valid(raise_exception=True)
        values = dict(serializer.validated_data)
        confirmed = values.pop("confirmed", False)
        try:
            reading = record_reading(
                installation=self.installation(), values=values, user=request.user, confirmed=confirmed
            )
        except NeedsConfirmation as error:
            body = {**error.message_dict, "confirm": ["Send again with confirmed=true if the value is right."]}
            return Response(body, status=status.HTTP_409_CONFLICT)
        except ValidationError as error:
            return Response(error.message_dict, status=status.HTTP_400_BAD_REQUEST)
        return Response(self.get_serializer(reading).data, status=status.HTTP_201_CREATED)
