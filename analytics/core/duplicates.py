"""Likely duplicate defects: for each defect, the few most similar earlier or later reports.

A defect tracker's triage list is useful only when it is short. Reporting every pair of defects whose
similarity passes one global threshold floods it: defects of one component share their vocabulary, so many
unrelated pairs pass. Duplicate-report retrieval therefore ranks, for each report, the other reports by
similarity and shows the top few [1]_ [2]_. A defect is compared with the defects that existed when it was
filed (those created before it, when a ``created`` column is given; otherwise with all others), and a pair is
suggested when the earlier defect is among the later one's ``top_k`` most similar earlier reports *and* the
cosine similarity reaches ``min_score``.

Text model: TF-IDF over the words of title and description (title counted twice, so the summary outweighs a
long description), English stop words removed, sublinear term frequency, rows L2-normalised; the score is the
cosine similarity of two rows. Tokens are runs of two or more letters: pure numbers and ids that contain
digits (booking references, amounts, addresses, hex values) are not tokens, because two reports of one
problem rarely quote the same number while unrelated reports of one template often differ only in them [1]_.

Pure module: pandas / numpy / scikit-learn in and out; no Django, no I/O.

References
----------
.. [1] P. Runeson, M. Alexandersson and O. Nyholm, "Detection of Duplicate Defect Reports Using Natural
   Language Processing", ICSE 2007, pp. 499-510 (top-list of candidates per report, tokenisation and
   stop words; recall measured on the top-N list).
.. [2] C. Sun, D. Lo, X. Wang, J. Jiang and S.-C. Khoo, "A Discriminative Model Approach for Accurate
   Duplicate Bug Report Retrieval", ICSE 2010, pp. 45-54 (candidate lists ranked per report).

Examples
--------
>>> import pandas as pd
>>> frame = pd.DataFrame({
...     "key": ["BW-1", "BW-2", "BW-3"],
...     "title": ["Berth map blank after rotating the phone", "Refund one cent short",
...               "Berth map goes blank when the phone is rotated"],
...     "description": ["", "", ""],
... })
>>> duplicate_candidates(frame, min_score=0.3)[["key_a", "key_b"]].values.tolist()
[['BW-1', 'BW-3']]
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from scipy import sparse
from sklearn.feature_extraction.text import TfidfVectorizer
from sklearn.metrics.pairwise import cosine_similarity

__all__ = [
    "BAD_CREATED",
    "BAD_MIN_SCORE",
    "BAD_TOP_K",
    "DEFAULT_MIN_SCORE",
    "DEFAULT_TOP_K",
    "DUPLICATE_KEY",
    "MISSING_COLUMNS",
    "defect_vectoriser",
    "duplicate_candidates",
]

#: Smallest cosine similarity of a suggested pair. Observed on the demo export (400 defects, seeds 3, 5,
#: 7 and 11): planted re-reports score 0.46-0.87 (all but two at least 0.52), while the nearest earlier
#: defect of an unrelated defect has a 99th percentile of 0.49-0.53; the hand-written re-reports of
#: tests/analytics/test_duplicates_service.py score 0.51-0.78 against at most 0.18 for unrelated pairs.
DEFAULT_MIN_SCORE = 0.52
#: How many of a defect's most similar earlier defects may form a suggested pair (a short list per
#: report, as in [1]; one keeps the triage list at most one suggestion per imported defect).
DEFAULT_TOP_K = 1

MISSING_COLUMNS = "defects frame lacks column(s): {columns}"
BAD_MIN_SCORE = "min_score must be a number in [0, 1], got {value!r}"
BAD_TOP_K = "top_k must be a positive integer, got {value!r}"
DUPLICATE_KEY = "defect key {key!r} appears more than once"
BAD_CREATED = "defect {key!r} has a missing or unreadable 'created' time"

#: Two or more letters; digits, underscores and punctuation end a token, and a run of letters glued to a
#: digit (``BK2026``, ``0x1F``) is no token at all.
TOKEN_PATTERN = r"(?u)(?<![\w])[^\W\d_]{2,}(?![\w])"
_OUTPUT = {"key_a": object, "key_b": object, "score": np.float64}
_BLOCK_CELLS = 4_000_000  # similarity cells computed at once (rows x defects)


def defect_vectoriser() -> TfidfVectorizer:
    """The unfitted TF-IDF vectoriser of :func:`duplicate_candidates` (see the module notes)."""
    return TfidfVectorizer(
        lowercase=True,
        token_pattern=TOKEN_PATTERN,
        stop_words="english",
        sublinear_tf=True,
        norm="l2",
    )


def defect_texts(defects: pd.DataFrame) -> tuple[np.ndarray, list[str]]:
    """Keys and the text compared for each defect (title twice, then description)."""
    missing = [c for c in ("key", "title", "description") if c not in defects.columns]
    if missing:
        raise ValueError(MISSING_COLUMNS.format(columns=", ".join(missing)))
    keys = defects["key"].astype(str).to_numpy()
    seen: set[str] = set()
    for key in keys:
        if key in seen:
            raise ValueError(DUPLICATE_KEY.format(key=key))
        seen.add(key)
    titles = defects["title"].fillna("").astype(str)
    descriptions = defects["description"].fillna("").astype(str)
    return keys, [f"{t}\n{t}\n{d}" for t, d in zip(titles, descriptions, strict=True)]


def _filing_order(defects: pd.DataFrame, keys: np.ndarray) -> np.ndarray:
    """Rank of each defect by (created, key); by key alone when there is no ``created`` column."""
    if "created" not in defects.columns:
        order = np.empty(len(keys), dtype=np.int64)
        order[np.argsort(keys, kind="stable")] = np.arange(len(keys))
        return order
    created = pd.to_datetime(defects["created"], utc=True, errors="coerce")
    if created.isna().any():
        bad = keys[created.isna().to_numpy()][0]
        raise ValueError(BAD_CREATED.format(key=bad))
    frame = pd.DataFrame({"created": created.to_numpy(), "key": keys})
    ranked = frame.sort_values(["created", "key"], kind="stable").index.to_numpy()
    order = np.empty(len(keys), dtype=np.int64)
    order[ranked] = np.arange(len(keys))
    return order


def duplicate_candidates(
    defects: pd.DataFrame,
    *,
    min_score: float = DEFAULT_MIN_SCORE,
    top_k: int = DEFAULT_TOP_K,
) -> pd.DataFrame:
    """Pairs of defects that are likely reports of the same problem, for a person to triage.

    Parameters
    ----------
    defects : DataFrame with columns ``key``, ``title``, ``description``, optionally ``created``
        Keys must be unique. With ``created`` (datetimes, no missing values) each defect is compared with
        the defects created before it (equal times: the smaller key first), as at its import; without it,
        with every other defect. Not modified.
    min_score : float in [0, 1], default DEFAULT_MIN_SCORE
        Smallest cosine similarity of a suggested pair.
    top_k : int >= 1, default DEFAULT_TOP_K
        A pair is suggested when the earlier defect is among the later one's ``top_k`` most similar
        earlier defects (without ``created``: when either is among the other's ``top_k`` most similar)
        and its score reaches ``min_score``. Exactly ``top_k`` per defect: a tie at the k-th score goes
        to the earlier-filed defect (without ``created``: the smaller key).

    Returns
    -------
    pandas.DataFrame
        Columns ``key_a``, ``key_b`` (``key_a < key_b``, each pair once) and ``score``, by score
        descending, then keys. Similarities are computed in row blocks, so memory stays linear in the
        number of defects.
    """
    if isinstance(min_score, bool) or not isinstance(min_score, (int, float)) or not 0 <= min_score <= 1:
        raise ValueError(BAD_MIN_SCORE.format(value=min_score))
    if isinstance(top_k, bool) or not isinstance(top_k, (int, np.integer)) or top_k < 1:
        raise ValueError(BAD_TOP_K.format(value=top_k))
    keys, texts = defect_texts(defects)
    empty = pd.DataFrame({name: pd.Series(dtype=dtype) for name, dtype in _OUTPUT.items()})
    if len(keys) < 2:
        return empty
    try:
        matrix = sparse.csr_matrix(defect_vectoriser().fit_transform(texts))
    except ValueError:  # no text has a single word token: nothing can be compared
        return empty
    n = matrix.shape[0]
    order = _filing_order(defects, keys)
    timed = "created" in defects.columns
    # columns in filing order, so that a tie at the k-th score goes to the earlier-filed defect
    by_filing = np.argsort(order, kind="stable")
    matrix = matrix[by_filing]
    block = max(1, _BLOCK_CELLS // n)
    pairs: dict[tuple[int, int], float] = {}
    k = min(top_k, n - 1)
    for start in range(0, n, block):
        stop = min(n, start + block)
        sims = cosine_similarity(matrix[start:stop], matrix, dense_output=True)
        rows = np.arange(stop - start)
        if timed:  # only the defects that existed when this one was filed
            sims[np.arange(n)[None, :] >= (rows + start)[:, None]] = -1.0
        else:
            sims[rows, rows + start] = -1.0  # a defect is not its own duplicate
        # the k-th largest score of each row bounds its top list; among the scores at least that high
        # (more than k only on ties) the first k by score, then filing order, are kept
        kth = -np.partition(-sims, k - 1, axis=1)[:, k - 1]
        floor = np.maximum(kth, min_score)
        r_idx, c_idx = np.nonzero((sims >= floor[:, None]) & (sims > 0))
        if r_idx.size == 0:
            continue
        scores = sims[r_idx, c_idx]
        ranked = np.lexsort((c_idx, -scores, r_idx))
        r_idx, c_idx, scores = r_idx[ranked], c_idx[ranked], scores[ranked]
        first = np.r_[True, r_idx[1:] != r_idx[:-1]]
        rank = np.arange(len(r_idx)) - np.maximum.accumulate(np.where(first, np.arange(len(r_idx)), 0))
        for r, c, score in zip(r_idx[rank < k], c_idx[rank < k], scores[rank < k], strict=True):
            a, b = int(by_filing[r + start]), int(by_filing[c])
            pair = (a, b) if keys[a] < keys[b] else (b, a)
            pairs[pair] = max(float(score), pairs.get(pair, float(score)))
    if not pairs:
        return empty
    result = pd.DataFrame(
        [(keys[a], keys[b], s) for (a, b), s in pairs.items()], columns=list(_OUTPUT)
    ).astype(_OUTPUT)
    return result.sort_values(
        ["score", "key_a", "key_b"], ascending=[False, True, True], kind="stable"
    ).reset_index(drop=True)
