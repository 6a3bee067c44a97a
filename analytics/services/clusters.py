"""Failure causes: sign failures, cluster the signatures, keep cluster ids stable, link clusters to defects.

The pure work is :mod:`analytics.core.signatures` and :mod:`analytics.core.clustering`; this module loads
rows (through :mod:`analytics.selectors_causes`), calls it, and stores ``FailureSignature``,
``FailureCluster`` and ``ClusterDefectLink`` rows.

Cluster ids are ``FailureCluster`` primary keys. A refit passes the stored labels as ``previous`` and the
pinned signatures (a person's merges and splits) as ``pinned`` to :class:`FailureClusterer`, so ids,
links, notes and bookmarks survive. Clusters are never deleted: one that loses all its signatures keeps
its row with zero failures (a merged one also points at the cluster it went into).
"""

from __future__ import annotations

import hashlib
import itertools
import logging
from collections.abc import Iterable

import numpy as np
import pandas as pd
from django.conf import settings
from django.core.cache import cache
from django.core.exceptions import PermissionDenied, ValidationError
from django.db import connection, transaction
from django.db.models import Count, Max, Q
from django.utils import timezone
from scipy import sparse

from analytics.core.clustering import (
    DEFAULT_DISTANCE_THRESHOLD,
    FailureClusterer,
    _centroids,
    build_vectoriser,
    match_defects,
)
from analytics.core.signatures import Signature, failure_signature
from analytics.models import ClusterDefectLink, FailureCluster, FailureSignature
from analytics.selectors_causes import (
    cluster_failures_frame,
    defects_frame,
    failed_results_qs,
    failure_text_of,
    signature_keys_in,
    signature_occurrences,
    signatures_frame,
    unsigned_failures,
)
from analytics.services.triage import triage_allowed
from ingest.models import Defect, Project, TestResult

log = logging.getLogger(__name__)

#: Defect suggestions: smallest cosine similarity, most defects per cluster, most clusters per defect, and
#: candidates per cluster looked at. Chosen on the demo export (planted cause -> defect pairs): at 0.1 with
#: two clusters per defect, 14 of 15 planted defects are suggested and about 4 in 5 suggestions are planted
#: ones; at 0.12 recall halves.
DEFECT_MIN_SCORE = 0.1
DEFECT_TOP_K = 5
DEFECT_TOP_CLUSTERS = 2
DEFECT_CANDIDATES = 20
#: Distinct signature messages per cluster that are compared with defect texts.
MATCH_MESSAGES = 5

ERR_OTHER_PROJECT = "cluster #{a} and {what} #{b} belong to different projects"
ERR_MERGE_SELF = "cannot merge cluster #{pk} into itself"
ERR_MERGED_ALREADY = "cluster #{pk} was already merged into cluster #{into}"
ERR_MERGE_CYCLE = "cannot merge cluster #{pk} into cluster #{into}: #{into} already leads into #{pk}"
ERR_CONFIRM_MERGED = (
    "cluster #{pk} was merged into cluster #{into}; confirm the defect on cluster #{into} instead"
)
ERR_SPLIT_EMPTY = "choose at least one signature to split off"
ERR_SPLIT_FOREIGN = "signature(s) not in cluster #{pk}: {keys}"
ERR_SPLIT_ALL = "cannot split off every signature of cluster #{pk}; at least one must stay"
ERR_NOT_TRIAGER = (
    "only signed-in people with the triage permission (group 'triagers') may change failure clusters"
)
_UPDATE_CHUNK = 5000
_MEMO_SIZE = 100_000


def distance_threshold() -> float:
    """Cosine distance threshold of the clustering: setting ``BAROMETER_CLUSTER_DISTANCE`` or the core default."""
    return float(getattr(settings, "BAROMETER_CLUSTER_DISTANCE", DEFAULT_DISTANCE_THRESHOLD))


def _state_cache_key(project_id: int) -> str:
    return f"barometer:failure-clusterer:{project_id}"


# --------------------------------------------------------------------------------------------------- signatures
def _results_sign(by_key: dict[str, list[int]]) -> None:
    """Write the signature keys onto their results: one prepared UPDATE run over (key, id) pairs in batches.

    Called after the read cursor is exhausted (SQLite does not isolate a cursor from writes to its table).
    """
    table = connection.ops.quote_name(TestResult._meta.db_table)
    sql = f"UPDATE {table} SET signature = %s WHERE id = %s"  # noqa: S608 - table name from the model
    pairs = ((key, pk) for key, ids in by_key.items() for pk in ids)
    with connection.cursor() as cursor:
        while batch := list(itertools.islice(pairs, _UPDATE_CHUNK)):
            cursor.executemany(sql, batch)


