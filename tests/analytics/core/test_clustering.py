"""Failure-cause clustering against ground truth the tests construct.

Ground truth:
- Python: a program run by the real interpreter in a subprocess raises thirteen distinct root
  causes many times each, with varying values and callers; ``traceback.format_exc`` output is
  the input, the cause that was raised is the truth.
- JVM / JavaScript / .NET: hand-written traces in the layouts of ``Throwable.printStackTrace``,
  Node.js ``error.stack`` and ``Exception.ToString()`` (from memory), with values varied by a
  seeded generator; the template used is the truth.
Agreement is measured with ``sklearn.metrics.adjusted_rand_score`` (Hubert & Arabie 1985).
"""

from __future__ import annotations

import json
import pickle
import random
import subprocess
import sys
import textwrap

import numpy as np
import pandas as pd
import pytest
from sklearn.base import clone
from sklearn.metrics import adjusted_rand_score

from analytics.core.clustering import (
    BAD_COUNT,
    BAD_LINKAGE,
    BAD_THRESHOLD,
    CONFLICTING_TEXTS,
    DEFAULT_DISTANCE_THRESHOLD,
    MISSING_COLUMNS,
    FailureClusterer,
    pin_merge,
    pin_split,
)
from analytics.core.signatures import failure_signature

# -- Python ground truth from a real interpreter ---------------------------------------------------

CAUSES_PROGRAM = textwrap.dedent(
    r"""
    import json, math, os, random, socket, sys, traceback

    rng = random.Random(int(sys.argv[1]))
    workdir = sys.argv[2]
    repeats = int(sys.argv[3])


    def check_capacity(berth, load, limit):
        assert load <= limit, f"berth {berth} over capacity: {load} > {limit}"

    def lookup_berth(registry, berth_id):
        return registry[berth_id]

    def closed_port():
        probe = socket.socket()
        probe.bind(("127.0.0.1", 0))
        port = probe.getsockname()[1]
        probe.close()
        return port

    def open_gate_channel(port):
        try:
            with socket.create_connection(("127.0.0.1", port), timeout=2):
                pass
        except ConnectionRefusedError as exc:
            raise ConnectionError(f"gate controller unreachable at 127.0.0.1:{port}") from exc

    def wait_for_ack(seconds):
        raise TimeoutError(f"no acknowledgement from the fuel dock after {seconds:.1f}s")

    def average_fee(total, nights):
        return total / nights

    def skipper_name(booking):
        return booking.skipper.name

    def nth_slot(slots, index):
        return slots[index]

    def parse_length(raw):
        return int(raw)

    def read_manifest(path):
        with open(path) as handle:
            return handle.read()

    def parse_payload(raw):
        return json.loads(raw)

    def total_due(fee, extra):
        return fee + extra

    def mooring_depth(chain):
        return 1 + mooring_depth(chain)

    def tide_window(hours):
        return math.sqrt(hours)


    CASES = {
        "assertion": lambda: check_capacity(rng.randint(1, 300), rng.randint(50, 99), rng.randint(1, 49)),
        "key": lambda: lookup_berth({"A1": 1}, rng.choice([f"B{rng.randint(2, 900)}", f"pier-{rng.randint(1, 9)}",
                                                            rng.randint(100, 999)])),
        "connection": lambda: open_gate_channel(closed_port()),
        "timeout": lambda: wait_for_ack(rng.uniform(0.5, 30)),
        "zero_division": lambda: average_fee(rng.randint(10, 900), 0),
        "attribute_none": lambda: skipper_name(None),
        "index": lambda: nth_slot(list(range(rng.randint(0, 5))), rng.randint(6, 40)),
        "int_parse": lambda: parse_length(rng.choice([f"{rng.randint(5, 40)}m", "twelve", f"{rng.randint(1, 9)}.5"])),
        "file_missing": lambda: read_manifest(os.path.join(workdir, f"manifest_{rng.randint(1, 10**6)}.json")),
        "json": lambda: parse_payload(rng.choice(['{"berth": ' + str(rng.randint(1, 99)) + ',}', "{'berth': 1}",
                                                  "", '{"fee": 12.5', "[1, 2,, 3]"])),
        "type_operand": lambda: total_due(rng.randint(1, 500), rng.choice(["10", "fee", None])),
        "recursion": lambda: mooring_depth(rng.randint(1, 9)),
        "math_domain": lambda: tide_window(-rng.uniform(0.1, 12)),
    }


    def via_booking_flow(case):
        return CASES[case]()

    def via_nightly_report(case):
        return CASES[case]()

    def via_api_handler(case):
        return CASES[case]()

    CALLERS = [via_booking_flow, via_nightly_report, via_api_handler]

    for _ in range(repeats):
        for case in CASES:
            try:
                rng.choice(CALLERS)(case)
            except Exception as exc:
                text = str(exc)
                message = text if rng.random() < 0.5 else f"{type(exc).__name__}: {text}"
                print(json.dumps({"cause": case, "failure_type": type(exc).__name__, "message": message,
                                  "details": traceback.format_exc()}))
            else:
                raise SystemExit(f"case {case} did not fail")
    """
)


