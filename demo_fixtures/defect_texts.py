"""Titles and descriptions of the invented Berthwise defect reports.

A defect is one *problem*: an object of its component (the deposit receipt, the berth map, ...), a symptom
(shown twice, missing, not saved, ...) and the situation it happens in (after a cancellation, on a tablet,
...). Unrelated defects of one component differ in their problem, and each report is written in its own
words (who noticed it, what was expected, the vessel concerned, the impact). A duplicate is the same problem
filed again by someone else: the same object, symptom and situation, mostly reworded, often about the same
vessel. Every phrase below has several wordings; an original and its duplicate use different ones where
there are.

Everything here is invented for the demo (the marina, its people and vessels).
"""

from __future__ import annotations

import random
from dataclasses import dataclass

# Symptoms shared by every component: (wordings of "<object> <symptom>", wordings of what was expected).
SYMPTOMS: tuple[tuple[tuple[str, ...], tuple[str, ...]], ...] = (
    (("is shown twice", "appears twice", "is duplicated"), ("It should be listed once.",)),
    (("is missing", "is gone", "does not appear"), ("It should be there.",)),
    (("is not saved", "loses edits", "does not keep changes"), ("Edits should stick.",)),
    (("is very slow", "loads slowly", "is sluggish"), ("It used to open in a second.",)),
    (("gives a server error", "crashes with an error", "errors out"), ("It should just work.",)),
    (("shows stale data", "is not refreshed", "is outdated"), ("It should show today's figures.",)),
    (("is untranslated", "shows English text", "ignores the language"), ("It should follow the language.",)),
    (("has a wrong total", "adds up wrong", "has a bad sum"), ("The sum should match.",)),
    (("cannot be cancelled", "will not cancel", "ignores cancel"), ("Cancelling should be possible.",)),
    (("is cut off", "is truncated", "does not fit"), ("Everything should be readable.",)),
    (("is in the wrong order", "is unsorted", "sorts wrongly"), ("Order should be by date.",)),
    (("shows other customers' data", "leaks personal data", "shows a stranger's details"), ("Privacy.",)),
    (("resets to defaults", "forgets settings", "reverts to defaults"), ("Settings should be kept.",)),
    (("hangs", "never loads", "spins forever"), ("Expected a result or a message.",)),
)