def signatures_fill(*, project_id: int, build_id: int | None = None) -> set[str]:
    """Give every failure of the project (or of one build) its signature key; store new signatures.

    Ingest stores failures with an empty ``TestResult.signature``; this computes it from the failure's type,
    message and details (identical texts are signed once), creates the missing ``FailureSignature`` rows and
    recounts the occurrences of the keys it touched. Returns the keys of the failures in scope.
    """
    by_key: dict[str, list[int]] = {}
    signed: dict[str, Signature] = {}
    memo: dict[bytes, Signature] = {}  # by digest, so the failure texts themselves are not kept
    for result_id, failure_type, message, details in unsigned_failures(
        project_id=project_id, build_id=build_id
    ):
        triple = (failure_type or "", message or "", details or "")
        digest = hashlib.blake2b("\0".join(triple).encode("utf-8", "surrogatepass"), digest_size=16).digest()
        signature = memo.get(digest)
        if signature is None:
            signature = failure_signature(failure_type=triple[0], message=triple[1], details=triple[2])
            if len(memo) >= _MEMO_SIZE:
                memo.clear()
            memo[digest] = signature
        by_key.setdefault(signature.key, []).append(result_id)
        signed.setdefault(signature.key, signature)
    _results_sign(by_key)

    keys = signature_keys_in(project_id=project_id, build_id=build_id)
    stored = set(
        FailureSignature.objects.filter(project_id=project_id, key__in=keys).values_list("key", flat=True)
    )
    new_rows = []
    for key in sorted(keys - stored):
        signature = signed.get(key)
        if signature is None:  # signed elsewhere (e.g. by ingest): recompute the text from one failure
            failure = failure_text_of(project_id=project_id, key=key)
            if failure is None:
                continue
            signature = failure_signature(failure_type=failure[0], message=failure[1], details=failure[2])
        new_rows.append(
            FailureSignature(
                project_id=project_id,
                key=key,
                text=signature.text,
                exception=signature.exception[:300],
                language=signature.language,
            )
        )
    FailureSignature.objects.bulk_create(new_rows, batch_size=1000, ignore_conflicts=True)

    counts = signature_occurrences(project_id=project_id, keys=None if build_id is None else keys)
    scope = FailureSignature.objects.filter(project_id=project_id)
    if build_id is not None:
        scope = scope.filter(key__in=keys)
    changed = []
    for row in scope.only("id", "key", "occurrences"):
        count = counts.get(row.key, 0)
        if row.occurrences != count:
            row.occurrences = count
            changed.append(row)
    FailureSignature.objects.bulk_update(changed, ["occurrences"], batch_size=1000)
    return keys


# --------------------------------------------------------------------------------------------------- statistics
def _cluster_stats(failures: pd.DataFrame, cluster_of: dict[str, int]) -> dict[int, dict]:
    """Per cluster: failures, tests and builds affected, first/last seen, weekly trend [[week, n], …]."""
    frame = failures.assign(cluster_id=failures["signature"].map(cluster_of))
    frame = frame[frame["cluster_id"].notna()]
    stats: dict[int, dict] = {}
    for cluster_id, rows in frame.groupby("cluster_id", sort=True):
        weekly = rows.groupby("week", sort=True).size()
        stats[int(cluster_id)] = {
            "failures": len(rows),
            "tests_affected": int(rows["test_id"].nunique()),
            "builds_affected": int(rows["build_id"].nunique()),
            "first_seen": rows["started_at"].min().to_pydatetime(),
            "last_seen": rows["started_at"].max().to_pydatetime(),
            "weekly_trend": [[str(week), int(n)] for week, n in weekly.items()],
        }
    return stats


_EMPTY_STATS = {
    "failures": 0,
    "tests_affected": 0,
    "builds_affected": 0,
    "first_seen": None,
    "last_seen": None,
    "weekly_trend": [],
}
_STAT_FIELDS = list(_EMPTY_STATS)


