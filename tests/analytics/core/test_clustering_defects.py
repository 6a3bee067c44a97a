"""Defect matching and duplicate defects, on an export the test builds.

Scenario (invented): the defect export of a marina berth-booking platform team. Some defects
were reported twice by different people in different words, with different numbers and
pasted logs; those planted pairs are the ground truth. Several distinct defects share a
component and its vocabulary, so that mere topic overlap is not enough. Precision and recall
are computed with ``sklearn.metrics`` over every unordered pair of defects.
"""

from __future__ import annotations

import pandas as pd
import pytest

from analytics.core.clustering import (
    BAD_MIN_SCORE,
    BAD_TOP_K,
    MISSING_COLUMNS,
    FailureClusterer,
    match_defects,
)

ORIGINALS = {
    "MAR-101": (
        "Booking a berth twice in the same night is accepted",
        (
            "Two bookings for berth 14 on 2025-06-03 were both confirmed. The overlap check in the "
            "reservation service does not look at bookings made in the last minute."
        ),
    ),
    "MAR-102": (
        "Season fee is charged for short stays",
        (
            "A three-night stay was billed at the seasonal rate. Fee calculator picks the season tariff "
            "whenever the arrival date falls in July."
        ),
    ),
    "MAR-103": (
        "Invoice PDF shows empty skipper name",
        (
            "Invoices for bookings made by agents have a blank skipper field; the printer reads the skipper "
            "from the agent profile, which has none."
        ),
    ),
    "MAR-104": (
        "Tide table off by one hour after clock change",
        (
            "After the switch to summer time the tide table lists high water one hour late. Times are "
            "converted with a fixed UTC offset."
        ),
    ),
    "MAR-105": (
        "Gate controller unreachable from the booking service",
        (
            "Check-in fails with ConnectionRefusedError: [Errno 111] Connection refused when opening the "
            "gate channel on 10.0.4.7:7001. The controller restarts at midnight."
        ),
    ),
    "MAR-106": (
        "Fuel dock acknowledgement times out",
        (
            "Refuelling orders hang and end with TimeoutError: no acknowledgement from the fuel dock after "
            "30.0s. The dock terminal answers only on the second attempt."
        ),
    ),
    "MAR-107": (
        "Average nightly fee crashes for zero-night bookings",
        (
            "Opening a day-visit booking shows a server error: ZeroDivisionError: division by zero in "
            "average_fee. Day visits have nights = 0."
        ),
    ),
    "MAR-108": (
        "Boat length field rejects values with unit",
        (
            "Entering '12m' in the boat length field gives ValueError: invalid literal for int() with base 10: "
            "'12m'. Users type the unit out of habit."
        ),
    ),
    "MAR-109": (
        "Waiting list e-mails sent in English only",
        (
            "Guests who chose German still receive the waiting-list notification in English; the template "
            "language is taken from the marina default."
        ),
    ),
    "MAR-110": (
        "Mooring map does not load on tablets",
        (
            "The mooring map stays blank on tablets in portrait mode. The canvas gets a width of zero "
            "before the layout is done."
        ),
    ),
    "MAR-111": (
        "Cancellation refund rounds down to whole euros",
        (
            "A cancelled booking of 143.50 EUR refunded 143 EUR. The refund is computed with integer "
            "division in the payments module."
        ),
    ),
    "MAR-112": (
        "Harbour master report misses late arrivals",
        (
            "The nightly harbour master report omits boats that arrive after 22:00; the report query stops "
            "at the end of the office day."
        ),
    ),
    "MAR-113": (
        "Berth search ignores draught limit",
        (
            "Searching for a berth for a boat with 2.4 m draught lists shallow berths. The draught filter is "
            "dropped when the length filter is set."
        ),
    ),
    "MAR-114": (
        "Electricity meter readings imported twice",
        (
            "Shore power readings from the meter gateway appear twice on the invoice when the import job "
            "is retried after a timeout."
        ),
    ),
    "MAR-115": (
        "Manifest upload fails for crew lists",
        (
            "Uploading a crew manifest fails with FileNotFoundError: [Errno 2] No such file or directory: "
            "'/tmp/upload_8812/manifest.json'. The temporary file is deleted before parsing."
        ),
    ),
    "MAR-116": (
        "Booking API returns 500 on malformed JSON",
        (
            "Sending a booking with a trailing comma returns a server error: json.decoder.JSONDecodeError: "
            "Expecting property name enclosed in double quotes. It should be a 400 with a message."
        ),
    ),
    "MAR-117": (
        "Season pass holders are charged a booking fee",
        (
            "Holders of a season pass pay the 5 EUR booking fee on every reservation; the fee waiver flag is "
            "not checked in checkout."
        ),
    ),
    "MAR-118": (
        "Berth availability calendar shows wrong week start",
        (
            "The availability calendar starts weeks on Sunday for Dutch users; week start should follow "
            "the locale."
        ),
    ),
    "MAR-119": (
        "Reminder SMS sent for cancelled bookings",
        (
            "Guests who cancelled still get the arrival reminder text message the day before; the reminder "
            "job does not filter cancelled bookings."
        ),
    ),
    "MAR-120": (
        "Slot lookup fails for hours past the tide table",
        (
            "Asking for the tide slot at hour 30 raises IndexError: list index out of range in nth_slot "
            "instead of returning no slot."
        ),
    ),
    "MAR-121": (
        "Total due fails when extra charges are text",
        (
            "Checkout crashes with TypeError: unsupported operand type(s) for +: 'int' and 'str' in total_due "
            "when an extra charge comes from the legacy import as text."
        ),
    ),
    "MAR-122": (
        "Export of bookings to CSV drops the boat name column",
        (
            "The bookings CSV export no longer includes the boat name since the column was renamed in the "
            "database."
        ),
    ),
    "MAR-123": (
        "Pier lookup raises KeyError for new piers",
        (
            "Bookings on pier F fail with KeyError: 'F12' in lookup_berth; the berth registry is loaded at "
            "start-up and misses piers added later."
        ),
    ),
    "MAR-124": (
        "Weather warning banner never disappears",
        (
            "The storm warning banner stays on the dashboard after the warning has been lifted; the banner "
            "has no expiry time."
        ),
    ),
}

