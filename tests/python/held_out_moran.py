"""Live reference for the Moran's I geofold stores with each run's held-out
residuals (tests/inspect.rs): esda.Moran over libpysal.weights.KNN weights,
row-standardised, no permutations.

Input on stdin: one line per unit, "x<TAB>y<TAB>residual".
Usage: python held_out_moran.py K  -> JSON {"I", "EI", "z_norm", "z_rand"}.
"""

import json
import sys
import warnings

import numpy as np

warnings.simplefilter("ignore")

import esda  # noqa: E402
import libpysal  # noqa: E402


def main():
    k = int(sys.argv[1])
    rows = [line.split("\t") for line in sys.stdin.read().splitlines() if line]
    coords = np.array([[float(r[0]), float(r[1])] for r in rows])
    values = np.array([float(r[2]) for r in rows])
    w = libpysal.weights.KNN(coords, k=k)
    w.transform = "r"
    m = esda.Moran(values, w, permutations=0)
    json.dump(
        {"I": m.I, "EI": m.EI, "z_norm": m.z_norm, "z_rand": m.z_rand},
        sys.stdout,
    )


main()
