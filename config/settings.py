"""One settings module, driven by the environment (see the README's table).

Embedded default: a SQLite file beside manage.py and Celery tasks run in-process.
With DATABASE_URL and CELERY_BROKER_URL set, the same code runs on PostgreSQL with
Redis and separate workers. FLEET_PROFILE=production turns on the deployment
checks and refuses to start without a real SECRET_KEY.
"""

from __future__ import annotations

import os
from pathlib import Path

import dj_database_url
from celery.schedules import crontab
from django.core.exceptions import ImproperlyConfigured

BASE_DIR = Path(__file__).resolve().parent.parent


def env_bool(name: str, default: bool) -> bool:
    """Strict boolean: true/false/1/0/yes/no; anything else is a configuration error."""
    raw = os.environ.get(name)
    if raw is None or raw == "":
        return default
    value = raw.strip().lower()
    if value in {"1", "true", "yes", "on"}:
        return True
    if value in {"0", "false", "no", "off"}:
        return False
    raise ImproperlyConfigured(f"{name}={raw!r} is not a boolean (use true or false)")


def env_list(name: str, default: str) -> list[str]:
    return [item.strip() for item in os.environ.get(name, default).split(",") if item.strip()]


def env_int(name: str, default: int) -> int:
    raw = os.environ.get(name, "")
    try:
        return int(raw) if raw else default
    except ValueError as error:
        raise ImproperlyConfigured(f"{name}={raw!r} is not a whole number") from error


PROFILE = os.environ.get("FLEET_PROFILE", "development")
if PROFILE not in {"development", "production"}:
    raise ImproperlyConfigured(f"FLEET_PROFILE={PROFILE!r}: use development or production")
PRODUCTION = PROFILE == "production"

DEVELOPMENT_SECRET_KEY = "development-only-not-secret-0f3c9a"
SECRET_KEY = os.environ.get("SECRET_KEY", "" if PRODUCTION else DEVELOPMENT_SECRET_KEY)
if PRODUCTION and (not SECRET_KEY or SECRET_KEY == DEVELOPMENT_SECRET_KEY or len(SECRET_KEY) < 50):
    raise ImproperlyConfigured("FLEET_PROFILE=production needs SECRET_KEY: 50 or more random characters")

DEBUG = env_bool("DEBUG", not PRODUCTION)
ALLOWED_HOSTS = env_list("ALLOWED_HOSTS", "127.0.0.1,localhost")
CSRF_TRUSTED_ORIGINS = env_list("CSRF_TRUSTED_ORIGINS", "")
CSRF_FAILURE_VIEW = "fleet.faults.csrf_failure"  # a plain page that says nothing was saved

INSTALLED_APPS = [
    "django.contrib.admin",
    "django.contrib.auth",
    "django.contrib.contenttypes",
    "django.contrib.sessions",
    "django.contrib.messages",
    "django.contrib.staticfiles",
    "rest_framework",
    "rest_framework.authtoken",
    "fleet",
]

MIDDLEWARE = [
    "django.middleware.security.SecurityMiddleware",
    "whitenoise.middleware.WhiteNoiseMiddleware",
    "fleet.middleware.RefuseNulMiddleware",
    "django.contrib.sessions.middleware.SessionMiddleware",
    "django.middleware.common.CommonMiddleware",
    "django.middleware.csrf.CsrfViewMiddleware",
    "django.contrib.auth.middleware.AuthenticationMiddleware",
    "django.contrib.messages.middleware.MessageMiddleware",
    "django.middleware.clickjacking.XFrameOptionsMiddleware",
    "fleet.security.SignInFirstMiddleware",  # LoginRequiredMiddleware; a form sent signed out is said not saved
]

ROOT_URLCONF = "config.urls"
TEMPLATES = [
    {
        "BACKEND": "django.template.backends.django.DjangoTemplates",
        "DIRS": [BASE_DIR / "templates"],
        "APP_DIRS": True,
        "OPTIONS": {
            "context_processors": [
                "django.template.context_processors.request",
                "django.contrib.auth.context_processors.auth",
                "django.contrib.messages.context_processors.messages",
                "fleet.context.roles",
                "fleet.context.cautions_fold_key",
            ],
            # Numbers, dates and units for people, in every template without a {% load %}.
            "builtins": ["fleet.templatetags.fleet_format", "fleet.templatetags.fleet_rows"],
        },
    },
]
WSGI_APPLICATION = "config.wsgi.application"

