"""A model fitted outside geofold, fold by fold, as an analyst would (the
README's worked example; tests/score.rs runs it).

    fit_folds_elsewhere.py gpkg FILE RUN_ID LAYER TARGET FEATURES MODEL
        reads the folds of run RUN_ID (fold_members, fold_exclusions) and the
        source layer LAYER from the GeoPackage FILE with Python's sqlite3, fits
        every fold and writes the held-out predictions into the table
        my_predictions of FILE.
    fit_folds_elsewhere.py csv UNITS.csv EXCLUSIONS.csv OUT.csv TARGET FEATURES MODEL
        the same from CSV files exported from PostGIS (UNITS: unit_id,
        repetition, fold, the target and the features; EXCLUSIONS: repetition,
        fold, unit_id), writing OUT.csv (unit_id, repetition, fold, predicted).

MODEL is ols (numpy least squares) or logistic (statsmodels Logit).
"""
import csv
import sqlite3
import sys

import numpy as np
import statsmodels.api as sm


def fit_and_predict(model, x_train, y_train, x_test):
    design = sm.add_constant(x_train, has_constant="add")
    held_out = sm.add_constant(x_test, has_constant="add")
    if model == "logistic":
        return sm.Logit(y_train, design).fit(disp=0).predict(held_out)
    beta, *_ = np.linalg.lstsq(design, y_train, rcond=None)
    return held_out @ beta


def predict_folds(rows, excluded, model):
    """rows: (unit_id, repetition, fold, target, *features); excluded: a set of
    (repetition, fold, unit_id). Returns (unit_id, repetition, fold, predicted)."""
    unit = np.array([r[0] for r in rows], dtype=object)
    repetition = np.array([r[1] for r in rows])
    fold = np.array([r[2] for r in rows])
    y = np.array([r[3] for r in rows], dtype=float)
    x = np.array([r[4:] for r in rows], dtype=float)
    out = []
    for r in np.unique(repetition):
        this = repetition == r
        for f in np.unique(fold[this]):
            test = this & (fold == f)
            left_out = np.array([(int(r), int(f), u) in excluded for u in unit])
            train = this & ~test & ~left_out
            predicted = fit_and_predict(model, x[train], y[train], x[test])
            out += zip(unit[test], repetition[test].tolist(), fold[test].tolist(), np.asarray(predicted).tolist())
    return out


def from_geopackage(path, run, layer, target, features, model):
    con = sqlite3.connect(path)
    columns = ", ".join(f'u."{c}"' for c in [target] + features)
    rows = con.execute(
        f"""SELECT f.unit_id, f.repetition, f.fold, {columns}
            FROM fold_members f JOIN "{layer}" u ON u.id = CAST(f.unit_id AS INTEGER)
            WHERE f.run_id = ? ORDER BY f.repetition, f.fold""",
        (run,),
    ).fetchall()
    excluded = set(
        con.execute("SELECT repetition, fold, unit_id FROM fold_exclusions WHERE run_id = ?", (run,)).fetchall()
    )
    out = predict_folds(rows, excluded, model)
    con.execute("DROP TABLE IF EXISTS my_predictions")
    con.execute("CREATE TABLE my_predictions (unit_id TEXT, repetition INTEGER, fold INTEGER, predicted REAL)")
    con.executemany("INSERT INTO my_predictions VALUES (?, ?, ?, ?)", out)
    con.commit()
    return len(out)


def from_csv(units, exclusions, out_path, target, features, model):
    with open(units) as f:
        rows = [
            (r["unit_id"], int(r["repetition"]), int(r["fold"]), float(r[target]), *(float(r[c]) for c in features))
            for r in csv.DictReader(f)
        ]
    with open(exclusions) as f:
        excluded = {(int(r["repetition"]), int(r["fold"]), r["unit_id"]) for r in csv.DictReader(f)}
    out = predict_folds(rows, excluded, model)
    with open(out_path, "w", newline="") as f:
        writer = csv.writer(f)
        writer.writerow(["unit_id", "repetition", "fold", "predicted"])
        writer.writerows((u, r, f, repr(float(p))) for u, r, f, p in out)
    return len(out)


if __name__ == "__main__":
    mode, *args = sys.argv[1:]
    target, features, model = args[3], args[4].split(","), args[5]
    if mode == "gpkg":
        print(from_geopackage(args[0], args[1], args[2], target, features, model))
    else:
        print(from_csv(args[0], args[1], args[2], target, features, model))
