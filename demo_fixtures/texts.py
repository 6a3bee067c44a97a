"""Words and message templates of the invented Berthwise scenario.

Everything here is invented for the demo: the marina berth-booking platform "Berthwise", its package names,
its people and its failure messages. Templates are ``str.format`` strings; the fields they use are filled by
:class:`Filler`, which draws the values that vary per occurrence (ids, ports, UUIDs, timestamps, addresses)
from the generator's seeded ``random.Random``.
"""

from __future__ import annotations

import random
import string
import uuid
import zlib
from dataclasses import dataclass
from datetime import datetime, timedelta

PROJECT_SLUG = "berthwise"
PROJECT_NAME = "Berthwise marina berth booking"

# -- test-name vocabularies ----------------------------------------------------------------------------
# Per component: (sub-package, subject) pairs become classes/modules; verb x object x condition become names.

VOCAB: dict[str, dict[str, tuple[str, ...]]] = {
    "Booking API": {
        "subjects": (
            "api.BookingController",
            "api.AvailabilityController",
            "service.BookingService",
            "service.HoldExpiry",
            "service.CancellationPolicy",
            "pricing.PricingEngine",
            "pricing.SeasonalRate",
            "waitlist.WaitlistService",
            "arrival.ArrivalWindow",
            "persistence.BookingRepository",
            "vessel.VesselRegistry",
            "billing.OverstayCharge",
        ),
        "aspects": (
            "",
            "Integration",
            "Validation",
            "Concurrency",
            "Contract",
            "Migration",
            "Audit",
            "Edge",
        ),
        "verbs": (
            "create",
            "cancel",
            "extend",
            "confirm",
            "reject",
            "hold",
            "release",
            "price",
            "reschedule",
            "list",
            "merge",
            "transfer",
        ),
        "objects": (
            "booking",
            "berth_hold",
            "overnight_stay",
            "seasonal_contract",
            "waitlist_entry",
            "deposit",
            "arrival_window",
            "visitor_berth",
            "multihull_booking",
            "short_stay",
            "group_booking",
            "liveaboard_stay",
        ),
        "conditions": (
            "when_berth_is_occupied",
            "for_vessel_over_max_length",
            "after_hold_expires",
            "with_overlapping_dates",
            "across_dst_change",
            "for_member_discount",
            "when_tide_window_closed",
            "with_missing_registration",
            "for_same_day_arrival",
            "refunds_deposit",
            "returns_conflict",
            "keeps_audit_trail",
            "notifies_harbour_master",
            "with_concurrent_requests",
        ),
    },
    "Payments": {
        "subjects": (
            "card.CardValidator",
            "card.TokenVault",
            "checkout.CheckoutFlow",
            "gateway.SandboxGatewayClient",
            "refund.RefundService",
            "refund.PartialRefund",
            "ledger.LedgerPosting",
            "invoice.InvoiceRenderer",
            "deposit.DepositCapture",
            "fx.CurrencyConversion",
        ),
        "aspects": (
            "",
            "Integration",
            "Validation",
            "Idempotency",
            "Rounding",
            "Webhook",
            "Retry",
        ),
        "verbs": (
            "reject",
            "accept",
            "capture",
            "refund",
            "void",
            "authorize",
            "settle",
            "round",
            "post",
            "reconcile",
            "retry",
        ),
        "objects": (
            "expired_card",
            "deposit",
            "partial_refund",
            "duplicate_charge",
            "mooring_fee",
            "invoice_total",
            "card_token",
            "webhook_event",
            "ledger_entry",
            "currency_amount",
            "chargeback",
        ),
        "conditions": (
            "",
            "twice",
            "after_gateway_timeout",
            "with_three_ds_challenge",
            "in_foreign_currency",
            "when_booking_cancelled",
            "with_zero_amount",
            "for_seasonal_contract",
            "with_stale_token",
            "under_concurrent_capture",
            "keeps_ledger_balanced",
            "rounds_half_even",
        ),
    },
    "Berth Sensors": {
        "subjects": (
            "frame.CrcFrame",
            "frame.FrameDecoder",
            "ota.OtaUpdate",
            "ota.BootSlot",
            "power.Brownout",
            "power.SleepSchedule",
            "sonar.OccupancySonar",
            "link.MeshLink",
            "link.BrokerSession",
            "calib.TideCalibration",
        ),
        "aspects": ("", "Hil", "Rig", "Timing", "Regression", "Stress"),
        "verbs": (
            "decode",
            "reject",
            "retransmit",
            "calibrate",
            "report",
            "debounce",
            "resume",
            "rollback",
            "persist",
            "wake",
        ),
        "objects": (
            "occupancy_frame",
            "crc_block",
            "ota_chunk",
            "battery_reading",
            "sonar_echo",
            "tide_offset",
            "heartbeat",
            "boot_slot",
            "mesh_packet",
            "config_blob",
        ),
        "conditions": (
            "",
            "after_brownout",
            "with_corrupted_header",
            "on_low_battery",
            "during_spring_tide",
            "after_reconnect",
            "with_clock_drift",
            "when_buffer_full",
            "out_of_order",
            "at_max_range",
        ),
    },
    "Mobile App": {
        "subjects": (
            "ui.test_booking_flow",
            "ui.test_berth_map",
            "ui.test_checkout",
            "ui.test_login",
            "ui.test_arrival_checkin",
            "ui.test_push_inbox",
            "offline.test_sync_queue",
            "offline.test_cached_berths",
            "a11y.test_screen_reader",
        ),
        "aspects": ("", "TestAndroid", "TestIos", "TestTablet", "TestDarkMode"),
        "verbs": (
            "open",
            "book",
            "cancel",
            "show",
            "filter",
            "sync",
            "pay_for",
            "check_in",
            "zoom",
            "refresh",
        ),
        "objects": (
            "berth_map",
            "booking_summary",
            "visitor_berth",
            "pontoon_list",
            "receipt",
            "arrival_pass",
            "push_inbox",
            "offline_queue",
            "vessel_profile",
            "tide_banner",
        ),
        "conditions": (
            "",
            "after_rotation",
            "when_offline",
            "with_large_font",
            "after_session_timeout",
            "from_deep_link",
            "with_slow_network",
            "after_app_restart",
            "in_landscape",
        ),
    },
    "Notifications": {
        "subjects": (
            "test_push_delivery",
            "test_email_templates",
            "test_sms_fallback",
            "test_reminder_scheduler",
            "test_quiet_hours",
            "test_digest",
            "test_unsubscribe",
            "test_tide_alerts",
        ),
        "aspects": (
            "",
            "TestRetries",
            "TestRendering",
            "TestScheduling",
            "TestLocalisation",
        ),
        "verbs": (
            "send",
            "queue",
            "render",
            "retry",
            "suppress",
            "batch",
            "schedule",
            "deduplicate",
            "expire",
        ),
        "objects": (
            "arrival_reminder",
            "departure_notice",
            "storm_warning",
            "payment_receipt",
            "berth_change",
            "waitlist_offer",
            "weekly_digest",
            "tide_alert",
            "welcome_email",
        ),
        "conditions": (
            "",
            "during_quiet_hours",
            "with_expired_token",
            "in_welsh",
            "for_unsubscribed_user",
            "after_provider_outage",
            "with_html_fallback",
            "once_per_booking",
            "across_timezones",
        ),
    },
    "Harbour-Master Reports": {
        "subjects": (
            "test_occupancy_report",
            "test_revenue_report",
            "test_tide_table",
            "test_incident_log",
            "test_fuel_dock",
            "test_export_csv",
            "test_monthly_summary",
            "test_pontoon_utilisation",
        ),
        "aspects": (
            "",
            "TestAggregation",
            "TestExport",
            "TestFilters",
            "TestPerformance",
        ),
        "verbs": (
            "aggregate",
            "export",
            "filter",
            "summarise",
            "group",
            "render",
            "compare",
            "forecast",
            "paginate",
        ),
        "objects": (
            "nightly_occupancy",
            "revenue_by_pontoon",
            "tide_table",
            "incident_log",
            "fuel_sales",
            "visitor_nights",
            "overstay_list",
            "monthly_summary",
            "berth_turnover",
        ),
        "conditions": (
            "",
            "by_week",
            "for_leap_year",
            "across_dst_change",
            "with_empty_month",
            "excluding_cancelled",
            "as_csv",
            "with_large_history",
            "per_pontoon",
        ),
    },
}