# Per component: the objects a report is about and the situations it happens in, each with wordings.
OBJECTS: dict[str, tuple[tuple[str, ...], ...]] = {
    "Booking API": (
        ("the berth hold", "the hold on the berth"),
        ("the seasonal contract", "the season contract"),
        ("the visitor booking", "the guest booking"),
        ("the waitlist offer", "the offer from the waiting list"),
        ("the availability calendar", "the calendar of free berths"),
        ("the booking confirmation", "the confirmation of the booking"),
        ("the vessel profile", "the boat profile"),
        ("the berth search", "the search for free berths"),
        ("the crew list", "the list of crew members"),
        ("the mooring contract PDF", "the contract document"),
        ("the arrival slot picker", "the arrival time slots"),
        ("the berth transfer form", "the form to move berths"),
    ),
    "Payments": (
        ("the deposit receipt", "the receipt for the deposit"),
        ("the refund", "the money back"),
        ("the invoice", "the bill"),
        ("the card checkout", "the checkout with a card"),
        ("the harbour dues line", "the line for harbour dues"),
        ("the ledger entry", "the entry in the ledger"),
        ("the payment plan", "the instalment plan"),
        ("the tourist tax", "the tourist levy"),
        ("the voucher", "the gift voucher"),
        ("the direct debit mandate", "the debit mandate"),
        ("the price list", "the tariff table"),
        ("the dunning letter", "the payment reminder letter"),
    ),
    "Berth Sensors": (
        ("the occupancy reading", "the occupied or free reading"),
        ("the battery level", "the battery indicator"),
        ("the water depth reading", "the depth under the keel"),
        ("the sensor firmware version", "the installed firmware version"),
        ("the gateway status page", "the status page of the gateway"),
        ("the shore power meter", "the electricity meter"),
        ("the sensor calibration", "the calibration of the sensor"),
        ("the signal strength graph", "the radio signal graph"),
        ("the maintenance log", "the sensor service log"),
        ("the pairing wizard", "the sensor pairing steps"),
        ("the alarm threshold", "the alert limit"),
        ("the temperature reading", "the water temperature value"),
    ),
    "Mobile App": (
        ("the berth map", "the map of the berths"),
        ("the arrival pass", "the arrival QR pass"),
        ("the offline booking queue", "the queue of offline bookings"),
        ("the pay button", "the button to pay"),
        ("the weather widget", "the wind and weather tile"),
        ("the login screen", "the sign-in screen"),
        ("the marina directory", "the list of marinas"),
        ("the profile photo", "the avatar picture"),
        ("the favourites list", "the saved favourites"),
        ("the trip planner", "the passage planner"),
        ("the push settings", "the notification settings screen"),
        ("the language picker", "the app language option"),
    ),
    "Notifications": (
        ("the storm warning", "the gale alert"),
        ("the arrival reminder", "the reminder before arrival"),
        ("the weekly digest", "the digest mail of the week"),
        ("the departure notice", "the notice on departure day"),
        ("the gate code message", "the message with the gate code"),
        ("the invoice e-mail", "the e-mail with the invoice"),
        ("the waitlist alert", "the waiting list alert"),
        ("the text message", "the SMS"),
        ("the unsubscribe page", "the page to opt out"),
        ("the tide alert", "the high water alert"),
        ("the welcome pack mail", "the welcome e-mail"),
        ("the survey invitation", "the feedback survey mail"),
    ),
    "Harbour-Master Reports": (
        ("the occupancy report", "the report of occupied berths"),
        ("the revenue by pontoon", "the pontoon revenue table"),
        ("the CSV export", "the export to CSV"),
        ("the monthly summary", "the summary of the month"),
        ("the tide overview", "the table of tides"),
        ("the visitor statistics", "the statistics of guest boats"),
        ("the fuel dock sales", "the sales at the fuel dock"),
        ("the customs list", "the list for customs"),
        ("the waiting list report", "the report of the waiting list"),
        ("the berth utilisation chart", "the utilisation graph"),
        ("the damage register", "the list of reported damages"),
        ("the staff rota export", "the export of the duty rota"),
    ),
}
SITUATIONS: dict[str, tuple[tuple[str, ...], ...]] = {
    "Booking API": (
        ("after the booking is cancelled", "once a booking has been cancelled"),
        ("when two skippers book at the same moment", "when two bookings come in simultaneously"),
        ("for stays longer than a month", "for long stays of over a month"),
        ("when the vessel is a catamaran", "for multihull boats"),
        ("after the dates are moved", "once the dates are changed"),
        ("for members of the sailing club", "for club members"),
        ("when booking through a partner marina", "for bookings via a partner harbour"),
        ("after a berth swap", "once the berth was swapped"),
        ("for group bookings of a flotilla", "for flotilla group bookings"),
        ("in the off season", "during winter storage"),
        ("for boats over twenty metres", "for superyachts"),
        ("when the skipper has no account", "for skippers without login"),
    ),
    "Payments": (
        ("with a card issued abroad", "for foreign cards"),
        ("after a partial refund", "once a part was refunded"),
        ("when paying in two instalments", "for split payments"),
        ("for invoices with a discount code", "when a promo code was used"),
        ("when the payment is retried", "on a second payment attempt"),
        ("for company customers", "for business accounts"),
        ("after the booking is extended", "once the stay was extended"),
        ("at the end of the financial year", "around year-end closing"),
        ("for cash paid at the office", "when paying cash at the desk"),
        ("with a prepaid wallet", "using the wallet balance"),
        ("when the currency is pounds", "for payments in sterling"),
        ("after a chargeback", "once the bank reversed the charge"),
    ),
    "Berth Sensors": (
        ("after the sensor loses power", "once the sensor was without power"),
        ("at very low tide", "at spring low water"),
        ("in heavy rain", "during downpours"),
        ("on the outer pontoons", "on the far pontoons near the breakwater"),
        ("after a gateway reboot", "once the gateway restarted"),
        ("when the boat is rafted alongside another", "for boats moored side by side"),
        ("in freezing weather", "below zero degrees"),
        ("after the batteries are swapped", "once new batteries were fitted"),
        ("on berths with a finger pier", "at finger berths"),
        ("during the night", "overnight"),
        ("after a firmware rollback", "once the old firmware was restored"),
        ("near the fuel dock", "at the berths next to the fuel pontoon"),
    ),
    "Mobile App": (
        ("after rotating the phone", "in landscape orientation"),
        ("with the large accessibility font", "with extra large text enabled"),
        ("after the app is killed", "once the app was force closed"),
        ("in airplane mode", "without any network"),
        ("on older tablets", "on old tablet models"),
        ("in dark mode", "with the dark theme"),
        ("after switching accounts", "once a second account is added"),
        ("when opened from a deep link", "via a link in an e-mail"),
        ("right after an app update", "just after updating the app"),
        ("with the screen reader on", "when voice over is enabled"),
        ("on a slow mobile connection", "with weak reception in the harbour"),
        ("after changing the phone language", "once the phone language is switched"),
    ),
    "Notifications": (
        ("during quiet hours", "at night when quiet hours apply"),
        ("for guests with a Welsh profile", "for Welsh speaking guests"),
        ("after unsubscribing", "once the guest opted out"),
        ("when the arrival date is changed", "after moving the arrival day"),
        ("for crew members added later", "for crew added afterwards"),
        ("for guests without a phone number", "when no mobile number is stored"),
        ("on bank holidays", "on public holidays"),
        ("when two boats share an owner", "for owners of several boats"),
        ("for bookings made by the office", "when the harbour office books"),
        ("after a change of berth", "once the guest moved berth"),
        ("for guests who booked a year ahead", "for bookings made far in advance"),
        ("when the marina is fully booked", "on fully booked days"),
    ),
    "Harbour-Master Reports": (
        ("for marinas with more than five pontoons", "for large marinas"),
        ("for a month with a leap day", "in leap years"),
        ("when vessel names contain commas", "for boat names with a comma"),
        ("when filtered by pontoon", "with a pontoon filter"),
        ("for the previous season", "for last season"),
        ("when exported as a spreadsheet", "in the spreadsheet download"),
        ("for stays across the month boundary", "for stays spanning two months"),
        ("after a berth is renamed", "once a berth got a new name"),
        ("when printed", "on the printout"),
        ("for the harbour office account", "when the office staff opens it"),
        ("after the season rollover", "once the new season starts"),
        ("for berths out of service", "for closed berths"),
    ),
}

