#!/usr/bin/env python3
"""Reference values for the content model's TF-IDF and vector cosines.

Computed with scikit-learn (Debian package python3-sklearn 1.2.1, numpy
1.24.2, Python 3.11): TfidfVectorizer with its defaults (raw term counts,
smooth idf = ln((1+N)/(1+df)) + 1, L2 normalisation) over token lists given
as they are (a callable analyzer), and cosine_similarity for both the TF-IDF
rows and the dense vectors. The token lists are what waymark's tokenizer makes
of an invented outdoor shop's records (category prefixes, tags, title words).

Regenerate: /usr/bin/python3 models/testdata/tfidf_sklearn.py > models/testdata/tfidf_sklearn.json
CI does not run this script; the Go test reads the JSON.
"""
import json
import sys

import numpy
import sklearn
from sklearn.feature_extraction.text import TfidfVectorizer
from sklearn.metrics.pairwise import cosine_similarity

DOCS = [
    ["cat:camping", "cat:camping/tents", "tag:tent", "tag:waterproof", "tag:ridge",
     "w:ridge", "w:tent", "w:two", "w:person", "w:waterproof"],
    ["cat:camping", "cat:camping/tents", "tag:tent", "tag:waterproof", "tag:dome",
     "w:dome", "w:tent", "w:tent", "w:family", "w:waterproof"],
    ["cat:camping", "cat:camping/tents", "tag:tent", "tag:tunnel",
     "w:tunnel", "w:tent", "w:three", "w:person"],
    ["cat:camping", "cat:camping/stoves", "tag:stove", "tag:canister",
     "w:canister", "w:fuel", "w:camping", "w:stove"],
    ["cat:camping", "cat:camping/stoves", "tag:stove", "tag:wood",
     "w:wood", "w:burning", "w:stove", "w:stove", "colour=green"],
    ["cat:kitchen", "cat:kitchen/pans", "tag:nonstick", "w:frying", "w:pan", "colour=green"],
    ["cat:kitchen", "cat:kitchen/pans", "tag:nonstick", "tag:lid", "w:sauce", "w:pan", "w:pan"],
    ["cat:camping", "cat:camping/tents", "tag:tent", "tag:waterproof", "tag:tunnel",
     "w:tunnel", "w:tent", "w:two", "w:person", "w:waterproof"],
]

# Dense vectors for some items (None: no vector), as another system might
# have computed from images.
VECTORS = [
    [0.9, 0.1, 0.0], [0.8, 0.3, 0.1], None, [0.1, 0.9, 0.2],
    [-0.2, 0.8, 0.4], [0.0, -0.1, 1.0], None, [0.85, 0.2, 0.05],
]

ALPHA = 0.5  # the content model's default VectorWeight


def main():
    vec = TfidfVectorizer(analyzer=lambda d: d)
    x = vec.fit_transform(DOCS)
    tok = cosine_similarity(x)
    vocab = vec.get_feature_names_out().tolist()
    idf = dict(zip(vocab, vec.idf_.tolist()))
    n = len(DOCS)
    vcos = [[None] * n for _ in range(n)]
    mixed = [[None] * n for _ in range(n)]
    for i in range(n):
        for j in range(n):
            t = float(tok[i, j])
            if VECTORS[i] is not None and VECTORS[j] is not None:
                c = float(cosine_similarity(numpy.array([VECTORS[i]]), numpy.array([VECTORS[j]]))[0, 0])
                vcos[i][j] = c
                mixed[i][j] = (1 - ALPHA) * t + ALPHA * max(c, 0.0)
            else:
                mixed[i][j] = t
    out = {
        "library": f"scikit-learn {sklearn.__version__}, numpy {numpy.__version__}",
        "docs": DOCS,
        "vectors": VECTORS,
        "vector_weight": ALPHA,
        "idf": idf,
        "tfidf_cosine": tok.tolist(),
        "vector_cosine": vcos,
        "similarity": mixed,
    }
    json.dump(out, sys.stdout, indent=1)
    sys.stdout.write("\n")


if __name__ == "__main__":
    main()
