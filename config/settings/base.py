"""Barometer settings, read from the environment (see .env.example and README "Configuration").

Embedded default: a SQLite file under var/ and eager Celery tasks, so the product runs with no service.
Production: set DATABASE_URL (PostgreSQL), CELERY_BROKER_URL (Redis), SECRET_KEY, ALLOWED_HOSTS, DEBUG=0.
"""

from datetime import timedelta
from pathlib import Path

import environ
from django.core.exceptions import ImproperlyConfigured

BASE_DIR = Path(__file__).resolve().parent.parent.parent
VAR_DIR = BASE_DIR / "var"
VAR_DIR.mkdir(exist_ok=True)  # git-ignored: the default SQLite database, uploads and static files live here

env = environ.Env()
environ.Env.read_env(BASE_DIR / ".env", overwrite=False)

DEBUG = env.bool("DEBUG", default=False)
SECRET_KEY = env.str("SECRET_KEY", default="")
if not SECRET_KEY:
    if not DEBUG:
        raise ImproperlyConfigured(
            "SECRET_KEY is not set. Set it in the environment (or run with DEBUG=1 for local use only)."
        )
    SECRET_KEY = "insecure-local-development-key-do-not-use-in-production"
ALLOWED_HOSTS = env.list("ALLOWED_HOSTS", default=["127.0.0.1", "localhost"] if DEBUG else [])
CSRF_TRUSTED_ORIGINS = env.list("CSRF_TRUSTED_ORIGINS", default=[])

INSTALLED_APPS = [
    "django.contrib.admin",
    "django.contrib.auth",
    "django.contrib.contenttypes",
    "django.contrib.sessions",
    "django.contrib.messages",
    "django.contrib.staticfiles",
    "rest_framework",
    "drf_spectacular",
    "django_filters",
    "ingest",
    "analytics",
]

MIDDLEWARE = [
    "django.middleware.security.SecurityMiddleware",
    "whitenoise.middleware.WhiteNoiseMiddleware",
    "django.contrib.sessions.middleware.SessionMiddleware",
    "django.middleware.common.CommonMiddleware",
    "django.middleware.csrf.CsrfViewMiddleware",
    "django.contrib.auth.middleware.AuthenticationMiddleware",
    "django.contrib.messages.middleware.MessageMiddleware",
    "django.middleware.clickjacking.XFrameOptionsMiddleware",
]

ROOT_URLCONF = "config.urls"
WSGI_APPLICATION = "config.wsgi.application"

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
            ],
        },
    },
]

DATABASES = {"default": env.db("DATABASE_URL", default=f"sqlite:///{VAR_DIR / 'barometer.sqlite3'}")}
DATABASES["default"]["ATOMIC_REQUESTS"] = False
if DATABASES["default"]["ENGINE"] == "django.db.backends.sqlite3":
    # Background threads and the dev server share the file: wait for locks instead of failing at once.
    DATABASES["default"].setdefault("OPTIONS", {})
    DATABASES["default"]["OPTIONS"].setdefault("timeout", 30)
    DATABASES["default"]["OPTIONS"].setdefault("transaction_mode", "IMMEDIATE")
    DATABASES["default"]["OPTIONS"].setdefault(
        "init_command", "PRAGMA journal_mode=WAL; PRAGMA synchronous=NORMAL;"
    )
CACHE_URL = env.str("CACHE_URL", default="")
if CACHE_URL.startswith(("redis://", "rediss://")):
    CACHES = {"default": {"BACKEND": "django.core.cache.backends.redis.RedisCache", "LOCATION": CACHE_URL}}
else:
    CACHES = {"default": {"BACKEND": "django.core.cache.backends.locmem.LocMemCache"}}
DEFAULT_AUTO_FIELD = "django.db.models.BigAutoField"

AUTH_PASSWORD_VALIDATORS = [
    {"NAME": "django.contrib.auth.password_validation.MinimumLengthValidator"},
    {"NAME": "django.contrib.auth.password_validation.CommonPasswordValidator"},
]
LOGIN_URL = "login"
LOGIN_REDIRECT_URL = "/"
LOGOUT_REDIRECT_URL = "login"

LANGUAGE_CODE = "en-gb"
TIME_ZONE = "UTC"
USE_I18N = False
USE_TZ = True

STATIC_URL = "static/"
STATIC_ROOT = env.path("STATIC_ROOT", default=str(VAR_DIR / "staticfiles"))
STATICFILES_DIRS = [BASE_DIR / "static"]
STATICFILES_FINDERS = [
    "django.contrib.staticfiles.finders.FileSystemFinder",
    "django.contrib.staticfiles.finders.AppDirectoriesFinder",
    "barometer_common.staticfinders.PlotlyFinder",  # plotly.js from the plotly package, no CDN
]
MEDIA_ROOT = env.path("MEDIA_ROOT", default=str(VAR_DIR / "media"))
MEDIA_URL = "media/"