SKIP_REASONS = {
    "pytest": (
        "requires staging push credentials",
        "device farm slot not available",
        "needs the tide-gauge service (STAGING only)",
        "known issue, waiting for the reporting refactor",
    ),
    "jvm": (
        "Disabled until the hardware rig is back from calibration",
        "Requires sandbox merchant account",
        "Ignored: superseded by contract tests",
    ),
}

# -- value generators -------------------------------------------------------------------------------------


def _hex(rnd: random.Random, n: int) -> str:
    return "".join(rnd.choice("0123456789abcdef") for _ in range(n))


@dataclass(frozen=True, slots=True)
class TestContext:
    """What a template may say about the test that failed (stable per test)."""

    classname: str
    name: str
    language: str  # "py" or "jvm"

    @property
    def simple(self) -> str:
        return self.classname.rsplit(".", 1)[-1]

    @property
    def module_path(self) -> str:
        parts = self.classname.split(".")
        if parts[-1].startswith("Test"):
            parts = parts[:-1]
        return "/".join(parts) + ".py"

    @property
    def package(self) -> str:
        return self.classname.rsplit(".", 1)[0]

    def line(self, salt: str) -> int:
        """A line number that is stable for one code location."""
        return 20 + zlib.crc32(f"{self.classname}:{self.name}:{salt}".encode()) % 380