def _clusters_stats_store(*, project_id: int, cluster_ids: Iterable[int]) -> None:
    """Recompute the counts of the given clusters from their failures (clusters left empty get zeros)."""
    cluster_ids = sorted(set(cluster_ids))
    if not cluster_ids:
        return
    members = dict(
        FailureSignature.objects.filter(project_id=project_id, cluster_id__in=cluster_ids).values_list(
            "key", "cluster_id"
        )
    )
    stats = _cluster_stats(cluster_failures_frame(project_id=project_id, keys=members), members)
    clusters = list(FailureCluster.objects.filter(pk__in=cluster_ids))
    for cluster in clusters:
        for name, value in stats.get(cluster.pk, _EMPTY_STATS).items():
            setattr(cluster, name, value)
    FailureCluster.objects.bulk_update(clusters, _STAT_FIELDS, batch_size=500)


def _describe_store(*, clusterer: FailureClusterer, signatures: pd.DataFrame, id_map: dict[int, int]) -> None:
    """Label, exception and representative of each described cluster (``id_map``: core id -> cluster pk)."""
    described = clusterer.describe(signatures[["key", "text", "count"]])
    texts = dict(zip(signatures["key"], signatures["text"], strict=True))
    clusters = {c.pk: c for c in FailureCluster.objects.filter(pk__in=set(id_map.values()))}
    for row in described.itertuples(index=False):
        cluster = clusters.get(id_map.get(int(row.cluster_id), -1))
        if cluster is None:
            continue
        cluster.label = str(row.label)[:300]
        cluster.exception = str(row.label).split(":", 1)[0][:300]
        cluster.representative_key = str(row.representative_key)
        cluster.representative_text = texts.get(str(row.representative_key), "")
    FailureCluster.objects.bulk_update(
        clusters.values(), ["label", "exception", "representative_key", "representative_text"], batch_size=500
    )


def _forced_clusterer(signatures: pd.DataFrame) -> FailureClusterer:
    """A clusterer fitted on ``signatures`` whose clusters are exactly their ``cluster_id`` (all keys pinned)."""
    pinned = dict(zip(signatures["key"], signatures["cluster_id"].astype(int), strict=True))
    return FailureClusterer(distance_threshold=distance_threshold()).fit(
        signatures[["key", "text", "count"]], pinned=pinned
    )


def _clusters_describe_again(*, project_id: int, cluster_ids: Iterable[int]) -> None:
    """Recompute label and representative of the given clusters from their current signatures."""
    frame = signatures_frame(project_id=project_id)
    frame = frame[frame["cluster_id"].isin(set(cluster_ids)) & (frame["count"] > 0)]
    if frame.empty:
        return
    clusterer = _forced_clusterer(frame)
    ids = {int(cluster_id): int(cluster_id) for cluster_id in frame["cluster_id"].unique()}
    _describe_store(clusterer=clusterer, signatures=frame, id_map=ids)


# --------------------------------------------------------------------------------------------------- defects
def _message_part(text: str) -> str:
    """The exception and message of a signature text, without its frames (defects rarely name frames)."""
    return text.split(" @ ", 1)[0].split(" | via ", 1)[0]


def _cluster_match_texts(*, project_id: int, cluster_ids: Iterable[int]) -> dict[int, str]:
    """Per cluster, the distinct messages of its most frequent signatures: what a defect report quotes."""
    frame = signatures_frame(project_id=project_id)
    frame = frame[frame["cluster_id"].isin(set(cluster_ids))]
    frame = frame.assign(message=frame["text"].map(_message_part))
    frame = frame.sort_values(["cluster_id", "count", "key"], ascending=[True, False, True], kind="stable")
    texts: dict[int, str] = {}
    for cluster_id, rows in frame.groupby("cluster_id", sort=True):
        messages = list(dict.fromkeys(rows["message"]))[:MATCH_MESSAGES]
        texts[int(cluster_id)] = "\n".join(messages)
    return texts


