"""Clustering cost: FailureClusterer.fit on N failures vs TF-IDF vectorisation of their distinct signatures."""

from __future__ import annotations

from bench.common import Clock, log, result_write, section_args, timed
from bench.data import dataset_ensure, failures_iter, manifest_rows


def main() -> None:
    args, scale = section_args(__doc__)
    import pandas as pd

    from analytics.core.clustering import FailureClusterer, build_vectoriser
    from analytics.core.signatures import failure_signature

    history, _ = dataset_ensure(scale)
    paths = [r["_path"] for r in reversed(manifest_rows(history))]  # most recent failures first
    failures = list(failures_iter(paths, scale.cluster_failures))
    timings: dict = {}
    with Clock(database=False) as c:
        sigs = [failure_signature(failure_type=t, message=m, details=d) for t, m, d in failures]
    timed(timings, "signatures", c)
    frame = pd.DataFrame({"key": [s.key for s in sigs], "text": [s.text for s in sigs]})
    distinct = frame.drop_duplicates("key").sort_values("key")["text"].tolist()
    log(f"clustering: {len(frame)} failures, {len(distinct)} distinct signatures")
    n_clusters = None
    for rep in range(scale.repeats):
        with Clock(database=False) as c:
            build_vectoriser().fit_transform(distinct)
        timed(timings, "tfidf_distinct", c)
        with Clock(database=False) as c:
            model = FailureClusterer().fit(frame)
        timed(timings, "cluster_fit", c)
        n_clusters = model.n_clusters_
        log(f"clustering repeat {rep + 1}: fit {timings['cluster_fit']['wall'][-1]:.2f}s, "
            f"tfidf {timings['tfidf_distinct']['wall'][-1]:.2f}s")
    result_write(args.out, {"failures": len(frame), "distinct_signatures": len(distinct), "clusters": n_clusters,
                            "timings": timings})


if __name__ == "__main__":
    main()
