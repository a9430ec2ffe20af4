"""Celery application. Settings come from Django's, under the CELERY_ namespace."""

import os

from celery import Celery
from celery.signals import task_postrun, task_prerun

os.environ.setdefault("DJANGO_SETTINGS_MODULE", "config.settings")

app = Celery("fleet")
app.config_from_object("django.conf:settings", namespace="CELERY")
app.autodiscover_tasks()


@app.on_after_configure.connect
def _in_process_without_a_broker(sender, **kwargs):
    """Without a broker every task runs in-process, yet Celery still opens a producer to serialise an
    eager task's arguments: on its default broker address that logged "No hostname was supplied" on every
    task a command ran. The in-memory transport serves that, and nothing else, without a network."""
    if sender.conf.task_always_eager and not sender.conf.broker_url:
        sender.conf.broker_url = "memory://localhost/"


@task_prerun.connect
@task_postrun.connect
def _database_connections_as_requests_keep_them(sender=None, **kwargs):
    """A worker keeps its database connection from task to task as the web server does from request
    to request: closed only past DB_CONN_MAX_AGE or when unusable, health-checked before reuse.

    Celery's own Django fix-up closes every connection around every task unless CELERY_DB_REUSE_MAX
    is set; a fleet refit's chunk then paid a new server process (its catalogue caches and trigger
    functions loaded again) each time. Tasks run in-process (eager) share the caller's connection
    and its transaction: left alone, as the fix-up leaves them."""
    if getattr(getattr(sender, "request", None), "is_eager", False):
        return
    from django.db import close_old_connections

    close_old_connections()