class Filler(dict):
    """Mapping for ``str.format_map`` that invents a value the first time a field is asked for."""

    def __init__(self, rnd: random.Random, ctx: TestContext, when: datetime) -> None:
        super().__init__()
        self.rnd = rnd
        self.ctx = ctx
        self.when = when

    def __missing__(self, key: str) -> str:
        value = self._make(key)
        self[key] = value
        return value

    def _make(self, key: str) -> str:
        rnd, ctx = self.rnd, self.ctx
        if key == "cls":
            return ctx.classname
        if key == "simple":
            return ctx.simple
        if key == "method":
            return ctx.name
        if key == "pkg":
            return ctx.package
        if key == "file":
            return ctx.module_path
        if key.startswith("line"):
            return str(ctx.line(key))
        if key == "uuid":
            return str(uuid.UUID(int=rnd.getrandbits(128), version=4))
        if key == "port":
            return str(rnd.randint(32768, 60999))
        if key == "addr":
            return f"0x7f{rnd.getrandbits(40):010x}"
        if key == "ts":
            moment = self.when + timedelta(seconds=rnd.uniform(1, 900))
            return moment.strftime("%Y-%m-%dT%H:%M:%S.") + f"{moment.microsecond // 1000:03d}Z"
        if key == "booking":
            return f"BK-{self.when.year}-{rnd.randint(1, 99999):05d}"
        if key == "berth":
            return f"{rnd.choice('ABCDEFGH')}-{rnd.randint(1, 48):02d}"
        if key == "pid":
            return str(rnd.randint(1200, 64000))
        if key == "txid":
            return str(rnd.randint(100000, 9999999))
        if key == "ip":
            return f"10.{rnd.randint(0, 40)}.{rnd.randint(0, 255)}.{rnd.randint(2, 254)}"
        if key in ("crc_a", "crc_b"):
            return f"0x{rnd.getrandbits(32):08X}"
        if key == "token":
            return _hex(rnd, 8) + "..." + _hex(rnd, 4)
        if key == "thread":
            return f"pool-{rnd.randint(1, 9)}-thread-{rnd.randint(1, 32)}"
        if key == "worker":
            return f"gw{rnd.randint(0, 3)}"
        if key == "tmp":
            return f"/tmp/pytest-of-ci/pytest-{rnd.randint(1, 900)}/{ctx.name[:30]}0"
        if key == "seq":
            return str(rnd.randint(1, 4096))
        if key == "used":
            return str(rnd.choice((20, 20, 24, 32)))
        if key == "waiting":
            return str(rnd.randint(3, 60))
        if key == "elapsed":
            return f"{rnd.uniform(5.0, 31.0):.2f}"
        if key == "amount_a":
            return f"{rnd.randint(40, 900)}.{rnd.randint(0, 99):02d}"
        if key == "node":
            return f"sensor-{rnd.choice('ABCDEFGH')}{rnd.randint(1, 48):02d}"
        if key == "mb":
            return str(rnd.randint(600, 2048))
        if key == "date":
            return (self.when + timedelta(days=rnd.randint(1, 40))).strftime("%Y-%m-%d")
        if key == "order_a":
            return f"B-{rnd.randint(10, 99)}"
        if key == "order_b":
            return f"B-{rnd.randint(100, 400)}"
        if key == "req":
            return "req_" + "".join(rnd.choice(string.ascii_letters + string.digits) for _ in range(14))
        if key == "emu":
            return f"emulator-{rnd.choice((5554, 5556, 5558, 5560))}"
        raise KeyError(key)


def render(template: str, filler: Filler) -> str:
    """Fill a template; the same field gets the same value everywhere in one occurrence."""
    return template.format_map(filler)


# -- JVM stack-trace building blocks -----------------------------------------------------------------------

