from django.contrib.auth.decorators import login_not_required
from django.urls import path, re_path, register_converter
from django.views.generic import RedirectView

from fleet.views import field, imports, planning, register, reliability

from . import api, faults


class StoredCode:
    """Any stored asset tag or site code, '/' and newlines included: a value that slipped past
    the character set (an older register, a script) must never take a page down with
    NoReverseMatch. reverse() percent-encodes what a URL cannot hold."""

    regex = r"[\s\S]*"

    def to_python(self, value):
        return value

    def to_url(self, value):
        return str(value)


register_converter(StoredCode, "code")


def _moved_to(name: str):
    """A permanent redirect to where a fitted capacitor's page lives now, the query string kept."""
    return RedirectView.as_view(pattern_name=name, permanent=True, query_string=True)


# The addresses of a fitted capacitor's pages before they moved under fitted-capacitors/: printed
# labels, QR codes and bookmarks in the field point to them, so they keep working.
old_capacitor_paths = [
    path("capacitors/<int:fitted_capacitor_id>/", _moved_to("fitted_capacitor")),
    path("capacitors/<int:fitted_capacitor_id>/reading/", _moved_to("reading_new")),
    path("capacitors/<int:fitted_capacitor_id>/replace/", _moved_to("replace")),
]

# The API answers 401/403 itself (token or session), instead of redirecting to the login page. A fitted
# capacitor's endpoints moved under fitted-capacitors/; the old api/capacitors/ addresses serve the same
# views (a script that posts readings there must not be turned into a GET by a redirect).
api_patterns = [
    path("api/assessments/", login_not_required(api.AssessmentList.as_view()), name="api_assessments"),
    path("api/readings/", login_not_required(api.ReadingList.as_view()), name="api_readings"),
    path(
        "api/fitted-capacitors/<int:pk>/readings/",
        login_not_required(api.FittedCapacitorReadings.as_view()),
        name="api_fitted_capacitor_readings",
    ),
    path(
        "api/fitted-capacitors/<int:pk>/substitutes/",
        login_not_required(api.FittedCapacitorSubstitutes.as_view()),
        name="api_fitted_capacitor_substitutes",
    ),
    path("api/capacitors/<int:pk>/readings/", login_not_required(api.FittedCapacitorReadings.as_view())),
    path("api/capacitors/<int:pk>/substitutes/", login_not_required(api.FittedCapacitorSubstitutes.as_view())),
    re_path(r"^api/(?P<rest>.*)$", faults.api_address_unknown),  # last: JSON, with DEBUG on too
]

urlpatterns = [
    path("", register.home, name="home"),
    path("find/", register.find_motor, name="find"),
    path("motors/<code:asset_tag>/", register.motor_detail, name="motor"),
    path("fitted-capacitors/<int:fitted_capacitor_id>/", register.fitted_capacitor_detail, name="fitted_capacitor"),
    path("fitted-capacitors/<int:fitted_capacitor_id>/reading/", field.reading_new, name="reading_new"),
    path("fitted-capacitors/<int:fitted_capacitor_id>/replace/", field.replace, name="replace"),
    *old_capacitor_paths,
    path("sites/<code:site_code>/route/", field.site_route, name="route"),
    path("sites/<code:site_code>/stock/", field.site_stock, name="site_stock"),
    path("sites/<code:site_code>/days-off/", planning.site_days_off_page, name="site_days_off"),
    path("parts/stand-in/", planning.stand_in_parts, name="stand_in_parts"),
    path("parts/stand-in/<int:fitted_capacitor_id>/swap/", planning.stop_gap_swap, name="stop_gap_swap"),
    path("sites/<code:site_code>/labels/", field.labels, name="labels"),
    path("signed-in/", planning.after_sign_in, name="after_sign_in"),
    path("dashboard/", planning.planner_dashboard, name="dashboard"),
    path("dashboard/<str:name>.csv", planning.dashboard_csv, name="dashboard_csv"),
    path("plan/", planning.plan, name="plan"),
    path("plan.<str:file_format>", reliability.plan_export, name="plan_export"),
    path("life/", reliability.life_data, name="life_data"),
    path("exports/<slug:kind>-about.json", reliability.export_about, name="export_about"),
    path("exports/<slug:kind>.<str:file_format>", reliability.export, name="export"),
    path("work-orders/", planning.work_orders, name="work_orders"),
    path("work-orders/<int:order_id>/cancel/", planning.work_order_cancel, name="work_order_cancel"),
    path("work-orders/<code:site_code>/<str:day>/", planning.visit_sheet, name="visit_sheet"),
    path("refits/", reliability.refits, name="refits"),
    path("refits/start/", reliability.refit_start, name="refit_start"),
    path("forecast/track-record/", reliability.track_record, name="track_record"),
    path("forecast/track-record/run/", reliability.track_record_run, name="track_record_run"),
    path("imports/", imports.imports_home, name="imports"),
    path("imports/<int:job_id>/", imports.import_detail, name="import_detail"),
    path("imports/<int:job_id>/rows-to-fix.csv", imports.import_rejected, name="import_rejected"),
    *api_patterns,
]
