from django.apps import AppConfig
from django.db.models.signals import post_migrate


class FleetConfig(AppConfig):
    name = "fleet"
    verbose_name = "Capacitor-motor fleet"
    default_auto_field = "django.db.models.BigAutoField"

    def ready(self):
        from . import audit
        from .roles import ensure_role_groups
        from .services import bulk  # noqa: F401 - registers the field__any_of lookup

        audit.connect()
        post_migrate.connect(ensure_role_groups, sender=self)
