"""The duplicate-defect detector (analytics.core.duplicates) on defects written in the test.

References used here:
* scikit-learn's ``TfidfVectorizer`` and ``sklearn.metrics.pairwise.cosine_similarity`` (general-purpose
  reference library): the scores must equal a TF-IDF cosine computed with them, and a brute-force loop in
  the test gives the reference candidate list;
* ``sklearn.metrics.precision_score`` / ``recall_score`` for precision and recall over all pairs;
* Runeson, Alexandersson & Nyholm, ICSE 2007, and Sun et al., ICSE 2010: candidates ranked per report and
  the top few shown (common practice in duplicate-report retrieval), numbers/ids not used as terms.
"""

from __future__ import annotations

import itertools
import subprocess
import sys

import numpy as np
import pandas as pd
import pytest
from sklearn.feature_extraction.text import TfidfVectorizer
from sklearn.metrics import precision_score, recall_score
from sklearn.metrics.pairwise import cosine_similarity

from analytics.core.duplicates import (
    BAD_CREATED,
    BAD_MIN_SCORE,
    BAD_TOP_K,
    DUPLICATE_KEY,
    MISSING_COLUMNS,
    duplicate_candidates,
)

# Invented marina tracker: (key, day filed, title, description). Unrelated reports of one component share
# words (berth, booking, invoice, sensor ...); re-reports are the same problem in other words, later.
DEFECTS = [
    (
        "M-1",
        1,
        "Berth map blank after rotating the phone",
        "Turning the phone sideways empties the berth map.",
    ),
    (
        "M-2",
        2,
        "Harbour dues charged twice after moving the arrival date",
        "Moving arrival from 3 to 4 June put a second harbour dues line of EUR 42.00 on invoice INV-20931.",
    ),
    (
        "M-3",
        3,
        "Depth sensor on pontoon D reads zero since firmware 2.4.1",
        "Depth gauge D-07 shows 0.0 m since the firmware update; other pontoons are fine.",
    ),
    (
        "M-4",
        4,
        "Reminder e-mail sent in the wrong language",
        "Guests with a German profile get the departure reminder in Dutch.",
    ),
    (
        "M-5",
        5,
        "Waiting list offers a berth shorter than the boat",
        "A 14 m yacht was offered a 10 m berth from the waiting list.",
    ),
    (
        "M-6",
        6,
        "Invoice PDF shows last year's VAT rate",
        "The PDF invoice still prints 19 % VAT after January.",
    ),
    (
        "M-7",
        7,
        "Berth booking calendar slow for large marinas",
        "Opening the booking calendar for 600 berths takes 40 seconds.",
    ),
    (
        "M-8",
        8,
        "Sensor battery level jumps after reconnect",
        "Battery of sensor S-118 shows 10 %, then 90 %, then 12 % within a minute after reconnecting.",
    ),
    (
        "M-9",
        9,
        "Gate code push not delivered on iPhone",
        "Guests on iOS never get the gate code push at check-in.",
    ),
    (
        "M-10",
        10,
        "Refund to foreign card short by one cent",
        "Refund of EUR 88.15 arrived as 88.14 on a UK card.",
    ),
    (
        "M-11",
        11,
        "Occupancy report counts cancelled bookings",
        "The monthly occupancy report includes stays that were cancelled before arrival.",
    ),
    (
        "M-12",
        12,
        "Login fails after password change on tablet",
        "After changing the password the tablet app keeps saying the password is wrong.",
    ),
    # re-reports of earlier problems, worded by another person, some days later
    (
        "M-13",
        14,
        "Map of berths empty in landscape",
        "When the phone is rotated to landscape the berth map goes blank.",
    ),
    (
        "M-14",
        15,
        "Second harbour dues line after arrival date changed",
        "Guest moved the arrival date and the invoice now has the harbour dues twice (INV-21877, EUR 38.50).",
    ),
    (
        "M-15",
        16,
        "Pontoon D depth gauge shows 0 after firmware update",
        "Since updating the firmware the depth sensor on pontoon D reports zero depth.",
    ),
    (
        "M-16",
        17,
        "Gate code push notification missing on iOS",
        "iPhone guests receive no gate code push notification at check-in.",
    ),
    (
        "M-17",
        18,
        "Occupancy report includes cancelled stays",
        "Cancelled bookings are counted in the occupancy report of the month.",
    ),
]
PLANTED = {
    frozenset(p)
    for p in [("M-1", "M-13"), ("M-2", "M-14"), ("M-3", "M-15"), ("M-9", "M-16"), ("M-11", "M-17")]
}