def _run_causes(directory, *, seed: int, repeats: int) -> pd.DataFrame:
    script = directory / "marina_causes.py"
    script.write_text(CAUSES_PROGRAM)
    result = subprocess.run(
        [sys.executable, str(script), str(seed), str(directory), str(repeats)],
        capture_output=True,
        text=True,
        check=True,
        timeout=120,
    )
    rows = [json.loads(line) for line in result.stdout.splitlines()]
    return pd.DataFrame(rows)


def _signature_rows(failures: pd.DataFrame) -> pd.DataFrame:
    signatures = [
        failure_signature(failure_type=row.failure_type, message=row.message, details=row.details)
        for row in failures.itertuples()
    ]
    return failures.assign(key=[s.key for s in signatures], text=[s.text for s in signatures])


@pytest.fixture(scope="module")
def python_failures(tmp_path_factory) -> pd.DataFrame:
    return _signature_rows(_run_causes(tmp_path_factory.mktemp("causes"), seed=7, repeats=12))


def _signature_frame(failures: pd.DataFrame) -> pd.DataFrame:
    """Distinct signatures with their number of occurrences."""
    return failures.groupby(["key", "text"], as_index=False).size().rename(columns={"size": "count"})


def test_python_ground_truth_adjusted_rand_index(python_failures):
    assert python_failures["cause"].nunique() == 13 and len(python_failures) == 13 * 12
    clusterer = FailureClusterer().fit(python_failures[["key", "text"]])  # one row per failure
    predicted = python_failures["key"].map(clusterer.labels_)
    ari = adjusted_rand_score(python_failures["cause"], predicted)  # sklearn.metrics reference
    print(
        f"python: {python_failures['key'].nunique()} distinct signatures, {clusterer.n_clusters_} clusters, "
        f"ARI={ari:.3f}"
    )
    assert ari >= 0.9
    # the signatures alone do not solve it: several signatures per cause must be joined
    assert python_failures["key"].nunique() > 13


def test_assign_places_new_occurrences_of_known_causes(python_failures, tmp_path):
    clusterer = FailureClusterer().fit(_signature_frame(python_failures))
    fresh = _signature_rows(_run_causes(tmp_path, seed=99, repeats=4))
    ids = clusterer.assign(fresh[["key", "text"]])
    predicted = fresh["key"].map(ids)
    # each cause's new occurrences land in the cluster holding that cause's earlier occurrences
    majority = (
        python_failures.assign(cluster=python_failures["key"].map(clusterer.labels_))
        .groupby("cause")["cluster"]
        .agg(lambda s: s.mode().iloc[0])
    )
    expected = fresh["cause"].map(majority)
    agreement = float((predicted == expected).mean())
    print(f"assign: agreement with the known cause's cluster {agreement:.3f}")
    assert agreement >= 0.9  # ground truth: the cause the program raised
    # a cause never seen before is not forced into a cluster
    unseen = pd.DataFrame(
        {
            "key": ["new"],
            "text": ["UnicodeDecodeError: codec can't decode byte <hex> @ sonar.py:decode_ping"],
        }
    )
    assert clusterer.assign(unseen).tolist() == [-1]