# Uploads: the raw file is kept (content-addressed under MEDIA_ROOT/uploads) so it can be re-parsed.
BAROMETER_MAX_UPLOAD_BYTES = env.int("BAROMETER_MAX_UPLOAD_BYTES", default=250 * 1024 * 1024)
DATA_UPLOAD_MAX_MEMORY_SIZE = 10 * 1024 * 1024
FILE_UPLOAD_MAX_MEMORY_SIZE = 5 * 1024 * 1024
FILE_UPLOAD_TEMP_DIR = env.str("FILE_UPLOAD_TEMP_DIR", default=None)
# The size check first, so an upload over BAROMETER_MAX_UPLOAD_BYTES stops before its file is stored.
FILE_UPLOAD_HANDLERS = [
    "barometer_common.uploads.UploadSizeLimitHandler",
    "django.core.files.uploadhandler.MemoryFileUploadHandler",
    "django.core.files.uploadhandler.TemporaryFileUploadHandler",
]
# Embedded mode: run queued tasks in a background thread of the web process (live import progress).
BAROMETER_EAGER_IN_THREAD = env.bool("BAROMETER_EAGER_IN_THREAD", default=True)
# Analytics: how many consecutive green runs make a quarantined test a candidate for release.
BAROMETER_RELEASE_AFTER_GREEN_RUNS = env.int("BAROMETER_RELEASE_AFTER_GREEN_RUNS", default=30)

# Celery: no broker configured -> tasks run eagerly in-process (embedded default).
CELERY_BROKER_URL = env.str("CELERY_BROKER_URL", default="")
CELERY_RESULT_BACKEND = env.str("CELERY_RESULT_BACKEND", default=None)
CELERY_TASK_ALWAYS_EAGER = not CELERY_BROKER_URL
CELERY_TASK_EAGER_PROPAGATES = False
CELERY_TASK_ACKS_LATE = True
CELERY_WORKER_PREFETCH_MULTIPLIER = 1
CELERY_TASK_SERIALIZER = "json"
CELERY_ACCEPT_CONTENT = ["json"]
# A stored upload must never wait on an unreachable broker: fail fast and let the sweep re-enqueue.
CELERY_BROKER_CONNECTION_TIMEOUT = 2
CELERY_BROKER_TRANSPORT_OPTIONS = {"max_retries": 1, "interval_start": 0, "interval_step": 0.2,
                                   "interval_max": 0.5, "socket_connect_timeout": 2, "socket_timeout": 5}
CELERY_BEAT_SCHEDULE = {
    "sweep-unqueued-imports": {"task": "ingest.tasks.sweep_unqueued_imports", "schedule": timedelta(minutes=2)},
    "nightly-analytics-refresh": {"task": "analytics.tasks.refresh_all_projects", "schedule": timedelta(hours=6)},
}

REST_FRAMEWORK = {
    "DEFAULT_AUTHENTICATION_CLASSES": [
        "ingest.api.auth.ProjectTokenAuthentication",
        "rest_framework.authentication.SessionAuthentication",
    ],
    "DEFAULT_PERMISSION_CLASSES": ["rest_framework.permissions.IsAuthenticated"],
    "DEFAULT_SCHEMA_CLASS": "drf_spectacular.openapi.AutoSchema",
    "DEFAULT_FILTER_BACKENDS": ["django_filters.rest_framework.DjangoFilterBackend"],
    "DEFAULT_PAGINATION_CLASS": "rest_framework.pagination.LimitOffsetPagination",
    "PAGE_SIZE": 100,
    "UNAUTHENTICATED_USER": "django.contrib.auth.models.AnonymousUser",
}
SPECTACULAR_SETTINGS = {
    "TITLE": "Barometer API",
    "DESCRIPTION": "Upload test results and defect exports; read flaky-test scores, failure causes and forecasts.",
    "VERSION": "1.0.0",
    "SERVE_INCLUDE_SCHEMA": False,
    # The schema lists every endpoint and field: only callers with a token or a session may read it.
    "SERVE_PERMISSIONS": ["rest_framework.permissions.IsAuthenticated"],
}

# Hardened defaults when not in DEBUG.
SESSION_COOKIE_HTTPONLY = True
CSRF_COOKIE_HTTPONLY = False
X_FRAME_OPTIONS = "DENY"
SECURE_CONTENT_TYPE_NOSNIFF = True
if not DEBUG:
    SESSION_COOKIE_SECURE = env.bool("SESSION_COOKIE_SECURE", default=True)
    CSRF_COOKIE_SECURE = env.bool("CSRF_COOKIE_SECURE", default=True)
    SECURE_SSL_REDIRECT = env.bool("SECURE_SSL_REDIRECT", default=False)
    SECURE_HSTS_SECONDS = env.int("SECURE_HSTS_SECONDS", default=0)
    SECURE_PROXY_SSL_HEADER = ("HTTP_X_FORWARDED_PROTO", "https")

LOGGING = {
    "version": 1,
    "disable_existing_loggers": False,
    "handlers": {"console": {"class": "logging.StreamHandler"}},
    "root": {"handlers": ["console"], "level": env.str("LOG_LEVEL", default="INFO")},
}