# An empty DATABASE_URL (`DATABASE_URL= command`) means "none set": the embedded default.
DATABASE_URL = os.environ.get("DATABASE_URL") or f"sqlite:///{BASE_DIR / 'fleet.sqlite3'}"
try:
    dj_database_url.parse(DATABASE_URL)
except ValueError as error:
    raise ImproperlyConfigured(
        f"DATABASE_URL {DATABASE_URL.split('@')[-1]!r} is not a database address ({error}); "
        "use postgres://user@host:5432/name, or leave it unset for the embedded SQLite file"
    ) from error
# Health checks: a kept connection that died (database restarted) is replaced at the
# start of the next request instead of failing it.
DATABASES = {
    "default": dj_database_url.parse(DATABASE_URL, conn_max_age=env_int("DB_CONN_MAX_AGE", 60), conn_health_checks=True)
}
if DATABASES["default"]["ENGINE"] == "django.db.backends.postgresql":
    # Pages run short indexed queries: compiling one (JIT) cost more than running it (70 ms on the refits
    # page's stale count at 100,000 motors), and the bulk reads of refits and exports gain little from it.
    DATABASES["default"].setdefault("OPTIONS", {})["options"] = "-c jit=off"
# How long a single write waits for a long bulk write before it gives up and says the database is busy: on SQLite
# the wait for the database's one write lock ("database is locked"), on PostgreSQL a reading's wait for a readings
# import's write (`readings.hold_reading_saves`). Under the web server's own timeout, so the page says why.
FLEET_WRITE_WAIT_MS = env_int("FLEET_WRITE_WAIT_MS", 10_000)
if DATABASES["default"]["ENGINE"] == "django.db.backends.sqlite3":
    DATABASES["default"]["CONN_MAX_AGE"] = 0
    DATABASES["default"]["OPTIONS"] = {
        "init_command": (
            f"PRAGMA journal_mode=WAL; PRAGMA synchronous=NORMAL; PRAGMA busy_timeout={FLEET_WRITE_WAIT_MS};"
        ),
        "transaction_mode": "IMMEDIATE",
    }
DEFAULT_AUTO_FIELD = "django.db.models.BigAutoField"

AUTH_PASSWORD_VALIDATORS = [
    {"NAME": "django.contrib.auth.password_validation.MinimumLengthValidator"},
    {"NAME": "django.contrib.auth.password_validation.CommonPasswordValidator"},
]
LOGIN_URL = "login"
LOGIN_REDIRECT_URL = "after_sign_in"  # planners land on their dashboard
LOGOUT_REDIRECT_URL = "login"

LANGUAGE_CODE = "en"
TIME_ZONE = os.environ.get("TIME_ZONE", "UTC")
USE_I18N = True
USE_TZ = True

STATIC_URL = "static/"
STATIC_ROOT = BASE_DIR / "staticfiles"
STATICFILES_FINDERS = [
    "django.contrib.staticfiles.finders.FileSystemFinder",
    "django.contrib.staticfiles.finders.AppDirectoriesFinder",
    "fleet.staticfiles.PlotlyFinder",  # plotly.min.js from the installed plotly package
]
# Outside production, serve straight from the apps' static folders (no collectstatic).
WHITENOISE_USE_FINDERS = not PRODUCTION
WHITENOISE_AUTOREFRESH = not PRODUCTION
STORAGES = {
    "default": {"BACKEND": "django.core.files.storage.FileSystemStorage"},
    "staticfiles": {
        "BACKEND": "whitenoise.storage.CompressedManifestStaticFilesStorage"
        if PRODUCTION
        else "django.contrib.staticfiles.storage.StaticFilesStorage"
    },
}

REST_FRAMEWORK = {
    "DEFAULT_AUTHENTICATION_CLASSES": [
        "rest_framework.authentication.TokenAuthentication",  # first: a missing token answers 401
        "rest_framework.authentication.SessionAuthentication",
    ],
    "DEFAULT_PERMISSION_CLASSES": ["rest_framework.permissions.IsAuthenticated"],
    # JSON to every client, a browser too: the API is for scripts, and the pages are the screens.
    "DEFAULT_RENDERER_CLASSES": ["rest_framework.renderers.JSONRenderer"],
    # Bodies are JSON objects only (another content type answers 415); JSON the parser cannot read (nested
    # too deep) and a body past the size limit answer JSON too.
    "DEFAULT_PARSER_CLASSES": ["fleet.api_bodies.ReadableJSONParser"],
    "EXCEPTION_HANDLER": "fleet.api_bodies.api_exception_handler",
    "DEFAULT_PAGINATION_CLASS": "rest_framework.pagination.PageNumberPagination",
    "PAGE_SIZE": 100,
}

