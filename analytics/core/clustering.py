"""Failure-cause clusters, stable cluster ids, and defect matching.

Signatures (see :mod:`analytics.core.signatures`) already merge occurrences of one cause
whose texts are identical. This module groups signatures whose texts are *similar* (the
same cause reached through different callers, or a message with a varying word) into
clusters, keeps cluster ids stable from one fit to the next, assigns new signatures to
existing clusters, and links clusters to defects.

Pure module: pandas / numpy / scikit-learn in and out; no Django, no I/O.

Pins: a person's corrections
----------------------------
A person's merges and splits are stored as one mapping ``pinned: {signature key: cluster id}``
that :meth:`FailureClusterer.fit` must respect:

* all present keys pinned to the same id end up in one cluster, and that cluster has that id;
* keys pinned to different ids never share a cluster;
* unpinned keys are clustered freely and may join a pinned cluster.

To merge clusters 3 and 7, pin every key of both to 3 (:func:`pin_merge`). To split keys out
of cluster 3, pin them to a new id and pin the keys that stay to 3 (:func:`pin_split`).
Pins for keys absent from the data are ignored, so the mapping can be kept as is.
"""

from __future__ import annotations

import re
from collections.abc import Iterable, Mapping

import numpy as np
import pandas as pd
from scipy import sparse
from scipy.optimize import linear_sum_assignment
from scipy.sparse.csgraph import connected_components
from sklearn.base import BaseEstimator
from sklearn.cluster import AgglomerativeClustering
from sklearn.feature_extraction.text import ENGLISH_STOP_WORDS, TfidfVectorizer
from sklearn.pipeline import FeatureUnion, Pipeline
from sklearn.preprocessing import Normalizer
from sklearn.utils.validation import check_is_fitted

from analytics.core.signatures import normalise_message

__all__ = [
    "DEFAULT_DISTANCE_THRESHOLD",
    "FailureClusterer",
    "build_vectoriser",
    "match_defects",
    "pin_merge",
    "pin_split",
]

#: Cosine distance under which signatures are joined (average linkage). The middle of the range
#: 0.4-0.6 where the ground-truth sets of the tests all reach ARI 1.0 (ARI falls from 0.7 up).
DEFAULT_DISTANCE_THRESHOLD = 0.5
#: Cosine similarity from which two defects are reported as likely duplicates. On the test
#: export, planted re-reports score 0.36-0.69 and the closest distinct defects at most 0.24.
#: Distance standing for "must never be joined" (cannot-link) in the precomputed matrix.
_APART = 1e9

MISSING_COLUMNS = "{frame} frame lacks column(s): {columns}"
EMPTY_TEXT = "signature {key!r} has an empty text"
CONFLICTING_TEXTS = "signature key {key!r} appears with different texts"
BAD_COUNT = "signature counts must be positive integers; row for key {key!r} has count {count}"
BAD_LINKAGE = "linkage must be 'average' or 'complete', got {linkage!r}"
BAD_THRESHOLD = "distance_threshold must be in (0, 2), got {threshold!r}"
BAD_MAX_FEATURES = "max_features must be a positive integer or None, got {max_features!r}"
BAD_PREVIOUS_ID = "previous/pinned cluster ids must be non-negative integers; key {key!r} has {value!r}"
BAD_MIN_SCORE = "{name} must be in [0, 1], got {value!r}"
BAD_TOP_K = "top_k must be a positive integer, got {top_k!r}"
UNKNOWN_CLUSTER = "cluster id {cluster_id!r} is not in the labels"

_TOKEN_PATTERN = r"(?u)<\w+>|[A-Za-z_$][\w$]*"
# File extensions and generated frame names say nothing about a cause in a label.
_LABEL_NOISE = frozenset(
    {"py", "java", "kt", "scala", "js", "mjs", "cjs", "ts", "cs", "lambda", "anonymous", "via"}
) | ENGLISH_STOP_WORDS  # labels name the cause: "because", "but", "cannot" say nothing about it


