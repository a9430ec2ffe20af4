"""Settings come from the environment, strictly; production refuses weak secrets."""

import os
import secrets
import subprocess
import sys
from pathlib import Path

import pytest
import yaml
from django.core.exceptions import ImproperlyConfigured

from config.settings import env_bool

ROOT = Path(__file__).resolve().parents[1]


def run_check(extra_env, *args):
    env = {
        k: v
        for k, v in os.environ.items()
        if k not in {"SECRET_KEY", "FLEET_PROFILE", "DEBUG", "DJANGO_ALLOW_ASYNC_UNSAFE"}
    }
    env.update(extra_env)
    return subprocess.run(
        [sys.executable, "manage.py", "check", *args], cwd=ROOT, env=env, capture_output=True, text=True
    )


def test_strict_booleans(monkeypatch):
    monkeypatch.setenv("SOME_FLAG", "yes")
    assert env_bool("SOME_FLAG", False) is True
    monkeypatch.setenv("SOME_FLAG", "ture")
    with pytest.raises(ImproperlyConfigured, match="SOME_FLAG"):
        env_bool("SOME_FLAG", False)


def test_production_refuses_to_start_without_a_secret_key():
    result = run_check({"FLEET_PROFILE": "production"})
    assert result.returncode != 0
    assert "SECRET_KEY" in result.stderr


def test_an_empty_database_url_means_the_embedded_default_and_a_wrong_one_is_named():
    result = run_check({"DATABASE_URL": ""})
    assert result.returncode == 0, result.stderr
    result = run_check({"DATABASE_URL": "postgress://postgres@127.0.0.1:5432/fleet"})
    assert result.returncode != 0
    assert "DATABASE_URL '127.0.0.1:5432/fleet' is not a database address" in result.stderr


def test_production_settings_pass_the_deployment_checks():
    result = run_check(
        {"FLEET_PROFILE": "production", "SECRET_KEY": secrets.token_urlsafe(48)}, "--deploy", "--fail-level", "WARNING"
    )
    assert result.returncode == 0, result.stdout + result.stderr


def test_compose_file_names_the_services_and_the_settings_the_code_reads():
    compose = yaml.safe_load((ROOT / "docker-compose.yml").read_text())
    services = compose["services"]
    assert {"web", "worker", "beat", "db", "redis"} <= set(services)
    for name in ("web", "worker", "beat", "db", "redis"):
        assert "healthcheck" in services[name], f"{name} has no health check"
    assert "/health/" in " ".join(services["web"]["healthcheck"]["test"])
    assert services["web"]["depends_on"]["migrate"]["condition"] == "service_completed_successfully"
    settings_text = (ROOT / "config" / "settings.py").read_text()
    environment = services["web"]["environment"]
    for variable in environment:
        assert f'"{variable}"' in settings_text, f"{variable} is set in compose but never read by settings"
    assert environment["DATABASE_URL"].startswith("postgres://")
    assert environment["CELERY_BROKER_URL"].startswith("redis://")
    assert "celery" in " ".join(services["worker"]["command"]) and "worker" in services["worker"]["command"]
    assert "beat" in services["beat"]["command"]
    assert compose["volumes"].keys() >= {"pgdata", "redisdata"}


@pytest.mark.django_db
def test_health_answers_ok_without_sign_in_and_behind_the_ssl_redirect(client, settings):
    """The compose health check's request: no session, the proxy's header, SSL redirect on."""
    settings.SECURE_SSL_REDIRECT = True
    settings.SECURE_PROXY_SSL_HEADER = ("HTTP_X_FORWARDED_PROTO", "https")
    response = client.get("/health/", HTTP_X_FORWARDED_PROTO="https")
    assert response.status_code == 200 and response.content == b"ok"
    assert client.get("/health/").status_code == 301  # without the header: sent to HTTPS like any page
    assert client.post("/health/", HTTP_X_FORWARDED_PROTO="https").status_code == 405


def test_lock_file_pins_every_requirement_exactly():
    """CI and the compose image install with the lock as constraints: each named requirement has one exact version."""
    locked = {
        line.split("==")[0].lower().replace("_", "-")
        for line in (ROOT / "requirements.lock").read_text().splitlines()
        if "==" in line and not line.startswith("#")
    }
    for name in ("requirements.txt", "requirements-dev.txt"):
        for line in (ROOT / name).read_text().splitlines():
            if line and not line.startswith(("#", "-r")):
                package = line.split("~=")[0].split("[")[0].lower().replace("_", "-")
                assert package in locked, f"{package} of {name} is not in requirements.lock"
    compose = (ROOT / "docker-compose.yml").read_text()
    assert "-c requirements.lock" in compose and "-c requirements.lock" in (ROOT / ".ci" / "run").read_text()


