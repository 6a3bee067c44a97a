"""Hand work to Celery without ever blocking a request on an unreachable broker."""

from __future__ import annotations

import logging
import threading

from django.conf import settings
from django.db import close_old_connections, connection

log = logging.getLogger(__name__)


def _run_in_thread(task, args: tuple) -> None:
    def target() -> None:
        close_old_connections()
        try:
            task.apply(args=args)
        finally:
            connection.close()

    threading.Thread(target=target, name=f"barometer-{task.name}", daemon=True).start()


def task_enqueue(task, *args) -> bool:
    """Queue ``task(*args)``; True when it was handed over (or run), False when the broker was unreachable.

    Embedded mode (no broker): run in-process, in a background thread when BAROMETER_EAGER_IN_THREAD is on
    (the dev server shows live progress) or inline otherwise (tests, CLI).
    """
    from config.celery import app

    if app.conf.task_always_eager:
        if getattr(settings, "BAROMETER_EAGER_IN_THREAD", False):
            _run_in_thread(task, args)
        else:
            task.apply(args=args)
        return True
    try:
        task.apply_async(args=args, retry=False)
        return True
    except Exception as exc:  # kombu raises several types for a down broker
        log.warning("could not enqueue %s%s: %s (the sweep will retry)", task.name, args, exc)
        return False