def _label_term_useless(term: str, skip: frozenset[str] | set[str]) -> bool:
    """Terms that would not help a person recognise the cause in a label."""
    return " " in term or term.startswith("<") or term in skip


def _names_a_test(term: str) -> bool:
    """Test classes and methods say where it failed rather than why: used only when nothing better is left."""
    return term.endswith(("test", "tests")) or term.startswith("test")


def build_vectoriser(*, max_features: int | None = 20_000) -> Pipeline:
    """TF-IDF over word 1–2-grams and character 3–5-grams, rows L2-normalised.

    Parameters
    ----------
    max_features : int or None, default 20000
        Vocabulary cap for each of the two vectorisers.

    Returns
    -------
    sklearn.pipeline.Pipeline
        Unfitted; picklable (no lambdas).

    References
    ----------
    .. [1] K. Spärck Jones, "A statistical interpretation of term specificity and its
       application in retrieval", Journal of Documentation 28(1), 1972.
    """
    words = TfidfVectorizer(
        analyzer="word",
        token_pattern=_TOKEN_PATTERN,
        ngram_range=(1, 2),
        sublinear_tf=True,
        max_features=max_features,
        dtype=np.float64,
    )
    chars = TfidfVectorizer(
        analyzer="char_wb",
        ngram_range=(3, 5),
        sublinear_tf=True,
        max_features=max_features,
        dtype=np.float64,
    )
    return Pipeline(
        [
            ("union", FeatureUnion([("words", words), ("chars", chars)])),
            ("norm", Normalizer()),
        ]
    )


def _require_columns(frame: pd.DataFrame, columns: Iterable[str], name: str) -> None:
    if not isinstance(frame, pd.DataFrame):
        raise TypeError(f"{name} must be a pandas DataFrame, got {type(frame).__name__}")
    missing = [column for column in columns if column not in frame.columns]
    if missing:
        raise ValueError(MISSING_COLUMNS.format(frame=name, columns=", ".join(missing)))


def _distinct_signatures(signatures: pd.DataFrame) -> pd.DataFrame:
    """One row per key (sorted by key) with text and summed count; validates the input."""
    _require_columns(signatures, ("key", "text"), "signatures")
    frame = signatures[["key", "text"]].copy()
    frame["key"] = frame["key"].astype(str)
    frame["text"] = frame["text"].fillna("").astype(str)
    if "count" in signatures.columns:
        counts = pd.to_numeric(signatures["count"], errors="coerce")
        bad = counts.isna() | (counts <= 0) | (counts != counts.round())
        if bad.any():
            position = int(np.flatnonzero(bad.to_numpy())[0])
            raise ValueError(
                BAD_COUNT.format(
                    key=frame["key"].iloc[position],
                    count=signatures["count"].iloc[position],
                )
            )
        frame["count"] = counts.astype(np.int64).to_numpy()
    else:
        frame["count"] = 1
    empty = frame["text"].str.strip() == ""
    if empty.any():
        raise ValueError(EMPTY_TEXT.format(key=frame.loc[empty, "key"].iloc[0]))
    grouped = frame.groupby("key", sort=True).agg(
        text=("text", "first"), n_texts=("text", "nunique"), count=("count", "sum")
    )
    conflicting = grouped.index[grouped["n_texts"] > 1]
    if len(conflicting):
        raise ValueError(CONFLICTING_TEXTS.format(key=conflicting[0]))
    return grouped[["text", "count"]]


def _check_ids(mapping: Mapping[str, int] | None) -> dict[str, int]:
    checked: dict[str, int] = {}
    for key, value in (mapping or {}).items():
        if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < 0:
            raise ValueError(BAD_PREVIOUS_ID.format(key=key, value=value))
        checked[str(key)] = int(value)
    return checked


def _exception_of(text: str) -> str:
    """Exception type at the head of a signature text (``"KeyError: ..."`` -> ``KeyError``)."""
    match = re.match(r"^\s*([^\s:@|]+)", text)
    return match.group(1) if match else ""


