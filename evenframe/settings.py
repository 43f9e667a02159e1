"""Django settings, chosen by environment variables only.

Two configurations, one code base:

* Embedded default (no variables set): SQLite in WAL mode with a busy
  timeout, and Celery's file-system broker, both under ``EVENFRAME_DATA_DIR``
  (default ``./data``). Nothing else has to be installed.
* Service mode: ``DATABASE_URL=postgres://...`` and
  ``CELERY_BROKER_URL=redis://...``. A worker on another machine with the
  same URLs and the same ``EVENFRAME_MEDIA_ROOT`` joins the same fleet.
"""

from __future__ import annotations

import os
import re
import sys
from datetime import timedelta
from pathlib import Path

import dj_database_url
from django.core.exceptions import ImproperlyConfigured

BASE_DIR = Path(__file__).resolve().parent.parent


def env_bool(name: str, default: bool = False) -> bool:
    value = os.environ.get(name)
    if value is None or value == "":
        return default
    if value.lower() in ("1", "true", "yes", "on"):
        return True
    if value.lower() in ("0", "false", "no", "off"):
        return False
    raise ImproperlyConfigured(f"{name} must be true or false, got {value!r}")


def env_number(name: str, default: float, *, minimum: float, whole: bool = False) -> float:
    """A number from the environment, refused at start-up (not at the first request) when it is not one."""
    value = os.environ.get(name)
    if value is None or value.strip() == "":
        return default
    try:
        number = int(value) if whole else float(value)
    except ValueError:
        kind = "a whole number" if whole else "a number"
        raise ImproperlyConfigured(f"{name} must be {kind}, got {value!r}") from None
    if not number >= minimum:  # also refuses nan
        raise ImproperlyConfigured(f"{name} must be at least {minimum:g}, got {value!r}")
    return number


def env_currency(name: str, default: str) -> str:
    """An ISO 4217 currency code (three capital letters, e.g. EUR, USD, CHF), refused at start-up otherwise."""
    value = (os.environ.get(name) or "").strip() or default
    if not re.fullmatch(r"[A-Z]{3}", value):
        raise ImproperlyConfigured(
            f"{name} must be an ISO 4217 code of three capital letters (e.g. EUR), got {value!r}"
        )
    return value


_default_data_dir = BASE_DIR / "data"
if "pytest" in sys.modules and not os.environ.get("EVENFRAME_DATA_DIR"):
    # A test run never shares the demo's database, broker folders or media: a running demo worker
    # would otherwise consume the tests' messages.
    _default_data_dir = BASE_DIR / "data" / "test"
DATA_DIR = Path(os.environ.get("EVENFRAME_DATA_DIR", _default_data_dir)).resolve()
MEDIA_ROOT = Path(os.environ.get("EVENFRAME_MEDIA_ROOT", DATA_DIR / "media")).resolve()
MEDIA_URL = "/media/"

DEBUG = env_bool("EVENFRAME_DEBUG", False)
# The currency every amount (budgets, spend, prices, asset costs) is in; pages show it beside each amount.
# Amounts are stored as plain numbers: changing it relabels them, it converts nothing.
CURRENCY = env_currency("EVENFRAME_CURRENCY", "EUR")
# Where people reach the dashboard (e.g. https://frames.example.org), for links in notifications; empty: no links.
PUBLIC_URL = os.environ.get("EVENFRAME_PUBLIC_URL", "").strip().rstrip("/")
# Refuse webhook addresses that resolve inside this network (loopback, private, link-local) at send time.
WEBHOOK_BLOCK_PRIVATE = os.environ.get("EVENFRAME_WEBHOOK_BLOCK_PRIVATE", "") in ("1", "true", "yes")
# Notification e-mail: SMTP when EVENFRAME_EMAIL_HOST is set, otherwise written to the worker's log (console).
EMAIL_HOST = os.environ.get("EVENFRAME_EMAIL_HOST", "")
EMAIL_BACKEND = (
    "django.core.mail.backends.smtp.EmailBackend" if EMAIL_HOST else "django.core.mail.backends.console.EmailBackend"
)
EMAIL_PORT = int(os.environ.get("EVENFRAME_EMAIL_PORT", "") or 25)
EMAIL_HOST_USER = os.environ.get("EVENFRAME_EMAIL_USER", "")
EMAIL_HOST_PASSWORD = os.environ.get("EVENFRAME_EMAIL_PASSWORD", "")
EMAIL_USE_TLS = os.environ.get("EVENFRAME_EMAIL_TLS", "") in ("1", "true", "yes")
EMAIL_TIMEOUT = 15
DEFAULT_FROM_EMAIL = os.environ.get("EVENFRAME_EMAIL_FROM", "") or "evenframe@localhost"
_secret = os.environ.get("EVENFRAME_SECRET_KEY", "")
if not _secret:
    if os.environ.get("DATABASE_URL", "").startswith("postgres") and not DEBUG:
        # A shared server must not run with a key everyone can read in the source.
        raise ImproperlyConfigured("EVENFRAME_SECRET_KEY must be set when DATABASE_URL points to PostgreSQL")
    _secret = "embedded-insecure-key-only-for-a-single-laptop-do-not-deploy-0123456789"