VESSELS = (
    "Sea Otter",
    "Blue Heron",
    "Merganser",
    "Saltwind",
    "Tern Dancer",
    "Kittiwake",
    "Driftwood",
    "Moonraker",
    "Petrel",
    "Amberjack",
    "Grey Seal",
    "Westerly Rose",
    "Curlew",
    "Spindrift",
    "Halcyon",
    "Marram",
    "Puffin Lass",
    "Shearwater",
    "Cormorant",
    "Nightjar",
    "Oystercatcher",
    "Harebell",
    "Skylark",
    "Sandpiper",
    "Bladderwrack",
    "Stormy Petrel",
    "Guillemot",
    "Little Auk",
    "Wagtail",
    "Plover",
    "Samphire",
    "Sea Holly",
    "Dunlin",
    "Fulmar",
    "Razorbill",
    "Gannet",
    "Whimbrel",
    "Avocet",
    "Redshank",
    "Turnstone",
    "Eider",
    "Sanderling",
    "Godwit",
    "Goldeneye",
    "Scaup",
    "Smew",
    "Garganey",
    "Pintail",
)
DEVICES = (
    "on an iPad",
    "on an Android phone",
    "on an iPhone",
    "in the office browser",
    "on the kiosk at the gate",
    "on a Chromebook",
    "on a Windows laptop",
    "on a Mac",
    "on the pontoon tablet",
    "on a Pixel phone",
    "on a Galaxy tablet",
    "in the staff app",
    "in Firefox",
    "in Safari",
    "in Edge",
    "on the big screen in the office",
)
SKIPPERS = (
    "Ansel Rook",
    "Berit Vane",
    "Cato Marlow",
    "Dagny Fell",
    "Elio Strand",
    "Fenna Holt",
    "Gideon Tarr",
    "Hedda Lunde",
    "Ivo Prentis",
    "Jorun Vale",
    "Kasimir Dale",
    "Liv Ashgrove",
    "Maren Tuck",
    "Nils Orrin",
    "Orla Keating",
    "Piet Vosberg",
    "Rhona Sail",
    "Sten Harrow",
    "Tilde Brack",
    "Ulla Penrose",
    "Vidar Cole",
    "Wren Ottaway",
    "Xander Pike",
    "Ylva Stroud",
)
OPENERS = (
    "Reported by the harbour office.",
    "A berth holder called about this.",
    "Came in through the support inbox.",
    "Noticed during the morning round on the pontoons.",
    "Found while testing release {version}.",
    "Raised at the weekly marina staff meeting.",
    "A visiting skipper complained at the fuel dock.",
    "Spotted by the night watchman.",
    "Customer feedback form, translated.",
    "Seen on the demo for the harbour board.",
)
DUPLICATE_OPENERS = (
    "Not sure if this is known already.",
    "Maybe a repeat, could not find a ticket.",
    "Got this again from a customer today.",
    "Another report of this one, I think.",
    "Second time this week.",
)
IMPACTS = (
    "Workaround: fix it by hand in the back office.",
    "Happens roughly {k} times out of ten.",
    "Customers start to ring the office about it.",
    "No workaround known.",
    "Blocks the weekend check-ins.",
    "Low impact but annoying.",
    "Staff lose about an hour a day on this.",
    "Reproducible every time.",
    "Screenshot in the team channel.",
    "Only noticed since the last release.",
)
TITLES = (
    "{Obj} {symptom} {situation}",
    "{Situation_cap}, {obj} {symptom}",
    "{Obj}: {symptom} ({situation})",
)
OBSERVED = (
    "{Obj} {symptom} {situation}.",
    "{Situation_cap}, {obj} {symptom}.",
    "We see that {obj} {symptom} {situation}.",
)


