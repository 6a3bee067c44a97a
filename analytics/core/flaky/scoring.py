"""Flakiness scores, verdicts and their explanations.

Two scorers share one interface (``fit``, ``predict_proba`` returning P(flaky) as a 1-D array,
``verdicts``, ``explain``):

- :class:`FlakinessScorer` needs no labels. It adds up the evidence in :func:`evidence_frame` as
  log-likelihood ratios (a naive-Bayes evidence sum) on top of a prior, and reads the posterior odds.
- :class:`LabelledFlakinessClassifier` learns from tests that engineers labelled; :func:`choose_scorer`
  uses it only when it beats the rules on held-out labels.

References
----------
.. [1] E. Kowalczyk, K. Nair, Z. Gao, L. Silberstein, T. Long, A. Memon, "Modeling and Ranking Flaky
   Tests at Apple", ICSE-SEIP 2020, doi:10.1145/3377813.3381370.
.. [2] Q. Luo, F. Hariri, L. Eloussi, D. Marinov, "An Empirical Analysis of Flaky Tests", FSE 2014,
   doi:10.1145/2635868.2635920.
.. [3] G. W. Brier, "Verification of forecasts expressed in terms of probability", Monthly Weather
   Review 78(1), 1950.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd
from sklearn.base import BaseEstimator, ClassifierMixin
from sklearn.calibration import CalibratedClassifierCV
from sklearn.impute import SimpleImputer
from sklearn.linear_model import LogisticRegression
from sklearn.metrics import brier_score_loss, roc_auc_score
from sklearn.model_selection import StratifiedKFold, cross_val_predict
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler
from sklearn.utils.validation import check_is_fitted

from .evidence import DEFAULT_EVIDENCE_CONFIG, EvidenceConfig, evidence_frame

__all__ = [
    "BAD_LABELS",
    "BAD_SCORER_PARAM",
    "FEATURE_COLUMNS",
    "MISSING_EVIDENCE",
    "NON_MONOTONE_WEIGHTS",
    "TOO_FEW_LABELS",
    "VERDICTS",
    "FlakinessScorer",
    "LabelledFlakinessClassifier",
    "ScorerChoice",
    "choose_scorer",
    "score_tests",
]

VERDICTS = ("flaky", "broken", "stable", "insufficient data")
SOURCES = ("rules", "classifier")

BAD_SCORER_PARAM = "FlakinessScorer parameter out of range: "
NON_MONOTONE_WEIGHTS = (
    "contradiction_lr must be at least scattered_lr**2 / long_episode_lr, otherwise adding a "
    "same-commit contradiction could lower the score"
)
MISSING_EVIDENCE = "evidence frame is missing column(s): "
BAD_LABELS = "labels must be a Series indexed by test_id holding 0/1 or booleans (1 = flaky)"
TOO_FEW_LABELS = "the classifier needs labelled tests of both classes with sufficient data"

FEATURE_COLUMNS = (
    "runs",
    "failure_rate",
    "same_commit_contradictions",
    "pass_on_rerun",
    "flip_rate",
    "entropy",
    "history_flip_rate",
    "history_entropy",
    "runs_z",
    "message_diversity",
    "duration_cv",
    "timeout_failures",
    "longest_failure_streak",
    "failing_now",
    "short_episodes",
    "long_episodes",
    "longest_episode",
    "scattered_episodes",
)
_RULE_COLUMNS = (
    "runs",
    "failures",
    "sufficient",
    "same_commit_contradictions",
    "pass_on_rerun",
    "scattered_episodes",
    "long_episodes",
    "failing_now",
)


def _check_columns(evidence: pd.DataFrame, columns: Sequence[str]) -> None:
    if not isinstance(evidence, pd.DataFrame):
        raise TypeError("evidence must be a pandas DataFrame (see evidence_frame)")
    missing = [c for c in columns if c not in evidence.columns]
    if missing:
        raise ValueError(MISSING_EVIDENCE + ", ".join(missing))


def _verdicts(evidence: pd.DataFrame, proba: np.ndarray, threshold: float) -> pd.Series:
    sufficient = evidence["sufficient"].to_numpy(dtype=bool)
    failing_now = evidence["failing_now"].to_numpy(dtype=bool)
    verdict = np.where(
        ~sufficient,
        VERDICTS[3],
        np.where(proba >= threshold, VERDICTS[0], np.where(failing_now, VERDICTS[1], VERDICTS[2])),
    )
    return pd.Series(verdict, index=evidence.index, name="verdict", dtype=object)


def _short(label: str) -> str:
    return label if label.startswith("build ") else label[:7]


def _listing(items: Sequence[object], limit: int = 3) -> str:
    shown = ", ".join(str(i) for i in items[:limit])
    return shown + (", ..." if len(items) > limit else "")


def _plural(n: int, word: str, plural: str | None = None) -> str:
    return f"{n} {word if n == 1 else (plural or word + 's')}"


class FlakinessScorer(BaseEstimator):
    """Unsupervised probability that a test is flaky, from its evidence row.

    The posterior log-odds are the prior log-odds plus one log-likelihood ratio per piece of evidence:

    ``logit P = log(prior / (1 - prior))
    + log(contradiction_lr) * same_commit_contradictions
    + log(rerun_lr) * pass_on_rerun
    + log(scattered_lr) * scattered_episodes
    + log(long_episode_lr) * [long_episodes > 0]
    + runs * log(1 - clean_rate) * [failures == 0]``

    - Passing and failing on the same code is the direct sign of non-determinism [1]_; a pass on
      rerun within one build is the same sign observed under the tightest conditions.
    - Several short failure episodes separated by passes are what independent intermittent failures
      produce; one change to the code produces one episode.
    - A long episode (more than ``short_episode_max_versions`` consecutive failing versions) is what a
      regression produces: an intermittent failure rarely lasts that long, so it lowers the odds.
    - A clean history of ``runs`` passes is ``(1 - clean_rate) ** runs`` times as likely for a test that
      fails at the typical rate ``clean_rate`` as for a deterministic one.

    Tests without enough runs get the prior itself. The verdict is ``'insufficient data'`` for them,
    else ``'flaky'`` when ``P >= threshold``, else ``'broken'`` when the latest runs all failed, else
    ``'stable'``.

    Parameters
    ----------
    prior : float, default 0.25
        P(flaky) before looking at any evidence.
    contradiction_lr : float, default 50.0
        Likelihood ratio per version that both passed and failed.
    rerun_lr : float, default 5.0
        Extra likelihood ratio per build that failed and then passed on rerun.
    scattered_lr : float, default 4.0
        Likelihood ratio per short failure episode beyond the first.
    long_episode_lr : float, default 1/3
        Likelihood ratio (below 1) applied once when there is a long failure episode.
    clean_rate : float, default 0.05
        Typical failure rate of a flaky test, used to discount tests that never failed.
    threshold : float, default 0.5
        P(flaky) from which the verdict is ``'flaky'``.

    Attributes
    ----------
    log_weights_ : dict of str to float
        The log-likelihood ratios used, by evidence column.
    prior_logit_ : float

    Notes
    -----
    Monotonicity: adding one run that contradicts a version's other runs raises
    ``same_commit_contradictions`` by one, never lowers ``pass_on_rerun``, can lower
    ``scattered_episodes`` by at most two (it can join two short episodes) and can create a long episode.
    ``fit`` therefore requires ``contradiction_lr >= scattered_lr ** 2 / long_episode_lr`` so that the
    score never drops, and raises :data:`NON_MONOTONE_WEIGHTS` otherwise. Because only counts enter, the
    score of a test depends on its own evidence row alone. The likelihood ratios are set by judgement
    (e.g. a contradiction: under flakiness with failure rate 5 %-30 %, a version with several runs disagrees
    in roughly 10 %-50 % of cases; a deterministic test disagrees only through an environment change,
    well under 1 %); the labelled classifier exists to learn them from data.

    ``predict_proba`` returns P(flaky) as a 1-D array rather than scikit-learn's two-column form, as the
    callers only ever want that one column.

    References
    ----------
    Kowalczyk et al. 2020 [1]_; Luo et al. 2014 [2]_ (time-outs and asynchronous waits as common causes).

    Examples
    --------
    >>> import pandas as pd
    >>> row = dict(runs=40, failures=3, sufficient=True, same_commit_contradictions=1, pass_on_rerun=1,
    ...            scattered_episodes=1, long_episodes=0, failing_now=False)
    >>> scorer = FlakinessScorer().fit(pd.DataFrame([row]))
    >>> round(float(scorer.predict_proba(pd.DataFrame([row]))[0]), 3)
    0.997
    """

    def __init__(
        self,
        *,
        prior: float = 0.25,
        contradiction_lr: float = 50.0,
        rerun_lr: float = 5.0,
        scattered_lr: float = 4.0,
        long_episode_lr: float = 1.0 / 3.0,
        clean_rate: float = 0.05,
        threshold: float = 0.5,
    ) -> None:
        self.prior = prior
        self.contradiction_lr = contradiction_lr
        self.rerun_lr = rerun_lr
        self.scattered_lr = scattered_lr
        self.long_episode_lr = long_episode_lr
        self.clean_rate = clean_rate
        self.threshold = threshold

    def fit(self, evidence: pd.DataFrame | None = None, y: object = None) -> FlakinessScorer:
        """Check the parameters and derive the log weights; the evidence is not needed (unsupervised)."""
        checks = {
            "prior": 0.0 < self.prior < 1.0,
            "contradiction_lr": self.contradiction_lr >= 1.0,
            "rerun_lr": self.rerun_lr >= 1.0,
            "scattered_lr": self.scattered_lr >= 1.0,
            "long_episode_lr": 0.0 < self.long_episode_lr <= 1.0,
            "clean_rate": 0.0 <= self.clean_rate < 1.0,
            "threshold": 0.0 < self.threshold < 1.0,
        }
        for name, ok in checks.items():
            if not ok:
                raise ValueError(f"{BAD_SCORER_PARAM}{name}={getattr(self, name)!r}")
        if self.contradiction_lr < self.scattered_lr**2 / self.long_episode_lr * (1 - 1e-12):
            raise ValueError(NON_MONOTONE_WEIGHTS)
        if evidence is not None:
            _check_columns(evidence, _RULE_COLUMNS)
        self.prior_logit_ = math.log(self.prior / (1.0 - self.prior))
        self.log_weights_ = {
            "same_commit_contradictions": math.log(self.contradiction_lr),
            "pass_on_rerun": math.log(self.rerun_lr),
            "scattered_episodes": math.log(self.scattered_lr),
            "long_episodes": math.log(self.long_episode_lr),
            "clean_runs": math.log1p(-self.clean_rate),
        }
        return self

    def decision_function(self, evidence: pd.DataFrame) -> np.ndarray:
        """Posterior log-odds of flakiness (the prior's log-odds for tests without sufficient data)."""
        check_is_fitted(self, "log_weights_")
        _check_columns(evidence, _RULE_COLUMNS)
        return self._logit(evidence)

    def _logit(self, evidence: pd.DataFrame | pd.Series) -> np.ndarray:
        # Works on a frame (one value per row) and on a single row (0-d values).
        w = self.log_weights_

        def col(name: str) -> np.ndarray:
            return np.asarray(evidence[name], dtype=float)

        logit = (
            self.prior_logit_
            + w["same_commit_contradictions"] * col("same_commit_contradictions")
            + w["pass_on_rerun"] * col("pass_on_rerun")
            + w["scattered_episodes"] * col("scattered_episodes")
            + w["long_episodes"] * (col("long_episodes") > 0)
            + w["clean_runs"] * col("runs") * (col("failures") == 0)
        )
        return np.where(col("sufficient") > 0, logit, self.prior_logit_)

    def predict_proba(self, evidence: pd.DataFrame) -> np.ndarray:
        """P(flaky) for each evidence row, in [0, 1], never NaN."""
        logit = self.decision_function(evidence)
        return 1.0 / (1.0 + np.exp(-logit))

    def verdicts(self, evidence: pd.DataFrame) -> pd.Series:
        """One of :data:`VERDICTS` per test, indexed like ``evidence``."""
        return _verdicts(evidence, self.predict_proba(evidence), self.threshold)

    def explain(self, evidence_row: pd.Series) -> list[str]:
        """Plain sentences stating the evidence behind the score of one test (a row of the evidence)."""
        check_is_fitted(self, "log_weights_")
        r = evidence_row
        proba = float(1.0 / (1.0 + np.exp(-self._logit(r))))
        runs = int(r["runs"])
        failures = int(r["failures"])
        if not bool(r["sufficient"]):
            return [
                (
                    f"Only {_plural(runs, 'run')} that were not skipped in the window: too few to judge; "
                    f"the score is the prior {self.prior:.2f}."
                )
            ]
        lines = [f"Estimated probability of being flaky: {proba:.2f} (prior {self.prior:.2f})."]
        if failures == 0:
            lines.append(f"No failures in {_plural(runs, 'run')}.")
            return lines
        lines.append(
            f"Failed {_plural(failures, 'time')} in {runs} runs: failure rate {r['failure_rate']:.1%} "
            f"(credible interval {r['failure_rate_low']:.1%} to {r['failure_rate_high']:.1%})."
        )
        contradictions = int(r["same_commit_contradictions"])
        if contradictions:
            commits = [_short(str(c)) for c in r.get("contradiction_commits", ())]
            listed = f" ({_listing(commits)})" if commits else ""
            lines.append(f"Passed and failed on the same commit {_plural(contradictions, 'time')}{listed}.")
        reruns = int(r["pass_on_rerun"])
        if reruns:
            builds = [f"#{b}" for b in r.get("rerun_pass_builds", ())]
            listed = f" ({_listing(builds)})" if builds else ""
            lines.append(f"Failed then passed on rerun in {_plural(reruns, 'build')}{listed}.")
        scattered = int(r["scattered_episodes"])
        if scattered:
            lines.append(
                f"Failures are scattered: {int(r['short_episodes'])} separate short episodes between passing runs."
            )
        if "runs_z" in r.index and float(r["runs_p"]) < 1.0:
            z, p = float(r["runs_z"]), float(r["runs_p"])
            if z < 0 and p < 0.05:
                reading = "failures are clustered; a contiguous block would suggest a regression"
            elif p < 0.05:
                reading = "passes and failures alternate more than chance"
            else:
                reading = "no clustering beyond chance, as expected of intermittent failures"
            lines.append(f"Runs test over the ordered history: z = {z:.2f}, p = {p:.2g} ({reading}).")
        if int(r["long_episodes"]):
            lines.append(
                f"Failures form a block over {int(r['longest_episode'])} consecutive commits, "
                "which points to a code change rather than flakiness."
            )
        if "flip_rate" in r.index and float(r["entropy"]) > 0:
            lines.append(
                f"Within-commit flip rate {float(r['flip_rate']):.2f} and entropy {float(r['entropy']):.2f} "
                f"(weighted across {int(r['versions'])} commits, newest weighted most)."
            )
        if int(r.get("timeout_failures", 0)):
            lines.append(f"{int(r['timeout_failures'])} of {failures} failures mention a time-out.")
        if bool(r["failing_now"]):
            start = _short(str(r.get("streak_start_commit", "")))
            since = f" since commit {start}" if start else ""
            lines.append(f"Failing now: the latest runs all failed{since}.")
        return lines


class LabelledFlakinessClassifier(ClassifierMixin, BaseEstimator):
    """Calibrated logistic regression on the evidence columns, learned from labelled tests.

    Parameters
    ----------
    C : float, default 1.0
        Inverse regularisation strength of the logistic regression.
    cv : int, default 5
        Folds for the held-out scores (stratified, shuffled with ``random_state``).
    random_state : int or None, default None
        Seed for the fold shuffling; the fit is otherwise deterministic.

    Attributes
    ----------
    model_ : CalibratedClassifierCV
        Imputation, scaling and ``LogisticRegression(class_weight='balanced')``, sigmoid-calibrated.
    cv_proba_ : Series
        Out-of-fold P(flaky) of the labelled tests.
    cv_brier_ : float
        Brier score [3]_ of ``cv_proba_`` (lower is better).
    cv_auc_ : float
        ROC AUC of ``cv_proba_``.
    n_labels_ : int
    classes_ : ndarray
        ``[0, 1]``.

    Notes
    -----
    Only tests with ``sufficient`` data and a label are used for fitting. ``predict_proba`` returns
    P(flaky) as a 1-D array for every row; :func:`score_tests` keeps the rules' prior for rows without
    sufficient data, so the classifier never scores a test it could not have learned anything about.
    """

    def __init__(self, *, C: float = 1.0, cv: int = 5, random_state: int | None = None) -> None:
        self.C = C
        self.cv = cv
        self.random_state = random_state

    def _model(self, seed: int) -> CalibratedClassifierCV:
        pipeline = make_pipeline(
            SimpleImputer(strategy="median", keep_empty_features=True),
            StandardScaler(),
            LogisticRegression(C=self.C, class_weight="balanced", max_iter=2000),
        )
        folds = StratifiedKFold(n_splits=3, shuffle=True, random_state=seed)
        return CalibratedClassifierCV(pipeline, method="sigmoid", cv=folds)

    def fit(self, evidence: pd.DataFrame, labels: pd.Series) -> LabelledFlakinessClassifier:
        """Learn from the labelled tests and store cross-validated scores."""
        X, y = _labelled(evidence, labels)
        if min(int(y.sum()), int((1 - y).sum())) < max(self.cv, 3):
            raise ValueError(TOO_FEW_LABELS)
        rng = np.random.default_rng(self.random_state)
        seed = int(rng.integers(2**31 - 1))
        folds = StratifiedKFold(n_splits=self.cv, shuffle=True, random_state=seed)
        oof = cross_val_predict(self._model(seed), X, y, cv=folds, method="predict_proba")[:, 1]
        self.cv_proba_ = pd.Series(oof, index=X.index, name="cv_proba")
        self.cv_brier_ = float(brier_score_loss(y, oof))
        self.cv_auc_ = float(roc_auc_score(y, oof))
        self.model_ = self._model(seed).fit(X, y)
        self.n_labels_ = int(y.size)
        self.classes_ = np.array([0, 1])
        return self

    def predict_proba(self, evidence: pd.DataFrame) -> np.ndarray:
        """P(flaky) for each evidence row."""
        check_is_fitted(self, "model_")
        return self.model_.predict_proba(_features(evidence))[:, 1]

    def predict(self, evidence: pd.DataFrame) -> np.ndarray:
        """1 where P(flaky) >= 0.5."""
        return (self.predict_proba(evidence) >= 0.5).astype(int)


def _features(evidence: pd.DataFrame) -> pd.DataFrame:
    _check_columns(evidence, FEATURE_COLUMNS)
    return evidence.loc[:, list(FEATURE_COLUMNS)].astype(float)


def _labelled(evidence: pd.DataFrame, labels: pd.Series) -> tuple[pd.DataFrame, np.ndarray]:
    if not isinstance(labels, pd.Series):
        raise TypeError(BAD_LABELS)
    labels = labels.dropna()
    if not labels.isin([0, 1, True, False]).all():
        raise ValueError(BAD_LABELS)
    _check_columns(evidence, (*FEATURE_COLUMNS, "sufficient"))
    usable = evidence.index[evidence["sufficient"].to_numpy(dtype=bool)]
    common = usable.intersection(labels.index).sort_values()
    return _features(evidence.loc[common]), labels.loc[common].astype(int).to_numpy()


@dataclass(frozen=True)
class ScorerChoice:
    """Which scorer :func:`choose_scorer` picked, and why.

    Attributes
    ----------
    source : {'rules', 'classifier'}
    reason : str
        One sentence for the record.
    metric : str
        ``'brier'``: the Brier score [3]_ on held-out labels, lower is better.
    n_labels, n_flaky, n_not_flaky : int
        Labelled tests with sufficient data, and per class.
    rules_brier, classifier_brier, rules_auc, classifier_auc : float
        On the same held-out labels (NaN when not computed).
    """

    source: str
    reason: str
    metric: str
    n_labels: int
    n_flaky: int
    n_not_flaky: int
    rules_brier: float
    classifier_brier: float
    rules_auc: float
    classifier_auc: float


def choose_scorer(
    evidence: pd.DataFrame,
    labels: pd.Series | None,
    *,
    random_state: int = 0,
    min_per_class: int = 20,
    cv: int = 5,
) -> tuple[FlakinessScorer | LabelledFlakinessClassifier, ScorerChoice]:
    """Pick the labelled classifier only when it beats the rules on held-out labels.

    The classifier's out-of-fold probabilities (``cv`` stratified folds) and the rules' probabilities
    (which never saw a label) are compared on the same labelled tests by the Brier score. The classifier
    is used when there are at least ``min_per_class`` labelled tests of each class and its held-out Brier
    score is strictly lower; otherwise the rules are.

    Returns
    -------
    scorer : FlakinessScorer or LabelledFlakinessClassifier
        Fitted.
    choice : ScorerChoice
    """
    rules = FlakinessScorer().fit(evidence)
    nan = float("nan")
    if labels is None or len(labels) == 0:
        return rules, ScorerChoice("rules", "No labels were given.", "brier", 0, 0, 0, nan, nan, nan, nan)
    X, y = _labelled(evidence, labels)
    n_pos, n_neg = int(y.sum()), int(y.size - y.sum())
    if min(n_pos, n_neg) < max(min_per_class, cv):
        reason = (
            f"Too few labels to train on: {n_pos} flaky and {n_neg} not flaky with sufficient data; "
            f"at least {max(min_per_class, cv)} of each are needed."
        )
        return rules, ScorerChoice("rules", reason, "brier", int(y.size), n_pos, n_neg, nan, nan, nan, nan)
    rules_p = rules.predict_proba(evidence.loc[X.index])
    rules_brier = float(brier_score_loss(y, rules_p))
    rules_auc = float(roc_auc_score(y, rules_p))
    classifier = LabelledFlakinessClassifier(cv=cv, random_state=random_state).fit(evidence, labels)
    figures = (
        f"held-out Brier score {classifier.cv_brier_:.4f} for the classifier vs {rules_brier:.4f} "
        f"for the rules on {y.size} labelled tests"
    )
    if classifier.cv_brier_ < rules_brier:
        source, scorer, reason = "classifier", classifier, f"The classifier is better: {figures}."
    else:
        source, scorer, reason = "rules", rules, f"The rules are at least as good: {figures}."
    choice = ScorerChoice(
        source,
        reason,
        "brier",
        int(y.size),
        n_pos,
        n_neg,
        rules_brier,
        classifier.cv_brier_,
        rules_auc,
        classifier.cv_auc_,
    )
    return scorer, choice


def score_tests(
    runs: pd.DataFrame,
    *,
    now: pd.Timestamp,
    labels: pd.Series | None = None,
    config: EvidenceConfig = DEFAULT_EVIDENCE_CONFIG,
    random_state: int = 0,
) -> pd.DataFrame:
    """Evidence, P(flaky), verdict and explanation for every test in ``runs``.

    Parameters
    ----------
    runs : DataFrame
        See :func:`evidence_frame`.
    now : Timestamp
        End of the evidence window.
    labels : Series, optional
        1/True = flaky, indexed by test_id; when given, :func:`choose_scorer` decides whether a classifier
        trained on them replaces the rules. Without labels each test's result depends only on its own runs.
    config : EvidenceConfig
    random_state : int, default 0
        Seed for the classifier's folds.

    Returns
    -------
    DataFrame
        The :func:`evidence_frame` columns plus ``score`` (P(flaky) in [0, 1], never NaN; the rules'
        prior for tests without sufficient data), ``verdict`` (one of :data:`VERDICTS`), ``source``
        (``'rules'`` or ``'classifier'``) and ``explanation`` (list of sentences). ``result.attrs
        ['scorer_choice']`` holds the :class:`ScorerChoice`.
    """
    evidence = evidence_frame(runs, now=now, config=config)
    rules = FlakinessScorer().fit(evidence)
    scorer, choice = choose_scorer(evidence, labels, random_state=random_state)
    score = rules.predict_proba(evidence)
    sufficient = evidence["sufficient"].to_numpy(dtype=bool)
    if choice.source == "classifier" and sufficient.any():
        score[sufficient] = scorer.predict_proba(evidence.loc[sufficient])
    result = evidence.copy()
    result["score"] = score
    result["verdict"] = _verdicts(evidence, score, rules.threshold)
    result["source"] = np.where(sufficient, choice.source, "rules")
    explanations = []
    for (_, row), p, src in zip(evidence.iterrows(), score, result["source"], strict=True):
        lines = rules.explain(row)
        if src == "classifier":
            lines[0] = (
                f"Estimated probability of being flaky: {p:.2f}, from the classifier trained on "
                f"{choice.n_labels} labelled tests (held-out Brier {choice.classifier_brier:.3f} vs "
                f"{choice.rules_brier:.3f} for the rules)."
            )
        explanations.append(lines)
    result["explanation"] = pd.Series(explanations, index=result.index, dtype=object)
    result.attrs["scorer_choice"] = choice
    return result