SECRET_KEY = _secret

ALLOWED_HOSTS = [h.strip() for h in os.environ.get("EVENFRAME_ALLOWED_HOSTS", "127.0.0.1,localhost").split(",") if h]
CSRF_TRUSTED_ORIGINS = [o for o in os.environ.get("EVENFRAME_CSRF_TRUSTED_ORIGINS", "").split(",") if o]

INSTALLED_APPS = [
    "django.contrib.admin",
    "django.contrib.auth",
    "django.contrib.contenttypes",
    "django.contrib.sessions",
    "django.contrib.messages",
    "django.contrib.staticfiles",
    "evenframe",
    "teams",
    "assets",
    "campaigns",
    "datasets",
    "fleet",
    "dashboard",
    "api",
    # django-ninja: in INSTALLED_APPS so the API docs page serves Swagger UI from its own static files (no CDN).
    "ninja",
    "axes",
]

MIDDLEWARE = [
    "django.middleware.security.SecurityMiddleware",
    "evenframe.login_throttle.RejectNulHeadersMiddleware",
    # Serves collected static files (plotly.js, CSS) in service mode without a separate web server.
    "whitenoise.middleware.WhiteNoiseMiddleware",
    "django.contrib.sessions.middleware.SessionMiddleware",
    "django.middleware.common.CommonMiddleware",
    "django.middleware.csrf.CsrfViewMiddleware",
    "django.contrib.auth.middleware.AuthenticationMiddleware",
    "django.contrib.auth.middleware.LoginRequiredMiddleware",
    "django.contrib.messages.middleware.MessageMiddleware",
    "django.middleware.clickjacking.XFrameOptionsMiddleware",
    # Last, as django-axes asks: turns a locked-out sign-in into the lockout page.
    "axes.middleware.AxesMiddleware",
]

ROOT_URLCONF = "evenframe.urls"
WSGI_APPLICATION = "evenframe.wsgi.application"
LOGIN_URL = "login"
LOGIN_REDIRECT_URL = "home"
LOGOUT_REDIRECT_URL = "login"

TEMPLATES = [
    {
        "BACKEND": "django.template.backends.django.DjangoTemplates",
        "DIRS": [],  # templates live in the apps (dashboard/templates, datasets/templates)
        "APP_DIRS": True,
        "OPTIONS": {
            "context_processors": [
                "django.template.context_processors.request",
                "django.contrib.auth.context_processors.auth",
                "django.contrib.messages.context_processors.messages",
            ],
        },
    },
]

# --- database -------------------------------------------------------------
DATABASE_URL = os.environ.get("DATABASE_URL", "")
if DATABASE_URL:
    DATABASES = {"default": dj_database_url.parse(DATABASE_URL, conn_max_age=60, conn_health_checks=True)}
    if DATABASES["default"]["ENGINE"] == "django.db.backends.sqlite3":
        DATABASES["default"].setdefault("OPTIONS", {})
else:
    DATABASES = {
        "default": {
            "ENGINE": "django.db.backends.sqlite3",
            "NAME": str(DATA_DIR / "evenframe.sqlite3"),  # a str, as from DATABASE_URL
        }
    }
if DATABASES["default"]["ENGINE"] == "django.db.backends.sqlite3":
    # A worker process and the web server share the file: WAL lets readers
    # proceed during a write, and the busy timeout waits for the lock rather
    # than failing with "database is locked".
    DATABASES["default"]["OPTIONS"] = {
        **DATABASES["default"].get("OPTIONS", {}),
        "timeout": 30,
        "transaction_mode": "IMMEDIATE",
        "init_command": "PRAGMA journal_mode=WAL; PRAGMA synchronous=NORMAL; PRAGMA busy_timeout=30000;",
    }
    _test_name = os.environ.get("EVENFRAME_TEST_SQLITE", str(DATA_DIR / "test-evenframe.sqlite3"))
    # A file, not :memory:, so that worker processes started by tests see the test database.
    DATABASES["default"]["TEST"] = {"NAME": _test_name}
DEFAULT_AUTO_FIELD = "django.db.models.BigAutoField"

