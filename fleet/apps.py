from django.apps import AppConfig
from django.db.models.signals import post_migrate


class FleetConfig(AppConfig):
    name = "fleet"
    verbose_name = "Capacitor-motor fleet"
    default_auto_field = "django.db.models.BigAutoField"

    def ready(self):
        from . import audit, lookups  # noqa: F401 - lookups registers field__any_of
        from .roles import ensure_role_groups

        audit.connect()
        post_migrate.connect(ensure_role_groups, sender=self)