_JUNIT5_TAIL = (
    "\tat {cls}.{method}({simple}.java:{line_t})\n"
    "\tat java.base/java.lang.reflect.Method.invoke(Method.java:580)\n"
    "\tat java.base/java.util.ArrayList.forEach(ArrayList.java:1596)\n"
)
_JUNIT3_TAIL = (
    "\tat {cls}.{method}({simple}.java:{line_t})\n"
    "\tat junit.framework.TestCase.runTest(TestCase.java:176)\n"
    "\tat junit.framework.TestCase.runBare(TestCase.java:141)\n"
)


def jvm_tail(dialect: str) -> str:
    return _JUNIT3_TAIL if dialect == "ant" else _JUNIT5_TAIL


_JUNIT3_ASSERT = (
    "\tat junit.framework.Assert.fail(Assert.java:57)\n"
    "\tat junit.framework.Assert.failNotEquals(Assert.java:329)\n"
    "\tat junit.framework.Assert.assertEquals(Assert.java:78)\n"
)


def junit3_style(tpl: MessageTemplate) -> MessageTemplate:
    """The same assertion failure as a JUnit 3 runner (the Ant-style firmware suites) reports it."""
    if tpl.type != "org.opentest4j.AssertionFailedError":
        return tpl
    message = tpl.message.replace("expected: <", "expected:<").replace("but was: <", "but was:<")
    frames = "".join(line + "\n" for line in tpl.body.splitlines() if "org.junit.jupiter" not in line)
    return MessageTemplate(
        tpl.outcome, "junit.framework.AssertionFailedError", message, _JUNIT3_ASSERT + frames
    )


# -- message templates ---------------------------------------------------------------------------------------
# A template is (outcome, type, message, body). For JVM the text written is "type: message" + body;
# for Python, body is the whole text. "{tail}" in a JVM body is replaced by the dialect's test-runner frames.


@dataclass(frozen=True, slots=True)
class MessageTemplate:
    outcome: str  # "failure" or "error"
    type: str
    message: str
    body: str


@dataclass(frozen=True, slots=True)
class CauseSpec:
    id: str
    description: str
    components: tuple[str, ...]
    templates: dict[str, MessageTemplate]  # language -> template
    defect_headline: str
    defect_narrative: str
    timeout_seconds: float | None = None


_PY_NATIVE_HEAD = (
    'Traceback (most recent call last):\n  File "/builds/berthwise/{file}", line {line_t}, in {method}\n'
)