# Celery: no broker means every task runs in-process, through the same code path.
CELERY_BROKER_URL = os.environ.get("CELERY_BROKER_URL", "")
CELERY_TASK_ALWAYS_EAGER = not CELERY_BROKER_URL
# The queue the tasks go to and the workers take them from: two installations (or test runs) sharing one Redis
# keep apart by naming their own.
CELERY_TASK_DEFAULT_QUEUE = os.environ.get("CELERY_TASK_DEFAULT_QUEUE") or "celery"
CELERY_TASK_EAGER_PROPAGATES = True
CELERY_TASK_SERIALIZER = "json"
CELERY_RESULT_SERIALIZER = "json"
CELERY_ACCEPT_CONTENT = ["json"]
# Progress lives in the database; no caller waits for a task's result. Storing none
# also keeps a dead result store out of the request path (subscribing to a result
# retried for about 19 s on every send while Redis was down).
CELERY_TASK_IGNORE_RESULT = True
CELERY_RESULT_BACKEND = os.environ.get("CELERY_RESULT_BACKEND") or None
CELERY_REDIS_SOCKET_CONNECT_TIMEOUT = 0.5
CELERY_REDIS_SOCKET_TIMEOUT = 1
CELERY_RESULT_BACKEND_TRANSPORT_OPTIONS = {"retry_policy": {"max_retries": 1, "interval_start": 0}}
CELERY_TASK_ACKS_LATE = True
CELERY_TASK_REJECT_ON_WORKER_LOST = True
CELERY_WORKER_PREFETCH_MULTIPLIER = 1
# Connections are closed around tasks as around requests (config/celery.py: past DB_CONN_MAX_AGE, or
# unusable); Celery's fix-up would otherwise close them after every task. It still closes them after
# this many tasks.
CELERY_DB_REUSE_MAX = 1000
CELERY_TASK_TIME_LIMIT = 30 * 60
CELERY_TASK_SOFT_TIME_LIMIT = 25 * 60
# A chunk of a fleet refit (FLEET_REFIT_CHUNK_SIZE capacitors) takes seconds; past
# these limits it is stopped, and a run with no progress for longer than the hard
# limit (plus a minute) counts as abandoned.
FLEET_REFIT_CHUNK_SOFT_LIMIT_S = env_int("FLEET_REFIT_CHUNK_SOFT_LIMIT_S", 5 * 60)
FLEET_REFIT_CHUNK_TIME_LIMIT_S = env_int("FLEET_REFIT_CHUNK_TIME_LIMIT_S", 6 * 60)
FLEET_REFIT_ABANDONED_AFTER_S = FLEET_REFIT_CHUNK_TIME_LIMIT_S + 60
# Fail fast when the broker is down: enqueueing gives up within about a second, the
# reading is already saved and the stale sweep refits it later. The same socket
# timeouts cover a broker that hangs instead of refusing.
CELERY_BROKER_CONNECTION_TIMEOUT = 1
CELERY_TASK_PUBLISH_RETRY = True
CELERY_TASK_PUBLISH_RETRY_POLICY = {"max_retries": 1, "interval_start": 0, "interval_step": 0.2, "interval_max": 0.2}
CELERY_BROKER_TRANSPORT_OPTIONS = {
    "socket_connect_timeout": 0.5,
    "socket_timeout": 1,
    # Every task acknowledges late, so an unacknowledged message goes back to the
    # queue after this long: longer than any task's hard limit, or a task still
    # running would be delivered twice.
    "visibility_timeout": max(CELERY_TASK_TIME_LIMIT, FLEET_REFIT_CHUNK_TIME_LIMIT_S) + 5 * 60,
}
CELERY_TIMEZONE = TIME_ZONE
CELERY_BEAT_SCHEDULE = {
    "nightly-fleet-refit": {"task": "fleet.tasks.refit_fleet", "schedule": crontab(hour=2, minute=15)},
    "sweep-stale-assessments": {"task": "fleet.tasks.sweep_stale", "schedule": crontab(minute="*/15")},
    # Weekly, before a nightly refit: the back-test re-estimates the band calibration the refits use.
    "weekly-backtest": {"task": "fleet.tasks.backtest_fleet", "schedule": crontab(day_of_week=0, hour=1, minute=0)},
    # Nightly, after the refit: each part's life-data fit, read by the dashboard's spares forecast.
    "nightly-life-fits": {"task": "fleet.tasks.refresh_life_fits", "schedule": crontab(hour=4, minute=0)},
    # Every morning: the planners' digest of capacitors newly at the top risk level or overdue a reading.
    "daily-digest": {"task": "fleet.tasks.send_daily_digest", "schedule": crontab(hour=6, minute=30)},
}