def frame(rows=DEFECTS) -> pd.DataFrame:
    return pd.DataFrame(
        {
            "key": [r[0] for r in rows],
            "created": [pd.Timestamp("2026-06-01", tz="UTC") + pd.Timedelta(days=r[1]) for r in rows],
            "title": [r[2] for r in rows],
            "description": [r[3] for r in rows],
        }
    )


def reference_scores(df: pd.DataFrame) -> np.ndarray:
    # scikit-learn reference: TF-IDF (words of two or more letters, English stop words, sublinear tf,
    # l2 rows) over title twice + description, then cosine_similarity.
    vec = TfidfVectorizer(
        token_pattern=r"(?u)(?<![\w])[^\W\d_]{2,}(?![\w])", stop_words="english", sublinear_tf=True
    )
    texts = [f"{t}\n{t}\n{d}" for t, d in zip(df["title"], df["description"], strict=True)]
    return cosine_similarity(vec.fit_transform(texts))


def test_planted_re_reports_are_found_with_precision_and_recall(capsys):
    found = duplicate_candidates(frame())
    got = {frozenset(p) for p in zip(found["key_a"], found["key_b"], strict=True)}
    keys = [r[0] for r in DEFECTS]
    every_pair = [frozenset(p) for p in itertools.combinations(keys, 2)]
    truth = [p in PLANTED for p in every_pair]
    predicted = [p in got for p in every_pair]
    precision = precision_score(truth, predicted, zero_division=0)  # scikit-learn metrics as the reference
    recall = recall_score(truth, predicted, zero_division=0)
    with capsys.disabled():
        print(
            f"\nhand-written re-reports: {len(got)} suggested, precision {precision:.2f}, recall {recall:.2f}"
        )
    assert recall >= 0.8 and precision >= 0.8


def test_scores_equal_scikit_learn_tfidf_cosine():
    df = frame()
    reference = reference_scores(df)
    index = {k: i for i, k in enumerate(df["key"])}
    found = duplicate_candidates(df, min_score=0.0, top_k=3)
    assert len(found) > 0
    for a, b, score in zip(found["key_a"], found["key_b"], found["score"], strict=True):
        assert score == pytest.approx(reference[index[a], index[b]], abs=1e-12)


@pytest.mark.parametrize("top_k", [1, 2, 3])
@pytest.mark.parametrize("min_score", [0.0, 0.2, 0.5])
def test_candidates_match_a_brute_force_top_k_among_earlier_defects(top_k, min_score):
    # Slow reference written here: for each defect, its top_k most similar earlier defects (a tie goes to
    # the earlier-filed one) with a positive score of at least min_score.
    df = frame()
    sims = reference_scores(df)
    keys = list(df["key"])
    expected = set()
    for later in range(1, len(keys)):  # DEFECTS are listed in filing order
        earlier = sorted(range(later), key=lambda j: (-sims[later, j], j))[:top_k]
        expected |= {
            frozenset((keys[j], keys[later]))
            for j in earlier
            if sims[later, j] >= min_score and sims[later, j] > 0
        }
    found = duplicate_candidates(df, min_score=min_score, top_k=top_k)
    assert {frozenset(p) for p in zip(found["key_a"], found["key_b"], strict=True)} == expected


def test_output_shape_and_order():
    found = duplicate_candidates(frame(), min_score=0.0, top_k=2)
    assert list(found.columns) == ["key_a", "key_b", "score"]
    assert (found["key_a"] < found["key_b"]).all()
    assert found["score"].is_monotonic_decreasing
    assert not found.duplicated(["key_a", "key_b"]).any()


def test_numbers_and_ids_are_not_terms():
    # Two reports that differ only in amounts, ids, hex values and dates are the same text to the detector.
    df = pd.DataFrame(
        {
            "key": ["A", "B", "C"],
            "title": [
                "Refund short by EUR 0.01 on BK-2026-00412",
                "Refund short by EUR 0.02 on BK-2026-97311",
                "Gate code push missing",
            ],
            "description": [
                "crc 0x1F2E3D4C at 10.0.3.7:8080 on 2026-06-03",
                "crc 0xA0B1C2D3 at 10.9.1.2:443 on 2026-07-11",
                "no push at check-in",
            ],
        }
    )
    found = duplicate_candidates(df, min_score=0.0)
    top = found.iloc[0]
    assert (top["key_a"], top["key_b"]) == ("A", "B")
    assert top["score"] == pytest.approx(1.0)