CAUSES: tuple[CauseSpec, ...] = (
    CauseSpec(
        id="db-pool-exhausted",
        description="Database connection pool exhausted when test workers run in parallel",
        components=("Booking API", "Payments", "Harbour-Master Reports"),
        templates={
            "jvm": MessageTemplate(
                "error",
                "java.sql.SQLTransientConnectionException",
                "berth-main - Connection is not available, request timed out after 30000ms "
                "(total={used}, active={used}, idle=0, waiting={waiting})",
                "\tat io.berthwise.db.PooledDataSource.createTimeoutException(PooledDataSource.java:696)\n"
                "\tat io.berthwise.db.PooledDataSource.getConnection(PooledDataSource.java:181)\n"
                "\tat io.berthwise.db.TxTemplate.execute(TxTemplate.java:58)\n"
                "{tail}"
                "Caused by: java.net.SocketTimeoutException: Connect timed out to db-test.internal:5432\n"
                "\tat java.base/sun.nio.ch.NioSocketImpl.timedFinishConnect(NioSocketImpl.java:546)\n"
                "\t... 42 more\n",
            ),
            "py": MessageTemplate(
                "error",
                "",
                'failed on setup with "harbour_reports.db.PoolTimeout: connection pool limit of size {used} '
                'overflow 0 reached, connection timed out, timeout 30.00"',
                _PY_NATIVE_HEAD.replace("in {method}", "in db_session") + "    conn = engine.connect()\n"
                '  File "/builds/berthwise/harbour_reports/db/pool.py", line 212, in connect\n'
                "    return self._checkout(timeout=self.timeout)\n"
                '  File "/builds/berthwise/harbour_reports/db/pool.py", line 147, in _checkout\n'
                "    raise PoolTimeout(self.size, self.overflow, waited={elapsed})\n"
                "harbour_reports.db.PoolTimeout: connection pool limit of size {used} overflow 0 reached, "
                "connection timed out, timeout 30.00 (worker {worker}, pid {pid})\n",
            ),
        },
        defect_headline="Connection pool runs dry when several report jobs run at once",
        defect_narrative=(
            "Under load the booking service stops answering and the log shows 'Connection is not available, "
            "request timed out after 30000ms'. The pool is sized for {used} connections."
        ),
        timeout_seconds=30.0,
    ),
    CauseSpec(
        id="gateway-sandbox-timeout",
        description="Payment gateway sandbox does not answer within the client timeout",
        components=("Payments", "Mobile App"),
        templates={
            "jvm": MessageTemplate(
                "error",
                "io.berthwise.payments.gateway.GatewayTimeoutException",
                "POST /v2/authorizations timed out after 10000 ms (request-id {req})",
                "\tat io.berthwise.payments.gateway.SandboxGatewayClient.authorize(SandboxGatewayClient.java:142)\n"
                "\tat io.berthwise.payments.checkout.CheckoutFlow.pay(CheckoutFlow.java:88)\n"
                "{tail}"
                "Caused by: java.net.SocketTimeoutException: Read timed out\n"
                "\tat java.base/sun.nio.ch.NioSocketImpl.timedRead(NioSocketImpl.java:278)\n"
                "\tat java.base/java.net.Socket$SocketInputStream.read(Socket.java:1099)\n"
                "\t... 38 more\n",
            ),
            "py": MessageTemplate(
                "failure",
                "",
                "mobile_app.api.GatewayTimeout: checkout did not complete within 10.0 s (request-id {req})",
                _PY_NATIVE_HEAD + "    screen.tap('pay_now')\n"
                '  File "/builds/berthwise/mobile_app/driver/screen.py", line 77, in tap\n'
                "    self._wait_for_idle(timeout=10.0)\n"
                '  File "/builds/berthwise/mobile_app/driver/screen.py", line 131, in _wait_for_idle\n'
                "    raise GatewayTimeout(self.pending_request)\n"
                "mobile_app.api.GatewayTimeout: checkout did not complete within 10.0 s (request-id {req})\n",
            ),
        },
        defect_headline="Checkout hangs and then fails when the payment gateway sandbox is slow",
        defect_narrative=(
            "Paying for a berth spins for ten seconds and then shows 'Payment failed'. Server log: "
            "GatewayTimeoutException POST /v2/authorizations timed out after 10000 ms."
        ),
        timeout_seconds=10.0,
    ),
    CauseSpec(
        id="firmware-crc-mismatch",
        description="Sensor firmware image on the test rig fails its CRC check after a partial flash",
        components=("Berth Sensors",),
        templates={
            "jvm": MessageTemplate(
                "failure",
                "junit.framework.AssertionFailedError",
                "CRC mismatch on {node}: expected {crc_a} but was {crc_b}",
                "\tat junit.framework.Assert.fail(Assert.java:57)\n"
                "\tat io.berthwise.sensors.firmware.rig.FlashVerifier.verify(FlashVerifier.java:93)\n"
                "{tail}",
            ),
        },
        defect_headline="Sensor reports CRC mismatch after over-the-air update",
        defect_narrative=(
            "After the OTA update two occupancy sensors on pontoon C keep rebooting; the serial console "
            "says 'CRC mismatch: expected {crc_a} but was {crc_b}'."
        ),
    ),
    CauseSpec(
        id="push-token-expired",
        description="Push token of the shared test device expired",
        components=("Notifications", "Mobile App"),
        templates={
            "py": MessageTemplate(
                "failure",
                "",
                "notifications.push.TokenExpiredError: push token {token} expired at {ts}",
                _PY_NATIVE_HEAD + "    result = client.send(message)\n"
                '  File "/builds/berthwise/notifications/push/client.py", line 141, in send\n'
                "    self._raise_for_status(response)\n"
                '  File "/builds/berthwise/notifications/push/client.py", line 203, in _raise_for_status\n'
                "    raise TokenExpiredError(token=self.token, expired_at=body['expired_at'])\n"
                "notifications.push.TokenExpiredError: push token {token} expired at {ts}\n",
            ),
        },
        defect_headline="Arrival reminders not delivered: push token expired",
        defect_narrative=(
            "Several skippers did not get the arrival reminder. Delivery log: TokenExpiredError push token "
            "{token} expired. Tokens are not refreshed when the app is in the background."
        ),
    ),
    CauseSpec(
        id="broker-disconnect",
        description="Message broker on the sensor test rig drops the connection",
        components=("Berth Sensors",),
        templates={
            "jvm": MessageTemplate(
                "error",
                "java.io.IOException",
                "Connection reset by peer (broker {ip}:1883, client {node})",
                "\tat java.base/sun.nio.ch.SocketDispatcher.read0(Native Method)\n"
                "\tat java.base/sun.nio.ch.SocketChannelImpl.read(SocketChannelImpl.java:401)\n"
                "\tat io.berthwise.sensors.firmware.link.BrokerSession.poll(BrokerSession.java:219)\n"
                "{tail}",
            ),
        },
        defect_headline="Sensor gateway loses broker connection every few hours",
        defect_narrative=(
            "Occupancy on the map freezes; gateway log shows 'Connection reset by peer (broker {ip}:1883)'."
        ),
    ),
    CauseSpec(
        id="dst-offset",
        description="Date arithmetic assumes a fixed UTC offset and breaks around daylight-saving changes",
        components=("Booking API", "Harbour-Master Reports"),
        templates={
            "jvm": MessageTemplate(
                "failure",
                "org.opentest4j.AssertionFailedError",
                "expected: <{date}T02:30+01:00> but was: <{date}T03:30+02:00>",
                "\tat org.junit.jupiter.api.AssertionUtils.fail(AssertionUtils.java:55)\n"
                "\tat org.junit.jupiter.api.AssertEquals.assertEquals(AssertEquals.java:197)\n"
                "{tail}",
            ),
            "py": MessageTemplate(
                "failure",
                "",
                "AssertionError: assert datetime.datetime(..., 3, 30) == datetime.datetime(..., 2, 30)",
                "{file}:{line_t}: in {method}\n"
                "    assert row.slot_start == expected\n"
                "E   AssertionError: assert datetime.datetime(2026, 10, 25, 3, 30) == "
                "datetime.datetime(2026, 10, 25, 2, 30)\n"
                "E    +  where datetime.datetime(2026, 10, 25, 3, 30) = <Row id={txid}>.slot_start\n",
            ),
        },
        defect_headline="Bookings on the night the clocks change show the wrong arrival hour",
        defect_narrative=(
            "A booking for arrival at 02:30 on the night of the clock change is shown as 03:30 on the "
            "harbour-master report and in the booking confirmation."
        ),
    ),
    CauseSpec(
        id="emulator-boot-timeout",
        description="Android emulator on the CI runner does not finish booting in time",
        components=("Mobile App",),
        templates={
            "py": MessageTemplate(
                "error",
                "",
                'failed on setup with "TimeoutError: device {emu} did not finish boot within 180 s"',
                _PY_NATIVE_HEAD.replace("in {method}", "in device")
                + "    handle = farm.acquire(profile='phone-large', timeout=180)\n"
                '  File "/builds/berthwise/mobile_app/driver/farm.py", line 64, in acquire\n'
                "    self._wait_boot_completed(serial, timeout)\n"
                '  File "/builds/berthwise/mobile_app/driver/farm.py", line 98, in _wait_boot_completed\n'
                "    raise TimeoutError(f'device {{serial}} did not finish boot within {{timeout}} s')\n"
                "TimeoutError: device {emu} did not finish boot within 180 s\n",
            ),
        },
        defect_headline="Mobile test runs fail before starting: emulator never boots",
        defect_narrative="Nightly mobile suite stops with 'device {emu} did not finish boot within 180 s'.",
        timeout_seconds=180.0,
    ),
    CauseSpec(
        id="smtp-relay-refused",
        description="Mail relay used by the notification tests refuses connections",
        components=("Notifications",),
        templates={
            "py": MessageTemplate(
                "failure",
                "",
                "ConnectionRefusedError: [Errno 111] Connection refused",
                _PY_NATIVE_HEAD + "    mailer.deliver(rendered)\n"
                '  File "/builds/berthwise/notifications/email/mailer.py", line 55, in deliver\n'
                "    with smtplib.SMTP(self.host, self.port, timeout=5) as conn:\n"
                '  File "/usr/lib/python3.11/smtplib.py", line 255, in __init__\n'
                "    (code, msg) = self.connect(host, port)\n"
                '  File "/usr/lib/python3.11/socket.py", line 851, in create_connection\n'
                "    raise exceptions[0]\n"
                "ConnectionRefusedError: [Errno 111] Connection refused\n",
            ),
        },
        defect_headline="Confirmation e-mails not sent, mail relay refuses connection",
        defect_narrative="No booking confirmation e-mails since this morning; mailer log: [Errno 111] "
        "Connection refused.",
    ),
    CauseSpec(
        id="disk-full",
        description="CI runner's work disk fills up with report artefacts",
        components=("Harbour-Master Reports", "Berth Sensors"),
        templates={
            "py": MessageTemplate(
                "failure",
                "",
                "OSError: [Errno 28] No space left on device: '{tmp}/report.pdf'",
                _PY_NATIVE_HEAD + "    path = exporter.write_pdf(tmp_path / 'report.pdf')\n"
                '  File "/builds/berthwise/harbour_reports/export/pdf.py", line 118, in write_pdf\n'
                "    with open(target, 'wb') as fh:\n"
                "OSError: [Errno 28] No space left on device: '{tmp}/report.pdf'\n",
            ),
            "jvm": MessageTemplate(
                "error",
                "java.io.IOException",
                "No space left on device",
                "\tat java.base/java.io.FileOutputStream.writeBytes(Native Method)\n"
                "\tat io.berthwise.sensors.firmware.rig.CaptureWriter.flush(CaptureWriter.java:71)\n"
                "{tail}",
            ),
        },
        defect_headline="Monthly report export fails with 'No space left on device'",
        defect_narrative="Exporting the monthly summary fails: OSError [Errno 28] No space left on device.",
    ),
    CauseSpec(
        id="tide-fixture-stale",
        description="Tide-table fixture does not cover the dates the tests ask for",
        components=("Harbour-Master Reports",),
        templates={
            "py": MessageTemplate(
                "failure",
                "",
                "KeyError: '{date}'",
                _PY_NATIVE_HEAD + "    heights = tide_table.heights_for(report_day)\n"
                '  File "/builds/berthwise/harbour_reports/tides/table.py", line 47, in heights_for\n'
                "    return self._by_day[day.isoformat()]\n"
                "KeyError: '{date}'\n",
            ),
        },
        defect_headline="Tide table on the harbour-master report is empty for next month",
        defect_narrative="The report shows no tide heights after the end of the month; the tide fixture "
        "stops at the current month.",
    ),
    CauseSpec(
        id="deadlock-detected",
        description="Concurrent booking and payment transactions deadlock on the berth row",
        components=("Booking API", "Payments"),
        templates={
            "jvm": MessageTemplate(
                "error",
                "io.berthwise.db.LockAcquisitionException",
                "could not execute statement; SQL [update berth set version=? where id=?]; deadlock detected",
                "\tat io.berthwise.db.TxTemplate.execute(TxTemplate.java:61)\n"
                "\tat io.berthwise.booking.service.BookingService.confirm(BookingService.java:233)\n"
                "{tail}"
                "Caused by: java.sql.SQLException: ERROR: deadlock detected\n"
                "  Detail: Process {pid} waits for ShareLock on transaction {txid}; blocked by process "
                "{pid}.\n"
                "\t... 51 more\n",
            ),
        },
        defect_headline="Deadlock when a booking is confirmed while its deposit is being captured",
        defect_narrative="Confirming booking {booking} returned 500; log shows 'deadlock detected' on the "
        "berth row.",
    ),
    CauseSpec(
        id="heap-oom",
        description="Test JVM runs out of heap after the search index fixture grew",
        components=("Booking API",),
        templates={
            "jvm": MessageTemplate(
                "error",
                "java.lang.OutOfMemoryError",
                "Java heap space",
                "\tat java.base/java.util.Arrays.copyOf(Arrays.java:3512)\n"
                "\tat java.base/java.util.ArrayList.grow(ArrayList.java:237)\n"
                "\tat io.berthwise.booking.search.AvailabilityIndex.load(AvailabilityIndex.java:102)\n"
                "{tail}",
            ),
        },
        defect_headline="Availability search crashes the booking service with out-of-memory",
        defect_narrative="Service restarted twice during the regatta weekend; log ends with "
        "java.lang.OutOfMemoryError: Java heap space.",
    ),
)