def _defect_links_refresh(
    *, project_id: int, cluster_ids: Iterable[int] | None = None, vectoriser=None
) -> int:
    """Store suggested defects of the given (default: all active) clusters; confirmed links are never dropped."""
    clusters = FailureCluster.objects.filter(project_id=project_id, merged_into__isnull=True, failures__gt=0)
    if cluster_ids is not None:
        clusters = clusters.filter(pk__in=list(cluster_ids))
    texts = _cluster_match_texts(project_id=project_id, cluster_ids=[c.pk for c in clusters])
    defects = defects_frame(project_id=project_id)
    scope = ClusterDefectLink.objects.filter(cluster__project_id=project_id)
    if cluster_ids is not None:
        scope = scope.filter(cluster_id__in=list(cluster_ids))
    if not texts or defects.empty:
        scope.filter(confirmed=False).delete()
        return 0
    matches = match_defects(
        texts, defects, vectoriser=vectoriser, min_score=DEFECT_MIN_SCORE, top_k=DEFECT_CANDIDATES
    )
    # A defect describes one cause (at most a few clusters of it): keep its best clusters, then each
    # cluster's best defects.
    matches = matches.sort_values(
        ["score", "cluster_id", "defect_key"], ascending=[False, True, True], kind="stable"
    )
    matches = matches[matches.groupby("defect_key").cumcount() < DEFECT_TOP_CLUSTERS]
    matches = matches[matches.groupby("cluster_id").cumcount() < DEFECT_TOP_K]
    defect_id = dict(zip(defects["key"], defects["id"], strict=True))
    wanted = {(int(m.cluster_id), int(defect_id[m.defect_key])): float(m.score) for m in matches.itertuples()}
    existing = {(link.cluster_id, link.defect_id): link for link in scope}
    stale = [link.pk for pair, link in existing.items() if pair not in wanted and not link.confirmed]
    ClusterDefectLink.objects.filter(pk__in=stale).delete()
    changed, new = [], []
    for (cluster_id, defect), score in wanted.items():
        link = existing.get((cluster_id, defect))
        if link is None:
            new.append(ClusterDefectLink(cluster_id=cluster_id, defect_id=defect, score=score))
        elif abs(link.score - score) > 1e-12:
            link.score = score
            changed.append(link)
    # A link another transaction stored meanwhile (same cluster and defect) is kept as it is.
    ClusterDefectLink.objects.bulk_create(new, batch_size=1000, ignore_conflicts=True)
    ClusterDefectLink.objects.bulk_update(changed, ["score"], batch_size=1000)
    return len(wanted)


def cluster_defect_links_refresh(*, project_id: int) -> int:
    """Recompute the defect suggestions of every cluster holding failures (e.g. after a defect import).

    No refit. Suggestions that no longer qualify are dropped; confirmed links are kept. Returns the number
    of suggestions.
    """
    with transaction.atomic():
        _project_lock(project_id)
        return _defect_links_refresh(project_id=project_id)


# --------------------------------------------------------------------------------------------------- fitted state
def _clusterer_from_db(*, project_id: int) -> FailureClusterer | None:
    """Rebuild a fitted clusterer from the stored labels (no clustering: vectoriser and centroids only)."""
    frame = signatures_frame(project_id=project_id)
    frame = frame[frame["cluster_id"] >= 0]
    if frame.empty:
        return None
    clusterer = FailureClusterer(distance_threshold=distance_threshold())
    vectoriser = build_vectoriser(max_features=clusterer.max_features)
    matrix = sparse.csr_matrix(vectoriser.fit_transform(frame["text"].tolist()))
    ids = frame["cluster_id"].to_numpy(dtype=np.int64)
    clusterer.vectoriser_ = vectoriser
    clusterer.labels_ = pd.Series(ids, index=pd.Index(frame["key"], name="key"), name="cluster_id")
    clusterer.signatures_ = frame.set_index("key")[["text", "count"]].assign(cluster_id=ids)
    clusterer.cluster_ids_, clusterer.centroids_ = _centroids(matrix, ids)
    clusterer.n_clusters_ = len(clusterer.cluster_ids_)
    return clusterer


def _state_stamp(project_id: int) -> tuple:
    """What the cached fitted state must agree with: the project's clusters and clustered signatures."""
    clusters = FailureCluster.objects.filter(project_id=project_id).aggregate(
        n=Count("id"), top=Max("id"), merged=Count("id", filter=Q(merged_into__isnull=False))
    )
    clustered = FailureSignature.objects.filter(project_id=project_id, cluster__isnull=False).count()
    return (clusters["n"], clusters["top"], clusters["merged"], clustered)


