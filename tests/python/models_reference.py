"""Reference computations for tests/models.rs and tests/score.rs, run with
the project's own Python environment (scripts/python-env.sh). Reads one JSON
document on stdin, writes one on stdout.

    models_reference.py folds    per-fold fits with statsmodels (logistic: Logit,
                                 Newton; poisson: GLM Poisson with log(exposure)
                                 offset, IRLS) or scikit-learn (ridge: Ridge on
                                 features standardised with the training fold's
                                 mean and population SD); coefficients on the
                                 original scale and held-out predictions
    models_reference.py neighbours  IDW and kNN by brute force with scipy's
                                 cKDTree over each fold's training points
    models_reference.py scores   scikit-learn metrics of observed/predicted pairs
    models_reference.py spector  the Spector & Mazzeo (1980) data as shipped in
                                 statsmodels.datasets.spector
"""
import json
import sys

import numpy as np


def folds(doc):
    import statsmodels.api as sm
    from sklearn.linear_model import Ridge

    x = np.asarray(doc["features"], dtype=float)
    y = np.asarray(doc["target"], dtype=float)
    fold = np.asarray(doc["fold"])
    exposure = doc.get("exposure")
    out = {}
    for f in sorted(set(fold.tolist())):
        train, test = fold != f, fold == f
        if doc["model"] == "ridge":
            mean = x[train].mean(axis=0)
            sd = x[train].std(axis=0)  # population SD (ddof 0)
            z = (x - mean) / sd
            fit = Ridge(alpha=doc["penalty"], fit_intercept=True, solver="cholesky").fit(z[train], y[train])
            slopes = fit.coef_ / sd
            coefficients = [float(fit.intercept_ - slopes @ mean)] + slopes.tolist()
            predicted = fit.predict(z[test])
        else:
            design = sm.add_constant(x, has_constant="add")
            if doc["model"] == "logistic":
                fit = sm.Logit(y[train], design[train]).fit(method="newton", tol=1e-14, maxiter=200, disp=0)
                predicted = fit.predict(design[test])
            else:
                offset = np.log(np.asarray(exposure, dtype=float)) if exposure else np.zeros(len(y))
                fit = sm.GLM(y[train], design[train], family=sm.families.Poisson(), offset=offset[train]).fit(
                    tol=1e-14, maxiter=200
                )
                predicted = fit.predict(design[test], offset=offset[test])
            coefficients = np.asarray(fit.params).tolist()
        out[str(f)] = {
            "coefficients": coefficients,
            "units": np.flatnonzero(test).tolist(),
            "predicted": np.asarray(predicted).tolist(),
        }
    return out


def neighbours(doc):
    from scipy.spatial import cKDTree

    points = np.asarray(doc["points"], dtype=float)
    y = np.asarray(doc["target"], dtype=float)
    fold = np.asarray(doc["fold"])
    k, power = doc["k"], doc.get("power")
    predicted = np.full(len(y), np.nan)
    for f in set(fold.tolist()):
        train, test = np.flatnonzero(fold != f), np.flatnonzero(fold == f)
        tree = cKDTree(points[train])
        distance, index = tree.query(points[test], k=min(k, len(train)))
        distance, index = distance.reshape(len(test), -1), index.reshape(len(test), -1)
        values = y[train][index]
        if power is None:
            predicted[test] = values.mean(axis=1)
        else:
            weights = 1.0 / distance**power
            predicted[test] = (weights * values).sum(axis=1) / weights.sum(axis=1)
    return {"predicted": predicted.tolist()}


def scores(doc):
    from sklearn import metrics

    y = np.asarray(doc["observed"], dtype=float)
    p = np.asarray(doc["predicted"], dtype=float)
    if doc["family"] == "binary":
        clipped = np.clip(p, 1e-15, 1 - 1e-15)
        return {
            "log_loss": metrics.log_loss(y, clipped, labels=[0, 1]),
            "brier": metrics.brier_score_loss(y, p),
            "roc_auc": metrics.roc_auc_score(y, p),
            "accuracy": metrics.accuracy_score(y, (p >= 0.5).astype(float)),
        }
    if doc["family"] == "count":
        return {
            "poisson_deviance": metrics.mean_poisson_deviance(y, np.maximum(p, 1e-15)),
            "rmse": float(np.sqrt(metrics.mean_squared_error(y, p))),
        }
    return {
        "rmse": float(np.sqrt(metrics.mean_squared_error(y, p))),
        "mae": metrics.mean_absolute_error(y, p),
        "bias": float(np.mean(p - y)),
        "r2": metrics.r2_score(y, p),
    }


def spector(_doc):
    import statsmodels.api as sm

    data = sm.datasets.spector.load_pandas().data
    return {c: data[c].astype(float).tolist() for c in ["GPA", "TUCE", "PSI", "GRADE"]}


if __name__ == "__main__":
    command = {"folds": folds, "neighbours": neighbours, "scores": scores, "spector": spector}[sys.argv[1]]
    document = json.loads(sys.stdin.read() or "{}")
    json.dump(command(document), sys.stdout)
