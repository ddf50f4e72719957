#!/usr/bin/python3
"""Reference values for the metric and significance tests of models/eval.

Run with Debian's packages (python3-sklearn, python3-scipy, python3-numpy):

    /usr/bin/python3 models/eval/testdata/gen_sklearn.py > models/eval/testdata/sklearn_metrics.json

The output is committed; the Go tests read it and need no Python.

Ranking cases: random continuous scores (no ties) and binary relevance with
at least one relevant item. NDCG@k comes from sklearn.metrics.ndcg_score,
Precision@k and Recall@k from precision_score / recall_score on the top-k
indicator, reciprocal rank from label_ranking_average_precision_score on the
single-relevant cases (where it equals 1/rank of the relevant item) and by
hand from the ranking for the cut-off version.

Paired cases: discrete per-query values like reciprocal ranks, with ties and
zero differences; scipy.stats.wilcoxon(zero_method="wilcox",
correction=False, method="approx") gives the statistic and the p-value.
"""
import json
import sys
import warnings

import numpy as np
import scipy
import scipy.stats
import sklearn
from sklearn.metrics import (label_ranking_average_precision_score, ndcg_score,
                             precision_score, recall_score)

# The normal approximation is what the Go code implements at every size;
# scipy only warns that it is rough for small samples.
warnings.filterwarnings("ignore", message="Sample size too small")

rng = np.random.default_rng(20260101)
cases = []
for case in range(100):
    n = int(rng.integers(20, 41))
    # Six decimals keep the file small; the permutation guarantees no ties.
    scores = np.round((rng.permutation(n) + rng.random(n) * 0.5) / n, 6)
    n_rel = 1 if case % 2 == 0 else int(rng.integers(1, 6))
    rel = np.zeros(n, dtype=int)
    rel[rng.choice(n, size=n_rel, replace=False)] = 1
    order = np.argsort(-scores, kind="stable")
    ranked_rel = rel[order]
    first = int(np.argmax(ranked_rel)) + 1  # 1-based rank of the first relevant item
    c = {"scores": [float(s) for s in scores], "relevant": [int(r) for r in rel], "at": []}
    if n_rel == 1:
        c["lrap"] = float(label_ranking_average_precision_score([rel], [scores]))
    for k in (1, 3, 5, 10, 20):
        top = np.zeros(n, dtype=int)
        top[order[:k]] = 1
        c["at"].append({
            "k": k,
            "ndcg": float(ndcg_score([rel], [scores], k=k)),
            "precision": float(precision_score(rel, top, zero_division=0)),
            "recall": float(recall_score(rel, top, zero_division=0)),
            "hit": float(ranked_rel[:k].sum() > 0),
            "rr": 1.0 / first if first <= k else 0.0,
        })
    cases.append(c)

paired = []
values = [0.0, 0.0, 0.0, 1.0, 0.5, 1 / 3, 0.25, 0.2, 0.1, 0.05]
for case in range(40):
    n = int(rng.integers(30, 150))
    x = rng.choice(values, size=n)
    # y is x with some entries moved, so differences have ties and zeros.
    y = x.copy()
    flip = rng.random(n) < 0.4
    y[flip] = rng.choice(values, size=int(flip.sum()))
    if case % 3 == 0:
        y = np.where(rng.random(n) < 0.3, np.minimum(1.0, y + 0.25), y)
    if not np.any(x != y):
        y[0] = 1.0 - x[0]
    res = scipy.stats.wilcoxon(x, y, zero_method="wilcox", correction=False, method="approx")
    paired.append({
        "x": [float(v) for v in x],
        "y": [float(v) for v in y],
        "statistic": float(res.statistic),
        "p": float(res.pvalue),
    })

json.dump({
    "generator": "models/eval/testdata/gen_sklearn.py",
    "libraries": {"scikit-learn": sklearn.__version__, "scipy": scipy.__version__, "numpy": np.__version__},
    "ranking": cases,
    "paired": paired,
}, sys.stdout, indent=None, separators=(",", ":"))
sys.stdout.write("\n")
