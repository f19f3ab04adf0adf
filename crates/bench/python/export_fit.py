"""Export and fit in Python, the way a notebook would: read every needed column of the
benchmark table out of DuckDB into pandas (the DuckDB Python package), then fit the method with
statsmodels (OLS with HC1 errors, Logit by maximum likelihood) and numpy.

Run by upshot-bench as a child process; prints one JSON object with the time, the process's
peak resident memory and the overall estimate. The formulas are upshot's (docs/methods.md):
the same folds (the arithmetic hash of upshot_sql::fold_of), propensity clip 0.01, and segment
combination, so the estimate is comparable with upshot's.

With `--postgres LOCATOR --table T` the rows come out of PostgreSQL instead, the way users do it
today: `COPY (SELECT ...) TO STDOUT` through psql, read by pandas.

Usage: export_fit.py (--db FILE | --postgres LOCATOR --table T) --methods METHOD --p 8|32 --segments off|on
"""

import argparse
import io
import json
import resource
import subprocess
import time

import duckdb
import numpy as np
import pandas as pd
import statsmodels.api as sm

ZONES = ["Northgate", "Riverside", "Old Town", "Hillcrest", "Harbour", "Eastfield"]
FOLDS = 5
CLIP = 0.01
P = 2_147_483_647


def fold_of(key):
    """upshot_sql::fold_of, vectorised (int64 arithmetic stays below 2**63)."""
    a = ((key % P) + P) % P
    h1 = (a * 48_271 + 11) % P
    h2 = (h1 * h1) % P
    h3 = (h2 * 16_807 + h1) % P
    return h3 % FOLDS


def design(df, numeric):
    x = df[numeric].astype(float)
    for z in ZONES[1:]:
        x["zone_" + z] = (df["zone"] == z).astype(float)
    return sm.add_constant(x, has_constant="add")


def stratify(g):
    cells = g.groupby(["prior_orders", "zone", "voucher"])["spend_30d"].agg(["count", "sum", "var"])
    cells = cells.unstack("voucher")
    kept = cells.dropna(subset=[("count", 0), ("count", 1)])
    n1, n0 = kept[("count", 1)], kept[("count", 0)]
    tau_s = kept[("sum", 1)] / n1 - kept[("sum", 0)] / n0
    w = (n1 + n0) / (n1 + n0).sum()
    tau = float((w * tau_s).sum())
    pooled = {}
    for arm in (0, 1):
        ok = kept[("count", arm)] >= 2
        pooled[arm] = float((kept[("var", arm)][ok] * (kept[("count", arm)][ok] - 1)).sum()
                            / (kept[("count", arm)][ok] - 1).sum())
    v1 = kept[("var", 1)].where(n1 >= 2, pooled[1])
    v0 = kept[("var", 0)].where(n0 >= 2, pooled[0])
    n = float((n1 + n0).sum())
    var = float((w**2 * (v1 / n1 + v0 / n0)).sum() + (w * (tau_s - tau) ** 2).sum() / n)
    return n, tau, var**0.5


def regress(g, numeric):
    x = design(g, numeric)
    t = g["voucher"].to_numpy() == 1
    f1 = sm.OLS(g["spend_30d"][t], x[t]).fit(cov_type="HC1")
    f0 = sm.OLS(g["spend_30d"][~t], x[~t]).fit(cov_type="HC1")
    xbar = x.mean().to_numpy()
    d = f1.params.to_numpy() - f0.params.to_numpy()
    sx = np.cov(x.to_numpy(), rowvar=False, bias=True)
    var = xbar @ (f1.cov_params().to_numpy() + f0.cov_params().to_numpy()) @ xbar + d @ sx @ d / len(g)
    return len(g), float(d @ xbar), float(var**0.5)


def propensity(x, t):
    fit = sm.Logit(t, x).fit(disp=0, method="newton", maxiter=50, tol=1e-10)
    return fit.params


def weight(g, numeric):
    x = design(g, numeric)
    t = g["voucher"].to_numpy().astype(float)
    y = g["spend_30d"].to_numpy()
    e = np.clip(1 / (1 + np.exp(-(x.to_numpy() @ propensity(x, t).to_numpy()))), CLIP, 1 - CLIP)
    w1, w0 = t / e, (1 - t) / (1 - e)
    m1, m0 = (w1 * y).sum() / w1.sum(), (w0 * y).sum() / w0.sum()
    psi = w1 * (y - m1) / w1.mean() - w0 * (y - m0) / w0.mean()
    return len(g), float(m1 - m0), float(np.sqrt((psi**2).mean() / len(g)))