@dataclass(frozen=True, slots=True)
class Problem:
    """Indices of one problem: object and situation within the component, symptom in :data:`SYMPTOMS`."""

    component: str
    obj: int
    symptom: int
    situation: int


def _cap(text: str) -> str:
    return text[:1].upper() + text[1:]


def report_text(
    problem: Problem,
    rnd: random.Random,
    *,
    vessel: str,
    skipper: str,
    device: str,
    version: str,
    wording: tuple[int, int, int] = (0, 0, 0),
    duplicate: bool = False,
) -> tuple[str, str]:
    """Title and description of one report of ``problem``.

    ``vessel`` and ``skipper`` name the customer concerned (no customer named when ``skipper`` is empty),
    ``device`` where it was seen.
    ``wording`` picks the wording of object, symptom and situation (an index into their wordings); a
    duplicate report uses other wordings for some of them and opens with a remark of its own.
    """
    obj_w = OBJECTS[problem.component][problem.obj]
    sym_w, expected_w = SYMPTOMS[problem.symptom]
    sit_w = SITUATIONS[problem.component][problem.situation]
    obj = obj_w[wording[0] % len(obj_w)]
    symptom = sym_w[wording[1] % len(sym_w)]
    situation = sit_w[wording[2] % len(sit_w)]
    fields = {
        "obj": obj,
        "Obj": _cap(obj),
        "symptom": symptom,
        "situation": situation,
        "Situation_cap": _cap(situation),
    }
    title = rnd.choice(TITLES).format_map({**fields, "Obj": _cap(obj.removeprefix("the "))})
    if duplicate:
        opener = rnd.choice(DUPLICATE_OPENERS)
    else:
        opener = rnd.choice(OPENERS).format(version=version)
    observed = rnd.choice(OBSERVED).format_map(fields)
    impact = rnd.choice(IMPACTS).format(k=rnd.randint(2, 9))
    detail = f"Vessel {vessel}, skipper {skipper}, {device}." if skipper else f"Seen {device}."
    expected = rnd.choice(expected_w) if rnd.random() < 0.5 else ""
    parts = [opener, observed, expected, detail, impact]
    return _cap(title), " ".join(part for part in parts if part)


