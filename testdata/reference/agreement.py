#!/usr/bin/python3
# Reference numbers for fit's agreement, silhouette and assignment checks
# (fit/agreement_test.go, fit/silhouette_test.go, fit/hungarian_test.go).
# Prints testdata/agreement_reference.json on standard output.
#
# Run offline from the repository root with Debian's python3-sklearn 1.2.1
# (and the numpy/scipy it depends on):
#   /usr/bin/python3 testdata/reference/agreement.py > testdata/agreement_reference.json
#
# Settings: sklearn.metrics.adjusted_rand_score and
# normalized_mutual_info_score with their defaults (NMI normalised by the
# arithmetic mean of the two entropies); sklearn.metrics.silhouette_score
# with metric="euclidean" and sample_size=None (every row, exact);
# scipy.optimize.linear_sum_assignment for assignment totals and for the
# matched accuracy (maximising matched counts). Labellings are generated
# here with fixed numpy seeds and written out in full, so the Go tests need
# no random generator in common with numpy.
import json
import platform
import re
import sys

import numpy as np
import scipy
import sklearn
from scipy.optimize import linear_sum_assignment
from sklearn.metrics import (adjusted_rand_score, normalized_mutual_info_score,
                             silhouette_score)
from sklearn.metrics.cluster import contingency_matrix


def load(path, cols):
    return np.loadtxt(path, delimiter=",", skiprows=1, usecols=cols)


iris = load("testdata/iris.csv", (1, 2, 3, 4))
species = load("testdata/iris_labels.csv", (2,)).astype(int)
faithful = load("testdata/faithful.csv", (1, 2))

# A crude partition of the irises by petal length alone (cm).
petal = np.where(iris[:, 2] < 2.5, 0, np.where(iris[:, 2] < 4.8, 1, 2))
# Old Faithful split at an eruption time of 3 minutes.
faithful_split = (faithful[:, 0] > 3).astype(int)

rng = np.random.default_rng(20240601)
rand_a = rng.integers(0, 4, size=200)
rand_b = rng.integers(0, 6, size=200)
# b correlated with a: keep a's group for 70% of the rows, else random.
noisy = np.where(rng.random(200) < 0.7, rand_a, rng.integers(0, 4, size=200))
# A refinement: split each group of a in two at random.
refine = rand_a * 2 + rng.integers(0, 2, size=200)

pairs = [
    ("six rows", [0, 0, 0, 1, 1, 1], [0, 0, 1, 1, 2, 2]),
    ("one group against three", [0, 0, 0, 0, 0, 0], [0, 0, 1, 1, 2, 2]),
    ("permuted names", [0, 0, 1, 1, 2, 2, 2], [2, 2, 0, 0, 1, 1, 1]),
    ("iris species vs petal length cut", species.tolist(), petal.tolist()),
    ("random 4 vs random 6 groups", rand_a.tolist(), rand_b.tolist()),
    ("random 4 vs noisy copy", rand_a.tolist(), noisy.tolist()),
    ("random 4 vs its refinement", rand_a.tolist(), refine.tolist()),
]

agreement = []
for name, a, b in pairs:
    a, b = np.asarray(a), np.asarray(b)
    table = contingency_matrix(a, b)  # rows: codes present in a, sorted
    r, c = linear_sum_assignment(table, maximize=True)
    agreement.append({
        "name": name,
        "a": a.tolist(),
        "b": b.tolist(),
        "ari": float(adjusted_rand_score(a, b)),
        "nmi": float(normalized_mutual_info_score(a, b)),
        "matched_accuracy": float(table[r, c].sum() / len(a)),
    })


def direct_silhouette(x, labels):
    # Plain definition with distances computed as sqrt(sum (x - y)^2), to
    # show that sklearn's dot-product distances change nothing that matters.
    dist = np.sqrt(((x[:, None, :] - x[None, :, :]) ** 2).sum(axis=2))
    ks = np.unique(labels)
    s = np.zeros(len(x))
    for i in range(len(x)):
        own = labels[i]
        size = (labels == own).sum()
        if size < 2:
            continue
        a = dist[i, labels == own].sum() / (size - 1)
        b = min(dist[i, labels == k].mean() for k in ks if k != own)
        s[i] = 0.0 if max(a, b) == 0 else (b - a) / max(a, b)
    return float(s.mean())


silhouette = []
for name, x, labels in [
    ("iris species", iris, species),
    ("iris petal length cut", iris, petal),
    ("faithful eruptions above 3 min", faithful, faithful_split),
]:
    silhouette.append({
        "name": name,
        "labels": labels.tolist(),
        "sklearn": float(silhouette_score(x, labels, metric="euclidean")),
        "direct": direct_silhouette(x, labels),
    })

assignment = []
for seed, (r, c) in [(1, (30, 30)), (2, (12, 40)), (3, (40, 12)), (4, (60, 60))]:
    g = np.random.default_rng(seed)
    # Integers make ties likely, which exercises tie handling.
    cost = g.integers(0, 50, size=(r, c)).astype(float)
    ri, ci = linear_sum_assignment(cost)
    assignment.append({
        "name": f"{r}x{c} integer costs, numpy seed {seed}",
        "rows": r,
        "cols": c,
        "cost": cost.ravel().tolist(),
        "total": float(cost[ri, ci].sum()),
    })

text = json.dumps({
    "generated_by": "testdata/reference/agreement.py",
    "python": platform.python_version(),
    "sklearn": sklearn.__version__,
    "scipy": scipy.__version__,
    "numpy": np.__version__,
    "agreement": agreement,
    "silhouette": silhouette,
    "assignment": assignment,
}, indent=1)
# Keep each list of numbers on one line.
text = re.sub(r"\[\s+([^\[\]{}]*?)\s+\]",
              lambda m: "[" + " ".join(m.group(1).split()) + "]", text)
sys.stdout.write(text + "\n")