class FailureClusterer(BaseEstimator):
    """Cluster failure signatures into causes with stable ids.

    Distinct signature texts are embedded with TF-IDF over word and character n-grams
    (:func:`build_vectoriser`) and grouped by agglomerative clustering on cosine distance,
    cut at ``distance_threshold``, so the number of clusters is not fixed in advance.

    Parameters
    ----------
    distance_threshold : float, default DEFAULT_DISTANCE_THRESHOLD
        Cosine distance at or above which clusters are not merged; also the largest distance
        to a centroid at which :meth:`assign` accepts a cluster.
    linkage : {'average', 'complete'}, default 'average'
        Linkage criterion of the agglomerative clustering.
    max_features : int or None, default 20000
        Vocabulary cap of each TF-IDF vectoriser.
    random_state : None, int or numpy.random.Generator, default None
        Accepted for the estimator interface; the method is deterministic and draws no
        random numbers.

    Attributes
    ----------
    vectoriser_ : sklearn.pipeline.Pipeline
        The fitted TF-IDF pipeline.
    labels_ : pandas.Series
        Cluster id per signature key (index ``key``, name ``cluster_id``).
    signatures_ : pandas.DataFrame
        Distinct signatures seen by ``fit``: index ``key``, columns ``text``, ``count``, ``cluster_id``.
    cluster_ids_ : numpy.ndarray
        Cluster ids, in the row order of ``centroids_``.
    centroids_ : scipy.sparse.csr_matrix
        L2-normalised mean TF-IDF vector of each cluster's distinct signatures.
    n_clusters_ : int
        Number of clusters.

    Notes
    -----
    Identical keys are collapsed before anything else: the vectoriser and the clustering see
    each distinct signature once, so cost grows with the number of distinct signatures (the
    distance matrix is quadratic in it), not with the number of failures. Counts weigh
    only the id mapping, the representative and the size.

    Ids: without ``previous``, clusters are numbered 0, 1, ... by decreasing size (sum of
    counts), ties by smallest key, so refitting the same data gives the same ids. With
    ``previous`` (key -> id of the last fit), new clusters are matched one-to-one to old ids
    by maximum count-weighted overlap (Hungarian algorithm, [2]_); unmatched clusters get
    ids above every old and pinned id. If new evidence merges two old clusters, the larger
    overlap keeps its id; if it splits one, the larger part keeps it.

    References
    ----------
    .. [1] F. Murtagh and P. Contreras, "Algorithms for hierarchical clustering: an overview",
       WIREs Data Mining and Knowledge Discovery 2(1), 2012.
    .. [2] H. W. Kuhn, "The Hungarian method for the assignment problem", Naval Research
       Logistics Quarterly 2, 1955.

    Examples
    --------
    >>> import pandas as pd
    >>> frame = pd.DataFrame({"key": ["a", "b", "c"],
    ...                       "text": ["KeyError: <str> @ app.py:load", "KeyError: <str> @ app.py:load < app.py:run",
    ...                                "ZeroDivisionError: division by zero @ calc.py:ratio"]})
    >>> FailureClusterer().fit(frame).labels_.to_dict()
    {'a': 0, 'b': 0, 'c': 1}
    """

    def __init__(
        self,
        *,
        distance_threshold: float = DEFAULT_DISTANCE_THRESHOLD,
        linkage: str = "average",
        max_features: int | None = 20_000,
        random_state: int | np.random.Generator | None = None,
    ) -> None:
        self.distance_threshold = distance_threshold
        self.linkage = linkage
        self.max_features = max_features
        self.random_state = random_state

    # -- validation -----------------------------------------------------------------------------

    def _check_params(self) -> None:
        if self.linkage not in ("average", "complete"):
            raise ValueError(BAD_LINKAGE.format(linkage=self.linkage))
        threshold = self.distance_threshold
        if isinstance(threshold, bool) or not isinstance(threshold, (int, float)) or not 0 < threshold < 2:
            raise ValueError(BAD_THRESHOLD.format(threshold=threshold))
        max_features = self.max_features
        if max_features is not None and (
            isinstance(max_features, bool)
            or not isinstance(max_features, (int, np.integer))
            or max_features < 1
        ):
            raise ValueError(BAD_MAX_FEATURES.format(max_features=max_features))

    # -- fit ------------------------------------------------------------------------------------

    def fit(
        self,
        signatures: pd.DataFrame,
        y: None = None,
        *,
        previous: Mapping[str, int] | None = None,
        pinned: Mapping[str, int] | None = None,
    ) -> FailureClusterer:
        """Cluster the signatures.

        Parameters
        ----------
        signatures : DataFrame with columns ``key``, ``text`` and optionally ``count``
            One row per signature or per failure; rows with the same key are summed.
        y : None
            Ignored.
        previous : mapping key -> cluster id, optional
            Labels of the last fit; used to keep ids stable.
        pinned : mapping key -> cluster id, optional
            A person's constraints (see the module docstring).

        Returns
        -------
        self
        """
        self._check_params()
        previous_ids = _check_ids(previous)
        pinned_ids = _check_ids(pinned)
        distinct = _distinct_signatures(signatures)
        keys = distinct.index.to_numpy()
        texts = distinct["text"].tolist()
        counts = distinct["count"].to_numpy()

        vectoriser = build_vectoriser(max_features=self.max_features)
        matrix = sparse.csr_matrix(vectoriser.fit_transform(texts))
        raw = self._cluster(matrix, keys, pinned_ids)
        ids = self._stable_ids(raw, keys, counts, previous_ids, pinned_ids)

        self.vectoriser_ = vectoriser
        self.labels_ = pd.Series(ids, index=pd.Index(keys, name="key"), name="cluster_id", dtype=np.int64)
        self.signatures_ = distinct.assign(cluster_id=ids)
        self.cluster_ids_, self.centroids_ = _centroids(matrix, ids)
        self.n_clusters_ = len(self.cluster_ids_)
        return self

    def _cluster(self, matrix: sparse.csr_matrix, keys: np.ndarray, pinned: dict[str, int]) -> np.ndarray:
        """Average/complete-linkage clusters cut at the threshold, computed per connected component.

        A merge needs the (average or largest) distance between two clusters below the threshold, so at least
        one pair across them is that close: no cluster spans two components of the graph "distance below the
        threshold". Clustering each component on its own dense block gives the same partition as one
        clustering of the full matrix (checked against scikit-learn on the full matrix in the tests) at the
        cost of the largest component squared instead of every signature squared. With a threshold above 1,
        unrelated signatures (distance 1) are close too: one component, the full matrix.
        """
        n = matrix.shape[0]
        if n == 1:
            return np.zeros(1, dtype=np.int64)
        threshold = float(self.distance_threshold)
        pin = np.array([pinned.get(key, -1) for key in keys])
        similarity = sparse.csr_matrix(matrix @ matrix.T)
        if threshold > 1.0:
            component = np.zeros(n, dtype=np.int64)
        else:
            # A hair below the cut, so that rounding never drops a pair the full matrix would join.
            graph = sparse.coo_matrix(similarity > 1.0 - threshold - 1e-9)
            rows, cols = graph.row, graph.col
            apart = (pin[rows] >= 0) & (pin[cols] >= 0) & (pin[rows] != pin[cols])  # cannot-link pins
            rows, cols = rows[~apart], cols[~apart]
            pinned_rows = np.flatnonzero(pin >= 0)  # keys pinned together are linked (a chain suffices)
            order = pinned_rows[np.argsort(pin[pinned_rows], kind="stable")]
            chain = pin[order[1:]] == pin[order[:-1]]
            rows = np.concatenate([rows, order[:-1][chain]])
            cols = np.concatenate([cols, order[1:][chain]])
            linked = sparse.coo_matrix((np.ones(len(rows)), (rows, cols)), shape=(n, n))
            _, component = connected_components(linked, directed=False)
        labels = np.empty(n, dtype=np.int64)
        next_label = 0
        for members in _groups(component):
            if len(members) == 1:
                labels[members] = next_label
                next_label += 1
                continue
            block = self._linkage_labels(similarity[members][:, members], pin[members])
            labels[members] = block + next_label
            next_label += int(block.max()) + 1
        return _enforce_pins(labels, pin)

    def _linkage_labels(self, similarity: sparse.csr_matrix, pin: np.ndarray) -> np.ndarray:
        distance = np.clip(1.0 - similarity.toarray(), 0.0, 2.0)
        np.fill_diagonal(distance, 0.0)
        pinned_rows = np.flatnonzero(pin >= 0)
        if len(pinned_rows):
            sub = pin[pinned_rows]
            same = sub[:, None] == sub[None, :]
            distance[np.ix_(pinned_rows, pinned_rows)] = np.where(same, 0.0, _APART)
        model = AgglomerativeClustering(
            n_clusters=None,
            metric="precomputed",
            linkage=self.linkage,
            distance_threshold=float(self.distance_threshold),
        )
        return model.fit_predict(distance).astype(np.int64)

    @staticmethod
    def _stable_ids(
        raw: np.ndarray,
        keys: np.ndarray,
        counts: np.ndarray,
        previous: dict[str, int],
        pinned: dict[str, int],
    ) -> np.ndarray:
        clusters = np.unique(raw)
        final = np.full(len(raw), -1, dtype=np.int64)
        assigned: dict[int, int] = {}
        # 1. Clusters holding pinned keys take the pinned id.
        for cluster in clusters:
            pins = {pinned[key] for key in keys[raw == cluster] if key in pinned}
            if pins:
                (assigned[int(cluster)],) = pins
        taken = set(assigned.values()) | set(pinned.values())
        free = [int(c) for c in clusters if int(c) not in assigned]
        # 2. The others inherit old ids by count-weighted overlap (one-to-one).
        old_ids = sorted({value for value in previous.values() if value not in taken})
        if free and old_ids:
            column = {old: j for j, old in enumerate(old_ids)}
            overlap = np.zeros((len(free), len(old_ids)))
            row = {cluster: i for i, cluster in enumerate(free)}
            for cluster, key, count in zip(raw, keys, counts, strict=True):
                old = previous.get(key)
                if int(cluster) in row and old in column:
                    overlap[row[int(cluster)], column[old]] += count
            rows, cols = linear_sum_assignment(overlap, maximize=True)
            for i, j in zip(rows, cols, strict=True):
                if overlap[i, j] > 0:
                    assigned[free[i]] = old_ids[j]
        # 3. Remaining clusters get fresh ids, biggest first, above every known id.
        next_id = max([*previous.values(), *pinned.values(), *assigned.values(), -1]) + 1
        rest = [c for c in free if c not in assigned]
        sizes = {c: (-int(counts[raw == c].sum()), str(min(keys[raw == c]))) for c in rest}
        for cluster in sorted(rest, key=sizes.__getitem__):
            assigned[cluster] = next_id
            next_id += 1
        for cluster, cluster_id in assigned.items():
            final[raw == cluster] = cluster_id
        return final

    # -- assign ---------------------------------------------------------------------------------

    def assign(self, signatures: pd.DataFrame) -> pd.Series:
        """Cluster id of each signature, without refitting.

        Known keys keep their label. A new key goes to the cluster whose centroid is nearest
        in cosine distance if that distance is below ``distance_threshold``, else to ``-1``
        (the caller starts a new cluster). Only the new signatures are vectorised.

        Parameters
        ----------
        signatures : DataFrame with columns ``key`` and ``text``

        Returns
        -------
        pandas.Series
            Cluster id per distinct key, in order of first appearance.
        """
        check_is_fitted(self, "labels_")
        _require_columns(signatures, ("key", "text"), "signatures")
        frame = signatures[["key", "text"]].astype({"key": str}).drop_duplicates("key")
        result = frame["key"].map(self.labels_).fillna(-1).astype(np.int64).to_numpy().copy()
        new = ~frame["key"].isin(self.labels_.index).to_numpy()
        if new.any():
            texts = frame["text"].fillna("").astype(str).to_numpy()[new]
            vectors = sparse.csr_matrix(self.vectoriser_.transform(list(texts)))
            similarity = (vectors @ self.centroids_.T).toarray()
            best = similarity.argmax(axis=1)
            distance = 1.0 - similarity[np.arange(len(best)), best]
            result[new] = np.where(distance < self.distance_threshold, self.cluster_ids_[best], -1)
        return pd.Series(
            result,
            index=pd.Index(frame["key"].to_numpy(), name="key"),
            name="cluster_id",
        )

    # -- describe -------------------------------------------------------------------------------

    def describe(self, signatures: pd.DataFrame | None = None, *, n_terms: int = 3) -> pd.DataFrame:
        """One row per cluster: id, label, representative key, size and number of signatures.

        Parameters
        ----------
        signatures : DataFrame with ``key``, ``text`` and optionally ``count``, optional
            Defaults to the signatures seen by ``fit``. Keys unknown to the fit are placed
            with :meth:`assign`; those left at ``-1`` are not described.
        n_terms : int, default 3
            Number of TF-IDF terms in the label.

        Returns
        -------
        pandas.DataFrame
            Columns ``cluster_id``, ``label`` (most frequent exception type and the terms
            with most weight in the cluster centroid), ``representative_key`` (most frequent
            signature, ties broken by closeness to the centroid, then key), ``size`` (sum of
            counts) and ``n_signatures``, sorted by decreasing size then id.
        """
        check_is_fitted(self, "labels_")
        if signatures is None:
            distinct = self.signatures_[["text", "count"]]
        else:
            distinct = _distinct_signatures(signatures)
        ids = self.assign(distinct.reset_index()[["key", "text"]])
        frame = distinct.assign(cluster_id=ids.reindex(distinct.index).to_numpy())
        frame = frame[frame["cluster_id"] >= 0]
        if frame.empty:
            return pd.DataFrame(
                {
                    "cluster_id": pd.Series(dtype=np.int64),
                    "label": pd.Series(dtype=object),
                    "representative_key": pd.Series(dtype=object),
                    "size": pd.Series(dtype=np.int64),
                    "n_signatures": pd.Series(dtype=np.int64),
                }
            )
        vectors = sparse.csr_matrix(self.vectoriser_.transform(frame["text"].tolist()))
        words = self.vectoriser_.named_steps["union"].transformer_list[0][1]
        vocabulary = words.get_feature_names_out()
        n_words = len(vocabulary)
        row_of = {int(cluster_id): row for row, cluster_id in enumerate(self.cluster_ids_)}
        rows = []
        for cluster_id, members in frame.groupby("cluster_id", sort=True):
            positions = np.flatnonzero(frame["cluster_id"].to_numpy() == cluster_id)
            centroid = self.centroids_[row_of[int(cluster_id)]]
            closeness = np.asarray((vectors[positions] @ centroid.T).toarray()).ravel()
            order = sorted(
                range(len(members)),
                key=lambda i: (
                    -int(members["count"].iloc[i]),
                    -closeness[i],
                    str(members.index[i]),
                ),
            )
            exceptions = members.assign(exception=members["text"].map(_exception_of))
            exception = (
                exceptions.groupby("exception")["count"]
                .sum()
                .sort_index()
                .sort_values(ascending=False, kind="stable")
            ).index[0]
            weights = centroid[:, :n_words].toarray().ravel()
            skip = {part.lower() for part in re.split(r"[.$]", exception)} | _LABEL_NOISE
            ranked = [
                vocabulary[index]
                for index in np.argsort(-weights, kind="stable")
                if weights[index] > 0 and not _label_term_useless(vocabulary[index], skip)
            ]
            # Cause words first; test names only fill the label when the cause has too few words of its own
            # (e.g. a KeyError whose quoted key was normalised away), so such clusters stay tellable apart.
            terms = [t for t in ranked if not _names_a_test(t)][:n_terms]
            terms += [t for t in ranked if _names_a_test(t)][: n_terms - len(terms)]
            label = exception + (": " + ", ".join(terms) if terms else "")
            rows.append(
                {
                    "cluster_id": int(cluster_id),
                    "label": label,
                    "representative_key": str(members.index[order[0]]),
                    "size": int(members["count"].sum()),
                    "n_signatures": len(members),
                }
            )
        result = pd.DataFrame(rows)
        return result.sort_values(["size", "cluster_id"], ascending=[False, True], kind="stable").reset_index(
            drop=True
        )


