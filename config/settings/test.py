"""Settings for the test suite: SQLite unless DATABASE_URL is set (CI sets PostgreSQL), eager Celery unless
CELERY_BROKER_URL is set (CI sets Redis; only the worker round-trip tests use it)."""

import os
import tempfile

os.environ.setdefault("SECRET_KEY", "test-only-secret-key")
os.environ.setdefault("DEBUG", "0")

from .base import *  # noqa: E402,F403
from .base import env  # noqa: E402

PASSWORD_HASHERS = ["django.contrib.auth.hashers.MD5PasswordHasher"]
CACHES = {"default": {"BACKEND": "django.core.cache.backends.locmem.LocMemCache"}}
MEDIA_ROOT = tempfile.mkdtemp(prefix="barometer-test-media-")
# Tests run eagerly in-process; the broker URL (if any) is kept for the real-worker round-trip tests.
TEST_CELERY_BROKER_URL = env.str("CELERY_BROKER_URL", default="")
CELERY_TASK_ALWAYS_EAGER = True
CELERY_TASK_EAGER_PROPAGATES = True
CELERY_BROKER_URL = "memory://"
SESSION_COOKIE_SECURE = False
CSRF_COOKIE_SECURE = False
STORAGES = {
    "default": {"BACKEND": "django.core.files.storage.FileSystemStorage"},
    "staticfiles": {"BACKEND": "django.contrib.staticfiles.storage.StaticFilesStorage"},
}
BAROMETER_EAGER_IN_THREAD = False
