"""Likely duplicate defects: store the pairs the pure detector finds, for a person to triage.

The detector is :func:`analytics.core.duplicates.duplicate_candidates`: TF-IDF cosine similarity of title and
description (numbers and ids ignored), each defect compared with the defects created before it, and only its
``top_k`` most similar earlier defects suggested, when they reach ``threshold``. Each pair is stored once as a
:class:`analytics.models.DefectDuplicate` with ``defect_a.key < defect_b.key``.

A person's decision is never overwritten: a pair marked confirmed or dismissed keeps its status (and its
score) whatever later refreshes find. Suggested pairs are re-scored, new ones added, and suggestions that
no longer reach the threshold (the defect texts changed) are removed.
"""

from __future__ import annotations

import pandas as pd
from django.db import transaction

from analytics.core.duplicates import DEFAULT_MIN_SCORE, DEFAULT_TOP_K, duplicate_candidates
from analytics.models import DefectDuplicate
from ingest.models import Defect


@transaction.atomic
def defect_duplicates_refresh(
    *, project_id: int, threshold: float = DEFAULT_MIN_SCORE, top_k: int = DEFAULT_TOP_K
) -> int:
    """Recompute the likely duplicate pairs of one project; return how many pairs the detector suggests.

    ``threshold`` is the detector's ``min_score`` (smallest cosine similarity), ``top_k`` how many of a
    defect's most similar earlier defects may be suggested.
    """
    rows = list(
        Defect.objects.filter(project_id=project_id).values_list(
            "id", "key", "title", "description", "created_at"
        )
    )
    frame = pd.DataFrame(rows, columns=["id", "key", "title", "description", "created"])
    pairs = duplicate_candidates(
        frame[["key", "title", "description", "created"]], min_score=threshold, top_k=top_k
    )
    id_of = dict(zip(frame["key"], frame["id"], strict=True))
    found = {
        (int(id_of[a]), int(id_of[b])): float(score)
        for a, b, score in zip(pairs["key_a"], pairs["key_b"], pairs["score"], strict=True)
    }
    stored = {
        frozenset((d.defect_a_id, d.defect_b_id)): d
        for d in DefectDuplicate.objects.filter(project_id=project_id)
    }
    by_pair = {frozenset(ids): score for ids, score in found.items()}
    changed, stale = [], []
    for pair, row in stored.items():
        if row.status != DefectDuplicate.Status.SUGGESTED:
            continue  # a person's decision: kept as it is
        score = by_pair.get(pair)
        if score is None:
            stale.append(row.pk)
        elif abs(row.score - score) > 1e-9:
            row.score = score
            changed.append(row)
    new = [
        DefectDuplicate(project_id=project_id, defect_a_id=a, defect_b_id=b, score=score)
        for (a, b), score in found.items()
        if frozenset((a, b)) not in stored
    ]
    for start in range(0, len(stale), 500):
        DefectDuplicate.objects.filter(pk__in=stale[start : start + 500]).delete()
    DefectDuplicate.objects.bulk_update(changed, ["score"], batch_size=500)
    DefectDuplicate.objects.bulk_create(new, batch_size=1000)
    return len(found)