# -- JVM, JavaScript, .NET hand-written ground truth ----------------------------------------------

JVM_RUNNER = """\
\tat java.base/jdk.internal.reflect.NativeMethodAccessorImpl.invoke0(Native Method)
\tat java.base/java.lang.reflect.Method.invoke(Method.java:{l1})
\tat org.junit.platform.commons.util.ReflectionUtils.invokeMethod(ReflectionUtils.java:{l2})
"""

JVM_TEMPLATES = {
    "db_refused": """\
java.lang.IllegalStateException: Could not book berth {n1} for {day}
\tat com.marina.booking.BerthService.book(BerthService.java:88)
\tat com.marina.booking.{test}.lambda${case}${n2}({test}.java:{l3})
{runner}Caused by: java.sql.SQLException: Connection refused: localhost:{port} (pool@{hex})
\tat com.marina.db.Pool.acquire(Pool.java:51)
\tat com.marina.booking.BerthService.book(BerthService.java:80)
\t... {n3} more
""",
    "lock_timeout": """\
java.lang.IllegalStateException: Could not book berth {n1} for {day}
\tat com.marina.booking.BerthService.book(BerthService.java:88)
\tat com.marina.booking.{test}.lambda${case}${n2}({test}.java:{l3})
{runner}Caused by: java.util.concurrent.TimeoutException: lock on berth {n1} not acquired within {n2}000 ms
\tat com.marina.booking.LockManager.tryLock(LockManager.java:140)
\tat com.marina.booking.BerthService.book(BerthService.java:84)
\t... {n3} more
""",
    "fee_assert": """\
org.opentest4j.AssertionFailedError: expected: <{n1}> but was: <{n2}>
\tat org.junit.jupiter.api.AssertionUtils.fail(AssertionUtils.java:{l1})
\tat org.junit.jupiter.api.AssertEquals.assertEquals(AssertEquals.java:{l2})
\tat com.marina.fees.FeeCalculatorTest.{case}(FeeCalculatorTest.java:{l3})
{runner}""",
    "skipper_npe": """\
java.lang.NullPointerException: Cannot invoke "com.marina.model.Skipper.getName()" because "booking{n1}.skipper" is null
\tat com.marina.invoice.InvoicePrinter.header(InvoicePrinter.java:57)
\tat com.marina.invoice.InvoicePrinter.print(InvoicePrinter.java:{l3})
\tat com.marina.invoice.{test}.{case}({test}.java:{l2})
{runner}""",
    "tide_index": """\
java.lang.ArrayIndexOutOfBoundsException: Index {n1} out of bounds for length {n2}
\tat com.marina.tides.TideTable.slotAt(TideTable.java:33)
\tat com.marina.tides.{test}.{case}({test}.java:{l3})
{runner}""",
}

JS_TEMPLATES = {
    "js_undefined": """\
TypeError: Cannot read properties of undefined (reading '{field}')
    at getBerth (/app/src/berths.js:12:15)
    at {caller} (/app/src/{module}.js:{l1}:9)
    at Context.<anonymous> (/app/test/{module}.test.js:{l2}:5)
    at process.processImmediate (node:internal/timers:{l3}:21)
""",
    "js_refused": """\
Error: connect ECONNREFUSED 127.0.0.1:{port}
    at TCPConnectWrap.afterConnect [as oncomplete] (node:net:{l1}:16)
""",
    "js_assert": """\
AssertionError [ERR_ASSERTION]: Expected values to be strictly equal:

{n1} !== {n2}

    at Context.<anonymous> (/app/test/fees.test.js:{l2}:12)
    at callFn (/app/node_modules/runner/lib/runnable.js:{l3}:21)
""",
}

