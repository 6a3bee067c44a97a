"""FailureClusterer clusters each connected component of "closer than the threshold" on its own; the partition
must equal scikit-learn's AgglomerativeClustering run once on the full precomputed distance matrix (the reference
library, with the same cannot-link/must-link encoding of pins), for both linkages and thresholds on either side
of 1. Data: invented signature texts from a few causes plus noise, generated here (ground truth not needed)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import sparse
from sklearn.cluster import AgglomerativeClustering

from analytics.core.clustering import FailureClusterer, build_vectoriser

CAUSES = [
    "timeout waiting for berth lock after {n} ms in BerthLockService acquire",
    "null reference in InvoiceBuilder total when harbour fee missing",
    "connection refused to tide feed at port {n}",
    "assertion failed expected {n} free berths but found {m}",
    "payment gateway returned status {n} declined card",
    "index out of range in mooring plan row {n}",
]
NOISE = ["retry", "slip", "pontoon", "crane", "fuel", "dock", "permit", "visitor", "season", "marina"]


def _signatures(seed: int, n: int = 240) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    rows = []
    for i in range(n):
        text = CAUSES[rng.integers(len(CAUSES))].format(n=rng.integers(1, 50), m=rng.integers(1, 50))
        text += " " + " ".join(rng.choice(NOISE, size=rng.integers(0, 4)))
        rows.append({"key": f"k{i:04d}", "text": text})
    return pd.DataFrame(rows).drop_duplicates("text")


def _reference(frame: pd.DataFrame, *, threshold: float, linkage: str, pinned: dict[str, int]) -> list[set[str]]:
    distinct = frame.drop_duplicates("key").sort_values("key")
    keys = distinct["key"].to_numpy()
    matrix = sparse.csr_matrix(build_vectoriser().fit_transform(distinct["text"].tolist()))
    distance = np.clip(1.0 - (matrix @ matrix.T).toarray(), 0.0, 2.0)
    np.fill_diagonal(distance, 0.0)
    pin = np.array([pinned.get(k, -1) for k in keys])
    rows = np.flatnonzero(pin >= 0)
    if len(rows):
        same = pin[rows][:, None] == pin[rows][None, :]
        distance[np.ix_(rows, rows)] = np.where(same, 0.0, 1e9)
    labels = AgglomerativeClustering(n_clusters=None, metric="precomputed", linkage=linkage,
                                     distance_threshold=threshold).fit_predict(distance)
    return sorted((set(keys[labels == c]) for c in np.unique(labels)), key=min)


def _partition(model: FailureClusterer) -> list[set[str]]:
    labels = model.labels_
    return sorted((set(labels.index[labels == c]) for c in labels.unique()), key=min)


@pytest.mark.parametrize("linkage", ["average", "complete"])
@pytest.mark.parametrize("threshold", [0.2, 0.5, 0.8, 1.3])
@pytest.mark.parametrize("seed", [1, 2])
def test_partition_equals_one_clustering_of_the_full_matrix(seed, threshold, linkage):
    frame = _signatures(seed)
    model = FailureClusterer(distance_threshold=threshold, linkage=linkage).fit(frame)
    assert _partition(model) == _reference(frame, threshold=threshold, linkage=linkage, pinned={})
    if threshold < 1:
        assert 1 < model.n_clusters_ < len(frame)  # the data has structure at these cuts: the check is not vacuous


def test_pins_give_the_same_partition_as_the_full_matrix():
    frame = _signatures(3)
    plain = FailureClusterer().fit(frame)
    clusters = _partition(plain)
    big = [c for c in clusters if len(c) > 3]
    a, b = sorted(big[0]), sorted(big[1])
    pinned = {k: 900 for k in [*a, *b]}  # merge two clusters
    pinned.update({a[0]: 901, a[1]: 902})  # and split two keys out of the first, apart from each other
    model = FailureClusterer().fit(frame, pinned=pinned)
    assert _partition(model) == _reference(frame, threshold=0.5, linkage="average", pinned=pinned)
    assert {a[0]} in _partition(model) or any(a[0] in c and a[1] not in c for c in _partition(model))