def _groups(component: np.ndarray) -> list[np.ndarray]:
    """Row indices of each component, in order of first appearance."""
    order = np.argsort(component, kind="stable")
    bounds = np.flatnonzero(np.diff(component[order])) + 1
    groups = np.split(order, bounds)
    return sorted(groups, key=lambda g: int(g[0]))


def _enforce_pins(labels: np.ndarray, pin: np.ndarray) -> np.ndarray:
    """Make every pinned group one cluster of its own, whatever the clustering did.

    The distance matrix already encodes the pins, so this normally changes nothing; it makes
    the guarantee independent of tie-breaking. Each pin value gets a fresh label for its keys;
    unpinned keys follow the pin their cluster holds (if exactly one) or keep their cluster.
    """
    result = labels.copy()
    fresh = {int(value): int(labels.max()) + 1 + i for i, value in enumerate(np.unique(pin[pin >= 0]))}
    for cluster in np.unique(labels):
        inside = labels == cluster
        values = np.unique(pin[inside & (pin >= 0)])
        if len(values) == 1:
            result[inside & (pin < 0)] = fresh[int(values[0])]
    for value, label in fresh.items():
        result[pin == value] = label
    return result


def _centroids(matrix: sparse.csr_matrix, ids: np.ndarray) -> tuple[np.ndarray, sparse.csr_matrix]:
    cluster_ids, inverse = np.unique(ids, return_inverse=True)
    membership = sparse.csr_matrix(
        (np.ones(len(ids)), (inverse, np.arange(len(ids)))),
        shape=(len(cluster_ids), len(ids)),
    )
    sums = sparse.csr_matrix(membership @ matrix)
    norms = np.sqrt(np.asarray(sums.multiply(sums).sum(axis=1)).ravel())
    norms[norms == 0] = 1.0
    centroids = sparse.csr_matrix(sparse.diags(1.0 / norms) @ sums)
    return cluster_ids.astype(np.int64), centroids


