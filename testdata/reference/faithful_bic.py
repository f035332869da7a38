# BIC of Gaussian mixtures (full covariance) with k = 1..6 on the Old Faithful
# data. Run offline with Debian's python3-sklearn:
#   /usr/bin/python3 faithful_bic.py > ../faithful_bic.txt
import csv, os, numpy as np, sklearn
from sklearn.mixture import GaussianMixture

here = os.path.dirname(os.path.abspath(__file__))
X = np.array([[float(v) for v in r[1:]] for r in list(csv.reader(open(os.path.join(here, "..", "faithful.csv"))))[1:]])
print("# library: scikit-learn %s, numpy %s" % (sklearn.__version__, np.__version__))
print("# settings: GaussianMixture(n_components=k, covariance_type='full', n_init=20, tol=1e-8, max_iter=2000, reg_covar=1e-6, random_state=0) on raw eruptions, waiting")
best = None
for k in range(1, 7):
    g = GaussianMixture(n_components=k, covariance_type="full", n_init=20, tol=1e-8, max_iter=2000, reg_covar=1e-6, random_state=0).fit(X)
    b = g.bic(X)
    print("bic_k%d %.6f" % (k, b))
    if best is None or b < best[1]:
        best = (k, b)
print("chosen_k %d" % best[0])