DOTNET_TEMPLATES = {
    "net_socket": """\
System.InvalidOperationException: Booking failed for berth {n1} ---> System.Net.Sockets.SocketException ({n3}): \
Connection refused 10.0.{n2}.5:{port}
   at System.Net.Sockets.Socket.Connect(EndPoint remoteEP)
   at Marina.Cache.SlotCache.Open() in /src/Marina/Cache/SlotCache.cs:line 44
   --- End of inner exception stack trace ---
   at Marina.Booking.BerthService.<ReserveAsync>d__{n2}.MoveNext() in /src/Marina/Booking/BerthService.cs:line 120
   at Marina.Booking.Tests.{test}.{case}() in /src/Marina/Tests/{test}.cs:line {l1}
""",
    "net_null": """\
System.NullReferenceException: Object reference not set to an instance of an object.
   at Marina.Invoices.InvoicePrinter.Header(Booking booking) in /src/Marina/Invoices/InvoicePrinter.cs:line 57
   at Marina.Invoices.Tests.{test}.{case}() in /src/Marina/Tests/{test}.cs:line {l1}
""",
    "net_range": """\
System.ArgumentOutOfRangeException: Index was out of range. Must be non-negative and less than the size of the \
collection. (Parameter 'index')
   at System.Collections.Generic.List`1.get_Item(Int32 index)
   at Marina.Tides.TideTable.SlotAt(Int32 hour) in /src/Marina/Tides/TideTable.cs:line 33
   at Marina.Tides.Tests.{test}.{case}() in /src/Marina/Tests/{test}.cs:line {l1}
""",
}


def _render(templates: dict[str, str], *, seed: int, repeats: int) -> pd.DataFrame:
    rng = random.Random(seed)
    rows = []
    for _ in range(repeats):
        for cause, template in templates.items():
            values = {
                "n1": rng.randint(1, 400),
                "n2": rng.randint(1, 9),
                "n3": rng.randint(10, 120),
                "l1": rng.randint(20, 900),
                "l2": rng.randint(20, 900),
                "l3": rng.randint(20, 900),
                "port": rng.randint(1025, 65535),
                "hex": f"{rng.getrandbits(32):08x}",
                "day": f"2025-{rng.randint(1, 12):02d}-{rng.randint(1, 28):02d}T{rng.randint(0, 23):02d}:00:00Z",
                "test": rng.choice(["BookingTests", "SeasonTests", "NightlyChecks"]),
                "case": rng.choice(["booksBerth", "rebooksBerth", "cancelsBerth", "chargesFee"]),
                "caller": rng.choice(["reserve", "quote", "checkIn"]),
                "module": rng.choice(["reservations", "quotes", "checkin"]),
                "field": rng.choice(["id", "length", "owner"]),
            }
            values["runner"] = JVM_RUNNER.format(**values)
            details = template.format(**values)
            signature = failure_signature(failure_type="", message="", details=details)
            rows.append({"cause": cause, "key": signature.key, "text": signature.text})
    return pd.DataFrame(rows)


@pytest.mark.parametrize(
    ("name", "templates"),
    [
        ("jvm", JVM_TEMPLATES),
        ("javascript+dotnet", {**JS_TEMPLATES, **DOTNET_TEMPLATES}),
    ],
)
def test_hand_written_traces_adjusted_rand_index(name, templates):
    failures = _render(templates, seed=11, repeats=10)
    clusterer = FailureClusterer().fit(_signature_frame(failures))
    ari = adjusted_rand_score(failures["cause"], failures["key"].map(clusterer.labels_))  # sklearn.metrics
    print(
        f"{name}: {failures['key'].nunique()} distinct signatures, {clusterer.n_clusters_} clusters, ARI={ari:.3f}"
    )
    assert ari >= 0.9


