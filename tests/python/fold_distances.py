"""Live reference for the fold_distances rows geofold stores with each run
(tests/inspect.rs): for every unit, the distance to the nearest unit of
another fold (scipy.spatial.cKDTree over that fold's complement), then
numpy.quantile (its default, linear interpolation) and numpy.mean per fold
and over all units.

Input on stdin: one line per unit, "x<TAB>y<TAB>fold".
Output: JSON {"all": [min, p10, p25, median, p75, p90, max, mean],
              "<fold>": [...], ...}.
"""

import json
import sys

import numpy as np
from scipy.spatial import cKDTree

PROBABILITIES = [0.0, 0.1, 0.25, 0.5, 0.75, 0.9, 1.0]


def summary(d):
    return [float(v) for v in np.quantile(d, PROBABILITIES)] + [float(np.mean(d))]


def main():
    rows = [line.split("\t") for line in sys.stdin.read().splitlines() if line]
    xy = np.array([[float(r[0]), float(r[1])] for r in rows])
    fold = np.array([int(r[2]) for r in rows])
    distance = np.empty(len(rows))
    for f in np.unique(fold):
        test = fold == f
        tree = cKDTree(xy[~test])
        distance[test] = tree.query(xy[test], k=1)[0]
    out = {"all": summary(distance)}
    for f in np.unique(fold):
        out[str(int(f))] = summary(distance[fold == f])
    json.dump(out, sys.stdout)


main()
