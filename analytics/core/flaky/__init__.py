"""Flaky-test detection: evidence per test, a probability of flakiness, a verdict and its reasons.

Pure: takes and returns pandas objects, imports nothing from Django.

>>> from analytics.core.flaky import score_tests, VERDICTS
"""

from .evidence import (
    BAD_CONFIG,
    BAD_NOW,
    BAD_OUTCOME_VALUE,
    DEFAULT_EVIDENCE_CONFIG,
    EVIDENCE_COLUMNS,
    MISSING_COLUMNS,
    OUTCOMES,
    RUN_COLUMNS,
    EvidenceConfig,
    evidence_frame,
    normalise_message,
)
from .metrics import (
    BAD_FAILURE_COUNT,
    BAD_LAMBDA,
    BAD_LEVEL,
    BAD_OUTCOMES,
    BAD_PRIOR,
    failure_rate_interval,
    flip_rate,
    outcome_entropy,
    runs_test,
    weighted_flakiness,
)
from .scoring import (
    BAD_LABELS,
    BAD_SCORER_PARAM,
    FEATURE_COLUMNS,
    MISSING_EVIDENCE,
    NON_MONOTONE_WEIGHTS,
    SOURCES,
    TOO_FEW_LABELS,
    VERDICTS,
    FlakinessScorer,
    LabelledFlakinessClassifier,
    ScorerChoice,
    choose_scorer,
    score_tests,
)

__all__ = [
    "BAD_CONFIG",
    "BAD_FAILURE_COUNT",
    "BAD_LABELS",
    "BAD_LAMBDA",
    "BAD_LEVEL",
    "BAD_NOW",
    "BAD_OUTCOMES",
    "BAD_OUTCOME_VALUE",
    "BAD_PRIOR",
    "BAD_SCORER_PARAM",
    "DEFAULT_EVIDENCE_CONFIG",
    "EVIDENCE_COLUMNS",
    "FEATURE_COLUMNS",
    "MISSING_COLUMNS",
    "MISSING_EVIDENCE",
    "NON_MONOTONE_WEIGHTS",
    "OUTCOMES",
    "RUN_COLUMNS",
    "SOURCES",
    "TOO_FEW_LABELS",
    "VERDICTS",
    "EvidenceConfig",
    "FlakinessScorer",
    "LabelledFlakinessClassifier",
    "ScorerChoice",
    "choose_scorer",
    "evidence_frame",
    "failure_rate_interval",
    "flip_rate",
    "normalise_message",
    "outcome_entropy",
    "runs_test",
    "score_tests",
    "weighted_flakiness",
]
