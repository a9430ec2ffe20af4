from django.contrib.auth.decorators import login_not_required
from django.urls import path, register_converter

from . import api, views, views_dashboard, views_track_record


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

# The API answers 401/403 itself (token or session), instead of redirecting to the login page.
api_patterns = [
    path("api/assessments/", login_not_required(api.AssessmentList.as_view()), name="api_assessments"),
    path("api/readings/", login_not_required(api.ReadingList.as_view()), name="api_readings"),
    path(
        "api/capacitors/<int:pk>/readings/",
        login_not_required(api.CapacitorReadings.as_view()),
        name="api_capacitor_readings",
    ),
    path(
        "api/capacitors/<int:pk>/substitutes/",
        login_not_required(api.CapacitorSubstitutes.as_view()),
        name="api_capacitor_substitutes",
    ),
]

urlpatterns = [
    path("", views.home, name="home"),
    path("find/", views.find_motor, name="find"),
    path("motors/<code:asset_tag>/", views.motor_detail, name="motor"),
    path("capacitors/<int:installation_id>/", views.capacitor_detail, name="capacitor"),
    path("capacitors/<int:installation_id>/reading/", views.reading_new, name="reading_new"),
    path("capacitors/<int:installation_id>/replace/", views.replace, name="replace"),
    path("sites/<code:site_code>/route/", views.site_route, name="route"),
    path("sites/<code:site_code>/stock/", views.site_stock, name="site_stock"),
    path("parts/stand-in/", views.stand_in_parts, name="stand_in_parts"),
    path("sites/<code:site_code>/labels/", views.labels, name="labels"),
    path("signed-in/", views_dashboard.after_sign_in, name="after_sign_in"),
    path("dashboard/", views_dashboard.planner_dashboard, name="dashboard"),
    path("dashboard/<str:name>.csv", views_dashboard.dashboard_csv, name="dashboard_csv"),
    path("plan/", views.plan, name="plan"),
    path("plan.<str:file_format>", views.plan_export, name="plan_export"),
    path("life/", views.life_data, name="life_data"),
    path("exports/<slug:kind>-about.json", views.export_about, name="export_about"),
    path("exports/<slug:kind>.<str:file_format>", views.export, name="export"),
    path("work-orders/", views.work_orders, name="work_orders"),
    path("work-orders/<code:site_code>/<str:day>/", views.visit_sheet, name="visit_sheet"),
    path("refits/", views.refits, name="refits"),
    path("refits/start/", views.refit_start, name="refit_start"),
    path("forecast/track-record/", views_track_record.track_record, name="track_record"),
    path("forecast/track-record/run/", views_track_record.track_record_run, name="track_record_run"),
    path("imports/", views.imports_home, name="imports"),
    path("imports/<int:job_id>/", views.import_detail, name="import_detail"),
    path("imports/<int:job_id>/rows-to-fix.csv", views.import_rejected, name="import_rejected"),
    *api_patterns,
]