def reworded(wording: tuple[int, int, int], rnd: random.Random) -> tuple[int, int, int]:
    """The wording of a re-report: one of object, symptom and situation told in other words (the object
    seldom: it is a label on a screen); sometimes symptom and situation both."""
    changed = {rnd.choices((0, 1, 2), weights=(1, 3, 3))[0]}
    if 0 not in changed and rnd.random() < 0.2:
        changed = {1, 2}
    return (wording[0] + (0 in changed), wording[1] + (1 in changed), wording[2] + (2 in changed))


class ProblemDrawer:
    """Draws problems per component so that two defects of one component share as little as possible.

    A new problem avoids repeating any two of (object, symptom, situation) of an earlier problem of its
    component when it can (a few random tries, the least overlapping one kept), so unrelated reports
    differ in at least two of the three.
    """

    def __init__(self, rnd: random.Random, tries: int = 200) -> None:
        self.rnd = rnd
        self.tries = tries
        self.seen: dict[str, set[tuple[str, int, int]]] = {}

    def draw(self, component: str) -> Problem:
        seen = self.seen.setdefault(component, set())
        n_obj, n_sym, n_sit = len(OBJECTS[component]), len(SYMPTOMS), len(SITUATIONS[component])
        cells = min(n_obj * n_sym, n_obj * n_sit, n_sym * n_sit)
        # once a component has more problems than cells, overlaps are unavoidable: few tries suffice
        tries = self.tries if len(seen) < 3 * cells else 4
        best, best_overlap = None, 4
        for _ in range(tries):
            cand = Problem(
                component, self.rnd.randrange(n_obj), self.rnd.randrange(n_sym), self.rnd.randrange(n_sit)
            )
            overlap = sum(key in seen for key in _pair_keys(cand))
            if overlap < best_overlap:
                best, best_overlap = cand, overlap
            if overlap == 0:
                break
        assert best is not None
        seen.update(_pair_keys(best))
        return best


def _pair_keys(p: Problem) -> tuple[tuple[str, int, int], ...]:
    return (("os", p.obj, p.symptom), ("ot", p.obj, p.situation), ("st", p.symptom, p.situation))


