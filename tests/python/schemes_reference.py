"""Test-time references for the fold schemes (tests/schemes.rs).

Run with the project's own Python (scripts/python-env.sh); reads stdin,
writes stdout, one subcommand per call:

- refit: an independent least-squares refit per fold with numpy.linalg.lstsq
  on the training sets recorded by geofold (every unit not in the fold and
  not listed as excluded from it). stdin: a line `units`, then lines
  `unit_id|target|feature1|...`; a line `folds`, then `repetition|fold|unit_id`;
  a line `excluded`, then `repetition|fold|unit_id`. stdout:
  `repetition|unit_id|predicted` (repr, shortest round-trip decimal).
- wasserstein: scipy.stats.wasserstein_distance between two samples. stdin:
  a line `a`, numbers, a line `b`, numbers. stdout: the distance (repr).
- kmeans: checks a clustering against scikit-learn's Lloyd k-means. stdin:
  `x|y|label` lines. Starting from the means of geofold's clusters,
  sklearn.cluster.KMeans(init=means, n_init=1, algorithm="lloyd", tol=0) must
  keep every label (a fixed point of Lloyd's rule). stdout:
  `same_labels|geofold_inertia|sklearn_inertia`.
- mexico: the 32 Mexican states of libpysal's example `mexico`
  (mexicojoin.shp; Rey & Sastre Gutierrez 2010, shipped in the PyPI package
  libpysal 4.14.1, BSD-3-Clause), read with libpysal.io and shapely. stdout:
  `poly_id|inegi|pcgdp1940|pcgdp1960|pcgdp2000|wkt` lines, inegi (the INEGI
  region code, 1 to 5) as an integer.
"""

import sys

import numpy as np


def refit():
    section = None
    units, folds, excluded = {}, [], set()
    for line in sys.stdin.read().splitlines():
        if line in ("units", "folds", "excluded"):
            section = line
            continue
        if not line:
            continue
        fields = line.split("|")
        if section == "units":
            units[fields[0]] = (float(fields[1]), [float(v) for v in fields[2:]])
        elif section == "folds":
            folds.append((int(fields[0]), int(fields[1]), fields[2]))
        else:
            excluded.add((int(fields[0]), int(fields[1]), fields[2]))
    ids = sorted(units)
    position = {uid: i for i, uid in enumerate(ids)}
    target = np.array([units[u][0] for u in ids])
    design = np.column_stack([np.ones(len(ids)), np.array([units[u][1] for u in ids])])
    by_rep = {}
    for rep, fold, uid in folds:
        by_rep.setdefault(rep, {}).setdefault(fold, []).append(uid)
    out = []
    for rep in sorted(by_rep):
        fold_of = {uid: fold for fold, members in by_rep[rep].items() for uid in members}
        for fold, members in sorted(by_rep[rep].items()):
            train = [
                position[u]
                for u in ids
                if fold_of[u] != fold and (rep, fold, u) not in excluded
            ]
            beta, _, rank, _ = np.linalg.lstsq(design[train], target[train], rcond=None)
            if rank < design.shape[1]:
                sys.exit(f"repetition {rep} fold {fold}: rank-deficient training design")
            for u in members:
                out.append(f"{rep}|{u}|{float(design[position[u]] @ beta)!r}")
    print("\n".join(out))


def wasserstein():
    from scipy.stats import wasserstein_distance

    samples, section = {"a": [], "b": []}, None
    for line in sys.stdin.read().splitlines():
        if line in ("a", "b"):
            section = line
        elif line:
            samples[section].append(float(line))
    print(repr(float(wasserstein_distance(samples["a"], samples["b"]))))


def kmeans():
    from sklearn.cluster import KMeans

    rows = [line.split("|") for line in sys.stdin.read().splitlines() if line]
    points = np.array([[float(r[0]), float(r[1])] for r in rows])
    labels = np.array([int(r[2]) for r in rows])
    names = sorted(set(labels))
    centres = np.array([points[labels == name].mean(axis=0) for name in names])
    ours = float(sum(((points[labels == name] - centres[i]) ** 2).sum() for i, name in enumerate(names)))
    model = KMeans(n_clusters=len(names), init=centres, n_init=1, algorithm="lloyd", tol=0.0, max_iter=300)
    model.fit(points)
    mapped = np.array([names[label] for label in model.labels_])
    print(f"{bool((mapped == labels).all())}|{ours!r}|{float(model.inertia_)!r}")


def mexico():
    import warnings

    warnings.filterwarnings("ignore", category=FutureWarning)
    import libpysal
    from shapely.geometry import shape

    shapes = libpysal.io.open(libpysal.examples.get_path("mexicojoin.shp"))
    table = libpysal.io.open(libpysal.examples.get_path("mexicojoin.dbf"))
    header = table.header
    for polygon, record in zip(shapes, table):
        row = dict(zip(header, record))
        geometry = shape(polygon.__geo_interface__)
        print(
            f"{row['POLY_ID']}|{int(row['INEGI'])}|{row['PCGDP1940']!r}|{row['PCGDP1960']!r}|"
            f"{row['PCGDP2000']!r}|{geometry.wkt}"
        )


if __name__ == "__main__":
    {"refit": refit, "wasserstein": wasserstein, "kmeans": kmeans, "mexico": mexico}[sys.argv[1]]()
