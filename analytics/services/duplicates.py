"""Likely duplicate defects: store the pairs the pure detector finds, for a person to triage.

The detector is :func:`analytics.core.clustering.duplicate_defects` (TF-IDF cosine similarity of title and
description). Each pair is stored once as a :class:`analytics.models.DefectDuplicate` with
``defect_a.key < defect_b.key``.

A person's decision is never overwritten: a pair marked confirmed or dismissed keeps its status (and its
score) whatever later refreshes find. Suggested pairs are re-scored, new ones added, and suggestions that
no longer reach the threshold (the defect texts changed) are removed.
"""

from __future__ import annotations

import pandas as pd
from django.db import transaction

from analytics.core.clustering import DEFAULT_DUPLICATE_THRESHOLD, duplicate_defects
from analytics.models import DefectDuplicate
from ingest.models import Defect


@transaction.atomic
def defect_duplicates_refresh(*, project_id: int, threshold: float = DEFAULT_DUPLICATE_THRESHOLD) -> int:
    """Recompute the likely duplicate pairs of one project; return how many pairs reach ``threshold``."""
    rows = list(Defect.objects.filter(project_id=project_id).values_list("id", "key", "title", "description"))
    frame = pd.DataFrame(rows, columns=["id", "key", "title", "description"])
    pairs = duplicate_defects(frame[["key", "title", "description"]], threshold=threshold)
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