def doubly_robust(g, numeric):
    x = design(g, numeric)
    xn = x.to_numpy()
    t = g["voucher"].to_numpy().astype(float)
    y = g["spend_30d"].to_numpy()
    folds = g["fold"].to_numpy()
    scores = np.empty(len(g))
    for k in range(FOLDS):
        tr, te = folds != k, folds == k
        gamma = propensity(x[tr], t[tr]).to_numpy()
        a1, a0 = tr & (t == 1), tr & (t == 0)
        b1 = sm.OLS(y[a1], xn[a1]).fit().params
        b0 = sm.OLS(y[a0], xn[a0]).fit().params
        e = np.clip(1 / (1 + np.exp(-(xn[te] @ gamma))), CLIP, 1 - CLIP)
        m1, m0 = xn[te] @ b1, xn[te] @ b0
        scores[te] = m1 - m0 + t[te] * (y[te] - m1) / e - (1 - t[te]) * (y[te] - m0) / (1 - e)
    return len(g), float(scores.mean()), float(scores.std() / np.sqrt(len(g)))


def partial_out_residuals(g, numeric):
    x = design(g, numeric).to_numpy()
    t = g["voucher"].to_numpy().astype(float)
    y = g["spend_30d"].to_numpy()
    folds = g["fold"].to_numpy()
    rt, ry = np.empty(len(g)), np.empty(len(g))
    for k in range(FOLDS):
        tr, te = folds != k, folds == k
        rt[te] = t[te] - x[te] @ sm.OLS(t[tr], x[tr]).fit().params
        ry[te] = y[te] - x[te] @ sm.OLS(y[tr], x[tr]).fit().params
    return rt, ry


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--db")
    ap.add_argument("--postgres")
    ap.add_argument("--table", default="customers")
    ap.add_argument("--methods", required=True)
    ap.add_argument("--p", type=int, default=8)
    ap.add_argument("--segments", default="off")
    a = ap.parse_args()
    start = time.perf_counter()
    numeric = ["household_size", "prior_orders", "mail_wave"]
    if a.p > 8:
        numeric += ["x%02d" % (k + 1) for k in range(24)]
    query = "SELECT customer_id, region, zone, voucher, spend_30d, " + ", ".join(numeric) + " FROM " + a.table
    if a.postgres:
        out = subprocess.run(["psql", a.postgres, "-q", "-v", "ON_ERROR_STOP=1", "-c",
                              f"\\copy ({query}) TO STDOUT WITH (FORMAT csv, HEADER true)"],
                             check=True, capture_output=True).stdout
        df = pd.read_csv(io.BytesIO(out))
    else:
        con = duckdb.connect(a.db, read_only=True)
        df = con.execute(query).df()
    df["fold"] = fold_of(df["customer_id"].to_numpy().astype(np.int64))
    groups = [g for _, g in df.groupby("region")] if a.segments == "on" else [df]
    m = a.methods
    if m == "partial-out":
        parts = [partial_out_residuals(g, numeric) for g in groups]
        rt = np.concatenate([p[0] for p in parts])
        ry = np.concatenate([p[1] for p in parts])
        # Residual on residual: OLS through the origin with HC0 errors.
        fit = sm.OLS(ry, rt).fit(cov_type="HC0")
        est, se = float(fit.params[0]), float(fit.bse[0])
    else:
        f = {"stratify": lambda g: stratify(g), "regress": lambda g: regress(g, numeric),
             "weight": lambda g: weight(g, numeric), "doubly-robust": lambda g: doubly_robust(g, numeric)}[m]
        res = [f(g) for g in groups]
        n = sum(r[0] for r in res)
        est = sum(r[0] / n * r[1] for r in res)
        var = sum((r[0] / n) ** 2 * r[2] ** 2 + r[0] / n * (r[1] - est) ** 2 / n for r in res)
        se = var**0.5
    seconds = time.perf_counter() - start
    rss_kb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    print(json.dumps({"seconds": seconds, "peak_rss_kb": rss_kb, "estimate": est, "std_error": se}))


if __name__ == "__main__":
    main()