def test_ranking_per_report_keeps_a_template_flood_short():
    # Forty unrelated reports built from one template that differ in one word each: under a global
    # threshold every pair is reported (780 pairs, all with one score); ranked per report, each defect
    # contributes at most its top_k earlier neighbours, so the list has at most one pair per defect.
    things = [f"{chr(97 + i // 26)}{chr(97 + i % 26)}word" for i in range(40)]
    df = pd.DataFrame(
        {
            "key": [f"T-{i:02d}" for i in range(40)],
            "created": pd.date_range("2026-01-01", periods=40, freq="D", tz="UTC"),
            "title": [f"Harbour office page shows the wrong {t}" for t in things],
            "description": ["Seen by the harbour office on the morning round." for _ in things],
        }
    )
    sims = reference_scores(df)
    global_pairs = int((np.triu(sims, 1) >= 0.3).sum())
    found = duplicate_candidates(df, min_score=0.3, top_k=1)
    assert global_pairs == 40 * 39 // 2
    assert len(found) <= len(df) - 1


def test_without_created_every_other_defect_is_a_candidate():
    df = frame().drop(columns="created")
    found = duplicate_candidates(df)
    got = {frozenset(p) for p in zip(found["key_a"], found["key_b"], strict=True)}
    assert PLANTED & got  # the same pairs are reachable from either side
    with_time = duplicate_candidates(frame())
    assert set(with_time["key_a"] + "|" + with_time["key_b"]) <= set(found["key_a"] + "|" + found["key_b"])


def test_later_defect_is_compared_only_with_earlier_ones():
    # C is filed first; A and B later. B's nearest earlier defect is A. C's text equals B's, but C was
    # filed first, so the pair (B, C) is suggested from B's side only if C is among B's top_k.
    df = pd.DataFrame(
        {
            "key": ["A", "B", "C"],
            "created": pd.to_datetime(["2026-03-02", "2026-03-03", "2026-03-01"], utc=True),
            "title": ["Berth map blank after rotating", "Berth map blank after rotating", "Refund short"],
            "description": ["", "", ""],
        }
    )
    found = duplicate_candidates(df, min_score=0.0, top_k=1)
    assert [tuple(r) for r in found[["key_a", "key_b"]].to_numpy()] == [("A", "B")]


def test_input_is_not_modified():
    df = frame()
    before = df.copy(deep=True)
    duplicate_candidates(df)
    pd.testing.assert_frame_equal(df, before)


def test_small_and_empty_inputs():
    assert duplicate_candidates(frame(DEFECTS[:1])).empty
    only_numbers = pd.DataFrame({"key": ["A", "B"], "title": ["404", "2026"], "description": ["1", "2"]})
    assert duplicate_candidates(only_numbers).empty
    assert list(duplicate_candidates(frame(DEFECTS[:0])).columns) == ["key_a", "key_b", "score"]
    # no word in common anywhere: nothing to suggest, even at min_score 0
    apart = pd.DataFrame(
        {"key": ["A", "B", "C"], "title": ["red boat", "green tide", "blue sail"], "description": ""}
    )
    assert duplicate_candidates(apart, min_score=0.0).empty
    assert duplicate_candidates(
        apart.assign(created=pd.Timestamp("2026-01-01", tz="UTC")), min_score=0.0
    ).empty


@pytest.mark.parametrize(
    ("call", "message"),
    [
        (lambda d: duplicate_candidates(d, min_score=1.5), BAD_MIN_SCORE.format(value=1.5)),
        (lambda d: duplicate_candidates(d, min_score=True), BAD_MIN_SCORE.format(value=True)),
        (lambda d: duplicate_candidates(d, top_k=0), BAD_TOP_K.format(value=0)),
        (lambda d: duplicate_candidates(d, top_k=1.5), BAD_TOP_K.format(value=1.5)),
        (lambda d: duplicate_candidates(d.drop(columns="title")), MISSING_COLUMNS.format(columns="title")),
        (lambda d: duplicate_candidates(pd.concat([d, d.iloc[:1]])), DUPLICATE_KEY.format(key="M-1")),
        (
            lambda d: duplicate_candidates(d.assign(created=[None] + list(d["created"][1:]))),
            BAD_CREATED.format(key="M-1"),
        ),
    ],
)
def test_bad_arguments_raise_value_error(call, message):
    with pytest.raises(ValueError) as err:
        call(frame())
    assert str(err.value) == message


def test_pure_module_does_not_import_django():
    code = "import sys, analytics.core.duplicates; print('django' in sys.modules)"
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "False"