# Flaky tests: what the intermittent failure looks like, by cause kind and language.
FLAKY_TEMPLATES: dict[str, dict[str, MessageTemplate]] = {
    "timing": {
        "py": MessageTemplate(
            "failure",
            "",
            "TimeoutError: event 'booking.confirmed' not received within 5.0 s",
            _PY_NATIVE_HEAD + "    event = bus.wait_for('booking.confirmed', timeout=5.0)\n"
            '  File "/builds/berthwise/tests/support/bus.py", line 61, in wait_for\n'
            "    raise TimeoutError(f'event {{name!r}} not received within {{timeout}} s')\n"
            "TimeoutError: event 'booking.confirmed' not received within 5.0 s\n",
        ),
        "jvm": MessageTemplate(
            "failure",
            "org.opentest4j.AssertionFailedError",
            "Condition not met within 5000 ms: booking {booking} status",
            "\tat io.berthwise.testing.Await.until(Await.java:88)\n{tail}",
        ),
    },
    "ordering": {
        "py": MessageTemplate(
            "failure",
            "",
            "AssertionError: assert ['{order_b}', '{order_a}'] == ['{order_a}', '{order_b}']",
            "{file}:{line_t}: in {method}\n"
            "    assert [b.ref for b in result] == expected\n"
            "E   AssertionError: assert ['{order_b}', '{order_a}'] == ['{order_a}', '{order_b}']\n"
            "E     At index 0 diff: '{order_b}' != '{order_a}'\n",
        ),
        "jvm": MessageTemplate(
            "failure",
            "org.opentest4j.AssertionFailedError",
            "expected: <[{order_a}, {order_b}]> but was: <[{order_b}, {order_a}]>",
            "\tat org.junit.jupiter.api.AssertionFailureBuilder.build(AssertionFailureBuilder.java:151)\n"
            "\tat org.junit.jupiter.api.AssertEquals.assertEquals(AssertEquals.java:197)\n{tail}",
        ),
    },
    "network": {
        "py": MessageTemplate(
            "failure",
            "",
            "ConnectionResetError: [Errno 104] Connection reset by peer",
            _PY_NATIVE_HEAD + "    resp = api.get(f'/berths/{berth}/status')\n"
            '  File "/builds/berthwise/tests/support/http.py", line 39, in get\n'
            "    return self._session.request('GET', self.base + path, timeout=3)\n"
            "ConnectionResetError: [Errno 104] Connection reset by peer (127.0.0.1:{port})\n",
        ),
        "jvm": MessageTemplate(
            "error",
            "java.net.ConnectException",
            "Connection refused: localhost/127.0.0.1:{port}",
            "\tat java.base/sun.nio.ch.Net.pollConnect(Native Method)\n"
            "\tat java.base/sun.nio.ch.NioSocketImpl.connect(NioSocketImpl.java:592)\n{tail}",
        ),
    },
    "shared-state": {
        "py": MessageTemplate(
            "failure",
            "",
            "AssertionError: assert 3 == 2",
            "{file}:{line_t}: in {method}\n"
            "    assert len(store.pending()) == 2\n"
            "E   AssertionError: assert 3 == 2\n"
            "E    +  where 3 = len([<Pending {uuid}>, ...])\n",
        ),
        "jvm": MessageTemplate(
            "failure",
            "org.opentest4j.AssertionFailedError",
            "expected: <2> but was: <3>",
            "\tat org.junit.jupiter.api.AssertEquals.assertEquals(AssertEquals.java:150)\n{tail}",
        ),
    },
}
FLAKY_KINDS = tuple(FLAKY_TEMPLATES)