def _state_store(project_id: int, clusterer: FailureClusterer) -> None:
    """Cache the fitted state after the transaction commits, stamped with what it was fitted on."""
    for _, step in clusterer.vectoriser_.named_steps["union"].transformer_list:
        if hasattr(step, "stop_words_"):
            step.stop_words_ = None  # terms cut by max_features: not needed to transform (scikit-learn docs)
    stamp = _state_stamp(project_id)
    transaction.on_commit(lambda: cache.set(_state_cache_key(project_id), (stamp, clusterer), timeout=None))


def _clusterer_load(*, project_id: int) -> FailureClusterer | None:
    """The fitted state of the last refit, or one rebuilt from the stored labels if the cache has none."""
    cached = cache.get(_state_cache_key(project_id))
    if cached is not None and cached[0] == _state_stamp(project_id):
        return cached[1]
    return _clusterer_from_db(project_id=project_id)


def _clusterer_forget(project_id: int) -> None:
    transaction.on_commit(lambda: cache.delete(_state_cache_key(project_id)))


# --------------------------------------------------------------------------------------------------- refresh
def _new_clusters(project_id: int, count: int) -> list[FailureCluster]:
    clusters = FailureCluster.objects.bulk_create(
        [FailureCluster(project_id=project_id) for _ in range(count)]
    )
    if any(cluster.pk is None for cluster in clusters):  # a backend that does not return ids
        raise RuntimeError("the database did not return the ids of new failure clusters")
    return clusters


def clusters_refresh(*, project_id: int) -> int:
    """Full refit of a project's failure clusters. Returns the number of clusters holding failures.

    Only distinct signatures are clustered (each weighed by its number of failures). Ids stay stable:
    the stored labels go in as ``previous``, a person's pinned signatures as ``pinned``; clusters the
    refit cannot map onto an old id become new ``FailureCluster`` rows. Afterwards every cluster's label,
    representative and counts are recomputed and the defect suggestions refreshed.
    """
    with transaction.atomic():
        Project.objects.select_for_update().filter(pk=project_id).first()
        signatures_fill(project_id=project_id)
        frame = signatures_frame(project_id=project_id)
        frame = frame[frame["count"] > 0].reset_index(drop=True)
        known = set(FailureCluster.objects.filter(project_id=project_id).values_list("pk", flat=True))
        if frame.empty:
            _clusters_stats_store(project_id=project_id, cluster_ids=known)
            ClusterDefectLink.objects.filter(cluster__project_id=project_id, confirmed=False).delete()
            _clusterer_forget(project_id)
            return 0
        stored = frame[frame["cluster_id"].isin(known)]
        previous = dict(zip(stored["key"], stored["cluster_id"].astype(int), strict=True))
        pinned_rows = stored[stored["pinned"]]
        pinned = dict(zip(pinned_rows["key"], pinned_rows["cluster_id"].astype(int), strict=True))
        clusterer = FailureClusterer(distance_threshold=distance_threshold()).fit(
            frame[["key", "text", "count"]], previous=previous, pinned=pinned
        )
        old_ids = set(previous.values()) | set(pinned.values())
        fresh = [int(i) for i in clusterer.cluster_ids_ if int(i) not in old_ids]
        id_map = {i: i for i in old_ids}
        id_map.update(zip(fresh, (c.pk for c in _new_clusters(project_id, len(fresh))), strict=True))

        labels = clusterer.labels_.map(id_map)
        rows = FailureSignature.objects.filter(project_id=project_id).only("id", "key", "cluster_id")
        changed = []
        for row in rows:
            cluster_id = labels.get(row.key)
            cluster_id = None if cluster_id is None or pd.isna(cluster_id) else int(cluster_id)
            if row.cluster_id != cluster_id:
                row.cluster_id = cluster_id
                changed.append(row)
        FailureSignature.objects.bulk_update(changed, ["cluster_id"], batch_size=1000)

        _describe_store(clusterer=clusterer, signatures=frame, id_map=id_map)
        _clusters_stats_store(project_id=project_id, cluster_ids=known | set(id_map.values()))
        # The refit's vectoriser knows only signature words; the core then fits one on both sides.
        _defect_links_refresh(project_id=project_id)
        # Keep the fitted state, with the project's cluster ids, for the incremental assignment.
        _state_store(project_id, _clusterer_from_labels(clusterer, id_map))
        return len(clusterer.cluster_ids_)


