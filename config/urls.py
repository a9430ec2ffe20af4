from django.contrib import admin
from django.contrib.auth import views as auth_views
from django.urls import include, path

from fleet.faults import health
from fleet.security import LockoutAdminAuthenticationForm, LockoutAuthenticationForm

admin.site.site_header = "Capacitor-motor fleet: register"
admin.site.site_title = "Fleet register"
admin.site.login_form = LockoutAdminAuthenticationForm

urlpatterns = [
    path("login/", auth_views.LoginView.as_view(authentication_form=LockoutAuthenticationForm), name="login"),
    path("logout/", auth_views.LogoutView.as_view(), name="logout"),
    path("health/", health, name="health"),
    path("admin/", admin.site.urls),
    path("", include("fleet.urls")),
]

handler404 = "fleet.faults.page_not_found"
handler500 = "fleet.faults.server_error"