# Regressions: a wrong value, the same in every failing run of one regression.
REGRESSION_TEMPLATES: dict[str, tuple[MessageTemplate, ...]] = {
    "py": (
        MessageTemplate(
            "failure",
            "",
            "AssertionError: assert {got} == {want}",
            "{file}:{line_t}: in {method}\n    assert result.total == {want}\nE   AssertionError: assert {got} "
            "== {want}\n",
        ),
        MessageTemplate(
            "failure",
            "",
            "KeyError: '{field}'",
            _PY_NATIVE_HEAD + "    row = rows[0]['{field}']\nKeyError: '{field}'\n",
        ),
    ),
    "jvm": (
        MessageTemplate(
            "failure",
            "org.opentest4j.AssertionFailedError",
            "expected: <{want}> but was: <{got}>",
            "\tat org.junit.jupiter.api.AssertEquals.assertEquals(AssertEquals.java:197)\n{tail}",
        ),
        MessageTemplate(
            "error",
            "java.lang.NullPointerException",
            'Cannot invoke "{getter}()" because the return value of "{pkg}.support.Mapper.lookup()" is null',
            "\tat {pkg}.support.Mapper.map(Mapper.java:{line_m})\n{tail}",
        ),
    ),
}
REGRESSION_VALUES = (
    ("4500", "4050", "deposit_cents"),
    ("REFUNDED", "PENDING_REFUND", "refund_status"),
    ("3", "4", "nights"),
    ("'C-12'", "'C-21'", "berth_code"),
    ("True", "False", "is_visitor"),
    ("12.50", "12.5", "fee"),
    ("[]", "[None]", "arrival_slots"),
    ("200", "409", "status_code"),
)

# -- defects ------------------------------------------------------------------------------------------------

PEOPLE = (
    "Mira Quayle",
    "Tobin Halyard",
    "Odile Brightwater",
    "Rafe Tillerman",
    "Sanne Moorcroft",
    "Idris Keelson",
    "Lotte Sprayward",
    "Anouk Capstan",
    "Bram Windlass",
    "Nell Fairlead",
    "Quentin Slipway",
    "Yara Gunwale",
)

# Defect titles and descriptions: see demo_fixtures.defect_texts.

DEFECT_TAGS = (
    "customer-reported",
    "harbour-office",
    "ios",
    "android",
    "regression",
    "data-fix",
    "needs-repro",
    "release-blocker",
    "ux",
)