# -- pins ---------------------------------------------------------------------------------------


def pin_merge(
    labels: Mapping[str, int],
    cluster_ids: Iterable[int],
    *,
    pinned: Mapping[str, int] | None = None,
) -> dict[str, int]:
    """Pins that force the given clusters into one, keeping the smallest id.

    Parameters
    ----------
    labels : mapping key -> cluster id
        Current labels (``FailureClusterer.labels_``).
    cluster_ids : iterable of int
        Clusters to merge.
    pinned : mapping key -> cluster id, optional
        Existing pins; returned updated (the input is not modified).
    """
    targets = sorted({int(cluster_id) for cluster_id in cluster_ids})
    known = {int(value) for value in labels.values()}
    for cluster_id in targets:
        if cluster_id not in known:
            raise ValueError(UNKNOWN_CLUSTER.format(cluster_id=cluster_id))
    result = dict(pinned or {})
    if not targets:
        return result
    into = targets[0]
    for key, value in labels.items():
        if int(value) in targets:
            result[str(key)] = into
    for key, value in list(result.items()):
        if value in targets:
            result[key] = into
    return result


def pin_split(
    labels: Mapping[str, int],
    keys: Iterable[str],
    *,
    new_id: int | None = None,
    pinned: Mapping[str, int] | None = None,
) -> dict[str, int]:
    """Pins that move ``keys`` out of their cluster into a cluster of their own.

    The moved keys are pinned to ``new_id`` (default: one above every id in ``labels`` and
    ``pinned``); the keys that stay in each cluster they left are pinned to that cluster.
    """
    moved = [str(key) for key in keys]
    result = dict(pinned or {})
    labels = {str(key): int(value) for key, value in labels.items()}
    if new_id is None:
        new_id = max([*labels.values(), *result.values(), -1]) + 1
    left = {labels[key] for key in moved if key in labels}
    for key, value in labels.items():
        if value in left and key not in moved:
            result[key] = value
    for key in moved:
        result[key] = int(new_id)
    return result


