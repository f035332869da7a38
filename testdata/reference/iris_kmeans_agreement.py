# Agreement of the k-means optimum on Fisher's Iris data with the species.
# Run offline with Debian's python3-sklearn: /usr/bin/python3 iris_kmeans_agreement.py
# Output is recorded in ../iris_kmeans_agreement.txt.
import csv, os, numpy as np, sklearn, scipy
from sklearn.cluster import KMeans
from sklearn.metrics import adjusted_rand_score, normalized_mutual_info_score, confusion_matrix
from scipy.optimize import linear_sum_assignment

here = os.path.dirname(os.path.abspath(__file__))
X = np.array([[float(v) for v in r[1:]] for r in list(csv.reader(open(os.path.join(here, "..", "iris.csv"))))[1:]])
y = np.array([int(r[2]) for r in list(csv.reader(open(os.path.join(here, "..", "iris_labels.csv"))))[1:]])
km = KMeans(n_clusters=3, n_init=100, random_state=0).fit(X)
cm = confusion_matrix(y, km.labels_)
r, c = linear_sum_assignment(-cm)
print("# library: scikit-learn %s, numpy %s, scipy %s" % (sklearn.__version__, np.__version__, scipy.__version__))
print("# settings: KMeans(n_clusters=3, n_init=100, random_state=0) on the raw four measurements;")
print("# matched accuracy by scipy.optimize.linear_sum_assignment on the confusion matrix;")
print("# adjusted_rand_score, normalized_mutual_info_score (arithmetic normalisation) against species")
print("inertia %.10f" % km.inertia_)
print("matched_accuracy %.10f" % (cm[r, c].sum() / len(y)))
print("ari %.10f" % adjusted_rand_score(y, km.labels_))
print("nmi %.10f" % normalized_mutual_info_score(y, km.labels_))