@pytest.mark.parametrize("threshold", [0.4, DEFAULT_DISTANCE_THRESHOLD, 0.6])
def test_default_threshold_sits_inside_a_plateau(python_failures, threshold):
    # all languages together; the default must not sit on the edge where ARI collapses
    hand_written = _render({**JVM_TEMPLATES, **JS_TEMPLATES, **DOTNET_TEMPLATES}, seed=12, repeats=6)
    failures = pd.concat([python_failures[["cause", "key", "text"]], hand_written], ignore_index=True)
    clusterer = FailureClusterer(distance_threshold=threshold).fit(_signature_frame(failures))
    ari = adjusted_rand_score(failures["cause"], failures["key"].map(clusterer.labels_))  # sklearn.metrics
    print(f"all languages, threshold {threshold}: ARI={ari:.3f}")
    assert ari >= 0.9


# -- stable ids --------------------------------------------------------------------------------------


def test_default_threshold_is_the_documented_one():
    assert FailureClusterer().get_params()["distance_threshold"] == DEFAULT_DISTANCE_THRESHOLD


def test_two_fits_give_identical_ids_whatever_the_row_order(python_failures):
    frame = _signature_frame(python_failures)
    first = FailureClusterer().fit(frame).labels_
    shuffled = frame.sample(frac=1.0, random_state=3).reset_index(drop=True)
    second = FailureClusterer().fit(shuffled).labels_
    pd.testing.assert_series_equal(first, second.loc[first.index])
    # without `previous`, ids run 0..k-1 by decreasing size
    sizes = frame.assign(cluster=frame["key"].map(first)).groupby("cluster")["count"].sum()
    assert sorted(sizes.index) == list(range(len(sizes)))
    assert sizes.is_monotonic_decreasing


def test_refit_with_previous_keeps_every_old_id(python_failures):
    old_causes = sorted(python_failures["cause"].unique())[:8]
    old = _signature_frame(python_failures[python_failures["cause"].isin(old_causes)])
    before = FailureClusterer().fit(old).labels_
    everything = _signature_frame(python_failures)
    after = FailureClusterer().fit(everything, previous=before.to_dict()).labels_
    pd.testing.assert_series_equal(after.loc[before.index], before)
    new_keys = after.index.difference(before.index)
    new_ids = set(after.loc[new_keys]) - set(before)
    assert new_ids and min(new_ids) > before.max()  # brand-new clusters get ids above the old ones
    # and ids do not depend on the order of the clusters found: a plain refit numbers by size instead
    plain = FailureClusterer().fit(everything).labels_
    assert adjusted_rand_score(plain, after.loc[plain.index]) == 1.0


def test_pinned_merge_and_split_are_respected(python_failures):
    frame = _signature_frame(python_failures)
    labels = FailureClusterer().fit(frame).labels_
    sizes = labels.value_counts()
    a, b = sorted(sizes.index[:2])
    merged_pins = pin_merge(labels.to_dict(), [a, b])
    merged = FailureClusterer().fit(frame, previous=labels.to_dict(), pinned=merged_pins).labels_
    members = labels.index[labels.isin([a, b])]
    assert set(merged.loc[members]) == {min(a, b)}
    assert (
        merged.loc[labels.index.difference(members)] == labels.loc[labels.index.difference(members)]
    ).all()

    big = next(cluster for cluster in sizes.index[sizes > 1] if cluster not in (a, b))
    moved = [labels.index[labels == big][0]]
    split_pins = pin_split(merged.to_dict(), moved, pinned=merged_pins)
    split = FailureClusterer().fit(frame, previous=merged.to_dict(), pinned=split_pins).labels_
    assert split.loc[moved[0]] == split_pins[moved[0]] and split_pins[moved[0]] > merged.max()
    stayed = merged.index[(merged == merged.loc[moved[0]]) & (merged.index != moved[0])]
    assert (split.loc[stayed] == merged.loc[stayed]).all()
    assert set(split.loc[members]) == {min(a, b)}  # the earlier merge still holds


