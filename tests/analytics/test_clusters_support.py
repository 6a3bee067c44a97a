"""Failures raised by the real Python interpreter, written into builds, for the failure-cause service tests.

Ground truth: each failure is produced by one of the cause functions below, so its true cause is known.
Every traceback, message and exception type is the interpreter's own output (``traceback.format_exc``),
with varying values (keys, ports, numbers) and varying call paths, as in a real CI history.
Invented names only (the Berthwise marina scenario).
"""

from __future__ import annotations

import json
import socket
import traceback
from datetime import datetime, timedelta

from django.utils import timezone

from ingest.models import Build, Project, TestCase, TestResult

CLASSNAME = "berthwise.tests.test_booking.TestBooking"


def _closed_port() -> int:
    """A local TCP port nobody listens on (bound, then released)."""
    with socket.socket() as sock:
        sock.bind(("127.0.0.1", 0))
        return sock.getsockname()[1]


def _lookup_berth(n: int):
    return {}[f"berth-{n:03d}"]


def _occupancy_ratio(n: int):
    booked, capacity = n, 0
    return booked / capacity


def _connect_sensor_bus(n: int):
    socket.create_connection(("127.0.0.1", _closed_port()), timeout=1.0).close()


def _vessel_length(n: int):
    vessel = None
    return vessel.length_m  # type: ignore[attr-defined]


def _check_invoice_total(n: int):
    total, expected = 100 + n, 100 + n + 1
    assert total == expected, f"invoice total {total} != {expected}"


def _acquire_berth_lock(n: int):
    raise TimeoutError(f"lock on berth-{n:03d} not acquired within {1.5 + n % 7:.1f} s")


def _parse_tide_feed(n: int):
    return json.loads("{" + "'x'" * (1 + n % 3))


def _parse_slot_number(n: int):
    return int(f"slot-{n}")


CAUSES = {
    "berth-key": _lookup_berth,
    "zero-capacity": _occupancy_ratio,
    "sensor-bus-refused": _connect_sensor_bus,
    "vessel-none": _vessel_length,
    "invoice-total": _check_invoice_total,
    "berth-lock-timeout": _acquire_berth_lock,
    "tide-feed-json": _parse_tide_feed,
    "slot-number": _parse_slot_number,
}


def _via_booking_flow(cause, n):
    return cause(n)


def _via_admin_screen(cause, n):
    return _via_booking_flow(cause, n)


PATHS = (lambda cause, n: cause(n), _via_booking_flow, _via_admin_screen)


def raise_cause(cause: str, n: int) -> tuple[str, str, str]:
    """``(exception type, message, traceback)`` of cause ``cause`` raised with value ``n``."""
    try:
        PATHS[n % len(PATHS)](CAUSES[cause], n)
    except Exception as exc:  # noqa: BLE001 - every cause raises
        return type(exc).__name__, str(exc).splitlines()[0] if str(exc) else "", traceback.format_exc()
    raise AssertionError(f"cause {cause} did not raise")


def make_project(slug: str = "berthwise") -> Project:
    return Project.objects.create(slug=slug, name=f"Berthwise ({slug})")


def add_build(
    project: Project,
    external_id: str,
    failures: list[tuple[str, str, int]],
    *,
    started_at: datetime | None = None,
    passed: tuple[str, ...] = ("test_passes_always",),
) -> tuple[Build, dict[int, str]]:
    """One build with the given failures ``(test name, cause, value)`` and passing tests.

    Returns the build and the true cause of each failed result (result id -> cause).
    """
    build = Build(project=project, external_id=external_id, started_at=started_at or timezone.now())
    build.save()
    truth: dict[int, str] = {}
    for name in passed:
        test = TestCase.objects.get_or_create(project=project, classname=CLASSNAME, name=name)[0]
        TestResult.objects.create(project=project, build=build, test_case=test, outcome="passed")
    attempts: dict[str, int] = {}
    for name, cause, n in failures:
        test = TestCase.objects.get_or_create(project=project, classname=CLASSNAME, name=name)[0]
        attempts[name] = attempts.get(name, 0) + 1
        failure_type, message, details = raise_cause(cause, n)
        result = TestResult.objects.create(
            project=project,
            build=build,
            test_case=test,
            outcome="failed" if cause != "vessel-none" else "error",
            attempt=attempts[name],
            failure_type=failure_type,
            message=message,
            details=details,
        )
        truth[result.pk] = cause
    return build, truth


def history(project: Project, *, builds: int = 6, causes: tuple[str, ...] = tuple(CAUSES), start=None):
    """``builds`` daily builds; in each, every cause fails in two tests with fresh values.

    Returns (builds, truth: result id -> cause).
    """
    start = start or timezone.now() - timedelta(days=builds + 1)
    made, truth = [], {}
    for b in range(builds):
        failures = []
        for c, cause in enumerate(causes):
            for t in range(2):
                failures.append((f"test_{cause.replace('-', '_')}_{(b + t) % 3}", cause, 7 * b + 3 * t + c))
        build, build_truth = add_build(
            project, f"nightly-{b:03d}", failures, started_at=start + timedelta(days=b)
        )
        made.append(build)
        truth.update(build_truth)
    return made, truth