# --- celery ----------------------------------------------------------------
CELERY_BROKER_URL = os.environ.get("CELERY_BROKER_URL", "") or "filesystem://"
BROKER_DIR = DATA_DIR / "broker"
if CELERY_BROKER_URL.startswith("filesystem://"):
    CELERY_BROKER_TRANSPORT_OPTIONS = {
        "data_folder_in": str(BROKER_DIR / "queue"),
        "data_folder_out": str(BROKER_DIR / "queue"),
        "processed_folder": str(BROKER_DIR / "processed"),
        "store_processed": False,
        "control_folder": str(BROKER_DIR / "control"),
    }
    CELERY_RESULT_BACKEND = os.environ.get("CELERY_RESULT_BACKEND", "") or f"file://{BROKER_DIR / 'results'}"
else:
    # Redis keeps an unacked message (acks_late) for this long before another worker gets it again: longer
    # than the slowest frame and the longest retry countdown (5 min), or a frame still rendering, or a retry
    # waiting for its ETA, is delivered twice. Tests shorten it to see redelivery after kill -9 within seconds.
    _visibility_timeout_s = float(os.environ.get("EVENFRAME_BROKER_VISIBILITY_TIMEOUT_S", "3600"))
    CELERY_BROKER_TRANSPORT_OPTIONS = {
        "visibility_timeout": _visibility_timeout_s,
        # kombu scans for expired unacked messages every interval × throttle seconds (default 100 s);
        # with a short timeout scan at about its own pace.
        "unacked_restore_interval": max(1, min(10, int(_visibility_timeout_s // 2) or 1)),
        "unacked_restore_throttle": 1 if _visibility_timeout_s < 600 else 10,
    }
    CELERY_RESULT_BACKEND = os.environ.get("CELERY_RESULT_BACKEND", "") or CELERY_BROKER_URL
CELERY_TASK_ACKS_LATE = True
CELERY_TASK_REJECT_ON_WORKER_LOST = True
CELERY_WORKER_PREFETCH_MULTIPLIER = 1
CELERY_TASK_SERIALIZER = "json"
CELERY_RESULT_SERIALIZER = "json"
CELERY_ACCEPT_CONTENT = ["json"]
CELERY_RESULT_EXPIRES = 3600
CELERY_BROKER_CONNECTION_RETRY_ON_STARTUP = True
CELERY_WORKER_HIJACK_ROOT_LOGGER = False
CELERY_TASK_DEFAULT_QUEUE = "evenframe"

# Seconds since its last heartbeat after which a worker is no longer live.
WORKER_HEARTBEAT_S = float(os.environ.get("EVENFRAME_WORKER_HEARTBEAT_S", "5"))
WORKER_LIVE_WINDOW_S = float(os.environ.get("EVENFRAME_WORKER_LIVE_WINDOW_S", "20"))
# Every live worker's heartbeat thread runs the recovery sweep this often (0 = never): frames running on a dead
# worker go back on the queue, queued frames whose message was lost are sent again (campaigns.scheduler.sweep).
WORKER_SWEEP_S = float(os.environ.get("EVENFRAME_WORKER_SWEEP_S", "15"))
# A queued frame waiting this long while workers are live lost its message (broker restart, a dead consumer's
# prefetch); it is sent again under a new dispatch number. Queued frames wait about one frame, so minutes is safe.
STALE_QUEUED_S = float(os.environ.get("EVENFRAME_STALE_QUEUED_S", "900"))
# How long a worker keeps retrying to record a rendered frame while the database is unreachable.
DATABASE_RETRY_S = float(os.environ.get("EVENFRAME_DATABASE_RETRY_S", "300"))

# --- static, i18n ----------------------------------------------------------
STATIC_URL = "/static/"
STATIC_ROOT = Path(os.environ.get("EVENFRAME_STATIC_ROOT", DATA_DIR / "static")).resolve()
STATICFILES_DIRS: list[Path] = []  # static files live in dashboard/static
# Serve straight from the app folders too, so the embedded demo needs no collectstatic step.
WHITENOISE_USE_FINDERS = True
try:
    STATIC_ROOT.mkdir(parents=True, exist_ok=True)
except OSError:  # a read-only checkout still works through the finders
    pass
LANGUAGE_CODE = "en"
TIME_ZONE = "UTC"
USE_I18N = True
USE_TZ = True

AUTH_PASSWORD_VALIDATORS = [
    {"NAME": "django.contrib.auth.password_validation.UserAttributeSimilarityValidator"},
    {"NAME": "django.contrib.auth.password_validation.MinimumLengthValidator"},
    {"NAME": "django.contrib.auth.password_validation.CommonPasswordValidator"},
    {"NAME": "django.contrib.auth.password_validation.NumericPasswordValidator"},
]

# --- security (safe by default; the embedded demo sets EVENFRAME_DEBUG=1) ---
SESSION_COOKIE_HTTPONLY = True
CSRF_COOKIE_HTTPONLY = True
SESSION_COOKIE_SAMESITE = "Lax"
X_FRAME_OPTIONS = "DENY"
SECURE_CONTENT_TYPE_NOSNIFF = True
SECURE_REFERRER_POLICY = "same-origin"
_secure = env_bool("EVENFRAME_SECURE", not DEBUG and bool(DATABASE_URL))
SESSION_COOKIE_SECURE = _secure
CSRF_COOKIE_SECURE = _secure
SECURE_SSL_REDIRECT = env_bool("EVENFRAME_SSL_REDIRECT", _secure)
SECURE_HSTS_SECONDS = int(os.environ.get("EVENFRAME_HSTS_SECONDS", "31536000" if _secure else "0"))
SECURE_HSTS_INCLUDE_SUBDOMAINS = _secure
SECURE_HSTS_PRELOAD = _secure
BEHIND_PROXY = env_bool("EVENFRAME_BEHIND_PROXY", False)
if BEHIND_PROXY:
    SECURE_PROXY_SSL_HEADER = ("HTTP_X_FORWARDED_PROTO", "https")
# Health checks come from localhost over plain HTTP (make demo, container probes).
SECURE_REDIRECT_EXEMPT = [r"^health/?$", r"^health\.json$"]

# --- sign-in throttling (django-axes) ----------------------------------------
# After EVENFRAME_LOGIN_FAILURE_LIMIT failed sign-ins in a row, further sign-ins (even with the right password) are
# refused with a 429 page for EVENFRAME_LOGIN_COOLOFF_MINUTES, on the sign-in page and the admin's alike. The
# authentication backend refuses an authenticate() call without a request, so no sign-in path skips the count.
AUTHENTICATION_BACKENDS = [
    "axes.backends.AxesStandaloneBackend",
    "django.contrib.auth.backends.ModelBackend",
]
# What is counted and locked: a user name from one address (the default: a colleague's typos or a stranger
# guessing cannot lock a user out from everywhere), every attempt from an address, or either of the two.
_LOCKOUT_BY = {
    "user-and-ip": [["username", "ip_address"]],
    "ip": ["ip_address"],
    "user-or-ip": ["username", "ip_address"],
}
_lockout_by = os.environ.get("EVENFRAME_LOGIN_LOCKOUT_BY", "").strip() or "user-and-ip"
if _lockout_by not in _LOCKOUT_BY:
    raise ImproperlyConfigured(
        f"EVENFRAME_LOGIN_LOCKOUT_BY must be one of {', '.join(_LOCKOUT_BY)}, got {_lockout_by!r}"
    )
AXES_LOCKOUT_PARAMETERS = _LOCKOUT_BY[_lockout_by]
AXES_FAILURE_LIMIT = int(env_number("EVENFRAME_LOGIN_FAILURE_LIMIT", 5, minimum=1, whole=True))
AXES_COOLOFF_TIME = timedelta(minutes=env_number("EVENFRAME_LOGIN_COOLOFF_MINUTES", 15, minimum=0.1))
# Attempts during a lockout do not restart it, so the page can say when sign-in opens again.
AXES_RESET_COOL_OFF_ON_FAILURE_DURING_LOCKOUT = False
AXES_RESET_ON_SUCCESS = True  # failures in a row count, not failures over a lifetime
AXES_LOCKOUT_CALLABLE = "evenframe.login_throttle.lockout_response"
AXES_CLIENT_IP_CALLABLE = "evenframe.login_throttle.client_ip_address"

FILE_UPLOAD_MAX_MEMORY_SIZE = 5 * 1024 * 1024
DATA_UPLOAD_MAX_MEMORY_SIZE = 5 * 1024 * 1024

LOGGING = {
    "version": 1,
    "disable_existing_loggers": False,
    "formatters": {"plain": {"format": "%(asctime)s %(levelname)s %(name)s: %(message)s"}},
    "handlers": {"console": {"class": "logging.StreamHandler", "formatter": "plain"}},
    "loggers": {
        "evenframe": {"handlers": ["console"], "level": os.environ.get("EVENFRAME_LOG_LEVEL", "INFO")},
        "django": {"handlers": ["console"], "level": "WARNING"},
        # Failed sign-ins and lockouts, one line each.
        "axes": {"handlers": ["console"], "level": "WARNING", "propagate": False},
    },
}