# Re-reports: same defect, other words, other numbers, other pasted details.
DUPLICATES = {
    "MAR-131": (
        "MAR-101",
        "Double booking: same berth confirmed for two boats on one night",
        (
            "Berth 3 got two confirmed reservations for 2025-08-19. Seems the overlap check misses bookings "
            "created a few seconds apart."
        ),
    ),
    "MAR-132": (
        "MAR-103",
        "Skipper name missing on invoice PDF for agent bookings",
        "When an agent books, the printed invoice has no skipper name; the skipper field is blank.",
    ),
    "MAR-133": (
        "MAR-105",
        "Check-in error: connection refused to gate controller",
        (
            "At 00:03 check-in failed: ConnectionRefusedError: [Errno 111] Connection refused while opening "
            "the gate channel on 10.0.4.9:7002. Worked again ten minutes later."
        ),
    ),
    "MAR-134": (
        "MAR-107",
        "Server error on day visits: division by zero in average fee",
        (
            "Day-visit bookings (0 nights) crash the booking page with ZeroDivisionError: division by zero "
            "in average_fee."
        ),
    ),
    "MAR-135": (
        "MAR-108",
        "Cannot save boat length '9.5m' - invalid literal for int()",
        (
            "Typing a length with the unit gives ValueError: invalid literal for int() with base 10: '9.5m' "
            "on the boat form."
        ),
    ),
    "MAR-136": (
        "MAR-111",
        "Refunds are rounded down to whole euros on cancellation",
        (
            "Cancelled a booking of 88.90 EUR, the refund was 88 EUR. Looks like integer division in "
            "payments refund computation."
        ),
    ),
    "MAR-137": (
        "MAR-115",
        "Crew manifest upload: No such file or directory",
        (
            "Upload of the crew list manifest ends with FileNotFoundError: [Errno 2] No such file or "
            "directory: '/tmp/upload_40213/manifest.json'; the temp file seems gone before parsing."
        ),
    ),
    "MAR-138": (
        "MAR-119",
        "Arrival reminder text message goes to guests who cancelled",
        "A guest cancelled last week and still got the reminder SMS the day before arrival.",
    ),
    "MAR-139": (
        "MAR-123",
        "KeyError in lookup_berth for berths on the new pier G",
        (
            "Booking berth G3 fails with KeyError: 'G3' in lookup_berth. The registry seems to be loaded "
            "only at start-up, missing new piers."
        ),
    ),
    "MAR-140": (
        "MAR-106",
        "Fuel dock orders time out waiting for acknowledgement",
        (
            "Refuelling order stuck then TimeoutError: no acknowledgement from the fuel dock after 12.5s; "
            "second try works."
        ),
    ),
}