def _clusterer_from_labels(clusterer: FailureClusterer, id_map: dict[int, int]) -> FailureClusterer:
    """The fitted clusterer with its core ids replaced by cluster primary keys."""
    clusterer.labels_ = clusterer.labels_.map(id_map).astype(np.int64)
    clusterer.signatures_ = clusterer.signatures_.assign(cluster_id=clusterer.labels_.to_numpy())
    clusterer.cluster_ids_ = np.array([id_map[int(i)] for i in clusterer.cluster_ids_], dtype=np.int64)
    return clusterer


def clusters_assign_build(*, project_id: int, build_id: int) -> int:
    """Place the failures of one new build into clusters without a refit. Returns the signatures placed.

    Signatures already in a cluster stay there. A new signature joins the cluster whose centroid is
    nearest if it is within the distance threshold (:meth:`FailureClusterer.assign`) and the cluster
    already holds its root-cause exception type (the fitted vocabulary lacks the new signature's own
    words, so the distance alone would overrate shared frames); the rest are
    clustered among themselves and each group becomes a new cluster. Only the build's new signatures are
    vectorised; the fitted state of the last refit is kept in the cache (rebuilt from the stored labels
    when missing). Counts are recomputed for the clusters the build touched.
    """
    with transaction.atomic():
        Project.objects.select_for_update().filter(pk=project_id).first()
        keys = signatures_fill(project_id=project_id, build_id=build_id)
        if not keys:
            return 0
        frame = signatures_frame(project_id=project_id, keys=keys)
        new = frame[frame["cluster_id"] < 0].reset_index(drop=True)
        placed: dict[str, int] = {}
        created: list[int] = []
        clusterer = None
        if not new.empty:
            clusterer = _clusterer_load(project_id=project_id)
            live = _live_cluster_ids(project_id)
            if clusterer is not None:
                assigned = clusterer.assign(new[["key", "text"]])
                exception_of = dict(
                    FailureSignature.objects.filter(
                        project_id=project_id, key__in=list(new["key"])
                    ).values_list("key", "exception")
                )
                targets = {live.get(int(cluster_id)) for cluster_id in assigned}
                exceptions = set(
                    FailureSignature.objects.filter(cluster_id__in=targets - {None}).values_list(
                        "cluster_id", "exception"
                    )
                )
                for key, cluster_id in assigned.items():
                    cluster_id = live.get(int(cluster_id))
                    # The words of a new signature are not in the fitted vocabulary, so only its known
                    # words (often shared frames) are compared: also require a root-cause exception type
                    # the cluster already holds. Otherwise it opens a new cluster, which a refit may merge.
                    if cluster_id is not None and (cluster_id, exception_of.get(str(key), "")) in exceptions:
                        placed[str(key)] = cluster_id
            rest = new[~new["key"].isin(placed)].reset_index(drop=True)
            if not rest.empty:
                sub = FailureClusterer(distance_threshold=distance_threshold()).fit(
                    rest[["key", "text", "count"]]
                )
                clusters = _new_clusters(project_id, len(sub.cluster_ids_))
                id_map = dict(zip((int(i) for i in sub.cluster_ids_), (c.pk for c in clusters), strict=True))
                created = list(id_map.values())
                for key, cluster_id in sub.labels_.items():
                    placed[str(key)] = id_map[int(cluster_id)]
                _describe_store(clusterer=sub, signatures=rest, id_map=id_map)
            rows = list(FailureSignature.objects.filter(project_id=project_id, key__in=list(placed)))
            for row in rows:
                row.cluster_id = placed[row.key]
            FailureSignature.objects.bulk_update(rows, ["cluster_id"], batch_size=1000)
            if created or clusterer is None:
                _clusterer_forget(project_id)  # new clusters: the next build rebuilds the state with them
            else:
                _state_store(project_id, clusterer)
        touched = set(frame.loc[frame["cluster_id"] >= 0, "cluster_id"].astype(int)) | set(placed.values())
        _clusters_stats_store(project_id=project_id, cluster_ids=touched)
        if created:
            _defect_links_refresh(project_id=project_id, cluster_ids=created)
        return len(placed)


def _live_cluster_ids(project_id: int) -> dict[int, int]:
    """Cluster id -> the cluster that now holds its failures (follows merges; unknown ids are left out)."""
    rows = dict(FailureCluster.objects.filter(project_id=project_id).values_list("pk", "merged_into_id"))
    live = {}
    for pk in rows:
        target, seen = pk, set()
        while rows.get(target) is not None and target not in seen:
            seen.add(target)
            target = rows[target]
        live[pk] = target
    return live


