from django.contrib import admin
from django.contrib.auth import views as auth_views
from django.contrib.auth.decorators import login_not_required
from django.urls import include, path

from fleet.faults import health
from fleet.security import LockoutAdminAuthenticationForm, LockoutAuthenticationForm

admin.site.site_header = "Capacitor-motor fleet: register"
admin.site.site_title = "Fleet register"
admin.site.login_form = LockoutAdminAuthenticationForm

urlpatterns = [
    path("login/", auth_views.LoginView.as_view(authentication_form=LockoutAuthenticationForm), name="login"),
    # Open signed out: Sign out pressed after the sign-in ended (another tab) lands on the sign-in page, not on a
    # "not saved" notice with a way back to a sign-out address that takes no GET.
    path("logout/", login_not_required(auth_views.LogoutView.as_view()), name="logout"),
    path("health/", health, name="health"),
    path("admin/", admin.site.urls),
    path("", include("fleet.urls")),
]

handler404 = "fleet.faults.page_not_found"
handler500 = "fleet.faults.server_error"
