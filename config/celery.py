"""Celery application. Without CELERY_BROKER_URL the tasks run eagerly in-process (see settings)."""

import os

from celery import Celery

os.environ.setdefault("DJANGO_SETTINGS_MODULE", "config.settings.base")

app = Celery("barometer")
app.config_from_object("django.conf:settings", namespace="CELERY")
app.autodiscover_tasks()