# --------------------------------------------------------------------------------------------------- person actions
def _require_triager(user) -> None:
    if not triage_allowed(user):
        raise PermissionDenied(ERR_NOT_TRIAGER)


def _project_lock(project_id: int) -> None:
    """Serialise changes to a project's clusters (refits, assignments, person actions, link refreshes).

    Call inside ``transaction.atomic``; the row lock is held until the transaction ends (a no-op on SQLite,
    where writers are serialised by the database lock).
    """
    Project.objects.select_for_update().filter(pk=project_id).first()


def _cluster_locked(pk: int) -> FailureCluster:
    """Re-load a cluster under a row lock: the caller's object may predate another person's merge."""
    return FailureCluster.objects.select_for_update().get(pk=pk)


def cluster_merge(*, cluster: FailureCluster, into: FailureCluster, user) -> FailureCluster:
    """Merge ``cluster`` into ``into``; every signature of both is pinned to ``into`` so refits keep it.

    ``cluster`` keeps its row (with zero failures and ``merged_into`` set) so links to it still resolve;
    its confirmed defect links move to ``into``.
    """
    _require_triager(user)
    if cluster.project_id != into.project_id:
        raise ValidationError(ERR_OTHER_PROJECT.format(a=cluster.pk, what="cluster", b=into.pk))
    if cluster.pk == into.pk:
        raise ValidationError(ERR_MERGE_SELF.format(pk=cluster.pk))
    with transaction.atomic():
        _project_lock(into.project_id)
        # Checked on fresh rows under the lock: the objects passed in may predate a merge that committed
        # meanwhile (two people merging A into B and B into A would otherwise hide both).
        given = (cluster, into)
        cluster, into = _cluster_locked(cluster.pk), _cluster_locked(into.pk)
        for one in (cluster, into):
            if one.merged_into_id is not None:
                raise ValidationError(ERR_MERGED_ALREADY.format(pk=one.pk, into=one.merged_into_id))
        if _live_cluster_ids(into.project_id).get(into.pk) == cluster.pk:
            raise ValidationError(ERR_MERGE_CYCLE.format(pk=cluster.pk, into=into.pk))
        FailureSignature.objects.filter(cluster_id__in=[cluster.pk, into.pk]).update(
            cluster=into, pinned=True
        )
        taken = set(ClusterDefectLink.objects.filter(cluster=into).values_list("defect_id", flat=True))
        for link in ClusterDefectLink.objects.filter(cluster=cluster, confirmed=True):
            if link.defect_id in taken:
                ClusterDefectLink.objects.filter(cluster=into, defect_id=link.defect_id).update(
                    confirmed=True, confirmed_by=link.confirmed_by, confirmed_at=link.confirmed_at
                )
                link.delete()
            else:
                link.cluster = into
                link.save(update_fields=["cluster"])
        ClusterDefectLink.objects.filter(cluster=cluster, confirmed=False).delete()
        cluster.merged_into = into
        cluster.save(update_fields=["merged_into", "updated_at"])
        _clusters_stats_store(project_id=into.project_id, cluster_ids=[cluster.pk, into.pk])
        _clusters_describe_again(project_id=into.project_id, cluster_ids=[into.pk])
        _clusterer_forget(into.project_id)
        log.info("cluster #%s merged into #%s by %s", cluster.pk, into.pk, user)
    for obj in (*given, cluster, into):
        obj.refresh_from_db()
    return into


def cluster_split(*, cluster: FailureCluster, signature_keys: Iterable[str], user) -> FailureCluster:
    """Move the given signatures out of ``cluster`` into a new cluster; returns the new cluster.

    The moved signatures are pinned to the new cluster and those that stay are pinned to ``cluster``, so a
    refit keeps them apart.
    """
    _require_triager(user)
    moving = sorted({str(key) for key in signature_keys})
    if not moving:
        raise ValidationError(ERR_SPLIT_EMPTY)
    with transaction.atomic():
        _project_lock(cluster.project_id)
        members = set(FailureSignature.objects.filter(cluster=cluster).values_list("key", flat=True))
        foreign = [key for key in moving if key not in members]
        if foreign:
            raise ValidationError(ERR_SPLIT_FOREIGN.format(pk=cluster.pk, keys=", ".join(foreign)))
        if set(moving) >= members:
            raise ValidationError(ERR_SPLIT_ALL.format(pk=cluster.pk))
        new = FailureCluster.objects.create(project_id=cluster.project_id, label="")
        FailureSignature.objects.filter(cluster=cluster, key__in=moving).update(cluster=new, pinned=True)
        FailureSignature.objects.filter(cluster=cluster).update(pinned=True)
        _clusters_stats_store(project_id=cluster.project_id, cluster_ids=[cluster.pk, new.pk])
        _clusters_describe_again(project_id=cluster.project_id, cluster_ids=[cluster.pk, new.pk])
        _defect_links_refresh(project_id=cluster.project_id, cluster_ids=[cluster.pk, new.pk])
        _clusterer_forget(cluster.project_id)
        log.info("cluster #%s split into #%s by %s (%d signatures)", cluster.pk, new.pk, user, len(moving))
    cluster.refresh_from_db()
    new.refresh_from_db()
    return new