# Mail: the planners' daily digest. The console backend (mail printed to the log) unless set.
EMAIL_BACKEND = os.environ.get("EMAIL_BACKEND") or (
    "django.core.mail.backends.smtp.EmailBackend" if PRODUCTION else "django.core.mail.backends.console.EmailBackend"
)
EMAIL_HOST = os.environ.get("EMAIL_HOST", "localhost")
EMAIL_PORT = env_int("EMAIL_PORT", 25)
EMAIL_HOST_USER = os.environ.get("EMAIL_HOST_USER", "")
EMAIL_HOST_PASSWORD = os.environ.get("EMAIL_HOST_PASSWORD", "")
EMAIL_USE_TLS = env_bool("EMAIL_USE_TLS", False)
DEFAULT_FROM_EMAIL = os.environ.get("DEFAULT_FROM_EMAIL", "fleet@localhost")
# The address people open the site at, for links in emails.
FLEET_SITE_URL = os.environ.get("FLEET_SITE_URL", "http://127.0.0.1:8000").rstrip("/")

# Fleet computations: chunk size of a fleet refit, and the engineering constants.
FLEET_REFIT_CHUNK_SIZE = env_int("FLEET_REFIT_CHUNK_SIZE", 2000)
# A chunk larger than this is refitted in parts of this many capacitors, each judged on a second thread
# while the next is read and the one before written (0: in one piece). It pays where a worker and its
# database server process have cores of their own (one worker, a refit in-process, a database host of
# its own), not with two workers on the database's own two cores (README, fleet refit figures).
FLEET_REFIT_PART_SIZE = env_int("FLEET_REFIT_PART_SIZE", 0)
# Fitted capacitors a back-test samples at most (a fixed sample): bounded time and memory at plant scale.
FLEET_BACKTEST_MAX_CAPACITORS = env_int("FLEET_BACKTEST_MAX_CAPACITORS", 20000)
# Capacitors of one part fitted at most (a fixed sample) to estimate its population of paths before a fleet refit.
# 2,000 put the mean of a part's slopes within 2.2 % of their spread (one standard error) and its variance within
# 3.2 %; 5,000 took 4 s of a 100,000-motor refit's start on two cores, 2,000 takes 1.5 s (measured 2026-12-04).
FLEET_PRIOR_MAX_CAPACITORS_PER_PART = env_int("FLEET_PRIOR_MAX_CAPACITORS_PER_PART", 2000)
# Days a superseded assessment is kept after it was made (0: every one, for good). Each refit adds one a capacitor;
# they are derived from the readings, which are kept for good (refits.prune_assessment_history).
FLEET_ASSESSMENT_HISTORY_DAYS = env_int("FLEET_ASSESSMENT_HISTORY_DAYS", 35)

# Days an uploaded import file is kept after its job last changed (0: for good). Its counts, problems and what it
# imported stay; the file itself (up to FLEET_IMPORT_MAX_FILE_MB each) only serves a new check or the rows to fix.
FLEET_IMPORT_FILE_DAYS = env_int("FLEET_IMPORT_FILE_DAYS", 90)

# Import limits, checked before a file is parsed (an XLSX is a zip: its unpacked size and sheet dimension count).
FLEET_IMPORT_MAX_FILE_MB = env_int("FLEET_IMPORT_MAX_FILE_MB", 50)
FLEET_IMPORT_MAX_UNPACKED_MB = env_int("FLEET_IMPORT_MAX_UNPACKED_MB", 200)
FLEET_IMPORT_MAX_ROWS = env_int("FLEET_IMPORT_MAX_ROWS", 250_000)
FLEET_IMPORT_MAX_COLUMNS = env_int("FLEET_IMPORT_MAX_COLUMNS", 60)

if PRODUCTION:
    SESSION_COOKIE_SECURE = env_bool("SESSION_COOKIE_SECURE", True)
    CSRF_COOKIE_SECURE = env_bool("CSRF_COOKIE_SECURE", True)
    SECURE_SSL_REDIRECT = env_bool("SECURE_SSL_REDIRECT", True)
    SECURE_HSTS_SECONDS = env_int("SECURE_HSTS_SECONDS", 31536000)
    SECURE_HSTS_INCLUDE_SUBDOMAINS = True
    SECURE_CONTENT_TYPE_NOSNIFF = True

