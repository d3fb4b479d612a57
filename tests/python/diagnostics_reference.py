"""Live reference values for geofold's spatial diagnostics
(tests/diagnostics_reference.rs), computed at test time with the reference
libraries of the project's virtual environment (tests/python/requirements.txt).

Columbus (Anselin 1988; the copy shipped in libpysal, BSD-3): the polygons and
attributes are read from libpysal's own files, not from geofold's fixture, so
the check covers the fixture too.
- Queen and rook contiguity: libpysal.weights.Queen/Rook.from_shapefile.
- Moran's I of CRIME and of the OLS residuals of CRIME ~ 1 + INC + HOVAL
  (numpy lstsq), row-standardised and binary: esda.Moran (I, E[I], Var and z
  under normality and randomisation, two-sided p; 999 permutations seeded with
  np.random.seed(12345) for EI_sim and seI_sim).
- Residual Moran with regression moments: spreg.OLS(..., moran=True).moran_res.

Meuse (Pebesma & Bivand 2005; the copy in scikit-gstat 1.0.26, MIT; geofold's
fixture x, y, zinc): the Matheron semivariogram of log(zinc) with scipy's pdist
over bins (i*w, (i+1)*w], w = cutoff/15, cutoff = bbox diagonal/3, and the
spherical and exponential WLS fits (weights N/h^2, bounds >= 0) by
scipy.optimize.least_squares.

Usage: python diagnostics_reference.py MEUSE_TSV  -> JSON on stdout.
"""

import json
import sys
import warnings

import numpy as np

warnings.simplefilter("ignore")

import esda  # noqa: E402
import libpysal  # noqa: E402
import spreg  # noqa: E402
from scipy.optimize import least_squares  # noqa: E402
from scipy.spatial.distance import pdist  # noqa: E402


def neighbour_lists(w):
    return [sorted(int(j) for j in w.neighbors[i]) for i in range(w.n)]


def moran_record(values, w, transform):
    np.random.seed(12345)
    # esda applies its own `transformation` (default 'r') to w.
    m = esda.Moran(values, w, transformation=transform, permutations=999)
    return {
        "I": m.I,
        "EI": m.EI,
        "VI_norm": m.VI_norm,
        "z_norm": m.z_norm,
        "p_norm": m.p_norm,
        "VI_rand": m.VI_rand,
        "z_rand": m.z_rand,
        "p_rand": m.p_rand,
        "EI_sim": float(m.EI_sim),
        "seI_sim": float(m.seI_sim),
        "p_sim": float(m.p_sim),
        "S0": float(w.s0),
        "S1": float(w.s1),
        "S2": float(w.s2),
    }


def columbus():
    shp = libpysal.examples.get_path("columbus.shp")
    table = libpysal.io.open(shp.replace(".shp", ".dbf"))
    column = {name: table.header.index(name) for name in ("POLYID", "CRIME", "INC", "HOVAL")}
    rows = list(table)
    assert [int(r[column["POLYID"]]) for r in rows] == list(range(1, 50))
    crime = np.array([r[column["CRIME"]] for r in rows], dtype=float)
    design = np.column_stack(
        [
            np.ones(len(rows)),
            [r[column["INC"]] for r in rows],
            [r[column["HOVAL"]] for r in rows],
        ]
    ).astype(float)
    beta, *_ = np.linalg.lstsq(design, crime, rcond=None)
    residuals = crime - design @ beta
    out = {"residuals": residuals.tolist()}
    for name, builder in (("queen", libpysal.weights.Queen), ("rook", libpysal.weights.Rook)):
        w = builder.from_shapefile(shp)
        out[name] = {
            "neighbours": neighbour_lists(w),
            "r": {
                "crime": moran_record(crime, w, "r"),
                "residuals": moran_record(residuals, w, "r"),
            },
            "b": {
                "crime": moran_record(crime, w, "b"),
            },
        }
        w.transform = "r"
        ols = spreg.OLS(crime[:, None], design[:, 1:], w=w, spat_diag=True, moran=True)
        out[name]["moran_res"] = [float(v) for v in ols.moran_res]
    return out


def spherical(h, c0, c, a):
    r = np.minimum(h / a, 1.0)
    return c0 + c * (1.5 * r - 0.5 * r**3)


def exponential(h, c0, c, a):
    return c0 + c * (1.0 - np.exp(-h / a))


def meuse(path):
    data = np.loadtxt(path, skiprows=1)
    xy, z = data[:, :2], np.log(data[:, 2])
    diagonal = np.hypot(*(xy.max(axis=0) - xy.min(axis=0)))
    cutoff = diagonal / 3.0
    width = cutoff / 15.0
    d = pdist(xy)
    i, j = np.triu_indices(len(z), k=1)
    sq = (z[i] - z[j]) ** 2
    counts, distances, gammas = [], [], []
    for k in range(15):
        inside = (d > k * width) & (d <= (k + 1) * width)
        counts.append(int(inside.sum()))
        distances.append(float(d[inside].mean()))
        gammas.append(float(sq[inside].sum() / (2 * inside.sum())))
    h, g, n = np.array(distances), np.array(gammas), np.array(counts, dtype=float)
    sqrt_weight = np.sqrt(n / h**2)
    fits = {}
    for name, model, start in (
        ("spherical", spherical, [0.1, 0.5, 900.0]),
        ("exponential", exponential, [0.1, 0.5, 400.0]),
    ):
        result = least_squares(
            lambda p: sqrt_weight * (g - model(h, *p)),
            start,
            bounds=([0, 0, 1e-9], [np.inf, np.inf, np.inf]),
            xtol=1e-15,
            ftol=1e-15,
            gtol=1e-15,
        )
        fits[name] = [float(v) for v in result.x]
    return {
        "cutoff": float(cutoff),
        "width": float(width),
        "counts": counts,
        "distances": distances,
        "gammas": gammas,
        "fits": fits,
    }


def main():
    json.dump({"columbus": columbus(), "meuse": meuse(sys.argv[1])}, sys.stdout)


if __name__ == "__main__":
    main()
