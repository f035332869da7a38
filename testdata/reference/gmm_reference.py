#!/usr/bin/python3
"""Reference values for assort's Gaussian mixture tests (fit/mixture_*_test.go).

Run offline with Debian's python3-sklearn 1.2.1 (numpy 1.24.2, scipy 1.10.1):

    cd testdata && /usr/bin/python3 reference/gmm_reference.py

It writes faithful_gmm_reference.json and iris_gmm_reference.json next to the
data. The Go tests read those files; they never run Python.

Settings shared by every fit:
  * sklearn.mixture.GaussianMixture on the raw data (no scaling);
  * reg_covar = 1e-6 * mean of the features' population variances, which is
    assort's covariance floor for MixtureConfig.Reg = 0 (default 1e-6);
  * tol = 1e-12, max_iter = 100000, so each run is iterated to convergence;
  * every starting kind sklearn offers ('kmeans', 'k-means++', 'random',
    'random_from_data'), RUNS runs each with random_state 0..RUNS-1, n_init=1;
  * a run is marked spurious by assort's rule (fit/mixture_spurious.go):
    a component with N_k below d+1 (full), 2 (diag, spherical), 1 (tied), or
    smallest generalised eigenvalue of (Sigma_k, S + reg I) below 1e-4,
    S the data's covariance divided by n;
  * "best" is the highest total log-likelihood (score(X) * n) among the runs
    that are not spurious. Components are ordered by descending weight.
sklearn's 'tied' covariance is assort's "pooled".
"""
import json
import sys

import numpy as np
import scipy
import scipy.linalg as sl
import sklearn
from sklearn.mixture import GaussianMixture

RUNS = 50
INITS = ["kmeans", "k-means++", "random", "random_from_data"]


def load(path):
    return np.loadtxt(path, delimiter=",", skiprows=1)[:, 1:]


def full_covs(g, d):
    k = g.n_components
    c = g.covariances_
    if g.covariance_type == "full":
        return c
    if g.covariance_type == "diag":
        return np.array([np.diag(v) for v in c])
    if g.covariance_type == "spherical":
        return np.array([v * np.eye(d) for v in c])
    return np.array([c] * k)  # tied


def spurious(g, X, reg):
    n, d = X.shape
    need = {"full": d + 1, "diag": 2, "spherical": 2, "tied": 1}[g.covariance_type]
    nk = g.predict_proba(X).sum(axis=0)
    if nk.min() < need:
        return True
    S = np.cov(X.T, bias=True) + reg * np.eye(d)
    for C in full_covs(g, d):
        if sl.eigh(C, S, eigvals_only=True).min() < 1e-4:
            return True
    return False


def fit_all(X, k, cov, reg):
    n, d = X.shape
    runs = []
    for init in INITS:
        for seed in range(RUNS):
            g = GaussianMixture(k, covariance_type=cov, init_params=init, n_init=1,
                                tol=1e-12, max_iter=100000, reg_covar=reg,
                                random_state=seed).fit(X)
            runs.append((g.score(X) * n, init, seed, g))
    return runs


def describe(g, X):
    n, d = X.shape
    order = np.lexsort(tuple(g.means_.T[::-1]) + (-g.weights_,))
    covs = full_covs(g, d)
    return {
        "weights": g.weights_[order].tolist(),
        "means": g.means_[order].tolist(),
        "covs": covs[order].tolist(),
        "log_likelihood": float(g.score(X) * n),
        "n_parameters": int(g._n_parameters()),
        "bic": float(g.bic(X)),
        "aic": float(g.aic(X)),
        "labels": g.predict(X).tolist(),
        "order": order.tolist(),
    }


def matched_accuracy(labels, truth, k):
    import itertools
    best = 0
    for perm in itertools.permutations(range(k)):
        best = max(best, sum(1 for a, b in zip(labels, truth) if perm[a] == b))
    return best / len(truth)


def reference(X, k, covs, truth=None):
    n, d = X.shape
    reg = 1e-6 * X.var(axis=0).mean()
    out = {
        "library": "scikit-learn %s (Debian python3-sklearn), numpy %s, scipy %s, python %s"
        % (sklearn.__version__, np.__version__, scipy.__version__, sys.version.split()[0]),
        "script": "testdata/reference/gmm_reference.py",
        "settings": "GaussianMixture(n_components=%d, tol=1e-12, max_iter=100000, reg_covar=%r, n_init=1), "
        "init_params in %s, random_state 0..%d each; best non-spurious run" % (k, reg, INITS, RUNS - 1),
        "n": n, "d": d, "k": k, "reg_covar": reg,
        "fits": {},
    }
    for cov in covs:
        runs = fit_all(X, k, cov, reg)
        ok = [r for r in runs if not spurious(r[3], X, reg)]
        ok.sort(key=lambda r: -r[0])
        best = ok[0]
        desc = describe(best[3], X)
        desc["best_of"] = "%s random_state=%d" % (best[1], best[2])
        desc["spurious_runs"] = len(runs) - len(ok)
        optima = {}
        for r in ok:
            key = "%.4f" % r[0]
            optima.setdefault(key, {})
            optima[key][r[1]] = optima[key].get(r[1], 0) + 1
        desc["local_optima"] = optima
        if truth is not None:
            desc["matched_accuracy"] = matched_accuracy(best[3].predict(X), truth, k)
        del desc["labels"]
        del desc["order"]
        name = {"tied": "pooled"}.get(cov, cov)
        out["fits"][name] = desc
    return out


def main():
    faithful = load("faithful.csv")
    ref = reference(faithful, 2, ["full", "diag", "spherical", "tied"])
    ref["data"] = "faithful.csv: Old Faithful, Azzalini & Bowman (1990), see SOURCES.md"
    with open("faithful_gmm_reference.json", "w") as f:
        json.dump(ref, f, indent=1)
    iris = load("iris.csv")
    truth = np.loadtxt("iris_labels.csv", delimiter=",", skiprows=1, usecols=2).astype(int)
    ref = reference(iris, 3, ["full", "diag", "spherical", "tied"], truth)
    ref["data"] = "iris.csv: Fisher (1936) via Debian python3-sklearn 1.2.1, see SOURCES.md"
    with open("iris_gmm_reference.json", "w") as f:
        json.dump(ref, f, indent=1)


if __name__ == "__main__":
    main()
