"""Shared helpers for the JUnit-XML parser tests.

``junitparser_counts`` is the outside reference: the general-purpose ``junitparser`` library reads the same
file and counts testcases by result, so our reader can be cross-checked against it. Import it with
``from tests.ingest.parsers.conftest import junitparser_counts``.
"""

from __future__ import annotations

import os
from collections import Counter
from pathlib import Path

import junitparser
import pytest
from junitparser import xunit2
from lxml import etree

FIXTURE_DIR = Path(__file__).resolve().parents[2] / "fixtures" / "junit"


def _hardened_parse(path: str | os.PathLike[str]) -> etree._ElementTree:
    parser = etree.XMLParser(resolve_entities=False, no_network=True, load_dtd=False, huge_tree=True)
    return etree.parse(os.fspath(path), parser)


def _suites(
    root: junitparser.JUnitXml | junitparser.TestSuite,
) -> list[junitparser.TestSuite]:
    """Top-level suites; iterating a junitparser TestSuite already walks its nested suites."""
    return [root] if isinstance(root, junitparser.TestSuite) else list(root)


def junitparser_counts(path: str | os.PathLike[str]) -> dict[str, int]:
    """Count ``tests``, ``failures``, ``errors``, ``skipped`` per testcase element with junitparser.

    A testcase counts as a failure if junitparser reports a Failure result, as an error if it reports an
    Error, and as skipped if it reports only a Skipped result: the per-element convention pytest and
    Surefire use in their suite headers (rerun/flaky children are not counted).
    """
    root = junitparser.JUnitXml.fromfile(os.fspath(path), parse_func=_hardened_parse)
    counts: Counter[str] = Counter(tests=0, failures=0, errors=0, skipped=0)
    for suite in _suites(root):
        for case in suite:
            if not isinstance(case, junitparser.TestCase):
                continue
            kinds = case.result
            has_failure = any(isinstance(r, junitparser.Failure) for r in kinds)
            has_error = any(isinstance(r, junitparser.Error) for r in kinds)
            counts["tests"] += 1
            counts["failures"] += has_failure
            counts["errors"] += has_error
            counts["skipped"] += any(isinstance(r, junitparser.Skipped) for r in kinds) and not (
                has_failure or has_error
            )
    return dict(counts)


def junitparser_attempts(path: str | os.PathLike[str]) -> dict[str, int]:
    """Attempts per testcase name as junitparser's xunit2 module sees them: 1 + rerun/flaky children."""
    root = xunit2.JUnitXml.fromfile(os.fspath(path), parse_func=_hardened_parse)
    attempts: Counter[str] = Counter()
    for suite in _suites(root):
        for case in suite:
            if isinstance(case, xunit2.TestCase):
                interim = (
                    case.rerun_failures() + case.rerun_errors() + case.flaky_failures() + case.flaky_errors()
                )
                attempts[case.name] += 1 + len(interim)
    return dict(attempts)


@pytest.fixture
def fixture_dir() -> Path:
    return FIXTURE_DIR