# -- defects ------------------------------------------------------------------------------------


def _defect_texts(defects: pd.DataFrame, name: str) -> tuple[np.ndarray, list[str]]:
    _require_columns(defects, ("key", "title", "description"), name)
    titles = defects["title"].fillna("").astype(str)
    descriptions = defects["description"].fillna("").astype(str)
    # The title is the defect's summary: counted twice so it outweighs a long description.
    texts = [normalise_message(f"{t}\n{t}\n{d}") for t, d in zip(titles, descriptions, strict=True)]
    return defects["key"].astype(str).to_numpy(), texts


def _check_score(name: str, value: float) -> None:
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not 0 <= value <= 1:
        raise ValueError(BAD_MIN_SCORE.format(name=name, value=value))


def match_defects(
    cluster_texts: Mapping[int, str],
    defects: pd.DataFrame,
    *,
    vectoriser: Pipeline | None = None,
    min_score: float = 0.2,
    top_k: int = 5,
) -> pd.DataFrame:
    """Defects that most resemble each cluster, by cosine similarity of TF-IDF vectors.

    Parameters
    ----------
    cluster_texts : mapping cluster id -> text
        E.g. the representative signature text of each cluster.
    defects : DataFrame with columns ``key``, ``title``, ``description``
        Defect texts are normalised with the signature rules, so pasted traces compare.
    vectoriser : fitted Pipeline, optional
        E.g. ``FailureClusterer.vectoriser_``; by default one is fitted on the cluster and
        defect texts together.
    min_score : float, default 0.2
        Smallest cosine similarity reported.
    top_k : int, default 5
        Most defects reported per cluster.

    Returns
    -------
    pandas.DataFrame
        Columns ``cluster_id``, ``defect_key``, ``score``; by cluster id, then score descending.
    """
    _check_score("min_score", min_score)
    if isinstance(top_k, bool) or not isinstance(top_k, (int, np.integer)) or top_k < 1:
        raise ValueError(BAD_TOP_K.format(top_k=top_k))
    defect_keys, defect_texts = _defect_texts(defects, "defects")
    cluster_ids = sorted(int(cluster_id) for cluster_id in cluster_texts)
    columns = {"cluster_id": np.int64, "defect_key": object, "score": np.float64}
    if not cluster_ids or not len(defect_keys):
        return pd.DataFrame({name: pd.Series(dtype=dtype) for name, dtype in columns.items()})
    texts = [str(cluster_texts[cluster_id]) for cluster_id in cluster_ids]
    if vectoriser is None:
        vectoriser = build_vectoriser().fit(texts + defect_texts)
    left = sparse.csr_matrix(vectoriser.transform(texts))
    right = sparse.csr_matrix(vectoriser.transform(defect_texts))
    similarity = (left @ right.T).toarray()
    rows = []
    for i, cluster_id in enumerate(cluster_ids):
        order = np.lexsort((defect_keys, -similarity[i]))[:top_k]
        for j in order:
            if similarity[i, j] >= min_score and similarity[i, j] > 0:
                rows.append((cluster_id, defect_keys[j], float(similarity[i, j])))
    result = pd.DataFrame(rows, columns=list(columns))
    return result.astype(columns)