def test_pins_keep_dissimilar_keys_together_and_similar_keys_apart():
    frame = pd.DataFrame(
        {
            "key": ["k1", "k2", "k3", "k4"],
            "text": [
                "KeyError: <str> @ berths.py:lookup_berth < flows.py:book",
                "KeyError: <str> @ berths.py:lookup_berth < flows.py:rebook",
                "ZeroDivisionError: division by zero @ fees.py:average_fee",
                "json.decoder.JSONDecodeError: Expecting value @ api.py:parse_payload",
            ],
        }
    )
    free = FailureClusterer().fit(frame).labels_
    assert free["k1"] == free["k2"] and len(set(free)) == 3  # hand-checkable toy case
    pinned = {"k1": 5, "k2": 9, "k3": 9, "k4": 9}
    labels = FailureClusterer().fit(frame, pinned=pinned).labels_
    assert labels.to_dict() == {"k1": 5, "k2": 9, "k3": 9, "k4": 9}


# -- behaviour at scale: cost follows the distinct signatures -----------------------------------------


def test_vectoriser_sees_only_distinct_signatures(monkeypatch):
    from sklearn.feature_extraction.text import TfidfVectorizer

    seen: list[int] = []
    original = TfidfVectorizer.fit_transform

    def spy(self, raw_documents, y=None):
        documents = list(raw_documents)
        seen.append(len(documents))
        return original(self, documents, y)

    monkeypatch.setattr(TfidfVectorizer, "fit_transform", spy)
    rng = np.random.default_rng(5)
    exceptions = ["KeyError", "ValueError", "TimeoutError", "AssertionError", "OSError"]
    texts = [
        f"{exceptions[i % 5]}: step {i % 17} of job @ module_{i % 40}.py:task_{i} < runner.py:run_{i % 7}"
        for i in range(1_000)
    ]
    keys = [f"sig{i:04d}" for i in range(1_000)]
    picks = rng.integers(0, 1_000, size=100_000)
    picks[:1_000] = np.arange(1_000)  # every signature occurs at least once
    failures = pd.DataFrame({"key": np.asarray(keys)[picks], "text": np.asarray(texts)[picks]})
    clusterer = FailureClusterer().fit(failures)
    assert seen == [
        1_000,
        1_000,
    ]  # the word and the character vectoriser, distinct texts only
    assert len(clusterer.labels_) == 1_000
    assert int(clusterer.describe()["size"].sum()) == 100_000  # nothing lost: every failure is counted


# -- describe -----------------------------------------------------------------------------------------


def test_describe_reports_size_label_and_representative(python_failures):
    frame = _signature_frame(python_failures)
    clusterer = FailureClusterer().fit(frame)
    summary = clusterer.describe(frame)
    assert list(summary.columns) == [
        "cluster_id",
        "label",
        "representative_key",
        "size",
        "n_signatures",
    ]
    assert summary["size"].sum() == len(python_failures)
    assert summary["n_signatures"].sum() == frame["key"].nunique()
    assert summary["size"].is_monotonic_decreasing
    for row in summary.itertuples():
        members = frame[frame["key"].map(clusterer.labels_) == row.cluster_id]
        most = members["count"].max()
        assert members.set_index("key").loc[row.representative_key, "count"] == most
        assert row.label.split(":")[0] in set(members["text"].str.extract(r"^([^\s:]+)")[0])
    zero = summary[summary["label"].str.startswith("ZeroDivisionError")]
    assert len(zero) == 1 and "average_fee" in zero["label"].iloc[0]


# -- estimator conventions and validation ---------------------------------------------------------------