# Security: sign-in lockout, API throttles, Content-Security-Policy, proxy trust, HSTS
# preload, audit trail. Kept in this one block.
# Preloading commits the domain (and its subdomains) to HTTPS in browsers for months: opt in.
SECURE_HSTS_PRELOAD = env_bool("SECURE_HSTS_PRELOAD", False)
SILENCED_SYSTEM_CHECKS = []
if not SECURE_HSTS_PRELOAD:
    SILENCED_SYSTEM_CHECKS.append("security.W021")  # preload is a deliberate opt-in, not an oversight
if DATABASES["default"]["ENGINE"] == "django.db.backends.sqlite3":
    # The indexes' INCLUDE columns serve PostgreSQL's index-only scans at plant scale; SQLite indexes their key
    # columns alone, all the embedded default needs: no warning on a new user's every command.
    SILENCED_SYSTEM_CHECKS.append("models.W040")
# X-Forwarded-Proto / -For are believed only when a proxy that sets them sits in front.
FLEET_BEHIND_PROXY = env_bool("FLEET_BEHIND_PROXY", False)
if FLEET_BEHIND_PROXY:
    SECURE_PROXY_SSL_HEADER = ("HTTP_X_FORWARDED_PROTO", "https")
# Counters for lockout and throttles: Redis shares them between web workers.
CACHE_URL = os.environ.get("CACHE_URL", "")
CACHES = {
    "default": {"BACKEND": "django.core.cache.backends.redis.RedisCache", "LOCATION": CACHE_URL}
    if CACHE_URL
    else {"BACKEND": "django.core.cache.backends.locmem.LocMemCache"}
}
LOGIN_FAILURE_LIMIT = env_int("LOGIN_FAILURE_LIMIT", 5)
LOGIN_LOCKOUT_MINUTES = env_int("LOGIN_LOCKOUT_MINUTES", 15)


def env_rate(name: str, default: str) -> str:
    """A rate as DRF writes it: a count, a slash and second, minute, hour or day."""
    raw = os.environ.get(name, "") or default
    count, _, period = raw.partition("/")
    if not count.isdigit() or period not in {"second", "minute", "hour", "day", "s", "m", "h", "d"}:
        raise ImproperlyConfigured(f"{name}={raw!r}: write a rate like 60/minute")
    return raw


API_BAD_TOKEN_RATE = env_rate("API_BAD_TOKEN_RATE", "10/minute")
REST_FRAMEWORK["DEFAULT_AUTHENTICATION_CLASSES"] = [
    "fleet.security.ThrottledTokenAuthentication",  # first: a missing token answers 401; bad tokens are counted
    "rest_framework.authentication.SessionAuthentication",
]
REST_FRAMEWORK["DEFAULT_THROTTLE_CLASSES"] = [
    "rest_framework.throttling.AnonRateThrottle",
    "rest_framework.throttling.UserRateThrottle",
]
REST_FRAMEWORK["DEFAULT_THROTTLE_RATES"] = {
    "anon": env_rate("API_THROTTLE_ANON", "30/minute"),
    "user": env_rate("API_THROTTLE_USER", "600/minute"),
}
REST_FRAMEWORK["NUM_PROXIES"] = 1 if FLEET_BEHIND_PROXY else None
CSP_REPORT_ONLY = env_bool("CSP_REPORT_ONLY", False)
MIDDLEWARE.insert(
    MIDDLEWARE.index("django.middleware.security.SecurityMiddleware") + 1,
    "fleet.security.ContentSecurityPolicyMiddleware",
)
MIDDLEWARE.insert(
    MIDDLEWARE.index("django.contrib.auth.middleware.AuthenticationMiddleware") + 1, "fleet.audit.AuditMiddleware"
)

LOGGING = {
    "version": 1,
    "disable_existing_loggers": False,
    "filters": {"refusals_in_one_line": {"()": "fleet.log_filters.RefusalsInOneLine"}},
    "handlers": {"console": {"class": "logging.StreamHandler"}},
    "root": {"handlers": ["console"], "level": os.environ.get("LOG_LEVEL", "INFO")},
    "loggers": {
        # One line per finished task drowns the demo's output when tasks run in-process; a separate worker's
        # log says each task succeeded and how long it took (an operator saw only "received" without it).
        "celery.app.trace": {"level": "WARNING" if CELERY_TASK_ALWAYS_EAGER else "INFO"},
        "django.request": {"filters": ["refusals_in_one_line"]},
    },
}