def test_plotly_is_a_static_file_served_by_whitenoise(client, django_user_model):
    """The chart library comes from the static files (found in the plotly package), not from a view."""
    from django.templatetags.static import static

    from fleet.staticfiles import PLOTLY_DIRECTORY, PLOTLY_FILE, PLOTLY_STATIC_PATH

    url = static(PLOTLY_STATIC_PATH)
    response = client.get(url, HTTP_ACCEPT_ENCODING="gzip")
    assert response.status_code == 200 and response["Content-Type"].startswith("text/javascript")
    body = b"".join(response.streaming_content)
    raw = (PLOTLY_DIRECTORY / PLOTLY_FILE).read_bytes()
    assert body == raw or response.get("Content-Encoding") == "gzip"


def test_collectstatic_hashes_and_compresses_plotly_for_a_long_cache(tmp_path):
    """[trade] Production storage: a content-hashed name (so it can be cached for a year) with gzip and
    brotli copies beside it; the brotli copy is what a phone downloads, well under the page budget."""
    from django.core.management import call_command
    from django.templatetags.static import static
    from django.test import override_settings

    from fleet.staticfiles import PLOTLY_STATIC_PATH

    storage = {
        "default": {"BACKEND": "django.core.files.storage.FileSystemStorage"},
        "staticfiles": {"BACKEND": "whitenoise.storage.CompressedManifestStaticFilesStorage"},
    }
    with override_settings(
        STATIC_ROOT=tmp_path, STORAGES=storage, STATICFILES_FINDERS=["fleet.staticfiles.PlotlyFinder"]
    ):
        call_command("collectstatic", interactive=False, verbosity=0)
        url = static(PLOTLY_STATIC_PATH)
    hashed = tmp_path / url.removeprefix("/static/")
    assert (
        url.startswith("/static/plotly/plotly.min.") and url.endswith(".js") and url != f"/static/{PLOTLY_STATIC_PATH}"
    )
    raw = hashed.read_bytes()
    assert len(raw) > 3_000_000
    brotli_size = hashed.with_name(hashed.name + ".br").stat().st_size
    gzip_size = hashed.with_name(hashed.name + ".gz").stat().st_size
    assert brotli_size < gzip_size < len(raw) / 3
    assert brotli_size < 1_250_000


@pytest.mark.django_db
def test_health_answers_503_when_the_database_does_not(monkeypatch):
    """The health check fails, with Retry-After, while the database is unreachable."""
    from django.db import OperationalError
    from django.test import Client

    import fleet.faults

    def unreachable():
        raise OperationalError("connection refused")

    monkeypatch.setattr(fleet.faults.connection, "cursor", unreachable)
    response = Client(raise_request_exception=False).get("/health/")
    assert response.status_code == 503 and response.has_header("Retry-After")


def test_a_task_run_in_process_without_a_broker_logs_nothing_about_a_broker_address():
    """Without CELERY_BROKER_URL tasks run in-process; Celery still took a producer for an eager task, on its
    default broker address, and `manage.py import readings` printed "No hostname was supplied. Reverting to
    default 'localhost'" on stderr for every task [derived]."""
    env = {k: v for k, v in os.environ.items() if k not in {"CELERY_BROKER_URL", "DJANGO_ALLOW_ASYNC_UNSAFE"}}
    script = (
        "import django\n"
        "django.setup()\n"
        "from config.celery import app\n"
        "@app.task\n"
        "def twice(x):\n"
        "    return 2 * x\n"
        "assert app.conf.task_always_eager\n"
        "print(twice.delay(21).get())\n"
    )
    done = subprocess.run([sys.executable, "-c", script], cwd=ROOT, env=env, capture_output=True, text=True)
    assert (done.returncode, done.stdout, done.stderr) == (0, "42\n", "")


def test_a_separate_worker_logs_each_task_it_finished_and_the_demo_does_not():
    """An operator's walk: with separate workers the log said each task was received and never that it succeeded
    or how long it took (the level kept for the demo, whose in-process tasks would drown its output). [ours]"""
    levels = {}
    for broker in ("", "redis://127.0.0.1:6379/0"):
        env = {k: v for k, v in os.environ.items() if k not in {"CELERY_BROKER_URL", "FLEET_PROFILE", "SECRET_KEY"}}
        env["CELERY_BROKER_URL"] = broker
        code = "import config.settings as s; print(s.LOGGING['loggers']['celery.app.trace']['level'])"
        result = subprocess.run([sys.executable, "-c", code], cwd=ROOT, env=env, capture_output=True, text=True)
        assert result.returncode == 0, result.stderr
        levels[broker] = result.stdout.strip()
    assert levels == {"": "WARNING", "redis://127.0.0.1:6379/0": "INFO"}