def test_fit_does_not_modify_its_input(python_failures):
    frame = _signature_frame(python_failures)
    copy = frame.copy()
    previous = dict.fromkeys(frame["key"], 0)
    previous_copy = dict(previous)
    FailureClusterer().fit(frame, previous=previous)
    pd.testing.assert_frame_equal(frame, copy)
    assert previous == previous_copy


def test_clone_and_pickle_round_trip(python_failures):
    frame = _signature_frame(python_failures)
    clusterer = FailureClusterer(distance_threshold=0.5, linkage="complete").fit(frame)
    assert clone(clusterer).get_params() == clusterer.get_params()  # sklearn.base.clone contract
    restored = pickle.loads(pickle.dumps(clusterer))
    pd.testing.assert_series_equal(restored.assign(frame), clusterer.assign(frame))


def test_counts_are_summed_over_repeated_keys():
    frame = pd.DataFrame(
        {
            "key": ["a", "a", "b"],
            "text": ["KeyError: <str> @ x.py:f"] * 2 + ["OSError: disk @ y.py:g"],
            "count": [2, 3, 1],
        }
    )
    clusterer = FailureClusterer().fit(frame)
    assert clusterer.signatures_.loc["a", "count"] == 5 and clusterer.signatures_.loc["b", "count"] == 1


@pytest.mark.parametrize(
    ("params", "frame", "message"),
    [
        ({"linkage": "single"}, None, BAD_LINKAGE.format(linkage="single")),
        ({"distance_threshold": 0}, None, BAD_THRESHOLD.format(threshold=0)),
        (
            {},
            pd.DataFrame({"key": ["a"]}),
            MISSING_COLUMNS.format(frame="signatures", columns="text"),
        ),
        (
            {},
            pd.DataFrame({"key": ["a", "a"], "text": ["KeyError: x", "OSError: y"]}),
            CONFLICTING_TEXTS.format(key="a"),
        ),
        (
            {},
            pd.DataFrame({"key": ["a"], "text": ["KeyError: x"], "count": [0]}),
            BAD_COUNT.format(key="a", count=0),
        ),
    ],
)
def test_bad_arguments_raise_value_error(params, frame, message):
    if frame is None:
        frame = pd.DataFrame({"key": ["a", "b"], "text": ["KeyError: x", "OSError: y"]})
    with pytest.raises(ValueError) as error:
        FailureClusterer(**params).fit(frame)
    assert str(error.value) == message


def test_labels_skip_english_stop_words_and_test_names():
    # scikit-learn's ENGLISH_STOP_WORDS list is the reference for filler words.
    from sklearn.feature_extraction.text import ENGLISH_STOP_WORDS

    texts = [
        f"AssertionError: expected berth {n} to be free because the hold but it cannot expire "
        f"at BerthAvailabilityTest.test_hold_expiry"
        for n in range(6)
    ]
    frame = pd.DataFrame({"key": [f"k{i}" for i in range(6)], "text": texts})
    label = FailureClusterer().fit(frame).describe(n_terms=5)["label"].iloc[0]
    terms = label.split(": ", 1)[1].split(", ")
    assert terms and not set(terms) & ENGLISH_STOP_WORDS, label
    cause_words = [t for t in terms if not (t.endswith("test") or t.startswith("test"))]
    assert terms[: len(cause_words)] == cause_words, label  # cause words come before test names
    assert "berth" in terms or "hold" in terms or "expire" in terms, label


def test_labels_fall_back_on_test_names_when_the_cause_has_no_words_of_its_own():
    # Two KeyErrors whose quoted keys are normalised away: only the test names can tell the labels apart.
    frame = pd.DataFrame({
        "key": ["a1", "a2", "b1", "b2"],
        "text": ["KeyError: <str> @ test_refund_export", "KeyError: <str> @ test_refund_export",
                 "KeyError: <str> @ test_occupancy_filters", "KeyError: <str> @ test_occupancy_filters"],
    })
    labels = set(FailureClusterer(distance_threshold=0.2).fit(frame).describe()["label"])
    assert len(labels) == 2, labels