def cluster_defect_link_confirm(*, cluster: FailureCluster, defect: Defect, user) -> ClusterDefectLink:
    """A person confirms that ``defect`` describes ``cluster``'s cause; refreshes never drop the link."""
    _require_triager(user)
    if cluster.project_id != defect.project_id:
        raise ValidationError(ERR_OTHER_PROJECT.format(a=cluster.pk, what="defect", b=defect.pk))
    with transaction.atomic():
        _project_lock(cluster.project_id)
        merged_into = _cluster_locked(cluster.pk).merged_into_id
        if merged_into is not None:
            raise ValidationError(ERR_CONFIRM_MERGED.format(pk=cluster.pk, into=merged_into))
        link = ClusterDefectLink.objects.filter(cluster=cluster, defect=defect).first()
        if link is None:
            text = _cluster_match_texts(project_id=cluster.project_id, cluster_ids=[cluster.pk]).get(
                cluster.pk, ""
            )
            score = match_defects(
                {cluster.pk: text or cluster.label},
                pd.DataFrame([{"key": defect.key, "title": defect.title, "description": defect.description}]),
                min_score=0.0,
            )
            link = ClusterDefectLink(
                cluster=cluster, defect=defect, score=float(score["score"].iloc[0]) if len(score) else 0.0
            )
        link.confirmed = True
        link.confirmed_by = user
        link.confirmed_at = timezone.now()
        link.save()
    return link


# --------------------------------------------------------------------------------------------------- exports
def failures_export_rows(*, project: Project) -> list[dict]:
    """Every failed or errored result: build, classname, name, attempt, outcome, cluster_id, cluster_label."""
    clusters = dict(
        FailureSignature.objects.filter(project=project, cluster__isnull=False).values_list(
            "key", "cluster_id"
        )
    )
    labels = dict(FailureCluster.objects.filter(project=project).values_list("pk", "label"))
    rows = (
        failed_results_qs(project_id=project.pk)
        .order_by("build__started_at", "build_id", "test_case__classname", "test_case__name", "attempt", "id")
        .values_list(
            "build__external_id", "test_case__classname", "test_case__name", "attempt", "outcome", "signature"
        )
    )
    out = []
    for build, classname, name, attempt, outcome, signature in rows.iterator(chunk_size=5000):
        cluster_id = clusters.get(signature)
        out.append(
            {
                "build": build,
                "classname": classname,
                "name": name,
                "attempt": attempt,
                "outcome": outcome,
                "cluster_id": cluster_id,
                "cluster_label": labels.get(cluster_id) if cluster_id is not None else None,
            }
        )
    return out


def clusters_export_rows(*, project: Project) -> list[dict]:
    """Every cluster holding failures, largest first, with its counts and linked defects."""
    from analytics.selectors_causes import active_clusters_qs, cluster_summary

    links: dict[int, list[ClusterDefectLink]] = {}
    for link in ClusterDefectLink.objects.filter(cluster__project=project).select_related("defect"):
        links.setdefault(link.cluster_id, []).append(link)
    out = []
    for cluster in active_clusters_qs(project_id=project.pk):
        mine = links.get(cluster.pk, [])
        out.append(
            {
                **cluster_summary(cluster),
                "representative": cluster.representative_text,
                "confirmed_defects": " ".join(link.defect.key for link in mine if link.confirmed),
                "suggested_defects": " ".join(
                    f"{link.defect.key}:{link.score:.2f}" for link in mine if not link.confirmed
                ),
            }
        )
    return out
