#!/usr/bin/python3
# Computes the references for fit's external checks on Fisher's iris data
# (testdata/iris.csv, the four raw features): k-means with K = 3 and the
# standard and robust feature scalings. Prints
# testdata/iris_kmeans_reference.txt on standard output.
#
# Run offline from the repository root with Debian's python3-sklearn 1.2.1:
#   /usr/bin/python3 testdata/iris_kmeans_reference.py > testdata/iris_kmeans_reference.txt
import sys

import numpy as np
import sklearn
from sklearn.cluster import KMeans
from sklearn.preprocessing import RobustScaler, StandardScaler

data = np.loadtxt("testdata/iris.csv", delimiter=",", skiprows=1)
x = data[:, 1:5]

best = KMeans(n_clusters=3, n_init=100, random_state=0).fit(x)
labels = best.labels_
sizes = np.bincount(labels, minlength=3)
order = sorted(range(3), key=lambda j: (-sizes[j], tuple(best.cluster_centers_[j])))

# Inertia recomputed directly as sum of (x - c)^2 over rows, in float64,
# against the means of the final partition (the fixed point of Lloyd's method).
centers = np.array([x[labels == j].mean(axis=0) for j in range(3)])
direct = float(((x - centers[labels]) ** 2).sum())

# Every distinct local optimum reached from 1000 single seedings, to show the
# near-tied one the check must reject.
optima = {}
for seed in range(1000):
    km = KMeans(n_clusters=3, n_init=1, random_state=seed).fit(x)
    key = round(km.inertia_, 6)
    if key not in optima:
        sizes_s = sorted(np.bincount(km.labels_, minlength=3), reverse=True)
        optima[key] = [0, km.inertia_, sizes_s, km.cluster_centers_]
    optima[key][0] += 1

print("# k-means reference for testdata/iris.csv (raw sepal_length, sepal_width, petal_length, petal_width)")
print("# library: scikit-learn %s (Debian python3-sklearn), numpy %s, python %s" % (
    sklearn.__version__, np.__version__, sys.version.split()[0]))
print("# settings: KMeans(n_clusters=3, n_init=100, random_state=0), defaults otherwise (lloyd, tol=1e-4, max_iter=300)")
print("# script: testdata/iris_kmeans_reference.py")
print("inertia_sklearn %.10f" % best.inertia_)
print("inertia_direct %.10f" % direct)
print("sizes %s" % " ".join(str(sizes[j]) for j in order))
for j in order:
    print("center %s" % " ".join("%.10f" % v for v in best.cluster_centers_[j]))
print("# local optima from KMeans(n_clusters=3, n_init=1, random_state=s), s = 0..999:")
print("# optimum <inertia> <runs reaching it> <sizes, descending>, then its centres in sklearn's order")
for key in sorted(optima):
    count, inertia, sizes_s, centers_s = optima[key]
    print("optimum %.10f %d %s" % (inertia, count, " ".join(str(v) for v in sizes_s)))
    for c in centers_s:
        print("optimum_center %s" % " ".join("%.10f" % v for v in c))

# Feature scaling of the same four columns.
std = StandardScaler().fit(x)
rob = RobustScaler().fit(x)
print("# StandardScaler() (mean, population standard deviation) and RobustScaler() (median, 25-75 interquartile range, numpy percentile, linear)")
print("standard_center %s" % " ".join("%.15g" % v for v in std.mean_))
print("standard_spread %s" % " ".join("%.15g" % v for v in std.scale_))
print("robust_center %s" % " ".join("%.15g" % v for v in rob.center_))
print("robust_spread %s" % " ".join("%.15g" % v for v in rob.scale_))
