"""Celery application. Settings come from Django's, under the CELERY_ namespace."""

import os

from celery import Celery

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