# Further reports of the failure causes seen in CI (the first report of each uses the cause's own headline
# and narrative in texts.CAUSES). Each one describes another consequence the user saw, in other words, and
# quotes the error as it appeared there, so that it still matches the cause.
CAUSE_REPORTS: dict[str, tuple[tuple[str, str], ...]] = {
    "db-pool-exhausted": (
        (
            "Connection pool used up: office screens freeze while month-end report jobs run",
            "Every month end the office cannot open bookings for several minutes. Support found "
            "'berth-main - Connection is not available, request timed out after 30000ms' in the service log; "
            "the connection pool is used up by the report jobs.",
        ),
        (
            "Refund page gives up while the nightly reports run",
            "Staff issuing refunds late in the evening get an error; log: Connection is not available.",
        ),
    ),
    "gateway-sandbox-timeout": (
        (
            "Mobile checkout shows 'Payment failed' after a long wait",
            "Skippers paying in the app wait ten seconds and get 'Payment failed'. Backend: "
            "GatewayTimeoutException on authorizations.",
        ),
        (
            "Deposit authorisation never completes on busy afternoons",
            "The card terminal at the office gives up; GatewayTimeoutException POST /v2/authorizations.",
        ),
    ),
    "firmware-crc-mismatch": (
        (
            "Pontoon C sensors stuck in a reboot loop since firmware rollout",
            "Three berth sensors blink and restart every minute; console prints CRC mismatch on boot.",
        ),
        (
            "Freshly flashed sensors refuse the new image",
            "Technician reports the new image is rejected with 'CRC mismatch: expected {crc_a}'.",
        ),
    ),
    "push-token-expired": (
        (
            "Skippers who rarely open the app get no gate code push",
            "Guests who have not opened the app for weeks miss pushes. Log: TokenExpiredError push token "
            "expired.",
        ),
        (
            "Departure notices missing for part of the guests",
            "Some guests never receive the departure push; the delivery log says push token expired.",
        ),
    ),
    "broker-disconnect": (
        (
            "Berth occupancy on the office map stops updating in the afternoon",
            "The map freezes until someone restarts the gateway; log: Connection reset by peer (broker).",
        ),
        (
            "Gaps of an hour in the sensor history",
            "The occupancy history has holes; the gateway log shows the broker connection reset by peer.",
        ),
    ),
    "dst-offset": (
        (
            "Arrival hour one hour off for stays starting on the clock change weekend",
            "Guests arriving on the night the clocks go back see an arrival one hour late in the "
            "confirmation. The booking contract test fails the same way: AssertionFailedError expected "
            "T02:30+01:00 but was T03:30+02:00.",
        ),
        (
            "Harbour-master report lists late-night arrivals an hour early after clock change",
            "The arrivals list for the clock change night is shifted by one hour on the report; the report "
            "test fails with AssertionError: assert row.slot_start == expected (datetime 3, 30 vs 2, 30).",
        ),
    ),
    "emulator-boot-timeout": (
        (
            "Nightly app tests do not run at all",
            "The mobile suite never starts: the device did not finish boot within the limit.",
        ),
        (
            "Mobile CI job red before any test ran",
            "Emulator {emu} did not finish boot; the whole job is marked failed.",
        ),
    ),
    "smtp-relay-refused": (
        (
            "Password reset mails never arrive",
            "Users asking for a new password get no mail; mailer log: Connection refused by the relay.",
        ),
        (
            "Invoices not e-mailed to guests since the weekend",
            "Invoice e-mails stay unsent, the mail relay refuses the connection (Errno 111).",
        ),
    ),
    "disk-full": (
        (
            "Sensor capture upload fails on the test rig",
            "Writing the capture file on the rig fails: No space left on device.",
        ),
        (
            "Yearly PDF summary cannot be created",
            "Creating the yearly PDF stops with OSError No space left on device.",
        ),
    ),
    "tide-fixture-stale": (
        (
            "No tide heights shown for dates next month",
            "Looking ahead a month, the tide column is blank; the tide table data ends this month.",
        ),
        (
            "Tide column blank when planning arrivals after month end",
            "Harbour master cannot plan deep-draught arrivals: tide heights missing past the month end.",
        ),
    ),
    "deadlock-detected": (
        (
            "Confirming a booking with card deposit sometimes gives an error",
            "About once a day a confirmation fails with a server error; database says deadlock detected.",
        ),
        (
            "Deposit capture and booking confirmation block each other",
            "Two transactions on the berth row wait for each other until the database reports a deadlock.",
        ),
    ),
    "heap-oom": (
        (
            "Booking service restarts during busy searches",
            "At peak times the search for free berths takes the service down: OutOfMemoryError heap space.",
        ),
        (
            "Availability search slow then service gone",
            "Searches get slower until the service dies with java.lang.OutOfMemoryError.",
        ),
    ),
}