def _export() -> tuple[pd.DataFrame, set[tuple[str, str]]]:
    rows = [{"key": key, "title": title, "description": text} for key, (title, text) in ORIGINALS.items()]
    rows += [
        {"key": key, "title": title, "description": text} for key, (_, title, text) in DUPLICATES.items()
    ]
    planted = {tuple(sorted((key, original))) for key, (original, _, _) in DUPLICATES.items()}
    return pd.DataFrame(rows), planted


# -- matching clusters to defects -------------------------------------------------------------------

CLUSTER_TEXTS = {
    0: "ZeroDivisionError: division by zero @ fees.py:average_fee < views.py:booking_detail",
    1: "ConnectionRefusedError: [Errno <n>] Connection refused @ gates.py:open_gate_channel | via ConnectionError",
    2: "KeyError: <str> @ registry.py:lookup_berth < flows.py:book",
    3: "ValueError: invalid literal for int() with base <n>: <str> @ boats.py:parse_length < forms.py:clean",
    4: "UnicodeDecodeError: <str> codec can't decode byte <hex> @ sonar.py:decode_ping",
}
# ground truth: which defects each cluster's cause was reported as (built above)
EXPECTED_MATCH = {
    0: {"MAR-107", "MAR-134"},
    1: {"MAR-105", "MAR-133"},
    2: {"MAR-123", "MAR-139"},
    3: {"MAR-108", "MAR-135"},
}


@pytest.mark.parametrize("shared_vectoriser", [False, True])
def test_match_defects_ranks_the_reported_defects_first(shared_vectoriser):
    defects, _ = _export()
    vectoriser = None
    if shared_vectoriser:  # the clusterer's own fitted vectoriser, as the brief asks
        frame = pd.DataFrame(
            {
                "key": [f"k{i}" for i in CLUSTER_TEXTS],
                "text": list(CLUSTER_TEXTS.values()),
            }
        )
        vectoriser = FailureClusterer().fit(frame).vectoriser_
    matches = match_defects(CLUSTER_TEXTS, defects, vectoriser=vectoriser, min_score=0.1, top_k=2)
    assert list(matches.columns) == ["cluster_id", "defect_key", "score"]
    for cluster_id, expected in EXPECTED_MATCH.items():
        top = matches[matches["cluster_id"] == cluster_id]
        assert set(top["defect_key"]) == expected, (cluster_id, top)
    assert matches.groupby("cluster_id").size().max() <= 2
    assert (matches["score"] >= 0.1).all()


def test_match_defects_min_score_drops_weak_matches():
    defects, _ = _export()
    everything = match_defects(CLUSTER_TEXTS, defects, min_score=0.0, top_k=50)
    strong = match_defects(CLUSTER_TEXTS, defects, min_score=0.3, top_k=50)
    assert len(strong) < len(everything)
    assert (strong["score"] >= 0.3).all()
    # the unreported cause (sonar decoding) has no strong match
    assert 4 not in set(strong["cluster_id"])


@pytest.mark.parametrize(
    ("call", "message"),
    [
        (
            lambda d: match_defects({0: "x"}, d, min_score=1.5),
            BAD_MIN_SCORE.format(name="min_score", value=1.5),
        ),
        (lambda d: match_defects({0: "x"}, d, top_k=0), BAD_TOP_K.format(top_k=0)),
        (
            lambda d: match_defects({0: "x"}, d.drop(columns="title")),
            MISSING_COLUMNS.format(frame="defects", columns="title"),
        ),
    ],
)
def test_bad_defect_arguments_raise_value_error(call, message):
    defects, _ = _export()
    with pytest.raises(ValueError) as error:
        call(defects)
    assert str(error.value) == message
